//! The end-to-end job: read, validate, aggregate to pairs, fit (or load a
//! prior), score every group, and write the table, the rejects and the
//! summary, in that order.

pub mod validate;

use crate::core::diagnostics::{pull, PairOutcome};
use crate::core::fit::{fit, Boundary, Fit, FitFailure};
use crate::core::model::beta_binomial::BetaBinomial;
use crate::core::model::gamma_poisson::GammaPoisson;
use crate::core::model::{Family, Posterior, Prior, Unidentifiable};
use crate::core::pairs::PairTable;
use crate::error::{Error, Result};
use crate::io::atomic::write_bytes_atomically;
use crate::io::frame::{write_plain, InputTable};
use crate::io::sink::ColumnValues;
use crate::report::{BetaPrior, FitReport, GammaPrior, Hyperprior, PullReport, Summary, TestReport};
use rayon::prelude::*;
use std::path::{Path, PathBuf};
use validate::{validate, ColumnNames, Rejection, SizeKind, ValidRows};

/// The two models.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ModelKind {
    /// Successes out of trials.
    BetaBinomial,
    /// Events over exposure.
    GammaPoisson,
}

impl ModelKind {
    /// The model's name in files and on the command line.
    pub fn name(self) -> &'static str {
        match self {
            ModelKind::BetaBinomial => BetaBinomial::NAME,
            ModelKind::GammaPoisson => GammaPoisson::NAME,
        }
    }

    /// The model of a name, as written by [`ModelKind::name`].
    pub fn from_name(name: &str) -> Option<Self> {
        [ModelKind::BetaBinomial, ModelKind::GammaPoisson].into_iter().find(|m| m.name() == name)
    }
}

/// A credible level strictly between 0 and 1.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Level(f64);

impl Level {
    /// Validates a credible level.
    pub fn new(level: f64) -> Result<Self> {
        if level > 0.0 && level < 1.0 {
            Ok(Level(level))
        } else {
            Err(Error::Usage(format!("--level must be strictly between 0 and 1, got {level}")))
        }
    }

    /// The level.
    pub fn get(self) -> f64 {
        self.0
    }

    /// Probability left in each tail of the equal-tailed interval.
    pub fn tail(self) -> f64 {
        (1.0 - self.0) / 2.0
    }
}

/// What to do with rows that fail validation.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum InvalidRows {
    /// Stop with an error naming the first bad row; write nothing.
    Fail,
    /// Leave them out, write them with a reason to this file, and go on.
    Skip {
        /// Where the rejected rows go.
        rejects: PathBuf,
    },
}

/// Where the prior comes from.
#[derive(Debug, Clone, PartialEq)]
pub enum PriorSource {
    /// Fit it to this input.
    Fit,
    /// Reuse one saved in a summary file.
    Saved {
        /// The file it was read from.
        path: PathBuf,
        /// The summary it was read from.
        summary: Box<Summary>,
    },
}

/// A fully validated job.
#[derive(Debug, Clone, PartialEq)]
pub struct Job {
    /// Input table.
    pub input: PathBuf,
    /// Model.
    pub model: ModelKind,
    /// Columns in play.
    pub columns: ColumnNames,
    /// Output table.
    pub output: PathBuf,
    /// Summary file, written last.
    pub summary: Option<PathBuf>,
    /// Credible level.
    pub level: Level,
    /// Invalid-row policy.
    pub invalid: InvalidRows,
    /// Prior source.
    pub prior: PriorSource,
}

/// Reads a summary file written by an earlier run, to reuse its prior.
pub fn load_summary(path: &Path) -> Result<Summary> {
    let text = std::fs::read_to_string(path)
        .map_err(|e| Error::Input(format!("{}: cannot read the prior file: {e}", path.display())))?;
    serde_json::from_str(&text)
        .map_err(|e| Error::Input(format!("{}: not a ratepool summary file: {e}", path.display())))
}

/// Runs a job and returns its summary (also written to the summary file).
pub fn run(job: &Job) -> Result<Summary> {
    let input = InputTable::read(&job.input)?;
    for (name, role) in [
        (&job.columns.group, "group"),
        (&job.columns.count, count_role(job.model)),
        (&job.columns.size, size_role(job.model)),
    ] {
        input.require_column(name, role)?;
    }
    if input.rows() == 0 {
        return Err(Error::Input(format!("{}: the input has no data rows", job.input.display())));
    }
    let groups = input.texts(&job.columns.group)?;
    let kind = match job.model {
        ModelKind::BetaBinomial => SizeKind::Trials,
        ModelKind::GammaPoisson => SizeKind::Exposure,
    };
    let (valid, rejected) = validate(
        &job.columns,
        kind,
        &groups,
        &input.cells(&job.columns.count)?,
        &input.cells(&job.columns.size)?,
    );
    if let (InvalidRows::Fail, Some(first)) = (&job.invalid, rejected.first()) {
        return Err(Error::InvalidRow {
            path: job.input.clone(),
            row: first.row + 1,
            column: first.column.clone(),
            reason: first.reason.clone(),
        });
    }
    if valid.rows.is_empty() {
        return Err(Error::Input(format!(
            "{}: no valid data rows ({} rejected)",
            job.input.display(),
            rejected.len()
        )));
    }
    let scored = match job.model {
        ModelKind::BetaBinomial => score_job::<BetaBinomial>(job, &valid)?,
        ModelKind::GammaPoisson => score_job::<GammaPoisson>(job, &valid)?,
    };
    input.write_with(&job.columns.group, &valid.rows, output_columns(job, &valid, &scored), &job.output)?;
    if let InvalidRows::Skip { rejects } = &job.invalid {
        write_rejects(&input, job, &groups, &rejected, rejects)?;
    }
    let summary = summarise(job, &input, &valid, &groups, &rejected, &scored);
    if let Some(path) = &job.summary {
        let json = serde_json::to_string_pretty(&summary)
            .map_err(|e| Error::Other(format!("cannot encode the summary: {e}")))?;
        write_bytes_atomically(path, format!("{json}\n").as_bytes())?;
    }
    Ok(summary)
}

fn count_role(model: ModelKind) -> &'static str {
    match model {
        ModelKind::BetaBinomial => "successes",
        ModelKind::GammaPoisson => "events",
    }
}

fn size_role(model: ModelKind) -> &'static str {
    match model {
        ModelKind::BetaBinomial => "trials",
        ModelKind::GammaPoisson => "exposure",
    }
}

/// Everything computed for the kept rows.
struct Scored {
    table: PairTable,
    posteriors: Vec<Posterior>,
    pair_of_row: Vec<u32>,
    hyperprior: Hyperprior,
    fit: FitReport,
    warnings: Vec<String>,
}

fn score_job<F: Family>(job: &Job, valid: &ValidRows) -> Result<Scored> {
    let (table, pair_of_row) = PairTable::from_groups(&valid.sizes, &valid.counts);
    let (prior, hyperprior, fit_report, mut warnings) = match &job.prior {
        PriorSource::Fit => {
            let fitted = fit::<F>(&table).map_err(|failure| describe_failure(failure, job.model))?;
            let warnings = fit_warnings(&fitted);
            (fitted.prior, hyperprior_of(job.model, &fitted), fit_report_of::<F>(&fitted, "fit"), warnings)
        }
        PriorSource::Saved { path, summary } => {
            let prior = prior_of_summary(summary, path, job.model)?;
            let mut fit = summary.fit.clone();
            fit.source = path.display().to_string();
            (prior, summary.hyperprior.clone(), fit, Vec::new())
        }
    };
    if let Prior::CompletePooling { .. } = prior {
        warnings.push("no overdispersion: every group is given the pooled rate (complete pooling); intervals are degenerate".to_string());
    }
    let tail = job.level.tail();
    let posteriors: Vec<Posterior> =
        table.pairs().par_iter().map(|p| F::posterior(&prior, p.size, p.count, tail)).collect();
    Ok(Scored { table, posteriors, pair_of_row, hyperprior, fit: fit_report, warnings })
}

fn fit_warnings(fitted: &Fit) -> Vec<String> {
    match fitted.boundary {
        Boundary::None => Vec::new(),
        Boundary::NoOverdispersion => vec![format!(
            "the marginal likelihood is maximised at infinite prior strength: the data show no variation beyond {} (overdispersion test Z = {:.3})",
            "sampling noise", fitted.overdispersion.statistic
        )],
    }
}

fn describe_failure(failure: FitFailure, model: ModelKind) -> Error {
    Error::Fit(match failure {
        FitFailure::Unidentifiable(Unidentifiable::MeanOnly { mean }) => format!(
            "only the prior mean ({mean:.6}) is identifiable: every group has at most one trial, so the data say nothing about how much groups differ; no strength is reported"
        ),
        FitFailure::Unidentifiable(Unidentifiable::DegenerateMean { mean }) => format!(
            "the pooled rate is {mean}: every group is at the edge of the range (all {}), so no prior can be fitted",
            if model == ModelKind::BetaBinomial { "successes or all failures" } else { "zero events" }
        ),
        FitFailure::Unidentifiable(Unidentifiable::NoData) => "no group has any trials or exposure".to_string(),
        FitFailure::NoPooling => "the marginal likelihood is maximised at zero prior strength: the groups share nothing to pool".to_string(),
        FitFailure::NotConverged { iterations, gradient_norm } => {
            format!("the optimiser did not converge ({iterations} iterations, gradient norm {gradient_norm:.3e}); please report this with the input")
        }
    })
}

fn boundary_name(boundary: Boundary) -> &'static str {
    match boundary {
        Boundary::None => "none",
        Boundary::NoOverdispersion => "no-overdispersion",
    }
}

fn hyperprior_of(model: ModelKind, fitted: &Fit) -> Hyperprior {
    let (first, second) = match fitted.prior {
        Prior::Conjugate { first, second } => (Some(first), Some(second)),
        Prior::CompletePooling { .. } => (None, None),
    };
    let (first_se, second_se) = fitted.natural_se.map_or((None, None), |se| (Some(se[0]), Some(se[1])));
    match model {
        ModelKind::BetaBinomial => Hyperprior::Beta(BetaPrior {
            alpha: first,
            beta: second,
            alpha_se: first_se,
            beta_se: second_se,
            mean: fitted.mean,
            mean_se: fitted.mean_se,
            strength: fitted.strength,
            strength_se: fitted.strength_se,
        }),
        ModelKind::GammaPoisson => Hyperprior::Gamma(GammaPrior {
            shape: first,
            rate: second,
            shape_se: first_se,
            rate_se: second_se,
            mean: fitted.mean,
            mean_se: fitted.mean_se,
            strength: fitted.strength,
            strength_se: fitted.strength_se,
        }),
    }
}

fn fit_report_of<F: Family>(fitted: &Fit, source: &str) -> FitReport {
    FitReport {
        source: source.to_string(),
        log_marginal_likelihood: fitted.log_marginal_likelihood,
        start_log_marginal_likelihood: fitted.start_log_likelihood,
        converged: fitted.converged,
        iterations: fitted.iterations,
        gradient_norm: fitted.gradient_norm,
        boundary: boundary_name(fitted.boundary).to_string(),
        overdispersion_test: TestReport {
            name: F::OVERDISPERSION_TEST.to_string(),
            statistic: fitted.overdispersion.statistic,
            p_value: fitted.overdispersion.p_value,
        },
    }
}

/// The prior held in a saved summary, checked against the model in use.
fn prior_of_summary(summary: &Summary, path: &Path, model: ModelKind) -> Result<Prior> {
    if summary.model != model.name() {
        return Err(Error::Input(format!(
            "{}: the prior is for the {} model, not {}",
            path.display(),
            summary.model,
            model.name()
        )));
    }
    let (first, second, mean) = match (&summary.hyperprior, model) {
        (Hyperprior::Beta(p), ModelKind::BetaBinomial) => (p.alpha, p.beta, p.mean),
        (Hyperprior::Gamma(p), ModelKind::GammaPoisson) => (p.shape, p.rate, p.mean),
        _ => {
            return Err(Error::Input(format!(
                "{}: the hyperprior does not match the model {}",
                path.display(),
                summary.model
            )))
        }
    };
    let valid = |v: f64| v.is_finite() && v > 0.0;
    match (first, second) {
        (Some(a), Some(b)) if valid(a) && valid(b) => Ok(Prior::Conjugate { first: a, second: b }),
        (None, None) if valid(mean) && (model == ModelKind::GammaPoisson || mean < 1.0) => {
            Ok(Prior::CompletePooling { mean })
        }
        _ => Err(Error::Input(format!(
            "{}: the hyperprior parameters are missing or out of range",
            path.display()
        ))),
    }
}

fn output_columns(job: &Job, valid: &ValidRows, scored: &Scored) -> Vec<(String, ColumnValues)> {
    let rows = valid.rows.len();
    let post = |i: usize| &scored.posteriors[scored.pair_of_row[i] as usize];
    let (first_name, second_name) = match job.model {
        ModelKind::BetaBinomial => ("posterior_alpha", "posterior_beta"),
        ModelKind::GammaPoisson => ("posterior_shape", "posterior_rate"),
    };
    let count_values = ColumnValues::Integers(valid.counts.iter().map(|&c| c as i64).collect());
    let size_values = match job.model {
        ModelKind::BetaBinomial => ColumnValues::Integers(valid.sizes.iter().map(|&s| s as i64).collect()),
        ModelKind::GammaPoisson => ColumnValues::Floats(valid.sizes.clone()),
    };
    let floats =
        |f: &dyn Fn(&Posterior) -> f64| ColumnValues::Floats((0..rows).map(|i| f(post(i))).collect());
    let optional = |f: &dyn Fn(&Posterior) -> Option<f64>| {
        ColumnValues::OptionalFloats((0..rows).map(|i| f(post(i))).collect())
    };
    vec![
        (job.columns.count.clone(), count_values),
        (job.columns.size.clone(), size_values),
        ("raw_rate".to_string(), ColumnValues::OptionalFloats(raw_rates(valid))),
        ("posterior_mean".to_string(), floats(&|p| p.mean)),
        ("posterior_sd".to_string(), floats(&|p| p.sd)),
        ("interval_lo".to_string(), floats(&|p| p.lower)),
        ("interval_hi".to_string(), floats(&|p| p.upper)),
        ("pool_weight".to_string(), floats(&|p| p.pool_weight)),
        (first_name.to_string(), optional(&|p| p.first)),
        (second_name.to_string(), optional(&|p| p.second)),
    ]
}

/// What the pull summary needs of each distinct pair.
fn pair_outcomes(table: &PairTable, posteriors: &[Posterior]) -> Vec<PairOutcome> {
    table
        .pairs()
        .iter()
        .zip(posteriors)
        .map(|(pair, post)| PairOutcome {
            raw_rate: (pair.size > 0.0).then(|| pair.count / pair.size),
            posterior_mean: post.mean,
            pool_weight: post.pool_weight,
            groups: pair.weight,
        })
        .collect()
}

fn raw_rates(valid: &ValidRows) -> Vec<Option<f64>> {
    valid.sizes.iter().zip(&valid.counts).map(|(&s, &c)| (s > 0.0).then(|| c / s)).collect()
}

fn write_rejects(
    input: &InputTable,
    job: &Job,
    groups: &[Option<String>],
    rejected: &[Rejection],
    path: &Path,
) -> Result<()> {
    let raw = |name: &str| -> Result<Vec<String>> {
        let cells = input.cells(name)?;
        Ok(rejected
            .iter()
            .map(|r| match &cells[r.row] {
                crate::io::frame::Cell::Missing => String::new(),
                crate::io::frame::Cell::Integer(v) => v.to_string(),
                crate::io::frame::Cell::Number(v) => v.to_string(),
                crate::io::frame::Cell::Text(t) => t.clone(),
            })
            .collect())
    };
    let columns = vec![
        ("row".to_string(), ColumnValues::Integers(rejected.iter().map(|r| r.row as i64 + 1).collect())),
        (
            job.columns.group.clone(),
            ColumnValues::Texts(rejected.iter().map(|r| groups[r.row].clone().unwrap_or_default()).collect()),
        ),
        (job.columns.count.clone(), ColumnValues::Texts(raw(&job.columns.count)?)),
        (job.columns.size.clone(), ColumnValues::Texts(raw(&job.columns.size)?)),
        ("column".to_string(), ColumnValues::Texts(rejected.iter().map(|r| r.column.clone()).collect())),
        ("reason".to_string(), ColumnValues::Texts(rejected.iter().map(|r| r.reason.clone()).collect())),
    ];
    write_plain(columns, path)
}

fn summarise(
    job: &Job,
    input: &InputTable,
    valid: &ValidRows,
    groups: &[Option<String>],
    rejected: &[Rejection],
    scored: &Scored,
) -> Summary {
    let rows = valid.rows.len();
    let p = pull(&pair_outcomes(&scored.table, &scored.posteriors));
    let max_shift_row =
        p.max_shift_row.and_then(|pair| scored.pair_of_row.iter().position(|&q| q as usize == pair));
    let mut warnings = scored.warnings.clone();
    if !rejected.is_empty() {
        warnings
            .push(format!("{} rows were rejected and left out of the fit and the output", rejected.len()));
    }
    Summary {
        model: job.model.name().to_string(),
        groups: rows as u64,
        rows_read: input.rows() as u64,
        rows_rejected: rejected.len() as u64,
        level: job.level.get(),
        hyperprior: scored.hyperprior.clone(),
        fit: scored.fit.clone(),
        pull: PullReport {
            pool_weight_mean: p.pool_weight_mean,
            pool_weight_median: p.pool_weight_median,
            pool_weight_p10: p.pool_weight_p10,
            pool_weight_p90: p.pool_weight_p90,
            mean_abs_shift: p.mean_abs_shift,
            max_abs_shift: p.max_abs_shift,
            max_shift_group: max_shift_row.and_then(|i| groups[valid.rows[i] as usize].clone()),
            rank_correlation: p.rank_correlation,
        },
        warnings,
    }
}
