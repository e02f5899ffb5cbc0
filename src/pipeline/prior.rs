//! Where the priors come from (fits to the pair tables, or a saved summary)
//! and the posterior of every distinct pair under its prior.
//!
//! Without segments there is one prior, fitted to all groups. With segments
//! (`--by`) the prior fitted to all groups is kept, each segment gets a fit
//! of its own pairs alone (in parallel), and a segment falls back to the
//! all-groups prior when it has fewer than `--min-groups` groups or its fit
//! fails (only the mean identifiable, no pooling, no convergence); a
//! boundary (no overdispersion) is a result, not a fallback. A likelihood-
//! ratio test says whether one prior per segment fits better than one for all.

use super::covariates::{
    cell_priors, saved_cell_priors, CellPriors, CovariateTable, CovariateValues, OwnPriors, PlainFit,
};
use super::neighbours::{neighbour_cell_priors, AllAreas, AreaTable};
use super::segments::{segment_likelihood_ratio, SegmentKey, SegmentPairs};
use super::{
    FlagEvent, Intervals, Job, Model, PhaseClock, PriorShape, PriorSource, TopChoice, TopRule, DRAW_BUDGET,
};
use crate::core::diagnostics::calibration;
use crate::core::diagnostics::Pull;
use crate::core::fit::{
    evaluate, fit_by, pooled_log_likelihood, Boundary, Fit, FitFailure, Likelihood, PoolingTest,
};
use crate::core::model::free::{fit_free, FreeFit, FreePrior, Spacing};
use crate::core::model::{
    corrected_posterior, corrected_tails, Family, FamilyVisitor, Posterior, Prior, PriorUncertainty, RateLaw,
    RateRange, ShapedPrior, Uncertainty, Unidentifiable,
};
use crate::core::pairs::{PairTable, WeightedPair};
use crate::core::ranking::{
    posterior_fdr_flags, top_probabilities_by_draws, top_probabilities_by_threshold, FdrFlags, LawKinds,
    RankOrder, TopMethod,
};
use crate::error::{Error, Result};
use crate::summary::{
    CalibrationReport, ChecksReport, FitReport, FittedPrior, FittedPriorParts, FreePriorReport,
    NeighbourhoodReport, SegmentTest, ShapeComparison, TestReport, VarianceReport,
};
use arrow_array::ArrayRef;
use rayon::prelude::*;
use std::borrow::Cow;
use std::ops::Range;
use std::path::Path;
use std::sync::Arc;

/// One segment's prior and how it was obtained.
pub struct SegmentScore {
    /// Its values.
    pub key: SegmentKey,
    /// One row of each segment column holding the values.
    pub samples: Vec<ArrayRef>,
    /// Its pairs' place in [`Scored::pairs`].
    pub pairs: Range<usize>,
    /// Its groups.
    pub groups: f64,
    /// The prior its groups were scored with.
    pub fitted_prior: FittedPrior,
    /// Its own fit (None when it fell back to the all-groups prior).
    pub fit: Option<FitReport>,
    /// How far its groups were pulled; `max_shift_row` indexes [`Scored::pairs`].
    pub pull: Pull,
    /// Why it took the all-groups prior, when it did.
    pub fallback: Option<String>,
    /// Does the prior it was scored with fit its groups?
    pub checks: ChecksReport,
}

/// The priors in use, how they were obtained, and each pair's posterior.
pub struct Scored {
    /// The distinct (segment, size, count) pairs, segment after segment.
    pub pairs: Arc<Vec<WeightedPair>>,
    /// Posterior of each pair, in that order.
    pub posteriors: Arc<PairPosteriors>,
    /// The prior fitted to (or saved for) all groups.
    pub fitted_prior: FittedPrior,
    /// How it was obtained.
    pub fit: FitReport,
    /// Boundary, pooling and fallback warnings.
    pub warnings: Vec<String>,
    /// How far all the groups were pulled; `max_shift_row` indexes the pairs.
    pub pull: Pull,
    /// P(rate > T of `--above`) per pair, when asked for.
    pub prob_above: Option<Arc<Vec<f64>>>,
    /// P(rate < T of `--below`) per pair, when asked for.
    pub prob_below: Option<Arc<Vec<f64>>>,
    /// Flags under the posterior false-discovery rate of `--flag-fdr`.
    pub flags: Option<FdrFlags>,
    /// P(among the K best) per pair, and how it was computed, with `--top K`.
    pub prob_top: Option<(Vec<f64>, TopMethod)>,
    /// Per segment, with `--by` (empty without).
    pub segments: Vec<SegmentScore>,
    /// One prior for all against one per segment, when priors were fitted per segment.
    pub segment_test: Option<SegmentTest>,
    /// Does the model (each pair under its prior) fit the data scored?
    pub checks: ChecksReport,
    /// With covariates: each pair's covariate values and centre.
    pub covariates: Option<CovariateScore>,
    /// With a free prior: how it compares with the parametric one.
    pub comparison: Option<ShapeComparison>,
    /// With `--neighbours`: what the summary says of the neighbourhoods.
    pub neighbourhood: Option<NeighbourhoodReport>,
}

/// What the output holds of the covariates: per pair, its covariate
/// values and its centre (with `--neighbours`, its neighbourhood's rate
/// and its number of neighbours).
pub struct CovariateScore {
    /// Each covariate column as the output writes it, in the order given.
    pub values: CovariateValues,
    /// Per pair, its prior and that prior's centre (the rate it is pulled toward).
    pub own: Arc<OwnPriors>,
    /// With `--neighbours`: per pair (an area), its number of neighbours.
    pub neighbours: Option<Vec<i64>>,
}

/// Each pair's posterior, in the order of [`Scored::pairs`]: held whole,
/// or, where the intervals are plug-in and each pair has a prior of its
/// own (covariates, neighbours) or all share one parametric prior, held as
/// its interval's ends alone (16 bytes a pair instead of 64) and made again
/// from its prior and pair when asked, with the same bits
/// ([`Family::posterior_with_ends`]).
pub enum PairPosteriors {
    /// Held whole.
    Held(Vec<Posterior>),
    /// Held as the ends of each pair's interval.
    Ends {
        /// Per pair, (lower, upper).
        ends: Vec<[f64; 2]>,
        /// The pairs.
        pairs: Arc<Vec<WeightedPair>>,
        /// Their priors.
        priors: EndsPriors,
        /// The family's [`Family::posterior_with_ends`].
        with_ends: fn(&Prior, f64, f64, [f64; 2]) -> Posterior,
    },
}

/// The priors of the pairs whose posteriors are held as their ends.
pub enum EndsPriors {
    /// Each pair's own.
    Own(Arc<OwnPriors>),
    /// One for all.
    One(Prior),
}

impl EndsPriors {
    fn prior(&self, i: usize) -> Prior {
        match self {
            EndsPriors::Own(own) => own.prior(i),
            EndsPriors::One(prior) => *prior,
        }
    }
}

impl PairPosteriors {
    /// Pairs.
    pub fn len(&self) -> usize {
        match self {
            PairPosteriors::Held(held) => held.len(),
            PairPosteriors::Ends { ends, .. } => ends.len(),
        }
    }

    /// Pair i's posterior.
    pub fn get(&self, i: usize) -> Posterior {
        match self {
            PairPosteriors::Held(held) => held[i],
            PairPosteriors::Ends { ends, pairs, priors, with_ends } => {
                with_ends(&priors.prior(i), pairs[i].size, pairs[i].count, ends[i])
            }
        }
    }

    /// Every pair's posterior, in order.
    pub fn iter(&self) -> impl Iterator<Item = Posterior> + '_ {
        (0..self.len()).map(|i| self.get(i))
    }
}

impl Scored {
    /// Per pair: its segment's place in [`Scored::segments`] (all 0 without segments).
    pub fn segment_of_pair(&self) -> Vec<u32> {
        let mut places = vec![0u32; self.pairs.len()];
        for (place, segment) in self.segments.iter().enumerate() {
            places[segment.pairs.clone()].fill(place as u32);
        }
        places
    }
}

/// The table of a run whose groups each have a prior of their own: the
/// covariate pairs, or (with `--neighbours`) the areas.
pub enum CellTable {
    /// The distinct (covariates, size, count) pairs and their design.
    Covariates(CovariateTable),
    /// The areas and who neighbours whom.
    Areas(AreaTable),
}

/// Fits the priors of a cell table (the covariate prior, or the all-areas
/// prior and each area's local one) and scores every pair.
pub fn score_cell_pairs(job: &Job, table: CellTable, clock: &mut PhaseClock<'_>) -> Result<Scored> {
    job.model.visit(ScoreCellPairs { job, table, clock })
}

/// [`score_covariates_with`] or [`score_neighbours_with`] for the job's model.
struct ScoreCellPairs<'a, 'b> {
    job: &'a Job,
    table: CellTable,
    clock: &'a mut PhaseClock<'b>,
}

impl FamilyVisitor for ScoreCellPairs<'_, '_> {
    type Output = Result<Scored>;

    fn visit<F: Family>(self) -> Result<Scored> {
        match self.table {
            CellTable::Covariates(table) => score_covariates_with::<F>(self.job, table, self.clock),
            CellTable::Areas(table) => score_neighbours_with::<F>(self.job, table, self.clock),
        }
    }
}

/// Each pair under its own prior: posteriors, decisions and the scored table.
fn score_cells<F: Family>(
    job: &Job,
    priors: PriorsInUse,
    places: PairPlaces,
    clock: &mut PhaseClock<'_>,
) -> Result<Scored> {
    let posteriors = posteriors_of::<F>(job, &priors, &places);
    let decisions = decisions_of::<F>(job, &priors, &places, &posteriors);
    clock.lap("posteriors", "posteriors")?;
    Ok(scored_of::<F>(job, Vec::new(), priors, places, (posteriors, decisions)))
}

/// Each area under its local prior (the all-areas prior where it has none).
fn score_neighbours_with<F: Family>(
    job: &Job,
    table: AreaTable,
    clock: &mut PhaseClock<'_>,
) -> Result<Scored> {
    let Some(local) = F::TERMS.local_prior else {
        return Err(Error::Usage(format!("the {} model has no neighbour prior", F::TERMS.name)));
    };
    refuse_top_of_everyone(job, &table.pairs)?;
    let all_table = PairTable::from_weighted(table.pairs.iter().copied());
    let all = all_groups_prior::<F>(job, &all_table)?;
    clock.pairs(table.pairs.len());
    clock.lap("fit", &format!("fit to all areas ({} distinct pairs)", all_table.pairs().len()))?;
    let Some(prior) = all.prior.parametric() else {
        return Err(Error::Usage("the neighbour prior does not combine with a free prior".to_string()));
    };
    let fallback =
        AllAreas { prior, fitted_prior: &all.fitted_prior, fit: &all.fit, warnings: &all.warnings };
    let (pairs, cells) = neighbour_cell_priors(table, fallback, local);
    clock.lap("local-priors", &format!("local priors ({} areas)", pairs.len()))?;
    let places = PairPlaces::own(pairs);
    let facts = TableFacts::of::<F>(&all_table);
    drop(all_table);
    score_cells::<F>(job, PriorsInUse::of_covariates(facts, all, cells), places, clock)
}

/// Fits or loads the priors for the segments' pairs (one segment of every
/// pair when not segmented) and scores every pair.
pub fn score_pairs(job: &Job, segments: Vec<SegmentPairs>, clock: &mut PhaseClock<'_>) -> Result<Scored> {
    job.model.visit(ScorePairs { job, segments, clock })
}

/// [`score_with`] for the job's model.
struct ScorePairs<'a, 'b> {
    job: &'a Job,
    segments: Vec<SegmentPairs>,
    clock: &'a mut PhaseClock<'b>,
}

impl FamilyVisitor for ScorePairs<'_, '_> {
    type Output = Result<Scored>;

    fn visit<F: Family>(self) -> Result<Scored> {
        score_with::<F>(self.job, self.segments, self.clock)
    }
}

/// A prior with its wire form, its account and its log marginal likelihood.
#[derive(Clone)]
struct Chosen {
    prior: ShapedPrior,
    fitted_prior: FittedPrior,
    fit: FitReport,
    warnings: Vec<String>,
    /// The maximised log marginal likelihood of a fitted prior, for the
    /// segment test (None for a saved prior: the test compares fits).
    log_likelihood: Option<f64>,
    /// For corrected intervals (None: a saved prior without its covariance).
    uncertainty: Option<PriorUncertainty>,
}

/// The prior for all groups: fitted, or the saved one.
fn all_groups_prior<F: Family>(job: &Job, table: &PairTable) -> Result<Chosen> {
    match (&job.prior, job.prior_shape) {
        (PriorSource::Fit, PriorShape::Free { points }) => {
            let fitted = fit_free::<F>(table, points).map_err(|fault| Error::Fit(fault.to_string()))?;
            Ok(chosen_of_free_fit::<F>(table, &fitted))
        }
        (PriorSource::Fit, PriorShape::Parametric) => {
            let fitted = fit_by::<F>(table, job.likelihood)
                .map_err(|failure| Error::Fit(describe_failure(failure, job.model)))?;
            Ok(chosen_of_fit::<F>(job.model, &fitted))
        }
        (PriorSource::Saved { path, summary }, _) => {
            let mut fit = summary.fit.clone();
            fit.source = path.display().to_string();
            chosen_of_saved(job.model, (&summary.fitted_prior, fit), (&summary.model, path))
        }
    }
}

/// A saved prior (the all-groups one or a segment's) as the prior in use.
fn chosen_of_saved(
    model: Model,
    (fitted_prior, fit): (&FittedPrior, FitReport),
    (saved_model, path): (&str, &Path),
) -> Result<Chosen> {
    let prior = prior_of_saved(fitted_prior, saved_model, path, model)?;
    let uncertainty = match prior {
        ShapedPrior::Parametric(Prior::Conjugate { .. }) => {
            fit.working_covariance.map(PriorUncertainty::Working)
        }
        ShapedPrior::Parametric(Prior::CompletePooling { .. }) => {
            Some(PriorUncertainty::PooledMean(fitted_prior.mean_se().powi(2)))
        }
        ShapedPrior::Free(_) => None,
    };
    Ok(Chosen {
        prior,
        fitted_prior: fitted_prior.clone(),
        log_likelihood: None,
        fit,
        warnings: Vec::new(),
        uncertainty,
    })
}

fn chosen_of_fit<F: Family>(model: Model, fitted: &Fit) -> Chosen {
    Chosen {
        prior: ShapedPrior::Parametric(fitted.prior),
        fitted_prior: fitted_prior_of(model, fitted),
        fit: fit_report_of::<F>(fitted, "fit"),
        warnings: fit_warnings(fitted),
        log_likelihood: Some(fitted.log_marginal_likelihood),
        uncertainty: Some(fitted.uncertainty),
    }
}

/// A free prior fitted to `table`: the prior, its wire form and account.
fn chosen_of_free_fit<F: Family>(table: &PairTable, fitted: &FreeFit) -> Chosen {
    let prior = &fitted.prior;
    let (mean, sd) = prior.mean_sd();
    let report = FreePriorReport {
        prior_shape: "free".to_string(),
        spacing: prior.spacing().name().to_string(),
        support: prior
            .support()
            .filter(|&(_, m)| m >= FreePriorReport::SHOWN_MASS)
            .map(|(x, m)| [x, m])
            .collect(),
        duality_gap: fitted.duality_gap,
        grid: prior.points().to_vec(),
        masses: prior.masses().to_vec(),
    };
    let fit = FitReport {
        source: "fit".to_string(),
        log_marginal_likelihood: fitted.log_marginal_likelihood,
        start_log_marginal_likelihood: fitted.start_log_marginal_likelihood,
        converged: fitted.converged,
        iterations: fitted.iterations,
        gradient_norm: fitted.duality_gap / table.groups().max(1.0),
        boundary: "none".to_string(),
        overdispersion_test: overdispersion_report::<F>(table),
        boundary_score: None,
        likelihood: "marginal".to_string(),
        restricted_log_likelihood: None,
        pooling_test: None,
        working_bias: None,
        working_covariance: None,
    };
    let warnings = match fitted.point_mass {
        Some(at) => vec![format!(
            "every group's raw value is {at}: the free prior is a point mass there (its grid has one point), and every group is given that value"
        )],
        None => Vec::new(),
    };
    Chosen {
        prior: ShapedPrior::Free(std::sync::Arc::new(prior.clone())),
        fitted_prior: FittedPrior::free(mean, sd, report),
        fit,
        warnings,
        log_likelihood: Some(fitted.log_marginal_likelihood),
        uncertainty: None,
    }
}

/// The log marginal likelihood of `table` under a prior given by its mean
/// and strength (pooled when the strength is infinite).
fn log_marginal_at<F: Family>(table: &PairTable, fitted_prior: &FittedPrior) -> f64 {
    match fitted_prior.strength() {
        Some(strength) => evaluate::<F>(table, F::working(fitted_prior.mean(), strength)).log_likelihood,
        None => pooled_log_likelihood::<F>(table, fitted_prior.mean()),
    }
}

/// A segment's own prior, or why it takes the all-groups prior.
fn segment_prior<F: Family>(
    job: &Job,
    segment: &SegmentPairs,
) -> Result<std::result::Result<Chosen, String>> {
    let groups = segment.table.groups();
    match &job.prior {
        PriorSource::Fit if groups < job.min_groups as f64 => {
            Ok(Err(format!("fewer than {} groups ({groups})", job.min_groups)))
        }
        PriorSource::Fit => Ok(match job.prior_shape {
            PriorShape::Free { points } => match fit_free::<F>(&segment.table, points) {
                Ok(fitted) => Ok(chosen_of_free_fit::<F>(&segment.table, &fitted)),
                Err(fault) => Err(fault.to_string()),
            },
            PriorShape::Parametric => match fit_by::<F>(&segment.table, job.likelihood) {
                Ok(fitted) => Ok(chosen_of_fit::<F>(job.model, &fitted)),
                Err(failure) => Err(describe_failure(failure, job.model)),
            },
        }),
        PriorSource::Saved { path, summary } => {
            let saved = summary.segments.iter().find(|s| key_of_report(&job.segments, s) == segment.key);
            let Some(saved) = saved else {
                return Ok(Err("not in the saved prior's segments".to_string()));
            };
            if let Some(reason) = &saved.fallback {
                return Ok(Err(format!("the saved prior gave it the all-groups prior: {reason}")));
            }
            let Some(fit) = saved.fit.clone() else {
                return Err(Error::Input(format!("{}: a segment's fit report is missing", path.display())));
            };
            let saved_at = (summary.model.as_str(), path.as_path());
            Ok(Ok(chosen_of_saved(job.model, (&saved.fitted_prior, fit), saved_at)?))
        }
    }
}

/// A saved segment's key in the order of the run's segment columns.
fn key_of_report(columns: &[String], saved: &crate::summary::SegmentReport) -> SegmentKey {
    columns.iter().map(|c| saved.key.get(c).cloned().flatten()).collect()
}

fn score_with<F: Family>(
    job: &Job,
    segments: Vec<SegmentPairs>,
    clock: &mut PhaseClock<'_>,
) -> Result<Scored> {
    if let PriorSource::Saved { path, summary } = &job.prior {
        refuse_other_segments(path, &summary.segment_columns, &job.segments)?;
    }
    let places = PairPlaces::of(&segments);
    refuse_top_of_everyone(job, &places.pairs)?;
    let priors = priors_in_use::<F>(job, &segments, &places.pairs, clock)?;
    let posteriors = posteriors_of::<F>(job, &priors, &places);
    let decisions = decisions_of::<F>(job, &priors, &places, &posteriors);
    clock.lap("posteriors", "posteriors")?;
    let comparison = match (job.prior_shape, &job.prior) {
        (PriorShape::Free { .. }, PriorSource::Fit) => {
            let free = (&posteriors, &decisions);
            let comparison = compare_with_parametric::<F>(job, &segments, &places, free);
            clock.lap("prior-comparison", "the parametric prior on the same data, for comparison")?;
            Some(comparison)
        }
        _ => None,
    };
    let mut scored = scored_of::<F>(job, segments, priors, places, (posteriors, decisions));
    if let Some(mut comparison) = comparison {
        comparison.free_log_marginal_likelihood = scored.checks.log_marginal_likelihood;
        comparison.log_likelihood_gain =
            comparison.parametric_log_marginal_likelihood.map(|p| scored.checks.log_marginal_likelihood - p);
        if comparison.parametric_checks.as_ref().is_some_and(ChecksReport::poor_fit)
            && !scored.checks.poor_fit()
        {
            scored.warnings.push(format!(
                "the parametric prior does not describe {} well (calibration {}) and the free prior does ({}): its groups' posteriors, ranks and flags would have been pulled toward the wrong place",
                scored.checks.data,
                crate::summary::p_value_text(comparison.parametric_checks.as_ref().map_or(f64::NAN, |c| c.calibration.p_value)),
                crate::summary::p_value_text(scored.checks.calibration.p_value),
            ));
        }
        scored.comparison = Some(comparison);
    }
    Ok(scored)
}

/// The same run under the parametric prior, for the comparison a free
/// prior's summary holds: its fit(s), likelihood and checks, and how many
/// groups change their flag or move more than ten ranks. The free side's
/// likelihood is filled in by the caller from its own checks.
fn compare_with_parametric<F: Family>(
    job: &Job,
    segments: &[SegmentPairs],
    places: &PairPlaces,
    (free_posteriors, free_decisions): (&PairPosteriors, &Decisions),
) -> ShapeComparison {
    let parametric_job = Job { prior_shape: PriorShape::Parametric, top: None, ..job.clone() };
    let mut unwatched = super::Unwatched;
    let mut quiet = PhaseClock::start(&mut unwatched);
    let mut comparison = ShapeComparison {
        parametric_prior: None,
        parametric_failure: None,
        free_log_marginal_likelihood: f64::NAN,
        parametric_log_marginal_likelihood: None,
        log_likelihood_gain: None,
        parametric_checks: None,
        flags_changed: None,
        moved_over_ten_ranks: None,
    };
    let priors = match priors_in_use::<F>(&parametric_job, segments, &places.pairs, &mut quiet) {
        Ok(priors) => priors,
        Err(failure) => {
            comparison.parametric_failure = Some(failure.to_string());
            return comparison;
        }
    };
    let posteriors = posteriors_of::<F>(&parametric_job, &priors, places);
    let decisions = decisions_of::<F>(&parametric_job, &priors, places, &posteriors);
    let checks =
        model_checks::<F>(&parametric_job, &places.pairs, &priors.all_facts, priors.of_pairs(places));
    let weights = places.weights();
    if let (Some(free), Some(parametric)) = (&free_decisions.flags, &decisions.flags) {
        let changed: f64 = (0..weights.len())
            .filter(|&i| free.flagged[i] != parametric.flagged[i])
            .map(|i| weights[i])
            .sum();
        comparison.flags_changed = Some(changed as u64);
    }
    let order = job.ranks.unwrap_or(RankOrder::HighestFirst);
    let ranks_of = |posteriors: &PairPosteriors| {
        let means: Vec<f64> = posteriors.iter().map(|p| p.mean).collect();
        crate::core::ranking::competition_ranks(&means, &weights, order)
    };
    let (free_ranks, parametric_ranks) = (ranks_of(free_posteriors), ranks_of(&posteriors));
    let moved: f64 = (0..weights.len())
        .filter(|&i| (free_ranks[i] - parametric_ranks[i]).abs() > 10)
        .map(|i| weights[i])
        .sum();
    comparison.moved_over_ten_ranks = Some(moved as u64);
    comparison.parametric_log_marginal_likelihood = Some(checks.log_marginal_likelihood);
    comparison.parametric_prior = Some(priors.all.fitted_prior.clone());
    comparison.parametric_checks = Some(checks);
    comparison
}

/// `--top K` with K at least the number of groups asks nothing: refused.
fn refuse_top_of_everyone(job: &Job, pairs: &[WeightedPair]) -> Result<()> {
    let Some(rule) = job.top else { return Ok(()) };
    let groups: f64 = pairs.iter().map(|p| p.weight).sum();
    if rule.k as f64 >= groups {
        return Err(Error::Usage(format!(
            "--top {} asks for the top {} of {groups} groups: every group would be among them (prob_top 1); give K below {groups}",
            rule.k, rule.k
        )));
    }
    Ok(())
}

/// Every distinct pair of every segment, segment after segment, with the
/// place of each pair's segment and each segment's range of pairs; or
/// the pairs of a run where each pair is a place of its own.
struct PairPlaces {
    pairs: Arc<Vec<WeightedPair>>,
    /// None where each pair is its own place.
    place_of_pair: Option<Vec<usize>>,
    ranges: Vec<std::ops::Range<usize>>,
}

impl PairPlaces {
    fn of(segments: &[SegmentPairs]) -> Self {
        let pairs: Vec<WeightedPair> =
            segments.iter().flat_map(|s| s.table.pairs().iter().copied()).collect();
        let mut ranges = Vec::with_capacity(segments.len());
        let mut place_of_pair = Vec::with_capacity(pairs.len());
        for (place, segment) in segments.iter().enumerate() {
            let start = place_of_pair.len();
            place_of_pair.extend(std::iter::repeat_n(place, segment.table.pairs().len()));
            ranges.push(start..place_of_pair.len());
        }
        PairPlaces { pairs: Arc::new(pairs), place_of_pair: Some(place_of_pair), ranges }
    }

    /// The pairs of a run where each pair has a prior of its own.
    fn own(pairs: Arc<Vec<WeightedPair>>) -> Self {
        PairPlaces { pairs, place_of_pair: None, ranges: Vec::new() }
    }

    /// The place of pair i.
    fn place(&self, i: usize) -> usize {
        self.place_of_pair.as_ref().map_or(i, |places| places[i])
    }

    fn weights(&self) -> Vec<f64> {
        self.pairs.iter().map(|p| p.weight).collect()
    }
}

/// The priors a run scores with: the all-groups one, and per segment its
/// own or why it took the all-groups one; per segment the prior in use,
/// what is known of its uncertainty, and that spread over quadrature nodes
/// for corrected intervals.
struct PriorsInUse {
    /// What the checks say of the table of all groups (the table itself is not kept).
    all_facts: TableFacts,
    all: Chosen,
    choices: Vec<std::result::Result<Chosen, String>>,
    priors: Vec<ShapedPrior>,
    spreads: Vec<Option<Uncertainty>>,
    /// With covariates: the covariate prior, whose cells are the places.
    covariates: Option<CellPriors>,
}

/// Fits (or loads) the all-groups prior (to `all_pairs`, every segment's
/// pairs) and one per segment, in parallel, with their median bias for
/// corrected intervals.
fn priors_in_use<F: Family>(
    job: &Job,
    segments: &[SegmentPairs],
    all_pairs: &[WeightedPair],
    clock: &mut PhaseClock<'_>,
) -> Result<PriorsInUse> {
    let segmented = !job.segments.is_empty();
    // Without segments the one segment's table is the table of all groups.
    let merged;
    let all_table = if segmented {
        merged = PairTable::from_weighted(all_pairs.iter().copied());
        &merged
    } else {
        &segments[0].table
    };
    let mut all = all_groups_prior::<F>(job, all_table)?;
    clock.pairs(all_table.pairs().len());
    clock.lap("fit", &format!("fit ({} distinct pairs)", all_table.pairs().len()))?;
    // Corrected intervals of a fit: the median bias of each prior, by parametric bootstrap.
    let bootstrap = job.intervals == Intervals::Corrected && matches!(job.prior, PriorSource::Fit);
    if bootstrap {
        all.fit.working_bias = bias_of::<F>(job, &all, all_table, 0);
    }
    let mut choices: Vec<std::result::Result<Chosen, String>> = if segmented {
        segments.par_iter().map(|segment| segment_prior::<F>(job, segment)).collect::<Result<_>>()?
    } else {
        vec![Ok(all.clone())]
    };
    if segmented && bootstrap {
        for (place, (choice, segment)) in choices.iter_mut().zip(segments).enumerate() {
            if let Ok(own) = choice {
                own.fit.working_bias = bias_of::<F>(job, own, &segment.table, place as u64 + 1);
            }
        }
    }
    if segmented {
        clock.lap("segment-fits", &format!("segment fits ({} segments)", segments.len()))?;
    }
    if bootstrap {
        clock.lap("bootstrap", "median bias of the priors (parametric bootstrap)")?;
    }
    let biases: Vec<Option<[f64; 2]>> =
        choices.iter().map(|c| c.as_ref().map_or(all.fit.working_bias, |own| own.fit.working_bias)).collect();
    let priors: Vec<ShapedPrior> = choices
        .iter()
        .map(|c| c.as_ref().map_or_else(|_| all.prior.clone(), |own| own.prior.clone()))
        .collect();
    let uncertainties: Vec<Option<PriorUncertainty>> =
        choices.iter().map(|c| c.as_ref().map_or(all.uncertainty, |own| own.uncertainty)).collect();
    if job.intervals == Intervals::Corrected && uncertainties.iter().any(Option::is_none) {
        let path = match &job.prior {
            PriorSource::Saved { path, .. } => path.display().to_string(),
            PriorSource::Fit => "the fit".to_string(),
        };
        return Err(Error::Input(format!(
            "{path}: the prior's covariance is not saved (a summary from an older ratepool); fit again for --intervals corrected"
        )));
    }
    // Per segment, once: the fitted prior's uncertainty spread over quadrature nodes.
    let spreads: Vec<Option<Uncertainty>> = priors
        .iter()
        .zip(&uncertainties)
        .enumerate()
        .map(|(place, (prior, known))| match (job.intervals, known, prior.parametric()) {
            (Intervals::Corrected, Some(known), Some(prior)) => {
                Some(Uncertainty::of::<F>(prior, *known, biases[place]))
            }
            _ => None,
        })
        .collect();
    let all_facts = TableFacts::of::<F>(all_table);
    Ok(PriorsInUse { all_facts, all, choices, priors, spreads, covariates: None })
}

/// The priors of a run with covariates: the covariate prior, fitted from
/// the all-groups fit without covariates, gives each pair (its own place)
/// its prior; the spread of each for corrected intervals is formed when used.
fn covariate_priors_in_use<F: Family>(
    job: &Job,
    (table, pairs): (CovariateTable, &[WeightedPair]),
    clock: &mut PhaseClock<'_>,
) -> Result<PriorsInUse> {
    let all_table = PairTable::from_weighted(pairs.iter().copied());
    if let PriorSource::Saved { path, summary } = &job.prior {
        if job.intervals == Intervals::Corrected {
            return Err(Error::Input(format!(
                "{}: a saved covariate prior holds no covariance of its coefficients; fit again for --intervals corrected",
                path.display()
            )));
        }
        let mut fit = summary.fit.clone();
        fit.source = path.display().to_string();
        let fitted = saved_cell_priors::<F>((table, pairs), (&summary.fitted_prior, path), fit.clone())?;
        // The all-groups prior is not used with covariates (the pairs' own are); it stands for the saved one.
        let all = Chosen {
            prior: ShapedPrior::Parametric(Prior::CompletePooling { mean: summary.fitted_prior.mean() }),
            fitted_prior: summary.fitted_prior.clone(),
            fit,
            warnings: Vec::new(),
            log_likelihood: None,
            uncertainty: None,
        };
        return Ok(PriorsInUse::of_covariates(TableFacts::of::<F>(&all_table), all, fitted));
    }
    let all = all_groups_prior::<F>(job, &all_table)?;
    clock.pairs(pairs.len());
    clock.lap("fit", &format!("fit without covariates ({} distinct pairs)", all_table.pairs().len()))?;
    let Some(plain_prior) = all.prior.parametric() else {
        return Err(Error::Usage("covariates do not combine with a free prior".to_string()));
    };
    let plain = PlainFit { prior: plain_prior, log_likelihood: all.log_likelihood, fit: &all.fit };
    let (facts, strength_unit) = (TableFacts::of::<F>(&all_table), F::strength_unit(&all_table));
    // The table without covariates has served (its fit, the start, the checks' facts).
    drop(all_table);
    let fitted = cell_priors::<F>(job, (table, pairs), plain, strength_unit)?;
    clock.lap("covariate-fit", &format!("covariate prior ({} distinct pairs)", fitted.own.len()))?;
    Ok(PriorsInUse::of_covariates(facts, all, fitted))
}

/// Fits the covariate prior to the table and scores every pair.
fn score_covariates_with<F: Family>(
    job: &Job,
    table: CovariateTable,
    clock: &mut PhaseClock<'_>,
) -> Result<Scored> {
    let mut table = table;
    let pairs = std::mem::take(&mut table.pairs);
    refuse_top_of_everyone(job, &pairs)?;
    let places = PairPlaces::own(pairs);
    let priors = covariate_priors_in_use::<F>(job, (table, &places.pairs), clock)?;
    score_cells::<F>(job, priors, places, clock)
}

impl PriorsInUse {
    /// The priors of a run where each pair has its own (covariates,
    /// neighbours): the cells' priors, and the all-groups one they started from.
    fn of_covariates(all_facts: TableFacts, all: Chosen, fitted: CellPriors) -> Self {
        PriorsInUse {
            all_facts,
            all,
            choices: Vec::new(),
            priors: Vec::new(),
            spreads: Vec::new(),
            covariates: Some(fitted),
        }
    }

    /// The prior of each of `places`' pairs.
    fn of_pairs<'a>(&'a self, places: &'a PairPlaces) -> PriorOfPair<'a> {
        match (&self.covariates, &places.place_of_pair) {
            (Some(cells), _) => PriorOfPair::Own(&cells.own),
            (None, Some(place_of_pair)) => PriorOfPair::Shared { priors: &self.priors, place_of_pair },
            (None, None) => unreachable!("pairs without places of their own have priors of their own"),
        }
    }

    /// The spread of `prior`, the prior at `place`, for corrected
    /// intervals (None for plug-in ones).
    fn spread<F: Family>(&self, job: &Job, place: usize, prior: &Prior) -> Option<Cow<'_, Uncertainty>> {
        match &self.covariates {
            Some(cells) => (job.intervals == Intervals::Corrected)
                .then(|| Cow::Owned(Uncertainty::of::<F>(prior, cells.uncertainties[place], None))),
            None => self.spreads[place].as_ref().map(Cow::Borrowed),
        }
    }
}

/// The prior each pair of a table is scored with.
#[derive(Clone, Copy)]
enum PriorOfPair<'a> {
    /// Its segment's, shared with the segment's other pairs.
    Shared { priors: &'a [ShapedPrior], place_of_pair: &'a [usize] },
    /// One for every pair (a segment's own checks).
    One(&'a ShapedPrior),
    /// Its own.
    Own(&'a OwnPriors),
}

impl PriorOfPair<'_> {
    fn get(&self, i: usize) -> Cow<'_, ShapedPrior> {
        match *self {
            PriorOfPair::Shared { priors, place_of_pair } => Cow::Borrowed(&priors[place_of_pair[i]]),
            PriorOfPair::One(prior) => Cow::Borrowed(prior),
            PriorOfPair::Own(own) => Cow::Owned(ShapedPrior::Parametric(own.prior(i))),
        }
    }

    /// The distinct priors, by place, where pairs share them (None where each has its own).
    fn shared(&self) -> Option<&[ShapedPrior]> {
        match self {
            PriorOfPair::Shared { priors, .. } => Some(priors),
            PriorOfPair::One(prior) => Some(std::slice::from_ref(*prior)),
            PriorOfPair::Own(_) => None,
        }
    }

    /// The place (in [`PriorOfPair::shared`]) of pair i's prior.
    fn place(&self, i: usize) -> usize {
        match self {
            PriorOfPair::Shared { place_of_pair, .. } => place_of_pair[i],
            PriorOfPair::One(_) => 0,
            PriorOfPair::Own(_) => i,
        }
    }
}

/// What the checks say of a table as a whole: its groups and the
/// overdispersion test at its pooled rate.
struct TableFacts {
    groups: f64,
    overdispersion: TestReport,
}

impl TableFacts {
    fn of<F: Family>(table: &PairTable) -> Self {
        TableFacts { groups: table.groups(), overdispersion: overdispersion_report::<F>(table) }
    }
}

/// Each pair's posterior under its segment's prior (corrected for the
/// prior's estimation when asked).
fn posteriors_of<F: Family>(job: &Job, priors: &PriorsInUse, places: &PairPlaces) -> PairPosteriors {
    let tail = job.level.tail();
    let of_pair = priors.of_pairs(places);
    let ends_priors = match (&priors.covariates, job.intervals, &priors.priors[..]) {
        (Some(cells), Intervals::PlugIn, _) => Some(EndsPriors::Own(Arc::clone(&cells.own))),
        (None, Intervals::PlugIn, [ShapedPrior::Parametric(prior)]) => Some(EndsPriors::One(*prior)),
        _ => None,
    };
    if let Some(ends_priors) = ends_priors {
        // The ends alone are held.
        let ends = (places.pairs.par_iter().enumerate())
            .map(|(i, p)| {
                let posterior = F::posterior(&ends_priors.prior(i), p.size, p.count, tail);
                [posterior.lower, posterior.upper]
            })
            .collect();
        let pairs = Arc::clone(&places.pairs);
        return PairPosteriors::Ends { ends, pairs, priors: ends_priors, with_ends: F::posterior_with_ends };
    }
    let held = (places.pairs.par_iter().enumerate())
        .map(|(i, p)| {
            let prior = of_pair.get(i);
            match prior.parametric().map(|own| (own, priors.spread::<F>(job, places.place(i), own))) {
                Some((own, Some(uncertainty))) => {
                    corrected_posterior::<F>(own, &uncertainty, p.size, p.count, tail)
                }
                _ => prior.posterior::<F>(p.size, p.count, tail),
            }
        })
        .collect();
    PairPosteriors::Held(held)
}

/// The decisions over the whole table: exceedance, flags, `prob_top`.
struct Decisions {
    prob_above: Option<Vec<f64>>,
    prob_below: Option<Vec<f64>>,
    flags: Option<FdrFlags>,
    prob_top: Option<(Vec<f64>, TopMethod)>,
}

fn decisions_of<F: Family>(
    job: &Job,
    priors: &PriorsInUse,
    places: &PairPlaces,
    posteriors: &PairPosteriors,
) -> Decisions {
    let of_pair = priors.of_pairs(places);
    // Exceedance (and so the flags) as the intervals: corrected when they are.
    let tails_at = |threshold: f64| -> Vec<(f64, f64)> {
        (places.pairs.par_iter().enumerate())
            .map(|(i, p)| {
                let prior = of_pair.get(i);
                match prior.parametric().map(|own| (own, priors.spread::<F>(job, places.place(i), own))) {
                    Some((own, Some(uncertainty))) => {
                        corrected_tails::<F>(own, &uncertainty, p.size, p.count, threshold)
                    }
                    _ => prior.rate_tails::<F>(p.size, p.count, threshold),
                }
            })
            .collect()
    };
    let (above, below) = (job.thresholds.above.map(tails_at), job.thresholds.below.map(tails_at));
    let flags = job.flag_fdr.map(|rule| {
        // The probability of no event, from the other tail (not 1 − P(event)).
        let no_event: Vec<f64> = match rule.event {
            FlagEvent::Above => above.iter().flatten().map(|&(below, _)| below).collect(),
            FlagEvent::Below => below.iter().flatten().map(|&(_, above)| above).collect(),
        };
        posterior_fdr_flags(&no_event, &places.weights(), rule.bound)
    });
    let prob_top = job.top.map(|rule| top_of::<F>(job, rule, priors, places, posteriors));
    Decisions {
        prob_above: above.map(|tails| tails.into_iter().map(|(_, above)| above).collect()),
        prob_below: below.map(|tails| tails.into_iter().map(|(below, _)| below).collect()),
        flags,
        prob_top,
    }
}

/// `prob_top` per pair, by joint draws or by the threshold.
fn top_of<F: Family>(
    job: &Job,
    rule: TopRule,
    priors: &PriorsInUse,
    places: &PairPlaces,
    posteriors: &PairPosteriors,
) -> (Vec<f64>, TopMethod) {
    let (all_pairs, of_pair) = (&places.pairs, priors.of_pairs(places));
    let order = job.ranks.unwrap_or(RankOrder::HighestFirst);
    let laws: Vec<RateLaw> = posteriors.iter().map(|p| F::rate_law(&p)).collect();
    let weights = places.weights();
    let groups: f64 = weights.iter().sum();
    // A free prior's posteriors are masses on a grid, not laws to draw from:
    // its groups get the threshold method (the CLI refuses --top-method draws).
    let free = matches!(job.prior_shape, PriorShape::Free { .. });
    let by_draws = match rule.method {
        _ if free => false,
        TopChoice::Draws => true,
        TopChoice::Threshold => false,
        TopChoice::Auto => groups * rule.draws_for(groups) as f64 <= DRAW_BUDGET,
    };
    let draws = rule.draws_for(groups);
    let beyond = |i: usize, c: f64| {
        let pair = &all_pairs[i];
        let (below, above) = of_pair.get(i).rate_tails::<F>(pair.size, pair.count, c);
        if order == RankOrder::HighestFirst {
            above
        } else {
            below
        }
    };
    if by_draws {
        let p = top_probabilities_by_draws(&laws, &weights, (rule.k, order), (draws, job.seed), beyond);
        (p, TopMethod::Draws { draws, seed: job.seed })
    } else {
        let means: Vec<f64> = posteriors.iter().map(|p| p.mean).collect();
        let kinds = if free {
            LawKinds {
                all_points: posteriors.iter().all(|p| p.sd == 0.0),
                floored: F::TERMS.rates != RateRange::Real,
            }
        } else {
            LawKinds::of(&laws)
        };
        let (p, threshold) = top_probabilities_by_threshold(&means, &weights, kinds, rule.k, order, beyond);
        (p, TopMethod::Threshold { threshold })
    }
}

/// The scored table: the pairs, their posteriors and decisions, and what
/// the summary says of them (pull, checks, warnings, segments).
fn scored_of<F: Family>(
    job: &Job,
    segments: Vec<SegmentPairs>,
    priors: PriorsInUse,
    places: PairPlaces,
    (posteriors, decisions): (PairPosteriors, Decisions),
) -> Scored {
    let segmented = !job.segments.is_empty();
    let pull = crate::core::diagnostics::pull_of_pairs(&F::TERMS, &places.pairs, |i| posteriors.get(i));
    let checks = model_checks::<F>(job, &places.pairs, &priors.all_facts, priors.of_pairs(&places));
    let PriorsInUse { all, choices, priors, covariates, .. } = priors;
    let PairPlaces { pairs: all_pairs, ranges, .. } = places;
    let (fitted_prior, fit, mut warnings) = match &covariates {
        Some(cells) => (cells.fitted_prior.clone(), cells.fit.clone(), cells.warnings.clone()),
        None => (all.fitted_prior.clone(), all.fit.clone(), all.warnings.clone()),
    };
    if let (None, ShapedPrior::Parametric(Prior::CompletePooling { .. })) = (&covariates, &all.prior) {
        warnings.push("no overdispersion: every group is given the pooled rate (complete pooling); intervals are degenerate".to_string());
    }
    let (covariate_score, neighbourhood) = match covariates {
        Some(cells) => {
            let (counts, report) = cells.neighbours.unzip();
            let score = CovariateScore { values: cells.values, own: cells.own, neighbours: counts };
            (Some(score), report)
        }
        None => (None, None),
    };
    if checks.poor_fit() {
        warnings.push(format!(
            "the prior does not describe {} well: the counts sit unevenly in their predictive distributions (calibration chi-square {:.1} on 9 df, {}; raw-rate variance {:.2} times the expected). One {} prior cannot describe rates that come from different kinds of group (two humps, say): fit per segment with --by where a column names the kinds, or a prior of any shape with --prior-shape free where none does, before trusting the intervals and flags",
            checks.data,
            checks.calibration.statistic,
            crate::summary::p_value_text(checks.calibration.p_value),
            checks.raw_rate_variance.ratio.unwrap_or(f64::NAN),
            match job.prior_shape {
                PriorShape::Parametric => F::TERMS.prior_words.law,
                PriorShape::Free { .. } => "free",
            }
        ));
    }
    // Restricted likelihoods of fits with different means (one per segment)
    // are not comparable (common practice), so REML fits get no segment test.
    let segment_test = match (segmented, &job.prior, job.likelihood) {
        (true, PriorSource::Fit, Likelihood::Marginal) => {
            likelihood_ratio_test::<F>(&all, &choices, &segments)
        }
        _ => None,
    };
    let scores = if segmented {
        let all_groups = (&all.fitted_prior, &all_pairs[..], &posteriors);
        segment_scores::<F>(job, segments, choices, (&priors, &ranges), all_groups)
    } else {
        Vec::new()
    };
    let poor = scores.iter().filter(|s| s.checks.poor_fit()).count();
    if poor > 0 {
        warnings.push(format!(
            "the prior does not describe the groups of {poor} of {} segments well (their calibration p-value is below 0.001; the summary's segments hold each one's checks): look at those segments for mixed kinds of group",
            scores.len()
        ));
    }
    let fallbacks = scores.iter().filter(|s| s.fallback.is_some()).count();
    if fallbacks > 0 {
        warnings.push(format!(
            "{fallbacks} of {} segments took the prior fitted to all groups (prior_fallback = true); the summary's segments say why",
            scores.len()
        ));
    }
    Scored {
        pairs: all_pairs,
        posteriors: Arc::new(posteriors),
        fitted_prior,
        fit,
        covariates: covariate_score,
        warnings,
        pull,
        prob_above: decisions.prob_above.map(Arc::new),
        prob_below: decisions.prob_below.map(Arc::new),
        flags: decisions.flags,
        prob_top: decisions.prob_top,
        segments: scores,
        segment_test,
        checks,
        comparison: None,
        neighbourhood,
    }
}

/// Per segment: its pairs' range, the prior it was scored with (its own,
/// or the all-groups one with the reason), its pull and its own checks.
fn segment_scores<F: Family>(
    job: &Job,
    segments: Vec<SegmentPairs>,
    choices: Vec<std::result::Result<Chosen, String>>,
    (priors, ranges): (&[ShapedPrior], &[std::ops::Range<usize>]),
    (all_prior, all_pairs, posteriors): (&FittedPrior, &[WeightedPair], &PairPosteriors),
) -> Vec<SegmentScore> {
    // Segments in parallel, collected in order: the same bytes on any number of threads.
    segments
        .into_par_iter()
        .zip(choices)
        .zip(ranges)
        .enumerate()
        .map(|(place, ((segment, choice), range))| {
            // The segment's own checks: its pairs under the prior it was scored with.
            let checks = model_checks::<F>(
                job,
                &all_pairs[range.clone()],
                &TableFacts::of::<F>(&segment.table),
                PriorOfPair::One(&priors[place]),
            );
            let mut pull =
                crate::core::diagnostics::pull_of_pairs(&F::TERMS, &all_pairs[range.clone()], |i| {
                    posteriors.get(range.start + i)
                });
            pull.max_shift_row = pull.max_shift_row.map(|row| row + range.start);
            let (fitted_prior, fit, fallback) = match choice {
                Ok(own) => (own.fitted_prior, Some(own.fit), None),
                Err(reason) => (all_prior.clone(), None, Some(reason)),
            };
            SegmentScore {
                groups: segment.table.groups(),
                key: segment.key,
                samples: segment.samples,
                pairs: range.clone(),
                fitted_prior,
                fit,
                pull,
                fallback,
                checks,
            }
        })
        .collect()
}

/// Tables of more groups than this get no bootstrap: the median bias of a
/// fit shrinks as 1/groups, and at 1,000 groups the corrected coverage was
/// already within 0.1 point of 95% without it (benches/coverage.py).
const BOOTSTRAP_MAX_GROUPS: f64 = 20_000.0;

/// The median bias of a chosen prior fitted to `table`, for corrected
/// intervals (None for complete pooling, a large table or failed refits).
fn bias_of<F: Family>(job: &Job, chosen: &Chosen, table: &PairTable, salt: u64) -> Option<[f64; 2]> {
    let ShapedPrior::Parametric(Prior::Conjugate { natural }) = chosen.prior else { return None };
    if table.groups() > BOOTSTRAP_MAX_GROUPS {
        return None;
    }
    crate::core::bootstrap::median_bias::<F>(natural, table, job.likelihood, job.seed.wrapping_add(salt))
}

/// A calibration p-value below this calls the fit poor: a false alarm one
/// time in a thousand when the model holds.
pub(super) const POOR_FIT_P: f64 = 1e-3;

/// The checks of the model against the data scored (each pair under its
/// prior): log marginal likelihood, the overdispersion test, the calibration
/// histogram and the variance of the raw rates.
fn model_checks<F: Family>(
    job: &Job,
    pairs: &[WeightedPair],
    facts: &TableFacts,
    priors: PriorOfPair<'_>,
) -> ChecksReport {
    let prior_of = |i: usize| priors.get(i);
    let weights: Vec<f64> = pairs.iter().map(|p| p.weight).collect();
    let calibration =
        calibration(&weights, |i| prior_of(i).predictive_cdf::<F>(pairs[i].size, pairs[i].count), job.seed);
    let (mut observed, mut expected, mut with_data) = (0.0, 0.0, 0.0);
    for (i, pair) in pairs.iter().enumerate() {
        let Some(raw) = F::TERMS.raw_value(pair.size, pair.count) else { continue };
        let mean = prior_of(i).mean::<F>();
        observed += pair.weight * (raw - mean).powi(2);
        expected += pair.weight * prior_of(i).raw_rate_variance::<F>(pair.size);
        with_data += pair.weight;
    }
    let (observed, expected) = (observed / with_data.max(1.0), expected / with_data.max(1.0));
    // Terms in parallel, summed in table order: the same bits on any number of threads.
    // A prior's shared values once per prior, or, where each pair has its own
    // (covariates, neighbours), as each pair is met: a table of them would
    // be 64 bytes a pair.
    let shared = priors.shared().filter(|shared| shared.len() < pairs.len());
    let points: Vec<PriorPoint<F>> = shared.map_or_else(Vec::new, |s| s.iter().map(PriorPoint::of).collect());
    let term = |(i, p): (usize, &WeightedPair)| {
        let log_pmf = match shared {
            Some(_) => points[priors.place(i)].log_pmf(p),
            None => PriorPoint::<F>::of(&priors.get(i)).log_pmf(p),
        };
        p.weight * log_pmf
    };
    let terms: Vec<f64> = pairs.par_iter().enumerate().map(term).collect();
    let log_likelihood: f64 = terms.iter().sum();
    let groups = facts.groups;
    ChecksReport {
        data: match job.prior {
            PriorSource::Fit => "the fitted data",
            PriorSource::Saved { .. } => "the scored data under the saved prior",
        }
        .to_string(),
        log_marginal_likelihood: log_likelihood,
        log_marginal_likelihood_per_group: log_likelihood / groups,
        overdispersion_test: facts.overdispersion.clone(),
        verdict: ChecksReport::verdict_of(calibration.groups, calibration.p_value, POOR_FIT_P),
        calibration: CalibrationReport::of(&calibration, job.seed),
        raw_rate_variance: VarianceReport {
            observed,
            expected,
            ratio: (expected > 0.0).then(|| observed / expected),
        },
    }
}

/// The family's score test for overdispersion on `table`, at its pooled
/// rate, with its one-sided p-value.
fn overdispersion_report<F: Family>(table: &PairTable) -> TestReport {
    let z = F::overdispersion_z(table, F::pooled_mean(table));
    TestReport {
        name: F::TERMS.overdispersion_test.to_string(),
        statistic: z,
        p_value: 0.5 * crate::core::incomplete::erfc(z / std::f64::consts::SQRT_2),
    }
}

/// A prior prepared for the log marginal pmf of many pairs.
enum PriorPoint<F: Family> {
    /// Complete pooling at this rate.
    Pooled(f64),
    /// A proper prior, at its point in working coordinates.
    Proper(F::AtPoint),
    /// A free prior.
    Free(std::sync::Arc<FreePrior>),
}

impl<F: Family> PriorPoint<F> {
    fn of(prior: &ShapedPrior) -> Self {
        match prior {
            ShapedPrior::Parametric(Prior::CompletePooling { mean }) => PriorPoint::Pooled(*mean),
            ShapedPrior::Parametric(Prior::Conjugate { natural }) => {
                let (mean, strength) = F::mean_strength_of_natural(*natural);
                PriorPoint::Proper(F::at_point(F::working(mean, strength)))
            }
            ShapedPrior::Free(free) => PriorPoint::Free(free.clone()),
        }
    }

    /// The log marginal pmf of one pair (the pooled pmf under complete pooling).
    fn log_pmf(&self, pair: &WeightedPair) -> f64 {
        match self {
            PriorPoint::Pooled(mean) => F::pooled_log_pmf(*mean, pair),
            PriorPoint::Proper(at) => F::pair_terms_at(at, pair).log_likelihood,
            PriorPoint::Free(free) => free.log_pmf::<F>(pair),
        }
    }
}

/// The likelihood-ratio test of one prior for all groups against the priors
/// per segment as used ([`segment_likelihood_ratio`], two parameters a
/// prior); where a segment sits at the boundary of no overdispersion it is
/// conservative.
fn likelihood_ratio_test<F: Family>(
    all: &Chosen,
    choices: &[std::result::Result<Chosen, String>],
    segments: &[SegmentPairs],
) -> Option<SegmentTest> {
    let own = choices.iter().filter(|c| c.is_ok()).count();
    let mut segmented = 0.0;
    for (choice, segment) in choices.iter().zip(segments) {
        segmented += match choice {
            Ok(own) => own.log_likelihood?,
            Err(_) => log_marginal_at::<F>(&segment.table, &all.fitted_prior),
        };
    }
    segment_likelihood_ratio(2, (own, choices.len() - own), segmented, all.log_likelihood?)
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

fn describe_failure(failure: FitFailure, model: Model) -> String {
    match failure {
        FitFailure::Unidentifiable(Unidentifiable::MeanOnly { mean }) => format!(
            "only the prior mean ({mean:.6}) is identifiable: {}; no strength is reported",
            model.terms().mean_only_data
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
    }
}

fn boundary_name(boundary: Boundary) -> &'static str {
    match boundary {
        Boundary::None => "none",
        Boundary::NoOverdispersion => "no-overdispersion",
    }
}

fn fitted_prior_of(model: Model, fitted: &Fit) -> FittedPrior {
    let natural = match fitted.prior {
        Prior::Conjugate { natural } => Some(natural),
        Prior::CompletePooling { .. } => None,
    };
    let parts = FittedPriorParts {
        natural,
        natural_se: fitted.natural_se,
        mean: fitted.mean,
        mean_se: fitted.mean_se,
        strength: fitted.strength,
        strength_se: fitted.strength_se,
    };
    FittedPrior::of_model(model.terms(), parts)
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
        boundary_score: fitted.boundary_score,
        likelihood: match fitted.restricted_log_likelihood {
            Some(_) => "restricted",
            None => "marginal",
        }
        .to_string(),
        restricted_log_likelihood: fitted.restricted_log_likelihood,
        pooling_test: Some(pooling_report(&fitted.pooling)),
        working_bias: None,
        working_covariance: match fitted.uncertainty {
            PriorUncertainty::Working(cov) => Some(cov),
            PriorUncertainty::PooledMean(_) => None,
        },
    }
}

/// The wire form of the likelihood-ratio test against complete pooling.
fn pooling_report(test: &PoolingTest) -> TestReport {
    TestReport {
        name: "likelihood ratio against complete pooling, p from the 50:50 mixture of chi-square(0) and chi-square(1)"
            .to_string(),
        statistic: test.statistic,
        p_value: test.p_value,
    }
}

/// Refuses to score with segments other than those the prior was fitted
/// with: each segment needs its own prior from the file.
pub(super) fn refuse_other_segments(path: &Path, fitted: &[String], asked: &[String]) -> Result<()> {
    let message = match (fitted.is_empty(), asked.is_empty()) {
        _ if fitted == asked => return Ok(()),
        (true, _) => format!(
            "the prior was fitted without segments, so it holds no prior per segment of [{}]; score without --by, or fit again with --by {}",
            asked.join(", "),
            asked.join(",")
        ),
        (false, true) => format!(
            "the prior was fitted per segment of [{}]: give --by {} to score each segment with its prior",
            fitted.join(", "),
            fitted.join(",")
        ),
        (false, false) => format!(
            "the prior was fitted with segments by [{}], not by [{}]; fit again with these --by columns",
            fitted.join(", "),
            asked.join(", ")
        ),
    };
    Err(Error::Input(format!("{}: {message}", path.display())))
}

/// The prior held in a saved summary (the whole table's, or a segment's),
/// checked against the model in use.
fn prior_of_saved(
    fitted_prior: &FittedPrior,
    saved_model: &str,
    path: &Path,
    model: Model,
) -> Result<ShapedPrior> {
    if saved_model != model.name() {
        return Err(Error::Input(format!(
            "{}: the prior is for the {} model, not {}",
            path.display(),
            saved_model,
            model.name()
        )));
    }
    if let Some(free) = fitted_prior.free_part() {
        let spacing = Spacing::from_name(&free.spacing).ok_or_else(|| {
            Error::Input(format!(
                "{}: the free prior's spacing '{}' is not known",
                path.display(),
                free.spacing
            ))
        })?;
        let prior = FreePrior::new(free.grid.clone(), free.masses.clone(), spacing)
            .map_err(|fault| Error::Input(format!("{}: the free prior: {fault}", path.display())))?;
        let rates = model.terms().rates;
        if let Some(outside) = prior.points().iter().find(|&&x| !rates.contains(x)) {
            return Err(Error::Input(format!(
                "{}: the free prior's grid holds {outside}, which is not a rate {}",
                path.display(),
                rates.describe()
            )));
        }
        return Ok(ShapedPrior::Free(std::sync::Arc::new(prior)));
    }
    if let Err(reason) = fitted_prior.check(model.terms()) {
        return Err(Error::Input(format!(
            "{}: the prior does not match the model {}: {reason}",
            path.display(),
            saved_model
        )));
    }
    let ([first, second], mean) = (fitted_prior.natural(model.terms()), fitted_prior.mean());
    let valid = |v: f64| v.is_finite() && v > 0.0;
    // The first natural parameter is a location of either sign for a model of real values.
    let rates = model.terms().rates;
    let first_valid = |v: f64| if rates == RateRange::Real { v.is_finite() } else { valid(v) };
    match (first, second) {
        (Some(a), Some(b)) if first_valid(a) && valid(b) => {
            Ok(ShapedPrior::Parametric(Prior::Conjugate { natural: [a, b] }))
        }
        (None, None) if rates.holds_inside(mean) => {
            Ok(ShapedPrior::Parametric(Prior::CompletePooling { mean }))
        }
        _ => Err(Error::Input(format!(
            "{}: the prior's parameters are missing or out of range",
            path.display()
        ))),
    }
}
