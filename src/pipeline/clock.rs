//! What a run reports on stderr as it goes, when asked: each phase's wall
//! time (`--timings`), progress lines (`--progress`), one JSON object per
//! phase (`--log-format json`), and progress bars when stderr is a terminal.
//! Progress is looked at once per batch, never per row, so it costs nothing
//! measurable; none of it changes an output.

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

/// The phase clock of one run.
pub(crate) struct PhaseClock {
    watch: Watch,
    started: Instant,
    last: Instant,
    last_report: Instant,
    /// Rows through the current phase, for the JSON object.
    rows: Option<usize>,
    /// Distinct pairs known so far, for the JSON object.
    pairs: Option<usize>,
    bar: Option<ProgressBar>,
}

impl PhaseClock {
    pub(crate) fn start(watch: Watch) -> Self {
        let now = Instant::now();
        PhaseClock { watch, started: now, last: now, last_report: now, rows: None, pairs: None, bar: None }
    }

    /// Records the number of distinct pairs, reported with the phases from now on.
    pub(crate) fn pairs(&mut self, pairs: usize) {
        self.pairs = Some(pairs);
    }

    /// Ends the current phase: `name` is its stable name (in JSON), `description` its words.
    pub(crate) fn lap(&mut self, name: &str, description: &str) {
        let now = Instant::now();
        let seconds = (now - self.last).as_secs_f64();
        if let Some(bar) = self.bar.take() {
            bar.finish_and_clear();
        }
        if self.watch.timings {
            eprintln!("timing {description}: {seconds:.3} s");
        }
        if self.watch.progress {
            eprintln!("progress {description}: done at {:.1} s", (now - self.started).as_secs_f64());
        }
        if self.watch.json {
            let object = serde_json::json!({
                "event": "phase",
                "name": name,
                "description": description,
                "seconds": seconds,
                "rows": self.rows,
                "pairs": self.pairs,
            });
            eprintln!("{object}");
        }
        self.rows = None;
        self.last = now;
    }

    /// Within a phase: `done` of `total` rows (when known) are through.
    /// As text, reported when a second has passed since the last report,
    /// and always at the end.
    pub(crate) fn rows(&mut self, phase: &str, done: usize, total: Option<usize>) {
        self.rows = Some(done);
        if self.watch.bars {
            let bar = self.bar.get_or_insert_with(|| new_bar(phase, total));
            bar.set_position(done as u64);
        }
        if !self.watch.progress {
            return;
        }
        let now = Instant::now();
        if total.is_none_or(|total| done < total) && now - self.last_report < REPORT_EVERY {
            return;
        }
        self.last_report = now;
        let at = (now - self.started).as_secs_f64();
        match total {
            Some(total) => {
                let share = 100.0 * done as f64 / total.max(1) as f64;
                eprintln!("progress {phase}: {done} of {total} rows ({share:.1}%) at {at:.1} s");
            }
            None => eprintln!("progress {phase}: {done} rows at {at:.1} s"),
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
