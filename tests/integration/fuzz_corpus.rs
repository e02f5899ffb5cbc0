//! Replays the fuzzing seeds and every input the fuzzer found a fault with
//! (`fuzz/regressions/`) through the same harness as the fuzz target, so a
//! fixed finding stays fixed. CI runs this, not the fuzzer.
//!
//! `RATEPOOL_FUZZ_CORPUS=FOLDER` adds a whole fuzz corpus to the replay. Run
//! it in a release build too (`cargo test --release --test integration fuzz`):
//! the fuzzer builds in the dev profile, whose debug assertions (arrow-rs's
//! and the standard library's) can stop on damaged pages that a release
//! build decodes short.

#[path = "../../fuzz/harness.rs"]
mod harness;

use std::path::{Path, PathBuf};

/// The files of `folder`, in name order.
fn inputs(folder: &Path) -> Vec<PathBuf> {
    let mut files: Vec<_> = std::fs::read_dir(folder).unwrap().map(|e| e.unwrap().path()).collect();
    files.sort();
    files.retain(|f| !f.ends_with(".keep"));
    files
}

#[test]
fn the_fuzz_seeds_and_regressions_keep_the_contract() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("fuzz");
    let mut folders = vec![root.join("seeds"), root.join("regressions")];
    let kept = folders.iter().map(|f| inputs(f).len()).sum::<usize>();
    assert!(kept >= 5, "the seeds are missing");
    folders.extend(std::env::var_os("RATEPOOL_FUZZ_CORPUS").map(PathBuf::from));
    for file in folders.iter().flat_map(|f| inputs(f)) {
        let data = std::fs::read(&file).unwrap();
        let outcome = std::panic::catch_unwind(|| harness::exercise(&data));
        assert!(outcome.is_ok(), "{} broke the contract", file.display());
    }
}
