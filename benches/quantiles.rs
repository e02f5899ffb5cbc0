//! Cost per call of the interval quantiles on realistic posterior shapes.
//!
//! Beta: posteriors Beta(18.3 + k, 2.0 + n − k) under the demo marketplace's
//! fitted prior, for n on a roughly geometric grid from 0 to 200,000 ratings and
//! shares k/n from 50% to 100%. Gamma: posteriors Gamma(6.0 + y, ·) under the
//! demo districts' prior, for expected counts 0.01 to 10,000 and ratios 0.5 to 2.
//! Each iteration computes both ends of the 95% interval of every shape (the
//! lower tail's 2.5% point and the upper tail's), as scoring does; criterion's
//! throughput (quantiles per second) inverts to the time per call.
//!
//! Mixture: the tails at one point of the 49 posteriors a corrected interval
//! mixes (a pair of 400 trials and 80 successes under a Beta(3, 12) prior
//! whose mean and strength move a few percent from node to node), each law
//! alone and side by side (`beta_tails_at`), at the interval's two ends.
//!
//! Mean score: both ends of the 95% interval of a seller's mean star score
//! (`MeanScoreLaw`), the posterior Dirichlet(a + n) under the bench sellers'
//! prior a = (0.5, 0.3, 0.6, 2.0, 6.6) (benches/generate_stars.py), for n on
//! the size grid up to 5,000 ratings spread over the levels in five profiles.
//!
//! `cargo bench --bench quantiles`

use criterion::{criterion_group, criterion_main, Criterion, Throughput};
use ratepool::core::incomplete::{beta_tails, beta_tails_at, BetaLaw};
use ratepool::core::model::dirichlet_multinomial::mean_score::MeanScoreLaw;
use ratepool::core::quantile::{beta_quantile, gamma_quantile, Tail};
use std::hint::black_box;

fn sizes() -> Vec<f64> {
    let mut n = vec![0.0, 1.0, 2.0, 3.0];
    let mut x = 5.0_f64;
    while x <= 200_000.0 {
        n.push(x.round());
        x *= 1.6;
    }
    n
}

fn beta_shapes() -> Vec<(f64, f64)> {
    let mut shapes = Vec::new();
    for n in sizes() {
        for share in [0.5, 0.7, 0.8, 0.9, 0.95, 0.99, 1.0] {
            let k = (n * share).round();
            shapes.push((18.3 + k, 2.0 + n - k));
        }
    }
    shapes
}

fn gamma_shapes() -> Vec<f64> {
    let mut shapes = Vec::new();
    let mut expected = 0.01_f64;
    while expected <= 10_000.0 {
        for ratio in [0.5, 0.8, 1.0, 1.25, 2.0] {
            shapes.push(6.0 + (expected * ratio).round());
        }
        expected *= 1.6;
    }
    shapes
}

fn mean_score_shapes() -> Vec<[f64; 5]> {
    let prior = [0.5, 0.3, 0.6, 2.0, 6.6];
    let profiles = [
        [0.05, 0.03, 0.06, 0.2, 0.66],
        [0.0, 0.0, 0.0, 0.0, 1.0],
        [0.3, 0.1, 0.1, 0.2, 0.3],
        [0.0, 0.0, 0.1, 0.5, 0.4],
        [0.6, 0.2, 0.1, 0.05, 0.05],
    ];
    let mut shapes = Vec::new();
    for n in sizes().into_iter().filter(|n| *n <= 5_000.0) {
        for profile in &profiles {
            shapes.push(std::array::from_fn(|k| prior[k] + (n * profile[k]).round()));
        }
    }
    shapes
}

fn quantiles(c: &mut Criterion) {
    let beta = beta_shapes();
    let mut group = c.benchmark_group("quantile per call");
    group.throughput(Throughput::Elements(2 * beta.len() as u64));
    group.bench_function(format!("beta, {} posterior shapes, both ends", beta.len()), |bench| {
        bench.iter(|| {
            beta.iter()
                .map(|&(a, b)| {
                    let (a, b) = (black_box(a), black_box(b));
                    beta_quantile(a, b, Tail::Lower, 0.025) + beta_quantile(a, b, Tail::Upper, 0.025)
                })
                .sum::<f64>()
        })
    });
    let gamma = gamma_shapes();
    group.throughput(Throughput::Elements(2 * gamma.len() as u64));
    group.bench_function(format!("gamma, {} posterior shapes, both ends", gamma.len()), |bench| {
        bench.iter(|| {
            gamma
                .iter()
                .map(|&a| {
                    let a = black_box(a);
                    gamma_quantile(a, Tail::Lower, 0.025) + gamma_quantile(a, Tail::Upper, 0.025)
                })
                .sum::<f64>()
        })
    });
    group.finish();
    // Beyond realistic posteriors: the cost at the large shapes of the accuracy
    // sweep, where each evaluation sums about √shape terms.
    let mut large = c.benchmark_group("quantile per call, large shapes");
    for shape in [1e5, 1e6, 1e7] {
        large.throughput(Throughput::Elements(2));
        large.bench_function(format!("beta, a = b = {shape:e}"), |bench| {
            bench.iter(|| {
                let a = black_box(shape);
                beta_quantile(a, a, Tail::Lower, 0.025) + beta_quantile(a, a, Tail::Upper, 0.025)
            })
        });
        large.bench_function(format!("gamma, shape {shape:e}"), |bench| {
            bench.iter(|| {
                let a = black_box(shape);
                gamma_quantile(a, Tail::Lower, 0.025) + gamma_quantile(a, Tail::Upper, 0.025)
            })
        });
    }
    large.finish();
    let mut mean_score = c.benchmark_group("mean score quantile per call");
    let laws = mean_score_shapes();
    mean_score.throughput(Throughput::Elements(2 * laws.len() as u64));
    let scores = [1.0, 2.0, 3.0, 4.0, 5.0];
    mean_score.bench_function(format!("{} posterior Dirichlets, both ends", laws.len()), |bench| {
        bench.iter(|| {
            laws.iter()
                .map(|shapes| {
                    let law = MeanScoreLaw { shapes: black_box(shapes), scores: &scores };
                    law.quantile(Tail::Lower, 0.025) + law.quantile(Tail::Upper, 0.025)
                })
                .sum::<f64>()
        })
    });
    mean_score.finish();
    let mut mixture = c.benchmark_group("tails of a corrected posterior's 49 laws");
    let laws: Vec<BetaLaw> = (0..49)
        .map(|node| {
            let strength = 15.0 * (1.0 + 0.05 * (f64::from(node / 7) - 3.0));
            let mean = 0.2 * (1.0 + 0.02 * (f64::from(node % 7) - 3.0));
            BetaLaw::new(mean * strength + 80.0, (1.0 - mean) * strength + 320.0)
        })
        .collect();
    mixture.throughput(Throughput::Elements(2 * laws.len() as u64));
    let ends = [0.165, 0.24];
    mixture.bench_function("each law alone, both ends", |bench| {
        bench.iter(|| {
            ends.iter()
                .map(|&x| laws.iter().map(|l| beta_tails(l.a, l.b, black_box(x), 1.0 - x).lower).sum::<f64>())
                .sum::<f64>()
        })
    });
    let mut out = Vec::new();
    mixture.bench_function("side by side, both ends", |bench| {
        bench.iter(|| {
            ends.iter()
                .map(|&x| {
                    beta_tails_at(&laws, black_box(x), 1.0 - x, &mut out);
                    out.iter().map(|t| t.lower).sum::<f64>()
                })
                .sum::<f64>()
        })
    });
    mixture.finish();
}

criterion_group!(benches, quantiles);
criterion_main!(benches);
