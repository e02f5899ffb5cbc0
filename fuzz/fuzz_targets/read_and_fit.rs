//! Fuzz target over the input readers and the fit (see `fuzz/harness.rs`).

#![no_main]

use libfuzzer_sys::fuzz_target;

#[path = "../harness.rs"]
mod harness;

fuzz_target!(|data: &[u8]| harness::exercise(data));
