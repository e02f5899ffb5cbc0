//! Decisions over the whole table of groups, from their posteriors: ranks
//! (competition ranking, ties sharing the best rank) and flags under a
//! Bayesian false-discovery rate (the direct posterior probability approach
//! of Newton, Noueiry, Sarkar and Ahlquist, Biostatistics 5(2), 2004).
//!
//! Both work per distinct pair with the number of groups sharing it, so
//! their cost follows the pairs, not the groups.

use super::model::RateLaw;
use rand::{RngCore, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;

/// Which end of the rates ranks first.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum RankOrder {
    /// Rank 1 is the highest rate (the conservative rank orders by the lower interval bound).
    HighestFirst,
    /// Rank 1 is the lowest rate (the conservative rank orders by the upper interval bound).
    LowestFirst,
}

/// The rank of each pair's groups among all groups by `values` (the value
/// per pair; `weights` groups share each pair): 1 + the number of groups
/// with a strictly better value, so ties take the lowest rank of the tie
/// (1, 2, 2, 4). Better is higher for [`RankOrder::HighestFirst`].
pub fn competition_ranks(values: &[f64], weights: &[f64], order: RankOrder) -> Vec<i64> {
    let mut by_rank: Vec<usize> = (0..values.len()).collect();
    let better = |x: &usize, y: &usize| match order {
        RankOrder::HighestFirst => values[*y].total_cmp(&values[*x]),
        RankOrder::LowestFirst => values[*x].total_cmp(&values[*y]),
    };
    by_rank.sort_by(better);
    let mut ranks = vec![0i64; values.len()];
    let mut ahead = 0.0;
    for_each_tie(&by_rank, values, |tie| {
        for &i in tie {
            ranks[i] = ahead as i64 + 1;
        }
        ahead += tie.iter().map(|&i| weights[i]).sum::<f64>();
    });
    ranks
}

/// Calls `visit` on each run of equal values in `ordered` (indices into
/// `values`), in order. A NaN equals nothing, so it is a run of its own.
fn for_each_tie(ordered: &[usize], values: &[f64], mut visit: impl FnMut(&[usize])) {
    let mut start = 0;
    while start < ordered.len() {
        let value = values[ordered[start]];
        let end = start + 1 + ordered[start + 1..].iter().take_while(|&&i| values[i] == value).count();
        visit(&ordered[start..end]);
        start = end;
    }
}

/// Flags chosen under a posterior false-discovery rate.
#[derive(Debug, Clone, PartialEq)]
pub struct FdrFlags {
    /// Per pair: the smallest mean posterior probability of no event over
    /// the prefixes (in decreasing probability of the event) that hold it.
    pub fdr: Vec<f64>,
    /// Per pair: whether its groups are flagged (`fdr` at most the bound).
    pub flagged: Vec<bool>,
    /// Groups flagged.
    pub groups_flagged: f64,
    /// The expected number of flagged groups where the event does not hold:
    /// the sum of their posterior probabilities of no event.
    pub expected_false: f64,
}

/// The direct posterior probability rule: groups are taken in decreasing
/// posterior probability of the event, and the flagged set is the largest
/// prefix whose mean probability of *no* event is at most `bound`. Pairs of
/// equal probability are taken together, so ties are flagged together or
/// not at all.
///
/// `no_event[i]` is the posterior probability that the event does not hold
/// for the groups of pair `i` (given directly, not as 1 − P(event), so that
/// probabilities of the event near one keep their precision), `weights[i]`
/// how many groups share the pair.
pub fn posterior_fdr_flags(no_event: &[f64], weights: &[f64], bound: f64) -> FdrFlags {
    let mut order: Vec<usize> = (0..no_event.len()).collect();
    order.sort_by(|&x, &y| no_event[x].total_cmp(&no_event[y]));
    // The mean at the end of each tie, in order.
    let mut ties: Vec<(std::ops::Range<usize>, f64)> = Vec::new();
    let (mut misses, mut groups, mut start) = (0.0, 0.0, 0);
    for_each_tie(&order, no_event, |tie| {
        for &i in tie {
            misses += weights[i] * no_event[i];
            groups += weights[i];
        }
        let mean = if groups > 0.0 { misses / groups } else { 0.0 };
        ties.push((start..start + tie.len(), mean));
        start += tie.len();
    });
    // The smallest mean over the prefixes holding a tie: those ending at it or later.
    let mut fdr = vec![f64::NAN; no_event.len()];
    let mut smallest = f64::INFINITY;
    for (range, mean) in ties.iter().rev() {
        smallest = smallest.min(*mean);
        for &i in &order[range.clone()] {
            fdr[i] = smallest;
        }
    }
    let flagged: Vec<bool> = fdr.iter().map(|&f| f <= bound).collect();
    let (mut groups_flagged, mut expected_false) = (0.0, 0.0);
    for i in (0..no_event.len()).filter(|&i| flagged[i]) {
        groups_flagged += weights[i];
        expected_false += weights[i] * no_event[i];
    }
    FdrFlags { fdr, flagged, groups_flagged, expected_false }
}

/// How `prob_top` was computed.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum TopMethod {
    /// Joint draws from every group's posterior: the share of draws in which
    /// a group is among the K best.
    Draws {
        /// Draws made.
        draws: usize,
        /// Seed of the draws.
        seed: u64,
    },
    /// The threshold c where the expected number of groups beyond it is K;
    /// each group's probability of being beyond c. Exact in the limit of
    /// many groups (the K-th best rate then concentrates at c).
    Threshold {
        /// c.
        threshold: f64,
    },
}

/// P(a group is among the `k` best of all groups) per pair, by joint draws
/// from every group's posterior (`weights[i]` groups share the law
/// `laws[i]`), Rao–Blackwellised: in each draw, a group is among the best
/// exactly when its rate is beyond the `k`-th best of the *other* groups,
/// T, which is the draw's `k`-th best rate when the group's own draw is
/// outside the best `k` and the `k + 1`-th when it is inside; so the draw
/// contributes P(rate beyond T) (`beyond(i, T)`, exact from the posterior)
/// rather than a 0 or 1, with the same mean and far less variance. Groups
/// at a point mass (complete pooling) contribute their 0 or 1, ties broken
/// at random. Draw `d` uses the ChaCha8 stream `d` of `seed`, and each
/// task's sums are added in task order, so the result is the same to the
/// bit for any number of threads.
pub fn top_probabilities_by_draws(
    laws: &[RateLaw],
    weights: &[f64],
    (k, order): (usize, RankOrder),
    (draws, seed): (usize, u64),
    beyond: impl Fn(usize, f64) -> f64 + Sync,
) -> Vec<f64> {
    let groups: usize = weights.iter().map(|&w| w as usize).sum();
    if k >= groups {
        return vec![1.0; laws.len()];
    }
    const DRAWS_PER_TASK: usize = 16;
    let tasks: Vec<Vec<f64>> = (0..draws.div_ceil(DRAWS_PER_TASK))
        .into_par_iter()
        .map(|task| {
            let mut sums = vec![0.0; laws.len()];
            let mut inside = vec![0u32; laws.len()];
            let mut values: Vec<(f64, u32, u32)> = Vec::with_capacity(groups);
            for d in task * DRAWS_PER_TASK..((task + 1) * DRAWS_PER_TASK).min(draws) {
                let mut rng = ChaCha8Rng::seed_from_u64(seed);
                rng.set_stream(d as u64);
                values.clear();
                for (pair, (law, &weight)) in laws.iter().zip(weights).enumerate() {
                    for _ in 0..weight as usize {
                        let value = law.sample(&mut rng);
                        let value = if order == RankOrder::LowestFirst { -value } else { value };
                        values.push((value, rng.next_u32(), pair as u32));
                    }
                }
                // The best k: the largest by value, then by the random tie-break.
                let cut = groups - k;
                let by_value =
                    |x: &(f64, u32, u32), y: &(f64, u32, u32)| x.0.total_cmp(&y.0).then(x.1.cmp(&y.1));
                values.select_nth_unstable_by(cut, by_value);
                let kth = values[cut].0;
                let next = values[..cut].iter().map(|v| v.0).fold(f64::NEG_INFINITY, f64::max);
                for &(_, _, pair) in &values[cut..] {
                    inside[pair as usize] += 1;
                }
                let unsign = |t: f64| if order == RankOrder::LowestFirst { -t } else { t };
                for (pair, law) in laws.iter().enumerate() {
                    let (in_best, weight) = (f64::from(inside[pair]), weights[pair]);
                    sums[pair] += if law.is_point() {
                        in_best
                    } else {
                        let mut sum = 0.0;
                        if in_best > 0.0 {
                            sum += in_best * beyond(pair, unsign(next));
                        }
                        if in_best < weight {
                            sum += (weight - in_best) * beyond(pair, unsign(kth));
                        }
                        sum
                    };
                    inside[pair] = 0;
                }
            }
            sums
        })
        .collect();
    let mut totals = vec![0.0; laws.len()];
    for sums in tasks {
        totals.iter_mut().zip(sums).for_each(|(t, s)| *t += s);
    }
    totals.iter().zip(weights).map(|(&t, &w)| t / (draws as f64 * w)).collect()
}

/// What the threshold search needs to know of the posteriors' laws.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct LawKinds {
    /// Every posterior is a point mass (complete pooling).
    pub all_points: bool,
    /// No posterior puts mass below zero (rates, not estimates).
    pub floored: bool,
}

impl LawKinds {
    /// The kinds of these laws.
    pub fn of(laws: &[RateLaw]) -> Self {
        LawKinds {
            all_points: laws.iter().all(RateLaw::is_point),
            floored: !laws.iter().any(RateLaw::reaches_below_zero),
        }
    }
}

/// P(a group is among the `k` best) per pair by the threshold c where the
/// expected number of groups beyond it is `k`: Σ weights · P(rate beyond c)
/// = k, solved by bracketing and the Illinois variant of regula falsi to a
/// relative error of 1e-9 in the count; each pair's probability is then
/// P(rate beyond c). `beyond(i, c)` is P(rate > c) for pair `i` (P(rate < c)
/// for [`RankOrder::LowestFirst`]), `means` the posterior means, `kinds`
/// what kind of laws the posteriors are. When every posterior is a point mass (complete
/// pooling) the groups tied at the cut share what is left of the `k` places.
pub fn top_probabilities_by_threshold(
    means: &[f64],
    weights: &[f64],
    kinds: LawKinds,
    k: usize,
    order: RankOrder,
    beyond: impl Fn(usize, f64) -> f64 + Sync,
) -> (Vec<f64>, f64) {
    let groups: f64 = weights.iter().sum();
    let k = k as f64;
    if k >= groups {
        return (vec![1.0; means.len()], f64::NAN);
    }
    if kinds.all_points {
        return point_mass_top(means, weights, k, order);
    }
    // Terms are computed in parallel and added in one fixed order: a parallel
    // sum would add them in an order that depends on the threads' timing, and
    // the threshold (so every prob_top) could then differ between runs in the last bits.
    let expected = |c: f64| -> f64 {
        let terms: Vec<f64> = (0..means.len()).into_par_iter().map(|i| weights[i] * beyond(i, c)).collect();
        terms.iter().sum()
    };
    // Start at the k-th best posterior mean, then widen until the count is bracketed.
    let mut seen = 0.0;
    let mut start = means[0];
    let ascending: Vec<(f64, f64)> = {
        let mut pairs: Vec<(f64, f64)> = means.iter().copied().zip(weights.iter().copied()).collect();
        pairs.sort_by(|x, y| x.0.total_cmp(&y.0));
        pairs
    };
    let walk: Box<dyn Iterator<Item = &(f64, f64)>> = match order {
        RankOrder::HighestFirst => Box::new(ascending.iter().rev()),
        RankOrder::LowestFirst => Box::new(ascending.iter()),
    };
    for &(mean, weight) in walk {
        seen += weight;
        if seen >= k {
            start = mean;
            break;
        }
    }
    // Beyond is decreasing in c for the highest first, increasing for the lowest.
    let excess = |c: f64| {
        let e = expected(c) - k;
        if order == RankOrder::HighestFirst {
            e
        } else {
            -e
        }
    };
    let scale = start.abs().max(1e-300);
    let (mut low, mut high) = (start, start);
    let (mut f_low, mut f_high) = (excess(low), excess(high));
    let mut step = scale * 0.5;
    // Beta and Gamma rates are at least 0; normal values may take any sign.
    let floored = kinds.floored;
    while f_low < 0.0 {
        low -= step;
        if floored && low <= 0.0 {
            low = 0.0;
            f_low = excess(low);
            break;
        }
        step *= 2.0;
        f_low = excess(low);
    }
    step = scale * 0.5;
    while f_high > 0.0 {
        high += step;
        step *= 2.0;
        f_high = excess(high);
    }
    // Illinois: regula falsi halving the weight of a side kept twice.
    let mut side = 0;
    let mut c = start;
    for _ in 0..200 {
        c = if f_low == f_high {
            0.5 * (low + high)
        } else {
            (low * f_high - high * f_low) / (f_high - f_low)
        };
        let f = excess(c);
        if f.abs() <= 1e-9 * k || high - low <= 1e-15 * high.abs() {
            break;
        }
        if f > 0.0 {
            (low, f_low) = (c, f);
            if side == 1 {
                f_high /= 2.0;
            }
            side = 1;
        } else {
            (high, f_high) = (c, f);
            if side == -1 {
                f_low /= 2.0;
            }
            side = -1;
        }
    }
    let probabilities = (0..means.len()).into_par_iter().map(|i| beyond(i, c)).collect();
    (probabilities, c)
}

/// Every posterior a point mass: groups strictly inside the best `k` have
/// probability 1, those tied at the cut share the places left.
fn point_mass_top(means: &[f64], weights: &[f64], k: f64, order: RankOrder) -> (Vec<f64>, f64) {
    let mut by_rank: Vec<usize> = (0..means.len()).collect();
    by_rank.sort_by(|&x, &y| match order {
        RankOrder::HighestFirst => means[y].total_cmp(&means[x]),
        RankOrder::LowestFirst => means[x].total_cmp(&means[y]),
    });
    let mut probabilities = vec![0.0; means.len()];
    let mut places = k;
    let mut cut = f64::NAN;
    for_each_tie(&by_rank, means, |tie| {
        if places <= 0.0 {
            return;
        }
        let tied: f64 = tie.iter().map(|&i| weights[i]).sum();
        let share = (places / tied).min(1.0);
        for &i in tie {
            probabilities[i] = share;
        }
        cut = means[tie[0]];
        places -= tied;
    });
    (probabilities, cut)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ties_take_the_lowest_rank_of_the_tie_counting_groups() {
        let (values, weights) = ([0.5, 0.9, 0.5, 0.1], [1.0, 2.0, 1.0, 1.0]);
        assert_eq!(competition_ranks(&values, &weights, RankOrder::HighestFirst), vec![3, 1, 3, 5]);
        assert_eq!(competition_ranks(&values, &weights, RankOrder::LowestFirst), vec![2, 4, 2, 1]);
        assert_eq!(competition_ranks(&[f64::NAN, 1.0], &[1.0, 1.0], RankOrder::HighestFirst).len(), 2);
    }

    /// A worked example by hand: probabilities of no event 0.01, 0.02, 0.1,
    /// 0.3 (one group each). Prefix means: 0.01, 0.015, 0.0433.., 0.1075.
    /// With a bound of 0.05 the first three are flagged, expecting 0.13
    /// false flags.
    #[test]
    fn the_largest_prefix_within_the_bound_is_flagged() {
        let flags = posterior_fdr_flags(&[0.3, 0.01, 0.1, 0.02], &[1.0; 4], 0.05);
        assert_eq!(flags.flagged, vec![false, true, true, true]);
        let expected = [0.43 / 4.0, 0.01, 0.13 / 3.0, 0.015];
        for (got, want) in flags.fdr.iter().zip(expected) {
            assert!((got - want).abs() < 1e-15, "{got} vs {want}");
        }
        assert_eq!(flags.groups_flagged, 3.0);
        assert!((flags.expected_false - 0.13).abs() < 1e-15);
    }

    /// Ties are taken together: two groups at 0.04 after one at 0.0 have a
    /// prefix mean of 0.08 / 3, within 0.03; with a bound of 0.02 neither is
    /// flagged, though one of them alone would give a mean of 0.02.
    #[test]
    fn draws_give_the_share_of_the_best_places_for_exchangeable_groups_whatever_the_threads() {
        // Three groups with one law: each is the best with probability 1/3;
        // two point masses tied: each best half the time.
        let law = RateLaw::Beta { alpha: 2.0, beta: 5.0 };
        let in_pool = |threads: usize, laws: &[RateLaw], weights: &[f64]| {
            let pool = rayon::ThreadPoolBuilder::new().num_threads(threads).build().unwrap();
            let beyond = |i: usize, c: f64| match laws[i] {
                // Beta(2, 5): P(X > c) = (1 - c)^5 (1 + 5c), integrating the density 30 c (1 - c)^4.
                RateLaw::Beta { .. } => {
                    let c = c.clamp(0.0, 1.0);
                    (1.0 - c).powi(5) * (1.0 + 5.0 * c)
                }
                _ => 0.0,
            };
            pool.install(|| {
                top_probabilities_by_draws(laws, weights, (1, RankOrder::HighestFirst), (2000, 7), beyond)
            })
        };
        let three = in_pool(2, &[law, law], &[1.0, 2.0]);
        for p in &three {
            // 2,000 draws of smoothed probabilities: well within 0.02.
            assert!((p - 1.0 / 3.0).abs() < 0.02, "{three:?}");
        }
        assert_eq!(three, in_pool(1, &[law, law], &[1.0, 2.0]), "the same bits on one thread");
        let ties = in_pool(2, &[RateLaw::Point(0.3), RateLaw::Point(0.3), RateLaw::Point(0.1)], &[1.0; 3]);
        assert!((ties[0] - 0.5).abs() < 0.03 && (ties[1] - 0.5).abs() < 0.03 && ties[2] == 0.0, "{ties:?}");
        let lowest = in_pool(2, &[RateLaw::Point(0.3), RateLaw::Point(0.1)], &[1.0; 2]);
        let points = [RateLaw::Point(0.3), RateLaw::Point(0.1)];
        let lowest_first =
            top_probabilities_by_draws(&points, &[1.0; 2], (1, RankOrder::LowestFirst), (10, 1), |_, _| 0.0);
        assert_eq!(lowest_first, vec![0.0, 1.0]);
        assert_eq!(lowest, vec![1.0, 0.0]);
    }

    #[test]
    fn the_threshold_is_the_same_bits_on_any_number_of_threads() {
        // Many groups with rates of every size, so that any change in the
        // order the expected count is added in shows in its last bits.
        let rates: Vec<f64> =
            (0..60_000).map(|i| 0.5 + (i as f64 * 0.618_033_988_7).fract() * 20.0).collect();
        let laws: Vec<RateLaw> = rates.iter().map(|&rate| RateLaw::Gamma { shape: 1.0, rate }).collect();
        let means: Vec<f64> = rates.iter().map(|r| 1.0 / r).collect();
        let weights: Vec<f64> = (0..rates.len()).map(|i| 1.0 + (i % 7) as f64).collect();
        let threshold = |threads: usize| {
            let pool = rayon::ThreadPoolBuilder::new().num_threads(threads).build().unwrap();
            pool.install(|| {
                let above = |i: usize, c: f64| (-rates[i] * c).exp();
                let kinds = LawKinds::of(&laws);
                top_probabilities_by_threshold(&means, &weights, kinds, 500, RankOrder::HighestFirst, above).1
            })
        };
        let one = threshold(1);
        for threads in [2, 3, 4, 2, 3, 4] {
            assert_eq!(threshold(threads).to_bits(), one.to_bits(), "{threads} threads");
        }
    }

    #[test]
    fn the_threshold_holds_k_groups_in_expectation_and_point_masses_share_the_cut() {
        // Gamma(shape, rate) posteriors with closed-form tails for shape 1:
        // P(rate > c) = exp(-rate c).
        let rates = [1.0, 2.0, 4.0, 8.0];
        let laws: Vec<RateLaw> = rates.iter().map(|&rate| RateLaw::Gamma { shape: 1.0, rate }).collect();
        let means: Vec<f64> = rates.iter().map(|r| 1.0 / r).collect();
        let weights = [1.0, 1.0, 2.0, 3.0];
        let above = |i: usize, c: f64| (-rates[i] * c).exp();
        let (p, c) = top_probabilities_by_threshold(
            &means,
            &weights,
            LawKinds::of(&laws),
            2,
            RankOrder::HighestFirst,
            above,
        );
        let expected: f64 = p.iter().zip(weights).map(|(p, w)| p * w).sum();
        assert!((expected - 2.0).abs() < 1e-8, "{expected}");
        for (i, p) in p.iter().enumerate() {
            assert_eq!(*p, above(i, c));
        }
        let below = |i: usize, c: f64| 1.0 - (-rates[i] * c).exp();
        let (p, _) = top_probabilities_by_threshold(
            &means,
            &weights,
            LawKinds::of(&laws),
            2,
            RankOrder::LowestFirst,
            below,
        );
        let expected: f64 = p.iter().zip(weights).map(|(p, w)| p * w).sum();
        assert!((expected - 2.0).abs() < 1e-8, "{expected}");
        let points = [RateLaw::Point(0.5), RateLaw::Point(0.2), RateLaw::Point(0.2)];
        let (p, _) = top_probabilities_by_threshold(
            &[0.5, 0.2, 0.2],
            &[1.0, 2.0, 1.0],
            LawKinds::of(&points),
            2,
            RankOrder::HighestFirst,
            |_, _| 0.0,
        );
        assert_eq!(p, vec![1.0, 1.0 / 3.0, 1.0 / 3.0], "one place left for three tied groups");
    }

    #[test]
    fn ties_are_flagged_together_or_not_at_all() {
        let flags = posterior_fdr_flags(&[0.04, 0.0, 0.04], &[1.0; 3], 0.02);
        assert_eq!(flags.flagged, vec![false, true, false]);
        let flags = posterior_fdr_flags(&[0.04, 0.0, 0.04], &[1.0; 3], 0.03);
        assert_eq!(flags.flagged, vec![true, true, true]);
        // A pair shared by two groups is one tie of two groups.
        let shared = posterior_fdr_flags(&[0.04, 0.0], &[2.0, 1.0], 0.02);
        assert_eq!(shared.flagged, vec![false, true]);
    }
}
