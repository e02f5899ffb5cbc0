//! Maximum marginal likelihood: the optimiser glue and the boundary logic.
//!
//! The objective is −ℓ(u)/N, the negative log marginal likelihood per group,
//! in the model's working coordinates, with analytic gradient and Hessian.
//! argmin's trust region with the Steihaug subproblem takes the steps (it
//! cannot fail the way a line search can on a flat likelihood); the loop stops
//! when the gradient is small, then a few safeguarded Newton steps polish the
//! optimum to machine precision. Convergence is declared only when the
//! gradient is small *and* the observed information is positive definite.
//!
//! The start is the method-of-moments estimate. "No overdispersion" (infinite
//! strength) is the boundary φ = 1/strength = 0; when the score there is not
//! positive and no interior point beats it, the fit reports that boundary as
//! its result: complete pooling at the pooled rate.
//!
//! With [`Likelihood::Restricted`] the objective adds the model's
//! whole-table restricted term (the normal-normal model's REML), at the
//! boundary as well as inside, so the tests against complete pooling
//! compare restricted likelihoods.

use crate::core::model::{Evaluation, Family, Prior, PriorUncertainty, Unidentifiable};
use crate::core::pairs::{PairTable, WeightedPair};
use argmin::core::{
    CostFunction, Error as ArgminError, Executor, Gradient, Hessian, IterState, Problem, Solver, State,
    TerminationReason, TerminationStatus, KV,
};
use argmin::solver::trustregion::{Steihaug, TrustRegion};
use rayon::prelude::*;

/// Pairs per parallel work unit. Fixed, so that floating-point sums are
/// grouped the same way whatever the number of threads.
const CHUNK: usize = 2048;
/// Stop when the per-group gradient norm falls below this.
const GRADIENT_TOLERANCE: f64 = 1e-10;
/// Trust-region iterations before giving up.
const MAX_ITERATIONS: u64 = 200;

/// Relative size of the rounding in a log likelihood summed over many pairs
/// (about a thousand units in the last place).
const ROUNDING_NOISE: f64 = 1e-13;
/// A strength beyond this (in the model's [`Family::strength_unit`]) is
/// indistinguishable from no overdispersion.
const MAX_STRENGTH: f64 = 1e15;
/// A strength below this (in the same unit) means no pooling at all.
const MIN_STRENGTH: f64 = 1e-8;

/// Which edge of the parameter space the fit ended on, if any.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Boundary {
    /// An interior maximum.
    None,
    /// The maximum is at infinite strength: no variation beyond binomial/Poisson.
    NoOverdispersion,
}

/// Score test for overdispersion at the no-overdispersion boundary.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct OverdispersionTest {
    /// Standardised statistic (Tarone's Z or Dean's Z).
    pub statistic: f64,
    /// One-sided p-value, P(N(0,1) > Z).
    pub p_value: f64,
}

/// The likelihood-ratio test of the fitted prior against complete pooling
/// (no overdispersion). The null sits on the boundary of the parameter
/// space, so the statistic's null distribution is the 50:50 mixture of
/// chi-square(0) and chi-square(1) (Self and Liang, JASA 1987): the p-value
/// is half the chi-square(1) tail above a positive statistic, and 1 at zero.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PoolingTest {
    /// 2 (ℓ at the fit − ℓ under complete pooling), at least 0.
    pub statistic: f64,
    /// P(mixture ≥ statistic).
    pub p_value: f64,
}

impl PoolingTest {
    /// The test from the two log likelihoods.
    pub fn new(fitted: f64, pooled: f64) -> Self {
        let statistic = (2.0 * (fitted - pooled)).max(0.0);
        // P(chi-square(1) > x) = erfc(√(x/2)).
        let p_value =
            if statistic > 0.0 { 0.5 * crate::core::incomplete::erfc((statistic / 2.0).sqrt()) } else { 1.0 };
        PoolingTest { statistic, p_value }
    }
}

/// Result of a fit.
#[derive(Debug, Clone, PartialEq)]
pub struct Fit {
    /// The fitted prior, or complete pooling at the boundary.
    pub prior: Prior,
    /// Prior mean.
    pub mean: f64,
    /// Prior strength; None at the no-overdispersion boundary (infinite).
    pub strength: Option<f64>,
    /// Standard errors of the natural parameters (alpha, beta) or (shape, rate).
    pub natural_se: Option<[f64; 2]>,
    /// Standard errors of the prior mean and strength.
    pub mean_se: f64,
    /// Standard error of the strength, when it is finite.
    pub strength_se: Option<f64>,
    /// Full log marginal likelihood at the result.
    pub log_marginal_likelihood: f64,
    /// Log marginal likelihood at the method-of-moments start (or the boundary).
    pub start_log_likelihood: f64,
    /// Whether the convergence tests passed.
    pub converged: bool,
    /// Optimiser iterations, polishing steps included.
    pub iterations: u64,
    /// Norm of the per-group gradient at the result: in the working
    /// coordinates for an interior maximum; at the boundary, the derivative
    /// with respect to the mean (0 at the pooled rate, which maximises the
    /// pooled likelihood).
    pub gradient_norm: f64,
    /// Which boundary the fit ended on.
    pub boundary: Boundary,
    /// At the boundary: the per-group score ∂ℓ/∂φ at φ = 1/strength = 0,
    /// which is at most 0 where the boundary is a maximum.
    pub boundary_score: Option<f64>,
    /// Score test for overdispersion.
    pub overdispersion: OverdispersionTest,
    /// The maximised restricted log likelihood, when that was the criterion.
    pub restricted_log_likelihood: Option<f64>,
    /// Likelihood-ratio test against complete pooling (of restricted
    /// likelihoods when that was the criterion).
    pub pooling: PoolingTest,
    /// What is known of the estimate's uncertainty, for corrected intervals.
    pub uncertainty: PriorUncertainty,
}

/// What the end of a search means, given the boundary's score: an interior
/// maximum, the boundary, or a failed search. The boundary is the result
/// when its score is not positive (no interior point does better near it),
/// or when the search ran past the largest strength told apart from it; with
/// a positive score any other ending is a search that failed, never a
/// boundary result.
fn judge(interior_ok: bool, beats_boundary: bool, boundary_score: f64, strength: f64) -> Ending {
    if interior_ok && beats_boundary {
        Ending::Interior
    } else if boundary_score <= 0.0 || strength > MAX_STRENGTH {
        Ending::Boundary
    } else {
        Ending::Failed
    }
}

/// How a search ended.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Ending {
    Interior,
    Boundary,
    Failed,
}

/// Why a fit produced no prior.
#[derive(Debug, Clone, PartialEq)]
pub enum FitFailure {
    /// The table cannot identify the two hyperparameters.
    Unidentifiable(Unidentifiable),
    /// The maximum is at zero strength: the groups share nothing.
    NoPooling,
    /// The optimiser did not meet the convergence tests.
    NotConverged {
        /// Iterations used.
        iterations: u64,
        /// Gradient norm where it stopped.
        gradient_norm: f64,
    },
}

/// Which likelihood a fit maximises.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Likelihood {
    /// The marginal likelihood of the data.
    #[default]
    Marginal,
    /// The restricted (residual) likelihood: the marginal likelihood with
    /// the model's whole-table term for the estimated mean.
    Restricted,
}

/// A point of a fit with the marginal likelihood's evaluation there.
type Visited = ([f64; 2], Evaluation);

/// The objective of a fit, remembering its last two points: argmin asks
/// for the value, gradient and Hessian one at a time at the same point, the
/// fit's start is the optimiser's start, and the polish and the final
/// judgement start where the step before ended. A point met again is not
/// summed over the pairs again (the same bits: the sums are deterministic).
struct Criterion<'a, F> {
    table: &'a PairTable,
    likelihood: Likelihood,
    recent: std::cell::RefCell<[Option<Visited>; 2]>,
    /// The family's quicker sums over the table for the search, if it has them.
    search: Option<Box<dyn Fn([f64; 2]) -> Evaluation>>,
    family: std::marker::PhantomData<F>,
}

impl<'a, F: Family> Criterion<'a, F> {
    fn new(table: &'a PairTable, likelihood: Likelihood) -> Self {
        Criterion {
            table,
            likelihood,
            recent: std::cell::RefCell::new([None, None]),
            search: F::search_sums(table),
            family: std::marker::PhantomData,
        }
    }

    /// The marginal log likelihood with its derivatives at `u`.
    fn marginal(&self, u: [f64; 2]) -> Evaluation {
        let same = |at: [f64; 2]| at.map(f64::to_bits) == u.map(f64::to_bits);
        if let Some((_, evaluation)) = self.recent.borrow().iter().flatten().find(|(at, _)| same(*at)) {
            return *evaluation;
        }
        let evaluation = evaluate::<F>(self.table, u);
        let mut recent = self.recent.borrow_mut();
        recent[1] = recent[0];
        recent[0] = Some((u, evaluation));
        evaluation
    }

    /// The criterion at `u`: the marginal log likelihood, plus the
    /// restricted term when asked for.
    fn at(&self, u: [f64; 2]) -> Evaluation {
        self.with_restricted(u, self.marginal(u))
    }

    /// The criterion at `u` as the search takes it: the family's quicker
    /// sums where it has them (the same function, summed in another order).
    fn searched_at(&self, u: [f64; 2]) -> Evaluation {
        match &self.search {
            Some(search) => self.with_restricted(u, search(u)),
            None => self.at(u),
        }
    }

    /// `marginal` plus the restricted term at `u` when asked for.
    fn with_restricted(&self, u: [f64; 2], mut total: Evaluation) -> Evaluation {
        if self.likelihood == Likelihood::Restricted {
            if let Some(term) = F::restricted_term(self.table, u) {
                total.add_weighted(&term, 1.0);
            }
        }
        total
    }
}

/// Log-likelihood, gradient and Hessian summed over the table at `u`.
pub fn evaluate<F: Family>(table: &PairTable, u: [f64; 2]) -> Evaluation {
    let at = F::at_point(u);
    let parts: Vec<Evaluation> = table
        .pairs()
        .par_chunks(CHUNK)
        .map(|chunk| {
            let mut sum = Evaluation::default();
            for pair in chunk {
                sum.add_weighted(&F::pair_terms_at(&at, pair), pair.weight);
            }
            sum
        })
        .collect();
    let mut total = Evaluation::default();
    for part in &parts {
        total.add_weighted(part, 1.0);
    }
    total
}

/// Log marginal likelihood with no overdispersion, at rate `mean`.
pub fn pooled_log_likelihood<F: Family>(table: &PairTable, mean: f64) -> f64 {
    table.pairs().iter().map(|p: &WeightedPair| p.weight * F::pooled_log_pmf(mean, p)).sum()
}

/// Scaled objective handed to argmin.
struct Objective<'a, 'b, F> {
    criterion: &'b Criterion<'a, F>,
    scale: f64,
}

impl<F: Family> Objective<'_, '_, F> {
    fn at(&self, u: &[f64]) -> Evaluation {
        self.criterion.searched_at([u[0], u[1]])
    }
}

impl<F: Family> CostFunction for Objective<'_, '_, F> {
    type Param = Vec<f64>;
    type Output = f64;
    fn cost(&self, u: &Vec<f64>) -> Result<f64, ArgminError> {
        let value = -self.at(u).log_likelihood * self.scale;
        // A non-finite trial point is rejected by the trust region as a bad step.
        Ok(if value.is_finite() { value } else { f64::INFINITY })
    }
}

impl<F: Family> Gradient for Objective<'_, '_, F> {
    type Param = Vec<f64>;
    type Gradient = Vec<f64>;
    fn gradient(&self, u: &Vec<f64>) -> Result<Vec<f64>, ArgminError> {
        let g = self.at(u).gradient;
        Ok(vec![-g[0] * self.scale, -g[1] * self.scale])
    }
}

impl<F: Family> Hessian for Objective<'_, '_, F> {
    type Param = Vec<f64>;
    type Hessian = Vec<Vec<f64>>;
    fn hessian(&self, u: &Vec<f64>) -> Result<Vec<Vec<f64>>, ArgminError> {
        let h = self.at(u).hessian;
        Ok(h.iter().map(|row| row.iter().map(|v| -v * self.scale).collect()).collect())
    }
}

type TrustState = IterState<Vec<f64>, Vec<f64>, (), Vec<Vec<f64>>, (), f64>;

/// Wraps a solver and stops it once the gradient norm is below a tolerance,
/// or once it has stalled: with very many groups the per-group objective
/// cannot resolve the last steps (the decrease falls below its rounding), the
/// trust region then rejects every step and shrinks, and the Newton polish
/// that follows finishes the job on the gradient instead.
#[derive(Clone)]
struct StopOnSmallGradient<S> {
    inner: S,
    tolerance: f64,
    last_param: Option<Vec<f64>>,
    unchanged: u32,
}

/// Iterations without any move after which the trust region is stopped.
const STALLED_AFTER: u32 = 3;

impl<O, S: Solver<O, TrustState>> Solver<O, TrustState> for StopOnSmallGradient<S> {
    fn name(&self) -> &str {
        "trust region (Steihaug) with gradient stop"
    }
    fn init(
        &mut self,
        problem: &mut Problem<O>,
        state: TrustState,
    ) -> Result<(TrustState, Option<KV>), ArgminError> {
        self.inner.init(problem, state)
    }
    fn next_iter(
        &mut self,
        problem: &mut Problem<O>,
        state: TrustState,
    ) -> Result<(TrustState, Option<KV>), ArgminError> {
        self.inner.next_iter(problem, state)
    }
    fn terminate(&mut self, state: &TrustState) -> TerminationStatus {
        let param = state.get_param().cloned();
        if param.is_some() && param == self.last_param {
            self.unchanged += 1;
        } else {
            self.unchanged = 0;
        }
        self.last_param = param;
        match state.get_gradient() {
            Some(g) if norm(g) < self.tolerance => {
                TerminationStatus::Terminated(TerminationReason::SolverConverged)
            }
            _ if self.unchanged >= STALLED_AFTER => {
                TerminationStatus::Terminated(TerminationReason::SolverExit("stalled".to_string()))
            }
            _ => self.inner.terminate(state),
        }
    }
}

fn norm(v: &[f64]) -> f64 {
    v.iter().map(|x| x * x).sum::<f64>().sqrt()
}

/// Inverse of a 2×2 matrix, if its determinant is usable.
fn inverse(m: [[f64; 2]; 2]) -> Option<[[f64; 2]; 2]> {
    let det = m[0][0] * m[1][1] - m[0][1] * m[1][0];
    if !(det.is_finite() && det.abs() > 0.0) {
        return None;
    }
    Some([[m[1][1] / det, -m[0][1] / det], [-m[1][0] / det, m[0][0] / det]])
}

/// Whether −H (the observed information) is positive definite, judged relative
/// to its scale so that a numerically flat direction does not pass.
fn information_is_definite(h: [[f64; 2]; 2]) -> bool {
    let (a, b, d) = (-h[0][0], -h[0][1], -h[1][1]);
    let scale = a.abs().max(d.abs());
    a > 0.0 && d > 0.0 && a * d - b * b > 1e-12 * scale * scale
}

/// Runs the trust region from `start`, then polishes with Newton steps.
fn maximise<F: Family>(
    criterion: &Criterion<'_, F>,
    start: [f64; 2],
) -> Result<([f64; 2], u64), ArgminError> {
    let objective = Objective { criterion, scale: 1.0 / criterion.table.groups() };
    let solver = StopOnSmallGradient {
        inner: TrustRegion::new(Steihaug::new().with_max_iters(20)).with_max_radius(8.0)?,
        tolerance: GRADIENT_TOLERANCE,
        last_param: None,
        unchanged: 0,
    };
    let result = Executor::new(objective, solver)
        .configure(|state| state.param(start.to_vec()).max_iters(MAX_ITERATIONS))
        .run()?;
    let best =
        result.state().get_best_param().or(result.state().get_param()).cloned().unwrap_or(start.to_vec());
    let mut u = [best[0], best[1]];
    let mut iterations = result.state().get_iter();
    let mut current = criterion.searched_at(u);
    for _ in 0..8 {
        let Some(inv) = inverse(current.hessian) else { break };
        if !information_is_definite(current.hessian) {
            break;
        }
        let g = current.gradient;
        let step = [-(inv[0][0] * g[0] + inv[0][1] * g[1]), -(inv[1][0] * g[0] + inv[1][1] * g[1])];
        let mut scale = 1.0;
        let mut accepted = false;
        // Near the maximum the log likelihood changes by less than its own
        // rounding; a step that keeps it within that noise and shrinks the
        // gradient is progress too.
        let noise = ROUNDING_NOISE * current.log_likelihood.abs();
        for _ in 0..30 {
            let trial = [u[0] + scale * step[0], u[1] + scale * step[1]];
            let at = criterion.searched_at(trial);
            let better = at.log_likelihood >= current.log_likelihood
                || (at.log_likelihood >= current.log_likelihood - noise
                    && norm(&at.gradient) < norm(&current.gradient));
            if at.log_likelihood.is_finite() && better {
                u = trial;
                current = at;
                accepted = true;
                break;
            }
            scale *= 0.5;
            // Steps below the resolution of u change nothing: stop halving.
            if scale * norm(&step) <= 1e-15 * (1.0 + norm(&u)) {
                break;
            }
        }
        iterations += 1;
        if !accepted || norm(&step) * scale <= 1e-14 * (1.0 + norm(&u)) {
            break;
        }
    }
    Ok((u, iterations))
}

/// Fits the prior of family `F` to `table` by maximum marginal likelihood.
pub fn fit<F: Family>(table: &PairTable) -> Result<Fit, FitFailure> {
    fit_by::<F>(table, Likelihood::Marginal)
}

/// Fits the prior of family `F` to `table` by maximising `likelihood`.
/// Under [`Likelihood::Restricted`] the reported log marginal likelihood is
/// still the marginal one at the estimate; the restricted one is beside it,
/// and the test against complete pooling compares restricted likelihoods.
pub fn fit_by<F: Family>(table: &PairTable, likelihood: Likelihood) -> Result<Fit, FitFailure> {
    F::check_identifiable(table).map_err(FitFailure::Unidentifiable)?;
    let restricted_boundary = match likelihood {
        Likelihood::Marginal => None,
        Likelihood::Restricted => Some(F::restricted_boundary(table).unwrap_or((0.0, 0.0))),
    };
    let groups = table.groups();
    let pooled_mean = F::pooled_mean(table);
    let z = F::overdispersion_z(table, pooled_mean);
    let overdispersion = OverdispersionTest {
        statistic: z,
        p_value: 0.5 * crate::core::incomplete::erfc(z / std::f64::consts::SQRT_2),
    };
    let boundary_ll = pooled_log_likelihood::<F>(table, pooled_mean);
    let (restricted_ll, restricted_score) = restricted_boundary.unwrap_or((0.0, 0.0));
    let boundary_criterion = boundary_ll + restricted_ll;
    let boundary_score: f64 =
        table.pairs().iter().map(|p| p.weight * F::boundary_score_term(pooled_mean, p)).sum::<f64>()
            + restricted_score;
    let unit = F::strength_unit(table);

    // Method-of-moments start; with no overdispersion in the moments, start
    // where the strength equals that of a typical group, to look for an
    // interior maximum the moments missed.
    let moment = F::moment_strength(table, pooled_mean);
    let start_strength = moment.unwrap_or_else(|| F::typical_strength(table)).clamp(1e-3 * unit, 1e10 * unit);
    let start = F::working(pooled_mean, start_strength);
    let criterion = Criterion::<F>::new(table, likelihood);
    let start_ll = criterion.marginal(start).log_likelihood;

    let boundary_fit = |iterations: u64| Fit {
        prior: Prior::CompletePooling { mean: pooled_mean },
        mean: pooled_mean,
        strength: None,
        natural_se: None,
        mean_se: F::pooled_mean_se(table, pooled_mean),
        strength_se: None,
        log_marginal_likelihood: boundary_ll,
        start_log_likelihood: if moment.is_some() { start_ll } else { boundary_ll },
        converged: true,
        iterations,
        gradient_norm: 0.0,
        boundary: Boundary::NoOverdispersion,
        boundary_score: Some(boundary_score / groups),
        overdispersion,
        restricted_log_likelihood: restricted_boundary.map(|_| boundary_criterion),
        pooling: PoolingTest::new(boundary_criterion, boundary_criterion),
        uncertainty: PriorUncertainty::PooledMean(F::pooled_mean_se(table, pooled_mean).powi(2)),
    };

    let (u, iterations) = match maximise(&criterion, start) {
        Ok(found) => found,
        Err(_) if boundary_score <= 0.0 => return Ok(boundary_fit(0)),
        Err(_) => return Err(FitFailure::NotConverged { iterations: 0, gradient_norm: f64::NAN }),
    };
    let at = criterion.at(u);
    let marginal_ll = criterion.marginal(u).log_likelihood;
    let gradient_norm = norm(&at.gradient) / groups;
    let (mean, strength) = F::mean_strength(u);
    let relative = strength / unit;
    let interior_ok = gradient_norm < 1e-7 && information_is_definite(at.hessian) && relative <= MAX_STRENGTH;
    if relative < MIN_STRENGTH {
        return Err(FitFailure::NoPooling);
    }
    match judge(interior_ok, at.log_likelihood > boundary_criterion, boundary_score, relative) {
        Ending::Interior => {}
        Ending::Boundary => return Ok(boundary_fit(iterations)),
        Ending::Failed => return Err(FitFailure::NotConverged { iterations, gradient_norm }),
    }

    // Observed information → covariance in working coordinates, then the delta method.
    let cov_u = inverse([[-at.hessian[0][0], -at.hessian[0][1]], [-at.hessian[1][0], -at.hessian[1][1]]])
        .ok_or(FitFailure::NotConverged { iterations, gradient_norm })?;
    let delta_se = |j: [[f64; 2]; 2], row: usize| {
        let v: f64 = (0..2)
            .flat_map(|p| (0..2).map(move |q| (p, q)))
            .map(|(p, q)| j[row][p] * cov_u[p][q] * j[row][q])
            .sum();
        v.max(0.0).sqrt()
    };
    let nj = F::natural_jacobian(u);
    let mj = F::mean_strength_jacobian(u);
    let natural = F::natural(u);
    Ok(Fit {
        prior: Prior::Conjugate { natural: [natural[0], natural[1]] },
        mean,
        strength: Some(strength),
        natural_se: Some([delta_se(nj, 0), delta_se(nj, 1)]),
        mean_se: delta_se(mj, 0),
        strength_se: Some(delta_se(mj, 1)),
        log_marginal_likelihood: marginal_ll,
        start_log_likelihood: start_ll,
        converged: true,
        iterations,
        gradient_norm,
        boundary: Boundary::None,
        boundary_score: None,
        overdispersion,
        restricted_log_likelihood: restricted_boundary.map(|_| at.log_likelihood),
        pooling: PoolingTest::new(at.log_likelihood, boundary_criterion),
        uncertainty: PriorUncertainty::Working(cov_u),
    })
}

#[cfg(test)]
mod judging {
    use super::*;

    #[test]
    fn a_failed_search_with_a_positive_boundary_score_is_a_failure_not_the_boundary() {
        assert_eq!(judge(true, true, 3.0, 10.0), Ending::Interior);
        assert_eq!(judge(false, false, -1.0, 10.0), Ending::Boundary);
        assert_eq!(judge(true, false, 0.0, 10.0), Ending::Boundary);
        // The score says an interior point beats the boundary, and the search did not find one.
        assert_eq!(judge(false, true, 2.0, 10.0), Ending::Failed);
        assert_eq!(judge(true, false, 2.0, 10.0), Ending::Failed);
        // Unless the search went beyond the strengths told apart from the boundary.
        assert_eq!(judge(false, false, 2.0, 2.0 * MAX_STRENGTH), Ending::Boundary);
    }

    #[test]
    fn the_pooling_test_halves_the_chi_square_tail_and_is_one_at_zero() {
        // Source: the chi-square(1) tail at 3.841459 is 0.05 (common practice: the 95% point).
        let test = PoolingTest::new(10.0 + 3.841458820694124 / 2.0, 10.0);
        assert!((test.p_value - 0.025).abs() < 1e-12, "{}", test.p_value);
        assert_eq!(PoolingTest::new(5.0, 5.0).p_value, 1.0);
        assert_eq!(PoolingTest::new(5.0, 5.0 + 1e-12).statistic, 0.0);
    }
}
