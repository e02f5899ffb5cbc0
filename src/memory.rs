//! Memory handed back to the system between a run's phases.
//!
//! glibc's allocator keeps freed memory in the arena of the thread that
//! freed it, and an allocation on another thread (pass 2 writes on a
//! writer thread and scores on the rayon pool) cannot reuse it: the fit's
//! and the summary's freed tables would stay resident beside pass 2's
//! buffers. Trimming every arena at the phase boundary releases them.

/// Returns free memory of every allocator arena to the system, where the
/// allocator keeps it (glibc); elsewhere nothing to do.
pub fn release_free_memory() {
    #[cfg(all(target_os = "linux", target_env = "gnu"))]
    // SAFETY: malloc_trim takes no pointers and only releases memory the allocator holds free.
    unsafe {
        libc::malloc_trim(0);
    }
}
