//! The Dirichlet-multinomial model for groups rated on K levels (star
//! ratings): its table of distinct count vectors, its fit, and its
//! posteriors. Pure numerics.
//!
//! Group i has counts n_i = (n_i1, …, n_iK) over the levels, N_i in all;
//! its shares p_i ~ Dirichlet(a₁, …, a_K) and n_i | p_i ~ Multinomial(N_i,
//! p_i), so n_i is Dirichlet-multinomial and the posterior of p_i is
//! Dirichlet(a + n_i). With scores s_k for the levels, the group's mean
//! score Σ s_k p_ik is what is ranked and flagged ([`mean_score`] has its
//! law). Strength A = Σ a_k, pool weight A / (A + N_i).
//!
//! The fit maximises the marginal likelihood by Newton's method on ln a_k.
//! The likelihood depends on the groups only through K + 1 histograms: of
//! each level's counts and of the totals (lnΓ(a_k + n_k) − lnΓ(a_k) for each
//! level, lnΓ(A + N) − lnΓ(A) for the total), so an evaluation costs the
//! number of distinct counts per level, not of distinct vectors. "Every
//! group the same shares" is the boundary A = ∞; it is tested by the score
//! at φ = 1/A = 0 before any search, as the other models' boundaries are.

pub mod mean_score;
pub mod replicates;

use crate::core::dense::{cholesky, cholesky_solve};
use crate::core::fit::{OverdispersionTest, PoolingTest};
use crate::core::incomplete::{beta_tails, erfc};
use crate::core::quantile::Tail;
use crate::core::special::{digamma_diff, ln_gamma, ln_rising_excess, trigamma_diff};
use mean_score::MeanScoreLaw;
use std::collections::HashMap;

/// A strength beyond this is indistinguishable from every group having the same shares.
const MAX_STRENGTH: f64 = 1e12;
/// Newton steps at most.
const MAX_ITERATIONS: u64 = 500;
/// The largest change of one ln a_k in one step.
const MAX_STEP: f64 = 3.0;

/// Distinct count vectors, each with the number of groups that share it,
/// in ascending lexicographic order so every sum is the same whatever order
/// the groups arrived in.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct LevelTable {
    levels: usize,
    counts: Vec<f64>,
    weights: Vec<f64>,
}

impl LevelTable {
    /// The table of `vectors` (each `levels` whole counts ≥ 0) with their
    /// weights; equal vectors are merged and those of weight 0 dropped.
    pub fn new(levels: usize, vectors: impl IntoIterator<Item = (Vec<f64>, f64)>) -> Self {
        let mut rows: Vec<(Vec<f64>, f64)> = vectors.into_iter().collect();
        rows.sort_by(|x, y| x.0.partial_cmp(&y.0).expect("counts are finite"));
        let (mut counts, mut weights): (Vec<f64>, Vec<f64>) = (Vec::new(), Vec::new());
        for (vector, weight) in rows {
            debug_assert_eq!(vector.len(), levels);
            if !weights.is_empty() && counts[counts.len() - levels..] == vector[..] {
                *weights.last_mut().expect("a row") += weight;
            } else {
                counts.extend_from_slice(&vector);
                weights.push(weight);
            }
        }
        Self::of_distinct(levels, &counts, &weights).0
    }

    /// The table of distinct vectors stored flat (`counts` holds vector i
    /// at `i * levels ..`) with their weights, and for each the place it
    /// takes in the table (`u32::MAX` for a weight of 0, left out).
    pub fn of_distinct(levels: usize, counts: &[f64], weights: &[f64]) -> (Self, Vec<u32>) {
        let vector = |i: usize| &counts[i * levels..(i + 1) * levels];
        let mut order: Vec<u32> = (0..weights.len() as u32).filter(|&i| weights[i as usize] != 0.0).collect();
        order
            .sort_by(|&x, &y| vector(x as usize).partial_cmp(vector(y as usize)).expect("counts are finite"));
        let mut table = LevelTable {
            levels,
            counts: Vec::with_capacity(order.len() * levels),
            weights: Vec::with_capacity(order.len()),
        };
        let mut place = vec![u32::MAX; weights.len()];
        for (position, &i) in order.iter().enumerate() {
            table.counts.extend_from_slice(vector(i as usize));
            table.weights.push(weights[i as usize]);
            place[i as usize] = position as u32;
        }
        (table, place)
    }

    /// The number of levels.
    pub fn levels(&self) -> usize {
        self.levels
    }

    /// The number of distinct vectors.
    pub fn len(&self) -> usize {
        self.weights.len()
    }

    /// Whether the table has no vectors.
    pub fn is_empty(&self) -> bool {
        self.weights.is_empty()
    }

    /// The i-th vector.
    pub fn vector(&self, i: usize) -> &[f64] {
        &self.counts[i * self.levels..(i + 1) * self.levels]
    }

    /// The number of groups with the i-th vector.
    pub fn weight(&self, i: usize) -> f64 {
        self.weights[i]
    }

    /// The number of groups.
    pub fn groups(&self) -> f64 {
        self.weights.iter().sum()
    }

    /// Each level's count summed over the groups.
    pub fn level_totals(&self) -> Vec<f64> {
        let mut totals = vec![0.0; self.levels];
        for i in 0..self.len() {
            for (total, n) in totals.iter_mut().zip(self.vector(i)) {
                *total += self.weights[i] * n;
            }
        }
        totals
    }

    /// The index of `vector` in the table, if it is there.
    pub fn position(&self, vector: &[f64]) -> Option<usize> {
        let (mut low, mut high) = (0, self.len());
        while low < high {
            let mid = (low + high) / 2;
            match self.vector(mid).partial_cmp(vector).expect("counts are finite") {
                std::cmp::Ordering::Less => low = mid + 1,
                std::cmp::Ordering::Greater => high = mid,
                std::cmp::Ordering::Equal => return Some(mid),
            }
        }
        None
    }
}

/// What the likelihood needs of a table: each level's positive counts and
/// the positive totals, each with the number of groups, and the sum of the
/// multinomial coefficients.
struct Histograms {
    per_level: Vec<Vec<(f64, f64)>>,
    totals: Vec<(f64, f64)>,
    ln_coefficients: f64,
}

impl Histograms {
    fn of(table: &LevelTable) -> Self {
        // Each distinct count's weight, summed in table order (as a stable
        // sort of every (count, weight) would sum it) but without holding an
        // entry per vector: at 10M sellers that was 184 MB.
        type Weights = HashMap<u64, f64, std::hash::BuildHasherDefault<crate::core::pairs::PairHasher>>;
        let add = |weights: &mut Weights, value: f64, weight: f64| {
            *weights.entry(value.to_bits()).or_insert(0.0) += weight;
        };
        let sorted = |weights: Weights| {
            let mut merged: Vec<(f64, f64)> =
                weights.into_iter().map(|(v, w)| (f64::from_bits(v), w)).collect();
            merged.sort_by(|x, y| x.0.partial_cmp(&y.0).expect("finite"));
            merged
        };
        let mut per_level = vec![Weights::default(); table.levels];
        let mut totals = Weights::default();
        let mut ln_coefficients = 0.0;
        for i in 0..table.len() {
            let (vector, weight) = (table.vector(i), table.weight(i));
            let total: f64 = vector.iter().sum();
            let mut ln_coefficient = ln_gamma(total + 1.0);
            for (k, &n) in vector.iter().enumerate() {
                if n > 0.0 {
                    add(&mut per_level[k], n, weight);
                    ln_coefficient -= ln_gamma(n + 1.0);
                }
            }
            if total > 0.0 {
                add(&mut totals, total, weight);
                ln_coefficients += weight * ln_coefficient;
            }
        }
        Histograms {
            per_level: per_level.into_iter().map(sorted).collect(),
            totals: sorted(totals),
            ln_coefficients,
        }
    }

    /// ln Γ(x + v) − ln Γ(x) summed over a histogram, in a form that keeps
    /// its digits at large x.
    fn ln_rising_sum(values: &[(f64, f64)], x: f64) -> f64 {
        let ln_x = x.ln();
        values.iter().map(|&(v, w)| w * (v * ln_x + ln_rising_excess(x, v))).sum()
    }

    /// The log marginal likelihood at shapes `a`.
    fn log_likelihood(&self, a: &[f64]) -> f64 {
        let strength: f64 = a.iter().sum();
        let levels: f64 = self.per_level.iter().zip(a).map(|(h, &ak)| Self::ln_rising_sum(h, ak)).sum();
        self.ln_coefficients + levels - Self::ln_rising_sum(&self.totals, strength)
    }

    /// The log marginal likelihood, its gradient and Hessian in the shapes.
    fn evaluate(&self, a: &[f64]) -> (f64, Vec<f64>, Vec<f64>) {
        let k = a.len();
        let strength: f64 = a.iter().sum();
        let common_gradient: f64 = self.totals.iter().map(|&(n, w)| w * digamma_diff(strength, n)).sum();
        let common_curvature: f64 = self.totals.iter().map(|&(n, w)| w * trigamma_diff(strength, n)).sum();
        let mut gradient = vec![-common_gradient; k];
        let mut hessian = vec![-common_curvature; k * k];
        for (j, (h, &aj)) in self.per_level.iter().zip(a).enumerate() {
            gradient[j] += h.iter().map(|&(n, w)| w * digamma_diff(aj, n)).sum::<f64>();
            hessian[j * k + j] += h.iter().map(|&(n, w)| w * trigamma_diff(aj, n)).sum::<f64>();
        }
        (self.log_likelihood(a), gradient, hessian)
    }
}

/// The log marginal likelihood of `table` under `prior`, with the
/// multinomial coefficients: what a prior fitted to other groups scores on
/// these (the pooled shares' multinomial likelihood at the boundary).
pub fn log_marginal_at(table: &LevelTable, prior: &LevelPrior) -> f64 {
    let histograms = Histograms::of(table);
    match prior {
        LevelPrior::Dirichlet { shapes } => histograms.log_likelihood(shapes),
        LevelPrior::Pooled { shares } => {
            let totals = table.level_totals();
            let terms = totals.iter().zip(shares).map(|(&t, &p)| if t > 0.0 { t * p.ln() } else { 0.0 });
            histograms.ln_coefficients + terms.sum::<f64>()
        }
    }
}

/// A fitted or assumed prior over the shares.
#[derive(Debug, Clone, PartialEq)]
pub enum LevelPrior {
    /// Dirichlet(a₁, …, a_K).
    Dirichlet {
        /// The shapes a_k.
        shapes: Vec<f64>,
    },
    /// Every group has the pooled shares (no overdispersion).
    Pooled {
        /// The pooled shares.
        shares: Vec<f64>,
    },
}

impl LevelPrior {
    /// The prior mean shares.
    pub fn shares(&self) -> Vec<f64> {
        match self {
            LevelPrior::Dirichlet { shapes } => {
                let total: f64 = shapes.iter().sum();
                shapes.iter().map(|a| a / total).collect()
            }
            LevelPrior::Pooled { shares } => shares.clone(),
        }
    }

    /// The strength A = Σ a_k (None when infinite).
    pub fn strength(&self) -> Option<f64> {
        match self {
            LevelPrior::Dirichlet { shapes } => Some(shapes.iter().sum()),
            LevelPrior::Pooled { .. } => None,
        }
    }

    /// The prior mean score.
    pub fn mean_score(&self, scores: &[f64]) -> f64 {
        self.shares().iter().zip(scores).map(|(p, s)| p * s).sum()
    }
}

/// Why the model cannot be fitted to a table; results, not bugs.
#[derive(Debug, Clone, PartialEq)]
pub enum LevelFitFailure {
    /// No group has any rating.
    NoData,
    /// A level has no ratings in any group: its share's prior is on the edge (0).
    EmptyLevel {
        /// The level, from 0.
        level: usize,
    },
    /// Every group has at most one rating: only the shares are identifiable.
    SharesOnly,
    /// The search did not converge.
    NotConverged {
        /// Steps taken.
        iterations: u64,
    },
}

/// The result of a fit.
#[derive(Debug, Clone, PartialEq)]
pub struct LevelFit {
    /// The prior.
    pub prior: LevelPrior,
    /// Standard errors of the shapes (None at the boundary).
    pub shapes_se: Option<Vec<f64>>,
    /// Standard error of the strength (None at the boundary).
    pub strength_se: Option<f64>,
    /// Standard errors of the prior mean shares.
    pub shares_se: Vec<f64>,
    /// The maximised log marginal likelihood (with the multinomial coefficients).
    pub log_marginal_likelihood: f64,
    /// The log likelihood with every group at the pooled shares.
    pub pooled_log_likelihood: f64,
    /// Likelihood-ratio test against the pooled shares.
    pub pooling: PoolingTest,
    /// The score test for overdispersion at φ = 1/A = 0.
    pub overdispersion: OverdispersionTest,
    /// Newton steps taken.
    pub iterations: u64,
    /// The gradient's largest entry in ln a at the result, per group.
    pub gradient_norm: f64,
    /// The covariance of the shapes (row-major, K × K; None at the boundary).
    pub covariance: Option<Vec<f64>>,
}

impl LevelFit {
    /// The prior mean score and its standard error (the delta method from
    /// the shapes' covariance; at the boundary, from the pooled shares'
    /// multinomial variance).
    pub fn mean_score(&self, scores: &[f64], table: &LevelTable) -> (f64, f64) {
        let mean = self.prior.mean_score(scores);
        let variance = match (&self.prior, &self.covariance) {
            (LevelPrior::Dirichlet { shapes }, Some(cov)) => {
                let strength: f64 = shapes.iter().sum();
                let g: Vec<f64> = scores.iter().map(|s| (s - mean) / strength).collect();
                quadratic_form(cov, &g)
            }
            _ => {
                let ratings: f64 = table.level_totals().iter().sum();
                let shares = self.prior.shares();
                shares.iter().zip(scores).map(|(p, s)| p * (s - mean).powi(2)).sum::<f64>() / ratings
            }
        };
        (mean, variance.max(0.0).sqrt())
    }
}

/// gᵀ C g for a row-major square C.
fn quadratic_form(c: &[f64], g: &[f64]) -> f64 {
    let k = g.len();
    (0..k).map(|i| (0..k).map(|j| g[i] * c[i * k + j] * g[j]).sum::<f64>()).sum()
}

/// The inverse of a symmetric positive definite K × K matrix, or None.
fn inverse(m: &[f64], k: usize) -> Option<Vec<f64>> {
    let l = cholesky(m, k)?;
    let mut inv = vec![0.0; k * k];
    for j in 0..k {
        let mut unit = vec![0.0; k];
        unit[j] = 1.0;
        for (i, x) in cholesky_solve(&l, k, &unit).into_iter().enumerate() {
            inv[i * k + j] = x;
        }
    }
    Some(inv)
}

/// The score statistic for overdispersion at φ = 1/A = 0 with the pooled
/// shares p: per group T = Σ_k n_k(n_k − 1)/p_k − N(N − 1), twice the
/// derivative of its log likelihood in φ at 0, with mean 0 and variance
/// 2(K − 1) N(N − 1) under the multinomial (from its factorial moments;
/// with K = 2 this is Tarone's statistic). Returns (Σ T, its variance, the
/// moment estimate of ρ = 1/(A + 1), from E T = (K − 1) N(N − 1) ρ).
fn score_at_boundary(table: &LevelTable, shares: &[f64]) -> (f64, f64, f64) {
    let (mut score, mut pairs) = (0.0, 0.0);
    for i in 0..table.len() {
        let (vector, weight) = (table.vector(i), table.weight(i));
        let total: f64 = vector.iter().sum();
        let within: f64 = vector.iter().zip(shares).map(|(n, p)| n * (n - 1.0) / p).sum();
        score += weight * (within - total * (total - 1.0));
        pairs += weight * total * (total - 1.0);
    }
    let levels = table.levels() as f64 - 1.0;
    (score, 2.0 * levels * pairs, score / (levels * pairs))
}

/// Fits the Dirichlet prior to `table` by maximum marginal likelihood.
pub fn fit_levels(table: &LevelTable) -> Result<LevelFit, LevelFitFailure> {
    let totals = table.level_totals();
    let ratings: f64 = totals.iter().sum();
    if ratings == 0.0 {
        return Err(LevelFitFailure::NoData);
    }
    if let Some(level) = totals.iter().position(|&t| t == 0.0) {
        return Err(LevelFitFailure::EmptyLevel { level });
    }
    let shares: Vec<f64> = totals.iter().map(|t| t / ratings).collect();
    let histograms = Histograms::of(table);
    let groups: f64 = histograms.totals.iter().map(|&(_, w)| w).sum();
    let pooled_log_likelihood =
        histograms.ln_coefficients + totals.iter().zip(&shares).map(|(t, p)| t * p.ln()).sum::<f64>();
    let (score, score_variance, rho) = score_at_boundary(table, &shares);
    if score_variance == 0.0 {
        return Err(LevelFitFailure::SharesOnly);
    }
    let z = score / score_variance.sqrt();
    let overdispersion =
        OverdispersionTest { statistic: z, p_value: 0.5 * erfc(z / std::f64::consts::SQRT_2) };
    let boundary = |iterations| {
        let shares_se = shares.iter().map(|p| (p * (1.0 - p) / ratings).sqrt()).collect();
        LevelFit {
            prior: LevelPrior::Pooled { shares: shares.clone() },
            shapes_se: None,
            strength_se: None,
            shares_se,
            log_marginal_likelihood: pooled_log_likelihood,
            pooled_log_likelihood,
            pooling: PoolingTest::new(pooled_log_likelihood, pooled_log_likelihood),
            overdispersion,
            iterations,
            gradient_norm: 0.0,
            covariance: None,
        }
    };
    if score <= 0.0 {
        return Ok(boundary(0));
    }
    let strength = 1.0 / rho.clamp(1e-8, 0.99) - 1.0;
    let k = shares.len();
    let mut u: Vec<f64> = shares.iter().map(|p| (p * strength).ln()).collect();
    let mut iterations = 0;
    let mut current = histograms.evaluate(&exp_all(&u));
    loop {
        iterations += 1;
        let a = exp_all(&u);
        let (value, gradient_a, hessian_a) = &current;
        let gradient: Vec<f64> = gradient_a.iter().zip(&a).map(|(g, a)| g * a).collect();
        let mut negative = vec![0.0; k * k];
        for i in 0..k {
            for j in 0..k {
                negative[i * k + j] = -a[i] * a[j] * hessian_a[i * k + j];
            }
            negative[i * k + i] -= a[i] * gradient_a[i];
        }
        let step = newton_step(&negative, &gradient, k);
        let decrement: f64 = step.iter().zip(&gradient).map(|(d, g)| d * g).sum();
        let longest = step.iter().fold(0.0f64, |m, d| m.max(d.abs()));
        let scale = if longest > MAX_STEP { MAX_STEP / longest } else { 1.0 };
        let mut length = scale;
        let mut moved = false;
        for _ in 0..60 {
            let trial: Vec<f64> = u.iter().zip(&step).map(|(u, d)| u + length * d).collect();
            let value_at = histograms.log_likelihood(&exp_all(&trial));
            if value_at >= *value {
                moved = value_at > *value || length == scale;
                u = trial;
                break;
            }
            length *= 0.5;
        }
        current = histograms.evaluate(&exp_all(&u));
        let strength: f64 = exp_all(&u).iter().sum();
        if strength > MAX_STRENGTH {
            return Ok(boundary(iterations));
        }
        // The largest change of a ln a_k, or the likelihood's predicted gain, below rounding.
        let converged = longest * length <= 1e-12 || decrement.abs() <= 1e-20 * groups;
        if converged || !moved {
            break;
        }
        if iterations >= MAX_ITERATIONS {
            return Err(LevelFitFailure::NotConverged { iterations });
        }
    }
    let a = exp_all(&u);
    let (log_marginal_likelihood, gradient_a, hessian_a) = current;
    let gradient_norm = gradient_a.iter().zip(&a).fold(0.0f64, |m, (g, a)| m.max((g * a).abs())) / groups;
    if gradient_norm > 1e-6 {
        return Err(LevelFitFailure::NotConverged { iterations });
    }
    let information: Vec<f64> = hessian_a.iter().map(|h| -h).collect();
    let covariance = inverse(&information, k);
    let strength: f64 = a.iter().sum();
    let (shapes_se, strength_se, shares_se) = match &covariance {
        Some(cov) => {
            let shapes_se = (0..k).map(|i| cov[i * k + i].max(0.0).sqrt()).collect();
            let strength_se = quadratic_form(cov, &vec![1.0; k]).max(0.0).sqrt();
            // ∂(a_j / A)/∂a_i = (δ_ij − a_j / A) / A.
            let shares_se = (0..k)
                .map(|j| {
                    let g: Vec<f64> =
                        (0..k).map(|i| (f64::from(u8::from(i == j)) - a[j] / strength) / strength).collect();
                    quadratic_form(cov, &g).max(0.0).sqrt()
                })
                .collect();
            (Some(shapes_se), Some(strength_se), shares_se)
        }
        None => (None, None, vec![f64::NAN; k]),
    };
    Ok(LevelFit {
        prior: LevelPrior::Dirichlet { shapes: a },
        shapes_se,
        strength_se,
        shares_se,
        log_marginal_likelihood,
        pooled_log_likelihood,
        pooling: PoolingTest::new(log_marginal_likelihood, pooled_log_likelihood),
        overdispersion,
        iterations,
        gradient_norm,
        covariance,
    })
}

/// exp of each.
fn exp_all(u: &[f64]) -> Vec<f64> {
    u.iter().map(|x| x.exp()).collect()
}

/// The Newton step solving `negative_hessian` d = `gradient`; where the
/// matrix is not positive definite (far from the maximum), with a ridge
/// added until it is (Levenberg), so the step still climbs.
fn newton_step(negative_hessian: &[f64], gradient: &[f64], k: usize) -> Vec<f64> {
    let largest = (0..k).map(|i| negative_hessian[i * k + i].abs()).fold(1e-12, f64::max);
    let mut ridge = 0.0;
    loop {
        let mut m = negative_hessian.to_vec();
        for i in 0..k {
            m[i * k + i] += ridge;
        }
        if let Some(l) = cholesky(&m, k) {
            return cholesky_solve(&l, k, gradient);
        }
        ridge = if ridge == 0.0 { 1e-8 * largest } else { ridge * 10.0 };
    }
}

/// Posterior summary of one count vector's mean score.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct LevelPosterior {
    /// Posterior mean of the mean score.
    pub mean: f64,
    /// Its posterior standard deviation.
    pub sd: f64,
    /// Lower end of the equal-tailed credible interval.
    pub lower: f64,
    /// Upper end.
    pub upper: f64,
    /// A / (A + N): the prior's weight in the posterior mean shares.
    pub pool_weight: f64,
}

/// The posterior shapes a + n (None under pooled shares).
fn posterior_shapes(prior: &LevelPrior, counts: &[f64]) -> Option<Vec<f64>> {
    match prior {
        LevelPrior::Dirichlet { shapes } => Some(shapes.iter().zip(counts).map(|(a, n)| a + n).collect()),
        LevelPrior::Pooled { .. } => None,
    }
}

/// The posterior of the mean score of a group with `counts`, its interval
/// leaving `tail` on each side.
pub fn posterior(prior: &LevelPrior, scores: &[f64], counts: &[f64], tail: f64) -> LevelPosterior {
    match posterior_shapes(prior, counts) {
        Some(shapes) => {
            let strength: f64 = prior.strength().expect("a Dirichlet prior");
            let total: f64 = counts.iter().sum();
            let law = MeanScoreLaw { shapes: &shapes, scores };
            LevelPosterior {
                mean: law.mean(),
                sd: law.variance().sqrt(),
                lower: law.quantile(Tail::Lower, tail),
                upper: law.quantile(Tail::Upper, tail),
                pool_weight: strength / (strength + total),
            }
        }
        None => {
            let mean = prior.mean_score(scores);
            LevelPosterior { mean, sd: 0.0, lower: mean, upper: mean, pool_weight: 1.0 }
        }
    }
}

/// The posterior mean shares of a group with `counts`.
pub fn posterior_shares(prior: &LevelPrior, counts: &[f64]) -> Vec<f64> {
    match posterior_shapes(prior, counts) {
        Some(shapes) => {
            let total: f64 = shapes.iter().sum();
            shapes.iter().map(|b| b / total).collect()
        }
        None => prior.shares(),
    }
}

/// The posterior mean share of `level`: element `level` of
/// [`posterior_shares`], to the bit, without the vector.
pub fn posterior_share(prior: &LevelPrior, counts: &[f64], level: usize) -> f64 {
    match prior {
        LevelPrior::Dirichlet { shapes } => {
            // A + N, summed as posterior_shares sums it.
            let total: f64 = shapes.iter().zip(counts).map(|(a, n)| a + n).sum();
            (shapes[level] + counts[level]) / total
        }
        LevelPrior::Pooled { shares } => shares[level],
    }
}

/// (P(X ≤ t), P(X > t)) for X fixed at `value` (pooled shares).
fn point_tails(value: f64, t: f64) -> (f64, f64) {
    if value > t {
        (0.0, 1.0)
    } else {
        (1.0, 0.0)
    }
}

/// (P(mean score ≤ t), P(mean score > t)) under the posterior of `counts`.
pub fn mean_score_tails(prior: &LevelPrior, scores: &[f64], counts: &[f64], t: f64) -> (f64, f64) {
    match posterior_shapes(prior, counts) {
        Some(shapes) => {
            let at = MeanScoreLaw { shapes: &shapes, scores }.at(t);
            (at.lower, at.upper)
        }
        None => point_tails(prior.mean_score(scores), t),
    }
}

/// (P(share of `level` ≤ x), P(share > x)) under the posterior of `counts`:
/// one share of a Dirichlet is Beta(β_k, B − β_k) (common practice).
pub fn share_tails(prior: &LevelPrior, counts: &[f64], level: usize, x: f64) -> (f64, f64) {
    match posterior_shapes(prior, counts) {
        Some(shapes) => {
            let total: f64 = shapes.iter().sum();
            let t = beta_tails(shapes[level], total - shapes[level], x, 1.0 - x);
            (t.lower, t.upper)
        }
        None => point_tails(prior.shares()[level], x),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn one_share_is_that_level_of_all_the_shares_to_the_bit() {
        let priors = [
            LevelPrior::Dirichlet { shapes: vec![0.31, 1.7, 0.05, 12.5, 3.3] },
            LevelPrior::Pooled { shares: vec![0.1, 0.2, 0.3, 0.25, 0.15] },
        ];
        for prior in &priors {
            for counts in [[0.0; 5], [1.0, 0.0, 3.0, 17.0, 2.0], [1e6, 3.0, 0.0, 5e5, 1.0]] {
                let all = posterior_shares(prior, &counts);
                for (level, share) in all.iter().enumerate() {
                    assert_eq!(posterior_share(prior, &counts, level).to_bits(), share.to_bits());
                }
            }
        }
    }

    /// Every count vector over `levels` levels summing to `total`.
    fn compositions(total: usize, levels: usize) -> Vec<Vec<usize>> {
        if levels == 1 {
            return vec![vec![total]];
        }
        (0..=total)
            .flat_map(|first| {
                compositions(total - first, levels - 1).into_iter().map(move |mut rest| {
                    rest.insert(0, first);
                    rest
                })
            })
            .collect()
    }

    #[test]
    fn the_boundary_score_has_mean_zero_and_the_stated_variance_under_the_multinomial() {
        // Exact enumeration of Multinomial(N, p): E T = 0, Var T = 2(K − 1)N(N − 1).
        let shares = [0.1, 0.2, 0.3, 0.4];
        for total in [2usize, 3, 5] {
            let (mut mean, mut square) = (0.0, 0.0);
            for vector in compositions(total, shares.len()) {
                let ln_p = ln_gamma(total as f64 + 1.0)
                    + vector
                        .iter()
                        .zip(&shares)
                        .map(|(&n, p)| n as f64 * f64::ln(*p) - ln_gamma(n as f64 + 1.0))
                        .sum::<f64>();
                let n: Vec<f64> = vector.iter().map(|&n| n as f64).collect();
                let table = LevelTable::new(4, [(n, 1.0)]);
                let (t, _, _) = score_at_boundary(&table, &shares);
                mean += ln_p.exp() * t;
                square += ln_p.exp() * t * t;
            }
            let n = total as f64;
            assert!(mean.abs() < 1e-9, "N = {total}: mean {mean}");
            assert!((square - 2.0 * 3.0 * n * (n - 1.0)).abs() < 1e-8 * square, "N = {total}: {square}");
        }
    }

    #[test]
    fn a_priors_likelihood_on_its_own_table_is_the_fits() {
        let table = LevelTable::new(
            3,
            [
                (vec![1.0, 2.0, 3.0], 40.0),
                (vec![5.0, 0.0, 1.0], 25.0),
                (vec![0.0, 0.0, 4.0], 30.0),
                (vec![2.0, 2.0, 2.0], 5.0),
            ],
        );
        let fitted = fit_levels(&table).unwrap();
        assert!(matches!(fitted.prior, LevelPrior::Dirichlet { .. }));
        assert_eq!(log_marginal_at(&table, &fitted.prior), fitted.log_marginal_likelihood);
        let pooled = LevelPrior::Pooled { shares: fitted.prior.shares() };
        let shares = fitted.prior.shares();
        let totals = table.level_totals();
        let coefficients: f64 = (0..table.len())
            .map(|i| {
                let v = table.vector(i);
                table.weight(i)
                    * (ln_gamma(v.iter().sum::<f64>() + 1.0)
                        - v.iter().map(|n| ln_gamma(n + 1.0)).sum::<f64>())
            })
            .sum();
        let multinomial = coefficients + totals.iter().zip(&shares).map(|(t, p)| t * p.ln()).sum::<f64>();
        assert!((log_marginal_at(&table, &pooled) - multinomial).abs() < 1e-9 * multinomial.abs());
    }

    #[test]
    fn the_table_merges_equal_vectors_in_a_fixed_order() {
        let table = LevelTable::new(
            3,
            [(vec![0.0, 2.0, 1.0], 1.0), (vec![0.0, 1.0, 1.0], 2.0), (vec![0.0, 2.0, 1.0], 3.0)],
        );
        assert_eq!(table.len(), 2);
        assert_eq!(table.vector(0), &[0.0, 1.0, 1.0]);
        assert_eq!(table.weight(1), 4.0);
        assert_eq!(table.position(&[0.0, 2.0, 1.0]), Some(1));
        assert_eq!(table.position(&[0.0, 2.0, 2.0]), None);
    }

    #[test]
    fn the_gradient_and_hessian_are_the_likelihoods_slopes() {
        let table = LevelTable::new(
            3,
            [
                (vec![3.0, 0.0, 1.0], 4.0),
                (vec![0.0, 7.0, 2.0], 1.0),
                (vec![1.0, 1.0, 1.0], 2.0),
                (vec![20.0, 1.0, 0.0], 1.0),
            ],
        );
        let h = Histograms::of(&table);
        let a = [0.7, 2.5, 1.3];
        let (_, g, hess) = h.evaluate(&a);
        for i in 0..3 {
            let e = 1e-6;
            let mut up = a;
            up[i] += e;
            let mut down = a;
            down[i] -= e;
            let slope = (h.log_likelihood(&up) - h.log_likelihood(&down)) / (2.0 * e);
            assert!((slope - g[i]).abs() < 1e-6 * g[i].abs().max(1.0), "{i}: {slope} vs {}", g[i]);
            let (_, gu, _) = h.evaluate(&up);
            let (_, gd, _) = h.evaluate(&down);
            for j in 0..3 {
                let curvature = (gu[j] - gd[j]) / (2.0 * e);
                assert!((curvature - hess[j * 3 + i]).abs() < 1e-5 * curvature.abs().max(1.0));
            }
        }
    }
}
