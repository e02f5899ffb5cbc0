//! The beta-binomial model for proportions.
//!
//! Group i has k_i successes in n_i trials; θ_i ~ Beta(α, β) and
//! k_i | θ_i ~ Binomial(n_i, θ_i), so k_i ~ BetaBinomial(n_i, α, β) and the
//! posterior is Beta(α + k_i, β + n_i − k_i). Prior mean μ = α/(α+β), strength
//! s = α+β, pool weight B_i = s/(s + n_i).
//!
//! Working coordinates: u = (logit μ, ln s). The log pmf is a binomial pmf
//! about the posterior mean plus small Loader-form terms (see `log_pmf_at`),
//! so it tends to the binomial smoothly as s → ∞; the score and curvature for
//! ln s use R(x, m) = ln Γ(x+m) − ln Γ(x) − m ln x style excesses while n ≤ s
//! and plain digamma differences beyond (see `special`).

use super::{
    point_mass_tails, CovariateTerms, Evaluation, Family, FunnelAxis, ModelTerms, PairFault, PlotTerms,
    Posterior, Prior, PriorFigure, PriorKey, PriorWords, RateLaw, RateRange, RawValue, Unidentifiable,
    ValueRule,
};
use crate::core::incomplete::beta_tails;
use crate::core::pairs::{PairTable, WeightedPair};
use crate::core::quantile::{beta_quantile, Tail};
use crate::core::special::{
    deviance_term, ln_beta_remainder, ln_binomial_pmf, ln_binomial_pmf_pq, PolygammaBase,
};

/// The beta-binomial family (see the module docs).
#[derive(Debug, Clone, Copy, Default)]
pub struct BetaBinomial;

/// μ and 1 − μ from logit μ, each without cancellation.
fn mean_and_complement(logit: f64) -> (f64, f64) {
    if logit >= 0.0 {
        let e = (-logit).exp();
        (1.0 / (1.0 + e), e / (1.0 + e))
    } else {
        let e = logit.exp();
        (e / (1.0 + e), 1.0 / (1.0 + e))
    }
}

/// ln BetaBinomial(k; n, α, β), the exact log pmf with the binomial coefficient.
pub fn ln_pmf(k: f64, n: f64, alpha: f64, beta: f64) -> f64 {
    let s = alpha + beta;
    log_pmf_at(k, n, alpha / s, beta / s, s)
}

/// Terms summed on each side of k before [`beta_binomial_cdf`] takes the counts as continuous.
const CDF_TERMS: u32 = 20_000;

/// (P(K < k), P(K ≤ k)) for K ~ BetaBinomial(n, α, β), by summing the pmf
/// out from k in both directions with the ratio of neighbouring terms,
/// p(j + 1)/p(j) = (n − j)(j + α) / ((j + 1)(n − j − 1 + β)), each side until
/// its terms fall below 1e-17 of its sum, in units of p(k) and rescaled by
/// 2^-600 when a side grows past 2^600, so a count deep in a tail neither
/// overflows nor loses the other side. The work follows the spread of the
/// distribution around k (a few standard deviations), not n; where that
/// spread needs more than [`CDF_TERMS`] terms a side (n in the billions
/// under a wide prior: found by fuzzing, where the sum ran for hours), the
/// terms summed stay exact and the smooth far tail beyond them is taken as
/// continuous: K/n as the Beta matched to its mean and variance (the prior's
/// Beta when the prior's spread dominates, the binomial proportion's when
/// the binomial noise does). Its error is far below the tenths the
/// calibration check, the only user, bins these in.
pub fn beta_binomial_cdf(n: f64, k: f64, alpha: f64, beta: f64) -> (f64, f64) {
    cdf_summed_up_to(n, k, alpha, beta, CDF_TERMS)
}

/// [`beta_binomial_cdf`] with at most `most` terms a side before the continuous form.
fn cdf_summed_up_to(n: f64, k: f64, alpha: f64, beta: f64, most: u32) -> (f64, f64) {
    const BIG: f64 = 4.149515568880993e180; // 2^600
    let step_up = |j: f64| (n - j) * (j + alpha) / ((j + 1.0) * (n - j - 1.0 + beta));
    // Each side: (sum, number of 2^-600 rescalings, where it stopped short), in units of p(k).
    let side = |down: bool| -> (f64, i32, Option<f64>) {
        let (mut sum, mut term, mut scale, mut j) = (0.0, 1.0, 0, k);
        let mut terms = 0;
        loop {
            terms += 1;
            if terms > most {
                return (sum, scale, Some(j));
            }
            if down {
                if j <= 0.0 {
                    break;
                }
                term /= step_up(j - 1.0);
                j -= 1.0;
            } else {
                if j >= n {
                    break;
                }
                term *= step_up(j);
                j += 1.0;
            }
            sum += term;
            if sum > BIG {
                (sum, term, scale) = (sum / BIG, term / BIG, scale + 1);
            }
            if term <= 1e-17 * sum || !term.is_finite() {
                break;
            }
        }
        (sum, scale, None)
    };
    let ((below, below_scale, below_stop), (above, above_scale, above_stop)) = (side(true), side(false));
    let ln_big = 600.0 * std::f64::consts::LN_2;
    if below_stop.is_some() || above_stop.is_some() {
        // The terms summed stay exact, in absolute terms from ln p(k); the
        // smooth far tail beyond where a side stopped is taken as
        // continuous: K/n as the Beta matched to its mean and variance
        // m(1 − m)(s + n)/(n(s + 1)), s = α + β.
        let (s, m) = (alpha + beta, alpha / (alpha + beta));
        let matched = (n * (s + 1.0) / (s + n) - 1.0).max(1e-9);
        let continuous = |at: f64| {
            let x = (at / n).clamp(0.0, 1.0);
            crate::core::incomplete::beta_tails(m * matched, (1.0 - m) * matched, x, 1.0 - x)
        };
        let ln_at_k = ln_pmf(k, n, alpha, beta);
        let absolute = |sum: f64, scale: i32| {
            if sum > 0.0 {
                (sum.ln() + f64::from(scale) * ln_big + ln_at_k).exp()
            } else {
                0.0
            }
        };
        let less = absolute(below, below_scale) + below_stop.map_or(0.0, |j| continuous(j - 0.5).lower);
        let greater = absolute(above, above_scale) + above_stop.map_or(0.0, |j| continuous(j + 0.5).upper);
        return (less.min(1.0), (1.0 - greater).max(0.0));
    }
    // In logs: total = below + 1 + above, each side at its own scale.
    let ln_below = below.ln() + f64::from(below_scale) * ln_big;
    let ln_above = above.ln() + f64::from(above_scale) * ln_big;
    let top = ln_below.max(ln_above).max(0.0);
    let ln_total = top + ((ln_below - top).exp() + (-top).exp() + (ln_above - top).exp()).ln();
    let share = |ln_part: f64| (ln_part - ln_total).exp();
    let less = if below > 0.0 { share(ln_below) } else { 0.0 };
    let greater = if above > 0.0 { share(ln_above) } else { 0.0 };
    (less, 1.0 - greater)
}

/// The log pmf from the prior mean μ, its complement ν and strength s, taken
/// about the posterior mean p₁ = (k + a)/(n + s):
/// ln Binomial(k; n, p₁) − bd0(a, s p₁) − bd0(b, s(1 − p₁)) + L(k + a, n − k + b)
/// − L(a, b), with Loader's bd0 and L the small remainder of ln B
/// ([`ln_beta_remainder`]). Every term is small whatever n and s, so no
/// lnΓ value of size n ln n is formed and subtracted: checked against mpmath
/// to 1e-13 relative for n up to 1e12 and s from 1e-3 to 1e15. As s → ∞,
/// p₁ → μ and the extra terms vanish: the pmf tends to the binomial.
fn log_pmf_at(k: f64, n: f64, mu: f64, nu: f64, s: f64) -> f64 {
    let (a, b) = (mu * s, nu * s);
    log_pmf_given(k, n, (a, b, s), ln_beta_remainder(a, b))
}

/// [`log_pmf_at`] with α, β, s and L(α, β) given, as a fit shares them over pairs.
fn log_pmf_given(k: f64, n: f64, (a, b, s): (f64, f64, f64), prior_remainder: f64) -> f64 {
    let total = n + s;
    let (p1, q1) = ((k + a) / total, (n - k + b) / total);
    ln_binomial_pmf_pq(k, n, p1, q1) - deviance_term(a, s * p1) - deviance_term(b, s * q1)
        + ln_beta_remainder(k + a, n - k + b)
        - prior_remainder
}

/// What every pair's terms share at one point u of a fit: μ, 1 − μ, α, β
/// and s, L(α, β), and ψ and ψ′ at α, β and s.
#[derive(Debug, Clone, Copy)]
pub struct BetaPoint {
    mu: f64,
    nu: f64,
    s: f64,
    a: f64,
    b: f64,
    prior_remainder: f64,
    at_a: PolygammaBase,
    at_b: PolygammaBase,
    at_s: PolygammaBase,
}

/// Tables whose largest number of trials is at most this many times their
/// number of distinct pairs are summed by [`CountTails`] while a fit
/// searches; a point then costs a few operations per count up to the largest
/// (three tails), not a dozen special functions per pair.
const TAIL_COUNTS_PER_PAIR: f64 = 2.0;

/// A table of whole counts as three tails: for j = 0, 1, …, how many groups
/// have more than j successes, more than j failures and more than j trials
/// (T_k, T_m, T_n). Since ln Γ(x + k) − ln Γ(x) = Σ_{j<k} ln(x + j), the
/// marginal log likelihood summed over the table is
/// Σ w ln C(n, k) + K ln μ + M ln ν + Σ_j [T_k(j) ln(1 + j/α) + T_m(j) ln(1 + j/β) − T_n(j) ln(1 + j/s)],
/// with K and M the successes and failures of all groups (K + M = N), and its
/// derivatives in u are sums over j of the same shape (the digamma and
/// trigamma differences as sums of 1/(x + j) and 1/(x + j)²).
struct CountTails {
    /// T_k(j), T_m(j) and T_n(j) side by side, j = 0 to the largest number of trials − 1.
    tails: Vec<[f64; 3]>,
    /// Σ w ln C(n, k).
    constant: f64,
    /// K and M.
    successes: f64,
    failures: f64,
}

/// Per point, the sums over j of one tail's terms at x (α, β or s), each
/// as [`CountTails::at`] combines them.
#[derive(Default)]
struct TailTerms {
    /// Σ T(j)/(x + j): ψ(x + count) − ψ(x), summed over the groups.
    first: f64,
    /// Σ T(j)/(x + j)²: ψ′(x) − ψ′(x + count), summed.
    second: f64,
}

/// A sum with Neumaier's compensation: the rounding of each addition is
/// carried beside the sum and added at the end.
#[derive(Default, Clone, Copy)]
struct CompensatedSum {
    sum: f64,
    error: f64,
}

impl CompensatedSum {
    fn add(&mut self, term: f64) {
        let next = self.sum + term;
        self.error +=
            if self.sum.abs() >= term.abs() { (self.sum - next) + term } else { (term - next) + self.sum };
        self.sum = next;
    }

    fn value(self) -> f64 {
        self.sum + self.error
    }
}

impl CountTails {
    /// The tails of `table`, when its counts are whole and its largest
    /// number of trials small enough for them to be the quicker form.
    fn of(table: &PairTable) -> Option<Self> {
        let pairs = table.pairs();
        let whole = |x: f64| x >= 0.0 && x.fract() == 0.0;
        let largest = table.max_size();
        if pairs.is_empty()
            || largest > TAIL_COUNTS_PER_PAIR * pairs.len() as f64
            || !pairs.iter().all(|p| whole(p.size) && whole(p.count) && p.count <= p.size)
        {
            return None;
        }
        let len = largest as usize;
        // Groups by their number of successes, failures and trials, then the tails from the top.
        let mut at = vec![[0.0f64; 3]; len + 1];
        let (mut successes, mut failures) = (0.0, 0.0);
        for p in pairs {
            let (n, k) = (p.size as usize, p.count as usize);
            at[k][0] += p.weight;
            at[n - k][1] += p.weight;
            at[n][2] += p.weight;
            successes += p.weight * p.count;
            failures += p.weight * (p.size - p.count);
        }
        let mut tails = vec![[0.0f64; 3]; len];
        let mut above = [0.0f64; 3];
        for j in (0..len).rev() {
            for axis in 0..3 {
                above[axis] += at[j + 1][axis];
            }
            tails[j] = above;
        }
        // Σ w ln C(n, k) = Σ_j (T_n(j) − T_k(j) − T_m(j)) ln(j + 1), as ln n! = Σ_{j<n} ln(j + 1).
        let mut constant = CompensatedSum::default();
        for (j, [k, m, n]) in tails.iter().enumerate() {
            constant.add((n - k - m) * (j as f64).ln_1p());
        }
        let constant = constant.value();
        Some(CountTails { tails, constant, successes, failures })
    }

    /// The log likelihood summed over the table and its derivatives at `u`.
    fn at(&self, u: [f64; 2]) -> Evaluation {
        let (mu, nu) = mean_and_complement(u[0]);
        let s = u[1].exp();
        let (a, b) = (mu * s, nu * s);
        let c = s * mu * nu;
        // The first two tails' sums alone: s enters the derivatives only through the excess sums.
        let mut terms = [TailTerms::default(), TailTerms::default()];
        // The log and excess sums combine the three tails at each j before
        // adding (they largely cancel); the logs are added compensated.
        let mut log = CompensatedSum::default();
        let (mut excess, mut excess_slope) = (0.0f64, 0.0f64);
        for (j, tail) in self.tails.iter().enumerate() {
            let j = j as f64;
            let mut log_term = 0.0;
            let mut excess_term = 0.0;
            let mut slope_term = 0.0;
            for (axis, (x, sign)) in [(a, 1.0), (b, 1.0), (s, -1.0)].into_iter().enumerate() {
                let t = tail[axis];
                let inverse = 1.0 / (x + j);
                let share = j * inverse;
                log_term += sign * t * (j / x).ln_1p();
                excess_term += sign * t * share;
                slope_term += sign * t * x * share * inverse;
                if let Some(sums) = terms.get_mut(axis) {
                    sums.first += t * inverse;
                    sums.second += t * inverse * inverse;
                }
            }
            log.add(log_term);
            excess += excess_term;
            excess_slope += slope_term;
        }
        let times_ln = |w: f64, x: f64| if w == 0.0 { 0.0 } else { w * x.ln() };
        let log_likelihood =
            self.constant + times_ln(self.successes, mu) + times_ln(self.failures, nu) + log.value();
        let [on_a, on_b] = terms;
        let g1 = c * (on_a.first - on_b.first);
        // ∂/∂ln s of Σ T ln(x + j) over the three tails is K − E_α + M − E_β − N + E_s, E_x = Σ T j/(x + j).
        let g2 = -excess;
        let h11 = c * (nu - mu) * (on_a.first - on_b.first) - c * c * (on_a.second + on_b.second);
        let h12 = g1 - c * (a * on_a.second - b * on_b.second);
        let h22 = excess_slope;
        Evaluation { log_likelihood, gradient: [g1, g2], hessian: [[h11, h12], [h12, h22]] }
    }
}

impl BetaBinomial {
    /// [`Family::at_point`] at `u` with the strength's polygamma values given.
    fn with_strength_base(u: [f64; 2], at_s: PolygammaBase) -> BetaPoint {
        let (mu, nu) = mean_and_complement(u[0]);
        let s = u[1].exp();
        let (a, b) = (mu * s, nu * s);
        BetaPoint {
            mu,
            nu,
            s,
            a,
            b,
            prior_remainder: ln_beta_remainder(a, b),
            at_a: PolygammaBase::new(a),
            at_b: PolygammaBase::new(b),
            at_s,
        }
    }
}

impl Family for BetaBinomial {
    const TERMS: ModelTerms = ModelTerms {
        name: "beta-binomial",
        count_role: "successes",
        size_role: "trials",
        count_rule: ValueRule::WholeCount,
        size_rule: ValueRule::WholeCount,
        pair_fault: |size, count| {
            (count > size).then(|| PairFault::Count(format!("{count} successes exceed {size} trials")))
        },
        size_hint: |value, count_column, size_column| {
            // Trials that are not whole are most often expected counts or an exposure.
            (value.fract() != 0.0 && value > 0.0).then(|| {
                format!(
                    "trials are counted in whole numbers; if '{size_column}' holds expected counts or an \
                     exposure, use the gamma-poisson model: --model gamma-poisson --events {count_column} \
                     --exposure {size_column}"
                )
            })
        },
        raw_value: RawValue::Ratio,
        parameter_names: ["alpha", "beta"],
        raw_column: "raw_proportion",
        degenerate_data: "successes or all failures",
        rates: RateRange::Proportion,
        mean_only_data:
            "every group has at most one trial, so the data say nothing about how much groups differ",
        overdispersion_test: "Tarone",
        restricted_likelihood: false,
        grid_spacing: super::free::Spacing::ArcsineRoot,
        covariate_terms: CovariateTerms { link: "logit", common_key: "strength", common_sign: 1.0 },
        law_of: |[alpha, beta]| RateLaw::Beta { alpha, beta },
        prior_keys: &[
            PriorKey { key: "alpha", figure: PriorFigure::Natural(0) },
            PriorKey { key: "beta", figure: PriorFigure::Natural(1) },
            PriorKey { key: "alpha_se", figure: PriorFigure::NaturalSe(0) },
            PriorKey { key: "beta_se", figure: PriorFigure::NaturalSe(1) },
            PriorKey { key: "mean", figure: PriorFigure::Mean },
            PriorKey { key: "mean_se", figure: PriorFigure::MeanSe },
            PriorKey { key: "strength", figure: PriorFigure::Strength },
            PriorKey { key: "strength_se", figure: PriorFigure::StrengthSe },
        ],
        prior_words: PriorWords {
            law: "Beta",
            terminal: &[("alpha = ", "alpha", false), ("beta = ", "beta", false)],
            page: &[("α = ", "alpha"), ("β = ", "beta")],
        },
        plots: PlotTerms {
            raw_label: "raw proportion (successes / trials)",
            size_noun: "trials",
            funnel_noun: "trials",
            funnel_axis: "trials (log scale)",
            funnel_x: FunnelAxis::Size,
            unit_variance: |p| p * (1.0 - p),
        },
        local_prior: None,
    };

    type AtPoint = BetaPoint;

    fn at_point(u: [f64; 2]) -> BetaPoint {
        Self::with_strength_base(u, PolygammaBase::new(u[1].exp()))
    }

    fn at_mean(at: &BetaPoint, u: [f64; 2]) -> BetaPoint {
        debug_assert_eq!(at.s.to_bits(), u[1].exp().to_bits());
        Self::with_strength_base(u, at.at_s)
    }

    fn pair_terms_at(at: &BetaPoint, pair: &WeightedPair) -> Evaluation {
        let (n, k) = (pair.size, pair.count);
        if n == 0.0 {
            return Evaluation::default();
        }
        let BetaPoint { mu, nu, s, a, b, .. } = *at;
        let log_likelihood = log_pmf_given(k, n, (a, b, s), at.prior_remainder);
        let c = s * mu * nu;
        let (dpa, dpb) = (at.at_a.digamma_diff(k), at.at_b.digamma_diff(n - k));
        let (tpa, tpb) = (at.at_a.trigamma_diff(k), at.at_b.trigamma_diff(n - k));
        let g1 = c * (dpa - dpb);
        // Score for ln s: Σ x[ψ(x + m) − ψ(x)] over (a, k), (b, n − k), minus (s, n). With
        // n ≤ s each term is close to m and the sum of size n²/s, so the excess forms
        // x[ψ(x + m) − ψ(x)] − m carry it (the m's cancel exactly: k + (n − k) − n = 0). With
        // n > s those excesses are each of size n and would cancel to the sum's O(s),
        // losing n·ε: the plain terms, each of size s ln(n/s), keep the digits.
        let g2 = if n <= s {
            at.at_a.scaled_digamma_excess(k) + at.at_b.scaled_digamma_excess(n - k)
                - at.at_s.scaled_digamma_excess(n)
        } else {
            a * dpa + b * dpb - s * at.at_s.digamma_diff(n)
        };
        let h11 = c * (1.0 - 2.0 * mu) * (dpa - dpb) + c * c * (tpa + tpb);
        let h12 = g1 + c * (a * tpa - b * tpb);
        let h22 = at.at_a.scaled_trigamma_excess(k) + at.at_b.scaled_trigamma_excess(n - k)
            - at.at_s.scaled_trigamma_excess(n);
        Evaluation { log_likelihood, gradient: [g1, g2], hessian: [[h11, h12], [h12, h22]] }
    }

    fn search_sums(table: &PairTable) -> Option<Box<dyn Fn([f64; 2]) -> Evaluation>> {
        let tails = CountTails::of(table)?;
        Some(Box::new(move |u| tails.at(u)))
    }

    fn rate_axes(p: f64) -> [f64; 2] {
        [p.ln(), (-p).ln_1p()]
    }

    fn pair_axes(trials: f64, successes: f64) -> [f64; 2] {
        [successes, trials - successes]
    }

    fn pooled_log_pmf(mean: f64, pair: &WeightedPair) -> f64 {
        ln_binomial_pmf(pair.count, pair.size, mean)
    }

    fn pooled_mean(table: &PairTable) -> f64 {
        let (trials, successes) = table.totals();
        successes / trials
    }

    fn pooled_mean_se(table: &PairTable, mean: f64) -> f64 {
        (mean * (1.0 - mean) / table.totals().0).sqrt()
    }

    fn check_identifiable(table: &PairTable) -> Result<(), Unidentifiable> {
        let (trials, successes) = table.totals();
        if trials == 0.0 {
            return Err(Unidentifiable::NoData);
        }
        let mean = successes / trials;
        if successes == 0.0 || successes == trials {
            return Err(Unidentifiable::DegenerateMean { mean });
        }
        if table.max_size() <= 1.0 {
            return Err(Unidentifiable::MeanOnly { mean });
        }
        Ok(())
    }

    fn boundary_score_term(mean: f64, pair: &WeightedPair) -> f64 {
        let (n, k) = (pair.size, pair.count);
        let d = k - n * mean;
        (d * d - k * (1.0 - 2.0 * mean) - n * mean * mean) / (2.0 * mean * (1.0 - mean))
    }

    fn overdispersion_z(table: &PairTable, mean: f64) -> f64 {
        // Tarone (1979), Biometrika 66:585: Z = (S − Σn) / sqrt(2 Σ n(n−1)),
        // S = Σ (k − n p)² / (p(1−p)).
        let (mut s, mut trials, mut pairs_of_trials) = (0.0, 0.0, 0.0);
        for p in table.pairs() {
            let d = p.count - p.size * mean;
            s += p.weight * d * d / (mean * (1.0 - mean));
            trials += p.weight * p.size;
            pairs_of_trials += p.weight * p.size * (p.size - 1.0);
        }
        if pairs_of_trials <= 0.0 {
            return 0.0;
        }
        (s - trials) / (2.0 * pairs_of_trials).sqrt()
    }

    fn moment_strength(table: &PairTable, mean: f64) -> Option<f64> {
        // E Σ(k − nμ)² = μ(1−μ) Σ n (1 + (n−1)ρ), ρ = 1/(1+s) (moment identity of
        // the beta-binomial; common practice).
        let (mut s, mut trials, mut pairs_of_trials) = (0.0, 0.0, 0.0);
        for p in table.pairs() {
            let d = p.count - p.size * mean;
            s += p.weight * d * d / (mean * (1.0 - mean));
            trials += p.weight * p.size;
            pairs_of_trials += p.weight * p.size * (p.size - 1.0);
        }
        let rho = (s - trials) / pairs_of_trials;
        if rho.is_nan() || rho <= 0.0 {
            return None;
        }
        Some(1.0 / rho.min(0.99) - 1.0)
    }

    fn working(mean: f64, strength: f64) -> [f64; 2] {
        [(mean / (1.0 - mean)).ln(), strength.ln()]
    }

    fn mean_strength_of_natural([alpha, beta]: [f64; 2]) -> (f64, f64) {
        (alpha / (alpha + beta), alpha + beta)
    }

    fn mean_strength(u: [f64; 2]) -> (f64, f64) {
        (mean_and_complement(u[0]).0, u[1].exp())
    }

    fn natural(u: [f64; 2]) -> [f64; 2] {
        let (mu, nu) = mean_and_complement(u[0]);
        let s = u[1].exp();
        [mu * s, nu * s]
    }

    fn natural_jacobian(u: [f64; 2]) -> [[f64; 2]; 2] {
        let (mu, nu) = mean_and_complement(u[0]);
        let s = u[1].exp();
        let c = s * mu * nu;
        [[c, mu * s], [-c, nu * s]]
    }

    fn mean_strength_jacobian(u: [f64; 2]) -> [[f64; 2]; 2] {
        let (mu, nu) = mean_and_complement(u[0]);
        [[mu * nu, 0.0], [0.0, u[1].exp()]]
    }

    fn rate_tails(prior: &Prior, n: f64, k: f64, threshold: f64) -> (f64, f64) {
        match *prior {
            Prior::CompletePooling { mean } => point_mass_tails(mean, threshold),
            Prior::Conjugate { natural: [alpha, beta] } => {
                let tails = beta_tails(alpha + k, beta + (n - k), threshold, 1.0 - threshold);
                (tails.lower, tails.upper)
            }
        }
    }

    fn predictive_cdf(prior: &Prior, n: f64, k: f64) -> (f64, f64) {
        match *prior {
            // Binomial(n, p): P(K ≤ k) = I_{1−p}(n − k, k + 1).
            Prior::CompletePooling { mean } => {
                let at_most = |k: f64| {
                    if k < 0.0 {
                        0.0
                    } else if k >= n {
                        1.0
                    } else {
                        beta_tails(n - k, k + 1.0, 1.0 - mean, mean).lower
                    }
                };
                (at_most(k - 1.0), at_most(k))
            }
            Prior::Conjugate { natural: [alpha, beta] } => beta_binomial_cdf(n, k, alpha, beta),
        }
    }

    fn posterior_mean_gradient([alpha, beta]: [f64; 2], n: f64, k: f64) -> [f64; 2] {
        // E = (α + k)/(α + β + n).
        let total = alpha + beta + n;
        [(beta + n - k) / (total * total), -(alpha + k) / (total * total)]
    }

    fn matched_interval(mean: f64, variance: f64, tail: f64) -> (f64, f64) {
        // Beta(m s, (1 − m) s) has variance m(1 − m)/(s + 1); keep s above 1e-6.
        let strength = (mean * (1.0 - mean) / variance - 1.0).max(1e-6);
        let (a, b) = (mean * strength, (1.0 - mean) * strength);
        (beta_quantile(a, b, Tail::Lower, tail), beta_quantile(a, b, Tail::Upper, tail))
    }

    fn draw_count(rate: f64, n: f64, rng: &mut rand_chacha::ChaCha8Rng) -> f64 {
        use rand_distr::{Binomial, Distribution};
        Binomial::new(n as u64, rate.clamp(0.0, 1.0)).map_or(rate * n, |d| d.sample(rng) as f64)
    }

    fn matched_tails(mean: f64, variance: f64, t: f64) -> (f64, f64) {
        let strength = (mean * (1.0 - mean) / variance - 1.0).max(1e-6);
        let tails = beta_tails(mean * strength, (1.0 - mean) * strength, t, 1.0 - t);
        (tails.lower, tails.upper)
    }

    fn raw_rate_variance(prior: &Prior, n: f64) -> f64 {
        match *prior {
            Prior::CompletePooling { mean } => mean * (1.0 - mean) / n,
            Prior::Conjugate { natural: [alpha, beta] } => {
                let s = alpha + beta;
                let mean = alpha / s;
                mean * (1.0 - mean) * (s + n) / (n * (s + 1.0))
            }
        }
    }

    fn posterior_mean_sd(prior: &Prior, n: f64, k: f64) -> (f64, f64) {
        match *prior {
            Prior::CompletePooling { mean } => (mean, 0.0),
            Prior::Conjugate { natural: [alpha, beta] } => {
                let (a, b) = (alpha + k, beta + (n - k));
                let s = a + b;
                let (mean, complement) = (a / s, b / s);
                (mean, (mean * complement / (s + 1.0)).sqrt())
            }
        }
    }

    fn pool_weight(prior: &Prior, n: f64) -> f64 {
        match *prior {
            Prior::CompletePooling { .. } => 1.0,
            Prior::Conjugate { natural: [alpha, beta] } => (alpha + beta) / (alpha + beta + n),
        }
    }

    fn posterior_natural(prior: &Prior, n: f64, k: f64) -> Option<[f64; 2]> {
        match *prior {
            Prior::CompletePooling { .. } => None,
            Prior::Conjugate { natural: [alpha, beta] } => Some([alpha + k, beta + (n - k)]),
        }
    }

    fn posterior(prior: &Prior, n: f64, k: f64, tail: f64) -> Posterior {
        let ends = match *prior {
            Prior::CompletePooling { mean } => [mean; 2],
            Prior::Conjugate { natural: [alpha, beta] } => {
                let (a, b) = (alpha + k, beta + (n - k));
                [beta_quantile(a, b, Tail::Lower, tail), beta_quantile(a, b, Tail::Upper, tail)]
            }
        };
        Self::posterior_with_ends(prior, n, k, ends)
    }
}

impl Posterior {
    /// The posterior under complete pooling: a point mass at the pooled rate.
    pub fn pooled(mean: f64) -> Self {
        Posterior { mean, sd: 0.0, lower: mean, upper: mean, pool_weight: 1.0, natural: None }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_tails_sum_what_the_pairs_sum() {
        // The same sums in two forms (the tails of the counts against each
        // pair's terms), over tables of small and large counts, near the
        // no-overdispersion edge and far from it.
        use rand::{Rng, SeedableRng};
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(5);
        for largest in [1u32, 3, 40, 2000] {
            let mut pairs = Vec::new();
            for _ in 0..(largest as usize * 3).max(4) {
                let n = rng.random_range(0..=largest);
                let k = rng.random_range(0..=n);
                pairs.push(WeightedPair {
                    size: f64::from(n),
                    count: f64::from(k),
                    weight: 1.0 + f64::from(n % 7),
                });
            }
            let table = PairTable::from_weighted(pairs);
            let tails = CountTails::of(&table).expect("whole counts, few of them");
            for u in [[-1.2, 2.0], [0.4, -3.0], [2.5, 9.0], [0.0, 25.0], [-0.3, 0.5]] {
                let (quick, pairwise) = (tails.at(u), crate::core::fit::evaluate::<BetaBinomial>(&table, u));
                let close = |x: f64, y: f64, scale: f64| (x - y).abs() <= 1e-11 * scale.max(1.0);
                let scale = pairwise
                    .hessian
                    .iter()
                    .flatten()
                    .chain(&pairwise.gradient)
                    .fold(0.0f64, |m, v| m.max(v.abs()));
                assert!(
                    close(quick.log_likelihood, pairwise.log_likelihood, pairwise.log_likelihood.abs()),
                    "{largest} {u:?} {quick:?} {pairwise:?}"
                );
                for i in 0..2 {
                    assert!(
                        close(quick.gradient[i], pairwise.gradient[i], scale),
                        "g{i} {largest} {u:?} {quick:?} {pairwise:?}"
                    );
                    for j in 0..2 {
                        assert!(
                            close(quick.hessian[i][j], pairwise.hessian[i][j], scale),
                            "h{i}{j} {largest} {u:?} {quick:?} {pairwise:?}"
                        );
                    }
                }
            }
        }
        let fractional = PairTable::from_weighted([WeightedPair { size: 2.5, count: 1.0, weight: 1.0 }]);
        assert!(CountTails::of(&fractional).is_none());
        let sparse = PairTable::from_weighted([WeightedPair { size: 1e6, count: 1.0, weight: 1.0 }]);
        assert!(CountTails::of(&sparse).is_none(), "a million trials over one pair: pair by pair");
    }

    #[test]
    fn a_point_made_from_one_of_the_same_strength_gives_the_same_bits() {
        super::super::assert_at_mean_matches::<BetaBinomial>(
            &[(12.0, 5.0), (300.0, 7.0), (40.0, 40.0), (1.0, 0.0)],
            &[[0.3, 1.5], [-2.0, 4.0], [1.0, -0.5]],
        );
    }

    #[test]
    fn derivatives_match_finite_differences() {
        super::super::assert_derivatives_match::<BetaBinomial>(
            &[(12.0, 5.0), (300.0, 7.0), (40.0, 40.0), (1.0, 0.0)],
            &[[0.3, 1.5], [-2.0, 4.0], [1.0, -0.5]],
        );
    }

    #[test]
    fn a_wide_prior_over_trillions_of_trials_ends_and_is_continuous() {
        // Found by fuzzing: this sum ran for hours. Beta(0.056, 4.15) over
        // 2e15 trials: K/n is the Beta itself (common practice: the continuous limit).
        let (n, alpha, beta) = (2_000_000_000_002_000.0, 0.055_857_666, 4.148_425_369);
        let started = std::time::Instant::now();
        let (below, at_most) = beta_binomial_cdf(n, 1e14, alpha, beta);
        // The regression ran for hours; a minute cannot flake on a loaded machine (it takes milliseconds).
        assert!(started.elapsed().as_secs_f64() < 60.0, "{:?}", started.elapsed());
        let x = 1e14 / n;
        let limit = crate::core::incomplete::beta_tails(alpha, beta, x, 1.0 - x).lower;
        assert!((below - limit).abs() < 1e-9 && (at_most - limit).abs() < 1e-9, "{below} {at_most} {limit}");
    }

    #[test]
    fn the_continuous_form_agrees_with_the_full_sum_where_both_can_be_had() {
        // The full sum (no cap) against the matched Beta, where the prior's
        // spread dominates, where the binomial noise does, and between.
        for (n, alpha, beta) in [(2e6_f64, 0.5, 4.0), (4e7, 2e8, 3e8), (1e7, 3e3, 7e3)] {
            let mean = n * alpha / (alpha + beta);
            for k in [0.3 * mean, mean, 1.2 * mean] {
                let k = k.round();
                let exact = cdf_summed_up_to(n, k, alpha, beta, u32::MAX);
                let continuous = cdf_summed_up_to(n, k, alpha, beta, 10);
                assert!(
                    (exact.1 - continuous.1).abs() < 2e-3,
                    "{n} {alpha} {beta} {k}: {exact:?} {continuous:?}"
                );
            }
        }
    }

    #[test]
    fn pmf_sums_to_one_and_reaches_the_binomial_limit() {
        let total: f64 = (0..=25).map(|k| ln_pmf(f64::from(k), 25.0, 0.7, 2.1).exp()).sum();
        assert!((total - 1.0).abs() < 1e-13);
        // As α + β → ∞ at fixed mean, the beta-binomial tends to the binomial
        // (common practice); at s = 1e15 the difference is O(n²/s).
        let limit = ln_binomial_pmf(30.0, 100.0, 0.25);
        let near = ln_pmf(30.0, 100.0, 0.25e15, 0.75e15);
        assert!((near - limit).abs() < 1e-11);
    }
}
