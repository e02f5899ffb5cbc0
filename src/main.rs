//! The `ratepool` binary: parse, run, print, map the outcome to an exit code
//! (0 success, 2 bad usage or input, 3 model not fitted, 1 anything else).

use clap::Parser;
use ratepool::cli::{Cli, Reporting};
use std::process::ExitCode;

fn run(cli: Cli) -> ratepool::error::Result<()> {
    if let Some(threads) = cli.threads {
        rayon::ThreadPoolBuilder::new()
            .num_threads(threads.max(1))
            .build_global()
            .map_err(|e| ratepool::error::Error::Other(format!("cannot start {threads} threads: {e}")))?;
    }
    let quiet = cli.quiet;
    let summary = cli.command.execute(Reporting { timings: cli.timings, progress: cli.progress })?;
    // --quiet leaves only errors on the terminal; the warnings stay in the summary file.
    if let (false, Some(summary)) = (quiet, summary) {
        for warning in &summary.warnings {
            eprintln!("ratepool: warning: {warning}");
        }
        print!("{}", ratepool::report::render_text(&summary));
    }
    Ok(())
}

fn main() -> ExitCode {
    let args = match ratepool::config::expand(std::env::args_os().collect()) {
        Ok(args) => args,
        Err(e) => {
            eprintln!("ratepool: error: {e}");
            return ExitCode::from(e.exit_code() as u8);
        }
    };
    let cli = Cli::parse_from(args);
    // Panics inside a reader are turned into input errors where they happen
    // (`io::guard`); the default hook would still print each one as a crash.
    // Print nothing there, and report a panic that escapes as an internal error.
    if std::env::var_os("RUST_BACKTRACE").is_none() {
        std::panic::set_hook(Box::new(|_| {}));
    }
    let outcome = std::panic::catch_unwind(|| run(cli)).unwrap_or_else(|payload| {
        Err(ratepool::error::Error::Other(format!(
            "internal error: {}; please report this with the input",
            ratepool::io::guard::panic_message(payload.as_ref())
        )))
    });
    match outcome {
        Ok(()) => ExitCode::SUCCESS,
        Err(error) => {
            eprintln!("ratepool: error: {error}");
            ExitCode::from(error.exit_code() as u8)
        }
    }
}
