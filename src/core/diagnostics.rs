//! How much the groups were pulled toward the pool: summaries of the pool
//! weights, of the shift from raw rate to posterior mean, and the rank
//! correlation between the raw and the shrunken ranking.

/// Summary of the pull toward the pool over all scored groups.
#[derive(Debug, Clone, PartialEq)]
pub struct Pull {
    /// Mean pool weight B.
    pub pool_weight_mean: f64,
    /// Median pool weight.
    pub pool_weight_median: f64,
    /// 10th percentile of the pool weight.
    pub pool_weight_p10: f64,
    /// 90th percentile of the pool weight.
    pub pool_weight_p90: f64,
    /// Mean |posterior mean − raw rate| over groups with a raw rate.
    pub mean_abs_shift: Option<f64>,
    /// Largest |posterior mean − raw rate|.
    pub max_abs_shift: Option<f64>,
    /// Index of the pair with the largest shift.
    pub max_shift_row: Option<usize>,
    /// Spearman correlation of raw rates and posterior means.
    pub rank_correlation: Option<f64>,
}

/// What the pull summary needs of one distinct pair: its raw rate (None with
/// no data), posterior mean, pool weight, and how many groups share it.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PairOutcome {
    /// k/n or y/E; None when the group has no trials or exposure.
    pub raw_rate: Option<f64>,
    /// Posterior mean.
    pub posterior_mean: f64,
    /// Pool weight B.
    pub pool_weight: f64,
    /// Number of groups with this pair.
    pub groups: f64,
}

/// Quantile of the multiset in which each `(value, weight)` appears `weight`
/// times, `sorted` by value, by linear interpolation between order statistics
/// (the "type 7" definition, the default of R and numpy; common practice).
pub fn weighted_quantile(sorted: &[(f64, f64)], q: f64) -> f64 {
    let total: f64 = sorted.iter().map(|&(_, w)| w).sum();
    let h = (total - 1.0) * q;
    let (lo, hi) = (h.floor(), h.ceil());
    let at = |position: f64| {
        let mut seen = 0.0;
        for &(value, weight) in sorted {
            seen += weight;
            if position < seen {
                return value;
            }
        }
        sorted[sorted.len() - 1].0
    };
    let (x_lo, x_hi) = (at(lo), at(hi));
    x_lo + (h - lo) * (x_hi - x_lo)
}

/// Average ranks (1-based, ties sharing their mean rank) of values that each
/// stand for `weight` equal observations, written in the values' place.
pub fn weighted_average_ranks(values: Vec<f64>, weights: &[f64]) -> Vec<f64> {
    // Unstable: tied values share one rank whatever their order (the ties'
    // weights are summed in that order, which for whole-number weights is exact).
    // Places as 32-bit numbers (half the room of a usize) where they fit.
    match u32::try_from(values.len()) {
        Ok(_) => {
            let order = (0..values.len() as u32).collect();
            ranks_in_order(values, weights, order)
        }
        Err(_) => {
            let order = (0..values.len()).collect();
            ranks_in_order(values, weights, order)
        }
    }
}

/// [`weighted_average_ranks`] with the values' places, of type `P`. The
/// ranks are written over the values: a tie's values are all read before
/// any of its ranks is written, and each place is written once.
fn ranks_in_order<P: Copy + TryInto<usize>>(
    mut values: Vec<f64>,
    weights: &[f64],
    mut order: Vec<P>,
) -> Vec<f64> {
    let at = |p: P| p.try_into().unwrap_or_else(|_| unreachable!("a place within the values"));
    order.sort_unstable_by(|&a, &b| values[at(a)].total_cmp(&values[at(b)]));
    let (mut start, mut below) = (0, 0.0);
    while start < order.len() {
        let mut end = start;
        let mut tied = 0.0;
        let value = values[at(order[start])];
        while end < order.len() && values[at(order[end])] == value {
            tied += weights[at(order[end])];
            end += 1;
        }
        let rank = below + (tied + 1.0) / 2.0;
        for &i in &order[start..end] {
            values[at(i)] = rank;
        }
        below += tied;
        start = end;
    }
    values
}

/// Weighted Pearson correlation; None when either side has no spread.
fn weighted_pearson(x: &[f64], y: &[f64], w: &[f64]) -> Option<f64> {
    let total: f64 = w.iter().sum();
    let mean = |v: &[f64]| v.iter().zip(w).map(|(a, b)| a * b).sum::<f64>() / total;
    let (mx, my) = (mean(x), mean(y));
    let (mut sxy, mut sxx, mut syy) = (0.0, 0.0, 0.0);
    for ((a, b), c) in x.iter().zip(y).zip(w) {
        sxy += c * (a - mx) * (b - my);
        sxx += c * (a - mx) * (a - mx);
        syy += c * (b - my) * (b - my);
    }
    (sxx > 0.0 && syy > 0.0).then(|| sxy / (sxx * syy).sqrt())
}

/// Spearman's rank correlation (Pearson correlation of average ranks) of
/// paired values that each stand for `weight` groups. The values are taken
/// over and ranked where they stand, so nothing but the two sides, the
/// weights and one side's sort order is held (the pull summary's are a
/// pair's worth each).
pub fn weighted_spearman(x: Vec<f64>, y: Vec<f64>, weights: &[f64]) -> Option<f64> {
    if weights.iter().sum::<f64>() < 2.0 {
        return None;
    }
    let x_ranks = weighted_average_ranks(x, weights);
    let y_ranks = weighted_average_ranks(y, weights);
    weighted_pearson(&x_ranks, &y_ranks, weights)
}

/// The pull summary over all groups, from each distinct pair and its
/// posterior (`posterior(i)` that of `pairs[i]`).
pub fn pull_of_pairs(
    terms: &crate::core::model::ModelTerms,
    pairs: &[crate::core::pairs::WeightedPair],
    posterior: impl Fn(usize) -> crate::core::model::Posterior,
) -> Pull {
    let outcome = |i: usize| {
        let posterior = posterior(i);
        PairOutcome {
            raw_rate: terms.raw_value(pairs[i].size, pairs[i].count),
            posterior_mean: posterior.mean,
            pool_weight: posterior.pool_weight,
            groups: pairs[i].weight,
        }
    };
    pull(pairs.len(), outcome)
}

/// Computes the pull summary over all groups from the `pairs` distinct
/// pairs they share, pair i's outcome being `outcome(i)` (made as needed,
/// not held: at a million pairs and more they would be a large table);
/// `max_shift_row` is then the index of the pair with the largest shift.
pub fn pull(pairs: usize, outcome: impl Fn(usize) -> PairOutcome) -> Pull {
    // The pool weights' summary first, so that their sorted copy is freed
    // before the rank correlation's tables are made.
    let (pool_weight_mean, [pool_weight_median, pool_weight_p10, pool_weight_p90]) = {
        let mut weights: Vec<(f64, f64)> =
            (0..pairs).map(&outcome).map(|p| (p.pool_weight, p.groups)).collect();
        // Summed in pair order, before the sort.
        let groups: f64 = weights.iter().map(|&(_, g)| g).sum();
        weights.sort_by(|a, b| a.0.total_cmp(&b.0));
        if weights.is_empty() {
            (0.0, [0.0; 3])
        } else {
            let mean = weights.iter().map(|(v, w)| v * w).sum::<f64>() / groups;
            (mean, [0.5, 0.1, 0.9].map(|p| weighted_quantile(&weights, p)))
        }
    };
    let (mut raws, mut posts, mut counts) =
        (Vec::with_capacity(pairs), Vec::with_capacity(pairs), Vec::with_capacity(pairs));
    let (mut total_shift, mut max_shift, mut max_pair) = (0.0, f64::NEG_INFINITY, None);
    for (index, pair) in (0..pairs).map(&outcome).enumerate() {
        if let Some(raw) = pair.raw_rate {
            let shift = (pair.posterior_mean - raw).abs();
            total_shift += shift * pair.groups;
            if shift > max_shift {
                max_shift = shift;
                max_pair = Some(index);
            }
            raws.push(raw);
            posts.push(pair.posterior_mean);
            counts.push(pair.groups);
        }
    }
    let with_rate: f64 = counts.iter().sum();
    Pull {
        pool_weight_mean,
        pool_weight_median,
        pool_weight_p10,
        pool_weight_p90,
        mean_abs_shift: (with_rate > 0.0).then(|| total_shift / with_rate),
        max_abs_shift: max_pair.map(|_| max_shift),
        max_shift_row: max_pair,
        rank_correlation: weighted_spearman(raws, posts, &counts),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Row-by-row reference: type-7 quantile of sorted data.
    fn sorted_quantile(sorted: &[f64], q: f64) -> f64 {
        let h = (sorted.len() - 1) as f64 * q;
        let (lo, hi) = (h.floor() as usize, h.ceil() as usize);
        sorted[lo] + (h - lo as f64) * (sorted[hi] - sorted[lo])
    }

    fn unit(n: usize) -> Vec<f64> {
        vec![1.0; n]
    }

    #[test]
    fn ties_share_their_average_rank() {
        assert_eq!(weighted_average_ranks(vec![3.0, 1.0, 3.0, 2.0], &unit(4)), vec![3.5, 1.0, 3.5, 2.0]);
        // A value standing for 3 observations occupies ranks 1..3.
        assert_eq!(weighted_average_ranks(vec![5.0, 1.0], &[1.0, 3.0]), vec![4.0, 2.0]);
    }

    #[test]
    fn spearman_of_a_monotone_map_is_one_and_of_a_reversal_minus_one() {
        let x = [0.1, 0.5, 0.2, 0.9];
        let y: Vec<f64> = x.iter().map(|v| v * v * v).collect();
        assert!((weighted_spearman(x.to_vec(), y, &unit(4)).unwrap() - 1.0).abs() < 1e-15);
        let z: Vec<f64> = x.iter().map(|v| -v).collect();
        assert!((weighted_spearman(x.to_vec(), z, &unit(4)).unwrap() + 1.0).abs() < 1e-15);
    }

    #[test]
    fn quantiles_interpolate_like_numpy_default() {
        // numpy.percentile([1, 2, 3, 4], 10) = 1.3 (linear method; from memory).
        let data = [(1.0, 1.0), (2.0, 1.0), (3.0, 1.0), (4.0, 1.0)];
        assert!((weighted_quantile(&data, 0.1) - 1.3).abs() < 1e-12);
    }

    #[test]
    fn weighted_summaries_equal_the_row_by_row_ones_on_the_expanded_data() {
        let values = [(0.2, 3.0), (0.5, 1.0), (0.7, 4.0), (0.9, 2.0)];
        let expanded: Vec<f64> =
            values.iter().flat_map(|&(v, w)| std::iter::repeat_n(v, w as usize)).collect();
        for q in [0.0, 0.1, 0.25, 0.5, 0.77, 0.9, 1.0] {
            assert_eq!(weighted_quantile(&values, q), sorted_quantile(&expanded, q), "q = {q}");
        }
        let x = [0.3, 0.1, 0.3, 0.8];
        let y = [0.2, 0.4, 0.1, 0.9];
        let w = [2.0, 1.0, 3.0, 1.0];
        let expand = |v: &[f64]| -> Vec<f64> {
            v.iter().zip(&w).flat_map(|(&a, &c)| std::iter::repeat_n(a, c as usize)).collect()
        };
        let (ex, ey) = (expand(&x), expand(&y));
        let n = ex.len();
        let direct = weighted_spearman(ex, ey, &unit(n)).unwrap();
        assert!((weighted_spearman(x.to_vec(), y.to_vec(), &w).unwrap() - direct).abs() < 1e-14);
        // scipy 1.17.1 `spearmanr(numpy.repeat(x, w), numpy.repeat(y, w))` = 0.140028008402801.
        assert!((direct - 0.140028008402801).abs() < 1e-14);
    }
}

/// The calibration check of a fitted marginal: each group's count located in
/// its prior predictive distribution by a randomised probability integral
/// transform, u = P(K < k) + V (P(K ≤ k) − P(K < k)) with V uniform, which
/// is uniform on (0, 1) when the model holds, counted in ten equal bins.
#[derive(Debug, Clone, PartialEq)]
pub struct Calibration {
    /// Groups in each tenth of (0, 1).
    pub bins: [u64; 10],
    /// Pearson's chi-square of the bins against equal counts.
    pub statistic: f64,
    /// Its upper tail on 9 degrees of freedom.
    pub p_value: f64,
    /// Groups located (all of them, or a seeded sample of [`CALIBRATION_GROUPS`]).
    pub groups: u64,
}

/// The most groups the calibration check locates: a seeded sample of this
/// many when there are more (ample power, bounded work).
pub const CALIBRATION_GROUPS: f64 = 100_000.0;

/// The calibration check over pairs that `weights` groups share: `cdf(i)`
/// gives pair `i`'s (P(K < k), P(K ≤ k)). With more than
/// [`CALIBRATION_GROUPS`] groups each pair's share of a sample is drawn
/// (binomially) first; the draws come from ChaCha8 streams of `seed` taken in
/// table order, so the result is fixed by the seed.
pub fn calibration(weights: &[f64], cdf: impl Fn(usize) -> (f64, f64) + Sync, seed: u64) -> Calibration {
    use rand::Rng;
    use rayon::prelude::*;
    let (located, mut rng) = located_groups(weights, seed);
    let cdfs: Vec<(f64, f64)> = (0..weights.len())
        .into_par_iter()
        .map(|i| if located[i] > 0 { cdf(i) } else { (0.0, 0.0) })
        .collect();
    rng.set_stream(2);
    let mut bins = [0u64; 10];
    for (i, &n) in located.iter().enumerate() {
        let (below, at_most) = cdfs[i];
        for _ in 0..n {
            let u = below + rng.random::<f64>() * (at_most - below);
            bins[((u * 10.0) as usize).min(9)] += 1;
        }
    }
    Calibration::of_bins(bins)
}

/// The calibration check where each group is located by its place among
/// nine replicates of it (0 to 9, uniform under the model): `place(i, rng)`
/// draws them for one group of pair `i` and returns how many fall below it
/// and how many tie; the ties are broken at random. Groups are sampled as
/// [`calibration`] samples them; each pair draws from its own ChaCha8 stream
/// of `seed`, so the result is fixed by the seed on any number of threads.
pub fn calibration_by_places(
    weights: &[f64],
    place: impl Fn(usize, &mut rand_chacha::ChaCha8Rng) -> (usize, usize) + Sync,
    seed: u64,
) -> Calibration {
    use rand::{Rng, SeedableRng};
    use rayon::prelude::*;
    let (located, _) = located_groups(weights, seed);
    // Whole counts, so the order the threads add them in changes nothing.
    let bins = (0..weights.len())
        .into_par_iter()
        .filter(|&i| located[i] > 0)
        .fold(
            || [0u64; 10],
            |mut bins, i| {
                let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
                rng.set_stream(3 + i as u64);
                for _ in 0..located[i] {
                    let (below, ties) = place(i, &mut rng);
                    bins[(below + rng.random_range(0..=ties)).min(9)] += 1;
                }
                bins
            },
        )
        .reduce(|| [0u64; 10], |a, b| std::array::from_fn(|k| a[k] + b[k]));
    Calibration::of_bins(bins)
}

/// How many groups of each pair a calibration locates: all, or with more
/// than [`CALIBRATION_GROUPS`] a binomial share of each pair's, drawn from
/// stream 1 of `seed` in table order; with the generator for later streams.
fn located_groups(weights: &[f64], seed: u64) -> (Vec<u64>, rand_chacha::ChaCha8Rng) {
    use rand::SeedableRng;
    use rand_distr::{Binomial, Distribution};
    let total: f64 = weights.iter().sum();
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    rng.set_stream(1);
    let share = (CALIBRATION_GROUPS / total).min(1.0);
    let located = weights
        .iter()
        .map(|&w| {
            if share >= 1.0 {
                w as u64
            } else {
                Binomial::new(w as u64, share).map_or(0, |b| b.sample(&mut rng))
            }
        })
        .collect();
    (located, rng)
}

impl Calibration {
    /// Pearson's chi-square of `bins` against equal counts, on 9 degrees of freedom.
    fn of_bins(bins: [u64; 10]) -> Self {
        let groups: u64 = bins.iter().sum();
        let expected = groups as f64 / 10.0;
        let statistic = if groups > 0 {
            bins.iter().map(|&b| (b as f64 - expected).powi(2) / expected).sum()
        } else {
            0.0
        };
        let p_value = crate::core::incomplete::gamma_tails(4.5, statistic / 2.0).upper;
        Calibration { bins, statistic, p_value, groups }
    }
}
