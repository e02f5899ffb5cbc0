//! Where a group's mean score sits in its prior predictive distribution:
//! what the calibration check of the star-rating model locates.
//!
//! The other models locate a count by its predictive CDF, a sum over the
//! counts. The mean score of N ratings has a predictive law over every way
//! of spreading N ratings across K levels, with no closed form; so it is
//! located by simulation instead. Nine replicate groups with the same N are
//! drawn from the group's prior predictive (shares from the prior, counts
//! multinomial), and the group's place among the ten is counted, ties
//! broken at random. Under the model the group and its replicates are ten
//! exchangeable draws, so that place is uniform on 0..=9 exactly, whatever
//! N and the scores (the rank argument of simulation-based calibration:
//! Talts, Betancourt, Simpson, Vehtari and Gelman, 2018). The ten places
//! are then the ten bins of the other models' check, with its chi-square.

use super::LevelPrior;
use rand::Rng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Binomial, Distribution, Gamma};

/// Replicate groups drawn for each group located.
pub const REPLICATES: usize = 9;

/// A group's place among [`REPLICATES`] replicates of it drawn from its
/// prior predictive: how many replicates have a lower total score Σ s_k n_k
/// and how many the same (to rounding). `counts` is the group's vector.
pub fn predictive_place(
    prior: &LevelPrior,
    scores: &[f64],
    counts: &[f64],
    rng: &mut ChaCha8Rng,
) -> (usize, usize) {
    let ratings: f64 = counts.iter().sum();
    let total = score_of(scores, counts);
    let largest = scores.iter().fold(0.0_f64, |m, s| m.max(s.abs()));
    let tie = 1e-12 * ratings * largest;
    let mut replicate = vec![0.0; counts.len()];
    let mut shares = vec![0.0; counts.len()];
    let (mut below, mut level) = (0, 0);
    for _ in 0..REPLICATES {
        match prior {
            LevelPrior::Dirichlet { shapes } => dirichlet_draw(shapes, rng, &mut shares),
            LevelPrior::Pooled { shares: pooled } => shares.copy_from_slice(pooled),
        }
        multinomial_draw(ratings as u64, &shares, rng, &mut replicate);
        let drawn = score_of(scores, &replicate);
        if (drawn - total).abs() <= tie {
            level += 1;
        } else if drawn < total {
            below += 1;
        }
    }
    (below, level)
}

/// Σ s_k n_k.
fn score_of(scores: &[f64], counts: &[f64]) -> f64 {
    scores.iter().zip(counts).map(|(s, n)| s * n).sum()
}

/// Shares from Dirichlet(`shapes`), unnormalised, in `out`: independent
/// Gamma(a_k, 1) draws over their largest. Each is drawn in logs, and below
/// shape 1 as Gamma(a + 1) · U^(1/a) (Marsaglia and Tsang, ACM TOMS 2000,
/// §5), so that small shapes, whose draws are often below the smallest
/// double, keep their order instead of all becoming 0.
fn dirichlet_draw(shapes: &[f64], rng: &mut ChaCha8Rng, out: &mut [f64]) {
    for (draw, &shape) in out.iter_mut().zip(shapes) {
        let boosted = if shape < 1.0 { shape + 1.0 } else { shape };
        let gamma = Gamma::new(boosted, 1.0).map_or(boosted, |g| g.sample(rng));
        // 1 − U lies in (0, 1], so its log is finite.
        let lifted = if shape < 1.0 { (1.0 - rng.random::<f64>()).ln() / shape } else { 0.0 };
        *draw = gamma.ln() + lifted;
    }
    let most = out.iter().fold(f64::NEG_INFINITY, |m, &l| m.max(l));
    for draw in out.iter_mut() {
        *draw = (*draw - most).exp();
    }
}

/// Counts of `ratings` draws over levels with chances proportional to
/// `weights`, in `out`: each level's count binomial given those before it,
/// with the chance the level's weight over the weight of it and those after.
fn multinomial_draw(ratings: u64, weights: &[f64], rng: &mut ChaCha8Rng, out: &mut [f64]) {
    let mut rest: f64 = weights.iter().sum();
    let mut left = ratings;
    for (count, &weight) in out.iter_mut().zip(weights) {
        let chance = if rest > 0.0 { (weight / rest).clamp(0.0, 1.0) } else { 0.0 };
        let drawn = if left == 0 { 0 } else { Binomial::new(left, chance).map_or(0, |b| b.sample(rng)) };
        *count = drawn as f64;
        left -= drawn;
        rest -= weight;
    }
    // Rounding can leave the last chances short of 1: the rest go to the last level.
    if let Some(last) = out.last_mut() {
        *last += left as f64;
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::core::special::ln_gamma;
    use rand::SeedableRng;
    use std::collections::HashMap;

    /// The Dirichlet-multinomial pmf of `counts` (the handbook formula:
    /// N!/Π n_k! · Γ(A)/Γ(A + N) · Π Γ(a_k + n_k)/Γ(a_k)).
    fn pmf(shapes: &[f64], counts: &[u64]) -> f64 {
        let total: f64 = shapes.iter().sum();
        let n: u64 = counts.iter().sum();
        let mut ln = ln_gamma(n as f64 + 1.0) + ln_gamma(total) - ln_gamma(total + n as f64);
        for (&a, &k) in shapes.iter().zip(counts) {
            ln += ln_gamma(a + k as f64) - ln_gamma(a) - ln_gamma(k as f64 + 1.0);
        }
        ln.exp()
    }

    #[test]
    fn replicate_counts_follow_the_dirichlet_multinomial() {
        // Every vector of 4 ratings over 3 levels, drawn 400,000 times, against
        // the pmf: each frequency within 4.5 binomial standard errors.
        let shapes = [0.3, 1.7, 4.0];
        let mut rng = ChaCha8Rng::seed_from_u64(7);
        let (mut shares, mut counts) = ([0.0; 3], [0.0; 3]);
        let draws = 400_000;
        let mut seen: HashMap<[u64; 3], u64> = HashMap::new();
        for _ in 0..draws {
            dirichlet_draw(&shapes, &mut rng, &mut shares);
            multinomial_draw(4, &shares, &mut rng, &mut counts);
            *seen.entry(counts.map(|c| c as u64)).or_default() += 1;
        }
        let mut total_probability = 0.0;
        for first in 0..=4u64 {
            for second in 0..=4 - first {
                let vector = [first, second, 4 - first - second];
                let p = pmf(&shapes, &vector);
                total_probability += p;
                let got = *seen.get(&vector).unwrap_or(&0) as f64 / draws as f64;
                let se = (p * (1.0 - p) / draws as f64).sqrt();
                assert!((got - p).abs() <= 4.5 * se, "{vector:?}: {got} vs {p}");
            }
        }
        assert!((total_probability - 1.0).abs() < 1e-12);
    }

    #[test]
    fn tiny_shapes_still_draw_shares_in_proportion() {
        // Shapes of 1e-3: most Gamma draws underflow; in logs the shares stay
        // defined, and all the ratings land on one level as often as the pmf says.
        let shapes = [1e-3, 2e-3, 1e-3];
        let mut rng = ChaCha8Rng::seed_from_u64(11);
        let (mut shares, mut counts) = ([0.0; 3], [0.0; 3]);
        let mut whole = [0u64; 3];
        let draws = 40_000;
        for _ in 0..draws {
            dirichlet_draw(&shapes, &mut rng, &mut shares);
            assert!(shares.iter().all(|s| s.is_finite()) && shares.contains(&1.0));
            multinomial_draw(10, &shares, &mut rng, &mut counts);
            if let Some(level) = counts.iter().position(|&c| c == 10.0) {
                whole[level] += 1;
            }
        }
        // P(all ten ratings on one level), from the pmf: near a_k / A as A → 0.
        for level in 0..3 {
            let mut vector = [0u64; 3];
            vector[level] = 10;
            let want = pmf(&shapes, &vector);
            let got = whole[level] as f64 / draws as f64;
            let se = (want * (1.0 - want) / draws as f64).sqrt();
            assert!((got - want).abs() <= 4.5 * se, "level {level}: {got} vs {want}");
        }
    }

    #[test]
    fn a_place_among_replicates_is_uniform_under_the_model() {
        // Groups drawn from the prior itself, each placed among its own
        // replicates: the ten places equally often (chi-square on 9 df below
        // its 0.999 point, 27.88), for few ratings (many ties) and many.
        let prior = LevelPrior::Dirichlet { shapes: vec![0.4, 0.6, 1.5, 3.0, 5.5] };
        let scores = [1.0, 2.0, 3.0, 4.0, 5.0];
        let mut rng = ChaCha8Rng::seed_from_u64(3);
        for ratings in [1u64, 3, 40] {
            let mut bins = [0u64; 10];
            let (mut shares, mut counts) = ([0.0; 5], [0.0; 5]);
            for _ in 0..20_000 {
                let LevelPrior::Dirichlet { shapes } = &prior else { unreachable!() };
                dirichlet_draw(shapes, &mut rng, &mut shares);
                multinomial_draw(ratings, &shares, &mut rng, &mut counts);
                let (below, ties) = predictive_place(&prior, &scores, &counts, &mut rng);
                bins[below + rng.random_range(0..=ties)] += 1;
            }
            let expected = 2000.0;
            let chi: f64 = bins.iter().map(|&b| (b as f64 - expected).powi(2) / expected).sum();
            assert!(chi < 27.88, "{ratings} ratings: {bins:?}, chi-square {chi}");
        }
    }
}
