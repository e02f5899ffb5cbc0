//! Priors whose centre follows covariates: the covariate variant every
//! family has, fitted by marginal maximum likelihood.
//!
//! Every family's first working coordinate is the link of its prior mean
//! (logit for a proportion, log for an event rate, the identity for a mean
//! of estimates) and its second the common parameter (ln strength for the
//! beta-binomial and normal models, ln shape for the gamma-Poisson one). A
//! covariate prior sets the first to a linear predictor, u₁ = xᵢᵀb, per
//! *cell* (the groups that share one covariate pattern), and keeps the
//! second common to all groups. The log likelihood is then the family's own
//! per-pair terms at (xᵢᵀb, u₂), and its derivatives follow by the chain
//! rule: ∂ℓ/∂b = Σ ∂ℓ/∂u₁ xᵢ, ∂²ℓ/∂b∂bᵀ = Σ ∂²ℓ/∂u₁² xᵢxᵢᵀ. So a family
//! needs nothing new for covariates except, for REML, the precision of a
//! group's mean ([`Family::mean_precision`]).
//!
//! The fit is Newton's method on (a, u₂), where a are the coefficients of
//! the covariates centred and scaled (so the steps are well conditioned
//! whatever the covariates' units), with step halving and a ridge where the
//! Hessian is not negative definite; it converges when the Newton step is
//! below 1e-10 in every coordinate at a negative definite Hessian. The
//! coefficients and their covariance are mapped back to the covariates'
//! own units at the end.
//!
//! Results that are not interior maxima are reported, not forced: a common
//! parameter past 1e10 of the family's strength unit is "no overdispersion
//! beyond the covariates" (the coefficients are then those of the plain
//! binomial, Poisson or weighted least-squares regression, found with the
//! common parameter held there); a linear predictor past ±35 on the logit
//! or log scale means a coefficient runs to infinity (separation).

use crate::core::dense::{cholesky, cholesky_solve};
use crate::core::fit::Likelihood;
use crate::core::model::{Family, Prior, PriorUncertainty, RateRange};
use crate::core::pairs::WeightedPair;
use rayon::prelude::*;

/// Cells per parallel work unit: fixed, so floating-point sums are grouped
/// the same way whatever the number of threads.
const CHUNK: usize = 1024;
/// Newton iterations before giving up.
const MAX_ITERATIONS: usize = 200;
/// A common parameter this far above ln(strength unit) is no overdispersion.
const LN_MAX_STRENGTH: f64 = 23.025850929940457; // ln 1e10
/// A common parameter this far below ln(strength unit) is no pooling.
const LN_MIN_STRENGTH: f64 = -18.420680743952367; // ln 1e-8
/// A linear predictor beyond this on a logit or log scale is a mean within
/// 6e-16 of its edge: a coefficient running to infinity.
const SEPARATED_PREDICTOR: f64 = 35.0;

/// One column of a design.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum DesignColumn {
    /// The intercept: 1 in every row.
    Intercept,
    /// The j-th numeric covariate.
    Number(usize),
    /// 1 where the j-th level covariate holds level `code`, else 0.
    Indicator {
        /// The level covariate.
        column: usize,
        /// The level (0 is the reference, which has no indicator).
        code: u32,
    },
}

/// The covariates of every row (one row per distinct pair), held compactly:
/// the numeric covariates as numbers and the level covariates as codes,
/// the design's columns (the intercept first) formed from them as needed.
#[derive(Debug, Clone, PartialEq)]
pub struct Design {
    names: Vec<String>,
    columns: Vec<DesignColumn>,
    rows: usize,
    numbers: Vec<f64>,
    number_width: usize,
    codes: Vec<u32>,
    code_width: usize,
}

/// Why a design cannot be fitted; each names its columns by their place in
/// [`Design::names`].
#[derive(Debug, Clone, PartialEq)]
pub enum DesignFault {
    /// The column takes one value over every group.
    Constant(usize),
    /// The column is a linear combination of the others listed.
    Collinear {
        /// The column found to depend on earlier ones.
        column: usize,
        /// The earlier covariates it is a linear function of (the columns
        /// are centred, so the intercept is never among them).
        of: Vec<usize>,
    },
}

impl Design {
    /// A design of `rows` rows: its column names and kinds (the intercept
    /// first), `number_width` numbers and `code_width` level codes per row.
    pub fn new(
        (names, columns): (Vec<String>, Vec<DesignColumn>),
        rows: usize,
        (numbers, number_width): (Vec<f64>, usize),
        (codes, code_width): (Vec<u32>, usize),
    ) -> Self {
        assert!(names.len() == columns.len() && columns.first() == Some(&DesignColumn::Intercept));
        assert!(numbers.len() == rows * number_width && codes.len() == rows * code_width);
        Design { names, columns, rows, numbers, number_width, codes, code_width }
    }

    /// A design of numeric columns given row by row, the intercept's column
    /// of ones first.
    pub fn dense(names: Vec<String>, values: Vec<f64>) -> Self {
        let p = names.len();
        assert!(p > 0 && values.len() % p == 0, "whole rows of every column");
        let rows = values.len() / p;
        let numbers: Vec<f64> = values.chunks(p).flat_map(|row| row[1..].iter().copied()).collect();
        let columns =
            std::iter::once(DesignColumn::Intercept).chain((0..p - 1).map(DesignColumn::Number)).collect();
        Design::new((names, columns), rows, (numbers, p - 1), (Vec::new(), 0))
    }

    /// The column names, the intercept's first.
    pub fn names(&self) -> &[String] {
        &self.names
    }

    /// Columns, the intercept counted.
    pub fn width(&self) -> usize {
        self.names.len()
    }

    /// Rows.
    pub fn rows(&self) -> usize {
        self.rows
    }

    /// Row i's value of column k.
    fn value(&self, i: usize, k: usize) -> f64 {
        match self.columns[k] {
            DesignColumn::Intercept => 1.0,
            DesignColumn::Number(j) => self.numbers[i * self.number_width + j],
            DesignColumn::Indicator { column, code } => {
                f64::from(u8::from(self.codes[i * self.code_width + column] == code))
            }
        }
    }

    /// Row i, written into `out` (one value per column).
    pub fn row_into(&self, i: usize, out: &mut [f64]) {
        for (k, x) in out.iter_mut().enumerate() {
            *x = self.value(i, k);
        }
    }

    /// The linear predictor xᵢᵀb of row `i`.
    pub fn predictor(&self, i: usize, coefficients: &[f64]) -> f64 {
        coefficients.iter().enumerate().map(|(k, b)| b * self.value(i, k)).sum()
    }

    /// Each column's mean and standard deviation over the groups
    /// (`groups[i]` in row i), the intercept's (0, 1).
    fn moments(&self, groups: &[f64]) -> Vec<(f64, f64)> {
        let total: f64 = groups.iter().sum();
        (0..self.width())
            .map(|k| {
                if k == 0 {
                    return (0.0, 1.0);
                }
                let mean = groups.iter().enumerate().map(|(i, g)| g * self.value(i, k)).sum::<f64>() / total;
                let variance = groups
                    .iter()
                    .enumerate()
                    .map(|(i, g)| g * (self.value(i, k) - mean).powi(2))
                    .sum::<f64>()
                    / total;
                (mean, variance.sqrt())
            })
            .collect()
    }

    /// Refuses a constant column or a collinear set, by a Cholesky factor
    /// of the correlation matrix of the centred and scaled columns (weighted
    /// by groups): a column whose part not explained by the earlier ones is
    /// below 1e-9 of its variance depends on them.
    pub fn check(&self, groups: &[f64]) -> Result<(), DesignFault> {
        let moments = self.moments(groups);
        for (k, &(mean, sd)) in moments.iter().enumerate().skip(1) {
            if sd.is_nan() || sd <= 1e-12 * mean.abs().max(1e-300) {
                return Err(DesignFault::Constant(k));
            }
        }
        let scaled = Scaled::new(&moments);
        let p = self.width();
        let mut cross = vec![0.0; p * p];
        let mut z = vec![0.0; p];
        for (i, weight) in groups.iter().enumerate() {
            scaled.row_into(self, i, &mut z);
            for a in 0..p {
                for b in 0..p {
                    cross[a * p + b] += weight * z[a] * z[b];
                }
            }
        }
        for k in 1..p {
            // The regression of column k on the columns before it.
            let lead: Vec<f64> =
                (0..k).flat_map(|a| (0..k).map(move |b| (a, b))).map(|(a, b)| cross[a * p + b]).collect();
            let right: Vec<f64> = (0..k).map(|a| cross[a * p + k]).collect();
            let Some(factor) = cholesky(&lead, k) else { continue };
            let beta = cholesky_solve(&factor, k, &right);
            let explained: f64 = beta.iter().zip(&right).map(|(b, r)| b * r).sum();
            let residual = cross[k * p + k] - explained;
            if residual <= 1e-9 * cross[k * p + k] {
                let largest = beta.iter().fold(0.0f64, |m, b| m.max(b.abs()));
                let of = (0..k).filter(|&a| beta[a].abs() > 1e-6 * largest).collect();
                return Err(DesignFault::Collinear { column: k, of });
            }
        }
        Ok(())
    }
}

/// The centred and scaled covariates the fit works in: zₖ = (xₖ − cₖ)/sₖ.
struct Scaled {
    centre: Vec<f64>,
    scale: Vec<f64>,
}

impl Scaled {
    fn new(moments: &[(f64, f64)]) -> Self {
        Scaled {
            centre: moments.iter().map(|m| m.0).collect(),
            scale: moments.iter().map(|m| if m.1 > 0.0 { m.1 } else { 1.0 }).collect(),
        }
    }

    /// Row i's scaled covariates (the intercept 1), written into `out`.
    fn row_into(&self, design: &Design, i: usize, out: &mut [f64]) {
        design.row_into(i, out);
        for ((x, centre), scale) in out.iter_mut().zip(&self.centre).zip(&self.scale).skip(1) {
            *x = (*x - centre) / scale;
        }
    }

    /// The coefficients b in the covariates' own units of the scaled ones a,
    /// and the Jacobian ∂b/∂a (row-major, p × p).
    fn unscale(&self, a: &[f64]) -> (Vec<f64>, Vec<f64>) {
        let p = a.len();
        let mut b = vec![0.0; p];
        let mut jacobian = vec![0.0; p * p];
        b[0] = a[0];
        jacobian[0] = 1.0;
        for k in 1..p {
            b[k] = a[k] / self.scale[k];
            b[0] -= a[k] * self.centre[k] / self.scale[k];
            jacobian[k * p + k] = 1.0 / self.scale[k];
            jacobian[k] = -self.centre[k] / self.scale[k];
        }
        (b, jacobian)
    }
}

/// Which edge the fit ended on.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum RegressionBoundary {
    /// An interior maximum.
    None,
    /// No overdispersion beyond the covariates: the common parameter is
    /// held at its largest value (complete pooling to each group's centre).
    NoOverdispersion,
}

/// A family's prior at a linear predictor, given the common parameter and
/// the fit's boundary.
#[derive(Debug, Clone, Copy)]
struct PriorMaker {
    common: f64,
    boundary: RegressionBoundary,
    natural: fn([f64; 2]) -> [f64; 2],
    mean_strength: fn([f64; 2]) -> (f64, f64),
}

impl PriorMaker {
    fn prior(&self, eta: f64) -> Prior {
        match self.boundary {
            RegressionBoundary::None => Prior::Conjugate { natural: (self.natural)([eta, self.common]) },
            RegressionBoundary::NoOverdispersion => Prior::CompletePooling { mean: self.centre(eta) },
        }
    }

    fn centre(&self, eta: f64) -> f64 {
        (self.mean_strength)([eta, self.common]).0
    }
}

/// Every row's prior under a covariate fit, held as its linear predictor
/// alone (8 bytes a row, where the prior and its centre would take 32):
/// each is made again when asked, with the bits of
/// [`RegressionFit::prior_of`] and [`RegressionFit::centre_of`].
#[derive(Debug)]
pub struct PredictedPriors {
    predictors: Vec<f64>,
    maker: PriorMaker,
}

impl PredictedPriors {
    /// Rows.
    pub fn len(&self) -> usize {
        self.predictors.len()
    }

    /// Whether there are no rows.
    pub fn is_empty(&self) -> bool {
        self.predictors.is_empty()
    }

    /// Row i's prior.
    pub fn prior(&self, i: usize) -> Prior {
        self.maker.prior(self.predictors[i])
    }

    /// Row i's prior mean (the centre its groups are pulled toward).
    pub fn centre(&self, i: usize) -> f64 {
        self.maker.centre(self.predictors[i])
    }
}

/// A fitted covariate prior.
#[derive(Debug, Clone, PartialEq)]
pub struct RegressionFit {
    /// The coefficients b in the covariates' own units, the intercept first.
    pub coefficients: Vec<f64>,
    /// The common working parameter u₂.
    pub common: f64,
    /// The covariance of (b, u₂), row-major, (p + 1)²: the inverse observed
    /// information (of b alone at the boundary, u₂'s row and column 0).
    pub covariance: Vec<f64>,
    /// The maximised log marginal (or restricted) likelihood.
    pub log_likelihood: f64,
    /// The log marginal likelihood at the result (the same as
    /// `log_likelihood` unless the fit maximised the restricted one).
    pub marginal_log_likelihood: f64,
    /// The norm of the gradient at the result, per group.
    pub gradient_norm: f64,
    /// Newton iterations.
    pub iterations: usize,
    /// Interior, or no overdispersion beyond the covariates.
    pub boundary: RegressionBoundary,
}

/// Why a covariate prior could not be fitted.
#[derive(Debug, Clone, PartialEq)]
pub enum RegressionFailure {
    /// A coefficient runs to ±infinity: some groups' centre is driven to
    /// the edge of the rate's range (all their counts zero, say).
    Separation {
        /// The coefficient's place among the design's columns.
        coefficient: usize,
        /// Its sign as it runs away.
        towards_positive: bool,
    },
    /// The common parameter runs to zero strength: no pooling at all.
    NoPooling,
    /// Newton's method stopped without meeting its tests.
    NotConverged,
}

/// The log likelihood with its gradient and Hessian in (a, u₂).
struct Evaluated {
    log_likelihood: f64,
    gradient: Vec<f64>,
    hessian: Vec<f64>,
    /// The linear predictor of largest magnitude (for [`separation`]).
    extreme_predictor: f64,
}

impl Evaluated {
    fn zero(n: usize) -> Self {
        Evaluated {
            log_likelihood: 0.0,
            gradient: vec![0.0; n],
            hessian: vec![0.0; n * n],
            extreme_predictor: 0.0,
        }
    }

    /// Notes a linear predictor met.
    fn meet_predictor(&mut self, eta: f64) {
        if eta.abs() > self.extreme_predictor.abs() {
            self.extreme_predictor = eta;
        }
    }
}

/// The setting of one fit.
struct Problem<'a> {
    design: &'a Design,
    scaled: Scaled,
    /// Row i's pair.
    pairs: &'a [WeightedPair],
    likelihood: Likelihood,
}

impl Problem<'_> {
    fn width(&self) -> usize {
        self.design.width()
    }

    /// ℓ and its derivatives at θ = (a, u₂).
    fn evaluate<F: Family>(&self, theta: &[f64]) -> Evaluated {
        let p = self.width();
        let n = p + 1;
        let u2 = theta[p];
        let restricted = self.likelihood == Likelihood::Restricted;
        let rows = self.design.rows();
        // What the common parameter alone decides, once for every pair.
        let common = F::at_point([0.0, u2]);
        let parts: Vec<(Evaluated, Vec<f64>)> = (0..rows.div_ceil(CHUNK))
            .into_par_iter()
            .map(|chunk| {
                let mut e = Evaluated::zero(n);
                // Σ W zzᵀ and its first two derivatives in u₂, for REML.
                let mut precision = if restricted { vec![0.0; 3 * p * p] } else { Vec::new() };
                let mut z = vec![0.0; p];
                for i in chunk * CHUNK..((chunk + 1) * CHUNK).min(rows) {
                    self.scaled.row_into(self.design, i, &mut z);
                    let eta: f64 = z.iter().zip(&theta[..p]).map(|(z, a)| z * a).sum();
                    e.meet_predictor(eta);
                    let pair = &self.pairs[i];
                    let t = F::pair_terms_at(&F::at_mean(&common, [eta, u2]), pair);
                    let c = pair.weight;
                    let (g1, h11, h12) = (c * t.gradient[0], c * t.hessian[0][0], c * t.hessian[0][1]);
                    e.log_likelihood += c * t.log_likelihood;
                    for a in 0..p {
                        e.gradient[a] += g1 * z[a];
                        for b in 0..=a {
                            e.hessian[a * n + b] += h11 * z[a] * z[b];
                        }
                        e.hessian[p * n + a] += h12 * z[a];
                    }
                    e.gradient[p] += c * t.gradient[1];
                    e.hessian[p * n + p] += c * t.hessian[1][1];
                    if let Some(w) = restricted.then(|| F::mean_precision([eta, u2], pair)).flatten() {
                        for (d, wd) in w.iter().enumerate() {
                            for a in 0..p {
                                for b in 0..p {
                                    precision[d * p * p + a * p + b] += c * wd * z[a] * z[b];
                                }
                            }
                        }
                    }
                }
                // The upper triangle from the lower one.
                for a in 0..n {
                    for b in a + 1..n {
                        e.hessian[a * n + b] = e.hessian[b * n + a];
                    }
                }
                (e, precision)
            })
            .collect();
        let mut total = Evaluated::zero(n);
        let mut precision = if restricted { vec![0.0; 3 * p * p] } else { Vec::new() };
        for (part, m) in parts {
            total.log_likelihood += part.log_likelihood;
            total.meet_predictor(part.extreme_predictor);
            add_into(&mut total.gradient, &part.gradient);
            add_into(&mut total.hessian, &part.hessian);
            add_into(&mut precision, &m);
        }
        if restricted {
            let (r, d, dd) = restricted_term(&precision, p);
            total.log_likelihood += r;
            total.gradient[p] += d;
            total.hessian[p * n + p] += dd;
        }
        total
    }
}

/// The restricted likelihood's term −½ ln det M + (p/2) ln 2π, M = Σ W zzᵀ
/// (Harville, JASA 1977), and its first two derivatives in u₂, from M, M′
/// and M″ laid one after the other: R′ = −½ tr(M⁻¹M′) and
/// R″ = −½ [tr(M⁻¹M″) − tr(M⁻¹M′M⁻¹M′)]. (The scaling of z shifts R by a
/// constant, which is added back by the caller's unscaled determinant.)
fn restricted_term(sums: &[f64], p: usize) -> (f64, f64, f64) {
    let (m, m1, m2) = (&sums[..p * p], &sums[p * p..2 * p * p], &sums[2 * p * p..]);
    let Some(factor) = cholesky(m, p) else { return (f64::NEG_INFINITY, 0.0, 0.0) };
    let ln_det: f64 = (0..p).map(|i| 2.0 * factor[i * p + i].ln()).sum();
    let solve_columns = |b: &[f64]| -> Vec<f64> {
        // M⁻¹B, column by column.
        let mut out = vec![0.0; p * p];
        for c in 0..p {
            let column: Vec<f64> = (0..p).map(|r| b[r * p + c]).collect();
            let x = cholesky_solve(&factor, p, &column);
            for r in 0..p {
                out[r * p + c] = x[r];
            }
        }
        out
    };
    let (a1, a2) = (solve_columns(m1), solve_columns(m2));
    let trace = |x: &[f64]| (0..p).map(|i| x[i * p + i]).sum::<f64>();
    let trace_of_square: f64 =
        (0..p).flat_map(|i| (0..p).map(move |j| (i, j))).map(|(i, j)| a1[i * p + j] * a1[j * p + i]).sum();
    let r = -0.5 * ln_det + 0.5 * p as f64 * (2.0 * std::f64::consts::PI).ln();
    (r, -0.5 * trace(&a1), -0.5 * (trace(&a2) - trace_of_square))
}

fn add_into(total: &mut [f64], part: &[f64]) {
    for (t, x) in total.iter_mut().zip(part) {
        *t += x;
    }
}

/// The inverse of L Lᵀ.
fn cholesky_inverse(l: &[f64], n: usize) -> Vec<f64> {
    let mut inverse = vec![0.0; n * n];
    for c in 0..n {
        let unit: Vec<f64> = (0..n).map(|r| f64::from(u8::from(r == c))).collect();
        let x = cholesky_solve(l, n, &unit);
        for r in 0..n {
            inverse[r * n + c] = x[r];
        }
    }
    inverse
}

/// Fits the covariate prior of family `F` to `pairs` (row i of `design`
/// the covariates of pair i), from the common parameter `start_common` and
/// the intercept `start_intercept` of the fit without covariates;
/// `strength_unit` is the family's [`Family::strength_unit`] of the whole table.
pub fn fit_regression<F: Family>(
    design: &Design,
    pairs: &[WeightedPair],
    likelihood: Likelihood,
    (start_intercept, start_common): (f64, f64),
    strength_unit: f64,
) -> Result<RegressionFit, RegressionFailure> {
    assert_eq!(design.rows(), pairs.len(), "one design row per pair");
    let groups: Vec<f64> = pairs.iter().map(|p| p.weight).collect();
    let moments = design.moments(&groups);
    let problem = Problem { design, scaled: Scaled::new(&moments), pairs, likelihood };
    let p = design.width();
    let n = p + 1;
    let ln_unit = strength_unit.ln();
    let most = ln_unit + LN_MAX_STRENGTH;
    let mut theta = vec![0.0; n];
    theta[0] = start_intercept;
    theta[p] = start_common.min(most);
    let mut held = false;
    let mut iterations = 0;
    let mut current = problem.evaluate::<F>(&theta);
    let mut converged = false;
    while iterations < MAX_ITERATIONS {
        iterations += 1;
        let free = if held { p } else { n };
        let (step, definite) = newton_step(&current, n, free);
        let mut scale = 1.0;
        let mut accepted = None;
        for _ in 0..60 {
            let trial: Vec<f64> = theta.iter().zip(&step).map(|(t, s)| t + scale * s).collect();
            let evaluated = problem.evaluate::<F>(&trial);
            if evaluated.log_likelihood.is_finite()
                && evaluated.log_likelihood >= current.log_likelihood - 1e-12 * current.log_likelihood.abs()
            {
                accepted = Some((trial, evaluated));
                break;
            }
            scale *= 0.5;
        }
        let Some((trial, evaluated)) = accepted else { break };
        let largest_step = step.iter().fold(0.0f64, |m, s| m.max((scale * s).abs()));
        theta = trial;
        current = evaluated;
        if !held && theta[p] > most {
            // No overdispersion beyond the covariates: hold the common parameter there.
            held = true;
            theta[p] = most;
            current = problem.evaluate::<F>(&theta);
            continue;
        }
        if theta[p] < ln_unit + LN_MIN_STRENGTH {
            return Err(RegressionFailure::NoPooling);
        }
        if let Some(failure) = separation::<F>(&current, &theta[..p]) {
            return Err(failure);
        }
        if definite && largest_step < 1e-10 * (1.0 + theta.iter().fold(0.0f64, |m, t| m.max(t.abs()))) {
            converged = true;
            break;
        }
    }
    if !converged {
        return Err(separation::<F>(&current, &theta[..p]).unwrap_or(RegressionFailure::NotConverged));
    }
    let free = if held { p } else { n };
    let information: Vec<f64> = (0..free)
        .flat_map(|a| (0..free).map(move |b| (a, b)))
        .map(|(a, b)| -current.hessian[a * n + b])
        .collect();
    let factor = cholesky(&information, free).ok_or(RegressionFailure::NotConverged)?;
    let inverse = cholesky_inverse(&factor, free);
    // Back to the covariates' units: b = J a, u₂ unchanged.
    let (coefficients, jacobian) = problem.scaled.unscale(&theta[..p]);
    let mut full = vec![0.0; n * n];
    for a in 0..free {
        for b in 0..free {
            full[a * n + b] = inverse[a * free + b];
        }
    }
    let mut map = vec![0.0; n * n];
    for a in 0..p {
        for b in 0..p {
            map[a * n + b] = jacobian[a * p + b];
        }
    }
    map[p * n + p] = 1.0;
    let covariance = sandwich(&map, &full, n);
    let mut log_likelihood = current.log_likelihood;
    if likelihood == Likelihood::Restricted {
        // −½ ln det M in the covariates' own units: M = J⁻ᵀ M_z J⁻¹, so add ln |det J|.
        log_likelihood -= (1..p).map(|k| problem.scaled.scale[k].ln()).sum::<f64>();
    }
    let marginal_log_likelihood = match likelihood {
        Likelihood::Restricted => {
            let marginal = Problem { likelihood: Likelihood::Marginal, ..problem };
            marginal.evaluate::<F>(&theta).log_likelihood
        }
        Likelihood::Marginal => log_likelihood,
    };
    let gradient_norm =
        current.gradient[..free].iter().map(|g| g * g).sum::<f64>().sqrt() / groups.iter().sum::<f64>();
    Ok(RegressionFit {
        coefficients,
        common: theta[p],
        covariance,
        log_likelihood,
        marginal_log_likelihood,
        gradient_norm,
        iterations,
        boundary: if held { RegressionBoundary::NoOverdispersion } else { RegressionBoundary::None },
    })
}

/// M C Mᵀ for n × n matrices.
fn sandwich(m: &[f64], c: &[f64], n: usize) -> Vec<f64> {
    let mut mc = vec![0.0; n * n];
    for i in 0..n {
        for j in 0..n {
            mc[i * n + j] = (0..n).map(|k| m[i * n + k] * c[k * n + j]).sum();
        }
    }
    let mut out = vec![0.0; n * n];
    for i in 0..n {
        for j in 0..n {
            out[i * n + j] = (0..n).map(|k| mc[i * n + k] * m[j * n + k]).sum();
        }
    }
    out
}

/// The Newton step in the first `free` coordinates (the rest held), with a
/// ridge where −H is not positive definite; and whether it was.
fn newton_step(at: &Evaluated, n: usize, free: usize) -> (Vec<f64>, bool) {
    let information: Vec<f64> =
        (0..free).flat_map(|a| (0..free).map(move |b| (a, b))).map(|(a, b)| -at.hessian[a * n + b]).collect();
    let gradient = &at.gradient[..free];
    let mut step = vec![0.0; n];
    if let Some(factor) = cholesky(&information, free) {
        step[..free].copy_from_slice(&cholesky_solve(&factor, free, gradient));
        return (step, true);
    }
    let largest = (0..free).map(|a| information[a * free + a].abs()).fold(1e-12f64, f64::max);
    let mut ridge = 1e-8 * largest;
    loop {
        let mut damped = information.clone();
        for a in 0..free {
            damped[a * free + a] += ridge;
        }
        if let Some(factor) = cholesky(&damped, free) {
            step[..free].copy_from_slice(&cholesky_solve(&factor, free, gradient));
            return (step, false);
        }
        ridge *= 10.0;
    }
}

/// A coefficient running away: some row's linear predictor (the largest,
/// met by the evaluation `at` the scaled coefficients `a`) past ±35 on a
/// bounded scale, blamed on the coefficient of largest |bₖ sₖ| (scaled).
fn separation<F: Family>(at: &Evaluated, a: &[f64]) -> Option<RegressionFailure> {
    if F::TERMS.rates == RateRange::Real || at.extreme_predictor.abs() <= SEPARATED_PREDICTOR {
        return None;
    }
    let p = a.len();
    let coefficient =
        if p == 1 { 0 } else { (1..p).max_by(|&x, &y| a[x].abs().total_cmp(&a[y].abs())).expect("p > 1") };
    Some(RegressionFailure::Separation { coefficient, towards_positive: a[coefficient] > 0.0 })
}

impl RegressionFit {
    /// A covariate prior read back from its figures (a saved summary): its
    /// coefficients and common parameter u₂ are known, their covariance not
    /// (NaN, so no corrected interval can be formed from it).
    pub fn of_figures(coefficients: Vec<f64>, common: f64, boundary: RegressionBoundary) -> Self {
        let n = coefficients.len() + 1;
        RegressionFit {
            coefficients,
            common,
            covariance: vec![f64::NAN; n * n],
            log_likelihood: f64::NAN,
            marginal_log_likelihood: f64::NAN,
            gradient_norm: f64::NAN,
            iterations: 0,
            boundary,
        }
    }

    /// Row i's linear predictor.
    pub fn predictor(&self, design: &Design, i: usize) -> f64 {
        design.predictor(i, &self.coefficients)
    }

    /// Row i's prior: conjugate at (xᵢᵀb, u₂), or at the boundary complete
    /// pooling at its centre.
    pub fn prior_of<F: Family>(&self, design: &Design, i: usize) -> Prior {
        self.prior_maker::<F>().prior(self.predictor(design, i))
    }

    /// Row i's prior mean (the centre its groups are pulled toward).
    pub fn centre_of<F: Family>(&self, design: &Design, i: usize) -> f64 {
        self.prior_maker::<F>().centre(self.predictor(design, i))
    }

    /// What makes a row's prior and centre from its linear predictor alone.
    fn prior_maker<F: Family>(&self) -> PriorMaker {
        PriorMaker {
            common: self.common,
            boundary: self.boundary,
            natural: F::natural,
            mean_strength: F::mean_strength,
        }
    }

    /// Every row's prior under this fit, held as its linear predictor alone.
    pub fn predicted_priors<F: Family>(&self, design: &Design) -> PredictedPriors {
        PredictedPriors {
            predictors: (0..design.rows()).map(|i| self.predictor(design, i)).collect(),
            maker: self.prior_maker::<F>(),
        }
    }

    /// What is known of row i's prior's uncertainty: the covariance of its
    /// working coordinates (xᵢᵀb, u₂), or at the boundary the variance of its centre.
    pub fn uncertainty_of<F: Family>(&self, design: &Design, i: usize) -> PriorUncertainty {
        let n = self.coefficients.len() + 1;
        let p = n - 1;
        let mut x = vec![0.0; p];
        design.row_into(i, &mut x);
        let c = |a: usize, b: usize| self.covariance[a * n + b];
        let eta_var: f64 =
            (0..p).flat_map(|a| (0..p).map(move |b| (a, b))).map(|(a, b)| x[a] * x[b] * c(a, b)).sum();
        let eta_common: f64 = (0..p).map(|a| x[a] * c(a, p)).sum();
        match self.boundary {
            RegressionBoundary::None => {
                PriorUncertainty::Working([[eta_var, eta_common], [eta_common, c(p, p)]])
            }
            RegressionBoundary::NoOverdispersion => {
                let slope = F::mean_strength_jacobian([self.predictor(design, i), self.common])[0][0];
                PriorUncertainty::PooledMean(slope * slope * eta_var)
            }
        }
    }

    /// The standard error of coefficient k.
    pub fn coefficient_se(&self, k: usize) -> f64 {
        let n = self.coefficients.len() + 1;
        self.covariance[k * n + k].sqrt()
    }

    /// The standard error of the common working parameter u₂ (0 when held at the boundary).
    pub fn common_se(&self) -> f64 {
        let n = self.coefficients.len() + 1;
        self.covariance[(n - 1) * n + n - 1].sqrt()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::core::fit::{fit_by, Boundary};
    use crate::core::model::beta_binomial::BetaBinomial;
    use crate::core::model::gamma_poisson::GammaPoisson;
    use crate::core::model::normal_normal::NormalNormal;
    use crate::core::pairs::PairTable;

    fn pair(size: f64, count: f64) -> WeightedPair {
        WeightedPair { size, count, weight: 1.0 }
    }

    /// Six pairs with a numeric covariate and a two-level indicator (as a level code).
    fn rows() -> (Design, Vec<WeightedPair>) {
        let names = vec!["intercept".into(), "tenure".into(), "kind=b".into()];
        let columns = vec![
            DesignColumn::Intercept,
            DesignColumn::Number(0),
            DesignColumn::Indicator { column: 0, code: 1 },
        ];
        let numbers = vec![0.5, 0.5, 2.0, 2.0, 3.5, 3.5];
        let codes = vec![0, 0, 1, 1, 0, 0];
        let design = Design::new((names, columns), 6, (numbers, 1), (codes, 1));
        let pairs = vec![
            pair(10.0, 3.0),
            pair(4.0, 0.0),
            pair(20.0, 9.0),
            pair(7.0, 5.0),
            pair(12.0, 2.0),
            pair(3.0, 1.0),
        ];
        (design, pairs)
    }

    fn assert_derivatives<F: Family>(likelihood: Likelihood, theta: &[f64]) {
        let (design, pairs) = rows();
        let groups: Vec<f64> = pairs.iter().map(|p| p.weight).collect();
        let problem = Problem {
            scaled: Scaled::new(&design.moments(&groups)),
            design: &design,
            pairs: &pairs,
            likelihood,
        };
        let n = theta.len();
        let at = problem.evaluate::<F>(theta);
        let h = 1e-5;
        for i in 0..n {
            let (mut up, mut down) = (theta.to_vec(), theta.to_vec());
            up[i] += h;
            down[i] -= h;
            let (eu, ed) = (problem.evaluate::<F>(&up), problem.evaluate::<F>(&down));
            let g = (eu.log_likelihood - ed.log_likelihood) / (2.0 * h);
            assert!(
                (at.gradient[i] - g).abs() < 1e-6 * (1.0 + g.abs()),
                "gradient {i}: {} against {g}",
                at.gradient[i]
            );
            for j in 0..n {
                let hij = (eu.gradient[j] - ed.gradient[j]) / (2.0 * h);
                let got = at.hessian[j * n + i];
                assert!((got - hij).abs() < 1e-5 * (1.0 + hij.abs()), "hessian {j}{i}: {got} against {hij}");
            }
        }
    }

    #[test]
    fn gradients_and_hessians_match_central_differences() {
        assert_derivatives::<BetaBinomial>(Likelihood::Marginal, &[-0.7, 0.3, -0.2, 1.5]);
        assert_derivatives::<GammaPoisson>(Likelihood::Marginal, &[-1.1, 0.2, 0.4, 0.8]);
        // Normal: the counts read as estimates, the sizes as their standard errors.
        assert_derivatives::<NormalNormal>(Likelihood::Marginal, &[3.0, 1.0, -0.5, -2.0]);
        assert_derivatives::<NormalNormal>(Likelihood::Restricted, &[3.0, 1.0, -0.5, -2.0]);
    }

    /// With the intercept alone, the covariate fit is the fit without
    /// covariates: the same maximum, the same standard errors.
    fn intercept_alone_is_the_plain_fit<F: Family>(pairs: &[WeightedPair], likelihood: Likelihood) {
        let table = PairTable::from_weighted(pairs.iter().copied());
        let plain = fit_by::<F>(&table, likelihood).expect("plain fit");
        assert_eq!(plain.boundary, Boundary::None);
        let (mean, strength) = (plain.mean, plain.strength.expect("interior"));
        let u = F::working(mean, strength);
        let design = Design::dense(vec!["intercept".into()], vec![1.0; table.pairs().len()]);
        let fitted = fit_regression::<F>(
            &design,
            table.pairs(),
            likelihood,
            (u[0] + 0.3, u[1] - 0.5),
            F::strength_unit(&table),
        )
        .expect("covariate fit");
        assert!(
            (fitted.coefficients[0] - u[0]).abs() < 1e-7 * (1.0 + u[0].abs()),
            "{} against {}",
            fitted.coefficients[0],
            u[0]
        );
        assert!(
            (fitted.common - u[1]).abs() < 1e-7 * (1.0 + u[1].abs()),
            "{} against {}",
            fitted.common,
            u[1]
        );
        let mut objective = plain.log_marginal_likelihood;
        if likelihood == Likelihood::Restricted {
            objective += F::restricted_term(&table, u).expect("a restricted form").log_likelihood;
        }
        let relative = (fitted.log_likelihood - objective).abs() / objective.abs();
        assert!(relative < 1e-12, "{} against {objective}", fitted.log_likelihood);
        let mean_se = fitted.coefficient_se(0) * F::mean_strength_jacobian(u)[0][0].abs();
        assert!(
            (mean_se - plain.mean_se).abs() < 1e-5 * plain.mean_se,
            "{mean_se} against {}",
            plain.mean_se
        );
    }

    #[test]
    fn predicted_priors_are_the_family_at_each_rows_predictor() {
        let (design, _) = rows();
        let coefficients = vec![-0.4, 0.3, -1.2];
        for boundary in [RegressionBoundary::None, RegressionBoundary::NoOverdispersion] {
            let fitted = RegressionFit::of_figures(coefficients.clone(), 1.7, boundary);
            let predicted = fitted.predicted_priors::<GammaPoisson>(&design);
            assert_eq!(predicted.len(), design.rows());
            for i in 0..design.rows() {
                // xᵢᵀb written out: the intercept, tenure, and kind=b for the rows of code 1.
                let kind_b = [0.0, 0.0, 1.0, 1.0, 0.0, 0.0][i];
                let tenure = [0.5, 0.5, 2.0, 2.0, 3.5, 3.5][i];
                let eta = -0.4 + 0.3 * tenure - 1.2 * kind_b;
                assert!((fitted.predictor(&design, i) - eta).abs() < 1e-15);
                let (mean, _) = GammaPoisson::mean_strength([eta, 1.7]);
                assert!((predicted.centre(i) - mean).abs() <= 1e-15 * mean);
                let expected = match boundary {
                    RegressionBoundary::None => {
                        Prior::Conjugate { natural: GammaPoisson::natural([eta, 1.7]) }
                    }
                    RegressionBoundary::NoOverdispersion => Prior::CompletePooling { mean },
                };
                match (predicted.prior(i), expected) {
                    (Prior::Conjugate { natural: a }, Prior::Conjugate { natural: b }) => {
                        assert!((0..2).all(|k| (a[k] - b[k]).abs() <= 1e-14 * b[k].abs()))
                    }
                    (Prior::CompletePooling { mean: a }, Prior::CompletePooling { mean: b }) => {
                        assert!((a - b).abs() <= 1e-15 * b)
                    }
                    (a, b) => panic!("{a:?} against {b:?}"),
                }
                // The same bits as the fit's own row-by-row forms.
                assert_eq!(predicted.prior(i), fitted.prior_of::<GammaPoisson>(&design, i));
                assert_eq!(
                    predicted.centre(i).to_bits(),
                    fitted.centre_of::<GammaPoisson>(&design, i).to_bits()
                );
            }
        }
    }

    #[test]
    fn the_intercept_alone_gives_the_fit_without_covariates() {
        let rates: Vec<WeightedPair> = (0..40)
            .map(|i| {
                let size = 5.0 + (i * 7 % 23) as f64;
                let count = ((i * 13 % 17) as f64 / 17.0 * size * 0.8).floor();
                pair(size, count)
            })
            .collect();
        intercept_alone_is_the_plain_fit::<BetaBinomial>(&rates, Likelihood::Marginal);
        intercept_alone_is_the_plain_fit::<GammaPoisson>(&rates, Likelihood::Marginal);
        let estimates: Vec<WeightedPair> = (0..30)
            .map(|i| pair(0.5 + (i % 7) as f64 * 0.4, 10.0 + ((i * 11 % 13) as f64 - 6.0) * 1.3))
            .collect();
        intercept_alone_is_the_plain_fit::<NormalNormal>(&estimates, Likelihood::Marginal);
        intercept_alone_is_the_plain_fit::<NormalNormal>(&estimates, Likelihood::Restricted);
    }

    #[test]
    fn a_constant_or_collinear_column_is_named() {
        let groups = [1.0, 2.0, 1.0];
        let constant =
            Design::dense(vec!["intercept".into(), "x".into()], vec![1.0, 4.0, 1.0, 4.0, 1.0, 4.0]);
        assert_eq!(constant.check(&groups), Err(DesignFault::Constant(1)));
        // z = 2x − 1: a linear function of x (the columns are centred, so
        // the intercept's part is implicit).
        let collinear = Design::dense(
            vec!["intercept".into(), "x".into(), "z".into()],
            vec![1.0, 1.0, 1.0, 1.0, 2.0, 3.0, 1.0, 5.0, 9.0],
        );
        assert_eq!(collinear.check(&groups), Err(DesignFault::Collinear { column: 2, of: vec![1] }));
        let fine = Design::dense(vec!["intercept".into(), "x".into()], vec![1.0, 1.0, 1.0, 2.0, 1.0, 5.0]);
        assert_eq!(fine.check(&groups), Ok(()));
    }

    #[test]
    fn a_level_with_no_events_is_separation() {
        // The second level's groups have no events at all: its coefficient runs to −∞.
        let design = Design::dense(
            vec!["intercept".into(), "kind=b".into()],
            vec![1.0, 0.0, 1.0, 0.0, 1.0, 0.0, 1.0, 1.0, 1.0, 1.0],
        );
        let pairs = vec![pair(10.0, 3.0), pair(8.0, 5.0), pair(12.0, 1.0), pair(9.0, 0.0), pair(20.0, 0.0)];
        let outcome = fit_regression::<GammaPoisson>(&design, &pairs, Likelihood::Marginal, (-1.0, 1.0), 1.0);
        assert_eq!(outcome, Err(RegressionFailure::Separation { coefficient: 1, towards_positive: false }));
    }
}
