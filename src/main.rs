//! The `ratepool` binary: parse, run, print, map the outcome to an exit code
//! (0 success, 2 bad usage or input, 3 model not fitted, 1 anything else).

use clap::error::ErrorKind;
use clap::{CommandFactory, Parser};
use ratepool::cli::{Cli, Outcome};
use ratepool::error::Error;
use std::process::ExitCode;

fn run(cli: Cli) -> ratepool::error::Result<Outcome> {
    let options = cli.run_options();
    if let Some(threads) = options.threads {
        rayon::ThreadPoolBuilder::new()
            .num_threads(threads.max(1))
            .build_global()
            .map_err(|e| Error::Other(format!("cannot start {threads} threads: {e}")))?;
    }
    let (quiet, json) = (options.quiet, options.json());
    let watch = cli.watch();
    let outcome = cli.command.execute(watch)?;
    if let Some(summary) = &outcome.summary {
        // --quiet leaves only errors on the terminal; the warnings stay in the summary file.
        show_warnings(&summary.warnings, quiet, json);
        if !quiet {
            print!("{}", ratepool::report::render_text(summary));
        }
    }
    if let Some(summary) = &outcome.levels {
        show_warnings(&summary.warnings, quiet, json);
        if !quiet {
            print!("{}", ratepool::report::render_level_text(summary));
        }
    }
    Ok(outcome)
}

/// The last line of a JSON log: the exit status and what was written, or the error.
/// Each warning once on stderr, as a JSON event or a line (none when quiet).
fn show_warnings(warnings: &[String], quiet: bool, json: bool) {
    for warning in warnings.iter().filter(|_| !quiet) {
        if json {
            eprintln!("{}", serde_json::json!({ "event": "warning", "message": warning }));
        } else {
            eprintln!("ratepool: warning: {warning}");
        }
    }
}

fn end_event(result: &ratepool::error::Result<Outcome>) -> serde_json::Value {
    match result {
        Ok(outcome) => serde_json::json!({
            "event": "end",
            "status": "ok",
            "exit_code": 0,
            "outputs": outcome.outputs,
            "warnings": outcome.summary.as_ref().map_or(0, |s| s.warnings.len())
                + outcome.levels.as_ref().map_or(0, |s| s.warnings.len()),
        }),
        Err(error) => serde_json::json!({
            "event": "end",
            "status": "error",
            "exit_code": error.exit_code(),
            "error": error.to_string(),
            "outputs": [],
        }),
    }
}

fn main() -> ExitCode {
    let json = std::env::args().any(|a| a == "--log-format=json")
        || std::env::args().collect::<Vec<_>>().windows(2).any(|w| w[0] == "--log-format" && w[1] == "json");
    let finish = |result: ratepool::error::Result<Outcome>| {
        if json {
            eprintln!("{}", end_event(&result));
        }
        match result {
            Ok(_) => ExitCode::SUCCESS,
            Err(error) => {
                if !json {
                    eprintln!("ratepool: error: {error}");
                }
                ExitCode::from(error.exit_code() as u8)
            }
        }
    };
    let args = match ratepool::config::expand(std::env::args_os().collect(), &Cli::command()) {
        Ok(args) => args,
        Err(e) => return finish(Err(e)),
    };
    let cli = match Cli::try_parse_from(args) {
        Ok(cli) => cli,
        // A usage mistake ends a JSON log like any error.
        Err(e) if json && !matches!(e.kind(), ErrorKind::DisplayHelp | ErrorKind::DisplayVersion) => {
            return finish(Err(Error::Usage(ratepool::cli::clap_message(&e))));
        }
        // Help and the version as clap writes them.
        Err(e) if !e.use_stderr() || e.kind() == ErrorKind::DisplayHelpOnMissingArgumentOrSubcommand => {
            e.exit()
        }
        // A usage mistake in clap's words (with its usage line and tip) under the prefix every error has.
        Err(e) => {
            let text = e.to_string();
            eprint!("ratepool: error: {}", text.strip_prefix("error: ").unwrap_or(&text));
            return ExitCode::from(2);
        }
    };
    // Panics inside a reader are turned into input errors where they happen
    // (`io::guard`); the default hook would still print each one as a crash.
    // Print nothing there, and report a panic that escapes as an internal error.
    if std::env::var_os("RUST_BACKTRACE").is_none() {
        std::panic::set_hook(Box::new(|_| {}));
    }
    let outcome = std::panic::catch_unwind(|| run(cli)).unwrap_or_else(|payload| {
        Err(Error::Other(format!(
            "internal error: {}; please report this with the input",
            ratepool::io::guard::panic_message(payload.as_ref())
        )))
    });
    finish(outcome)
}
