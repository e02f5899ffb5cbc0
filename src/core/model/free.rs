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
use rayon::prelude::*;

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

/// Where rounding stops the steps short of [`GAP_PER_GROUP`] (millions of
/// groups), a fit whose gap is within this share of |ℓ| has converged: the
/// log marginal likelihood is then within 1e-6 of its maximum, relatively.
pub const STALLED_GAP: f64 = 1e-6;

/// Scaled likelihoods below this are left out of a Newton step's quadratic model.
const NEWTON_DEPTH: f64 = 1e-9;

/// Likelihoods below e^(−BAND_DEPTH) of a row's largest are taken as 0.
const BAND_DEPTH: f64 = 40.0;

/// A Newton step's support while mass sits on most of the grid: every
/// this-many-th point.
const STARTING_STRIDE: usize = 4;

/// Iterations of the Newton method before a fit is called unconverged.
const MAX_ITERATIONS: u64 = 1_000;

/// How the grid's points are spaced between its ends: evenly on the scale
/// where a group's sampling noise has the same spread at every rate (the
/// variance-stabilising transform of its family's likelihood), so that
/// neighbouring points are equally far apart in units of that noise.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Spacing {
    /// Evenly in the value itself (a normal estimate's noise is its standard error).
    Linear,
    /// Evenly in √rate (a Poisson count's noise there is 1/(2√exposure)).
    SquareRoot,
    /// Evenly in arcsin √p (a binomial proportion's noise there is 1/(2√trials)).
    ArcsineRoot,
}

impl Spacing {
    const ALL: [Spacing; 3] = [Spacing::Linear, Spacing::SquareRoot, Spacing::ArcsineRoot];

    /// The name written in a summary.
    pub fn name(self) -> &'static str {
        match self {
            Spacing::Linear => "linear",
            Spacing::SquareRoot => "square-root",
            Spacing::ArcsineRoot => "arcsine-root",
        }
    }

    /// The spacing of a name written by [`Spacing::name`].
    pub fn from_name(name: &str) -> Option<Self> {
        Spacing::ALL.into_iter().find(|s| s.name() == name)
    }

    fn axis_of(self, x: f64) -> f64 {
        match self {
            Spacing::Linear => x,
            Spacing::SquareRoot => x.sqrt(),
            Spacing::ArcsineRoot => x.sqrt().asin(),
        }
    }

    fn rate_at(self, t: f64) -> f64 {
        match self {
            Spacing::Linear => t,
            Spacing::SquareRoot => t * t,
            Spacing::ArcsineRoot => t.sin().powi(2),
        }
    }

    /// The spread of a group's raw value on this scale, given its size.
    fn noise(self, size: f64) -> f64 {
        match self {
            Spacing::Linear => size,
            Spacing::SquareRoot | Spacing::ArcsineRoot => 0.5 / size.sqrt(),
        }
    }
}

/// A free prior: masses on a grid of rates, with the cells each point's
/// mass is spread over when a posterior's interval or tails are read.
#[derive(Debug, Clone)]
pub struct FreePrior {
    points: Vec<f64>,
    masses: Vec<f64>,
    spacing: Spacing,
    /// Cell edges: the midpoints (on the spacing's axis) between neighbours,
    /// and the end points themselves; one more than the points.
    edges: Vec<f64>,
    /// The points with mass, in order.
    support: Vec<usize>,
    /// The prior's mean and standard deviation.
    moments: (f64, f64),
    /// The family's [`Family::rate_axes`] at each support point, made on
    /// first use (a prior is used with one family).
    axes: std::sync::OnceLock<Vec<[f64; 2]>>,
}

impl PartialEq for FreePrior {
    fn eq(&self, other: &Self) -> bool {
        (&self.points, &self.masses, self.spacing) == (&other.points, &other.masses, other.spacing)
    }
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
    /// are scaled to sum to 1 (unless they do to within 1e-12).
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
        // Masses that sum to 1 to rounding are kept as they are, so a prior
        // read back from its summary is the same bits as the one written.
        let masses =
            if (total - 1.0).abs() <= 1e-12 { masses } else { masses.iter().map(|m| m / total).collect() };
        let mut edges = Vec::with_capacity(points.len() + 1);
        edges.push(points[0]);
        for w in points.windows(2) {
            let mid = 0.5 * (spacing.axis_of(w[0]) + spacing.axis_of(w[1]));
            edges.push(spacing.rate_at(mid).clamp(w[0], w[1]));
        }
        edges.push(points[points.len() - 1]);
        let support: Vec<usize> = (0..points.len()).filter(|&j| masses[j] > 0.0).collect();
        let mean: f64 = support.iter().map(|&j| masses[j] * points[j]).sum();
        let variance: f64 = support.iter().map(|&j| masses[j] * (points[j] - mean).powi(2)).sum();
        let moments = (mean, variance.sqrt());
        Ok(FreePrior { points, masses, spacing, edges, support, moments, axes: std::sync::OnceLock::new() })
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
        self.moments
    }

    /// Each support point's log likelihood of one pair, less a term of the
    /// pair alone (w · a(rate) of [`Family::rate_axes`]), and the largest.
    fn support_logs<F: Family>(&self, size: f64, count: f64) -> (Vec<f64>, f64) {
        let axes =
            self.axes.get_or_init(|| self.support.iter().map(|&j| F::rate_axes(self.points[j])).collect());
        let w = F::pair_axes(size, count);
        let logs: Vec<f64> = axes.iter().map(|a| w[0] * a[0] + w[1] * a[1]).collect();
        let top = logs.iter().copied().fold(f64::NEG_INFINITY, f64::max);
        (logs, top)
    }

    /// The posterior masses of one pair on the support: (grid index, mass).
    fn posterior_masses<F: Family>(&self, size: f64, count: f64) -> Vec<(usize, f64)> {
        let (logs, top) = self.support_logs::<F>(size, count);
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

    /// ln of the marginal pmf of one pair: ln Σⱼ fⱼ p(pair | rate j), the
    /// pair's own term from its pmf at the support point it likes best.
    pub fn log_pmf<F: Family>(&self, pair: &WeightedPair) -> f64 {
        let (logs, top) = self.support_logs::<F>(pair.size, pair.count);
        if !top.is_finite() {
            return f64::NEG_INFINITY;
        }
        let best = logs.iter().position(|&l| l == top).unwrap_or(0);
        let own = F::pooled_log_pmf(self.points[self.support[best]], pair) - top;
        let sum: f64 = self.support.iter().zip(&logs).map(|(&j, &l)| self.masses[j] * (l - top).exp()).sum();
        own + top + sum.ln()
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

/// The most grid points the default rule takes.
pub const MOST_DEFAULT_POINTS: usize = 2_000;

/// The grid of a table, evenly spaced on its family's stabilised scale
/// ([`Spacing`]) from the smallest raw value to the largest. A raw value of
/// 0 (or 1) stands as half the smallest positive one (or the like from 1),
/// or 1/(2 × the largest size) if that is nearer the edge: the rate a group
/// of the largest size can just tell from the edge. `points` points, or by
/// default [`DEFAULT_GRID_POINTS`], more where needed for neighbouring points
/// to be at most one noise spread apart for the 1% of groups with the least
/// noise (at most [`MOST_DEFAULT_POINTS`]). Err holds the one raw value when
/// every group's is the same.
pub fn grid_of<F: Family>(table: &PairTable, points: Option<usize>) -> Result<(Vec<f64>, Spacing), f64> {
    let spacing = F::TERMS.grid_spacing;
    let with_data: Vec<(f64, f64)> = table
        .pairs()
        .iter()
        .filter_map(|p| F::TERMS.raw_value(p.size, p.count).map(|raw| (raw, p.weight)))
        .collect();
    let (min, max) =
        with_data.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), &(r, _)| (lo.min(r), hi.max(r)));
    if min == max {
        return Err(min);
    }
    let floor = 0.5 / table.max_size().max(1.0);
    let (mut low, mut high) = (min, max);
    if F::TERMS.rates != RateRange::Real && low <= 0.0 {
        let smallest = with_data.iter().map(|&(r, _)| r).filter(|&r| r > 0.0).fold(f64::INFINITY, f64::min);
        low = (0.5 * smallest).min(floor);
    }
    if F::TERMS.rates == RateRange::Proportion && high >= 1.0 {
        let largest =
            with_data.iter().map(|&(r, _)| r).filter(|&r| r < 1.0).fold(f64::NEG_INFINITY, f64::max);
        high = 1.0 - (0.5 * (1.0 - largest)).min(floor);
    }
    let (a, b) = (spacing.axis_of(low), spacing.axis_of(high));
    let points = points.unwrap_or_else(|| {
        let least_noise = quietest_percent::<F>(table, spacing);
        let needed = ((b - a) / least_noise).ceil();
        if needed.is_finite() {
            (needed as usize).clamp(DEFAULT_GRID_POINTS, MOST_DEFAULT_POINTS)
        } else {
            DEFAULT_GRID_POINTS
        }
    });
    let last = (points - 1) as f64;
    let mut grid: Vec<f64> = (0..points).map(|j| spacing.rate_at(a + (b - a) * j as f64 / last)).collect();
    grid[0] = low;
    grid[points - 1] = high;
    grid.dedup();
    Ok((grid, spacing))
}

/// The noise spread on the grid's scale that 1% of the groups with data
/// are at or below.
fn quietest_percent<F: Family>(table: &PairTable, spacing: Spacing) -> f64 {
    let mut noise: Vec<(f64, f64)> = table
        .pairs()
        .iter()
        .filter(|p| F::TERMS.raw_value(p.size, p.count).is_some())
        .map(|p| (spacing.noise(p.size), p.weight))
        .collect();
    noise.sort_by(|x, y| x.0.total_cmp(&y.0));
    let total: f64 = noise.iter().map(|&(_, w)| w).sum();
    let mut below = 0.0;
    for &(spread, weight) in &noise {
        below += weight;
        if below >= 0.01 * total {
            return spread;
        }
    }
    noise.last().map_or(f64::INFINITY, |&(spread, _)| spread)
}

/// Rows of the likelihood matrix are built and passed over in chunks of
/// this many, each chunk's sums added in chunk order: the same bits on any
/// number of threads.
const ROW_CHUNK: usize = 2_048;

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
    /// No rows yet.
    fn empty() -> Self {
        Rows { weight: Vec::new(), scale: Vec::new(), first: Vec::new(), offset: vec![0], values: Vec::new() }
    }

    fn of<F: Family>(table: &PairTable, grid: &[f64]) -> Self {
        let axes: Vec<[f64; 2]> = grid.iter().map(|&x| F::rate_axes(x)).collect();
        let pairs: Vec<&WeightedPair> =
            table.pairs().iter().filter(|p| F::TERMS.raw_value(p.size, p.count).is_some()).collect();
        let chunks: Vec<Rows> =
            pairs.par_chunks(ROW_CHUNK).map(|chunk| Rows::of_chunk::<F>(chunk, grid, &axes)).collect();
        let mut rows = Rows::empty();
        for chunk in chunks {
            let base = rows.values.len();
            rows.weight.extend(chunk.weight);
            rows.scale.extend(chunk.scale);
            rows.first.extend(chunk.first);
            rows.offset.extend(chunk.offset[1..].iter().map(|o| o + base));
            rows.values.extend(chunk.values);
        }
        rows
    }

    /// One chunk's rows: each pair's log likelihood on the grid as w · a(rate)
    /// plus its own term, found from its peak, which sits by its raw value.
    fn of_chunk<F: Family>(pairs: &[&WeightedPair], grid: &[f64], axes: &[[f64; 2]]) -> Rows {
        let mut rows = Rows::empty();
        let mut band = Vec::new();
        for pair in pairs {
            let raw = F::TERMS.raw_value(pair.size, pair.count).unwrap_or(grid[0]);
            let w = F::pair_axes(pair.size, pair.count);
            let at = |j: usize| w[0] * axes[j][0] + w[1] * axes[j][1];
            // The likelihood is unimodal in the rate: climb from the raw value to its peak.
            let mut peak = grid.partition_point(|&x| x < raw).min(grid.len() - 1);
            while peak > 0 && at(peak - 1) > at(peak) {
                peak -= 1;
            }
            while peak + 1 < grid.len() && at(peak + 1) > at(peak) {
                peak += 1;
            }
            let top = at(peak);
            band.clear();
            let mut low = peak;
            while low > 0 && at(low - 1) >= top - BAND_DEPTH {
                low -= 1;
            }
            let mut j = low;
            while j < grid.len() {
                let v = at(j) - top;
                if j > peak && v < -BAND_DEPTH {
                    break;
                }
                band.push(v.exp());
                j += 1;
            }
            rows.weight.push(pair.weight);
            rows.scale.push(F::pooled_log_pmf(grid[peak], pair));
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
            .into_par_iter()
            .with_min_len(ROW_CHUNK)
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

    /// Σ over chunks of rows, in chunk order, of `each(rows of the chunk)`, a
    /// vector of `length`.
    fn chunked_sum(
        &self,
        length: usize,
        each: impl Fn(std::ops::Range<usize>, &mut [f64]) + Sync,
    ) -> Vec<f64> {
        let starts: Vec<usize> = (0..self.len()).step_by(ROW_CHUNK).collect();
        let parts: Vec<Vec<f64>> = starts
            .par_iter()
            .map(|&start| {
                let mut part = vec![0.0; length];
                each(start..(start + ROW_CHUNK).min(self.len()), &mut part);
                part
            })
            .collect();
        let mut total = vec![0.0; length];
        for part in parts {
            for (t, p) in total.iter_mut().zip(part) {
                *t += p;
            }
        }
        total
    }

    /// The share α in (0, 1) of mass to move to grid point `j` that
    /// maximises the likelihood of (1 − α) f + α eⱼ, given the fitted values
    /// `s` of f: the root of Σᵢ cᵢ (Lᵢⱼ − sᵢ) / (sᵢ + α (Lᵢⱼ − sᵢ)), which
    /// falls from dⱼ − N > 0, by bisection. Rows whose band misses j add
    /// −cᵢ / (1 − α) each.
    fn vertex_step(&self, s: &[f64], j: usize, groups: f64) -> f64 {
        let mut touching = Vec::new();
        let mut elsewhere = groups;
        for (i, s) in s.iter().enumerate() {
            let (first, values) = self.row(i);
            if let Some(&l) = j.checked_sub(first).and_then(|at| values.get(at)) {
                touching.push((self.weight[i], l, *s));
                elsewhere -= self.weight[i];
            }
        }
        let slope = |alpha: f64| -> f64 {
            let near: f64 = touching.iter().map(|&(c, l, s)| c * (l - s) / (s + alpha * (l - s))).sum();
            near - elsewhere.max(0.0) / (1.0 - alpha)
        };
        let (mut low, mut high) = (0.0, 1.0);
        for _ in 0..60 {
            let mid = 0.5 * (low + high);
            if slope(mid) > 0.0 {
                low = mid;
            } else {
                high = mid;
            }
        }
        low
    }

    /// dⱼ = Σᵢ cᵢ Lᵢⱼ / sᵢ for every grid point.
    fn gradient(&self, s: &[f64], points: usize) -> Vec<f64> {
        self.chunked_sum(points, |range, d| {
            for i in range {
                let (first, values) = self.row(i);
                let scale = self.weight[i] / s[i];
                for (dj, l) in d[first..].iter_mut().zip(values) {
                    *dj += scale * l;
                }
            }
        })
    }
}

/// Fits the free prior to a table on a grid of `points` points.
pub fn fit_free<F: Family>(table: &PairTable, points: Option<usize>) -> Result<FreeFit, FreeFault> {
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
        let mut d = rows.gradient(&s, m);
        let mut gap = d.iter().copied().fold(f64::NEG_INFINITY, f64::max) - groups;
        // Far from the optimum (some groups left with almost no fitted mass),
        // the quadratic model of ln is poor and Newton steps grow a missing
        // point's mass only twofold at a time: first move mass to the point
        // the gradient favours most, by an exact line search.
        if gap > groups {
            let best = (0..m).max_by(|&a, &b| d[a].total_cmp(&d[b])).unwrap_or(0);
            let alpha = rows.vertex_step(&s, best, groups);
            for x in &mut f {
                *x *= 1.0 - alpha;
            }
            f[best] += alpha;
            s = rows.fitted(&f);
            log_likelihood = rows.log_likelihood(&s);
            d = rows.gradient(&s, m);
            gap = d.iter().copied().fold(f64::NEG_INFINITY, f64::max) - groups;
        }
        // Rows without data add ln 1 = 0 to the likelihood. Where no step
        // gains any more, the optimum is reached to rounding.
        let rounded = still >= STALLED_STEPS || (still > 0 && gap <= STALLED_GAP * log_likelihood.abs());
        if gap <= tolerance || rounded {
            return Ok(FreeFit {
                prior: FreePrior::new(grid, f, spacing)?,
                log_marginal_likelihood: log_likelihood,
                start_log_marginal_likelihood,
                duality_gap: gap.max(0.0),
                iterations,
                converged: gap <= tolerance || gap <= STALLED_GAP * log_likelihood.abs(),
                point_mass: None,
            });
        }
        if iterations == MAX_ITERATIONS {
            return Err(FreeFault::NotConverged { iterations, gap });
        }
        iterations += 1;
        // The support and the gradient's local maxima above N.
        // The support and the gradient's local maxima above N. While mass
        // sits on most of the grid (from the even start), every
        // STARTING_STRIDE-th point stands for its neighbours: a Newton step's
        // work grows as the square of the support, and most of it is let go.
        let dense = f.iter().filter(|&&x| x > 0.0).count() > m / 2;
        let stride = if dense { STARTING_STRIDE } else { 1 };
        let mut support: Vec<usize> = (0..m)
            .filter(|&j| {
                (f[j] > 0.0 && j % stride == 0)
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
    let mut gram = rows.chunked_sum(k * k, |range, gram| {
        let mut columns: Vec<(usize, f64)> = Vec::new();
        for i in range {
            let (first, values) = rows.row(i);
            columns.clear();
            for (offset, &l) in values.iter().enumerate() {
                let p = place[first + offset];
                // Entries below 1e-9 of the row's largest add at most 1e-18 of
                // the largest to the quadratic model: left out of it (not of
                // the likelihood, whose gap still decides convergence).
                if p != usize::MAX && l >= NEWTON_DEPTH {
                    columns.push((p, l / s[i]));
                }
            }
            let c = rows.weight[i];
            for (a, &(pa, va)) in columns.iter().enumerate() {
                for &(pb, vb) in &columns[a..] {
                    gram[pa * k + pb] += c * va * vb;
                }
            }
        }
    });
    for a in 0..k {
        for b in 0..a {
            gram[a * k + b] = gram[b * k + a];
        }
    }
    let h: Vec<f64> = support.iter().map(|&j| 2.0 * d[j] - groups).collect();
    // Solved in columns scaled to a unit diagonal (y = √G_jj β, still ≥ 0):
    // a point where some groups have almost no fitted mass has a diagonal
    // many orders above the rest.
    let unit: Vec<f64> = (0..k).map(|a| 1.0 / gram[a * k + a].sqrt().max(f64::MIN_POSITIVE)).collect();
    for a in 0..k {
        for b in 0..k {
            gram[a * k + b] *= unit[a] * unit[b];
        }
    }
    let scaled_h: Vec<f64> = h.iter().zip(&unit).map(|(h, u)| h * u).collect();
    let y = non_negative_quadratic(&gram, &scaled_h, k);
    y.iter().zip(&unit).map(|(y, u)| y * u).collect()
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
