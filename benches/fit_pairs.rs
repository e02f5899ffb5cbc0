//! The fit's cost follows the number of distinct pairs, not the number of
//! groups: the same pairs carrying 10^5, 10^7 or 10^9 groups take the same
//! time, while 1,000, 10,000 and 100,000 distinct pairs under 10^7 groups do not.
//!
//! Pairs are invented (fixed seed): trials on a heavy-tailed grid, successes
//! from a Beta(18, 2) share, and group weights drawn then scaled to the total.
//!
//! `cargo bench --bench fit_pairs`

use criterion::{criterion_group, criterion_main, BenchmarkId, Criterion};
use ratepool::core::fit::fit;
use ratepool::core::model::beta_binomial::BetaBinomial;
use ratepool::core::pairs::{PairTable, WeightedPair};

mod common;
use common::SplitMix;

/// `pairs` distinct pairs whose weights sum to about `groups`.
fn table(pairs: usize, groups: f64) -> PairTable {
    let mut rng = SplitMix(20261202);
    let mut drawn = Vec::with_capacity(pairs);
    for i in 0..pairs {
        // Trials spread over 1..~200,000; the index keeps every pair distinct.
        let trials = (i / 7) as f64 + (3.0 / (1.0 - rng.unit()).powf(1.0 / 1.1)).floor();
        let share = 0.8 + 0.2 * rng.unit() - 0.1 * rng.unit();
        let successes = (trials * share).round().min(trials);
        drawn.push((trials, successes, 1.0 + rng.unit() * 99.0));
    }
    let total: f64 = drawn.iter().map(|d| d.2).sum();
    PairTable::from_weighted(drawn.into_iter().map(|(size, count, w)| WeightedPair {
        size,
        count,
        weight: (w * groups / total).round().max(1.0),
    }))
}

fn fits(c: &mut Criterion) {
    let mut by_groups = c.benchmark_group("fit, 10,000 distinct pairs");
    for groups in [1e5, 1e7, 1e9] {
        let t = table(10_000, groups);
        by_groups.bench_with_input(BenchmarkId::new("groups", groups), &t, |b, t| {
            b.iter(|| fit::<BetaBinomial>(t).expect("fits"))
        });
    }
    by_groups.finish();
    let mut by_pairs = c.benchmark_group("fit, 10^7 groups");
    for pairs in [1_000, 10_000, 100_000] {
        let t = table(pairs, 1e7);
        by_pairs.bench_with_input(BenchmarkId::new("distinct pairs", pairs), &t, |b, t| {
            b.iter(|| fit::<BetaBinomial>(t).expect("fits"))
        });
    }
    by_pairs.finish();
}

criterion_group!(benches, fits);
criterion_main!(benches);
