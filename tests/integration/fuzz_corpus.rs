//! Replays the fuzzing seeds and every input the fuzzer found a fault with
//! (`fuzz/regressions/`) through the same harness as the fuzz target, so a
//! fixed finding stays fixed. CI runs this, not the fuzzer.

#[path = "../../fuzz/harness.rs"]
mod harness;

#[test]
fn the_fuzz_seeds_and_regressions_keep_the_contract() {
    let root = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("fuzz");
    let mut replayed = 0;
    for folder in ["seeds", "regressions"] {
        let mut files: Vec<_> =
            std::fs::read_dir(root.join(folder)).unwrap().map(|e| e.unwrap().path()).collect();
        files.sort();
        for file in files.into_iter().filter(|f| !f.ends_with(".keep")) {
            let data = std::fs::read(&file).unwrap();
            let outcome = std::panic::catch_unwind(|| harness::exercise(&data));
            assert!(outcome.is_ok(), "{} broke the contract", file.display());
            replayed += 1;
        }
    }
    assert!(replayed >= 5, "the seeds are missing");
}
