//! The two hierarchical models, behind one trait the fitting loop is written
//! against.
//!
//! Each model is fitted in *working coordinates* u = (u₁, u₂): an unbounded
//! transform of the prior mean and of the prior strength (or shape). Every
//! per-pair term is written directly in those coordinates, in forms that tend
//! to the binomial or Poisson limit as the strength grows, so the score and
//! curvature stay accurate up to strengths of 1e15. "No overdispersion" is the
//! finite boundary φ = 1/strength = 0; it is tested by the score at φ = 0
//! (Tarone's and Dean's statistics), not reached by drifting to infinity.

pub mod beta_binomial;
pub mod gamma_poisson;

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

/// What differs between models outside the numerics: the name, the columns
/// a model reads and what it accepts in them, the names of its parameters.
/// Text here is for messages, options and output column names only.
#[derive(Debug, PartialEq, Eq)]
pub struct ModelTerms {
    /// Name in files and on the command line.
    pub name: &'static str,
    /// What the count column holds; also the option naming it (`--successes`).
    pub count_role: &'static str,
    /// What the size column holds; also the option naming it (`--trials`).
    pub size_role: &'static str,
    /// Sizes are whole numbers (trials); otherwise any number ≥ 0 (exposure),
    /// positive where there are counts.
    pub whole_sizes: bool,
    /// A count may not exceed its size (successes out of trials).
    pub count_within_size: bool,
    /// The natural parameters of prior and posterior, in order.
    pub parameter_names: [&'static str; 2],
    /// The data that leave the prior mean on the edge of its range, in words.
    pub degenerate_data: &'static str,
    /// The prior mean is a proportion, below 1.
    pub mean_below_one: bool,
    /// Name of the score test for overdispersion this model uses.
    pub overdispersion_test: &'static str,
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
/// [`Family`] and one line in the `models!` call below it.
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
    /// A point mass (complete pooling).
    Point(f64),
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

/// The posterior of one pair with Kass and Steffey's (1989) first-order
/// correction for the estimated prior: the plug-in posterior variance plus
/// g′ Σ g, g the gradient of the posterior mean in the prior's working
/// coordinates and Σ their covariance (at complete pooling the posterior
/// mean is the pooled rate itself, so the term is the pooled rate's
/// variance); the interval is that of the model's posterior law matched to
/// the mean and corrected variance, so it stays inside the parameter space.
/// The posterior mean and parameters are the plug-in ones.
pub fn corrected_posterior<F: Family>(
    prior: &Prior,
    uncertainty: PriorUncertainty,
    size: f64,
    count: f64,
    tail: f64,
) -> Posterior {
    let plug_in = F::posterior(prior, size, count, tail);
    let extra = match (*prior, uncertainty) {
        (Prior::Conjugate { natural }, PriorUncertainty::Working(cov)) => {
            let (mean, strength) = F::mean_strength_of_natural(natural);
            let jacobian = F::natural_jacobian(F::working(mean, strength));
            let by_natural = F::posterior_mean_gradient(natural, size, count);
            let g = [0, 1].map(|j| by_natural[0] * jacobian[0][j] + by_natural[1] * jacobian[1][j]);
            (0..2).map(|p| (0..2).map(|q| g[p] * cov[p][q] * g[q]).sum::<f64>()).sum::<f64>().max(0.0)
        }
        (Prior::CompletePooling { .. }, PriorUncertainty::PooledMean(variance)) => variance.max(0.0),
        _ => 0.0,
    };
    if extra == 0.0 {
        return plug_in;
    }
    let variance = plug_in.sd * plug_in.sd + extra;
    let (lower, upper) = F::matched_interval(plug_in.mean, variance, tail);
    Posterior { sd: variance.sqrt(), lower, upper, ..plug_in }
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
    /// Per-pair log pmf and its derivatives at working coordinates `u`.
    fn pair_terms(u: [f64; 2], pair: &WeightedPair) -> Evaluation;
    /// ln pmf under no overdispersion at rate `mean`.
    fn pooled_log_pmf(mean: f64, pair: &WeightedPair) -> f64;
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
    /// Posterior summary of one pair under `prior`, with an equal-tailed
    /// interval leaving `tail` probability in each tail.
    fn posterior(prior: &Prior, size: f64, count: f64, tail: f64) -> Posterior;
    /// P(rate < threshold) and P(rate > threshold) under the posterior of one
    /// pair: exact tails of the posterior Beta or Gamma, each formed directly
    /// where it is the smaller; 0 or 1 under complete pooling, where the
    /// posterior is a point mass at the pooled rate.
    fn rate_tails(prior: &Prior, size: f64, count: f64, threshold: f64) -> (f64, f64);
    /// The law of the rate under a posterior of this model.
    fn rate_law(posterior: &Posterior) -> RateLaw;
    /// ∂(posterior mean)/∂(natural parameters of the prior) for one pair.
    fn posterior_mean_gradient(natural: [f64; 2], size: f64, count: f64) -> [f64; 2];
    /// The equal-tailed interval (`tail` in each tail) of the posterior law
    /// of this model with the given mean and variance (a Beta or a Gamma
    /// matched to the two moments; a Beta's variance is held below m(1 − m)).
    fn matched_interval(mean: f64, variance: f64, tail: f64) -> (f64, f64);
    /// Where a group's count falls in its prior predictive distribution
    /// (the marginal of the count given its size): (P(K < count), P(K ≤ count)).
    fn predictive_cdf(prior: &Prior, size: f64, count: f64) -> (f64, f64);
    /// The variance of a group's raw rate (count / size, size > 0) under
    /// its prior predictive distribution.
    fn raw_rate_variance(prior: &Prior, size: f64) -> f64;
}
