//! Fuzz target over the input readers and the fit (see `fuzz/harness.rs`).

#![no_main]

use libfuzzer_sys::fuzz_target;

#[path = "../harness.rs"]
mod harness;

static QUIET_HOOK: std::sync::Once = std::sync::Once::new();

fuzz_target!(|data: &[u8]| {
    // libfuzzer-sys installs a panic hook that aborts at once, before ratepool
    // can contain a decoder's panic as an input error (`io::guard`), as the
    // binary does. Restore unwinding: a panic that escapes the harness still
    // reaches libfuzzer-sys's own catch and is reported as a crash.
    QUIET_HOOK.call_once(|| {
        std::panic::set_hook(Box::new(|_| {}));
    });
    harness::exercise(data);
});
