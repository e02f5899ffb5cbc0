//! The hierarchical models, behind one trait the fitting loop is written
//! against, each with the [`ModelTerms`] the other layers ask of it.
//!
//! Three models: Beta priors for proportions, Gamma priors for event rates
//! with exposure, normal priors for estimates with known standard errors.
//! Each model is fitted in *working coordinates* u = (u₁, u₂): an unbounded
//! transform of the prior mean and of the prior strength (or shape). Every
//! per-pair term is written directly in those coordinates, in forms that tend
//! to the binomial or Poisson limit as the strength grows, so the score and
//! curvature stay accurate up to strengths of 1e15. "No overdispersion" is the
//! finite boundary φ = 1/strength = 0; it is tested by the score at φ = 0
//! (Tarone's and Dean's statistics), not reached by drifting to infinity.

pub mod beta_binomial;
pub mod dirichlet_multinomial;
pub mod free;
pub mod gamma_poisson;
pub mod neighbourhood;
pub mod normal_normal;

use crate::core::incomplete::{beta_lower_tails_and_densities_at, BetaLaw};
use crate::core::pairs::{PairTable, WeightedPair};

/// Log-likelihood with its gradient and Hessian in working coordinates.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct Evaluation {
    /// ln p(data | u).
    pub log_likelihood: f64,
    /// ∂ ln p / ∂u.
    pub gradient: [f64; 2],
    /// ∂² ln p / ∂u ∂uᵀ.
    pub hessian: [[f64; 2]; 2],
}

impl Evaluation {
    /// Adds `weight` copies of `term`.
    pub fn add_weighted(&mut self, term: &Evaluation, weight: f64) {
        self.log_likelihood += weight * term.log_likelihood;
        for i in 0..2 {
            self.gradient[i] += weight * term.gradient[i];
            for j in 0..2 {
                self.hessian[i][j] += weight * term.hessian[i][j];
            }
        }
    }
}

/// A fitted or assumed prior.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Prior {
    /// A proper conjugate prior: Beta(alpha, beta) or Gamma(shape, rate).
    Conjugate {
        /// The natural parameters, named by the model's
        /// [`ModelTerms::parameter_names`]: (alpha, beta) or (shape, rate).
        natural: [f64; 2],
    },
    /// No overdispersion: every group is taken to have the pooled rate.
    CompletePooling {
        /// The pooled rate.
        mean: f64,
    },
}

/// The prior a pair is scored with, of either shape: a parametric one
/// (conjugate, or complete pooling) or a free one on a grid ([`free`]).
#[derive(Debug, Clone, PartialEq)]
pub enum ShapedPrior {
    /// A prior of the family's own law.
    Parametric(Prior),
    /// Masses on a grid of rates.
    Free(std::sync::Arc<free::FreePrior>),
}

impl ShapedPrior {
    /// The parametric prior, when it is one.
    pub fn parametric(&self) -> Option<&Prior> {
        match self {
            ShapedPrior::Parametric(prior) => Some(prior),
            ShapedPrior::Free(_) => None,
        }
    }

    /// The prior mean.
    pub fn mean<F: Family>(&self) -> f64 {
        match self {
            ShapedPrior::Parametric(Prior::CompletePooling { mean }) => *mean,
            ShapedPrior::Parametric(Prior::Conjugate { natural }) => F::mean_strength_of_natural(*natural).0,
            ShapedPrior::Free(free) => free.mean_sd().0,
        }
    }

    /// Posterior summary of one pair ([`Family::posterior`]).
    pub fn posterior<F: Family>(&self, size: f64, count: f64, tail: f64) -> Posterior {
        match self {
            ShapedPrior::Parametric(prior) => F::posterior(prior, size, count, tail),
            ShapedPrior::Free(free) => free.posterior::<F>(size, count, tail),
        }
    }

    /// P(rate < t) and P(rate > t) under one pair's posterior ([`Family::rate_tails`]).
    pub fn rate_tails<F: Family>(&self, size: f64, count: f64, threshold: f64) -> (f64, f64) {
        match self {
            ShapedPrior::Parametric(prior) => F::rate_tails(prior, size, count, threshold),
            ShapedPrior::Free(free) => free.rate_tails::<F>(size, count, threshold),
        }
    }

    /// Where a pair's count falls in its prior predictive distribution ([`Family::predictive_cdf`]).
    pub fn predictive_cdf<F: Family>(&self, size: f64, count: f64) -> (f64, f64) {
        match self {
            ShapedPrior::Parametric(prior) => F::predictive_cdf(prior, size, count),
            ShapedPrior::Free(free) => free.predictive_cdf::<F>(size, count),
        }
    }

    /// The prior predictive variance of a raw rate of this size ([`Family::raw_rate_variance`]).
    pub fn raw_rate_variance<F: Family>(&self, size: f64) -> f64 {
        match self {
            ShapedPrior::Parametric(prior) => F::raw_rate_variance(prior, size),
            ShapedPrior::Free(free) => free.raw_rate_variance::<F>(size),
        }
    }
}

/// Posterior summary of one distinct pair.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Posterior {
    /// Posterior mean of the group's rate.
    pub mean: f64,
    /// Posterior standard deviation.
    pub sd: f64,
    /// Lower end of the equal-tailed credible interval.
    pub lower: f64,
    /// Upper end of the equal-tailed credible interval.
    pub upper: f64,
    /// Weight B of the prior mean in the posterior mean, in [0, 1].
    pub pool_weight: f64,
    /// The posterior's natural parameters, (alpha, beta) or (shape, rate) as
    /// [`ModelTerms::parameter_names`] names them; absent under complete pooling.
    pub natural: Option<[f64; 2]>,
}

/// Why a model cannot be fitted to a table; these are results, not bugs.
#[derive(Debug, Clone, PartialEq)]
pub enum Unidentifiable {
    /// Every count is zero (or every count equals its size): the prior mean is
    /// on the edge of its range.
    DegenerateMean {
        /// The pooled rate.
        mean: f64,
    },
    /// Only the prior mean can be estimated (every group has at most one trial).
    MeanOnly {
        /// The pooled rate.
        mean: f64,
    },
    /// There are no groups with any data.
    NoData,
}

/// What a family tells the layers outside the numerics: its names, the
/// columns it reads and what each accepts, how a group's raw value is
/// formed, how its prior is written in a summary and shown in words, and
/// what the report draws. The layers above ask these fields and never match
/// on which family it is; a family that leaves one out does not build, since
/// the struct has no defaults.
#[derive(Debug)]
pub struct ModelTerms {
    /// Name in files and on the command line.
    pub name: &'static str,
    /// What the count column holds; also the option naming it (`--successes`).
    pub count_role: &'static str,
    /// What the size column holds; also the option naming it (`--trials`).
    pub size_role: &'static str,
    /// What the count column accepts.
    pub count_rule: ValueRule,
    /// What the size column accepts.
    pub size_rule: ValueRule,
    /// The fault of a row whose count and size each pass their rule but not
    /// together (more successes than trials), in words; None when they fit.
    pub pair_fault: fn(size: f64, count: f64) -> Option<PairFault>,
    /// Words added to a size fault, given the value read and the column
    /// names (count, size): the likelier model for such sizes, if any.
    pub size_hint: fn(value: f64, count_column: &str, size_column: &str) -> Option<String>,
    /// How a group's raw value is formed from its count and size.
    pub raw_value: RawValue,
    /// The natural parameters of prior and posterior, in order; the output
    /// writes the posterior's as `posterior_param_<name>`, a name no reader
    /// takes for the smoothed estimate (that is `posterior_mean`).
    pub parameter_names: [&'static str; 2],
    /// The output column of a group's own value before pooling, in the
    /// model's words: a proportion, a rate, an estimate.
    pub raw_column: &'static str,
    /// The data that leave the prior mean on the edge of its range, in words.
    pub degenerate_data: &'static str,
    /// The range of a group's rate (or mean), and so of a threshold.
    pub rates: RateRange,
    /// When only the prior mean is identifiable, in words.
    pub mean_only_data: &'static str,
    /// Name of the score test for overdispersion this model uses.
    pub overdispersion_test: &'static str,
    /// Whether the model has a restricted likelihood (REML) to maximise.
    pub restricted_likelihood: bool,
    /// The scale a free prior's grid is evenly spaced on: the one where a
    /// group's sampling noise has the same spread at every rate.
    pub grid_spacing: free::Spacing,
    /// How a covariate prior of this family is named: its link and its
    /// common parameter ([`crate::core::regression`]).
    pub covariate_terms: CovariateTerms,
    /// The law of a group's rate under a prior or posterior with these
    /// natural parameters.
    pub law_of: fn([f64; 2]) -> RateLaw,
    /// The prior's wire form in a summary: its keys, in the order written.
    pub prior_keys: &'static [PriorKey],
    /// The prior's shape in words: the law's name and the parameters shown.
    pub prior_words: PriorWords,
    /// The words and axes of the report's plots.
    pub plots: PlotTerms,
    /// How an area's prior fitted by moments to its neighbourhood
    /// ([`neighbourhood`], `--neighbours`) becomes a prior of this family's
    /// law; None for a family without that variant.
    pub local_prior: Option<fn(&neighbourhood::LocalPrior) -> Prior>,
}

impl ModelTerms {
    /// A group's raw value: count / size for rates (None without trials or
    /// exposure), the estimate itself for estimates.
    pub fn raw_value(&self, size: f64, count: f64) -> Option<f64> {
        match self.raw_value {
            RawValue::Count => Some(count),
            RawValue::Ratio => (size > 0.0).then(|| count / size),
        }
    }
}

/// The words of a family's covariate prior: the link of its first working
/// coordinate and the common parameter its second stands for, which is
/// exp(sign × u₂).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CovariateTerms {
    /// The link of the prior mean: "logit", "log" or "identity".
    pub link: &'static str,
    /// The common parameter's wire key, one of [`ModelTerms::prior_keys`].
    pub common_key: &'static str,
    /// The common parameter is exp(`common_sign` × u₂): 1 for a strength
    /// or shape, −1 for a variance.
    pub common_sign: f64,
}

impl CovariateTerms {
    /// The common parameter at working coordinate u₂, with its standard
    /// error from u₂'s (the delta method: |d exp(±u₂)/du₂| is the value itself).
    pub fn common(&self, u2: f64, u2_se: f64) -> (f64, f64) {
        let value = (self.common_sign * u2).exp();
        (value, value * u2_se)
    }
}

/// What a column accepts: the rule, named by what the values are.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ValueRule {
    /// A whole number ≥ 0 held exactly in a double (to 2^53).
    WholeCount,
    /// A finite number ≥ 0, named by its noun in messages ("exposure").
    Amount(&'static str),
    /// A finite number above zero, from 1e-150 to 1e150, named by its noun
    /// ("standard error").
    Scale(&'static str),
    /// Any finite number within ±1e150.
    Finite,
}

impl ValueRule {
    /// Values are whole numbers.
    pub fn is_whole(self) -> bool {
        self == ValueRule::WholeCount
    }

    /// Values are read as reals even where the column holds integers.
    pub fn reads_reals(self) -> bool {
        matches!(self, ValueRule::Scale(_) | ValueRule::Finite)
    }
}

/// A row fault found by a family's check of count and size together.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum PairFault {
    /// The count column is at fault.
    Count(String),
    /// The size column is at fault.
    Size(String),
}

/// How a group's raw value is formed.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum RawValue {
    /// count / size.
    Ratio,
    /// The count column itself (an estimate).
    Count,
}

/// Which figure of a fitted prior a key of its wire form holds.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum PriorFigure {
    /// The i-th natural parameter; null at complete pooling.
    Natural(usize),
    /// The i-th natural parameter, 0 at complete pooling (a variance).
    NaturalOrZero(usize),
    /// The standard error of the i-th natural parameter.
    NaturalSe(usize),
    /// The prior mean.
    Mean,
    /// The prior mean, which is also the i-th natural parameter (null as
    /// that parameter at complete pooling).
    MeanAndNatural(usize),
    /// Its standard error.
    MeanSe,
    /// The prior strength; null when infinite.
    Strength,
    /// Its standard error.
    StrengthSe,
}

/// One key of a prior's wire form.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct PriorKey {
    /// The key.
    pub key: &'static str,
    /// The figure it holds.
    pub figure: PriorFigure,
}

/// A prior's shape in words: `Beta(alpha = 18.3, beta = 2.01)` on the
/// terminal, `Beta(α = 18.3, β = 2.01)` in the report.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct PriorWords {
    /// The law's name.
    pub law: &'static str,
    /// The parameters the terminal shows: (label and the words before the
    /// figure, wire key, whether its standard error follows in brackets).
    pub terminal: &'static [(&'static str, &'static str, bool)],
    /// The parameters the report shows: (label and the words before the figure, wire key).
    pub page: &'static [(&'static str, &'static str)],
}

/// The words and axes of the report's plots.
#[derive(Debug, Clone, Copy)]
pub struct PlotTerms {
    /// A group's raw value, as an axis title.
    pub raw_label: &'static str,
    /// The size column in words.
    pub size_noun: &'static str,
    /// The funnel plot's abscissa in words, and as an axis title.
    pub funnel_noun: &'static str,
    /// The funnel plot's axis title.
    pub funnel_axis: &'static str,
    /// The funnel plot's abscissa: the size itself, or the precision 1/size².
    pub funnel_x: FunnelAxis,
    /// The variance of one unit of size at rate p (p(1 − p) for a
    /// proportion, p for a Poisson rate, 1 for an estimate whose size is
    /// its standard error): the funnel's limits are p ± z √(this / x).
    pub unit_variance: fn(f64) -> f64,
}

/// The funnel plot's abscissa.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum FunnelAxis {
    /// The group's size (trials, exposure).
    Size,
    /// The precision 1/size² of an estimate whose size is its standard error.
    Precision,
}

impl FunnelAxis {
    /// A group's abscissa.
    pub fn x(self, size: f64) -> f64 {
        match self {
            FunnelAxis::Size => size,
            FunnelAxis::Precision => 1.0 / (size * size),
        }
    }

    /// A group's share of the pooled rate, (numerator, denominator): its
    /// count and size, or for an estimate the estimate and 1 weighted by precision.
    pub fn pooled_parts(self, size: f64, count: f64) -> (f64, f64) {
        match self {
            FunnelAxis::Size => (count, size),
            FunnelAxis::Precision => (count / (size * size), 1.0 / (size * size)),
        }
    }
}

/// The range of a model's rates.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum RateRange {
    /// A proportion, from 0 to 1.
    Proportion,
    /// A rate of at least 0.
    NonNegative,
    /// Any finite number (a mean of estimates).
    Real,
}

impl RateRange {
    /// Whether `value` lies in the range.
    pub fn contains(self, value: f64) -> bool {
        value.is_finite()
            && match self {
                RateRange::Proportion => (0.0..=1.0).contains(&value),
                RateRange::NonNegative => value >= 0.0,
                RateRange::Real => true,
            }
    }

    /// Whether `value` lies strictly inside the range (a pooled mean that
    /// leaves every group room on both sides).
    pub fn holds_inside(self, value: f64) -> bool {
        value.is_finite()
            && match self {
                RateRange::Proportion => value > 0.0 && value < 1.0,
                RateRange::NonNegative => value > 0.0,
                RateRange::Real => true,
            }
    }

    /// `(low, high)` cut back to the range.
    pub fn clamp(self, (low, high): (f64, f64)) -> (f64, f64) {
        match self {
            RateRange::Proportion => (low.max(0.0), high.min(1.0)),
            RateRange::NonNegative => (low.max(0.0), high),
            RateRange::Real => (low, high),
        }
    }

    /// The range in words, after "a rate" or "a value".
    pub fn describe(self) -> &'static str {
        match self {
            RateRange::Proportion => "from 0 to 1",
            RateRange::NonNegative => "of at least 0",
            RateRange::Real => "that is finite",
        }
    }
}

/// Code written once for every model: [`Model::visit`] calls
/// [`FamilyVisitor::visit`] with the model's [`Family`].
pub trait FamilyVisitor {
    /// What the visit returns.
    type Output;
    /// Runs with the model's family.
    fn visit<F: Family>(self) -> Self::Output;
}

/// The model registry: adding a model is a file in this folder implementing
/// [`Family`] (with its [`ModelTerms`], a struct literal with no defaults,
/// so a family that leaves a piece out does not build) and one line in the
/// `models!` call below it. DEVELOPERS.md has the checklist.
macro_rules! models {
    ($($variant:ident => $family:ty),+ $(,)?) => {
        /// A model, as chosen on the command line or found in a summary file.
        #[derive(Debug, Clone, Copy, PartialEq, Eq)]
        pub enum Model {
            $(
                #[doc = concat!("See [`", stringify!($family), "`].")]
                $variant,
            )+
        }

        impl Model {
            /// Every model, in registration order.
            pub const ALL: &'static [Model] = &[$(Model::$variant),+];

            /// The model's names and column rules.
            pub fn terms(self) -> &'static ModelTerms {
                match self {
                    $(Model::$variant => &<$family as Family>::TERMS,)+
                }
            }

            /// Runs `visitor` with the model's family.
            pub fn visit<V: FamilyVisitor>(self, visitor: V) -> V::Output {
                match self {
                    $(Model::$variant => visitor.visit::<$family>(),)+
                }
            }
        }
    };
}

models! {
    BetaBinomial => beta_binomial::BetaBinomial,
    GammaPoisson => gamma_poisson::GammaPoisson,
    NormalNormal => normal_normal::NormalNormal,
}

/// The law of a group's rate under its posterior, for drawing from it.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum RateLaw {
    /// Beta(alpha, beta).
    Beta {
        /// α.
        alpha: f64,
        /// β.
        beta: f64,
    },
    /// Gamma(shape, rate).
    Gamma {
        /// Shape.
        shape: f64,
        /// Rate.
        rate: f64,
    },
    /// Normal(mean, sd²).
    Normal {
        /// Mean.
        mean: f64,
        /// Standard deviation.
        sd: f64,
    },
    /// A point mass (complete pooling).
    Point(f64),
}

impl RateLaw {
    /// One draw from the law (its mean where its parameters admit no draw).
    pub fn sample(&self, rng: &mut rand_chacha::ChaCha8Rng) -> f64 {
        use rand_distr::{Beta, Distribution, Gamma, Normal};
        match *self {
            RateLaw::Beta { alpha, beta } => {
                Beta::new(alpha, beta).map_or(alpha / (alpha + beta), |d| d.sample(rng))
            }
            RateLaw::Gamma { shape, rate } => {
                Gamma::new(shape, 1.0 / rate).map_or(shape / rate, |d| d.sample(rng))
            }
            RateLaw::Normal { mean, sd } => Normal::new(mean, sd).map_or(mean, |d| d.sample(rng)),
            RateLaw::Point(mean) => mean,
        }
    }

    /// The law's density at `x` (0 outside its support; infinite at a point mass's point).
    pub fn density(&self, x: f64) -> f64 {
        use crate::core::special::ln_gamma;
        match *self {
            RateLaw::Beta { alpha, beta } if x > 0.0 && x < 1.0 => {
                let ln_norm = ln_gamma(alpha) + ln_gamma(beta) - ln_gamma(alpha + beta);
                ((alpha - 1.0) * x.ln() + (beta - 1.0) * (-x).ln_1p() - ln_norm).exp()
            }
            RateLaw::Gamma { shape, rate } if x > 0.0 => {
                (shape * rate.ln() + (shape - 1.0) * x.ln() - rate * x - ln_gamma(shape)).exp()
            }
            RateLaw::Normal { mean, sd } => {
                let z = (x - mean) / sd;
                (-0.5 * z * z).exp() / (sd * (2.0 * std::f64::consts::PI).sqrt())
            }
            RateLaw::Point(at) if x == at => f64::INFINITY,
            _ => 0.0,
        }
    }

    /// ln of the constant dividing the law's density kernel: ln B(α, β),
    /// ln Γ(shape) − shape ln(rate), ln(sd √(2π)); 0 for a point mass.
    fn ln_normaliser(&self) -> f64 {
        use crate::core::special::ln_gamma;
        match *self {
            RateLaw::Beta { alpha, beta } => ln_gamma(alpha) + ln_gamma(beta) - ln_gamma(alpha + beta),
            RateLaw::Gamma { shape, rate } => ln_gamma(shape) - shape * rate.ln(),
            RateLaw::Normal { sd, .. } => (sd * (2.0 * std::f64::consts::PI).sqrt()).ln(),
            RateLaw::Point(_) => 0.0,
        }
    }

    /// The density at `x` and the slope of its log there, given
    /// [`RateLaw::ln_normaliser`]: what a Newton or Halley step on a CDF needs
    /// (0 and 0 outside the support).
    fn density_and_slope(&self, x: f64, ln_norm: f64) -> (f64, f64) {
        match *self {
            RateLaw::Beta { alpha, beta } if x > 0.0 && x < 1.0 => {
                let ln = (alpha - 1.0) * x.ln() + (beta - 1.0) * (-x).ln_1p() - ln_norm;
                (ln.exp(), (alpha - 1.0) / x - (beta - 1.0) / (1.0 - x))
            }
            RateLaw::Gamma { shape, rate } if x > 0.0 => {
                (((shape - 1.0) * x.ln() - rate * x - ln_norm).exp(), (shape - 1.0) / x - rate)
            }
            RateLaw::Normal { mean, sd } => {
                let z = (x - mean) / sd;
                ((-0.5 * z * z - ln_norm).exp(), -z / sd)
            }
            _ => (0.0, 0.0),
        }
    }

    /// Whether the law is a point mass (complete pooling).
    pub fn is_point(&self) -> bool {
        matches!(self, RateLaw::Point(_))
    }

    /// Whether the law can put mass below zero (a mean of estimates; Beta
    /// and Gamma rates are at least 0).
    pub fn reaches_below_zero(&self) -> bool {
        matches!(self, RateLaw::Normal { .. })
    }
}

/// What is known of the uncertainty of the fitted prior: the covariance of
/// the working coordinates of an interior fit, or the variance of the
/// pooled mean at complete pooling.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum PriorUncertainty {
    /// Covariance of the working coordinates (inverse observed information).
    Working([[f64; 2]; 2]),
    /// Variance of the pooled rate.
    PooledMean(f64),
}

/// Nodes and weights of the 7-point Gauss–Hermite rule for the standard
/// normal (probabilists' Hermite polynomials; from numpy's `hermegauss(7)`,
/// weights divided by their sum √(2π)): exact for polynomials to degree 13.
const HERMITE_NODES: [f64; 7] = [
    -3.7504397177257425,
    -2.366759410734541,
    -1.1544053947399682,
    0.0,
    1.1544053947399682,
    2.366759410734541,
    3.7504397177257425,
];
const HERMITE_WEIGHTS: [f64; 7] = [
    0.000548268855972217,
    0.03075712396758652,
    0.2401231786050127,
    0.45714285714285724,
    0.2401231786050127,
    0.03075712396758652,
    0.000548268855972217,
];

/// A fitted prior with its estimation uncertainty spread over quadrature
/// nodes: the 7 × 7 Gauss–Hermite rule on the normal approximation
/// N(û, Σ) to the working coordinates' sampling distribution, each node a
/// prior in natural parameters with its weight.
#[derive(Debug, Clone, PartialEq)]
pub struct SpreadPrior {
    nodes: Vec<(f64, Prior)>,
}

impl SpreadPrior {
    /// The nodes of `natural` (the fitted prior) spread by `covariance` of
    /// its working coordinates, centred on the fit less `bias` (the median
    /// bias of [`crate::core::bootstrap::median_bias`]) when it is known.
    pub fn new<F: Family>(
        natural: [f64; 2],
        covariance: [[f64; 2]; 2],
        bias: Option<[f64; 2]>,
    ) -> Option<Self> {
        let (mean, strength) = F::mean_strength_of_natural(natural);
        let fitted = F::working(mean, strength);
        let shift = bias.unwrap_or([0.0, 0.0]);
        let u = [fitted[0] - shift[0], fitted[1] - shift[1]];
        // Cholesky factor of the covariance.
        let l00 = covariance[0][0].sqrt();
        let l10 = covariance[1][0] / l00;
        let l11 = (covariance[1][1] - l10 * l10).sqrt();
        if !(l00.is_finite() && l11.is_finite()) {
            return None;
        }
        let mut nodes = Vec::with_capacity(49);
        for (x, wx) in HERMITE_NODES.iter().zip(HERMITE_WEIGHTS) {
            for (y, wy) in HERMITE_NODES.iter().zip(HERMITE_WEIGHTS) {
                let at = [u[0] + l00 * x, u[1] + l10 * x + l11 * y];
                // A wide spread (few groups) reaches strengths no data set
                // tells apart: hold each node's strength within the fit's range.
                let (mean, strength) = F::mean_strength(at);
                let (least, most) = F::node_strengths();
                let held = strength.clamp(least, most);
                nodes.push((wx * wy, Prior::Conjugate { natural: F::natural(F::working(mean, held)) }));
            }
        }
        Some(SpreadPrior { nodes })
    }
}

/// The posterior of one pair with the fitted prior's estimation
/// uncertainty integrated out: the mixture, over the [`SpreadPrior`]
/// nodes, of the conjugate posteriors the pair has under each. This is the
/// posterior Kass and Steffey (JASA 1989) approximate to first order, computed
/// here by quadrature instead, because the first-order term undercovered in
/// the coverage study (benches/coverage.py: 89.8% at 50 groups, against
/// 93.9% for the mixture in a prototype). Its mean and variance are the
/// mixture's; its interval ends solve Σ wⱼ P(rate < x | node j) = tail and
/// 1 − tail ([`mixture_quantile`]: Halley's method from the interval of the
/// law matched to the mixture's mean and variance). The posterior parameters
/// written are the plug-in ones. At complete pooling the posterior mean is
/// the pooled rate itself, so the mixture is over it: the law matched to the
/// pooled rate and its variance.
pub fn corrected_posterior<F: Family>(
    prior: &Prior,
    uncertainty: &Uncertainty,
    size: f64,
    count: f64,
    tail: f64,
) -> Posterior {
    match uncertainty {
        Uncertainty::Spread(spread) => {
            let components = &spread.nodes;
            let (mut mean, mut second) = (0.0, 0.0);
            for (w, component) in components {
                let (m, sd) = F::posterior_mean_sd(component, size, count);
                mean += w * m;
                second += w * (sd * sd + m * m);
            }
            let variance = (second - mean * mean).max(0.0);
            let (start_low, start_high) = F::matched_interval(mean, variance, tail);
            let mixture = Mixture::new::<F>(components, size, count);
            let scale = variance.sqrt();
            let lower = mixture_quantile::<F>(&mixture, (size, count), tail, start_low, scale);
            let upper = mixture_quantile::<F>(&mixture, (size, count), 1.0 - tail, start_high, scale);
            // The plug-in posterior's weight and parameters, without its interval.
            let (pool_weight, natural) =
                (F::pool_weight(prior, size), F::posterior_natural(prior, size, count));
            Posterior { mean, sd: variance.sqrt(), lower, upper, pool_weight, natural }
        }
        Uncertainty::PooledMean(variance) => {
            let plug_in = F::posterior(prior, size, count, tail);
            let variance = plug_in.sd * plug_in.sd + variance.max(0.0);
            if variance == 0.0 {
                return plug_in;
            }
            let (lower, upper) = F::matched_interval(plug_in.mean, variance, tail);
            Posterior { sd: variance.sqrt(), lower, upper, ..plug_in }
        }
        Uncertainty::Unknown => F::posterior(prior, size, count, tail),
    }
}

/// One node of a corrected posterior: its weight, its prior, and the law of
/// the rate under the posterior it gives the pair, with that law's ln normaliser.
struct Component<'a> {
    weight: f64,
    node: &'a Prior,
    law: RateLaw,
    ln_norm: f64,
}

/// A corrected posterior's components, with their Beta laws when every
/// component is a Beta law (their tails and densities are then evaluated
/// together: [`beta_lower_tails_and_densities_at`]).
struct Mixture<'a> {
    components: Vec<Component<'a>>,
    beta_laws: Option<Vec<BetaLaw>>,
}

/// A mixture's CDF at a point, its density there, and the density's slope.
#[derive(Debug, Clone, Copy, Default)]
struct MixtureAt {
    cdf: f64,
    density: f64,
    slope: f64,
}

impl<'a> Mixture<'a> {
    /// The posteriors one pair has under each node of `nodes`.
    fn new<F: Family>(nodes: &'a [(f64, Prior)], size: f64, count: f64) -> Self {
        let laws: Vec<(f64, &Prior, RateLaw)> = nodes
            .iter()
            .filter_map(|(weight, node)| {
                Some((*weight, node, (F::TERMS.law_of)(F::posterior_natural(node, size, count)?)))
            })
            .collect();
        let beta_laws: Option<Vec<BetaLaw>> = laws
            .iter()
            .map(|(_, _, law)| match *law {
                RateLaw::Beta { alpha, beta } => Some(BetaLaw::new(alpha, beta)),
                _ => None,
            })
            .collect();
        // Beta densities come from the tails' kernels, without a normaliser.
        let normalised = beta_laws.is_none();
        let components = laws
            .into_iter()
            .map(|(weight, node, law)| Component {
                weight,
                node,
                law,
                ln_norm: if normalised { law.ln_normaliser() } else { 0.0 },
            })
            .collect();
        Mixture { components, beta_laws }
    }

    /// The mixture at `x`: each component's P(rate < x) as
    /// [`Family::rate_tails`] gives it, weighted and summed, with the
    /// density and its slope. Beta components are taken together
    /// ([`beta_lower_tails_and_densities_at`]: their fractions side by side,
    /// tail and density from one kernel); `scratch` holds what that returns.
    fn at<F: Family>(&self, (size, count): (f64, f64), x: f64, scratch: &mut Vec<[f64; 2]>) -> MixtureAt {
        let mut sum = MixtureAt::default();
        let mut add = |weight: f64, below: f64, (density, slope): (f64, f64)| {
            sum.cdf += weight * below;
            sum.density += weight * density;
            sum.slope += weight * density * slope;
        };
        match &self.beta_laws {
            // Beta(α + k, β + n − k) at x, as the family's tails take it.
            Some(laws) => {
                let y = 1.0 - x;
                beta_lower_tails_and_densities_at(laws, x, y, scratch);
                let inside = x > 0.0 && y > 0.0;
                for ((c, &[lower, density]), law) in self.components.iter().zip(scratch.iter()).zip(laws) {
                    let slope = if inside { (law.a - 1.0) / x - (law.b - 1.0) / y } else { 0.0 };
                    add(c.weight, lower, (density, slope));
                }
            }
            None => {
                for c in &self.components {
                    add(
                        c.weight,
                        F::rate_tails(c.node, size, count, x).0,
                        c.law.density_and_slope(x, c.ln_norm),
                    );
                }
            }
        }
        sum
    }
}

/// The x where the mixture's P(rate < x) equals `target`: Halley's method
/// from `start` on the mixture CDF, its density and the density's slope
/// (each a weighted sum over the components), kept inside the bracket its
/// evaluations find and bisecting where a step would leave it; done when a
/// step moves x by at most 1e-6 of |x| (or of `scale` for values of either
/// sign), since Halley's error then falls cubically to far below that. From
/// the matched law's interval one evaluation usually suffices.
fn mixture_quantile<F: Family>(
    mixture: &Mixture<'_>,
    (size, count): (f64, f64),
    target: f64,
    start: f64,
    scale: f64,
) -> f64 {
    let rates = F::TERMS.rates;
    let inside = |x: f64| rates != RateRange::Proportion || x < 1.0;
    let positive = rates != RateRange::Real;
    let mut x = if positive { start.max(f64::MIN_POSITIVE) } else { start };
    if !inside(x) {
        x = 0.5 * (1.0 + start.clamp(0.0, 1.0));
    }
    let (mut low, mut high): (Option<f64>, Option<f64>) = (None, None);
    let mut reach = 0.5 * scale.max(f64::MIN_POSITIVE);
    let mut scratch = Vec::new();
    for _ in 0..200 {
        let MixtureAt { cdf, density, slope } = mixture.at::<F>((size, count), x, &mut scratch);
        let g = cdf - target;
        if g == 0.0 {
            return x;
        }
        if g < 0.0 {
            low = Some(x);
        } else {
            high = Some(x);
        }
        let newton = g / density;
        let halley = x - newton / (1.0 - 0.5 * newton * slope / density);
        let within = |y: f64| {
            y.is_finite()
                && low.is_none_or(|l| y > l)
                && high.is_none_or(|h| y < h)
                && (!positive || y > 0.0)
                && inside(y)
        };
        // Halley's error falls as the cube of the last: near the target, a
        // step of at most 1e-6 of |x| leaves an error near 1e-18 of it, so it
        // ends the search. Far out in a tail its steps are short and say
        // nothing: there the search steps out, growing, until it brackets.
        let near = g.abs() <= 0.1 * target.min(1.0 - target);
        let width = if positive { halley.abs() } else { halley.abs().max(scale) };
        if near && density > 0.0 && halley.is_finite() && (halley - x).abs() <= 1e-6 * width {
            return halley;
        }
        let next = if density > 0.0 && within(halley) && (near || (low.is_some() && high.is_some())) {
            halley
        } else {
            reach *= 2.0;
            match (low, high) {
                (Some(l), Some(h)) if positive && h > 4.0 * l => (l * h).sqrt(),
                (Some(l), Some(h)) => 0.5 * (l + h),
                // One side known: step out from it, geometrically.
                (Some(l), None) if positive && rates == RateRange::Proportion => 0.5 * (l + 1.0),
                (Some(l), None) if positive => 2.0 * l.max(f64::MIN_POSITIVE),
                (None, Some(h)) if positive => 0.5 * h,
                (Some(l), None) => l + reach,
                (None, Some(h)) => h - reach,
                (None, None) => return x,
            }
        };
        if let (Some(l), Some(h)) = (low, high) {
            if h - l <= 1e-15 * h.abs().max(if positive { 0.0 } else { scale }) {
                return next;
            }
        }
        x = next;
    }
    x
}

/// P(rate < threshold) and P(rate > threshold) for one pair with the
/// fitted prior's estimation uncertainty integrated out, as
/// [`corrected_posterior`] integrates it: the node-weighted sums of each
/// node's exact tails (each tail summed directly, so a small one keeps its
/// digits); at complete pooling the tails of the law matched to the pooled
/// rate and its variance.
pub fn corrected_tails<F: Family>(
    prior: &Prior,
    uncertainty: &Uncertainty,
    size: f64,
    count: f64,
    threshold: f64,
) -> (f64, f64) {
    match uncertainty {
        Uncertainty::Spread(spread) => spread.nodes.iter().fold((0.0, 0.0), |(below, above), (w, node)| {
            let (b, a) = F::rate_tails(node, size, count, threshold);
            (below + w * b, above + w * a)
        }),
        Uncertainty::PooledMean(variance) => {
            let (mean, sd) = F::posterior_mean_sd(prior, size, count);
            let variance = sd * sd + variance.max(0.0);
            if variance == 0.0 {
                return F::rate_tails(prior, size, count, threshold);
            }
            F::matched_tails(mean, variance, threshold)
        }
        Uncertainty::Unknown => F::rate_tails(prior, size, count, threshold),
    }
}

/// The estimation uncertainty of a fitted prior, ready for corrected intervals.
#[derive(Debug, Clone, PartialEq)]
pub enum Uncertainty {
    /// An interior fit: its quadrature nodes.
    Spread(SpreadPrior),
    /// Complete pooling: the variance of the pooled rate.
    PooledMean(f64),
    /// Nothing known (a covariance that is not positive definite): plug-in.
    Unknown,
}

impl Uncertainty {
    /// From a prior, what the fit knew of its uncertainty, and its median bias when known.
    pub fn of<F: Family>(prior: &Prior, known: PriorUncertainty, bias: Option<[f64; 2]>) -> Self {
        match (*prior, known) {
            (Prior::Conjugate { natural }, PriorUncertainty::Working(cov)) => {
                SpreadPrior::new::<F>(natural, cov, bias).map_or(Uncertainty::Unknown, Uncertainty::Spread)
            }
            (Prior::CompletePooling { .. }, PriorUncertainty::PooledMean(variance)) => {
                Uncertainty::PooledMean(variance)
            }
            _ => Uncertainty::Unknown,
        }
    }
}

/// The tails of a point mass at `mean`: P(rate < t) and P(rate > t).
pub fn point_mass_tails(mean: f64, threshold: f64) -> (f64, f64) {
    (f64::from(u8::from(mean < threshold)), f64::from(u8::from(mean > threshold)))
}

impl Model {
    /// The model's name in files and on the command line.
    pub fn name(self) -> &'static str {
        self.terms().name
    }

    /// The model of a name, as written by [`Model::name`].
    pub fn from_name(name: &str) -> Option<Self> {
        Model::ALL.iter().copied().find(|m| m.name() == name)
    }
}

/// What a fitting loop needs from a model.
pub trait Family: Sync {
    /// The model's names and column rules.
    const TERMS: ModelTerms;
    /// What the per-pair terms at one point u share (the prior's parameters
    /// and functions of them alone): computed once per point of a fit, not
    /// once per pair.
    type AtPoint: Sync;
    /// Those shared values at working coordinates `u`.
    fn at_point(u: [f64; 2]) -> Self::AtPoint;
    /// The shared values at `u` from those at another point `at` of the same
    /// second coordinate: a covariate prior gives each pair its own mean
    /// coordinate and one common parameter, so what depends on the common
    /// parameter alone is made once per point of its fit, not once per pair.
    /// The same bits as [`Family::at_point`] at `u`.
    fn at_mean(_at: &Self::AtPoint, u: [f64; 2]) -> Self::AtPoint {
        Self::at_point(u)
    }
    /// Per-pair log pmf and its derivatives at a point prepared by [`Family::at_point`].
    fn pair_terms_at(at: &Self::AtPoint, pair: &WeightedPair) -> Evaluation;
    /// Per-pair log pmf and its derivatives at working coordinates `u`.
    fn pair_terms(u: [f64; 2], pair: &WeightedPair) -> Evaluation {
        Self::pair_terms_at(&Self::at_point(u), pair)
    }
    /// The log likelihood and its derivatives summed over `table`, in a form
    /// a fit's search may use in place of the sum pair by pair: quicker,
    /// where the family has one for this table (None: pair by pair). The
    /// fit reports the sums pair by pair at the point the search ends.
    fn search_sums(_table: &PairTable) -> Option<Box<dyn Fn([f64; 2]) -> Evaluation>> {
        None
    }
    /// ln pmf under no overdispersion at rate `mean`.
    fn pooled_log_pmf(mean: f64, pair: &WeightedPair) -> f64;
    /// The log pmf at a rate as a sum of two products, for a free prior's
    /// grid: ln p(count | size, rate) = w · a(rate) + a term of the pair
    /// alone, with a(rate) these two functions of the rate (an exponential
    /// family's sufficient statistics: ln p and ln(1 − p), ln λ and λ, θ and θ²).
    fn rate_axes(rate: f64) -> [f64; 2];
    /// The pair's weights w on [`Family::rate_axes`].
    fn pair_axes(size: f64, count: f64) -> [f64; 2];
    /// Maximum-likelihood rate under no overdispersion.
    fn pooled_mean(table: &PairTable) -> f64;
    /// Its standard error, from the binomial or Poisson information.
    fn pooled_mean_se(table: &PairTable, mean: f64) -> f64;
    /// Refuses tables on which the two hyperparameters are not identifiable.
    fn check_identifiable(table: &PairTable) -> Result<(), Unidentifiable>;
    /// One pair's term of the score ∂ℓ/∂φ at φ = 1/strength = 0.
    fn boundary_score_term(mean: f64, pair: &WeightedPair) -> f64;
    /// Standardised score statistic for overdispersion (Tarone's or Dean's Z).
    fn overdispersion_z(table: &PairTable, mean: f64) -> f64;
    /// Method-of-moments strength, or None if the moments show no overdispersion.
    fn moment_strength(table: &PairTable, mean: f64) -> Option<f64>;
    /// The unit the fit measures strengths in, when it tells an interior
    /// strength from no pooling or no overdispersion: 1 where the strength
    /// is a number of trials or an exposure; the precision of a typical
    /// group where it is a precision, which has the data's own scale.
    fn strength_unit(_table: &PairTable) -> f64 {
        1.0
    }
    /// A strength of the size of a typical group's data, where a fit starts
    /// when the moments show no overdispersion: the largest group size.
    fn typical_strength(table: &PairTable) -> f64 {
        table.max_size().max(1.0)
    }
    /// The strengths a quadrature node of corrected intervals may take:
    /// the range the fit itself tells apart (below it no pooling, above it
    /// complete pooling), where the posterior's forms keep their digits.
    fn node_strengths() -> (f64, f64) {
        (1e-3, 1e12)
    }
    /// The whole-table term restricted maximum likelihood adds to the log
    /// likelihood at `u`, with its derivatives; None for a model without a
    /// restricted form.
    fn restricted_term(_table: &PairTable, _u: [f64; 2]) -> Option<Evaluation> {
        None
    }
    /// The precision W = 1/(s² + τ²) a group's data give its prior mean,
    /// with ∂W/∂u₂ and ∂²W/∂u₂², at working coordinates `u`: what the
    /// restricted likelihood of a covariate prior is built from
    /// ([`crate::core::regression`]); None for a model without a restricted form.
    fn mean_precision(_u: [f64; 2], _pair: &WeightedPair) -> Option<[f64; 3]> {
        None
    }
    /// That term at the no-overdispersion boundary, and its derivative with
    /// respect to φ = 1/strength there.
    fn restricted_boundary(_table: &PairTable) -> Option<(f64, f64)> {
        None
    }
    /// Working coordinates of a prior mean and strength.
    fn working(mean: f64, strength: f64) -> [f64; 2];
    /// Prior mean and strength at working coordinates.
    fn mean_strength(u: [f64; 2]) -> (f64, f64);
    /// Prior mean and strength of natural parameters (alpha, beta) or (shape, rate).
    fn mean_strength_of_natural(natural: [f64; 2]) -> (f64, f64);
    /// Natural parameters (alpha, beta) or (shape, rate) at `u`.
    fn natural(u: [f64; 2]) -> [f64; 2];
    /// ∂(natural)/∂u, rows the natural parameters.
    fn natural_jacobian(u: [f64; 2]) -> [[f64; 2]; 2];
    /// Derivatives of (mean, strength) with respect to u, rows mean and strength.
    fn mean_strength_jacobian(u: [f64; 2]) -> [[f64; 2]; 2];
    /// Posterior mean and sd of one pair under `prior`, as
    /// [`Family::posterior`] gives them, without its interval.
    fn posterior_mean_sd(prior: &Prior, size: f64, count: f64) -> (f64, f64);
    /// Posterior summary of one pair under `prior`, with an equal-tailed
    /// interval leaving `tail` probability in each tail.
    fn posterior(prior: &Prior, size: f64, count: f64, tail: f64) -> Posterior;
    /// The posterior [`Family::posterior`] gives, from its interval's ends
    /// (the costly part) and what the prior and the pair give again
    /// cheaply: a table may hold the ends alone and make the rest when asked.
    fn posterior_with_ends(prior: &Prior, size: f64, count: f64, [lower, upper]: [f64; 2]) -> Posterior {
        match *prior {
            Prior::CompletePooling { mean } => Posterior::pooled(mean),
            Prior::Conjugate { .. } => {
                let (mean, sd) = Self::posterior_mean_sd(prior, size, count);
                Posterior {
                    mean,
                    sd,
                    lower,
                    upper,
                    pool_weight: Self::pool_weight(prior, size),
                    natural: Self::posterior_natural(prior, size, count),
                }
            }
        }
    }
    /// P(rate < threshold) and P(rate > threshold) under the posterior of one
    /// pair: exact tails of the posterior Beta or Gamma, each formed directly
    /// where it is the smaller; 0 or 1 under complete pooling, where the
    /// posterior is a point mass at the pooled rate.
    fn rate_tails(prior: &Prior, size: f64, count: f64, threshold: f64) -> (f64, f64);
    /// The weight B of the prior mean in a pair's posterior mean (1 under
    /// complete pooling), as [`Posterior::pool_weight`] holds it.
    fn pool_weight(prior: &Prior, size: f64) -> f64;
    /// The posterior's natural parameters, as [`Posterior::natural`] holds
    /// them, without its interval; None under complete pooling.
    fn posterior_natural(prior: &Prior, size: f64, count: f64) -> Option<[f64; 2]>;
    /// The law of the rate under a posterior of this model.
    fn rate_law(posterior: &Posterior) -> RateLaw {
        match posterior.natural {
            Some(natural) => (Self::TERMS.law_of)(natural),
            None => RateLaw::Point(posterior.mean),
        }
    }
    /// ∂(posterior mean)/∂(natural parameters of the prior) for one pair.
    fn posterior_mean_gradient(natural: [f64; 2], size: f64, count: f64) -> [f64; 2];
    /// The equal-tailed interval (`tail` in each tail) of the posterior law
    /// of this model with the given mean and variance (a Beta or a Gamma
    /// matched to the two moments; a Beta's variance is held below m(1 − m)).
    fn matched_interval(mean: f64, variance: f64, tail: f64) -> (f64, f64);
    /// P(rate < t) and P(rate > t) under the law [`Family::matched_interval`] matches
    /// to `mean` and `variance`.
    fn matched_tails(mean: f64, variance: f64, t: f64) -> (f64, f64);
    /// Where a group's count falls in its prior predictive distribution
    /// (the marginal of the count given its size): (P(K < count), P(K ≤ count)).
    fn predictive_cdf(prior: &Prior, size: f64, count: f64) -> (f64, f64);
    /// A group's count drawn given its rate and size: Binomial(n, p),
    /// Poisson(E λ) or N(θ, s²).
    fn draw_count(rate: f64, size: f64, rng: &mut rand_chacha::ChaCha8Rng) -> f64;
    /// The variance of a group's raw rate (count / size, size > 0) under
    /// its prior predictive distribution.
    fn raw_rate_variance(prior: &Prior, size: f64) -> f64;
}

/// Checks a family's per-pair gradient and Hessian against central
/// differences of its log pmf and gradient, at each (size, count) pair and
/// each point u.
#[cfg(test)]
pub(crate) fn assert_derivatives_match<F: Family>(pairs: &[(f64, f64)], points: &[[f64; 2]]) {
    let h = 1e-5;
    for &(size, count) in pairs {
        let pair = WeightedPair { size, count, weight: 1.0 };
        for &u in points {
            let at = F::pair_terms(u, &pair);
            for i in 0..2 {
                let (mut up, mut down) = (u, u);
                up[i] += h;
                down[i] -= h;
                let (eu, ed) = (F::pair_terms(up, &pair), F::pair_terms(down, &pair));
                let g = (eu.log_likelihood - ed.log_likelihood) / (2.0 * h);
                assert!(
                    (at.gradient[i] - g).abs() < 1e-6 * (1.0 + g.abs()),
                    "g{i} at {size}, {count}, u = {u:?}"
                );
                for j in 0..2 {
                    let hij = (eu.gradient[j] - ed.gradient[j]) / (2.0 * h);
                    assert!(
                        (at.hessian[j][i] - hij).abs() < 1e-5 * (1.0 + hij.abs()),
                        "h{j}{i} at {size}, {count}"
                    );
                }
            }
        }
    }
}

/// Checks that [`Family::at_mean`] from a point of the same second
/// coordinate gives, for every pair, the bits [`Family::at_point`] gives.
#[cfg(test)]
pub(crate) fn assert_at_mean_matches<F: Family>(pairs: &[(f64, f64)], points: &[[f64; 2]]) {
    for &(size, count) in pairs {
        let pair = WeightedPair { size, count, weight: 1.0 };
        for &u in points {
            let common = F::at_point([0.7, u[1]]);
            let (shared, fresh) = (F::pair_terms_at(&F::at_mean(&common, u), &pair), F::pair_terms(u, &pair));
            let bits = |e: Evaluation| {
                [
                    e.log_likelihood,
                    e.gradient[0],
                    e.gradient[1],
                    e.hessian[0][0],
                    e.hessian[0][1],
                    e.hessian[1][1],
                ]
                .map(f64::to_bits)
            };
            assert_eq!(bits(shared), bits(fresh), "{size}, {count} at {u:?}");
        }
    }
}

#[cfg(test)]
mod quadrature {
    use super::*;

    /// The quantile of one pair's corrected posterior under `natural` spread
    /// by `covariance`, from `start`: where it lands, and the mixture's CDF there.
    fn quantile_from<F: Family>(
        natural: [f64; 2],
        (size, count): (f64, f64),
        target: f64,
        start: f64,
    ) -> (f64, f64) {
        let spread = SpreadPrior::new::<F>(natural, [[0.04, 0.01], [0.01, 0.09]], None).unwrap();
        let mixture = Mixture::new::<F>(&spread.nodes, size, count);
        let x = mixture_quantile::<F>(&mixture, (size, count), target, start, 1.0);
        let cdf: f64 =
            mixture.components.iter().map(|c| c.weight * F::rate_tails(c.node, size, count, x).0).sum();
        (x, cdf)
    }

    #[test]
    fn the_mixture_quantile_is_found_from_near_and_far_starts() {
        use super::beta_binomial::BetaBinomial;
        use super::gamma_poisson::GammaPoisson;
        use super::normal_normal::NormalNormal;
        // Starts on both sides, near and far: each ends where the mixture's CDF is the target.
        type Solve<'a> = &'a dyn Fn(f64, f64) -> (f64, f64);
        let cases: [(Solve<'_>, [f64; 3]); 3] = [
            (
                &|target, start| quantile_from::<BetaBinomial>([3.0, 12.0], (40.0, 7.0), target, start),
                [0.01, 0.2, 0.999],
            ),
            (
                &|target, start| quantile_from::<GammaPoisson>([6.0, 6.0], (3.5, 9.0), target, start),
                [1e-3, 2.0, 40.0],
            ),
            (
                &|target, start| quantile_from::<NormalNormal>([1.5, 0.25], (0.4, 2.2), target, start),
                [-30.0, 1.7, 25.0],
            ),
        ];
        for (solve, starts) in cases {
            for target in [0.025, 0.975] {
                let answers: Vec<(f64, f64)> = starts.iter().map(|&start| solve(target, start)).collect();
                for &(x, cdf) in &answers {
                    assert!((cdf - target).abs() < 1e-12, "CDF {cdf} at {x} for {target}");
                    assert!((x - answers[1].0).abs() <= 1e-10 * x.abs().max(1.0), "{answers:?}");
                }
            }
        }
    }

    #[test]
    fn the_hermite_rule_integrates_the_normal_moments() {
        // E[Z^0] = 1, E[Z²] = 1, E[Z⁴] = 3, E[Z⁶] = 15, E[Z¹²] = 10395 (double factorials).
        let moment =
            |p: i32| HERMITE_NODES.iter().zip(HERMITE_WEIGHTS).map(|(x, w)| w * x.powi(p)).sum::<f64>();
        for (p, want) in [(0, 1.0), (2, 1.0), (4, 3.0), (6, 15.0), (12, 10395.0)] {
            assert!((moment(p) - want).abs() < 1e-9 * want, "E[Z^{p}] = {}", moment(p));
        }
    }

    #[test]
    fn densities_are_the_textbook_ones() {
        // Beta(2, 3): 12 x (1 − x)²; Gamma(2, rate 3): 9 x e^(−3x); N(1, 2²) at 1: 1/(2√(2π))
        // (textbook forms, common practice).
        let close = |a: f64, b: f64| (a - b).abs() < 1e-13 * b.abs().max(1e-300);
        assert!(close(RateLaw::Beta { alpha: 2.0, beta: 3.0 }.density(0.3), 12.0 * 0.3 * 0.49));
        assert!(close(RateLaw::Gamma { shape: 2.0, rate: 3.0 }.density(0.5), 9.0 * 0.5 * (-1.5f64).exp()));
        let peak = 1.0 / (2.0 * (2.0 * std::f64::consts::PI).sqrt());
        assert!(close(RateLaw::Normal { mean: 1.0, sd: 2.0 }.density(1.0), peak));
        assert_eq!(RateLaw::Beta { alpha: 2.0, beta: 3.0 }.density(1.5), 0.0);
    }

    #[test]
    fn corrected_tails_at_complete_pooling_are_those_of_the_matched_law() {
        use super::normal_normal::NormalNormal;
        // The law matched to the pooled mean is symmetric for the normal model:
        // half its mass either side of the mean (common practice).
        let prior = Prior::CompletePooling { mean: 2.5 };
        let (below, above) =
            corrected_tails::<NormalNormal>(&prior, &Uncertainty::PooledMean(0.04), 1.0, 3.0, 2.5);
        assert!((below - 0.5).abs() < 1e-15 && (above - 0.5).abs() < 1e-15);
        // With nothing known of the uncertainty, the plug-in point mass.
        assert_eq!(corrected_tails::<NormalNormal>(&prior, &Uncertainty::Unknown, 1.0, 3.0, 2.0), (0.0, 1.0));
    }
}

#[cfg(test)]
mod posterior_parts {
    use super::beta_binomial::BetaBinomial;
    use super::gamma_poisson::GammaPoisson;
    use super::normal_normal::NormalNormal;
    use super::*;

    /// A table may hold a posterior's interval ends alone: the posterior
    /// made again from them must be the one first made, bit for bit.
    fn assert_made_again<F: Family>(pairs: &[(f64, f64)], points: &[[f64; 2]]) {
        let mut priors: Vec<Prior> =
            points.iter().map(|&u| Prior::Conjugate { natural: F::natural(u) }).collect();
        priors.push(Prior::CompletePooling { mean: 0.3 });
        for prior in &priors {
            for &(size, count) in pairs {
                let whole = F::posterior(prior, size, count, 0.025);
                let again = F::posterior_with_ends(prior, size, count, [whole.lower, whole.upper]);
                assert_eq!(format!("{whole:?}"), format!("{again:?}"), "{prior:?} at {size}, {count}");
            }
        }
    }

    #[test]
    fn a_posterior_made_again_from_its_ends_is_the_same() {
        let points = [[-1.0, 0.5], [0.4, 3.0], [-0.2, -1.0]];
        assert_made_again::<BetaBinomial>(&[(12.0, 5.0), (300.0, 7.0), (40.0, 40.0), (1.0, 0.0)], &points);
        assert_made_again::<GammaPoisson>(&[(2.5, 3.0), (0.01, 0.0), (400.0, 250.0)], &points);
        assert_made_again::<NormalNormal>(&[(0.5, 1.2), (3.0, -2.0), (0.01, 0.0)], &points);
    }
}
