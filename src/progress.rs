//! What a run shows on stderr as it goes, when asked: each phase's wall
//! time (`--timings`), progress lines (`--progress`), one JSON object per
//! phase (`--log-format json`), and progress bars when stderr is a terminal.
//! The pipeline tells a [`RunObserver`]; this is the one the command line uses.

use crate::pipeline::{PhaseEnd, RowsThrough, RunObserver};
use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};
use std::time::{Duration, Instant};

/// What is reported on stderr.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct Watch {
    /// `--timings`: each phase's wall time, as text.
    pub timings: bool,
    /// `--progress`: the end of each phase and the rows done, as text lines.
    pub progress: bool,
    /// `--log-format json`: one JSON object per phase.
    pub json: bool,
    /// Progress bars for the passes over the rows (stderr is a terminal,
    /// and nothing else was asked of it).
    pub bars: bool,
}

/// How often progress through a long phase is reported as text, at most.
const REPORT_EVERY: Duration = Duration::from_secs(1);

/// The terminal's observer of a run: writes what [`Watch`] asks for to stderr.
pub struct Terminal {
    watch: Watch,
    last_report: Option<Instant>,
    bar: Option<ProgressBar>,
}

impl Terminal {
    /// An observer showing what `watch` asks for.
    pub fn new(watch: Watch) -> Self {
        Terminal { watch, last_report: None, bar: None }
    }
}

impl RunObserver for Terminal {
    fn phase_ended(&mut self, phase: &PhaseEnd<'_>) {
        if let Some(bar) = self.bar.take() {
            bar.finish_and_clear();
        }
        let description = phase.description;
        if self.watch.timings {
            eprintln!("timing {description}: {:.3} s", phase.seconds);
        }
        if self.watch.progress {
            eprintln!("progress {description}: done at {:.1} s", phase.since_start);
        }
        if self.watch.json {
            let object = serde_json::json!({
                "event": "phase",
                "name": phase.name,
                "description": description,
                "seconds": phase.seconds,
                "rows": phase.rows,
                "pairs": phase.pairs,
            });
            eprintln!("{object}");
        }
    }

    /// As text, reported when a second has passed since the last report,
    /// and always at the end.
    fn rows_through(&mut self, rows: &RowsThrough<'_>) {
        let RowsThrough { phase, done, total, since_start } = *rows;
        if self.watch.bars {
            let bar = self.bar.get_or_insert_with(|| new_bar(phase, total));
            bar.set_position(done as u64);
        }
        if !self.watch.progress {
            return;
        }
        let now = Instant::now();
        let recent = match self.last_report {
            Some(last) => now - last < REPORT_EVERY,
            None => since_start < REPORT_EVERY.as_secs_f64(),
        };
        if total.is_none_or(|total| done < total) && recent {
            return;
        }
        self.last_report = Some(now);
        match total {
            Some(total) => {
                let share = 100.0 * done as f64 / total.max(1) as f64;
                eprintln!("progress {phase}: {done} of {total} rows ({share:.1}%) at {since_start:.1} s");
            }
            None => eprintln!("progress {phase}: {done} rows at {since_start:.1} s"),
        }
    }
}

/// A bar over `total` rows, or a counter when the total is not known (CSV).
fn new_bar(phase: &str, total: Option<usize>) -> ProgressBar {
    let (bar, template) = match total {
        Some(total) => {
            (ProgressBar::new(total as u64), "{msg:>12} [{bar:40}] {human_pos}/{human_len} rows, {eta} left")
        }
        None => (ProgressBar::new_spinner(), "{msg:>12} {spinner} {human_pos} rows, {elapsed}"),
    };
    bar.set_draw_target(ProgressDrawTarget::stderr_with_hz(4));
    if let Ok(style) = ProgressStyle::with_template(template) {
        bar.set_style(style.progress_chars("=> "));
    }
    bar.set_message(phase.to_string());
    bar
}
