//! The free prior against a general-purpose convex solver: cvxpy (Python
//! registry) with its default conic solver maximising the same marginal
//! likelihood over masses on the same grid (scripts/make_free_prior_fixtures.py),
//! the pmfs from scipy.stats.

use crate::util::{assert_refused, json_fixture, paired, ratepool, stderr, summary, write, Csv, CLINICS};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Beta, Binomial, Distribution};
use ratepool::core::diagnostics::calibration;
use ratepool::core::fit::{fit_by, Likelihood};
use ratepool::core::model::beta_binomial::BetaBinomial;
use ratepool::core::model::free::{fit_free, FreePrior, DEFAULT_GRID_POINTS};
use ratepool::core::model::gamma_poisson::GammaPoisson;
use ratepool::core::model::normal_normal::NormalNormal;
use ratepool::core::model::{Family, Prior};
use ratepool::core::pairs::{PairTable, WeightedPair};
use serde_json::Value;
use std::path::Path;

/// A demo data file, by its path.
fn demo(name: &str) -> String {
    format!("{}/demo-data/{name}", env!("CARGO_MANIFEST_DIR"))
}

fn floats(value: &Value) -> Vec<f64> {
    value.as_array().unwrap().iter().map(|v| v.as_f64().unwrap()).collect()
}

fn pairs_of(reference: &Value) -> Vec<WeightedPair> {
    reference["pairs"]
        .as_array()
        .unwrap()
        .iter()
        .map(|p| {
            let p = floats(p);
            WeightedPair { size: p[0], count: p[1], weight: p[2] }
        })
        .collect()
}

/// The fit's grid, log marginal likelihood and posterior means against the solver's.
fn check_against_solver<F: Family>(name: &str) {
    let reference = json_fixture(&format!("free_prior/{name}.json"));
    let pairs = pairs_of(&reference);
    let table = PairTable::from_weighted(pairs.iter().copied());
    let fit = fit_free::<F>(&table, None).unwrap();
    // The grid by the stated rule, computed independently.
    let grid = floats(&reference["grid"]);
    assert_eq!(fit.prior.points().len(), grid.len(), "{name}");
    for (got, want) in fit.prior.points().iter().zip(&grid) {
        assert!((got - want).abs() <= 1e-12 * want.abs().max(1e-300), "{name}: grid {got} vs {want}");
    }
    assert_eq!(fit.prior.spacing().name(), reference["spacing"].as_str().unwrap());
    // The likelihood: within 1e-7 relative, and never below the solver's by more than its own gap.
    let want = reference["log_marginal_likelihood"].as_f64().unwrap();
    let got = fit.log_marginal_likelihood;
    assert!(((got - want) / want).abs() < 1e-7, "{name}: log likelihood {got} vs {want}");
    assert!(got >= want - 1e-6 * want.abs() * 1e-3, "{name}: {got} below the solver's {want}");
    // The log pmf of the fitted prior sums to the likelihood the fit reports.
    let summed: f64 = pairs.iter().map(|p| p.weight * fit.prior.log_pmf::<F>(p)).sum();
    assert!(((summed - got) / got).abs() < 1e-12, "{name}: {summed} vs {got}");
    // Posterior means: within 1e-6 of the solver's (relative, or absolute near 0).
    for (pair, want) in pairs.iter().zip(floats(&reference["posterior_means"])) {
        let got = fit.prior.posterior::<F>(pair.size, pair.count, 0.025).mean;
        assert!((got - want).abs() < 1e-6 * want.abs().max(1.0), "{name} {pair:?}: mean {got} vs {want}");
    }
    assert!(fit.converged && fit.duality_gap <= 1e-9 * table.groups(), "{name}: gap {}", fit.duality_gap);
}

#[test]
fn the_beta_binomial_free_prior_is_the_convex_solvers() {
    check_against_solver::<BetaBinomial>("beta-binomial");
}

#[test]
fn the_gamma_poisson_free_prior_is_the_convex_solvers() {
    check_against_solver::<GammaPoisson>("gamma-poisson");
}

#[test]
fn the_normal_free_prior_is_the_convex_solvers() {
    check_against_solver::<NormalNormal>("normal-normal");
}

/// Groups with true rates drawn by `rate`, trials from 20 to 200: the pair
/// table, and per pair the sum of the true rates of its groups.
fn simulate(
    seed: u64,
    groups: usize,
    rate: impl Fn(&mut ChaCha8Rng) -> f64,
) -> (PairTable, Vec<(f64, f64, f64)>) {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut rows = Vec::with_capacity(groups);
    for _ in 0..groups {
        let p = rate(&mut rng);
        let n = rng.random_range(20..=200) as f64;
        let k = Binomial::new(n as u64, p).unwrap().sample(&mut rng) as f64;
        rows.push((n, k, p));
    }
    let table = PairTable::from_weighted(rows.iter().map(|&(n, k, _)| WeightedPair {
        size: n,
        count: k,
        weight: 1.0,
    }));
    (table, rows)
}

/// The mean squared error of each prior's posterior means against the true rates.
fn squared_errors(rows: &[(f64, f64, f64)], parametric: &Prior, free: &FreePrior) -> (f64, f64) {
    let (mut p, mut f) = (0.0, 0.0);
    for &(n, k, rate) in rows {
        p += (BetaBinomial::posterior(parametric, n, k, 0.025).mean - rate).powi(2);
        f += (free.posterior::<BetaBinomial>(n, k, 0.025).mean - rate).powi(2);
    }
    (p / rows.len() as f64, f / rows.len() as f64)
}

#[test]
fn on_one_hump_the_free_prior_gains_likelihood_and_moves_posteriors_little() {
    // True rates from Beta(8, 24): the parametric prior's own law.
    let beta = Beta::new(8.0, 24.0).unwrap();
    let (table, rows) = simulate(20_261_204, 1_000, |rng| beta.sample(rng));
    let parametric = fit_by::<BetaBinomial>(&table, Likelihood::Marginal).unwrap();
    let free = fit_free::<BetaBinomial>(&table, None).unwrap();
    // Masses on a grid can take nearly any shape a Beta takes: the likelihood is at least as high.
    assert!(free.log_marginal_likelihood >= parametric.log_marginal_likelihood);
    let (mut largest, mut total) = (0.0f64, 0.0);
    for &(n, k, _) in &rows {
        let a = BetaBinomial::posterior(&parametric.prior, n, k, 0.025).mean;
        let b = free.prior.posterior::<BetaBinomial>(n, k, 0.025).mean;
        largest = largest.max((a - b).abs());
        total += (a - b).abs();
    }
    // Measured: largest 0.0185, mean 0.0028 (the README states these bounds).
    let mean = total / rows.len() as f64;
    assert!(largest < 0.025 && mean < 0.004, "largest {largest}, mean {mean}");
}

#[test]
fn on_two_humps_the_free_prior_is_nearer_the_truth_and_fits() {
    // 70% of groups near 0.25 (Beta(50, 150)), 30% near 0.05 (Beta(10, 190)), 300 groups, 100 seeds.
    let (high, low) = (Beta::new(50.0, 150.0).unwrap(), Beta::new(10.0, 190.0).unwrap());
    let (mut parametric_error, mut free_error, mut free_better) = (0.0, 0.0, 0);
    for seed in 0..100 {
        let (table, rows) =
            simulate(
                seed,
                300,
                |rng| {
                    if rng.random::<f64>() < 0.7 {
                        high.sample(rng)
                    } else {
                        low.sample(rng)
                    }
                },
            );
        let parametric = fit_by::<BetaBinomial>(&table, Likelihood::Marginal).unwrap();
        let free = fit_free::<BetaBinomial>(&table, None).unwrap();
        let (p, f) = squared_errors(&rows, &parametric.prior, &free.prior);
        parametric_error += p;
        free_error += f;
        free_better += usize::from(f < p);
        // The calibration check of the free prior: fits (p at least 0.001) on every seed.
        let weights: Vec<f64> = table.pairs().iter().map(|p| p.weight).collect();
        let pairs = table.pairs();
        let check = calibration(
            &weights,
            |i| free.prior.predictive_cdf::<BetaBinomial>(pairs[i].size, pairs[i].count),
            seed,
        );
        assert!(check.p_value >= 1e-3, "seed {seed}: calibration p = {}", check.p_value);
    }
    // Measured: the free prior's mean squared error is 0.54 of the parametric
    // one's over the 100 seeds, and lower on each of them (the README states these).
    let ratio = free_error / parametric_error;
    assert!(ratio < 0.65 && free_better >= 95, "ratio {ratio}, better on {free_better} seeds");
}

/// Runs ratepool in `dir` and returns the summary, stdout and stderr together.
fn run(dir: &Path, args: &[&str]) -> (Value, String) {
    let out = ratepool(dir, args);
    assert!(out.status.success(), "{args:?}: {}", stderr(&out));
    let printed = String::from_utf8_lossy(&out.stdout).into_owned() + &stderr(&out);
    (summary(&dir.join("s.json")), printed)
}

const STOREFRONTS: [&str; 8] = [
    "--model",
    "beta-binomial",
    "--group",
    "storefront_id",
    "--successes",
    "purchases",
    "--trials",
    "visits",
];

#[test]
fn two_humps_fit_under_the_free_prior_and_the_summary_says_why() {
    let dir = tempfile::tempdir().unwrap();
    let input = demo("storefronts.csv");
    let mut args = vec!["fit", "--input", &input];
    args.extend(STOREFRONTS);
    args.extend(["--prior-shape", "free", "--below", "0.02", "--flag-fdr", "0.05", "--ranks"]);
    args.extend(["--output", "out.csv", "--summary", "s.json", "--pair-output", "pairs.csv"]);
    let (s, printed) = run(dir.path(), &args);
    // The free prior fits; the parametric one, fitted beside it, does not.
    assert_eq!(s["checks"]["verdict"], "fits");
    let comparison = &s["prior_comparison"];
    assert_eq!(comparison["parametric_checks"]["verdict"], "poor fit");
    assert!(comparison["log_likelihood_gain"].as_f64().unwrap() > 100.0, "{comparison}");
    assert!(comparison["flags_changed"].as_u64().unwrap() > 0);
    assert!(comparison["parametric_prior"]["alpha"].as_f64().is_some());
    assert!(printed.contains("the parametric prior does not describe"), "{printed}");
    // The prior: masses summing to 1 on an increasing grid, and its support among them.
    let prior = &s["prior"];
    assert_eq!(prior["prior_shape"], "free");
    let (grid, masses) = (floats(&prior["grid"]), floats(&prior["masses"]));
    assert_eq!(grid.len(), DEFAULT_GRID_POINTS);
    assert!(grid.windows(2).all(|w| w[0] < w[1]));
    assert!((masses.iter().sum::<f64>() - 1.0).abs() < 1e-12);
    let support = prior["support"].as_array().unwrap();
    assert!(support.len() >= 2, "two humps need two points at least: {support:?}");
    // The table: no law's parameters; intervals hold their means.
    let table = Csv::read(&dir.path().join("out.csv"));
    assert!(!table.header.iter().any(|c| c.starts_with("posterior_param_")));
    let (mean, lo, hi) =
        (table.floats("posterior_mean"), table.floats("interval_lo"), table.floats("interval_hi"));
    for ((m, l), h) in paired(&mean, &lo, "means").zip(&hi) {
        assert!(l <= m && m <= h, "{l} <= {m} <= {h}");
    }
    // Scored again with the saved prior: the same columns, bit for bit.
    let mut again = vec!["score", "--input", &input, "--prior", "s.json"];
    again.extend(&STOREFRONTS[2..]);
    again.extend([
        "--below",
        "0.02",
        "--flag-fdr",
        "0.05",
        "--ranks",
        "--output",
        "again.csv",
        "--summary",
        "s2.json",
    ]);
    let out = ratepool(dir.path(), &again);
    assert!(out.status.success(), "{}", stderr(&out));
    let rescored = Csv::read(&dir.path().join("again.csv"));
    for column in
        ["posterior_mean", "interval_lo", "interval_hi", "pool_weight", "prob_below", "flag_fdr", "rank_mean"]
    {
        let (again, first) = (rescored.column(column), table.column(column));
        let differ = paired(&again, &first, column).filter(|(a, b)| a != b).count();
        assert_eq!(differ, 0, "{column}: {differ} rows differ");
    }
}

#[test]
fn each_segment_gets_a_free_prior_of_its_own() {
    let dir = tempfile::tempdir().unwrap();
    let input = demo("returns.csv");
    let args = [
        "fit",
        "--input",
        &input,
        "--model",
        "beta-binomial",
        "--group",
        "store_id",
        "--outcome",
        "returned",
        "--by",
        "store_kind",
        "--prior-shape",
        "free",
        "--output",
        "out.csv",
        "--summary",
        "s.json",
    ];
    let (s, _) = run(dir.path(), &args);
    let segments = s["segments"].as_array().unwrap();
    assert_eq!(segments.len(), 4);
    let means: Vec<f64> = segments.iter().map(|g| g["prior"]["mean"].as_f64().unwrap()).collect();
    for segment in segments {
        assert_eq!(segment["prior"]["prior_shape"], "free", "{segment}");
    }
    // The kinds' return rates differ (demo-data: 0.04 to 0.16), and so do their priors' means.
    let (low, high) = means.iter().fold((1.0f64, 0.0f64), |(l, h), &m| (l.min(m), h.max(m)));
    assert!(high > 2.0 * low, "{means:?}");
    assert!(s["prior_comparison"]["parametric_checks"]["verdict"].is_string());
}

#[test]
fn identical_groups_make_a_point_mass_and_few_groups_are_refused() {
    let dir = tempfile::tempdir().unwrap();
    let free = ["--prior-shape", "free", "--output", "out.csv", "--summary", "s.json"];
    let same: String = (0..40).map(|i| format!("g{i},3,10\n")).collect();
    write(dir.path(), "same.csv", &format!("id,k,n\n{same}"));
    let mut args = vec!["fit", "--input", "same.csv", "--model", "beta-binomial", "--group", "id"];
    args.extend(["--successes", "k", "--trials", "n"]);
    let (s, printed) = run(dir.path(), &[&args[..], &free[..]].concat());
    assert!(printed.contains("the free prior is a point mass there"), "{printed}");
    assert_eq!(floats(&s["prior"]["grid"]), vec![0.3]);
    let table = Csv::read(&dir.path().join("out.csv"));
    assert!(table.floats("posterior_mean").iter().all(|&m| m == 0.3));
    // Nine groups: refused with the reason, exit 3, nothing written.
    let few: String = (0..9).map(|i| format!("g{i},{i},10\n")).collect();
    write(dir.path(), "few.csv", &format!("id,k,n\n{few}"));
    args[2] = "few.csv";
    std::fs::remove_file(dir.path().join("out.csv")).unwrap();
    let out = ratepool(dir.path(), &[&args[..], &free[..]].concat());
    assert_eq!(out.status.code(), Some(3), "{}", stderr(&out));
    assert!(stderr(&out).contains("at least 10 groups with data"), "{}", stderr(&out));
    assert!(!dir.path().join("out.csv").exists());
}

#[test]
fn what_a_free_prior_does_not_combine_with_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let input = demo("storefronts.csv");
    let mut base = vec!["fit", "--input", &input];
    base.extend(STOREFRONTS);
    base.extend(["--output", "out.csv"]);
    let free = [&base[..], &["--prior-shape", "free"]].concat();
    for (extra, message) in [
        (vec!["--intervals", "corrected"], "a free prior does not combine with --intervals corrected"),
        (
            vec!["--top", "5", "--top-method", "draws"],
            "a free prior does not combine with --top-method draws",
        ),
        (vec!["--covariates", "visits"], "a free prior does not combine with covariates"),
        (vec!["--grid-points", "5"], "--grid-points must be from 10 to 5000"),
    ] {
        assert_refused(dir.path(), &[&free[..], &extra[..]].concat(), message, "out.csv");
    }
    assert_refused(
        dir.path(),
        &[&base[..], &["--grid-points", "100"]].concat(),
        "give --prior-shape free",
        "out.csv",
    );
}

#[test]
fn a_saved_free_prior_that_is_not_a_prior_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let input = demo("storefronts.csv");
    let mut args = vec!["fit", "--input", &input];
    args.extend(STOREFRONTS);
    args.extend(["--prior-shape", "free", "--output", "out.csv", "--summary", "s.json"]);
    let (mut s, _) = run(dir.path(), &args);
    s["prior"]["masses"][7] = Value::from(-0.5);
    std::fs::write(dir.path().join("bad.json"), s.to_string()).unwrap();
    let mut score = vec!["score", "--input", &input, "--prior", "bad.json"];
    score.extend(&STOREFRONTS[2..]);
    score.extend(["--output", "scored.csv"]);
    assert_refused(
        dir.path(),
        &score,
        "bad.json: the free prior: the grid's masses must be finite and at least 0",
        "scored.csv",
    );
}

#[test]
fn prob_top_under_a_free_prior_is_by_the_threshold_and_adds_up_to_k() {
    let dir = tempfile::tempdir().unwrap();
    let input = demo("storefronts.csv");
    let mut args = vec!["fit", "--input", &input];
    args.extend(STOREFRONTS);
    args.extend([
        "--prior-shape",
        "free",
        "--top",
        "50",
        "--ranks",
        "--output",
        "out.csv",
        "--summary",
        "s.json",
    ]);
    let (s, _) = run(dir.path(), &args);
    assert_eq!(s["top"]["method"], "threshold", "{}", s["top"]);
    let table = Csv::read(&dir.path().join("out.csv"));
    let top = table.floats("prob_top");
    // The threshold method's defining sum: the expected number of groups beyond it is K.
    let expected: f64 = top.iter().sum();
    assert!((expected - 50.0).abs() < 1e-6, "{expected}");
    // The best by posterior mean is likelier among the best 50 than the median group.
    let ranks = table.floats("rank_mean");
    let best = ranks.iter().position(|&r| r == 1.0).unwrap();
    let mut sorted = top.clone();
    sorted.sort_by(f64::total_cmp);
    assert!(top[best] > sorted[sorted.len() / 2], "{} against {}", top[best], sorted[sorted.len() / 2]);
}

#[test]
fn the_terminal_lists_the_twelve_heaviest_support_points_and_sums_the_rest() {
    // The demo clinics' free prior holds 13 points of at least 0.001 of the mass.
    let dir = tempfile::tempdir().unwrap();
    let input = demo("clinic_waits.csv");
    let mut args = vec!["fit", "--input", &input];
    args.extend(CLINICS);
    args.extend(["--prior-shape", "free", "--output", "out.csv", "--summary", "s.json"]);
    let (s, printed) = run(dir.path(), &args);
    let support = s["prior"]["support"].as_array().unwrap();
    assert_eq!(support.len(), 13);
    let lightest = support.iter().map(|p| p[1].as_f64().unwrap()).fold(f64::INFINITY, f64::min);
    let line = printed.lines().find(|l| l.trim_start().starts_with("support")).unwrap();
    assert_eq!(line.matches(" (0.").count(), 12, "{line}");
    assert!(line.ends_with(&format!("and 1 more point holding {lightest:.3}")), "{line}");
}
