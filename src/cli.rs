//! The command line: raw arguments (clap derive) and their translation into a
//! validated [`Job`]. The library below never sees the parser.

use crate::core::model::ModelTerms;
use crate::error::{Error, Result};
use crate::io::input::TableSource;
use crate::io::overlap::RunPath;
use crate::pipeline::validate::ColumnNames;
use crate::pipeline::{
    load_summary, Aggregation, CovariateColumn, CovariateRole, FlagEvent, FlagRule, Intervals, InvalidRows,
    Job, Layout, Level, Likelihood, Model, PriorShape, PriorSource, RankOrder, Standardisation, Thresholds,
    TopChoice, TopRule,
};
use crate::progress::{Terminal, Watch};
use clap::{Args, Parser, Subcommand, ValueEnum};
use std::path::{Path, PathBuf};

/// Empirical-Bayes shrinkage of rates over many groups.
#[derive(Debug, Parser)]
#[command(
    name = "ratepool",
    version,
    about,
    after_help = SHORT_AFTER,
    after_long_help = EXIT_STATUS
)]
pub struct Cli {
    /// What to do.
    #[command(subcommand)]
    pub command: Command,
    /// Run options given before the subcommand (`ratepool --quiet fit ...`).
    #[command(flatten)]
    pub run: RunArgs,
}

/// How a run speaks and how many threads it uses: accepted before the
/// subcommand and after `fit`, `score` and `report`, where they act, and
/// nowhere else.
#[derive(Debug, Clone, Default, Args)]
pub struct RunArgs {
    /// Worker threads (default: all cores)
    #[arg(
        long_help = "Worker threads (default: all cores). The output is the same for any number.",
        long,
        value_name = "N",
        help_heading = "Run"
    )]
    pub threads: Option<usize>,
    /// Print nothing but errors
    #[arg(
        long_help = "Print nothing but errors: no summary and no warnings on the terminal (the warnings stay in the summary file).",
        long,
        help_heading = "Run"
    )]
    pub quiet: bool,
    /// Print the wall time of each phase on stderr
    #[arg(long, help_heading = "Run")]
    pub timings: bool,
    /// Report progress on stderr
    #[arg(
        long_help = "Report progress on stderr: the end of each phase and, in the two passes over the input, the rows done (at most once a second).",
        long,
        help_heading = "Run"
    )]
    pub progress: bool,
    /// How stderr speaks: text, or json for schedulers
    #[arg(
        long_help = "How stderr speaks: `text`, or `json` for schedulers: one JSON object per line for each phase (name, seconds, rows, pairs), each warning, and the end (exit status, outputs written, or the error).",
        long,
        value_enum,
        value_name = "FORMAT",
        hide_possible_values = true,
        help_heading = "Run"
    )]
    pub log_format: Option<LogFormat>,
}

impl RunArgs {
    /// These options with those of `later` (given after the subcommand) added.
    fn with(&self, later: &RunArgs) -> RunArgs {
        RunArgs {
            threads: later.threads.or(self.threads),
            quiet: self.quiet || later.quiet,
            timings: self.timings || later.timings,
            progress: self.progress || later.progress,
            log_format: later.log_format.or(self.log_format),
        }
    }

    /// True when stderr speaks JSON.
    pub fn json(&self) -> bool {
        self.log_format == Some(LogFormat::Json)
    }
}

/// How stderr speaks.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum LogFormat {
    /// Words for people.
    Text,
    /// One JSON object per line.
    Json,
}

impl Cli {
    /// The run options, from before the subcommand and after it.
    pub fn run_options(&self) -> RunArgs {
        let later = match &self.command {
            Command::Fit(args) => Some(&args.table.run),
            Command::Score(args) => Some(&args.table.run),
            Command::Report(args) => Some(&args.run),
            Command::CheckConfig(_)
            | Command::Neighbours(_)
            | Command::Completions { .. }
            | Command::Manpage => None,
        };
        later.map_or_else(|| self.run.clone(), |later| self.run.with(later))
    }

    /// What the run reports on stderr: progress bars only when stderr is a
    /// terminal and nothing else was asked of it.
    pub fn watch(&self) -> Watch {
        use std::io::IsTerminal;
        let run = self.run_options();
        let json = run.json();
        let asked = run.quiet || json || run.progress || run.timings;
        Watch {
            timings: run.timings,
            progress: run.progress,
            json,
            bars: !asked && std::io::stderr().is_terminal(),
        }
    }
}

pub use crate::config::clap_message;

/// What a command did: the summary of a fit or score, and the files written.
pub struct Outcome {
    /// The summary of a fit or score.
    pub summary: Option<crate::summary::Summary>,
    /// The summary of a star-rating fit (`--model dirichlet-multinomial`).
    pub levels: Option<crate::summary::LevelSummary>,
    /// Every file written, in the order written.
    pub outputs: Vec<PathBuf>,
}

/// Subcommands.
#[derive(Debug, Subcommand)]
pub enum Command {
    /// Fit a prior to all groups and write every group's posterior.
    #[command(args_override_self = true, after_help = SHORT_AFTER, after_long_help = FIT_AFTER)]
    Fit(FitArgs),
    /// Score groups with a saved prior, without refitting.
    #[command(
        args_override_self = true,
        after_help = SHORT_AFTER,
        after_long_help = SCORE_AFTER,
        mut_arg("by", |a| a.help("Score each segment with its saved prior").long_help(
            "Score each segment (the rows sharing the values of these columns) with its prior in \
             the prior file, which must have been fitted with the same --by columns; a segment the \
             prior file has not seen takes its all-groups prior, and `prior_fallback` says which rows did."
        )),
        mut_arg("min_groups", |a| a.hide(true)),
        mut_arg("group", |a| a.long_help("Column holding the group id.")),
        mut_arg("output", |a| a.long_help(
            "Output table (.csv, .parquet or .arrow, an Arrow IPC file), written atomically: it appears complete or not at all."
        ))
    )]
    Score(ScoreArgs),
    /// Write the HTML report of a run from its table and summary.
    #[command(after_help = SHORT_AFTER, after_long_help = REPORT_AFTER)]
    Report(ReportArgs),
    /// Derive the neighbour table of a map's areas.
    ///
    /// Derive the neighbour table of a map's areas (GeoJSON): one row per pair of areas whose boundaries share a point (queen, the default) or a stretch of boundary (--rook), in two columns, area and neighbour.
    #[command(
        after_help = SHORT_AFTER,
        after_long_help = NEIGHBOURS_AFTER,
        override_usage = "ratepool neighbours --map <FILE> --key <PROPERTY> --output <FILE>\n       [--rook]"
    )]
    Neighbours(NeighboursArgs),
    /// Check a job file (--config) without running it.
    ///
    /// Check a job file (--config) without running it, naming the key and line of each mistake.
    #[command(after_help = SHORT_AFTER, after_long_help = CHECK_AFTER)]
    CheckConfig(CheckConfigArgs),
    /// Print a shell completion script.
    ///
    /// Print a shell completion script for ratepool (bash, zsh, fish, elvish or powershell).
    #[command(after_help = "Example:\n  ratepool completions bash > ratepool.bash && source ratepool.bash")]
    Completions {
        /// The shell.
        #[arg(value_name = "SHELL")]
        shell: clap_complete::Shell,
    },
    /// Print the manual page (roff), generated from these options.
    #[command(after_help = "Example:\n  ratepool manpage > ratepool.1 && man ./ratepool.1")]
    Manpage,
}

/// What `-h` shows after the options.
const SHORT_AFTER: &str = "Use --help for the details of each option, worked examples and the exit status.";

// The texts below are macros so that `concat!` can join them into each
// subcommand's `--help` and the manual page can take them one by one.
macro_rules! exit_status {
    () => {
        "Exit status:
  0  the run finished and every output was written
  1  a file could not be read or written, or an internal error
  2  a usage mistake or invalid input; no output was written
  3  the model cannot be fitted to these data; no output was written
The message on stderr names the option, the row and column, or the reason."
    };
}

macro_rules! fit_examples {
    () => {
        "Examples (from the repository root, on the invented demo data):
  ratepool fit --input demo-data/marketplace.csv --model beta-binomial \\
    --group seller_id --successes positive_ratings --trials total_ratings \\
    --ranks --output sellers.parquet --summary sellers.json
  ratepool fit --input demo-data/districts.csv --model gamma-poisson \\
    --group district_id --events observed_cases --exposure expected_cases \\
    --above 1 --flag-fdr 0.1 --output districts.parquet \\
    --summary districts.json --report districts.html
  ratepool fit --input demo-data/district_profiles.csv --model gamma-poisson \\
    --group district_id --events observed_cases --exposure expected_cases \\
    --covariates deprivation,outdoor_share --output profiles.parquet
  ratepool fit --input demo-data/clinic_waits.csv --model normal-normal \\
    --group clinic_id --estimate mean_wait_minutes --std-error wait_se \\
    --variance-method reml --output clinics.csv
The districts by age band, each pulled toward its neighbours' rate (the
neighbour table from the second neighbours example), with a map in the report:
  ratepool fit --input demo-data/district_bands.csv --model gamma-poisson \\
    --group district_id --events cases --population population \\
    --strata age_band --neighbours district_neighbours.csv --above 1.2 \\
    --flag-fdr 0.1 --output local.csv --report local.html \\
    --map demo-data/district_map.geojson --map-key district_id"
    };
}

macro_rules! score_examples {
    () => {
        "Example (from the repository root; the prior from the fit example above):
  ratepool score --prior districts.json --input demo-data/districts.csv \\
    --group district_id --events observed_cases --exposure expected_cases \\
    --output scored.parquet --summary scored.json"
    };
}

macro_rules! report_examples {
    () => {
        "Example (from the repository root, after the second fit example):
  ratepool report --table districts.parquet --summary districts.json \\
    --output districts.html --plots plots/"
    };
}

macro_rules! neighbours_examples {
    () => {
        "Examples (from the repository root: the North Carolina counties of the test
fixtures, and the invented demo districts):
  ratepool neighbours --map tests/fixtures/neighbours/nc_counties.geojson \\
    --key county --output county_neighbours.csv
  ratepool neighbours --map demo-data/district_map.geojson \\
    --key district_id --output district_neighbours.csv"
    };
}

macro_rules! check_examples {
    () => {
        "Example (from the repository root):
  ratepool check-config demo-data/jobs/weekly-fit.toml"
    };
}

// The long help of `--map`, which `fit`, `score` (with --report) and `report` share.
macro_rules! map_help {
    () => {
        "A GeoJSON map of the groups (areas): a FeatureCollection of Polygon or MultiPolygon features, each naming its group id in the property --map-key. The report then draws each area's raw value and posterior mean side by side on one colour scale, with --above the probability of exceeding it, and the flagged areas outlined; areas on the map but not in the table, and the reverse, are listed under it."
    };
}

/// The long help of `--map-key`.
const MAP_KEY_HELP: &str =
    "The property of each feature of --map that holds its group id, as the group column writes it.";

/// The exit status, in `--help` and the manual page.
pub const EXIT_STATUS: &str = exit_status!();
/// The worked examples of each subcommand, in its `--help` and the manual page (a test runs them).
pub const EXAMPLES: [(&str, &str); 5] = [
    ("fit", fit_examples!()),
    ("score", score_examples!()),
    ("report", report_examples!()),
    ("neighbours", neighbours_examples!()),
    ("check-config", check_examples!()),
];
const FIT_AFTER: &str = concat!(fit_examples!(), "\n\n", exit_status!());
const SCORE_AFTER: &str = concat!(score_examples!(), "\n\n", exit_status!());
const REPORT_AFTER: &str = concat!(report_examples!(), "\n\n", exit_status!());
const CHECK_AFTER: &str = concat!(check_examples!(), "\n\n", exit_status!());
const NEIGHBOURS_AFTER: &str = concat!(neighbours_examples!(), "\n\n", exit_status!());

/// Options of `check-config`.
#[derive(Debug, Args)]
pub struct CheckConfigArgs {
    /// The job file (TOML).
    #[arg(value_name = "FILE")]
    pub file: PathBuf,
    /// fit or score (default: its `command` key, else fit).
    #[arg(long, value_name = "COMMAND", value_parser = ["fit", "score"], hide_possible_values = true)]
    pub command: Option<String>,
}

/// Options of `neighbours`.
#[derive(Debug, Args)]
pub struct NeighboursArgs {
    /// The map (GeoJSON)
    #[arg(
        long_help = "The map: a GeoJSON FeatureCollection whose features are the areas, each a Polygon or a MultiPolygon.",
        long,
        value_name = "FILE"
    )]
    pub map: PathBuf,
    /// The property that names each area
    #[arg(
        long_help = "The property of each feature that names its area, as the group column of a fit does; each area's must be different.",
        long,
        value_name = "PROPERTY"
    )]
    pub key: String,
    /// Neighbours share an edge, not just a point
    #[arg(
        long_help = "Areas are neighbours when their boundaries share a stretch of boundary (rook contiguity), not just a point (queen contiguity, the default).",
        long
    )]
    pub rook: bool,
    /// The table (.csv, .parquet or .arrow)
    #[arg(
        long_help = "Where the table goes (.csv, .parquet or .arrow), written atomically: columns `area` and `neighbour`, each pair once with the smaller first (as the areas appear on the map).",
        long,
        value_name = "FILE"
    )]
    pub output: PathBuf,
}

/// Options of `report`.
#[derive(Debug, Args)]
pub struct ReportArgs {
    /// The run's output table (.csv or .parquet).
    #[arg(long, value_name = "FILE")]
    pub table: PathBuf,
    /// The run's summary file.
    #[arg(long, value_name = "FILE")]
    pub summary: PathBuf,
    /// The HTML file to write (one self-contained page).
    #[arg(long, value_name = "FILE")]
    pub output: PathBuf,
    /// Also write each plot into this folder
    #[arg(long, value_name = "FOLDER", long_help = "Also write each plot as its own file into this folder.")]
    pub plots: Option<PathBuf>,
    /// svg (default) or png, for --plots
    #[arg(
        long,
        value_enum,
        value_name = "FORMAT",
        default_value_t = PlotFormatArg::Svg,
        hide_default_value = true,
        hide_possible_values = true,
        requires = "plots",
        long_help = "The format of the plots written with --plots: svg, or png (rasterised, text in DejaVu Sans)."
    )]
    pub plot_format: PlotFormatArg,
    /// Draw the areas of this map in the report
    #[arg(
        long_help = map_help!(),
        long,
        value_name = "FILE",
        requires = "map_key"
    )]
    pub map: Option<PathBuf>,
    /// The map's property naming each area's group
    #[arg(
        long_help = MAP_KEY_HELP,
        long,
        value_name = "PROPERTY",
        requires = "map"
    )]
    pub map_key: Option<String>,
    /// Seed of the scatter plots' samples
    #[arg(long, value_name = "N", default_value_t = crate::pipeline::DEFAULT_SEED, long_help = "Seed of the samples drawn for the scatter plots (default 20261202).", hide_default_value = true)]
    pub seed: u64,
    /// How the run speaks.
    #[command(flatten)]
    pub run: RunArgs,
}

/// What to do with invalid rows.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum InvalidArg {
    /// Stop at the first invalid row and write nothing.
    Error,
    /// Leave invalid rows out and write them to --rejects.
    Skip,
}

/// How intervals treat the estimated prior.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum IntervalsArg {
    /// The fitted prior taken as known.
    PlugIn,
    /// The prior's estimation uncertainty integrated out.
    Corrected,
}

/// The format of the plots written alone.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum PlotFormatArg {
    /// SVG, as on the page.
    Svg,
    /// PNG.
    Png,
}

impl PlotFormatArg {
    fn format(self) -> crate::view::PlotFormat {
        match self {
            PlotFormatArg::Svg => crate::view::PlotFormat::Svg,
            PlotFormatArg::Png => crate::view::PlotFormat::Png,
        }
    }
}

/// How the normal-normal model estimates the prior variance.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum VarianceMethodArg {
    /// Maximum marginal likelihood.
    Ml,
    /// Restricted maximum likelihood: the usual choice when groups are few.
    Reml,
}

/// How prob_top is computed.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum TopMethodArg {
    /// Draws up to 50,000 groups, the threshold beyond.
    Auto,
    /// Joint draws from every posterior.
    Draws,
    /// The threshold with K groups expected beyond it.
    Threshold,
}

/// Options shared by fit and score. The model option itself is the first
/// field of [`FitArgs`] and [`ScoreArgs`], so that it heads the model columns.
#[derive(Debug, Args)]
pub struct TableArgs {
    /// A job file (TOML) holding options
    #[arg(
        long_help = "A job file (TOML) holding options, keys named as the long options (`successes = \"k\"`, `flag-fdr = 0.1`, `by = [\"kind\"]`, `ranks = true`); options given here override it.",
        long,
        value_name = "FILE",
        help_heading = "Input"
    )]
    pub config: Option<PathBuf>,
    /// Input table (.csv or .parquet)
    #[arg(long, value_name = "FILE", help_heading = "Input")]
    pub input: PathBuf,
    /// Rows are trials: this column holds 1 or 0
    #[arg(
        long_help = "Rows are trials: this column holds each trial's outcome (1 or 0, true or false), and trials and successes are counted per group before the fit (beta-binomial; --successes and --trials then name the output's count columns, by default `successes` and `trials`). With the dirichlet-multinomial model each row is one rating, its value one of --levels.",
        long,
        value_name = "COLUMN",
        help_heading = "Input"
    )]
    pub outcome: Option<String>,
    /// Rows are areas by stratum; their population
    #[arg(
        long_help = "Rows are areas by stratum (age band, sex): this column holds each row's population, or person-years. Each area's expected count is the sum over its rows of the population times its stratum's reference rate, and the gamma-poisson model runs on --events against it; the output names it `expected` and observed over expected `smr`. Needs --strata.",
        long,
        value_name = "COLUMN",
        help_heading = "Standardisation"
    )]
    pub population: Option<String>,
    /// Columns that make a stratum
    #[arg(
        long_help = "The columns whose values make a stratum (comma-separated names), with --population: an age band, or an age band and sex.",
        long,
        value_name = "COLUMN[,COLUMN...]",
        value_delimiter = ',',
        help_heading = "Standardisation"
    )]
    pub strata: Vec<String>,
    /// Rates by stratum of an external standard
    #[arg(
        long_help = "An external standard (national rates, say): a table (.csv or .parquet) with the --strata columns and a column `rate`, events per unit of population, one row per stratum. Without it each stratum's reference rate is the pooled rate of all areas (the internal standard).",
        long,
        value_name = "FILE",
        help_heading = "Standardisation"
    )]
    pub reference_rates: Option<PathBuf>,
    /// Rows are parts of groups: sum them per group first
    #[arg(
        long_help = "Rows are parts of groups (one row per store per day, say): counts and sizes are summed per group id (per segment with --by) before the fit. Memory grows with the groups.",
        long,
        help_heading = "Input"
    )]
    pub aggregate: bool,
    /// On an invalid row: error (stop; default) or skip
    #[arg(long_help = "What to do with an invalid row: `error` stops at the first and writes nothing; `skip` leaves it out and writes it, with the reason, to --rejects.", long, value_enum, value_name = "ACTION", default_value_t = InvalidArg::Error, hide_possible_values = true, hide_default_value = true, help_heading = "Input")]
    pub on_invalid: InvalidArg,
    /// Where skipped rows go (.csv or .parquet)
    #[arg(
        long_help = "Where invalid rows go with --on-invalid skip (.csv or .parquet), each with its row number, the column at fault and the reason.",
        long,
        value_name = "FILE",
        help_heading = "Input"
    )]
    pub rejects: Option<PathBuf>,
    /// Accepted for old scripts and changes nothing: every input is now read in batches.
    #[arg(long, hide = true, help_heading = "Input")]
    pub stream: bool,
    /// CSV field separator, or tab
    #[arg(long_help = "Field separator of CSV input: one character such as `;`, or `tab`. CSV output is always comma-separated.", long, value_name = "CHAR", default_value = ",", value_parser = parse_delimiter, help_heading = "Input")]
    pub delimiter: u8,
    /// Memory to stay within, in MB (1024)
    #[arg(
        long_help = "Memory, in MB, a run aims to stay within (default 1024). The group ids' hashes, 8 bytes a row for finding repeated ids, hold at most half of it; beyond that they are sorted and written to temporary files (in TMPDIR) and merged at the end, so a billion rows need 8 GB of disk, not of memory. The output is the same for any value.",
        long,
        value_name = "N",
        hide_default_value = true,
        default_value_t = crate::pipeline::DEFAULT_MEMORY_BUDGET_MB,
        help_heading = "Input"
    )]
    pub memory_budget: usize,
    /// Rows per batch read
    #[arg(long_help = "Rows per batch read (the output is the same for any value).", long, value_name = "N", default_value_t = crate::pipeline::DEFAULT_BATCH_ROWS, help_heading = "Input")]
    pub batch_rows: usize,
    /// Column holding the group id
    #[arg(
        long_help = "Column holding the group id (not with --pair-counts, whose rows are pairs, not groups).",
        long,
        value_name = "COLUMN",
        help_heading = "Model"
    )]
    pub group: Option<String>,
    /// Column of successes (beta-binomial)
    #[arg(long, value_name = "COLUMN", help_heading = "Model")]
    pub successes: Option<String>,
    /// Column of trials (beta-binomial)
    #[arg(long, value_name = "COLUMN", help_heading = "Model")]
    pub trials: Option<String>,
    /// Column of events (gamma-poisson)
    #[arg(long, value_name = "COLUMN", help_heading = "Model")]
    pub events: Option<String>,
    /// Exposure or expected counts (gamma-poisson)
    #[arg(
        long_help = "Column of exposure (gamma-poisson): person-time, or expected counts, which make each rate a standardised ratio such as the SMR.",
        long,
        value_name = "COLUMN",
        help_heading = "Model"
    )]
    pub exposure: Option<String>,
    /// Column of estimates, one per group (normal-normal)
    #[arg(
        long_help = "Column of estimates, one per group: a mean rating, a mean waiting time, an effect size (normal-normal).",
        long,
        value_name = "COLUMN",
        help_heading = "Model"
    )]
    pub estimate: Option<String>,
    /// Standard errors of the estimates (normal-normal)
    #[arg(
        long_help = "Column of the estimates' standard errors, each finite and above zero (normal-normal).",
        long,
        value_name = "COLUMN",
        help_heading = "Model"
    )]
    pub std_error: Option<String>,
    /// Add prob_above: P(rate > T)
    #[arg(
        long_help = "Add `prob_above`: each group's posterior probability that its rate exceeds T (a proportion for the beta-binomial; for standardised ratios T = 1 asks whether the relative risk exceeds one).",
        long,
        value_name = "T",
        allow_negative_numbers = true,
        help_heading = "Analysis"
    )]
    pub above: Option<f64>,
    /// Add prob_below: P(rate < T)
    #[arg(
        long_help = "Add `prob_below`: each group's posterior probability that its rate is below T.",
        long,
        value_name = "T",
        allow_negative_numbers = true,
        help_heading = "Analysis"
    )]
    pub below: Option<f64>,
    /// Fit one prior per segment of these columns
    #[arg(
        long_help = "Fit one prior per segment: the rows sharing the values of these columns (comma-separated names). The segment columns are written beside the group id, and `prior_fallback` says which rows took the prior fitted to all groups.",
        long,
        value_name = "COLUMN[,COLUMN...]",
        value_delimiter = ',',
        help_heading = "Analysis"
    )]
    pub by: Vec<String>,
    /// Groups a segment needs for its own prior (30)
    #[arg(
        long_help = "A segment with fewer groups takes the prior fitted to all groups (with --by; default 30: below that the spread between groups is poorly known).",
        long,
        value_name = "N",
        help_heading = "Analysis"
    )]
    pub min_groups: Option<usize>,
    /// Centre priors on these columns
    #[arg(
        long_help = "Each group's prior centre follows these columns (comma-separated names) through the model's link: logit of the proportion, log of the rate, the mean itself for estimates; an intercept is always in. A column whose every value is a number enters as it is; any other enters as levels, one indicator per level after the first in sorted order. Adds `prior_mean` (the centre each group is pulled toward) and the coefficients to the summary.",
        long,
        value_name = "COLUMN[,COLUMN...]",
        value_delimiter = ',',
        help_heading = "Covariates"
    )]
    pub covariates: Vec<String>,
    /// Covariates entered as their log
    #[arg(
        long_help = "Covariates that enter as their natural log (a volume, a population): every value must be a number above zero.",
        long,
        value_name = "COLUMN[,COLUMN...]",
        value_delimiter = ',',
        help_heading = "Covariates"
    )]
    pub covariates_log: Vec<String>,
    /// Covariates entered as levels
    #[arg(
        long_help = "Covariates that enter as levels even where their values are numbers (codes of a category): one indicator per level after the first in sorted order, at most 200 levels in all.",
        long,
        value_name = "COLUMN[,COLUMN...]",
        value_delimiter = ',',
        help_heading = "Covariates"
    )]
    pub covariates_levels: Vec<String>,
    /// Flag at a Bayesian false-discovery rate Q
    #[arg(
        long_help = "Add `flagged` and `flag_fdr` for the event of --above or --below (give one of them): the groups most probably showing the event are flagged, as many as keep the mean posterior probability of no event among them at most Q (a Bayesian false-discovery rate); `flag_fdr` is the smallest Q that flags the group.",
        long,
        value_name = "Q",
        help_heading = "Analysis"
    )]
    pub flag_fdr: Option<f64>,
    /// Add rank_mean and rank_conservative
    #[arg(
        long_help = "Add `rank_mean` (1 = highest posterior mean) and `rank_conservative` (1 = highest lower interval bound: a group must be reliably high to rank high), over the whole table; ties take the lowest rank of the tie (1, 2, 2, 4).",
        long,
        help_heading = "Analysis"
    )]
    pub ranks: bool,
    /// Rank the lowest rates first (implies --ranks)
    #[arg(
        long_help = "Rank the lowest rates first (implies --ranks; the conservative rank then orders by the upper interval bound), for rates where low is good; with --top, the K lowest are the best.",
        long,
        help_heading = "Analysis"
    )]
    pub rank_lowest_first: bool,
    /// Add prob_top: P(among the K highest)
    #[arg(
        long_help = "Add `prob_top`: each group's posterior probability of being among the K highest rates (the K lowest with --rank-lowest-first), jointly over all groups. K must be below the number of groups.",
        long,
        value_name = "K",
        help_heading = "Analysis"
    )]
    pub top: Option<usize>,
    /// prob_top's method: auto, draws or threshold
    #[arg(long_help = "How prob_top is computed: `draws` (joint draws from every posterior), `threshold` (each group's probability beyond the rate c where K groups are expected beyond it: exact in the limit of many groups), or `auto`: draws up to 50,000 groups (1e8 group draws), the threshold beyond.", long, value_enum, value_name = "METHOD", default_value_t = TopMethodArg::Auto, hide_possible_values = true, hide_default_value = true, help_heading = "Analysis")]
    pub top_method: TopMethodArg,
    /// Draws for prob_top (default: 1e8 / groups)
    #[arg(
        long_help = "Draws for prob_top (default: 1e8 / groups, at least 2,000 and at most 100,000; each draw averages exact posterior tail probabilities: see benches/results/prob-top-accuracy.txt).",
        long,
        value_name = "N",
        help_heading = "Analysis"
    )]
    pub top_draws: Option<usize>,
    /// Seed of every random draw
    #[arg(long_help = "Seed of every random draw: prob_top's and the calibration check's (recorded in the summary); the same seed gives the same bits on any number of threads.", long, value_name = "N", default_value_t = crate::pipeline::DEFAULT_SEED, help_heading = "Analysis")]
    pub seed: u64,
    /// Intervals plug-in (default) or corrected
    #[arg(long_help = "How intervals treat the estimated prior: `plug-in` (as known) or `corrected` (its estimation uncertainty integrated out: the mixture of each group's posteriors over a Gauss-Hermite rule on the fitted prior's sampling distribution, the posterior Kass and Steffey approximate; slower, better coverage when groups are few).", long, value_enum, value_name = "METHOD", default_value_t = IntervalsArg::PlugIn, hide_possible_values = true, hide_default_value = true, help_heading = "Analysis")]
    pub intervals: IntervalsArg,
    /// Credible level, 0 to 1
    #[arg(
        long_help = "Credible level of the equal-tailed intervals, strictly between 0 and 1 (0.95, not 95).",
        long,
        value_name = "P",
        default_value_t = 0.95,
        help_heading = "Analysis"
    )]
    pub level: f64,
    /// Output table (.csv, .parquet or .arrow)
    #[arg(
        long_help = "Output table (.csv, .parquet or .arrow, an Arrow IPC file), written atomically: it appears complete or not at all (not with --pair-counts, which writes only the summary).",
        long,
        value_name = "FILE",
        help_heading = "Output"
    )]
    pub output: Option<PathBuf>,
    /// Also write a pair table, to join back in SQL
    #[arg(
        long_help = "Also write one row per distinct (size, count) pair with the number of groups sharing it and every per-pair output column (.csv or .parquet), to join back to the rows on the two count columns in a warehouse.",
        long,
        value_name = "FILE",
        help_heading = "Output"
    )]
    pub pair_output: Option<PathBuf>,
    /// Summary file (JSON), written last
    #[arg(long, value_name = "FILE", help_heading = "Output")]
    pub summary: Option<PathBuf>,
    /// Also write the HTML report of the run
    #[arg(
        long_help = "Also write the HTML report of the run (read back from the output table, after the table and summary are written).",
        long,
        value_name = "FILE",
        help_heading = "Output"
    )]
    pub report: Option<PathBuf>,
    /// Also write each plot into this folder
    #[arg(
        long_help = "With --report, also write each plot as its own file into this folder (--plot-format).",
        long,
        value_name = "FOLDER",
        requires = "report",
        help_heading = "Output"
    )]
    pub plots: Option<PathBuf>,
    /// svg or png, for --plots
    #[arg(long_help = "The format of the plots written with --plots: svg, or png (rasterised, text in DejaVu Sans).", long, value_enum, value_name = "FORMAT", default_value_t = PlotFormatArg::Svg, hide_possible_values = true, requires = "plots", help_heading = "Output")]
    pub plot_format: PlotFormatArg,
    /// Draw the areas of this map in the report
    #[arg(long_help = concat!("With --report: ", map_help!()), long, value_name = "FILE", requires_all = ["report", "map_key"], help_heading = "Output")]
    pub map: Option<PathBuf>,
    /// The map's property naming each area's group
    #[arg(
        long_help = MAP_KEY_HELP,
        long,
        value_name = "PROPERTY",
        requires = "map",
        help_heading = "Output"
    )]
    pub map_key: Option<String>,
    /// How the run speaks.
    #[command(flatten)]
    pub run: RunArgs,
}

/// The shape of a fitted prior.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum PriorShapeArg {
    /// The model's own law.
    Parametric,
    /// Masses on a grid.
    Free,
}

/// Options of `fit`.
#[derive(Debug, Args)]
pub struct FitArgs {
    /// beta-binomial, gamma-poisson, normal-normal, ...
    #[arg(long_help = "The model: beta-binomial (successes out of trials, Beta prior), gamma-poisson (events over exposure, Gamma prior), normal-normal (estimates with known standard errors, normal prior) or dirichlet-multinomial (ratings counted over K levels, such as stars, Dirichlet prior). It decides which column options apply.", long, value_name = "MODEL", value_parser = parse_fit_model, help_heading = "Model", display_order = 0)]
    pub model: FitModel,
    /// Input, columns and outputs.
    #[command(flatten)]
    pub table: TableArgs,
    /// Count columns, one per level
    #[arg(
        long_help = "The dirichlet-multinomial model's input: one column per level holding each group's count of ratings at that level, in the levels' order (comma-separated names: `stars_1,stars_2,stars_3,stars_4,stars_5`). At least two.",
        long,
        value_name = "COLUMN[,COLUMN...]",
        value_delimiter = ',',
        help_heading = "Star ratings"
    )]
    pub level_counts: Vec<String>,
    /// Each level's score (1, 2, ..., K)
    #[arg(
        long_help = "The score of each level of --level-counts, in the same order (comma-separated numbers, all different; default 1, 2, ..., K). A group's mean score is the sum of its shares times these; --above and --below are thresholds of it.",
        long,
        value_name = "SCORE[,SCORE...]",
        value_delimiter = ',',
        allow_negative_numbers = true,
        help_heading = "Star ratings"
    )]
    pub level_scores: Vec<f64>,
    /// Values of --outcome, one per level
    #[arg(
        long_help = "With --outcome (one row per rating), the values the outcome column holds, one per level, in the levels' order (comma-separated: `1,2,3,4,5`, or `poor,fair,good`). Each group's ratings are counted per level, and the output names each count after the outcome column and the level's value (`stars_1`).",
        long,
        value_name = "VALUE[,VALUE...]",
        value_delimiter = ',',
        help_heading = "Star ratings"
    )]
    pub levels: Vec<String>,
    /// Add prob_share_above for one level
    #[arg(
        long_help = "Add `prob_share_above`: each group's posterior probability that the share of its ratings at one level exceeds P, given as the level's count column and P (`stars_1=0.1`: the share of one-star ratings above 10%, the usual complaint flag). The share's posterior is a Beta law.",
        long,
        value_name = "COLUMN=P",
        help_heading = "Star ratings"
    )]
    pub share_above: Option<String>,
    /// normal-normal's tau^2 by ml (default) or reml
    #[arg(long_help = "How the normal-normal model estimates the prior variance tau^2: `ml` (maximum marginal likelihood) or `reml` (restricted maximum likelihood, which allows for the estimated mean: the usual choice when groups are few).", long, value_enum, value_name = "METHOD", default_value_t = VarianceMethodArg::Ml, hide_possible_values = true, hide_default_value = true, help_heading = "Analysis")]
    pub variance_method: VarianceMethodArg,
    /// parametric (default) or free (any shape)
    #[arg(long_help = "The shape of the prior: `parametric` (the model's own law: Beta, Gamma or normal, with one hump) or `free` (masses on a grid of rates, of any shape, such as two humps; it maximises the same marginal likelihood, and the summary compares it with the parametric prior).", long, value_enum, value_name = "SHAPE", default_value_t = PriorShapeArg::Parametric, hide_possible_values = true, hide_default_value = true, help_heading = "Analysis")]
    pub prior_shape: PriorShapeArg,
    /// Points of a free prior's grid (default 300+)
    #[arg(
        long_help = "The number of points of a free prior's grid, from 10 to 5000. They are evenly spaced from the smallest raw rate to the largest on the scale where a group's sampling noise is the same at every rate (arcsine square root for proportions, square root for rates, the value itself for estimates). By default 300, or more (up to 2000) where the 1% of groups with the least noise need points closer together than their noise.",
        long,
        value_name = "N",
        help_heading = "Analysis"
    )]
    pub grid_points: Option<usize>,
    /// Pull each area toward its neighbours' rate
    #[arg(
        long_help = "A table of neighbouring areas (.csv or .parquet): its first column an area, its second a neighbour, both by the ids of --group (header names free; each pair may be listed once, either way round). Each area's Gamma prior is then fitted by moments to the area and its neighbours (Marshall's local empirical Bayes), so it is pulled toward its neighbourhood's rate, not the whole map's; an area without neighbours takes the prior fitted to all areas. Adds `prior_mean` (the neighbourhood's rate) and `neighbours` (how many). `ratepool neighbours` makes the table from a map.",
        long,
        value_name = "FILE",
        help_heading = "Neighbours"
    )]
    pub neighbours: Option<PathBuf>,
    /// Input is a pair table; COLUMN counts its groups
    #[arg(
        long_help = "The input is a pre-aggregated pair table (one row per distinct pair, as from a SQL GROUP BY) and this column holds how many groups share each pair; only the summary (the prior) is written.",
        long,
        value_name = "COLUMN",
        help_heading = "Input"
    )]
    pub pair_counts: Option<String>,
}

/// Options of `score`.
#[derive(Debug, Args)]
pub struct ScoreArgs {
    /// The model (default: the prior file's)
    #[arg(long_help = "The model; it must be the prior file's (taken from the prior file when omitted).", long, value_name = "MODEL", value_parser = parse_model, help_heading = "Model", display_order = 0)]
    pub model: Option<Model>,
    /// Input, columns and outputs.
    #[command(flatten)]
    pub table: TableArgs,
    /// A summary written by `ratepool fit`: its prior
    #[arg(
        long_help = "A summary file written by `ratepool fit`; its prior (and each segment's) is reused.",
        long,
        value_name = "FILE",
        help_heading = "Input"
    )]
    pub prior: PathBuf,
}

/// A CSV field separator: one ASCII character other than a quote or a line
/// break, or the word `tab` (or `\t`, as typed in many shells).
fn parse_delimiter(text: &str) -> std::result::Result<u8, String> {
    let byte = match text {
        "tab" | "\\t" | "\t" => b'\t',
        _ if text.len() == 1 && text.is_ascii() => text.as_bytes()[0],
        _ => return Err(format!("'{text}' is not one character; give one, such as ';' or tab")),
    };
    if matches!(byte, b'"' | b'\n' | b'\r') {
        return Err("a quote or a line break cannot separate fields".to_string());
    }
    Ok(byte)
}

/// Refuses, before anything is read, a run where an output would overwrite
/// an input, the prior, or another output.
fn refuse_overlaps<'a>(
    table: &'a TableArgs,
    more_inputs: impl IntoIterator<Item = (&'static str, Option<&'a PathBuf>)>,
) -> Result<()> {
    let mut inputs = vec![RunPath { option: "--input", path: &table.input }];
    inputs.extend(
        more_inputs.into_iter().filter_map(|(option, path)| path.map(|path| RunPath { option, path })),
    );
    inputs.extend(table.config.as_deref().map(|path| RunPath { option: "--config", path }));
    inputs.extend(table.map.as_deref().map(|path| RunPath { option: "--map", path }));
    let outputs: Vec<RunPath<'_>> = [
        ("--output", &table.output),
        ("--summary", &table.summary),
        ("--rejects", &table.rejects),
        ("--pair-output", &table.pair_output),
        ("--report", &table.report),
        ("--plots", &table.plots),
    ]
    .into_iter()
    .filter_map(|(option, path)| path.as_deref().map(|path| RunPath { option, path }))
    .collect();
    crate::io::overlap::refuse_overlaps(&inputs, &outputs)
}

/// A model by its name, as every registered model accepts it.
fn parse_model(text: &str) -> std::result::Result<Model, String> {
    Model::from_name(text).ok_or_else(|| {
        let names: Vec<&str> = Model::ALL.iter().map(|m| m.name()).collect();
        format!("unknown model '{text}'; the accepted values: {}", names.join(", "))
    })
}

/// What `fit --model` names: a model of one count and one size per group,
/// or the star-rating model of counts over levels.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum FitModel {
    /// A registered model of (size, count) pairs.
    Pairs(Model),
    /// The Dirichlet-multinomial model over level counts.
    LevelCounts,
}

/// A model of `fit`, by its name.
fn parse_fit_model(text: &str) -> std::result::Result<FitModel, String> {
    if text == crate::pipeline::levels::MODEL_NAME {
        return Ok(FitModel::LevelCounts);
    }
    parse_model(text)
        .map(FitModel::Pairs)
        .map_err(|message| format!("{message}, {}", crate::pipeline::levels::MODEL_NAME))
}

/// The column options, by the role a model gives its columns
/// ([`crate::core::model::ModelTerms`]); a model with a new role adds its
/// option to [`TableArgs`] and a line here.
fn column_options(table: &TableArgs) -> [(&'static str, &Option<String>); 6] {
    [
        ("successes", &table.successes),
        ("trials", &table.trials),
        ("events", &table.events),
        ("exposure", &table.exposure),
        ("estimate", &table.estimate),
        ("std-error", &table.std_error),
    ]
}

/// The one model whose column options are those given, if the options
/// given name one (`--successes` and `--trials`: the beta-binomial).
fn model_of_columns(table: &TableArgs) -> Option<Model> {
    let given: Vec<&str> =
        column_options(table).iter().filter(|(_, value)| value.is_some()).map(|(role, _)| *role).collect();
    let mut fitting = Model::ALL.iter().filter(|model| {
        let terms = model.terms();
        !given.is_empty() && given.iter().all(|role| [terms.count_role, terms.size_role].contains(role))
    });
    match (fitting.next(), fitting.next()) {
        (Some(model), None) => Some(*model),
        _ => None,
    }
}

/// The count and size columns of the model, refusing the options of other
/// models' roles.
fn model_columns(table: &TableArgs, model: Model) -> Result<(String, String)> {
    let terms = model.terms();
    let options = column_options(table);
    let option = |role: &str| options.iter().find(|(r, _)| *r == role).map(|(_, value)| *value);
    for (role, value) in options {
        if role != terms.count_role && role != terms.size_role {
            refuse(value, role, model)?;
        }
    }
    let column = |role: &str| match option(role) {
        Some(value) => required(value, role, model),
        None => Err(Error::Other(format!("no option for the {role} column; please report this"))),
    };
    Ok((column(terms.count_role)?, column(terms.size_role)?))
}

/// The exceedance thresholds, each finite and within the model's range of
/// rates (a proportion from 0 to 1, or a rate of at least 0).
fn thresholds(table: &TableArgs, model: Model) -> Result<Thresholds> {
    let check = |value: Option<f64>, flag: &str| -> Result<Option<f64>> {
        let Some(t) = value else { return Ok(None) };
        if model.terms().rates.contains(t) {
            return Ok(Some(t));
        }
        let range = model.terms().rates.describe();
        Err(Error::Usage(format!("--{flag} must be a rate {range} for the {} model, got {t}", model.name())))
    };
    Ok(Thresholds { above: check(table.above, "above")?, below: check(table.below, "below")? })
}

/// The segment columns of `--by`: each named once, and none of the other
/// columns in play.
fn segment_columns(table: &TableArgs, others: [&String; 3]) -> Result<Vec<String>> {
    for (i, column) in table.by.iter().enumerate() {
        if column.is_empty() {
            return Err(Error::Usage("--by has an empty column name".to_string()));
        }
        if table.by[..i].contains(column) {
            return Err(Error::Usage(format!("--by names the column '{column}' twice")));
        }
        if others.contains(&column) {
            return Err(Error::Usage(format!(
                "--by cannot name '{column}': it is already the group or a count column"
            )));
        }
    }
    Ok(table.by.clone())
}

/// The covariate columns of `--covariates`, `--covariates-log` and
/// `--covariates-levels`: each named once over the three, and none of the
/// other columns in play.
fn covariate_columns(table: &TableArgs, others: [&String; 3]) -> Result<Vec<CovariateColumn>> {
    let named = [
        ("covariates", &table.covariates, CovariateRole::AsRead),
        ("covariates-log", &table.covariates_log, CovariateRole::Log),
        ("covariates-levels", &table.covariates_levels, CovariateRole::Levels),
    ];
    let mut columns: Vec<CovariateColumn> = Vec::new();
    for (flag, names, role) in named {
        for name in names {
            if name.is_empty() {
                return Err(Error::Usage(format!("--{flag} has an empty column name")));
            }
            if columns.iter().any(|c| &c.name == name) {
                return Err(Error::Usage(format!("the covariate column '{name}' is named twice")));
            }
            if others.contains(&name) {
                return Err(Error::Usage(format!(
                    "--{flag} cannot name '{name}': it is already the group or a count column"
                )));
            }
            columns.push(CovariateColumn { name: name.clone(), role });
        }
    }
    Ok(columns)
}

/// The covariates of a run scored with a saved covariate prior: those the
/// prior was fitted with, each entering as it did; covariate options given
/// beside it must name the same columns the same way.
fn saved_covariates(prior: &PriorSource, given: Vec<CovariateColumn>) -> Result<Vec<CovariateColumn>> {
    let PriorSource::Saved { path, summary } = prior else { return Ok(given) };
    let Some(saved) = summary.fitted_prior.covariates() else { return Ok(given) };
    let columns: Vec<CovariateColumn> = saved
        .covariates
        .iter()
        .map(|c| CovariateColumn {
            name: c.column.clone(),
            role: match c.enters_as.as_str() {
                "log" => CovariateRole::Log,
                "levels" => CovariateRole::Levels,
                _ => CovariateRole::AsRead,
            },
        })
        .collect();
    let same = given.is_empty()
        || (given.len() == columns.len()
            && given
                .iter()
                .zip(&columns)
                .all(|(g, c)| g.name == c.name && (g.role == c.role || g.role == CovariateRole::AsRead)));
    if !same {
        let names: Vec<&str> = columns.iter().map(|c| c.name.as_str()).collect();
        return Err(Error::Usage(format!(
            "{}: the prior was fitted with the covariates {}, which score reads as it fitted them; give no covariate options, or these",
            path.display(),
            names.join(", ")
        )));
    }
    Ok(columns)
}

/// Indirect standardisation, when `--population`, `--strata` or
/// `--reference-rates` is given: the standard and the events column, or
/// what is missing or does not combine with it.
fn standardisation(
    table: &TableArgs,
    model: Model,
    pair_counts: bool,
) -> Result<Option<(Standardisation, String)>> {
    if table.population.is_none() && table.strata.is_empty() && table.reference_rates.is_none() {
        return Ok(None);
    }
    let usage = |text: String| Err(Error::Usage(text));
    let Some(population) = table.population.clone() else {
        return usage(
            "--strata and --reference-rates make expected counts from a population: give --population COLUMN"
                .into(),
        );
    };
    if table.strata.is_empty() {
        return usage(
            "--population needs the columns that make a stratum: give --strata COLUMN[,COLUMN...]".into(),
        );
    }
    let terms = model.terms();
    if !terms.count_rule.is_whole() || terms.size_rule.is_whole() {
        return usage(format!(
            "--population makes expected counts for a model of events against exposure ({}), not {}",
            models_where(|t| t.count_rule.is_whole() && !t.size_rule.is_whole()),
            model.name()
        ));
    }
    let refused = [
        (pair_counts, "--pair-counts (a pair table has no strata)"),
        (table.outcome.is_some(), "--outcome"),
        (table.aggregate, "--aggregate (rows by stratum are summed per area already)"),
        (
            table.exposure.is_some(),
            "--exposure (the expected counts are made from --population and --strata)",
        ),
        (
            !table.covariates.is_empty()
                || !table.covariates_log.is_empty()
                || !table.covariates_levels.is_empty(),
            "covariates (not yet)",
        ),
    ];
    if let Some((_, what)) = refused.iter().find(|(given, _)| *given) {
        return usage(format!("--population does not combine with {what}"));
    }
    let Some(events) = table.events.clone() else {
        return usage("--population needs the events column: give --events COLUMN".into());
    };
    for (i, column) in table.strata.iter().enumerate() {
        let clash = [&events, &population].contains(&column) || table.by.contains(column);
        if column.is_empty() || table.strata[..i].contains(column) || clash {
            return usage(format!(
                "--strata: '{column}' is empty, named twice, or also the events, population or a --by column"
            ));
        }
    }
    if population == events {
        return usage(format!("--population '{population}' is also the events column"));
    }
    let standard = Standardisation {
        population,
        strata: table.strata.clone(),
        reference: table.reference_rates.clone(),
    };
    Ok(Some((standard, events)))
}

/// What covariates do not yet combine with, refused with what to do instead.
fn refuse_covariates_with(
    table: &TableArgs,
    covariates: &[CovariateColumn],
    pair_counts: bool,
) -> Result<()> {
    if covariates.is_empty() {
        return Ok(());
    }
    let refusal = if !table.by.is_empty() {
        Some("--by: segments each fit their own prior, covariates one prior for all; name the segment column in --covariates-levels to give each segment its own centre")
    } else if pair_counts {
        Some("--pair-counts: a pair table holds no covariates")
    } else {
        None
    };
    match refusal {
        Some(why) => Err(Error::Usage(format!("covariates do not combine with {why}"))),
        None => Ok(()),
    }
}

/// What the neighbour prior applies to and does not combine with, refused
/// with the reason.
fn refuse_neighbours_with(
    table: &TableArgs,
    (model, neighbours): (Model, Option<&PathBuf>),
    (pair_counts, shape): (bool, PriorShape),
) -> Result<()> {
    if neighbours.is_none() {
        return Ok(());
    }
    if model.terms().local_prior.is_none() {
        return Err(Error::Usage(format!(
            "--neighbours applies to the {} model (areas' events against their expected counts), not {}",
            models_where(|t| t.local_prior.is_some()),
            model.name()
        )));
    }
    let covariates = !table.covariates.is_empty()
        || !table.covariates_log.is_empty()
        || !table.covariates_levels.is_empty();
    let refused = [
        (!table.by.is_empty(), "--by: each area's neighbourhood is its segment"),
        (covariates, "covariates: the neighbourhood's rate is each area's centre"),
        (shape != PriorShape::Parametric, "--prior-shape free: the local priors are Gamma laws fitted by moments"),
        (
            table.intervals == IntervalsArg::Corrected,
            "--intervals corrected: the local moments carry no covariance to correct for",
        ),
        (pair_counts, "--pair-counts: a pair table holds no areas"),
        (
            table.pair_output.is_some(),
            "--pair-output: each area has a prior of its own, so areas with the same counts do not share a row",
        ),
    ];
    match refused.iter().find(|(given, _)| *given) {
        Some((_, why)) => Err(Error::Usage(format!("--neighbours does not combine with {why}"))),
        None => Ok(()),
    }
}

/// What a free prior does not yet combine with, refused with the reason.
fn refuse_free_prior_with(table: &TableArgs, shape: PriorShape) -> Result<()> {
    if shape == PriorShape::Parametric {
        return Ok(());
    }
    let refusal = if !table.covariates.is_empty()
        || !table.covariates_log.is_empty()
        || !table.covariates_levels.is_empty()
    {
        Some("covariates: a free prior has no centre for them to move; segments (--by) give each kind of group its own free prior")
    } else if table.intervals == IntervalsArg::Corrected {
        Some("--intervals corrected: the correction integrates over a parametric prior's two parameters; a free prior's intervals are plug-in")
    } else if table.top.is_some() && table.top_method == TopMethodArg::Draws {
        Some("--top-method draws: the draws of prob_top are from parametric posteriors; a free prior's prob_top is by the threshold method (the default for it)")
    } else {
        None
    };
    match refusal {
        Some(why) => Err(Error::Usage(format!("a free prior does not combine with {why}"))),
        None => Ok(()),
    }
}

/// The shape of the prior a fit looks for.
fn prior_shape_of(args: &FitArgs) -> Result<PriorShape> {
    match (args.prior_shape, args.grid_points) {
        (PriorShapeArg::Parametric, None) => Ok(PriorShape::Parametric),
        (PriorShapeArg::Parametric, Some(_)) => {
            Err(Error::Usage("--grid-points applies to a free prior: give --prior-shape free".to_string()))
        }
        (PriorShapeArg::Free, points) => {
            if let Some(points) = points.filter(|p| !(10..=5000).contains(p)) {
                return Err(Error::Usage(format!("--grid-points must be from 10 to 5000, got {points}")));
            }
            if args.variance_method == VarianceMethodArg::Reml {
                return Err(Error::Usage(
                    "--variance-method reml restricts a normal prior's likelihood; a free prior has no variance parameter to restrict".to_string(),
                ));
            }
            Ok(PriorShape::Free { points })
        }
    }
}

/// The rule of `--top K`.
fn top_rule(table: &TableArgs) -> Result<Option<TopRule>> {
    let Some(k) = table.top else { return Ok(None) };
    if k == 0 {
        return Err(Error::Usage("--top must be at least 1".to_string()));
    }
    if table.top_draws == Some(0) {
        return Err(Error::Usage("--top-draws must be at least 1".to_string()));
    }
    let method = match table.top_method {
        TopMethodArg::Auto => TopChoice::Auto,
        TopMethodArg::Draws => TopChoice::Draws,
        TopMethodArg::Threshold => TopChoice::Threshold,
    };
    Ok(Some(TopRule { k, draws: table.top_draws, method }))
}

/// The flag rule of `--flag-fdr Q`: Q strictly between 0 and 1, for the
/// event of the one threshold given.
fn flag_rule(table: &TableArgs) -> Result<Option<FlagRule>> {
    let Some(bound) = table.flag_fdr else { return Ok(None) };
    if !(bound > 0.0 && bound < 1.0) {
        return Err(Error::Usage(format!("--flag-fdr must be strictly between 0 and 1, got {bound}")));
    }
    let event = match (table.above, table.below) {
        (Some(_), None) => FlagEvent::Above,
        (None, Some(_)) => FlagEvent::Below,
        (None, None) => {
            return Err(Error::Usage(
                "--flag-fdr needs the event to flag: --above T or --below T".to_string(),
            ))
        }
        (Some(_), Some(_)) => {
            return Err(Error::Usage(
                "--flag-fdr flags one event: give --above T or --below T, not both (run twice for both)"
                    .to_string(),
            ))
        }
    };
    Ok(Some(FlagRule { event, bound }))
}

fn required(value: &Option<String>, flag: &str, model: Model) -> Result<String> {
    value.clone().ok_or_else(|| Error::Usage(format!("the {} model needs --{flag} COLUMN", model.name())))
}

fn refuse(value: &Option<String>, flag: &str, model: Model) -> Result<()> {
    match value {
        Some(_) => Err(Error::Usage(format!("--{flag} does not apply to the {} model", model.name()))),
        None => Ok(()),
    }
}

/// What a row is, and the count and size columns (read, or with `--outcome`
/// the names the summed trials are written under).
/// The names of the models whose terms pass `test`, joined by "or".
fn models_where(test: impl Fn(&ModelTerms) -> bool) -> String {
    let names: Vec<&str> = Model::ALL.iter().map(|m| m.terms()).filter(|t| test(t)).map(|t| t.name).collect();
    names.join(" or ")
}

fn rows_and_columns(
    table: &TableArgs,
    model: Model,
    pair_counts: bool,
) -> Result<(Aggregation, String, String)> {
    if let Some((standard, events)) = standardisation(table, model, pair_counts)? {
        return Ok((Aggregation::Standardised(standard), events, "expected".to_string()));
    }
    let refused =
        |what: &str| Err(Error::Usage(format!("{what} does not apply to a pair table (--pair-counts)")));
    match (&table.outcome, table.aggregate) {
        (Some(_), _) | (None, true) if pair_counts => {
            refused(if table.aggregate { "--aggregate" } else { "--outcome" })
        }
        (outcome, true) | (outcome @ Some(_), false) if !model.terms().count_rule.is_whole() => {
            Err(Error::Usage(format!(
                "{} does not apply to the {} model: estimates and their standard errors cannot be summed; give one row per group",
                if outcome.is_some() { "--outcome" } else { "--aggregate" },
                model.name()
            )))
        }
        (Some(column), _) => {
            if !model.terms().size_rule.is_whole() {
                return Err(Error::Usage(format!(
                    "--outcome reads trials of 0 or 1, for the {} model, not {}",
                    models_where(|t| t.size_rule.is_whole()),
                    model.name()
                )));
            }
            let terms = model.terms();
            let named = |role: &str| {
                let given =
                    column_options(table).iter().find(|(r, _)| *r == role).and_then(|(_, v)| (*v).clone());
                given.unwrap_or_else(|| role.to_string())
            };
            let (count, size) = (named(terms.count_role), named(terms.size_role));
            if [&count, &size].contains(&column) {
                return Err(Error::Usage(format!(
                    "--outcome '{column}' is also named as an output count column"
                )));
            }
            Ok((Aggregation::Outcome(column.clone()), count, size))
        }
        (None, aggregate) => {
            let (count, size) = model_columns(table, model)?;
            Ok((if aggregate { Aggregation::Sum } else { Aggregation::Groups }, count, size))
        }
    }
}

/// What to do with invalid rows: stop, or skip them to the rejects file.
fn invalid_rows(table: &TableArgs) -> Result<InvalidRows> {
    match (table.on_invalid, &table.rejects) {
        (InvalidArg::Error, None) => Ok(InvalidRows::Fail),
        (InvalidArg::Error, Some(_)) => Err(Error::Usage("--rejects needs --on-invalid skip".to_string())),
        (InvalidArg::Skip, Some(path)) => Ok(InvalidRows::Skip { rejects: path.clone() }),
        (InvalidArg::Skip, None) => Err(Error::Usage("--on-invalid skip needs --rejects FILE".to_string())),
    }
}

/// The rank columns' order, when asked for.
fn rank_order(table: &TableArgs) -> Option<RankOrder> {
    match (table.ranks, table.rank_lowest_first) {
        (_, true) => Some(RankOrder::LowestFirst),
        (true, false) => Some(RankOrder::HighestFirst),
        (false, false) => None,
    }
}

fn job_of(
    table: &TableArgs,
    (pair_counts, likelihood, prior_shape): (Option<&String>, Likelihood, PriorShape),
    (model, neighbours): (Model, Option<&PathBuf>),
    prior: PriorSource,
) -> Result<Job> {
    refuse_free_prior_with(table, prior_shape)?;
    refuse_neighbours_with(table, (model, neighbours), (pair_counts.is_some(), prior_shape))?;
    let (aggregation, count, size) = rows_and_columns(table, model, pair_counts.is_some())?;
    let invalid = invalid_rows(table)?;
    if let Some(path) = &table.pair_output {
        crate::io::TableFormat::from_path(path)?;
    }
    let (group, layout) = layout_of(table, pair_counts)?;
    let segments = segment_columns(table, [&group, &count, &size])?;
    let covariates = covariate_columns(table, [&group, &count, &size])?;
    let covariates = saved_covariates(&prior, covariates)?;
    refuse_covariates_with(table, &covariates, pair_counts.is_some())?;
    Ok(Job {
        input: TableSource::File(table.input.clone()),
        model,
        columns: ColumnNames { group, count, size },
        layout,
        summary: table.summary.clone(),
        level: Level::new(table.level)?,
        delimiter: table.delimiter,
        thresholds: thresholds(table, model)?,
        flag_fdr: flag_rule(table)?,
        segments,
        min_groups: table.min_groups.unwrap_or(crate::pipeline::DEFAULT_MIN_GROUPS),
        covariates,
        neighbours: neighbours.cloned(),
        memory_budget: table.memory_budget.max(1).saturating_mul(1 << 20),
        aggregation,
        top: top_rule(table)?,
        seed: table.seed,
        intervals: match table.intervals {
            IntervalsArg::PlugIn => Intervals::PlugIn,
            IntervalsArg::Corrected => Intervals::Corrected,
        },
        likelihood,
        prior_shape,
        pair_output: table.pair_output.clone(),
        ranks: rank_order(table),
        invalid,
        prior,
    })
}

/// The input layout and the group column (the group-count column for a pair table).
fn layout_of(table: &TableArgs, pair_counts: Option<&String>) -> Result<(String, Layout)> {
    if let Some(weights) = pair_counts {
        let refused = [
            (table.group.is_some(), "--group"),
            (table.output.is_some(), "--output"),
            (table.on_invalid == InvalidArg::Skip, "--on-invalid skip"),
            (table.report.is_some(), "--report"),
        ];
        if let Some((_, flag)) = refused.iter().find(|(given, _)| *given) {
            return Err(Error::Usage(format!("{flag} does not apply to a pair table (--pair-counts)")));
        }
        if table.summary.is_none() {
            return Err(Error::Usage(
                "--pair-counts writes only the summary: give --summary FILE".to_string(),
            ));
        }
        return Ok((weights.clone(), Layout::PairCounts { weights: weights.clone() }));
    }
    let group = table.group.clone().ok_or_else(|| Error::Usage("--group COLUMN is required".to_string()))?;
    let output = table.output.clone().ok_or_else(|| Error::Usage("--output FILE is required".to_string()))?;
    crate::io::TableFormat::from_path(&output)?;
    let layout = Layout::Groups { output, batch_rows: table.batch_rows.max(1) };
    Ok((group, layout))
}

/// Writes generated text to stdout; a reader that stopped early (`| head`) is no error.
fn print_bytes(bytes: &[u8], what: &str) -> Result<()> {
    use std::io::Write;
    match std::io::stdout().write_all(bytes) {
        Err(e) if e.kind() != std::io::ErrorKind::BrokenPipe => {
            Err(Error::io(format!("cannot write {what}"), e))
        }
        _ => Ok(()),
    }
}

/// A line of plain text as roff shows it: backslashes and hyphens
/// escaped, and a leading dot or quote kept from reading as a request.
fn roff_line(line: &str) -> String {
    let escaped = line.replace('\\', "\\e").replace('-', "\\-");
    if escaped.starts_with(['.', '\'']) {
        format!("\\&{escaped}")
    } else {
        escaped
    }
}

/// The manual page: clap's sections from the definition, then the exit
/// status and the worked examples of each subcommand.
fn manual_page() -> Result<Vec<u8>> {
    use clap::CommandFactory;
    let man = clap_mangen::Man::new(Cli::command());
    let mut text = Vec::new();
    let failed = |e| Error::io("cannot render the manual page", e);
    man.render_title(&mut text).map_err(failed)?;
    man.render_name_section(&mut text).map_err(failed)?;
    man.render_synopsis_section(&mut text).map_err(failed)?;
    man.render_description_section(&mut text).map_err(failed)?;
    man.render_options_section(&mut text).map_err(failed)?;
    man.render_subcommands_section(&mut text).map_err(failed)?;
    let mut roff = String::from(".SH \"EXIT STATUS\"\n");
    for line in EXIT_STATUS.lines().skip(1) {
        match line.trim_start().split_once("  ") {
            Some((code, meaning)) if code.len() == 1 => {
                roff.push_str(&format!(".TP\n\\fB{code}\\fR\n{}\n", roff_line(meaning)));
            }
            _ => roff.push_str(&format!(".PP\n{}\n", roff_line(line))),
        }
    }
    roff.push_str(".SH EXAMPLES\n");
    for (command, examples) in EXAMPLES {
        roff.push_str(&format!(".SS {command}\n.nf\n"));
        for line in examples.lines().skip(1) {
            roff.push_str(&roff_line(line));
            roff.push('\n');
        }
        roff.push_str(".fi\n");
    }
    text.extend_from_slice(roff.as_bytes());
    man.render_version_section(&mut text).map_err(failed)?;
    Ok(text)
}

/// `check-config`: every mistake of a job file, or what it describes. The
/// file's arguments are parsed and validated into a job as a run would, and
/// nothing runs.
fn check_job_file(path: &std::path::Path, asked: Option<&str>) -> Result<String> {
    use crate::config::{mistakes_error, JobFile};
    use clap::{CommandFactory, Parser};
    let file = JobFile::read(path)?;
    // The subcommand asked for, else the file's `command` key, else fit.
    let command = asked.or(file.command()).unwrap_or("fit");
    let arguments = file.arguments(&Cli::command(), command).map_err(|m| mistakes_error(path, &m))?;
    let mut full = vec!["ratepool".to_string(), command.to_string()];
    full.extend(arguments.iter().cloned());
    let cli = Cli::try_parse_from(&full)
        .map_err(|e| mistakes_error(path, &[file.mistake_of(&clap_message(&e))]))?;
    cli.command.validate().map_err(|e| mistakes_error(path, &[file.mistake_of(&e.to_string())]))?;
    Ok(format!("{}: a valid `{command}` job ({} keys)", path.display(), file.keys()))
}

/// Runs a star-rating job on `table`'s input (through `source`, which may
/// put a library caller's table in its place); what it wrote.
fn run_level_job(
    mut job: crate::pipeline::levels::LevelJob,
    table: &TableArgs,
    source: impl Fn(&PathBuf) -> TableSource,
    observer: &mut dyn crate::pipeline::RunObserver,
) -> Result<Outcome> {
    job.input = source(&table.input);
    let summary = crate::pipeline::levels::run_levels(&job, observer)?;
    let mut outputs = vec![job.output.clone()];
    outputs.extend(table.rejects.clone());
    outputs.extend(job.pair_output.clone());
    outputs.extend(job.summary.clone());
    if let Some(html) = &table.report {
        crate::view::levels::write_level_report(&crate::view::ReportRequest {
            table: &job.output,
            summary: &summary,
            output: html,
            plots: table.plots.as_deref(),
            plot_format: table.plot_format.format(),
            seed: job.seed,
            map: None,
        })
        .map_err(report_failed)?;
        outputs.push(html.clone());
        outputs.extend(table.plots.clone());
    }
    Ok(Outcome { summary: None, levels: Some(summary), outputs })
}

/// A report that failed after its run's table and summary were committed.
fn report_failed(e: Error) -> Error {
    Error::Other(format!("the table and summary were written, but not the report: {e}"))
}

/// A summary file, read once: a star-rating run's, or any other model's
/// (left as JSON until it is wanted, [`not_a_summary`] its fault).
enum SummaryFile {
    Levels(Box<crate::summary::LevelSummary>),
    Scalar(serde_json::Value),
}

/// The fault of a file that is not a summary.
fn not_a_summary(path: &Path, e: &dyn std::fmt::Display) -> Error {
    Error::Input(format!("{}: not a ratepool summary file: {e}", path.display()))
}

/// The summary in `path` (the `role` it plays, for messages), told apart by its `model` key.
fn read_summary(path: &Path, role: &str) -> Result<SummaryFile> {
    let text = std::fs::read_to_string(path)
        .map_err(|e| Error::Input(format!("{}: cannot read the {role}: {e}", path.display())))?;
    let value: serde_json::Value = serde_json::from_str(&text).map_err(|e| not_a_summary(path, &e))?;
    if value.get("model").and_then(serde_json::Value::as_str) != Some(crate::pipeline::levels::MODEL_NAME) {
        return Ok(SummaryFile::Scalar(value));
    }
    serde_json::from_value(value)
        .map(|s| SummaryFile::Levels(Box::new(s)))
        .map_err(|e| not_a_summary(path, &e))
}

impl Command {
    /// Checks a fit or score as it would run, reading nothing but a saved
    /// prior: the star-rating model's own job, or every other model's.
    fn validate(self) -> Result<()> {
        match &self {
            Command::Fit(args) if args.model == FitModel::LevelCounts => level_job_of(args).map(|_| ()),
            Command::Score(args) => match read_summary(&args.prior, "prior file")? {
                SummaryFile::Levels(saved) => level_score_job_of(args, *saved).map(|_| ()),
                SummaryFile::Scalar(saved) => self.into_job_with(Some(saved)).map(|_| ()),
            },
            _ => self.into_job().map(|_| ()),
        }
    }
}

/// Writes the HTML report of `report` from its table and summary.
fn run_report(args: &ReportArgs) -> Result<()> {
    let inputs = [
        RunPath { option: "--table", path: &args.table },
        RunPath { option: "--summary", path: &args.summary },
    ];
    let mut outputs = vec![RunPath { option: "--output", path: &args.output }];
    outputs.extend(args.plots.as_deref().map(|path| RunPath { option: "--plots", path }));
    let mut inputs = inputs.to_vec();
    inputs.extend(args.map.as_deref().map(|path| RunPath { option: "--map", path }));
    crate::io::overlap::refuse_overlaps(&inputs, &outputs)?;
    let shown = report_map(args.map.as_deref(), args.map_key.as_deref())?;
    fn request<'a, S>(
        args: &'a ReportArgs,
        summary: &'a S,
        map: Option<&'a crate::view::map::ReportMap>,
    ) -> crate::view::ReportRequest<'a, S> {
        crate::view::ReportRequest {
            table: &args.table,
            summary,
            output: &args.output,
            plots: args.plots.as_deref(),
            plot_format: args.plot_format.format(),
            seed: args.seed,
            map,
        }
    }
    match read_summary(&args.summary, "summary file")? {
        SummaryFile::Levels(stars) => {
            crate::view::levels::write_level_report(&request(args, &stars, shown.as_ref()))
        }
        SummaryFile::Scalar(value) => {
            let summary = serde_json::from_value(value).map_err(|e| not_a_summary(&args.summary, &e))?;
            crate::view::write_report(&request(args, &summary, shown.as_ref()))
        }
    }
}

/// The map of `--map FILE --map-key PROPERTY`, read (and a bad one refused)
/// before anything is written.
fn report_map(path: Option<&Path>, key: Option<&str>) -> Result<Option<crate::view::map::ReportMap>> {
    let (Some(path), Some(key)) = (path, key) else { return Ok(None) };
    let areas = crate::io::geojson::read_map(path, key)?;
    Ok(Some(crate::view::map::ReportMap { file: path.display().to_string(), key: key.to_string(), areas }))
}

/// `neighbours`: the map's areas, their neighbour pairs written as a table;
/// returns what was found, in words.
fn run_neighbours(args: &NeighboursArgs) -> Result<String> {
    use crate::core::contiguity::{neighbour_pairs, Contiguity};
    use crate::io::sink::{write_table, ColumnValues};
    let inputs = [RunPath { option: "--map", path: &args.map }];
    let outputs = [RunPath { option: "--output", path: &args.output }];
    crate::io::overlap::refuse_overlaps(&inputs, &outputs)?;
    crate::io::TableFormat::from_path(&args.output)?;
    let (keys, rings): (Vec<String>, Vec<_>) =
        crate::io::geojson::read_map(&args.map, &args.key)?.into_iter().map(|a| (a.key, a.rings)).unzip();
    let (rule, word) = if args.rook { (Contiguity::Rook, "rook") } else { (Contiguity::Queen, "queen") };
    let pairs = neighbour_pairs(&rings, rule);
    let mut alone = vec![true; keys.len()];
    for &(a, b) in &pairs {
        alone[a as usize] = false;
        alone[b as usize] = false;
    }
    let text = |pick: fn(&(u32, u32)) -> u32| -> ColumnValues {
        let keys: arrow_array::StringArray =
            pairs.iter().map(|p| Some(keys[pick(p) as usize].as_str())).collect();
        ColumnValues::Arrow(std::sync::Arc::new(keys))
    };
    let columns = vec![("area".to_string(), text(|p| p.0)), ("neighbour".to_string(), text(|p| p.1))];
    let mut staged = crate::io::atomic::StagedOutputs::default();
    staged.add(write_table(columns, &args.output, Vec::new())?);
    staged.commit()?;
    let isolated: Vec<&str> =
        keys.iter().zip(&alone).filter(|(_, &alone)| alone).map(|(key, _)| key.as_str()).collect();
    let plural = if pairs.len() == 1 { "pair" } else { "pairs" };
    let mut words = format!("{} areas, {} neighbour {plural} ({word} contiguity)", keys.len(), pairs.len());
    if !isolated.is_empty() {
        words.push_str(&format!("; {} without neighbours: {}", isolated.len(), isolated.join(", ")));
    }
    Ok(words)
}

/// What the star-rating model does not (yet) take of the options `fit` and
/// `score` share, and `more` of the command's own, refused by name.
fn refuse_for_levels(table: &TableArgs, more: &[(bool, &str)]) -> Result<()> {
    use crate::pipeline::levels::MODEL_NAME;
    let refused = [
        (table.population.is_some(), "--population"),
        (table.aggregate, "--aggregate"),
        (table.successes.is_some(), "--successes"),
        (table.trials.is_some(), "--trials"),
        (table.events.is_some(), "--events"),
        (table.exposure.is_some(), "--exposure"),
        (table.estimate.is_some(), "--estimate"),
        (table.std_error.is_some(), "--std-error"),
        (!table.covariates.is_empty() || !table.covariates_log.is_empty(), "--covariates"),
        (table.top_method == TopMethodArg::Draws, "--top-method draws (prob_top is by the threshold method)"),
        (table.top_draws.is_some(), "--top-draws (prob_top is by the threshold method)"),
        (table.intervals == IntervalsArg::Corrected, "--intervals corrected"),
        (table.map.is_some(), "--map"),
    ];
    if let Some((_, flag)) = refused.iter().chain(more).find(|(given, _)| *given) {
        return Err(Error::Usage(format!("{flag} does not apply to the {MODEL_NAME} model (yet)")));
    }
    Ok(())
}

/// The star-rating job of `fit --model dirichlet-multinomial`: its columns
/// and scores checked, and every option it does not (yet) take refused by name.
fn level_job_of(args: &FitArgs) -> Result<crate::pipeline::levels::LevelJob> {
    use crate::pipeline::levels::{MAX_LEVELS, MODEL_NAME};
    let table = &args.table;
    refuse_overlaps(table, [])?;
    refuse_for_levels(
        table,
        &[
            (args.pair_counts.is_some(), "--pair-counts"),
            (args.prior_shape == PriorShapeArg::Free, "--prior-shape free"),
            (args.grid_points.is_some(), "--grid-points"),
            (args.neighbours.is_some(), "--neighbours"),
            (args.variance_method == VarianceMethodArg::Reml, "--variance-method reml"),
        ],
    )?;
    let outcome = match (&table.outcome, args.levels.is_empty(), args.level_counts.is_empty()) {
        (None, true, _) => None,
        (None, false, _) => return Err(Error::Usage("--levels names the values of --outcome COLUMN: give it too".to_string())),
        (Some(_), _, false) => {
            return Err(Error::Usage(
                "give --level-counts (a count column per level) or --outcome with --levels (one row per rating), not both"
                    .to_string(),
            ))
        }
        (Some(_), true, true) => {
            return Err(Error::Usage("--outcome with the dirichlet-multinomial model needs --levels VALUE,VALUE,...: the value of each level, in order".to_string()))
        }
        (Some(column), false, true) => {
            for (i, value) in args.levels.iter().enumerate() {
                if value.is_empty() || args.levels[..i].contains(value) {
                    return Err(Error::Usage(format!("--levels names '{value}' twice or empty")));
                }
            }
            Some((column.clone(), args.levels.clone()))
        }
    };
    let levels = match &outcome {
        Some((column, values)) => values.iter().map(|v| format!("{column}_{v}")).collect(),
        None => args.level_counts.clone(),
    };
    if levels.len() < 2 {
        return Err(Error::Usage(format!(
            "the {MODEL_NAME} model needs at least two levels (--level-counts columns, or --levels values with --outcome), got {}",
            levels.len()
        )));
    }
    if levels.len() > MAX_LEVELS {
        return Err(Error::Usage(format!(
            "--level-counts takes at most {MAX_LEVELS} columns, got {}",
            levels.len()
        )));
    }
    for (i, column) in levels.iter().enumerate() {
        if column.is_empty() || levels[..i].contains(column) {
            return Err(Error::Usage(format!("--level-counts names '{column}' twice or empty")));
        }
    }
    let scores = if args.level_scores.is_empty() {
        (1..=levels.len()).map(|k| k as f64).collect()
    } else {
        args.level_scores.clone()
    };
    if scores.len() != levels.len() {
        return Err(Error::Usage(format!(
            "--level-scores gives {} scores for {} level columns; give one per column",
            scores.len(),
            levels.len()
        )));
    }
    if let Some(bad) = scores.iter().find(|s| !s.is_finite() || s.abs() > 1e12) {
        return Err(Error::Usage(format!("--level-scores must be finite numbers within ±1e12, got {bad}")));
    }
    for (i, score) in scores.iter().enumerate() {
        if scores[..i].contains(score) {
            return Err(Error::Usage(format!(
                "--level-scores gives the score {score} twice; each level needs its own"
            )));
        }
    }
    let spec = LevelSpec { levels, outcome, scores, share_above: args.share_above.as_deref() };
    level_job(table, spec, None)
}

/// What a star-rating job reads and scores.
struct LevelSpec<'a> {
    levels: Vec<String>,
    outcome: Option<(String, Vec<String>)>,
    scores: Vec<f64>,
    share_above: Option<&'a str>,
}

/// The star-rating job of `spec` with the options `fit` and `score` share;
/// `prior` a saved one to score with.
fn level_job(
    table: &TableArgs,
    spec: LevelSpec<'_>,
    prior: Option<crate::pipeline::levels::SavedLevelPrior>,
) -> Result<crate::pipeline::levels::LevelJob> {
    use crate::pipeline::levels::{LevelJob, MODEL_NAME};
    let LevelSpec { levels, outcome, scores, share_above } = spec;
    if let Some(path) = &table.pair_output {
        crate::io::TableFormat::from_path(path)?;
    }
    let (low, high) =
        scores.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(l, h), &s| (l.min(s), h.max(s)));
    for (value, flag) in [(table.above, "above"), (table.below, "below")] {
        if let Some(t) = value.filter(|t| !(t.is_finite() && (low..=high).contains(t))) {
            return Err(Error::Usage(format!(
                "--{flag} is a mean score for the {MODEL_NAME} model, from {low} to {high} (the level scores), got {t}"
            )));
        }
    }
    let share_above = match share_above {
        None => None,
        Some(text) => {
            let parsed = text.split_once('=').and_then(|(column, p)| {
                let level = levels.iter().position(|c| c == column)?;
                let share: f64 = p.trim().parse().ok()?;
                (share > 0.0 && share < 1.0).then_some((level, share))
            });
            Some(parsed.ok_or_else(|| {
                Error::Usage(format!(
                    "--share-above takes a level column and a share strictly between 0 and 1, as {}=0.1; got '{text}'",
                    levels[0]
                ))
            })?)
        }
    };
    let (group, Layout::Groups { output, batch_rows }) = layout_of(table, None)? else {
        unreachable!("without --pair-counts the layout is groups")
    };
    if levels.contains(&group) {
        return Err(Error::Usage(format!("--group '{group}' is also a level column")));
    }
    for (i, column) in table.by.iter().enumerate() {
        if column.is_empty() || table.by[..i].contains(column) || *column == group || levels.contains(column)
        {
            return Err(Error::Usage(format!(
                "--by names '{column}' twice, empty, or as the group or a level column"
            )));
        }
    }
    let invalid = invalid_rows(table)?;
    Ok(LevelJob {
        input: TableSource::File(table.input.clone()),
        delimiter: table.delimiter,
        group,
        levels,
        outcome,
        scores,
        output,
        batch_rows,
        summary: table.summary.clone(),
        level: Level::new(table.level)?,
        thresholds: Thresholds { above: table.above, below: table.below },
        share_above,
        flag_fdr: flag_rule(table)?,
        ranks: rank_order(table),
        top: top_rule(table)?.map(|rule| rule.k),
        pair_output: table.pair_output.clone(),
        invalid,
        id_memory: table.memory_budget.max(1).saturating_mul(1 << 20) / 2,
        prior,
        seed: table.seed,
        segments: table.by.clone(),
        min_groups: table.min_groups.unwrap_or(crate::pipeline::DEFAULT_MIN_GROUPS),
    })
}

/// The star-rating job of `score --prior` with a star-rating fit's summary:
/// the count columns and scores the prior was fitted with.
fn level_score_job_of(
    args: &ScoreArgs,
    saved: crate::summary::LevelSummary,
) -> Result<crate::pipeline::levels::LevelJob> {
    let table = &args.table;
    refuse_overlaps(table, [("--prior", Some(&args.prior))])?;
    refuse_for_levels(
        table,
        &[(
            table.min_groups.is_some(),
            "--min-groups (a saved prior per segment is used whatever its groups)",
        )],
    )?;
    if let Some(model) = args.model.filter(|m| m.name() != saved.model) {
        return Err(Error::Usage(format!(
            "{}: the prior file holds a {} prior and this run asks for a {} one",
            args.prior.display(),
            saved.model,
            model.name()
        )));
    }
    if table.outcome.is_some() {
        return Err(Error::Usage(format!(
            "{}: score reads one row per group with the count columns the prior was fitted with ({}), not one row per rating",
            args.prior.display(),
            saved.levels.iter().map(|l| l.column.as_str()).collect::<Vec<_>>().join(", ")
        )));
    }
    let spec = LevelSpec {
        levels: saved.levels.iter().map(|l| l.column.clone()).collect(),
        outcome: None,
        scores: saved.levels.iter().map(|l| l.score).collect(),
        share_above: None,
    };
    let prior =
        crate::pipeline::levels::SavedLevelPrior { path: args.prior.clone(), summary: Box::new(saved) };
    level_job(table, spec, Some(prior))
}

impl Command {
    /// Runs the command: a fit or a score (with its report when asked for),
    /// or a report of an earlier run. Returns the summary of a fit or score.
    pub fn execute(self, watch: Watch) -> Result<Outcome> {
        self.execute_with(None, &mut Terminal::new(watch))
    }

    /// Runs the command as [`Command::execute`] does, for a library caller:
    /// a fit or score reads `memory` in place of the `--input` file when one
    /// is given, and `observer` watches the run (and may stop it).
    pub fn execute_with(
        self,
        memory: Option<std::sync::Arc<crate::io::input::MemoryTable>>,
        observer: &mut dyn crate::pipeline::RunObserver,
    ) -> Result<Outcome> {
        let source = |path: &PathBuf| match &memory {
            Some(table) => TableSource::Memory(table.clone()),
            None => TableSource::File(path.clone()),
        };
        // A score's prior file is read once: the star-rating model's runs
        // apart, any other model's job is made from it.
        let (table, saved) = match &self {
            Command::Report(args) => {
                run_report(args)?;
                let mut outputs = vec![args.output.clone()];
                outputs.extend(args.plots.clone());
                return Ok(Outcome { summary: None, levels: None, outputs });
            }
            Command::CheckConfig(args) => {
                println!("{}", check_job_file(&args.file, args.command.as_deref())?);
                return Ok(Outcome { summary: None, levels: None, outputs: Vec::new() });
            }
            Command::Neighbours(args) => {
                println!("{}", run_neighbours(args)?);
                return Ok(Outcome { summary: None, levels: None, outputs: vec![args.output.clone()] });
            }
            Command::Completions { shell } => {
                use clap::CommandFactory;
                let mut text = Vec::new();
                clap_complete::generate(*shell, &mut Cli::command(), "ratepool", &mut text);
                print_bytes(&text, "the completion script")?;
                return Ok(Outcome { summary: None, levels: None, outputs: Vec::new() });
            }
            Command::Manpage => {
                print_bytes(&manual_page()?, "the manual page")?;
                return Ok(Outcome { summary: None, levels: None, outputs: Vec::new() });
            }
            Command::Fit(args) if args.model == FitModel::LevelCounts => {
                return run_level_job(level_job_of(args)?, &args.table, source, observer);
            }
            Command::Fit(args) => (&args.table, None),
            Command::Score(args) => match read_summary(&args.prior, "prior file")? {
                SummaryFile::Levels(saved) => {
                    return run_level_job(level_score_job_of(args, *saved)?, &args.table, source, observer)
                }
                SummaryFile::Scalar(saved) => (&args.table, Some(saved)),
            },
        };
        let report = table.report.clone().map(|html| (html, table.plots.clone()));
        let plot_format = table.plot_format.format();
        let mut outputs: Vec<PathBuf> = [&table.output, &table.rejects, &table.pair_output, &table.summary]
            .into_iter()
            .flatten()
            .cloned()
            .collect();
        let input = source(&table.input);
        let shown = report_map(table.map.as_deref(), table.map_key.as_deref())?;
        let mut job = self.into_job_with(saved)?;
        job.input = input;
        let summary = crate::pipeline::run(&job, observer)?;
        if let (Some((html, plots)), Layout::Groups { output, .. }) = (report, &job.layout) {
            crate::view::write_report(&crate::view::ReportRequest {
                table: output,
                summary: &summary,
                output: &html,
                plots: plots.as_deref(),
                plot_format,
                seed: job.seed,
                map: shown.as_ref(),
            })
            .map_err(report_failed)?;
            outputs.push(html);
            outputs.extend(plots);
        }
        Ok(Outcome { summary: Some(summary), levels: None, outputs })
    }

    /// Validates the arguments into a job (reading the prior file for `score`).
    pub fn into_job(self) -> Result<Job> {
        self.into_job_with(None)
    }

    /// [`Command::into_job`], a score's prior file already read as `saved`
    /// (read here when None).
    fn into_job_with(self, saved: Option<serde_json::Value>) -> Result<Job> {
        match self {
            Command::Report(_)
            | Command::Neighbours(_)
            | Command::CheckConfig(_)
            | Command::Completions { .. }
            | Command::Manpage => Err(Error::Usage("this command runs no fit".to_string())),
            Command::Fit(args) => {
                refuse_overlaps(&args.table, [("--neighbours", args.neighbours.as_ref())])?;
                let FitModel::Pairs(model) = args.model else {
                    return Err(Error::Usage(
                        "the dirichlet-multinomial model runs through its own job".to_string(),
                    ));
                };
                if !args.level_counts.is_empty()
                    || !args.level_scores.is_empty()
                    || args.share_above.is_some()
                {
                    return Err(Error::Usage(format!(
                        "--level-counts, --level-scores and --share-above apply to the dirichlet-multinomial model, not {}",
                        model.name()
                    )));
                }
                let likelihood = match args.variance_method {
                    VarianceMethodArg::Ml => Likelihood::Marginal,
                    VarianceMethodArg::Reml if model.terms().restricted_likelihood => Likelihood::Restricted,
                    VarianceMethodArg::Reml => {
                        return Err(Error::Usage(format!(
                            "--variance-method reml applies to the {} model, not {}",
                            models_where(|t| t.restricted_likelihood),
                            model.name()
                        )))
                    }
                };
                let rows = (args.pair_counts.as_ref(), likelihood, prior_shape_of(&args)?);
                job_of(&args.table, rows, (model, args.neighbours.as_ref()), PriorSource::Fit)
            }
            Command::Score(args) => {
                if args.table.min_groups.is_some() {
                    return Err(Error::Usage(
                        "--min-groups applies when fitting: a score takes each segment's prior from the prior file as it was fitted".to_string(),
                    ));
                }
                refuse_overlaps(&args.table, [("--prior", Some(&args.prior))])?;
                let summary = match saved {
                    Some(value) => {
                        serde_json::from_value(value).map_err(|e| not_a_summary(&args.prior, &e))?
                    }
                    None => load_summary(&args.prior)?,
                };
                let saved = Model::from_name(&summary.model).ok_or_else(|| {
                    Error::Input(format!(
                        "{}: unknown model '{}' in the prior file",
                        args.prior.display(),
                        summary.model
                    ))
                })?;
                let asked = args.model.or_else(|| model_of_columns(&args.table));
                if let Some(asked) = asked.filter(|asked| *asked != saved) {
                    return Err(Error::Usage(format!(
                        "{}: the prior file holds a {} prior and this run asks for a {} one; score with the model the prior was fitted with, or fit a {} prior first",
                        args.prior.display(),
                        saved.name(),
                        asked.name(),
                        asked.name()
                    )));
                }
                let model = args.model.unwrap_or(saved);
                // A saved free prior refuses what a free fit refuses.
                let shape = match summary.fitted_prior.free_part() {
                    Some(free) => PriorShape::Free { points: Some(free.grid.len()) },
                    None => PriorShape::Parametric,
                };
                if let Some(hoods) = &summary.neighbourhood {
                    return Err(Error::Usage(format!(
                        "{}: the prior was fitted with the neighbour table {}: each area's prior came from its neighbours' data, which the summary does not hold; fit again with --neighbours on these areas",
                        args.prior.display(),
                        hoods.file
                    )));
                }
                job_of(
                    &args.table,
                    (None, Likelihood::Marginal, shape),
                    (model, None),
                    PriorSource::Saved { path: args.prior.clone(), summary: Box::new(summary) },
                )
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use clap::CommandFactory;

    #[test]
    fn the_flag_definitions_are_consistent() {
        Cli::command().debug_assert();
    }

    #[test]
    fn every_model_names_columns_that_have_options() {
        let roles: Vec<&str> = column_options(
            &Cli::try_parse_from(["ratepool", "fit", "--model", "beta-binomial", "--input", "x.csv"])
                .map(|cli| match cli.command {
                    Command::Fit(args) => args.table,
                    Command::Score(args) => args.table,
                    _ => unreachable!("a fit was parsed"),
                })
                .expect("parses"),
        )
        .iter()
        .map(|(role, _)| *role)
        .collect();
        for model in Model::ALL {
            assert_eq!(parse_model(model.name()), Ok(*model));
            for role in [model.terms().count_role, model.terms().size_role] {
                assert!(roles.contains(&role), "{}: no option --{role}", model.name());
            }
        }
        assert!(parse_model("beta-poisson")
            .unwrap_err()
            .contains("beta-binomial, gamma-poisson, normal-normal"));
    }

    #[test]
    fn delimiters_are_one_character_or_tab() {
        assert_eq!(parse_delimiter(";"), Ok(b';'));
        assert_eq!(parse_delimiter("tab"), Ok(b'\t'));
        assert_eq!(parse_delimiter("\\t"), Ok(b'\t'));
        assert!(parse_delimiter(";;").is_err());
        assert!(parse_delimiter("\"").is_err());
    }
}
