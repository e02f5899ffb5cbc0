//! The neighbourhood variant of the gamma-Poisson model: Marshall's local
//! empirical Bayes (Marshall 1991, Applied Statistics 40: 283-294). Each
//! area's prior is fitted by moments to its neighbourhood (the area and its
//! neighbours) instead of to all areas:
//!
//! * local mean m_i = Σ O_j / Σ E_j over the neighbourhood S_i;
//! * local variance v_i = Σ E_j (O_j/E_j − m_i)² / Σ E_j − m_i / Ē_i, with Ē_i
//!   the mean exposure over S_i, set to 0 where negative;
//! * the prior is Gamma(shape m_i²/v_i, rate m_i/v_i), so the posterior mean
//!   is Marshall's m_i + C_i (O_i/E_i − m_i) with C_i = v_i / (v_i + m_i/E_i).
//!
//! Where v_i = 0 Marshall's estimate is m_i itself: the neighbourhood's
//! rates vary no more than Poisson noise, so it is pooled into one rate. A
//! point mass at m_i would claim that rate known exactly (a point interval,
//! exceedance 0 or 1), though it rests on the neighbourhood's counts alone.
//! The prior there is the neighbours' pooled counts instead,
//! Gamma(Σ O_j, Σ E_j) over the neighbours j ≠ i: the area's posterior is
//! then Gamma(Σ O_j, Σ E_j) over the whole neighbourhood, whose mean is still
//! m_i (Marshall's estimate) and whose spread is that of the pooled rate
//! (a point mass remains only where the neighbours have no events).
//!
//! Pure numerics: the neighbour relation comes in as area numbers.

use super::Prior;
use rayon::prelude::*;

/// Who neighbours whom: for every area, its neighbours (symmetric, each
/// once, never the area itself), as area numbers.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Neighbourhoods {
    /// Where each area's neighbours start in `members` (one more than areas).
    offsets: Vec<usize>,
    members: Vec<u32>,
}

impl Neighbourhoods {
    /// The relation of `areas` areas given by `pairs` of area numbers, made
    /// symmetric; a pair listed twice (or from both sides) counts once, and an
    /// area paired with itself is not its own neighbour.
    pub fn from_pairs(areas: usize, pairs: impl IntoIterator<Item = (u32, u32)>) -> Self {
        let mut both: Vec<(u32, u32)> =
            pairs.into_iter().filter(|(a, b)| a != b).flat_map(|(a, b)| [(a, b), (b, a)]).collect();
        both.sort_unstable();
        both.dedup();
        let mut offsets = vec![0; areas + 1];
        for &(a, _) in &both {
            offsets[a as usize + 1] += 1;
        }
        for i in 0..areas {
            offsets[i + 1] += offsets[i];
        }
        let members = both.into_iter().map(|(_, b)| b).collect();
        Neighbourhoods { offsets, members }
    }

    /// The number of areas.
    pub fn areas(&self) -> usize {
        self.offsets.len() - 1
    }

    /// The neighbours of area `i`.
    pub fn of(&self, i: usize) -> &[u32] {
        &self.members[self.offsets[i]..self.offsets[i + 1]]
    }
}

/// An area's prior from its neighbourhood.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct LocalPrior {
    /// m_i: the neighbourhood's pooled rate.
    pub mean: f64,
    /// v_i: the spread of the rates about it beyond Poisson noise (0: none).
    pub variance: f64,
    /// Σ O_j over the neighbours (the area left out).
    pub neighbour_events: f64,
    /// Σ E_j over the neighbours (the area left out).
    pub neighbour_exposure: f64,
}

impl LocalPrior {
    /// The prior's Gamma (shape, rate), or None for a point mass (v_i = 0).
    pub fn gamma(&self) -> Option<(f64, f64)> {
        (self.variance > 0.0 && self.mean > 0.0)
            .then(|| (self.mean * self.mean / self.variance, self.mean / self.variance))
    }

    /// The prior as the gamma-Poisson model holds it (natural parameters
    /// shape and rate): Gamma(m_i²/v_i, m_i/v_i) where v_i > 0; where v_i = 0
    /// the neighbours' pooled counts, Gamma(Σ O_j, Σ E_j) over j ≠ i (see the
    /// module's note), or a point mass at m_i where they hold no events.
    pub fn gamma_prior(&self) -> Prior {
        match self.gamma() {
            Some((shape, rate)) => Prior::Conjugate { natural: [shape, rate] },
            None if self.neighbour_events > 0.0 && self.neighbour_exposure > 0.0 => {
                Prior::Conjugate { natural: [self.neighbour_events, self.neighbour_exposure] }
            }
            None => Prior::CompletePooling { mean: self.mean },
        }
    }

    /// Marshall's shrinkage factor C_i of an area with exposure `exposure`:
    /// the weight of its own rate in its posterior mean.
    pub fn own_weight(&self, exposure: f64) -> f64 {
        if self.variance > 0.0 {
            self.variance * exposure / (self.variance * exposure + self.mean)
        } else {
            0.0
        }
    }

    /// The posterior mean of an area with `events` over `exposure`:
    /// m_i + C_i (O_i/E_i − m_i), written as (m_i² + v_i O_i)/(m_i + v_i E_i),
    /// which holds at E_i = 0 too.
    pub fn posterior_mean(&self, events: f64, exposure: f64) -> f64 {
        let (m, v) = (self.mean, self.variance);
        if v > 0.0 {
            (m * m + v * events) / (m + v * exposure)
        } else {
            m
        }
    }
}

/// Each area's local prior from the events and exposures of all areas;
/// None for an area with no neighbours, or whose neighbourhood has no
/// exposure (it takes the all-areas prior instead).
pub fn local_priors(
    events: &[f64],
    exposure: &[f64],
    neighbourhoods: &Neighbourhoods,
) -> Vec<Option<LocalPrior>> {
    (0..neighbourhoods.areas())
        .into_par_iter()
        .map(|i| {
            let around = neighbourhoods.of(i);
            if around.is_empty() {
                return None;
            }
            let members = || std::iter::once(i).chain(around.iter().map(|&j| j as usize));
            let (observed, exposed) =
                members().fold((0.0, 0.0), |(o, e), j| (o + events[j], e + exposure[j]));
            if exposed <= 0.0 {
                return None;
            }
            let mean = observed / exposed;
            // A member with no exposure adds nothing to the spread (E_j (O_j/E_j − m)² → 0 as E_j → 0 with O_j = 0).
            let spread = members()
                .filter(|&j| exposure[j] > 0.0)
                .map(|j| {
                    let gap = events[j] / exposure[j] - mean;
                    exposure[j] * gap * gap
                })
                .sum::<f64>()
                / exposed;
            let mean_exposure = exposed / (around.len() + 1) as f64;
            let variance = (spread - mean / mean_exposure).max(0.0);
            let (neighbour_events, neighbour_exposure) = (observed - events[i], exposed - exposure[i]);
            Some(LocalPrior { mean, variance, neighbour_events, neighbour_exposure })
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_relation_is_symmetric_and_each_pair_counts_once() {
        let hoods = Neighbourhoods::from_pairs(4, [(0, 1), (1, 0), (2, 1), (3, 3), (0, 1)]);
        assert_eq!(hoods.of(0), &[1]);
        assert_eq!(hoods.of(1), &[0, 2]);
        assert_eq!(hoods.of(2), &[1]);
        assert!(hoods.of(3).is_empty(), "an area paired with itself has no neighbours");
    }

    #[test]
    fn two_alike_areas_pool_completely_and_the_gamma_posterior_is_marshalls_estimate() {
        // Rates within Poisson noise of each other: v = 0, so the posterior is the local mean.
        let hoods = Neighbourhoods::from_pairs(3, [(0, 1)]);
        let priors = local_priors(&[10.0, 11.0, 3.0], &[10.0, 10.0, 1.0], &hoods);
        let (alike, other) = (priors[0].unwrap(), priors[1].unwrap());
        assert_eq!((alike.mean, alike.variance), (other.mean, other.variance));
        assert_eq!(alike.mean, 21.0 / 20.0);
        assert_eq!(alike.variance, 0.0);
        assert_eq!(alike.posterior_mean(10.0, 10.0), alike.mean);
        // Its Gamma prior is the neighbour's counts; the posterior, the pair's pooled counts.
        assert_eq!(alike.gamma_prior(), Prior::Conjugate { natural: [11.0, 10.0] });
        assert_eq!(other.gamma_prior(), Prior::Conjugate { natural: [10.0, 10.0] });
        assert_eq!(priors[2], None, "no neighbours: the all-areas prior instead");
        // Rates far apart: v > 0, and the Gamma posterior mean (a + O)/(b + E) is m + C (O/E − m).
        let hoods = Neighbourhoods::from_pairs(2, [(0, 1)]);
        let prior = local_priors(&[2.0, 40.0], &[10.0, 10.0], &hoods)[0].unwrap();
        let (shape, rate) = prior.gamma().unwrap();
        let marshall = prior.mean + prior.own_weight(10.0) * (2.0 / 10.0 - prior.mean);
        assert!(((shape + 2.0) / (rate + 10.0) - marshall).abs() < 1e-15);
        assert!((prior.posterior_mean(2.0, 10.0) - marshall).abs() < 1e-15);
    }
}
