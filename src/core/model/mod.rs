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
        /// alpha (beta-binomial) or shape (gamma-Poisson).
        first: f64,
        /// beta (beta-binomial) or rate (gamma-Poisson).
        second: f64,
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
    /// First posterior parameter (alpha or shape), absent under complete pooling.
    pub first: Option<f64>,
    /// Second posterior parameter (beta or rate), absent under complete pooling.
    pub second: Option<f64>,
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

/// What a fitting loop needs from a model.
pub trait Family: Sync {
    /// Name used in summaries and on the command line.
    const NAME: &'static str;
    /// Name of the score test for overdispersion this model uses.
    const OVERDISPERSION_TEST: &'static str;
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
    /// Natural parameters (alpha, beta) or (shape, rate) at `u`.
    fn natural(u: [f64; 2]) -> [f64; 2];
    /// ∂(natural)/∂u, rows the natural parameters.
    fn natural_jacobian(u: [f64; 2]) -> [[f64; 2]; 2];
    /// Derivatives of (mean, strength) with respect to u, rows mean and strength.
    fn mean_strength_jacobian(u: [f64; 2]) -> [[f64; 2]; 2];
    /// Posterior summary of one pair under `prior`, with an equal-tailed
    /// interval leaving `tail` probability in each tail.
    fn posterior(prior: &Prior, size: f64, count: f64, tail: f64) -> Posterior;
}
