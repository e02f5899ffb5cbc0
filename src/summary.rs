//! The run summary's JSON wire format (written last, so its presence means
//! the table beside it is complete), and how its figures are written in
//! words (p-values, plain decimals) wherever they are shown.
//!
//! These types are the file format; the numerical core never sees them. They
//! sit above the pipeline, which fills them, and the report layers, which
//! show them.

use crate::core::model::{ModelTerms, PriorFigure, PriorKey};
use serde::{Deserialize, Serialize};

/// The version of the summary's layout that this build writes. Version 1
/// (files without the key) kept the prior under `hyperprior` and the flag
/// level under `flags.bound`, both still read; its `top.best` is now the
/// summary's `rank_order`.
pub const SUMMARY_FORMAT_VERSION: u32 = 2;

/// The whole summary file.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Summary {
    /// The layout's version ([`SUMMARY_FORMAT_VERSION`] when written; 1 in
    /// files from before it was recorded).
    #[serde(default = "first_format")]
    pub format_version: u32,
    /// The model's name ([`crate::core::model::Model::name`]).
    pub model: String,
    /// Groups scored.
    pub groups: u64,
    /// Data rows in the input.
    pub rows_read: u64,
    /// Rows rejected by validation (only with `--on-invalid skip`).
    pub rows_rejected: u64,
    /// Credible level of the intervals.
    pub level: f64,
    /// "plug-in" (the fitted prior taken as known) or "corrected" (Kass and
    /// Steffey's first-order correction for its estimation).
    #[serde(default = "plug_in")]
    pub intervals: String,
    /// The prior: fitted to the data in a `fit`, read from the prior file in a `score`.
    #[serde(rename = "prior", alias = "hyperprior")]
    pub fitted_prior: FittedPrior,
    /// How the prior was obtained.
    pub fit: FitReport,
    /// How far the groups were pulled toward the pool.
    pub pull: PullReport,
    /// The segment columns of `--by` (empty: one prior for all groups).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub segment_columns: Vec<String>,
    /// Per segment: its key, groups, prior, fit, pull and fallback reason.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub segments: Vec<SegmentReport>,
    /// One prior for all groups against one per segment.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub segment_test: Option<SegmentTest>,
    /// The thresholds of the exceedance columns, when asked for.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub thresholds: Option<ThresholdReport>,
    /// The flags under a posterior false-discovery rate, when asked for.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub flags: Option<FlagReport>,
    /// Does the model fit the data scored? Computed on the fitted data in a
    /// `fit`, and on the scored data under the saved prior in a `score`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub checks: Option<ChecksReport>,
    /// How `prob_top` was computed, when asked for.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub top: Option<TopReport>,
    /// The input's column names, as the output table carries them; null
    /// in files from before they were recorded.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub columns: Option<ColumnsReport>,
    /// "highest-first" or "lowest-first": the order of the ranks and of
    /// `prob_top` (which rates are best); null without either.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub rank_order: Option<String>,
    /// With `--prior-shape free`: the free prior against the parametric one
    /// fitted to the same data.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub prior_comparison: Option<ShapeComparison>,
    /// How the expected counts were made, with `--population` and `--strata`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub standardisation: Option<StandardisationReport>,
    /// With `--neighbours`: each area's prior from its neighbourhood.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub neighbourhood: Option<NeighbourhoodReport>,
    /// Conditions a reader must know about (boundary results, rejected rows).
    pub warnings: Vec<String>,
}

/// The neighbour prior (`--neighbours`, Marshall's local empirical Bayes):
/// each area's Gamma prior fitted by moments to the area and its
/// neighbours; the summary's `prior` is then the all-areas prior, which the
/// areas without neighbours take.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct NeighbourhoodReport {
    /// The neighbour table read.
    pub file: String,
    /// Its data rows.
    pub rows: u64,
    /// Areas scored.
    pub areas: u64,
    /// Pairs of neighbouring areas among them, each counted once however
    /// often (and in whichever order) the table lists it.
    pub pairs: u64,
    /// Areas with no neighbour among the areas scored (or whose
    /// neighbourhood has no exposure): they take the all-areas prior.
    pub without_neighbours: u64,
    /// Areas whose local variance is zero (the neighbourhood's rates vary no
    /// more than Poisson noise allows): pooled to the local mean.
    pub zero_variance: u64,
    /// Rows of the table naming an area that is not among those scored
    /// (left out), and the first such area.
    pub rows_left_out: u64,
    /// The first area named but not scored, when any.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub first_left_out: Option<String>,
}

impl Summary {
    /// Where each group's own prior centre (`prior_mean`) comes from, in
    /// words, when groups have their own: "its covariates" or "its
    /// neighbours"; None when one prior serves all groups (or a segment).
    pub fn own_centres(&self) -> Option<&'static str> {
        if self.fitted_prior.covariates().is_some() {
            Some("its covariates")
        } else if self.neighbourhood.is_some() {
            Some("its neighbours")
        } else {
            None
        }
    }
}

/// Expected counts by indirect standardisation: the standard and its rates.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct StandardisationReport {
    /// "internal" (each stratum's pooled rate over all areas), "external"
    /// (the rates of `reference_file`), or "saved" (in a `score`: the rates
    /// of the fit whose summary `reference_file` is).
    pub standard: String,
    /// The reference rates' file (external), or the saved prior's summary (saved).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub reference_file: Option<String>,
    /// The population column.
    pub population: String,
    /// The columns whose values make a stratum.
    pub strata: Vec<String>,
    /// Each stratum's reference rate, in the order the strata were met.
    pub rates: Vec<StratumRate>,
}

/// One stratum's reference rate; for an internal standard, with the events
/// and population it was pooled from.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct StratumRate {
    /// The stratum's values, one per strata column.
    pub stratum: Vec<String>,
    /// Events per unit of population.
    pub rate: f64,
    /// Events over all areas (internal standard).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub events: Option<f64>,
    /// Population over all areas (internal standard).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub population: Option<f64>,
}

/// The names of the group, count and size columns of a run.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct ColumnsReport {
    /// The group id column.
    pub group: String,
    /// The count column (successes, events or estimates).
    pub count: String,
    /// The size column (trials, exposure or standard errors).
    pub size: String,
}

/// Checks of the model against the data scored.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ChecksReport {
    /// "the fitted data", or "the scored data under the saved prior".
    pub data: String,
    /// Log marginal likelihood of these data under the prior in use.
    pub log_marginal_likelihood: f64,
    /// The same per group.
    pub log_marginal_likelihood_per_group: f64,
    /// The overdispersion score test on these data.
    pub overdispersion_test: TestReport,
    /// Randomised probability integral transform of each count in its prior predictive.
    pub calibration: CalibrationReport,
    /// Variance of the raw rates around their prior means: observed and expected.
    pub raw_rate_variance: VarianceReport,
    /// [`VERDICT_FITS`], [`VERDICT_POOR_FIT`] (with the reason in the
    /// warnings), or, below [`MIN_GROUPS_TO_JUDGE`] groups, the words of
    /// [`ChecksReport::too_few_to_judge`].
    pub verdict: String,
}

/// The calibration's verdict when the groups sit evenly in their predictive distributions.
pub const VERDICT_FITS: &str = "fits";
/// The calibration's verdict when its p-value is below 0.001.
pub const VERDICT_POOR_FIT: &str = "poor fit";
/// Below this many groups the calibration gives no verdict: ten bins need
/// about five groups each for Pearson's chi-square to hold (common practice).
pub const MIN_GROUPS_TO_JUDGE: u64 = 50;
/// How the verdict of too few groups begins.
const TOO_FEW: &str = "too few groups to judge";

impl ChecksReport {
    /// The verdict of a calibration over `groups` groups at p-value `p`,
    /// poor below `poor_below`.
    pub fn verdict_of(groups: u64, p: f64, poor_below: f64) -> String {
        if groups < MIN_GROUPS_TO_JUDGE {
            format!("{TOO_FEW} (fewer than {MIN_GROUPS_TO_JUDGE})")
        } else if p < poor_below {
            VERDICT_POOR_FIT.to_string()
        } else {
            VERDICT_FITS.to_string()
        }
    }

    /// The calibration found a poor fit.
    pub fn poor_fit(&self) -> bool {
        self.verdict == VERDICT_POOR_FIT
    }

    /// The groups were too few for the calibration to judge.
    pub fn too_few_to_judge(&self) -> bool {
        self.verdict.starts_with(TOO_FEW)
    }
}

/// The calibration histogram and its test.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CalibrationReport {
    /// Groups in each tenth of (0, 1); equal under the model, up to noise.
    pub bins: Vec<u64>,
    /// Pearson's chi-square against equal bins.
    pub statistic: f64,
    /// Degrees of freedom (9).
    pub degrees_of_freedom: u64,
    /// Upper chi-square tail.
    pub p_value: f64,
    /// Groups located (all, or a seeded sample of 100,000).
    pub groups: u64,
    /// Seed of the randomisation.
    pub seed: u64,
}

impl CalibrationReport {
    /// The report of `calibration`, drawn with `seed`.
    pub fn of(calibration: &crate::core::diagnostics::Calibration, seed: u64) -> Self {
        CalibrationReport {
            bins: calibration.bins.to_vec(),
            statistic: calibration.statistic,
            degrees_of_freedom: 9,
            p_value: calibration.p_value,
            groups: calibration.groups,
            seed,
        }
    }

    /// The terminal's words for the test: "chi-square … on … df, p … over … groups".
    pub fn test_words(&self) -> String {
        format!(
            "chi-square {:.2} on {} df, {} over {} groups",
            self.statistic,
            self.degrees_of_freedom,
            p_value_text(self.p_value),
            self.groups
        )
    }
}

/// Observed against expected variance of the raw rates.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct VarianceReport {
    /// Mean squared difference of raw rate and prior mean, over groups with data.
    pub observed: f64,
    /// Its expectation under the prior predictive.
    pub expected: f64,
    /// observed / expected: near 1 when the prior's spread is right (null
    /// when no group has data or no variance is expected).
    pub ratio: Option<f64>,
}

/// `prob_top`: the probability of being among the K best rates.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TopReport {
    /// K (which rates are best: the summary's `rank_order`).
    pub k: u64,
    /// "draws" (joint draws from every posterior) or "threshold".
    pub method: String,
    /// Draws made (method "draws").
    pub draws: Option<u64>,
    /// Seed of the draws (method "draws").
    pub seed: Option<u64>,
    /// The threshold c with K groups expected beyond it (method "threshold").
    pub threshold: Option<f64>,
}

/// One segment of a run with `--by`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SegmentReport {
    /// Segment column to value (null for a null value).
    pub key: std::collections::BTreeMap<String, Option<String>>,
    /// Groups in the segment.
    pub groups: u64,
    /// The prior its groups were scored with (the all-groups prior on a fallback).
    #[serde(rename = "prior", alias = "hyperprior")]
    pub fitted_prior: FittedPrior,
    /// Its own fit; null when it fell back to the all-groups prior.
    pub fit: Option<FitReport>,
    /// How far its groups were pulled.
    pub pull: PullReport,
    /// Why it took the all-groups prior; null when it has its own.
    pub fallback: Option<String>,
    /// Does the prior it was scored with fit its groups (its own checks)?
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub checks: Option<ChecksReport>,
}

/// A likelihood-ratio test of one prior for all groups against one per segment.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SegmentTest {
    /// What is tested.
    pub name: String,
    /// Twice the gain in log marginal likelihood.
    pub statistic: f64,
    /// Degrees of freedom of the chi-square reference.
    pub degrees_of_freedom: u64,
    /// Upper tail of the chi-square distribution at the statistic.
    pub p_value: f64,
}

/// The thresholds T of `prob_above` (P(rate > T)) and `prob_below` (P(rate < T)).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ThresholdReport {
    /// T of `prob_above`.
    pub above: Option<f64>,
    /// T of `prob_below`.
    pub below: Option<f64>,
}

/// What was flagged, and how many flags are expected to be false.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FlagReport {
    /// "above" or "below": the event flagged.
    pub event: String,
    /// The threshold of the event.
    pub threshold: f64,
    /// Q, the false-discovery level: the bound on the mean posterior
    /// probability of no event among the flagged.
    #[serde(alias = "bound")]
    pub fdr_level: f64,
    /// Groups flagged.
    pub groups_flagged: u64,
    /// The expected number of flagged groups where the event does not hold.
    pub expected_false_flags: f64,
}

fn first_format() -> u32 {
    1
}

fn plug_in() -> String {
    "plug-in".to_string()
}

/// The prior, in the parameters of its model: the keys its family names
/// ([`ModelTerms::prior_keys`]), in the family's order, each a number or
/// null. Every family writes `mean`, `mean_se`, `strength` and `strength_se`;
/// a prior read from a file is checked against its model with
/// [`FittedPrior::check`] before use.
///
/// A prior whose centre follows covariates writes, after its keys (the
/// groups' mean centre and the common parameter with its standard error),
/// the [`CovariatePrior`]'s keys in the same object.
#[derive(Debug, Clone, PartialEq)]
pub struct FittedPrior {
    entries: Vec<(String, Option<f64>)>,
    covariates: Option<Box<CovariatePrior>>,
    free: Option<Box<FreePriorReport>>,
}

/// The free part of a prior (`--prior-shape free`): masses on a grid of
/// rates, written after its mean and sd in the same object.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FreePriorReport {
    /// "free" (the key is not "shape", a Gamma prior's parameter).
    pub prior_shape: String,
    /// How the grid is spaced: "linear", "log" or "logit".
    pub spacing: String,
    /// The points holding at least [`FreePriorReport::SHOWN_MASS`] of the
    /// mass, as [rate, mass]: what the prior looks like.
    pub support: Vec<[f64; 2]>,
    /// The certified bound on how far the fit's log marginal likelihood is
    /// below the maximum on the grid (0 for a point mass).
    pub duality_gap: f64,
    /// Every point of the grid.
    pub grid: Vec<f64>,
    /// The mass at each point of the grid (what `score --prior` reads).
    pub masses: Vec<f64>,
}

impl FreePriorReport {
    /// The least mass of a point listed in `support`.
    pub const SHOWN_MASS: f64 = 1e-3;
}

/// The keys [`FreePriorReport`] writes into the prior's object.
const FREE_KEYS: [&str; 6] = ["prior_shape", "spacing", "support", "duality_gap", "grid", "masses"];

/// The covariate part of a prior: how each covariate entered, the
/// coefficients of the linear predictor on the model's link, and the test
/// against the same model without covariates.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CovariatePrior {
    /// The link of the prior mean: "logit", "log" or "identity".
    pub link: String,
    /// The coefficients: the intercept, then per covariate one (a number
    /// or its log) or one per level after the first.
    pub coefficients: Vec<CoefficientReport>,
    /// How each covariate column entered.
    pub covariates: Vec<CovariateReport>,
    /// The likelihood-ratio test against the model without covariates
    /// (null under REML, whose likelihoods with different coefficients are
    /// not comparable).
    pub likelihood_ratio_test: Option<SegmentTest>,
}

/// One coefficient of a covariate prior.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CoefficientReport {
    /// `intercept`, the column, `log(column)`, or `column=level`.
    pub name: String,
    /// The estimate on the link scale.
    pub estimate: f64,
    /// Its standard error (inverse observed information).
    pub se: f64,
    /// estimate / se.
    pub z: f64,
    /// Two-sided p-value of z under N(0, 1).
    pub p: f64,
}

/// How one covariate column entered the linear predictor.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CovariateReport {
    /// The input column.
    pub column: String,
    /// "number", "log" or "levels".
    pub enters_as: String,
    /// The levels in sorted order, the first the reference (levels only).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub levels: Vec<String>,
}

/// The keys [`CovariatePrior`] writes into the prior's object.
const COVARIATE_KEYS: [&str; 4] = ["link", "coefficients", "covariates", "likelihood_ratio_test"];

impl Serialize for FittedPrior {
    fn serialize<S: serde::Serializer>(&self, serializer: S) -> Result<S::Ok, S::Error> {
        use serde::ser::SerializeMap;
        let mut map = serializer.serialize_map(None)?;
        for (key, value) in &self.entries {
            map.serialize_entry(key, value)?;
        }
        if let Some(covariates) = &self.covariates {
            map.serialize_entry("link", &covariates.link)?;
            map.serialize_entry("coefficients", &covariates.coefficients)?;
            map.serialize_entry("covariates", &covariates.covariates)?;
            map.serialize_entry("likelihood_ratio_test", &covariates.likelihood_ratio_test)?;
        }
        if let Some(free) = &self.free {
            map.serialize_entry("prior_shape", &free.prior_shape)?;
            map.serialize_entry("spacing", &free.spacing)?;
            map.serialize_entry("support", &free.support)?;
            map.serialize_entry("duality_gap", &free.duality_gap)?;
            map.serialize_entry("grid", &free.grid)?;
            map.serialize_entry("masses", &free.masses)?;
        }
        map.end()
    }
}

impl<'de> Deserialize<'de> for FittedPrior {
    fn deserialize<D: serde::Deserializer<'de>>(deserializer: D) -> Result<Self, D::Error> {
        struct Entries;
        impl<'de> serde::de::Visitor<'de> for Entries {
            type Value = FittedPrior;
            fn expecting(&self, f: &mut std::fmt::Formatter) -> std::fmt::Result {
                f.write_str("a prior: keys with numbers or null, among them the mean")
            }
            fn visit_map<A: serde::de::MapAccess<'de>>(self, mut map: A) -> Result<FittedPrior, A::Error> {
                let mut entries = Vec::new();
                let mut parts = serde_json::Map::new();
                let mut free_parts = serde_json::Map::new();
                while let Some(key) = map.next_key::<String>()? {
                    if COVARIATE_KEYS.contains(&key.as_str()) {
                        parts.insert(key, map.next_value::<serde_json::Value>()?);
                    } else if FREE_KEYS.contains(&key.as_str()) {
                        free_parts.insert(key, map.next_value::<serde_json::Value>()?);
                    } else {
                        let value = map.next_value::<Option<f64>>()?;
                        entries.push((key, value));
                    }
                }
                let covariates = if parts.is_empty() {
                    None
                } else {
                    let part: CovariatePrior = serde_json::from_value(serde_json::Value::Object(parts))
                        .map_err(serde::de::Error::custom)?;
                    Some(Box::new(part))
                };
                let free = if free_parts.is_empty() {
                    None
                } else {
                    let part: FreePriorReport = serde_json::from_value(serde_json::Value::Object(free_parts))
                        .map_err(serde::de::Error::custom)?;
                    Some(Box::new(part))
                };
                let prior = FittedPrior { entries, covariates, free };
                match prior.get("mean") {
                    Some(_) => Ok(prior),
                    None => Err(serde::de::Error::missing_field("mean")),
                }
            }
        }
        deserializer.deserialize_map(Entries)
    }
}

/// A free prior against the parametric prior fitted to the same data, each
/// scored the same way (per segment with `--by`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ShapeComparison {
    /// The parametric prior fitted to all groups; null where it could not be.
    pub parametric_prior: Option<FittedPrior>,
    /// Why it could not be, when it could not.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub parametric_failure: Option<String>,
    /// The log marginal likelihood of the data under the free prior(s).
    pub free_log_marginal_likelihood: f64,
    /// The same under the parametric prior(s).
    pub parametric_log_marginal_likelihood: Option<f64>,
    /// Free less parametric: at least 0 up to the grid's resolution, since
    /// masses on a grid can take nearly any shape the family's law takes.
    pub log_likelihood_gain: Option<f64>,
    /// The checks of the parametric prior(s) on the same data (the free
    /// prior's are the summary's `checks`).
    pub parametric_checks: Option<ChecksReport>,
    /// Groups whose flag differs between the two priors, with `--flag-fdr`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub flags_changed: Option<u64>,
    /// Groups whose rank by posterior mean moves by more than 10 places
    /// between the two priors.
    pub moved_over_ten_ranks: Option<u64>,
}

/// The optimiser's account of the fit.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FitReport {
    /// "fit" when fitted in this run, otherwise the prior file it came from.
    pub source: String,
    /// Full log probability of the data at the result (normalising constants included).
    pub log_marginal_likelihood: f64,
    /// The same at the method-of-moments start.
    pub start_log_marginal_likelihood: f64,
    /// Whether the convergence tests passed.
    pub converged: bool,
    /// Iterations used.
    pub iterations: u64,
    /// Per-group gradient norm at the result (at the boundary: with respect
    /// to the mean, 0 at the pooled rate).
    pub gradient_norm: f64,
    /// "none" or "no-overdispersion".
    pub boundary: String,
    /// Score test for overdispersion.
    pub overdispersion_test: TestReport,
    /// At the boundary: the per-group score ∂ℓ/∂(1/strength) there (at most
    /// 0 where the boundary is a maximum); null for an interior maximum.
    #[serde(default)]
    pub boundary_score: Option<f64>,
    /// The likelihood maximised: "marginal", or "restricted" (REML, with
    /// `--variance-method reml`).
    #[serde(default = "marginal")]
    pub likelihood: String,
    /// The maximised restricted log likelihood, when that was the criterion
    /// (`log_marginal_likelihood` is then the marginal one at the estimate).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub restricted_log_likelihood: Option<f64>,
    /// Likelihood-ratio test against complete pooling (p-value from the 50:50
    /// mixture of chi-square(0) and chi-square(1); of restricted likelihoods
    /// under REML); null in older files.
    #[serde(default)]
    pub pooling_test: Option<TestReport>,
    /// With corrected intervals of a fit of at most 20,000 groups: the
    /// median bias of the working coordinates by parametric bootstrap
    /// (the quadrature nodes are centred on the fit less it); null otherwise.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub working_bias: Option<[f64; 2]>,
    /// Covariance of the working coordinates (inverse observed information)
    /// of an interior fit, for corrected intervals; null at the boundary.
    #[serde(default)]
    pub working_covariance: Option<[[f64; 2]; 2]>,
}

fn marginal() -> String {
    "marginal".to_string()
}

/// A test statistic with its p-value.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TestReport {
    /// Name of the test.
    pub name: String,
    /// The statistic (standardised for a score test).
    pub statistic: f64,
    /// Its p-value (one-sided for a score test).
    pub p_value: f64,
}

/// Pull toward the pool.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PullReport {
    /// Mean pool weight.
    pub pool_weight_mean: f64,
    /// Median pool weight.
    pub pool_weight_median: f64,
    /// 10th percentile of the pool weight.
    pub pool_weight_p10: f64,
    /// 90th percentile of the pool weight.
    pub pool_weight_p90: f64,
    /// Mean |posterior mean − raw rate|.
    pub mean_abs_shift: Option<f64>,
    /// Largest |posterior mean − raw rate|.
    pub max_abs_shift: Option<f64>,
    /// Group id with the largest shift.
    pub max_shift_group: Option<String>,
    /// Spearman correlation of the raw and posterior-mean rankings.
    pub rank_correlation: Option<f64>,
}

/// A prior's figures, whatever its model: the natural parameters in
/// the model's order (absent under complete pooling) and the summaries.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FittedPriorParts {
    /// (alpha, beta) or (shape, rate).
    pub natural: Option<[f64; 2]>,
    /// Their standard errors.
    pub natural_se: Option<[f64; 2]>,
    /// Prior mean.
    pub mean: f64,
    /// Its standard error.
    pub mean_se: f64,
    /// Prior strength, None when infinite.
    pub strength: Option<f64>,
    /// Its standard error.
    pub strength_se: Option<f64>,
}

impl FittedPrior {
    /// The wire form of a prior of the model described by `terms`.
    pub fn of_model(terms: &ModelTerms, parts: FittedPriorParts) -> Self {
        let entries = terms
            .prior_keys
            .iter()
            .map(|PriorKey { key, figure }| {
                let value = match *figure {
                    PriorFigure::Natural(i) => parts.natural.map(|n| n[i]),
                    PriorFigure::NaturalOrZero(i) => Some(parts.natural.map_or(0.0, |n| n[i])),
                    PriorFigure::NaturalSe(i) => parts.natural_se.map(|n| n[i]),
                    PriorFigure::Mean | PriorFigure::MeanAndNatural(_) => Some(parts.mean),
                    PriorFigure::MeanSe => Some(parts.mean_se),
                    PriorFigure::Strength => parts.strength,
                    PriorFigure::StrengthSe => parts.strength_se,
                };
                (key.to_string(), value)
            })
            .collect();
        FittedPrior { entries, covariates: None, free: None }
    }

    /// The wire form of a free prior: its mean and sd, and the grid.
    pub fn free(mean: f64, sd: f64, free: FreePriorReport) -> Self {
        let entries = vec![("mean".to_string(), Some(mean)), ("sd".to_string(), Some(sd))];
        FittedPrior { entries, covariates: None, free: Some(Box::new(free)) }
    }

    /// The free part, for a free prior.
    pub fn free_part(&self) -> Option<&FreePriorReport> {
        self.free.as_deref()
    }

    /// The wire form of a covariate prior of the model described by
    /// `terms`: the groups' mean centre, the common parameter with its
    /// standard error, and the covariate part.
    pub fn with_covariates(
        terms: &ModelTerms,
        mean_centre: f64,
        (common, common_se): (Option<f64>, Option<f64>),
        covariates: CovariatePrior,
    ) -> Self {
        let key = terms.covariate_terms.common_key;
        let entries = vec![
            ("mean".to_string(), Some(mean_centre)),
            (key.to_string(), common),
            (format!("{key}_se"), common_se),
        ];
        FittedPrior { entries, covariates: Some(Box::new(covariates)), free: None }
    }

    /// The covariate part, for a prior whose centre follows covariates.
    pub fn covariates(&self) -> Option<&CovariatePrior> {
        self.covariates.as_deref()
    }

    /// The value under `key` (None when null or absent).
    pub fn get(&self, key: &str) -> Option<f64> {
        self.entries.iter().find(|(k, _)| k == key).and_then(|(_, v)| *v)
    }

    /// Whether the prior holds the keys of the model described by `terms`
    /// and no others, with a value wherever that model always writes one;
    /// the reason where it does not.
    pub fn check(&self, terms: &ModelTerms) -> Result<(), String> {
        if self.free.is_some() {
            return Err("it is a free prior (masses on a grid), not one of the family's law".to_string());
        }
        if let Some(covariates) = &self.covariates {
            let columns: Vec<&str> = covariates.covariates.iter().map(|c| c.column.as_str()).collect();
            return Err(format!(
                "its centre follows the covariates {}, so it is not one prior for all groups",
                columns.join(", ")
            ));
        }
        if let Some((key, _)) =
            self.entries.iter().find(|(k, _)| !terms.prior_keys.iter().any(|p| p.key == k))
        {
            return Err(format!("'{key}' is not a parameter of a {} prior", terms.name));
        }
        let always = |figure: PriorFigure| {
            matches!(
                figure,
                PriorFigure::Mean
                    | PriorFigure::MeanAndNatural(_)
                    | PriorFigure::MeanSe
                    | PriorFigure::NaturalOrZero(_)
            )
        };
        match terms.prior_keys.iter().find(|p| always(p.figure) && self.get(p.key).is_none()) {
            Some(missing) => Err(format!("its '{}' is missing", missing.key)),
            None => Ok(()),
        }
    }

    /// The natural parameters as written, in the model's order (either may
    /// be missing in a file; both are at complete pooling).
    pub fn natural(&self, terms: &ModelTerms) -> [Option<f64>; 2] {
        let pooled = self.strength().is_none();
        let mut natural = [None, None];
        for PriorKey { key, figure } in terms.prior_keys {
            match *figure {
                PriorFigure::Natural(i) => natural[i] = self.get(key),
                PriorFigure::NaturalOrZero(i) | PriorFigure::MeanAndNatural(i) if !pooled => {
                    natural[i] = self.get(key)
                }
                _ => {}
            }
        }
        natural
    }

    /// The prior's shape in the model's words for the terminal, `Beta(alpha =
    /// 18.3, beta = 2.01)`, each figure written by `number` and a standard
    /// error shown beside it by `standard_error`.
    pub fn terminal_words(
        &self,
        terms: &ModelTerms,
        number: &dyn Fn(Option<f64>) -> String,
        standard_error: &dyn Fn(f64) -> String,
    ) -> String {
        let shown: Vec<String> = terms
            .prior_words
            .terminal
            .iter()
            .map(|&(label, key, with_se)| {
                let se = match self.get(&format!("{key}_se")) {
                    Some(se) if with_se => format!(" (se {})", standard_error(se)),
                    _ => String::new(),
                };
                format!("{label}{}{se}", number(self.get(key)))
            })
            .collect();
        format!("{}({})", terms.prior_words.law, shown.join(", "))
    }

    /// The prior's shape in the model's words for the report, `Beta(α = 18.3,
    /// β = 2.01)`, each figure written by `number`; None where a figure shown
    /// is null (complete pooling).
    pub fn page_words(&self, terms: &ModelTerms, number: &dyn Fn(f64) -> String) -> Option<String> {
        let shown: Option<Vec<String>> = terms
            .prior_words
            .page
            .iter()
            .map(|&(label, key)| self.get(key).map(|value| format!("{label}{}", number(value))))
            .collect();
        Some(format!("{}({})", terms.prior_words.law, shown?.join(", ")))
    }

    /// Prior mean.
    pub fn mean(&self) -> f64 {
        self.get("mean").unwrap_or(f64::NAN)
    }

    /// Standard error of the prior mean.
    pub fn mean_se(&self) -> f64 {
        self.get("mean_se").unwrap_or(f64::NAN)
    }

    /// Prior strength, None when infinite.
    pub fn strength(&self) -> Option<f64> {
        self.get("strength")
    }
}

/// A figure of ordinary size in plain decimals (four places: `25.2490`,
/// `0.0396`); only the very small or very large in scientific notation.
pub fn plain(value: f64) -> String {
    let magnitude = value.abs();
    if value == 0.0 || (1e-3..1e7).contains(&magnitude) || !value.is_finite() {
        format!("{value:.4}")
    } else {
        format!("{value:.4e}")
    }
}

/// A standard error or other small positive figure to three significant
/// digits in plain decimals (`0.000968`, `1.78`), scientific only below 1e-4
/// or from 1e7.
pub fn three_digits(value: f64) -> String {
    let magnitude = value.abs();
    if value == 0.0 || !value.is_finite() {
        return format!("{value}");
    }
    if !(1e-4..1e7).contains(&magnitude) {
        return format!("{value:.2e}");
    }
    let decimals = (2 - magnitude.log10().floor() as i32).max(0) as usize;
    format!("{value:.decimals$}")
}

/// A p-value as people write it: two significant digits (`p = 0.18`,
/// `p = 0.20`, `p = 0.0023`, `p = 2.3e-29`), `p = 1` at one, and `p < 1e-300` where
/// double precision cannot tell it from zero.
pub fn p_value_text(p: f64) -> String {
    match p_value_figure(p) {
        figure if figure.starts_with('<') => format!("p {figure}"),
        figure if p.is_nan() => format!("p {figure}"),
        figure => format!("p = {figure}"),
    }
}

/// The figure of [`p_value_text`] alone, for a table cell: `0.18`,
/// `2.3e-29`, `< 1e-300`.
pub fn p_value_figure(p: f64) -> String {
    if p.is_nan() {
        return "not computed".to_string();
    }
    if p <= 1e-300 {
        return "< 1e-300".to_string();
    }
    if p < 1e-3 {
        return format!("{p:.1e}");
    }
    let decimals = (1 - p.log10().floor() as i32).max(0) as usize;
    // Two significant digits, zeros kept (`0.20`), but one is `1`.
    if p >= 1.0 {
        return "1".to_string();
    }
    format!("{p:.decimals$}")
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::core::model::Model;

    #[test]
    fn a_free_prior_reads_back_and_is_no_familys_law() {
        let free = FreePriorReport {
            prior_shape: "free".to_string(),
            spacing: "log".to_string(),
            support: vec![[0.5, 0.25], [2.0, 0.75]],
            duality_gap: 1e-9,
            grid: vec![0.5, 1.0, 2.0],
            masses: vec![0.25, 0.0, 0.75],
        };
        let prior = FittedPrior::free(1.625, 0.65, free);
        let read: FittedPrior = serde_json::from_str(&serde_json::to_string(&prior).unwrap()).unwrap();
        assert_eq!(read, prior);
        assert_eq!(read.free_part().map(|f| f.masses.clone()), Some(vec![0.25, 0.0, 0.75]));
        for model in Model::ALL {
            assert!(read.check(model.terms()).unwrap_err().contains("free prior"));
        }
    }

    #[test]
    fn every_family_writes_a_prior_it_reads_back() {
        let parts = FittedPriorParts {
            natural: Some([2.5, 4.0]),
            natural_se: Some([0.1, 0.2]),
            mean: 0.4,
            mean_se: 0.01,
            strength: Some(6.5),
            strength_se: Some(0.3),
        };
        let pooled =
            FittedPriorParts { natural: None, natural_se: None, strength: None, strength_se: None, ..parts };
        for model in Model::ALL {
            let terms = model.terms();
            for key in ["mean", "mean_se", "strength", "strength_se"] {
                assert!(terms.prior_keys.iter().any(|p| p.key == key), "{}: no {key}", terms.name);
            }
            let prior = FittedPrior::of_model(terms, parts);
            let read: FittedPrior = serde_json::from_str(&serde_json::to_string(&prior).unwrap()).unwrap();
            assert_eq!(read, prior);
            assert_eq!(read.check(terms), Ok(()));
            assert_eq!((read.mean(), read.mean_se(), read.strength()), (0.4, 0.01, Some(6.5)));
            let natural = read.natural(terms);
            assert!(natural[1] == Some(4.0) && natural[0].is_some(), "{}: {natural:?}", terms.name);
            assert_eq!(FittedPrior::of_model(terms, pooled).natural(terms), [None, None], "{}", terms.name);
            // Another model's keys are refused by name.
            let other = Model::ALL.iter().find(|m| m.terms().prior_keys != terms.prior_keys).unwrap();
            assert!(FittedPrior::of_model(other.terms(), parts)
                .check(terms)
                .unwrap_err()
                .contains("is not a parameter"));
        }
    }

    #[test]
    fn a_prior_without_its_mean_is_refused_on_reading() {
        let error = serde_json::from_str::<FittedPrior>(r#"{"alpha": 1.0, "beta": 2.0}"#).unwrap_err();
        assert!(error.to_string().contains("missing field `mean`"), "{error}");
    }

    #[test]
    fn p_values_read_as_people_write_them() {
        let cases = [
            (0.1807, "p = 0.18"),
            (1.0, "p = 1"),
            (0.5, "p = 0.50"),
            (0.2035, "p = 0.20"),
            (0.9996, "p = 1.00"),
            (0.0179, "p = 0.018"),
            (0.00234, "p = 0.0023"),
            (1.206e-29, "p = 1.2e-29"),
            (0.0, "p < 1e-300"),
            (1e-320, "p < 1e-300"),
        ];
        for (p, text) in cases {
            assert_eq!(p_value_text(p), text, "{p}");
        }
    }

    #[test]
    fn figures_of_ordinary_size_are_plain_decimals() {
        assert_eq!(plain(25.2490), "25.2490");
        assert_eq!(plain(0.0396), "0.0396");
        assert_eq!(plain(1.5e-6), "1.5000e-6");
        assert_eq!(three_digits(9.68e-4), "0.000968");
        assert_eq!(three_digits(0.231), "0.231");
        assert_eq!(three_digits(1.782), "1.78");
        assert_eq!(three_digits(3.2e-6), "3.20e-6");
    }
}

/// The summary of a star-rating run (the Dirichlet-multinomial model over
/// level counts).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LevelSummary {
    /// `dirichlet-multinomial`.
    pub model: String,
    /// In a `score`: the summary file whose prior scored the groups (the
    /// prior's figures and tests below are that fit's, on its own data).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub prior_file: Option<String>,
    /// The group column, first in the output table (absent from summaries
    /// of earlier versions, which the report cannot read).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub group_column: Option<String>,
    /// Data rows in the input.
    pub rows_read: u64,
    /// Rows rejected.
    pub rows_rejected: u64,
    /// Groups scored.
    pub groups: u64,
    /// Distinct count vectors the fit ran over.
    pub distinct_vectors: u64,
    /// Each level: its column, score and prior.
    pub levels: Vec<LevelReport>,
    /// "Dirichlet", or "pooled shares" at the boundary of no overdispersion.
    pub prior_law: String,
    /// A = Σ a_k; null when infinite (pooled shares).
    pub strength: Option<f64>,
    /// Its standard error.
    pub strength_se: Option<f64>,
    /// The prior's mean score, Σ s_k a_k / A.
    pub mean_score: f64,
    /// Its standard error.
    pub mean_score_se: f64,
    /// The maximised log marginal likelihood, with the multinomial coefficients.
    pub log_marginal_likelihood: f64,
    /// Newton steps taken.
    pub iterations: u64,
    /// The fitted prior against every group having the pooled shares.
    pub pooling_test: TestReport,
    /// The score test for overdispersion at 1/A = 0.
    pub overdispersion_test: TestReport,
    /// How far the groups were pulled: pool weights A / (A + N), shifts of
    /// the mean score from the raw mean, and the rank correlation of the two.
    pub pull: PullReport,
    /// Credible level of the intervals.
    pub credible_level: f64,
    /// The mean-score threshold of `prob_above`.
    pub above: Option<f64>,
    /// The mean-score threshold of `prob_below`.
    pub below: Option<f64>,
    /// The level column and share of `prob_share_above`.
    pub share_above: Option<(String, f64)>,
    /// How `prob_top` was computed, when asked for (the threshold method).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub top: Option<TopReport>,
    /// "highest-first" or "lowest-first": the order of the ranks and of
    /// `prob_top`; null without either.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub rank_order: Option<String>,
    /// Flags under the posterior false-discovery rate.
    pub flags: Option<FlagReport>,
    /// The calibration check (absent from summaries of earlier versions).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub checks: Option<LevelChecks>,
    /// With `--by`: the segment columns and each segment's prior (the
    /// summary's own prior is then the all-groups one).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub segments: Option<LevelSegments>,
    /// With `--by`: one prior for all groups against one per segment.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub segment_test: Option<SegmentTest>,
    /// Warnings.
    pub warnings: Vec<String>,
}

/// The star-rating model's calibration check: each group's mean score
/// placed among replicates of the group drawn from its prior predictive
/// (uniform on 0..=replicates under the model), the places counted in ten
/// bins as the other models' randomised PIT is.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LevelChecks {
    /// "the fitted data", or "the scored data under the saved prior".
    pub data: String,
    /// Replicates drawn per group located (9: ten places, ten bins).
    pub replicates: u64,
    /// The places' histogram and its test.
    pub calibration: CalibrationReport,
    /// As [`ChecksReport::verdict`].
    pub verdict: String,
}

/// The segments of a star-rating run with `--by`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LevelSegments {
    /// The segment columns.
    pub columns: Vec<String>,
    /// Each segment, in the order of their keys (text order, nulls last).
    pub segments: Vec<LevelSegmentReport>,
}

/// One segment of a star-rating run.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LevelSegmentReport {
    /// Segment column to value (null for a null value).
    pub key: std::collections::BTreeMap<String, Option<String>>,
    /// Groups in the segment.
    pub groups: u64,
    /// The prior its groups were scored with: "Dirichlet", "pooled shares",
    /// or on a fallback that of the all-groups prior.
    pub prior_law: String,
    /// That prior's shapes a_k (null for pooled shares).
    pub shapes: Option<Vec<f64>>,
    /// Its mean shares.
    pub shares: Vec<f64>,
    /// Its strength A (null when infinite).
    pub strength: Option<f64>,
    /// Its mean score.
    pub mean_score: f64,
    /// The segment's own maximised log marginal likelihood (null on a fallback).
    pub log_marginal_likelihood: Option<f64>,
    /// How far its groups were pulled.
    pub pull: PullReport,
    /// Why it took the all-groups prior; null when it has its own.
    pub fallback: Option<String>,
}

/// One level of a star-rating prior.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LevelReport {
    /// The count column.
    pub column: String,
    /// Its score.
    pub score: f64,
    /// The Dirichlet shape a_k (null at the boundary).
    pub prior_shape: Option<f64>,
    /// Its standard error.
    pub prior_shape_se: Option<f64>,
    /// The prior mean share a_k / A.
    pub prior_share: f64,
    /// Its standard error.
    pub prior_share_se: f64,
}
