//! Where the prior comes from (a fit to the pair table, or a saved summary)
//! and the posterior of every distinct pair under it.

use super::scoring::pull_of_pairs;
use super::{FlagEvent, Job, Model, PhaseClock, PriorSource};
use crate::core::diagnostics::Pull;
use crate::core::fit::{fit, Boundary, Fit, FitFailure};
use crate::core::model::{Family, FamilyVisitor, Posterior, Prior, Unidentifiable};
use crate::core::pairs::PairTable;
use crate::core::ranking::{posterior_fdr_flags, FdrFlags};
use crate::error::{Error, Result};
use crate::report::{FitReport, Hyperprior, HyperpriorParts, Summary, TestReport};
use rayon::prelude::*;
use std::path::Path;

/// The prior in use, how it was obtained, and each pair's posterior.
pub struct Scored {
    /// The distinct pairs.
    pub table: PairTable,
    /// Posterior of each pair, in table order.
    pub posteriors: Vec<Posterior>,
    /// The prior for the summary.
    pub hyperprior: Hyperprior,
    /// How it was obtained.
    pub fit: FitReport,
    /// Boundary and pooling warnings.
    pub warnings: Vec<String>,
    /// How far the groups were pulled; `max_shift_row` indexes the pairs.
    pub pull: Pull,
    /// P(rate > T of `--above`) per pair, when asked for.
    pub prob_above: Option<Vec<f64>>,
    /// P(rate < T of `--below`) per pair, when asked for.
    pub prob_below: Option<Vec<f64>>,
    /// Flags under the posterior false-discovery rate of `--flag-fdr`.
    pub flags: Option<FdrFlags>,
}

/// Fits or loads the prior for `table` and scores every pair.
pub fn score_pairs(job: &Job, table: PairTable, clock: &mut PhaseClock) -> Result<Scored> {
    job.model.visit(ScorePairs { job, table, clock })
}

/// [`score_with`] for the job's model.
struct ScorePairs<'a> {
    job: &'a Job,
    table: PairTable,
    clock: &'a mut PhaseClock,
}

impl FamilyVisitor for ScorePairs<'_> {
    type Output = Result<Scored>;

    fn visit<F: Family>(self) -> Result<Scored> {
        score_with::<F>(self.job, self.table, self.clock)
    }
}

fn score_with<F: Family>(job: &Job, table: PairTable, clock: &mut PhaseClock) -> Result<Scored> {
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
    clock.lap(&format!("fit ({} distinct pairs)", table.pairs().len()));
    if let Prior::CompletePooling { .. } = prior {
        warnings.push("no overdispersion: every group is given the pooled rate (complete pooling); intervals are degenerate".to_string());
    }
    let tail = job.level.tail();
    let posteriors: Vec<Posterior> =
        table.pairs().par_iter().map(|p| F::posterior(&prior, p.size, p.count, tail)).collect();
    let tails_at = |threshold: f64| -> Vec<(f64, f64)> {
        table.pairs().par_iter().map(|p| F::rate_tails(&prior, p.size, p.count, threshold)).collect()
    };
    let (above, below) = (job.thresholds.above.map(tails_at), job.thresholds.below.map(tails_at));
    let flags = job.flag_fdr.map(|rule| {
        // The probability of no event, from the other tail (not 1 − P(event)).
        let no_event: Vec<f64> = match rule.event {
            FlagEvent::Above => above.iter().flatten().map(|&(below, _)| below).collect(),
            FlagEvent::Below => below.iter().flatten().map(|&(_, above)| above).collect(),
        };
        let weights: Vec<f64> = table.pairs().iter().map(|p| p.weight).collect();
        posterior_fdr_flags(&no_event, &weights, rule.bound)
    });
    let prob_above = above.map(|tails| tails.into_iter().map(|(_, above)| above).collect());
    let prob_below = below.map(|tails| tails.into_iter().map(|(below, _)| below).collect());
    clock.lap("posteriors");
    let pull = pull_of_pairs(&table, &posteriors);
    Ok(Scored {
        table,
        posteriors,
        hyperprior,
        fit: fit_report,
        warnings,
        pull,
        prob_above,
        prob_below,
        flags,
    })
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

fn describe_failure(failure: FitFailure, model: Model) -> Error {
    Error::Fit(match failure {
        FitFailure::Unidentifiable(Unidentifiable::MeanOnly { mean }) => format!(
            "only the prior mean ({mean:.6}) is identifiable: every group has at most one trial, so the data say nothing about how much groups differ; no strength is reported"
        ),
        FitFailure::Unidentifiable(Unidentifiable::DegenerateMean { mean }) => format!(
            "the pooled rate is {mean}: every group is at the edge of the range (all {}), so no prior can be fitted",
            model.terms().degenerate_data
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

fn hyperprior_of(model: Model, fitted: &Fit) -> Hyperprior {
    let natural = match fitted.prior {
        Prior::Conjugate { natural } => Some(natural),
        Prior::CompletePooling { .. } => None,
    };
    let parts = HyperpriorParts {
        natural,
        natural_se: fitted.natural_se,
        mean: fitted.mean,
        mean_se: fitted.mean_se,
        strength: fitted.strength,
        strength_se: fitted.strength_se,
    };
    Hyperprior::of_model(model.name(), parts).expect("every registered model has a wire form")
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
            name: F::TERMS.overdispersion_test.to_string(),
            statistic: fitted.overdispersion.statistic,
            p_value: fitted.overdispersion.p_value,
        },
    }
}

/// The prior held in a saved summary, checked against the model in use.
fn prior_of_summary(summary: &Summary, path: &Path, model: Model) -> Result<Prior> {
    if summary.model != model.name() {
        return Err(Error::Input(format!(
            "{}: the prior is for the {} model, not {}",
            path.display(),
            summary.model,
            model.name()
        )));
    }
    if summary.hyperprior.model() != model.name() {
        return Err(Error::Input(format!(
            "{}: the hyperprior does not match the model {}",
            path.display(),
            summary.model
        )));
    }
    let ((first, second), mean) = (summary.hyperprior.natural(), summary.hyperprior.mean());
    let valid = |v: f64| v.is_finite() && v > 0.0;
    match (first, second) {
        (Some(a), Some(b)) if valid(a) && valid(b) => Ok(Prior::Conjugate { natural: [a, b] }),
        (None, None) if valid(mean) && (!model.terms().mean_below_one || mean < 1.0) => {
            Ok(Prior::CompletePooling { mean })
        }
        _ => Err(Error::Input(format!(
            "{}: the hyperprior parameters are missing or out of range",
            path.display()
        ))),
    }
}
