//! The free prior of every family: a discrete distribution on a fixed grid
//! of rates (of means, for estimates) whose masses maximise the marginal
//! likelihood, the nonparametric maximum-likelihood prior (Kiefer and
//! Wolfowitz 1956; Laird 1978).
//!
//! It asks a family for nothing new: a group's likelihood at a given rate is
//! the family's pmf under no overdispersion ([`Family::pooled_log_pmf`]), and
//! its predictive CDF and raw-rate variance at a rate are the family's
//! pooled forms, so every family has a free variant in its own place.
//!
//! The fit is the convex problem max Σᵢ cᵢ ln Σⱼ Lᵢⱼ fⱼ over masses f ≥ 0
//! summing to 1, solved by the constrained Newton method of Wang (JRSS B
//! 2007): each step adds the local maxima of the gradient over the grid to
//! the support, solves the quadratic model of the log likelihood on the
//! support as a non-negative least-squares problem, and takes an Armijo step
//! toward it. It stops at a certified optimum: for any masses f,
//! ℓ(f*) − ℓ(f) ≤ maxⱼ dⱼ − N, where dⱼ = Σᵢ cᵢ Lᵢⱼ / (Lᵢ·f) and N = Σᵢ cᵢ
//! (concavity, and Σⱼ fⱼ dⱼ = N), so that bound is the duality gap reported.
//!
//! Each group's row of L is kept where it is within e⁻⁴⁰ of its largest
//! value (a band around its raw rate; the likelihood is unimodal in the
//! rate), scaled by that largest value.

use super::{Family, Posterior, Prior, RateRange};
use crate::core::dense::{cholesky, cholesky_solve};
use crate::core::pairs::{PairTable, WeightedPair};

/// The default number of grid points.
pub const DEFAULT_GRID_POINTS: usize = 300;

/// The fewest groups with data a free prior is fitted to.
pub const MIN_GROUPS: f64 = 10.0;

/// The duality gap a fit stops at, per group with data: the log marginal
/// likelihood is then within 1e-9 × groups of its maximum on the grid.
pub const GAP_PER_GROUP: f64 = 1e-9;

/// Steps in a row that gain less than 1e-15 of the log likelihood end a fit
/// whose gap is at the floor set by rounding.
const STALLED_STEPS: u32 = 5;

/// Likelihoods below e^(−BAND_DEPTH) of a row's largest are taken as 0.
const BAND_DEPTH: f64 = 40.0;

/// Iterations of the Newton method before a fit is called unconverged.
const MAX_ITERATIONS: u64 = 1_000;

/// How the grid's points are spaced between its ends.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Spacing {
    /// Evenly.
    Linear,
    /// Evenly in ln(rate): rates over orders of magnitude.
    Log,
    /// Evenly in ln(p / (1 − p)): proportions over orders of magnitude.
    Logit,
}

impl Spacing {
    /// The name written in a summary.
    pub fn name(self) -> &'static str {
        match self {
            Spacing::Linear => "linear",
            Spacing::Log => "log",
            Spacing::Logit => "logit",
        }
    }

    /// The spacing of a name written by [`Spacing::name`].
    pub fn from_name(name: &str) -> Option<Self> {
        [Spacing::Linear, Spacing::Log, Spacing::Logit].into_iter().find(|s| s.name() == name)
    }

    fn axis_of(self, x: f64) -> f64 {
        match self {
            Spacing::Linear => x,
            Spacing::Log => x.ln(),
            Spacing::Logit => x.ln() - (-x).ln_1p(),
        }
    }

    fn rate_at(self, t: f64) -> f64 {
        match self {
            Spacing::Linear => t,
            Spacing::Log => t.exp(),
            Spacing::Logit => 1.0 / (1.0 + (-t).exp()),
        }
    }
}

/// A free prior: masses on a grid of rates, with the cells each point's
/// mass is spread over when a posterior's interval or tails are read.
#[derive(Debug, Clone, PartialEq)]
pub struct FreePrior {
    points: Vec<f64>,
    masses: Vec<f64>,
    spacing: Spacing,
    /// Cell edges: the midpoints (on the spacing's axis) between neighbours,
    /// and the end points themselves; one more than the points.
    edges: Vec<f64>,
    /// The points with mass, in order.
    support: Vec<usize>,
}

/// Why a free prior cannot be made.
#[derive(Debug, Clone, PartialEq)]
pub enum FreeFault {
    /// Fewer than [`MIN_GROUPS`] groups with data.
    TooFewGroups {
        /// Groups with data.
        groups: f64,
    },
    /// The grid or masses read back are not a prior (a saved file).
    Invalid(String),
    /// The Newton method stopped short of its gap.
    NotConverged {
        /// Iterations run.
        iterations: u64,
        /// The duality gap reached.
        gap: f64,
    },
}

impl std::fmt::Display for FreeFault {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            FreeFault::TooFewGroups { groups } => write!(
                f,
                "a free prior needs at least {MIN_GROUPS} groups with data to spread over a grid, and there are {groups}"
            ),
            FreeFault::Invalid(reason) => f.write_str(reason),
            FreeFault::NotConverged { iterations, gap } => write!(
                f,
                "the free prior's fit stopped after {iterations} iterations with a duality gap of {gap:.3e}; please report this with the input"
            ),
        }
    }
}

impl FreePrior {
    /// A prior of `masses` on sorted `points` spaced by `spacing`; masses
    /// are scaled to sum to 1.
    pub fn new(points: Vec<f64>, masses: Vec<f64>, spacing: Spacing) -> Result<Self, FreeFault> {
        let invalid = |reason: &str| Err(FreeFault::Invalid(reason.to_string()));
        if points.is_empty() || points.len() != masses.len() {
            return invalid("the grid and its masses must be as long as each other, and not empty");
        }
        if points.iter().any(|p| !p.is_finite()) || points.windows(2).any(|w| w[0] >= w[1]) {
            return invalid("the grid's points must be finite and increasing");
        }
        if masses.iter().any(|m| !(m.is_finite() && *m >= 0.0)) {
            return invalid("the grid's masses must be finite and at least 0");
        }
        let total: f64 = masses.iter().sum();
        if total <= 0.0 {
            return invalid("the grid's masses sum to 0");
        }
        let masses: Vec<f64> = masses.iter().map(|m| m / total).collect();
        let mut edges = Vec::with_capacity(points.len() + 1);
        edges.push(points[0]);
        for w in points.windows(2) {
            let mid = 0.5 * (spacing.axis_of(w[0]) + spacing.axis_of(w[1]));
            edges.push(spacing.rate_at(mid).clamp(w[0], w[1]));
        }
        edges.push(points[points.len() - 1]);
        let support = (0..points.len()).filter(|&j| masses[j] > 0.0).collect();
        Ok(FreePrior { points, masses, spacing, edges, support })
    }

    /// A point mass at `at`.
    pub fn point(at: f64) -> Self {
        FreePrior::new(vec![at], vec![1.0], Spacing::Linear).expect("one finite point is a prior")
    }

    /// The grid's points.
    pub fn points(&self) -> &[f64] {
        &self.points
    }

    /// The mass at each point.
    pub fn masses(&self) -> &[f64] {
        &self.masses
    }

    /// How the grid is spaced.
    pub fn spacing(&self) -> Spacing {
        self.spacing
    }

    /// The points with mass: (point, mass), in order.
    pub fn support(&self) -> impl Iterator<Item = (f64, f64)> + '_ {
        self.support.iter().map(|&j| (self.points[j], self.masses[j]))
    }

    /// Whether all the mass is at one point.
    pub fn is_point_mass(&self) -> bool {
        self.support.len() == 1
    }

    /// The prior's mean and standard deviation.
    pub fn mean_sd(&self) -> (f64, f64) {
        let mean: f64 = self.support().map(|(x, m)| m * x).sum();
        let variance: f64 = self.support().map(|(x, m)| m * (x - mean).powi(2)).sum();
        (mean, variance.sqrt())
    }

    /// The posterior masses of one pair on the support: (grid index, mass).
    fn posterior_masses<F: Family>(&self, size: f64, count: f64) -> Vec<(usize, f64)> {
        let pair = WeightedPair { size, count, weight: 1.0 };
        let logs: Vec<f64> = self.support.iter().map(|&j| F::pooled_log_pmf(self.points[j], &pair)).collect();
        let top = logs.iter().copied().fold(f64::NEG_INFINITY, f64::max);
        let mut masses: Vec<(usize, f64)> = if top.is_finite() {
            self.support.iter().zip(&logs).map(|(&j, &l)| (j, self.masses[j] * (l - top).exp())).collect()
        } else {
            // No support point gives the data any likelihood: the prior itself.
            self.support.iter().map(|&j| (j, self.masses[j])).collect()
        };
        let total: f64 = masses.iter().map(|(_, m)| m).sum();
        for (_, m) in &mut masses {
            *m /= total;
        }
        masses
    }

    /// The share of cell `j` below `t`: its mass is spread evenly over the
    /// cell on the rate scale.
    fn cell_share_below(&self, j: usize, t: f64) -> f64 {
        let (low, high) = (self.edges[j], self.edges[j + 1]);
        if t <= low {
            0.0
        } else if t >= high {
            1.0
        } else {
            (t - low) / (high - low)
        }
    }

    /// P(rate < t) and P(rate > t) under the posterior of one pair.
    pub fn rate_tails<F: Family>(&self, size: f64, count: f64, t: f64) -> (f64, f64) {
        let (mut below, mut above) = (0.0, 0.0);
        for (j, m) in self.posterior_masses::<F>(size, count) {
            let share = self.cell_share_below(j, t);
            below += m * share;
            above += m * (1.0 - share);
        }
        (below, above)
    }

    /// Posterior of one pair: mean and sd of the discrete posterior on the
    /// grid; the interval from its CDF with each point's mass spread evenly
    /// over its cell (so linear between cell edges); the pool weight as the
    /// share of the way from the raw value to the prior mean the posterior
    /// mean moves, cut to [0, 1].
    pub fn posterior<F: Family>(&self, size: f64, count: f64, tail: f64) -> Posterior {
        let masses = self.posterior_masses::<F>(size, count);
        let mean: f64 = masses.iter().map(|&(j, m)| m * self.points[j]).sum();
        let variance: f64 = masses.iter().map(|&(j, m)| m * (self.points[j] - mean).powi(2)).sum();
        let quantile = |level: f64| -> f64 {
            let mut below = 0.0;
            for &(j, m) in &masses {
                if below + m >= level && m > 0.0 {
                    let share = ((level - below) / m).clamp(0.0, 1.0);
                    return self.edges[j] + share * (self.edges[j + 1] - self.edges[j]);
                }
                below += m;
            }
            let last = masses.last().map_or(0, |&(j, _)| j);
            self.edges[last + 1]
        };
        let (prior_mean, _) = self.mean_sd();
        let pool_weight = match F::TERMS.raw_value(size, count) {
            Some(raw) if raw != prior_mean => ((raw - mean) / (raw - prior_mean)).clamp(0.0, 1.0),
            Some(_) => 0.0,
            None => 1.0,
        };
        Posterior {
            mean,
            sd: variance.sqrt(),
            lower: quantile(tail),
            upper: quantile(1.0 - tail),
            pool_weight,
            natural: None,
        }
    }

    /// Where a pair's count falls in its prior predictive distribution:
    /// the mixture over the support of the pooled predictive CDFs.
    pub fn predictive_cdf<F: Family>(&self, size: f64, count: f64) -> (f64, f64) {
        self.support().fold((0.0, 0.0), |(below, at_most), (x, m)| {
            let (b, a) = F::predictive_cdf(&Prior::CompletePooling { mean: x }, size, count);
            (below + m * b, at_most + m * a)
        })
    }

    /// The variance of a raw rate of this size under the prior predictive
    /// distribution: the mean sampling variance plus the prior's variance.
    pub fn raw_rate_variance<F: Family>(&self, size: f64) -> f64 {
        let (_, sd) = self.mean_sd();
        let sampling: f64 = self
            .support()
            .map(|(x, m)| m * F::raw_rate_variance(&Prior::CompletePooling { mean: x }, size))
            .sum();
        sampling + sd * sd
    }

    /// ln of the marginal pmf of one pair: ln Σⱼ fⱼ p(pair | rate j).
    pub fn log_pmf<F: Family>(&self, pair: &WeightedPair) -> f64 {
        let logs: Vec<(f64, f64)> = self.support().map(|(x, m)| (m, F::pooled_log_pmf(x, pair))).collect();
        let top = logs.iter().map(|&(_, l)| l).fold(f64::NEG_INFINITY, f64::max);
        if !top.is_finite() {
            return top;
        }
        top + logs.iter().map(|&(m, l)| m * (l - top).exp()).sum::<f64>().ln()
    }
}

/// A fitted free prior and how the fit ended.
#[derive(Debug, Clone, PartialEq)]
pub struct FreeFit {
    /// The prior.
    pub prior: FreePrior,
    /// The maximised log marginal likelihood.
    pub log_marginal_likelihood: f64,
    /// The log marginal likelihood at the start: equal masses on the grid.
    pub start_log_marginal_likelihood: f64,
    /// The certified bound on how far it is below the maximum (0 for a point mass).
    pub duality_gap: f64,
    /// Newton iterations.
    pub iterations: u64,
    /// Whether the gap fell within [`GAP_PER_GROUP`] per group (otherwise
    /// the steps stopped gaining before it did, and the gap says how far off).
    pub converged: bool,
    /// Why the grid is one point, when it is: every group's raw value is the same.
    pub point_mass: Option<f64>,
}

/// The grid of a table: `points` points from its smallest to its largest
/// raw value, evenly spaced, or evenly on the log (logit) axis when the
/// rates (or odds) span more than a factor of 10. A raw value of 0 (or 1)
/// is represented by half the smallest positive one (or the like from 1),
/// or 1/(2 × the largest size) if that is nearer the edge, the rate a group
/// of the largest size can just tell from the edge. None when every raw
/// value is the same (that value is returned instead).
pub fn grid_of<F: Family>(table: &PairTable, points: usize) -> Result<(Vec<f64>, Spacing), f64> {
    let raws: Vec<f64> = table.pairs().iter().filter_map(|p| F::TERMS.raw_value(p.size, p.count)).collect();
    let (min, max) =
        raws.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), &r| (lo.min(r), hi.max(r)));
    if min == max {
        return Err(min);
    }
    let floor = 0.5 / table.max_size().max(1.0);
    let above_zero = || {
        let smallest = raws.iter().copied().filter(|&r| r > 0.0).fold(f64::INFINITY, f64::min);
        (0.5 * smallest).min(floor)
    };
    let (low, high, spacing) = match F::TERMS.rates {
        RateRange::Real => (min, max, Spacing::Linear),
        RateRange::NonNegative => {
            let low = if min > 0.0 { min } else { above_zero() };
            (low, max, if max / low > 10.0 { Spacing::Log } else { Spacing::Linear })
        }
        RateRange::Proportion => {
            let low = if min > 0.0 { min } else { above_zero() };
            let high = if max < 1.0 {
                max
            } else {
                let largest = raws.iter().copied().filter(|&r| r < 1.0).fold(f64::NEG_INFINITY, f64::max);
                1.0 - (0.5 * (1.0 - largest)).min(floor)
            };
            let wide = high / low > 10.0 || (1.0 - low) / (1.0 - high) > 10.0;
            (low, high, if wide { Spacing::Logit } else { Spacing::Linear })
        }
    };
    let (a, b) = (spacing.axis_of(low), spacing.axis_of(high));
    let last = (points - 1) as f64;
    let mut grid: Vec<f64> = (0..points).map(|j| spacing.rate_at(a + (b - a) * j as f64 / last)).collect();
    grid[0] = low;
    grid[points - 1] = high;
    grid.dedup();
    Ok((grid, spacing))
}

/// The rows of the likelihood matrix: per pair with data, its weight, the
/// ln of its largest likelihood on the grid, and the band of grid points
/// within e⁻⁴⁰ of it, scaled by it.
struct Rows {
    weight: Vec<f64>,
    scale: Vec<f64>,
    first: Vec<usize>,
    offset: Vec<usize>,
    values: Vec<f64>,
}

impl Rows {
    fn of<F: Family>(table: &PairTable, grid: &[f64]) -> Self {
        let mut rows = Rows {
            weight: Vec::new(),
            scale: Vec::new(),
            first: Vec::new(),
            offset: vec![0],
            values: Vec::new(),
        };
        let mut band = Vec::new();
        for pair in table.pairs() {
            let Some(raw) = F::TERMS.raw_value(pair.size, pair.count) else { continue };
            let at = |j: usize| F::pooled_log_pmf(grid[j], pair);
            // The likelihood is unimodal in the rate, with its peak at the raw value.
            let right = grid.partition_point(|&x| x < raw).min(grid.len() - 1);
            let mut peak = right;
            if right > 0 && at(right - 1) > at(right) {
                peak = right - 1;
            }
            let top = at(peak);
            let (mut low, mut high) = (peak, peak);
            while low > 0 && at(low - 1) >= top - BAND_DEPTH {
                low -= 1;
            }
            while high + 1 < grid.len() && at(high + 1) >= top - BAND_DEPTH {
                high += 1;
            }
            band.clear();
            band.extend((low..=high).map(|j| (at(j) - top).exp()));
            rows.weight.push(pair.weight);
            rows.scale.push(top);
            rows.first.push(low);
            rows.values.extend_from_slice(&band);
            rows.offset.push(rows.values.len());
        }
        rows
    }

    fn len(&self) -> usize {
        self.weight.len()
    }

    fn row(&self, i: usize) -> (usize, &[f64]) {
        (self.first[i], &self.values[self.offset[i]..self.offset[i + 1]])
    }

    /// Lᵢ·f for every row.
    fn fitted(&self, f: &[f64]) -> Vec<f64> {
        (0..self.len())
            .map(|i| {
                let (first, values) = self.row(i);
                values.iter().zip(&f[first..]).map(|(l, m)| l * m).sum()
            })
            .collect()
    }

    /// The log likelihood of the masses whose fitted values are `s`.
    fn log_likelihood(&self, s: &[f64]) -> f64 {
        s.iter().zip(&self.weight).zip(&self.scale).map(|((s, c), k)| c * (k + s.ln())).sum()
    }

    /// dⱼ = Σᵢ cᵢ Lᵢⱼ / sᵢ for every grid point.
    fn gradient(&self, s: &[f64], points: usize) -> Vec<f64> {
        let mut d = vec![0.0; points];
        for (i, s) in s.iter().enumerate() {
            let (first, values) = self.row(i);
            let scale = self.weight[i] / s;
            for (dj, l) in d[first..].iter_mut().zip(values) {
                *dj += scale * l;
            }
        }
        d
    }
}

/// Fits the free prior to a table on a grid of `points` points.
pub fn fit_free<F: Family>(table: &PairTable, points: usize) -> Result<FreeFit, FreeFault> {
    let groups: f64 = table
        .pairs()
        .iter()
        .filter(|p| F::TERMS.raw_value(p.size, p.count).is_some())
        .map(|p| p.weight)
        .sum();
    if groups < MIN_GROUPS {
        return Err(FreeFault::TooFewGroups { groups });
    }
    let (grid, spacing) = match grid_of::<F>(table, points) {
        Ok(grid) => grid,
        Err(at) => {
            let prior = FreePrior::point(at);
            let log_marginal_likelihood =
                table.pairs().iter().map(|p| p.weight * prior.log_pmf::<F>(p)).sum();
            return Ok(FreeFit {
                prior,
                log_marginal_likelihood,
                start_log_marginal_likelihood: log_marginal_likelihood,
                duality_gap: 0.0,
                iterations: 0,
                converged: true,
                point_mass: Some(at),
            });
        }
    };
    let rows = Rows::of::<F>(table, &grid);
    let m = grid.len();
    let mut f = vec![1.0 / m as f64; m];
    let mut s = rows.fitted(&f);
    let mut log_likelihood = rows.log_likelihood(&s);
    let start_log_marginal_likelihood = log_likelihood;
    let tolerance = GAP_PER_GROUP * groups;
    let mut iterations = 0;
    let mut still = 0;
    loop {
        let d = rows.gradient(&s, m);
        let gap = d.iter().copied().fold(f64::NEG_INFINITY, f64::max) - groups;
        // Rows without data add ln 1 = 0 to the likelihood. Where no step
        // gains any more, the optimum is reached to rounding.
        if gap <= tolerance || still >= STALLED_STEPS {
            return Ok(FreeFit {
                prior: FreePrior::new(grid, f, spacing)?,
                log_marginal_likelihood: log_likelihood,
                start_log_marginal_likelihood,
                duality_gap: gap.max(0.0),
                iterations,
                converged: gap <= tolerance,
                point_mass: None,
            });
        }
        if iterations == MAX_ITERATIONS {
            return Err(FreeFault::NotConverged { iterations, gap });
        }
        iterations += 1;
        // The support and the gradient's local maxima above N.
        let mut support: Vec<usize> = (0..m)
            .filter(|&j| {
                f[j] > 0.0
                    || (d[j] > groups && (j == 0 || d[j] >= d[j - 1]) && (j + 1 == m || d[j] >= d[j + 1]))
            })
            .collect();
        support.dedup();
        let beta = newton_masses(&rows, &s, &support, (&d, groups));
        let total: f64 = beta.iter().sum();
        let mut target = vec![0.0; m];
        for (&j, b) in support.iter().zip(&beta) {
            target[j] = b / total;
        }
        // Armijo step from f toward the target: ℓ(f + αΔ) ≥ ℓ(f) + α Δ·d / 3.
        let slope: f64 = (0..m).map(|j| (target[j] - f[j]) * d[j]).sum();
        let mut alpha = 1.0;
        let before = log_likelihood;
        for _ in 0..60 {
            let trial: Vec<f64> = f.iter().zip(&target).map(|(a, b)| a + alpha * (b - a)).collect();
            let trial_s = rows.fitted(&trial);
            let trial_log = rows.log_likelihood(&trial_s);
            if trial_log >= log_likelihood + alpha * slope / 3.0 {
                f = trial;
                s = trial_s;
                log_likelihood = trial_log;
                break;
            }
            alpha *= 0.5;
        }
        still = if log_likelihood - before <= 1e-15 * log_likelihood.abs() { still + 1 } else { 0 };
        for x in &mut f {
            if *x < 1e-300 {
                *x = 0.0;
            }
        }
    }
}

/// The maximiser over masses β ≥ 0 on `support` of the quadratic model, at
/// fitted values `s`, of ℓ(β) − N Σ β (whose maximiser sums to 1, since
/// ℓ(cβ) = ℓ(β) + N ln c): min ½ Σᵢ cᵢ (Σⱼ Lᵢⱼ βⱼ / sᵢ − 2)² + N Σ β,
/// solved on its normal equations by Lawson and Hanson's active set.
fn newton_masses(rows: &Rows, s: &[f64], support: &[usize], (d, groups): (&[f64], f64)) -> Vec<f64> {
    let k = support.len();
    let mut place = vec![usize::MAX; d.len()];
    for (p, &j) in support.iter().enumerate() {
        place[j] = p;
    }
    let mut gram = vec![0.0; k * k];
    let mut columns: Vec<(usize, f64)> = Vec::new();
    for (i, s) in s.iter().enumerate() {
        let (first, values) = rows.row(i);
        columns.clear();
        for (offset, l) in values.iter().enumerate() {
            let p = place[first + offset];
            if p != usize::MAX {
                columns.push((p, l / s));
            }
        }
        let c = rows.weight[i];
        for (a, &(pa, va)) in columns.iter().enumerate() {
            for &(pb, vb) in &columns[a..] {
                gram[pa * k + pb] += c * va * vb;
            }
        }
    }
    for a in 0..k {
        for b in 0..a {
            gram[a * k + b] = gram[b * k + a];
        }
    }
    let h: Vec<f64> = support.iter().map(|&j| 2.0 * d[j] - groups).collect();
    non_negative_quadratic(&gram, &h, k)
}

/// min ½ βᵀGβ − hᵀβ over β ≥ 0 (G positive semi-definite, k × k, row
/// major), by the active set of Lawson and Hanson.
fn non_negative_quadratic(gram: &[f64], h: &[f64], k: usize) -> Vec<f64> {
    let scale = h.iter().fold(0.0f64, |a, b| a.max(b.abs())).max(f64::MIN_POSITIVE);
    let mut beta = vec![0.0; k];
    let mut free = vec![false; k];
    for _ in 0..3 * k + 10 {
        let w: Vec<f64> =
            (0..k).map(|a| h[a] - (0..k).map(|b| gram[a * k + b] * beta[b]).sum::<f64>()).collect();
        let entering = (0..k).filter(|&a| !free[a]).max_by(|&a, &b| w[a].total_cmp(&w[b]));
        match entering {
            Some(a) if w[a] > 1e-12 * scale => free[a] = true,
            _ => break,
        }
        loop {
            let set: Vec<usize> = (0..k).filter(|&a| free[a]).collect();
            let z = solve_on(gram, h, k, &set);
            if z.iter().all(|&v| v > 0.0) {
                for (&a, &v) in set.iter().zip(&z) {
                    beta[a] = v;
                }
                break;
            }
            // Step back to the boundary of the feasible set, and let go of what reaches it.
            let mut alpha = 1.0f64;
            for (&a, &v) in set.iter().zip(&z) {
                if v <= 0.0 {
                    alpha = alpha.min(beta[a] / (beta[a] - v));
                }
            }
            for (&a, &v) in set.iter().zip(&z) {
                beta[a] += alpha * (v - beta[a]);
                if beta[a] <= 1e-15 * scale.max(1.0) || v <= 0.0 && alpha >= 1.0 {
                    beta[a] = 0.0;
                    free[a] = false;
                }
            }
            if !free.iter().any(|&x| x) {
                break;
            }
        }
    }
    beta
}

/// Solves G_SS z = h_S by Cholesky, with a ridge of 1e-13 of the diagonal
/// (grown a thousandfold while the factor fails) where neighbouring grid
/// columns make it nearly singular.
fn solve_on(gram: &[f64], h: &[f64], k: usize, set: &[usize]) -> Vec<f64> {
    let n = set.len();
    let matrix: Vec<f64> = set.iter().flat_map(|&r| set.iter().map(move |&c| gram[r * k + c])).collect();
    let right: Vec<f64> = set.iter().map(|&r| h[r]).collect();
    let mut ridge = 1e-13;
    loop {
        let mut a = matrix.clone();
        for i in 0..n {
            a[i * n + i] = a[i * n + i] * (1.0 + ridge) + f64::MIN_POSITIVE;
        }
        match cholesky(&a, n) {
            Some(factor) => return cholesky_solve(&factor, n, &right),
            None if ridge < 1.0 => ridge *= 1e3,
            // Not positive on its diagonal: no Newton step on this set.
            None => return vec![0.0; n],
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_quadratic_solver_meets_its_optimality_conditions() {
        // G = [[2, 1], [1, 2]], h = [1, -1]: the optimum is β = (1/2, 0).
        let beta = non_negative_quadratic(&[2.0, 1.0, 1.0, 2.0], &[1.0, -1.0], 2);
        assert!((beta[0] - 0.5).abs() < 1e-12 && beta[1] == 0.0, "{beta:?}");
        // Unconstrained optimum inside: β = G⁻¹h = (1/3, 1/3) for h = (1, 1).
        let beta = non_negative_quadratic(&[2.0, 1.0, 1.0, 2.0], &[1.0, 1.0], 2);
        assert!((beta[0] - 1.0 / 3.0).abs() < 1e-12 && (beta[1] - 1.0 / 3.0).abs() < 1e-12, "{beta:?}");
    }
}
