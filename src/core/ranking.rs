//! Decisions over the whole table of groups, from their posteriors: ranks
//! (competition ranking, ties sharing the best rank) and flags under a
//! Bayesian false-discovery rate (the direct posterior probability approach
//! of Newton, Noueiry, Sarkar and Ahlquist, Biostatistics 5(2), 2004).
//!
//! Both work per distinct pair with the number of groups sharing it, so
//! their cost follows the pairs, not the groups.

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
