//! The median bias of a fitted prior's working coordinates, by parametric
//! bootstrap (after Laird and Louis, JASA 1987): data sets of the same
//! group sizes are drawn from the fitted prior, each is fitted as the data
//! were, and the median of the refitted working coordinates less the fit's
//! own is the bias. Corrected intervals centre their quadrature nodes on
//! the fit less that bias. With few groups the strength is estimated too
//! high (too much pooling), and intervals centred on it are too narrow; the
//! median, not the mean, is used because a share of the refits end at
//! infinite strength.

use crate::core::fit::{fit_by, Likelihood};
use crate::core::model::{Family, Prior};
use crate::core::pairs::PairTable;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;

/// Refits drawn.
pub const REPLICATES: u64 = 200;
/// A refit at the no-overdispersion boundary counts as this strength (in
/// the model's strength unit), larger than any interior refit at these sizes.
const BOUNDARY_STRENGTH: f64 = 1e6;

/// median(û*) − û in working coordinates, for the prior with natural
/// parameters `natural` fitted to `table`; None when fewer than half the
/// refits succeed. Replicate r uses the ChaCha8 stream r of `seed`, so the
/// result is the same on any number of threads.
pub fn median_bias<F: Family>(
    natural: [f64; 2],
    table: &PairTable,
    likelihood: Likelihood,
    seed: u64,
) -> Option<[f64; 2]> {
    let (mean, strength) = F::mean_strength_of_natural(natural);
    let fitted = F::working(mean, strength);
    let law = (F::TERMS.law_of)(natural);
    let cap = BOUNDARY_STRENGTH * F::strength_unit(table);
    let refits: Vec<Option<[f64; 2]>> = (0..REPLICATES)
        .into_par_iter()
        .map(|r| {
            let mut rng = ChaCha8Rng::seed_from_u64(seed);
            rng.set_stream(r);
            let (mut sizes, mut counts) = (Vec::new(), Vec::new());
            for pair in table.pairs() {
                for _ in 0..pair.weight as u64 {
                    sizes.push(pair.size);
                    counts.push(F::draw_count(law.sample(&mut rng), pair.size, &mut rng));
                }
            }
            let (drawn, _) = PairTable::from_groups(&sizes, &counts);
            let refit = fit_by::<F>(&drawn, likelihood).ok()?;
            let (m, s) = match refit.prior {
                Prior::Conjugate { natural } => F::mean_strength_of_natural(natural),
                Prior::CompletePooling { mean } => (mean, cap),
            };
            Some(F::working(m, s.min(cap)))
        })
        .collect();
    let mut kept: Vec<[f64; 2]> = refits.into_iter().flatten().collect();
    if (kept.len() as u64) * 2 < REPLICATES {
        return None;
    }
    let mut median = |i: usize| {
        kept.sort_by(|x, y| x[i].total_cmp(&y[i]));
        let n = kept.len();
        if n % 2 == 1 {
            kept[n / 2][i]
        } else {
            0.5 * (kept[n / 2 - 1][i] + kept[n / 2][i])
        }
    };
    Some([median(0) - fitted[0], median(1) - fitted[1]])
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::core::model::beta_binomial::BetaBinomial;
    use crate::core::model::RateLaw;

    #[test]
    fn the_bias_is_seeded_and_small_with_many_groups() {
        // 2,000 groups of 20 trials from Beta(4, 16): the refits scatter
        // around the fit, so the median bias is far below the sampling
        // spread (common practice: ML bias is O(1/groups)).
        let mut rng = ChaCha8Rng::seed_from_u64(3);
        let law = RateLaw::Beta { alpha: 4.0, beta: 16.0 };
        let counts: Vec<f64> =
            (0..2000).map(|_| BetaBinomial::draw_count(law.sample(&mut rng), 20.0, &mut rng)).collect();
        let (table, _) = PairTable::from_groups(&[20.0; 2000], &counts);
        let fitted = crate::core::fit::fit::<BetaBinomial>(&table).unwrap();
        let Prior::Conjugate { natural } = fitted.prior else { panic!("interior") };
        let bias = median_bias::<BetaBinomial>(natural, &table, Likelihood::Marginal, 7).unwrap();
        assert_eq!(bias, median_bias::<BetaBinomial>(natural, &table, Likelihood::Marginal, 7).unwrap());
        assert!(bias[0].abs() < 0.02 && bias[1].abs() < 0.1, "{bias:?}");
    }
}
