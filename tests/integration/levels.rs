//! The star-rating model (Dirichlet-multinomial) against references outside
//! the project: its fit against scipy.stats.dirichlet_multinomial maximised
//! by scipy.optimize, its mean-score law against mpmath's inversion integral
//! at 40 digits and against 10^7 Dirichlet draws from numpy
//! (scripts/make_level_fixtures.py); with two levels, against the
//! project's beta-binomial, whose own checks are against scipy.

use crate::util::{assert_refused, json_fixture, ratepool, stderr, summary, write, Csv};
use ratepool::core::fit::fit;
use ratepool::core::model::beta_binomial::BetaBinomial;
use ratepool::core::model::dirichlet_multinomial::mean_score::MeanScoreLaw;
use ratepool::core::model::dirichlet_multinomial::{
    fit_levels, mean_score_tails, posterior, posterior_shares, LevelPrior, LevelTable,
};
use ratepool::core::model::{Family, Prior};
use ratepool::core::pairs::{PairTable, WeightedPair};
use ratepool::core::quantile::Tail;
use serde_json::Value;

fn floats(value: &Value) -> Vec<f64> {
    value.as_array().unwrap().iter().map(|v| v.as_f64().unwrap()).collect()
}

fn table_of(case: &Value) -> LevelTable {
    let levels = case["levels"].as_u64().unwrap() as usize;
    LevelTable::new(
        levels,
        case["vectors"].as_array().unwrap().iter().map(|row| {
            let row = floats(row);
            (row[..levels].to_vec(), row[levels])
        }),
    )
}

#[test]
fn the_fit_matches_scipys_maximum() {
    // Source: scipy.stats.dirichlet_multinomial.logpmf summed over the groups and
    // maximised by scipy.optimize (BFGS, then Newton-polished).
    for case in json_fixture("levels/fits.json").as_array().unwrap() {
        let name = case["name"].as_str().unwrap();
        let fitted = fit_levels(&table_of(case)).unwrap();
        let LevelPrior::Dirichlet { shapes } = &fitted.prior else { panic!("{name}: an interior fit") };
        for (got, want) in shapes.iter().zip(floats(&case["shapes"])) {
            assert!(((got - want) / want).abs() < 1e-6, "{name}: shape {got} vs {want}");
        }
        let want = case["log_likelihood"].as_f64().unwrap();
        let got = fitted.log_marginal_likelihood;
        assert!(((got - want) / want).abs() < 1e-9, "{name}: log likelihood {got} vs {want}");
        assert!(fitted.pooling.statistic > 0.0 && fitted.overdispersion.statistic > 0.0, "{name}");
        assert!(fitted.shapes_se.unwrap().iter().all(|se| se.is_finite() && *se > 0.0), "{name}");
    }
}

#[test]
fn the_mean_score_law_matches_mpmaths_inversion_integral() {
    // Source: mpmath.quad of the Gil-Pelaez integral at 40 digits (a different
    // path and rule from ratepool's), and mpmath.findroot on it for quantiles.
    let reference = json_fixture("levels/mean_score.json");
    for case in reference["cdf"].as_array().unwrap() {
        let (shapes, scores) = (floats(&case["shapes"]), floats(&case["scores"]));
        let law = MeanScoreLaw { shapes: &shapes, scores: &scores };
        let t = case["t"].as_f64().unwrap();
        let want = case["lower"].as_f64().unwrap();
        let got = law.at(t);
        // The smaller tail holds 1e-8 relative, the larger is one less it.
        let smaller = want.min(1.0 - want);
        assert!((got.lower - want).abs() < 1e-15 + 1e-8 * smaller, "{case}: {} vs {want}", got.lower);
        assert!((got.upper - (1.0 - want)).abs() < 1e-15 + 1e-8 * smaller, "{case}");
    }
    for case in reference["quantiles"].as_array().unwrap() {
        let (shapes, scores) = (floats(&case["shapes"]), floats(&case["scores"]));
        let law = MeanScoreLaw { shapes: &shapes, scores: &scores };
        let p = case["p"].as_f64().unwrap();
        let want = case["t"].as_f64().unwrap();
        let lower = law.quantile(Tail::Lower, p);
        let upper = law.quantile(Tail::Upper, 1.0 - p);
        // The bar is 1e-6 on the score scale; the quantiles hold 1e-8.
        assert!((lower - want).abs() < 1e-8, "{case}: {lower} vs {want}");
        assert!((upper - want).abs() < 1e-8, "{case}: {upper} vs {want}");
    }
}

#[test]
fn the_mean_score_law_matches_ten_million_dirichlet_draws() {
    // Source: numpy's Dirichlet sampler, 10^7 draws; within 4 binomial standard errors.
    let reference = json_fixture("levels/mean_score.json");
    for case in reference["draws"].as_array().unwrap() {
        let (shapes, scores) = (floats(&case["shapes"]), floats(&case["scores"]));
        let law = MeanScoreLaw { shapes: &shapes, scores: &scores };
        let (estimate, se) = (case["estimate"].as_f64().unwrap(), case["se"].as_f64().unwrap());
        let got = law.at(case["t"].as_f64().unwrap()).lower;
        assert!((got - estimate).abs() < 4.0 * se, "{case}: {got} vs {estimate} ± {se}");
    }
}

#[test]
fn two_levels_are_the_beta_binomial() {
    // The Dirichlet-multinomial with K = 2 is the beta-binomial (common practice):
    // the project's beta-binomial fit (checked against scipy in fits.rs) and
    // its posteriors agree with this model's to 1e-12.
    let cases = json_fixture("levels/fits.json");
    let case = &cases.as_array().unwrap()[2];
    assert_eq!(case["name"], "two-levels");
    let table = table_of(case);
    let pairs = (0..table.len()).map(|i| {
        let v = table.vector(i);
        WeightedPair { size: v[0] + v[1], count: v[1], weight: table.weight(i) }
    });
    let beta_binomial = fit::<BetaBinomial>(&PairTable::from_weighted(pairs)).unwrap();
    let Prior::Conjugate { natural: [alpha, beta] } = beta_binomial.prior else { panic!("an interior fit") };
    let levels = fit_levels(&table).unwrap();
    let LevelPrior::Dirichlet { shapes } = &levels.prior else { panic!("an interior fit") };
    assert!(((shapes[1] - alpha) / alpha).abs() < 1e-12, "{} vs {alpha}", shapes[1]);
    assert!(((shapes[0] - beta) / beta).abs() < 1e-12, "{} vs {beta}", shapes[0]);
    let relative = (levels.log_marginal_likelihood - beta_binomial.log_marginal_likelihood).abs()
        / beta_binomial.log_marginal_likelihood.abs();
    assert!(relative < 1e-12, "{relative}");
    let scores = [0.0, 1.0];
    for (size, count) in [(0.0, 0.0), (3.0, 3.0), (40.0, 7.0), (1000.0, 970.0)] {
        let counts = [size - count, count];
        let ours = posterior(&levels.prior, &scores, &counts, 0.025);
        let theirs = BetaBinomial::posterior(&beta_binomial.prior, size, count, 0.025);
        for (x, y) in [
            (ours.mean, theirs.mean),
            (ours.sd, theirs.sd),
            (ours.lower, theirs.lower),
            (ours.upper, theirs.upper),
        ] {
            assert!((x - y).abs() < 1e-12, "({size}, {count}): {x} vs {y}");
        }
        assert!((ours.pool_weight - theirs.pool_weight).abs() < 1e-12);
        let (below, above) = mean_score_tails(&levels.prior, &scores, &counts, 0.3);
        let (their_below, their_above) = BetaBinomial::rate_tails(&beta_binomial.prior, size, count, 0.3);
        assert!((below - their_below).abs() < 1e-12 && (above - their_above).abs() < 1e-12);
    }
}

#[test]
fn a_group_without_ratings_gets_the_prior_and_many_ratings_tend_to_their_mean() {
    // Facts of the trade (common practice): no data, the prior's mean; much data, its own.
    let prior = LevelPrior::Dirichlet { shapes: vec![0.6, 0.4, 0.9, 2.5, 6.0] };
    let scores = [1.0, 2.0, 3.0, 4.0, 5.0];
    let none = posterior(&prior, &scores, &[0.0; 5], 0.025);
    assert!((none.mean - prior.mean_score(&scores)).abs() < 1e-15);
    assert_eq!(none.pool_weight, 1.0);
    let counts = [50_000.0, 0.0, 0.0, 100_000.0, 850_000.0];
    let many = posterior(&prior, &scores, &counts, 0.025);
    let raw = (50_000.0 + 400_000.0 + 4_250_000.0) / 1e6;
    assert!((many.mean - raw).abs() < 1e-5, "{} vs {raw}", many.mean);
    // Near-normal at a million ratings: the 95% interval is 2 × 1.96 sd wide, within 1%.
    let width = many.upper - many.lower;
    assert!(many.lower < raw && raw < many.upper, "{many:?}");
    assert!((width / (2.0 * 1.959964 * many.sd) - 1.0).abs() < 0.01, "{many:?}");
    let shares = posterior_shares(&prior, &counts);
    assert!((shares.iter().sum::<f64>() - 1.0).abs() < 1e-15);
}

#[test]
fn identical_shares_everywhere_are_the_boundary() {
    // Every group 1, 2, 3 of three levels: no variation beyond the multinomial.
    let table = LevelTable::new(3, [(vec![1.0, 2.0, 3.0], 500.0)]);
    let fitted = fit_levels(&table).unwrap();
    assert_eq!(fitted.prior, LevelPrior::Pooled { shares: vec![1.0 / 6.0, 2.0 / 6.0, 3.0 / 6.0] });
    assert!(fitted.overdispersion.statistic <= 0.0);
    assert_eq!(fitted.pooling.p_value, 1.0);
}

/// The demo sellers' columns and model.
const STARS: [&str; 6] = [
    "--model",
    "dirichlet-multinomial",
    "--group",
    "seller_id",
    "--level-counts",
    "stars_1,stars_2,stars_3,stars_4,stars_5",
];

fn demo_sellers() -> String {
    format!("{}/demo-data/star_sellers.csv", env!("CARGO_MANIFEST_DIR"))
}

#[test]
fn the_demo_sellers_match_scipy_and_mpmath_end_to_end() {
    // Source: scripts/make_level_fixtures.py (demo): scipy's fit of the demo file
    // and mpmath's intervals and tails at that prior.
    let reference = json_fixture("levels/demo.json");
    let dir = tempfile::tempdir().unwrap();
    let input = demo_sellers();
    let mut args = vec!["fit", "--input", &input];
    args.extend(STARS);
    args.extend(["--output", "out.csv", "--summary", "s.json", "--above", "4.5", "--ranks"]);
    args.extend(["--share-above", "stars_1=0.1"]);
    let out = ratepool(dir.path(), &args);
    assert!(out.status.success(), "{}", stderr(&out));
    let s = summary(&dir.path().join("s.json"));
    let shapes: Vec<f64> =
        s["levels"].as_array().unwrap().iter().map(|l| l["prior_shape"].as_f64().unwrap()).collect();
    for (got, want) in shapes.iter().zip(floats(&reference["shapes"])) {
        assert!(((got - want) / want).abs() < 1e-6, "shape {got} vs {want}");
    }
    let want = reference["log_likelihood"].as_f64().unwrap();
    assert!(((s["log_marginal_likelihood"].as_f64().unwrap() - want) / want).abs() < 1e-9);
    let table = Csv::read(&dir.path().join("out.csv"));
    let ids = table.column("seller_id");
    assert_eq!(ids.len(), 2000);
    for seller in reference["sellers"].as_array().unwrap() {
        let row = ids.iter().position(|id| id == seller["seller_id"].as_str().unwrap()).unwrap();
        for column in ["posterior_mean", "interval_lo", "interval_hi", "prob_above", "prob_share_above"] {
            let (got, want) = (table.floats(column)[row], seller[column].as_f64().unwrap());
            // The bar: 1e-6 on the score scale.
            assert!((got - want).abs() < 1e-6, "{}: {column} {got} vs {want}", seller["seller_id"]);
        }
    }
    // The 800-rating seller at 4.72 outranks the 3-rating seller at 5.0 on the conservative rank.
    let conservative = table.floats("rank_conservative");
    let at = |id: &str| ids.iter().position(|x| x == id).unwrap();
    assert!(conservative[at("seller-0042")] < conservative[at("seller-0007")]);
    // The pull: the mean shift over rated sellers, and the seller named as moved furthest.
    let (raw, posterior) = (table.column("raw_mean"), table.floats("posterior_mean"));
    let shifts: Vec<(f64, usize)> = raw
        .iter()
        .enumerate()
        .filter(|(_, r)| !r.is_empty())
        .map(|(i, r)| ((posterior[i] - r.parse::<f64>().unwrap()).abs(), i))
        .collect();
    let mean_shift = shifts.iter().map(|s| s.0).sum::<f64>() / shifts.len() as f64;
    assert!((s["pull"]["mean_abs_shift"].as_f64().unwrap() - mean_shift).abs() < 1e-12);
    let furthest = shifts.iter().fold((0.0, 0), |m, s| if s.0 > m.0 { *s } else { m });
    assert_eq!(s["pull"]["max_shift_group"].as_str().unwrap(), ids[furthest.1]);
    // A seller with no ratings: no raw mean, the prior's mean score, pool weight 1.
    let none = at("seller-0002");
    assert_eq!(table.column("raw_mean")[none], "");
    assert!((table.floats("posterior_mean")[none] - s["mean_score"].as_f64().unwrap()).abs() < 1e-12);
    assert_eq!(table.floats("pool_weight")[none], 1.0);
}

#[test]
fn bad_counts_and_options_are_refused_with_row_and_column() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path();
    let table = |rows: &str| write(path, "in.csv", &format!("id,one,two,three\n{rows}"));
    let run = |extra: &[&str], message: &str| {
        let mut args = vec!["fit", "--input", "in.csv", "--model", "dirichlet-multinomial", "--group", "id"];
        args.extend(extra);
        args.extend(["--output", "out.csv"]);
        assert_refused(path, &args, message, "out.csv");
    };
    let three = ["--level-counts", "one,two,three"];
    table("a,1,2,3\nb,1,-2,3\n");
    run(&three, "row 2, column 'two': -2 is negative");
    table("a,1,2,3\nb,1,2,3.5\n");
    run(&three, "row 2, column 'three': 3.5 is not a whole number");
    table("a,1,2,3\nb,,2,3\n");
    run(&three, "row 2, column 'one': missing value");
    table("a,1,2,3\na,1,2,3\n");
    run(&three, "duplicate group id 'a' (first at row 1)");
    table("a,1,2,3\n");
    run(&["--level-counts", "one,two,four"], "no column 'four' (given as the level count column)");
    run(&["--level-counts", "one"], "needs at least two levels");
    run(&["--level-counts", "one,two,one"], "names 'one' twice");
    run(&["--level-counts", "one,two,three", "--level-scores", "1,2"], "gives 2 scores for 3 level columns");
    run(&["--level-counts", "one,two,three", "--level-scores", "1,2,2"], "gives the score 2 twice");
    run(&["--level-counts", "one,two,three", "--level-scores", "1,2,inf"], "must be finite");
    run(&["--level-counts", "one,two,three", "--above", "3.5"], "--above is a mean score");
    run(
        &["--level-counts", "one,two,three", "--share-above", "four=0.1"],
        "--share-above takes a level column",
    );
    run(&["--level-counts", "one,two,three", "--share-above", "one=1.5"], "strictly between 0 and 1");
    run(
        &["--level-counts", "one,two,three", "--by", "one"],
        "--by names 'one' twice, empty, or as the group or a level column",
    );
    run(
        &["--level-counts", "one,two,three", "--report", "r.html", "--map", "m.geojson", "--map-key", "id"],
        "--map does not apply to the dirichlet-multinomial model",
    );
}

#[test]
fn skipped_rows_go_to_the_rejects_with_their_cells_and_the_rest_is_scored() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path();
    let mut rows = String::from("id,low,high\n");
    for i in 0..300 {
        rows += &format!("g{i},{},{}\n", i % 7, (i * 5) % 11);
    }
    rows += "bad,2,x\n";
    write(path, "in.csv", &rows);
    let args =
        level_run("low,high", &["--on-invalid", "skip", "--rejects", "rejects.csv", "--summary", "s.json"]);
    let out = ratepool(path, &args);
    assert!(out.status.success(), "{}", stderr(&out));
    let rejects = Csv::read(&path.join("rejects.csv"));
    assert_eq!(rejects.header, ["row", "id", "low", "high", "column", "reason"]);
    assert_eq!(rejects.rows, [["301", "bad", "2", "x", "high", "'x' is not a number"]]);
    assert_eq!(Csv::read(&path.join("out.csv")).rows.len(), 300);
    let s = summary(&path.join("s.json"));
    assert_eq!(
        (s["rows_read"].as_u64(), s["rows_rejected"].as_u64(), s["groups"].as_u64()),
        (Some(301), Some(1), Some(300))
    );
}

#[test]
fn a_level_no_group_used_is_a_fit_failure_that_names_it() {
    let dir = tempfile::tempdir().unwrap();
    write(dir.path(), "in.csv", "id,a,b,c\nx,1,0,2\ny,3,0,1\nz,0,0,4\n");
    let args = level_run("a,b,c", &[]);
    let out = ratepool(dir.path(), &args);
    assert_eq!(out.status.code(), Some(3), "{}", stderr(&out));
    assert!(stderr(&out).contains("the level column 'b' has no ratings in any group"), "{}", stderr(&out));
    assert!(!dir.path().join("out.csv").exists());
}

/// Every group with ratings has the same row in `rows.csv` (from one row
/// per rating) as in `counts.csv` (from its counts, in columns `counts_at`),
/// column for column. Groups with no ratings have no rating rows, so they
/// are not in the first; they add nothing to the likelihood, so the priors
/// and every other group's row are the same.
fn rated_groups_match(dir: &std::path::Path, counts_at: std::ops::Range<usize>) {
    let (by_counts, by_rows) = (Csv::read(&dir.join("counts.csv")), Csv::read(&dir.join("rows.csv")));
    let rated: Vec<&Vec<String>> =
        by_counts.rows.iter().filter(|row| row[counts_at.clone()].iter().any(|c| c != "0")).collect();
    assert_eq!(by_rows.rows.len(), rated.len());
    assert_eq!(by_rows.header, by_counts.header);
    let at: std::collections::HashMap<&str, &Vec<String>> =
        by_rows.rows.iter().map(|r| (r[0].as_str(), r)).collect();
    for row in rated {
        assert_eq!(at[row[0].as_str()], row, "{}", row[0]);
    }
}

/// A star-rating fit of `ratings.csv`, one row per rating of 1 to 5 stars
/// in the column `stars`, grouped by `group`, to `rows.csv`, and `extra`.
fn rating_rows_run<'a>(group: &'a str, extra: &[&'a str]) -> Vec<&'a str> {
    let mut args =
        vec!["fit", "--input", "ratings.csv", "--model", "dirichlet-multinomial", "--group", group];
    args.extend(["--outcome", "stars", "--levels", "1,2,3,4,5", "--output", "rows.csv"]);
    args.extend(extra);
    args
}

/// A star-rating fit of `in.csv` (group `id`) with `levels`, to `out.csv`, and `extra`.
fn level_run<'a>(levels: &'a str, extra: &[&'a str]) -> Vec<&'a str> {
    let mut args = vec!["fit", "--input", "in.csv", "--model", "dirichlet-multinomial", "--group", "id"];
    args.extend(["--level-counts", levels, "--output", "out.csv"]);
    args.extend(extra);
    args
}

#[test]
fn one_row_per_rating_gives_the_same_sellers_as_their_counts() {
    // The demo sellers' star counts written out as one row per rating, in an
    // order that mixes sellers, must give every seller the same row as the
    // count columns do (the counts are the sufficient statistic).
    let dir = tempfile::tempdir().unwrap();
    let sellers = Csv::read(std::path::Path::new(&demo_sellers()));
    let mut ratings: Vec<(usize, String, usize)> = Vec::new();
    for (i, row) in sellers.rows.iter().enumerate() {
        for (stars, count) in row[1..].iter().enumerate() {
            for j in 0..count.parse::<usize>().unwrap() {
                ratings.push(((j * 7919 + i * 104_729) % 10_007, row[0].clone(), stars + 1));
            }
        }
    }
    ratings.sort();
    assert_eq!(ratings.len(), 65_528, "the README's count of rating rows");
    let mut text = String::from("seller_id,stars\n");
    for (_, seller, stars) in &ratings {
        text += &format!("{seller},{stars}\n");
    }
    text += "seller-9999,6\n";
    write(dir.path(), "ratings.csv", &text);
    let input = demo_sellers();
    let mut counts = vec!["fit", "--input", &input];
    counts.extend(STARS);
    counts.extend(["--output", "counts.csv", "--above", "4.5"]);
    assert!(ratepool(dir.path(), &counts).status.success());
    let rows =
        rating_rows_run("seller_id", &["--above", "4.5", "--on-invalid", "skip", "--rejects", "rejects.csv"]);
    let out = ratepool(dir.path(), &rows);
    assert!(out.status.success(), "{}", stderr(&out));
    let by_rows = Csv::read(&dir.path().join("rows.csv"));
    assert_eq!(by_rows.header[1..6], ["stars_1", "stars_2", "stars_3", "stars_4", "stars_5"]);
    rated_groups_match(dir.path(), 1..6);
    let rejects = std::fs::read_to_string(dir.path().join("rejects.csv")).unwrap();
    let line =
        format!("{},seller-9999,6,stars,\"'6' is not among --levels 1, 2, 3, 4, 5\"", ratings.len() + 1);
    assert_eq!(rejects.lines().collect::<Vec<_>>(), ["row,seller_id,stars,column,reason", line.as_str()]);
}

#[test]
fn rating_rows_refuse_a_value_outside_the_levels_and_options_that_do_not_fit() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path();
    write(path, "in.csv", "id,stars\na,5\nb,4\na,3\nb,7\n");
    let run = |extra: &[&str], message: &str| {
        let mut args = vec!["fit", "--input", "in.csv", "--model", "dirichlet-multinomial", "--group", "id"];
        args.extend(extra);
        args.extend(["--output", "out.csv"]);
        assert_refused(path, &args, message, "out.csv");
    };
    let five = ["--outcome", "stars", "--levels", "1,2,3,4,5"];
    run(&five, "row 4, column 'stars': '7' is not among --levels 1, 2, 3, 4, 5");
    run(&["--outcome", "stars"], "needs --levels VALUE,VALUE,...");
    run(&["--levels", "1,2"], "--levels names the values of --outcome COLUMN");
    run(&["--outcome", "stars", "--levels", "1,2,1"], "--levels names '1' twice");
    run(&["--outcome", "stars", "--levels", "1,2", "--level-counts", "a,b"], "not both");
}

#[test]
fn score_with_a_saved_star_prior_gives_each_seller_the_posterior_of_that_prior() {
    let dir = tempfile::tempdir().unwrap();
    let input = demo_sellers();
    let mut args = vec!["fit", "--input", &input];
    args.extend(STARS);
    args.extend([
        "--output",
        "fit.csv",
        "--summary",
        "s.json",
        "--above",
        "4.5",
        "--flag-fdr",
        "0.1",
        "--ranks",
    ]);
    let out = ratepool(dir.path(), &args);
    assert!(out.status.success(), "{}", stderr(&out));
    let scored_args = |input: &str, output: &str| -> Vec<String> {
        let line = format!("score --prior s.json --group seller_id --above 4.5 --flag-fdr 0.1 --ranks --input {input} --output {output} --summary {output}.json");
        line.split(' ').map(String::from).collect()
    };
    // The sellers the prior was fitted to, scored with it: the fit's table, byte for byte.
    let args = scored_args(&input, "same.csv");
    let out = ratepool(dir.path(), &args.iter().map(String::as_str).collect::<Vec<_>>());
    assert!(out.status.success(), "{}", stderr(&out));
    assert!(
        std::fs::read(dir.path().join("same.csv")).unwrap()
            == std::fs::read(dir.path().join("fit.csv")).unwrap()
    );
    let printed = String::from_utf8(out.stdout).unwrap();
    assert!(
        printed.contains(
            "  prior fit    (saved in s.json, on the data it was fitted to) log marginal likelihood"
        ),
        "{printed}"
    );
    let saved = summary(&dir.path().join("s.json"));
    let scored = summary(&dir.path().join("same.csv.json"));
    assert_eq!(scored["prior_file"], "s.json");
    assert_eq!(scored["levels"], saved["levels"]);
    assert_eq!(scored["mean_score"], saved["mean_score"]);
    // A few sellers alone keep the posteriors the whole fit gave them (a fit of the
    // few would give another prior); the mean score is the closed form
    // Σ s_k (a_k + n_k) / (A + N) at the saved shapes (conjugacy, common practice).
    let whole = Csv::read(&dir.path().join("fit.csv"));
    let mut few = String::from("seller_id,stars_1,stars_2,stars_3,stars_4,stars_5\n");
    let all = Csv::read(std::path::Path::new(&input));
    for row in all.rows.iter().take(40) {
        few.push_str(&row.join(","));
        few.push('\n');
    }
    let few_path = write(dir.path(), "few.csv", &few);
    let args = scored_args(&few_path, "few_out.csv");
    let out = ratepool(dir.path(), &args.iter().map(String::as_str).collect::<Vec<_>>());
    assert!(out.status.success(), "{}", stderr(&out));
    let few_out = Csv::read(&dir.path().join("few_out.csv"));
    let shapes: Vec<f64> =
        saved["levels"].as_array().unwrap().iter().map(|l| l["prior_shape"].as_f64().unwrap()).collect();
    for (i, row) in few_out.rows.iter().enumerate() {
        let at = |table: &Csv, name: &str| table.header.iter().position(|h| h == name).unwrap();
        assert_eq!(row[at(&few_out, "seller_id")], whole.rows[i][at(&whole, "seller_id")]);
        for column in ["posterior_mean", "posterior_sd", "interval_lo", "interval_hi", "prob_above"] {
            assert_eq!(row[at(&few_out, column)], whole.rows[i][at(&whole, column)], "{column}");
        }
        let counts: Vec<f64> =
            (1..=5).map(|k| row[at(&few_out, &format!("stars_{k}"))].parse().unwrap()).collect();
        let total: f64 = shapes.iter().sum::<f64>() + counts.iter().sum::<f64>();
        let mean: f64 = (0..5).map(|k| (k + 1) as f64 * (shapes[k] + counts[k])).sum::<f64>() / total;
        let got: f64 = row[at(&few_out, "posterior_mean")].parse().unwrap();
        assert!((got - mean).abs() < 1e-12 * mean, "{got} against {mean}");
    }
    // What score cannot read is refused, naming why, and nothing is written.
    let missing = write(dir.path(), "missing.csv", "seller_id,stars_1,stars_2,stars_3,stars_4\ns1,0,0,0,1\n");
    let args = scored_args(&missing, "x.csv");
    let args: Vec<&str> = args.iter().map(String::as_str).collect();
    assert_refused(dir.path(), &args, "stars_5", "x.csv");
    let mut rows = args.clone();
    rows.extend(["--outcome", "stars"]);
    assert_refused(dir.path(), &rows, "score reads one row per group with the count columns the prior was fitted with (stars_1, stars_2, stars_3, stars_4, stars_5)", "x.csv");
    let mut other = args.clone();
    other.extend(["--model", "beta-binomial"]);
    assert_refused(
        dir.path(),
        &other,
        "the prior file holds a dirichlet-multinomial prior and this run asks for a beta-binomial one",
        "x.csv",
    );
}

#[test]
fn prob_top_is_the_chance_of_a_mean_score_beyond_the_threshold_with_k_sellers_expected_beyond_it() {
    let dir = tempfile::tempdir().unwrap();
    let input = demo_sellers();
    let mut args = vec!["fit", "--input", &input];
    args.extend(STARS);
    args.extend(["--output", "top.csv", "--summary", "top.json", "--top", "20", "--ranks"]);
    let out = ratepool(dir.path(), &args);
    assert!(out.status.success(), "{}", stderr(&out));
    let s = summary(&dir.path().join("top.json"));
    assert_eq!((s["top"]["k"].as_u64(), s["top"]["method"].as_str()), (Some(20), Some("threshold")));
    assert_eq!(s["rank_order"], "highest-first");
    let threshold = s["top"]["threshold"].as_f64().unwrap();
    let top = Csv::read(&dir.path().join("top.csv"));
    let expected: f64 = top.floats("prob_top").iter().sum();
    assert!((expected - 20.0).abs() < 1e-6, "sellers expected among the best 20: {expected}");
    // Each seller's prob_top is its P(mean score > c) at that threshold: the
    // exceedance that --above computes (checked against mpmath above), to the bit.
    let shown = format!("{threshold:?}");
    let mut args = vec!["fit", "--input", &input];
    args.extend(STARS);
    args.extend(["--output", "above.csv", "--above", &shown]);
    let out = ratepool(dir.path(), &args);
    assert!(out.status.success(), "{}", stderr(&out));
    let above = Csv::read(&dir.path().join("above.csv"));
    assert_eq!(top.column("prob_top"), above.column("prob_above"));
}

#[test]
fn prob_top_over_two_levels_is_the_beta_binomials() {
    // The demo sellers' ratings as two levels, 1-3 stars and 4-5 stars, scored 0 and 1:
    // the beta-binomial of 4-5 stars among all ratings, whose prob_top the same threshold method gives.
    let dir = tempfile::tempdir().unwrap();
    let sellers = Csv::read(std::path::Path::new(&demo_sellers()));
    let mut text = String::from("seller_id,low,high,total\n");
    for row in &sellers.rows {
        let stars: Vec<i64> = row[1..].iter().map(|v| v.parse().unwrap()).collect();
        let high = stars[3] + stars[4];
        let total: i64 = stars.iter().sum();
        text.push_str(&format!("{},{},{high},{total}\n", row[0], total - high));
    }
    let input = write(dir.path(), "two.csv", &text);
    let line = "--group seller_id --top 25 --rank-lowest-first --output";
    let mut stars =
        vec!["fit", "--input", &input, "--model", "dirichlet-multinomial", "--level-counts", "low,high"];
    stars.extend(["--level-scores", "0,1"]);
    stars.extend(line.split(' '));
    stars.push("stars.csv");
    let mut binomial = vec!["fit", "--input", &input, "--model", "beta-binomial", "--successes", "high"];
    binomial.extend(["--trials", "total", "--top-method", "threshold"]);
    binomial.extend(line.split(' '));
    binomial.push("binomial.csv");
    for args in [&stars, &binomial] {
        let out = ratepool(dir.path(), args);
        assert!(out.status.success(), "{}", stderr(&out));
    }
    let (stars, binomial) =
        (Csv::read(&dir.path().join("stars.csv")), Csv::read(&dir.path().join("binomial.csv")));
    let pairs = crate::util::paired(&stars.rows, &binomial.rows, "sellers");
    let (at_stars, at_binomial) = (
        stars.header.iter().position(|h| h == "prob_top").unwrap(),
        binomial.header.iter().position(|h| h == "prob_top").unwrap(),
    );
    let mut largest = 0.0f64;
    for (a, b) in pairs {
        let (a, b): (f64, f64) = (a[at_stars].parse().unwrap(), b[at_binomial].parse().unwrap());
        largest = largest.max((a - b).abs());
    }
    assert!(largest < 1e-6, "prob_top differs by {largest}");
    assert!(stars.floats("prob_top").iter().any(|&p| p > 0.5), "some seller is likely among the lowest 25");
}

#[test]
fn the_pair_output_holds_each_distinct_count_vector_once_and_joins_back_to_every_seller() {
    let dir = tempfile::tempdir().unwrap();
    let input = demo_sellers();
    let mut args = vec!["fit", "--input", &input];
    args.extend(STARS);
    let more = "--output out.csv --summary s.json --pair-output vectors.csv --above 4.5 --flag-fdr 0.1 --ranks --top 10";
    args.extend(more.split(' '));
    let out = ratepool(dir.path(), &args);
    assert!(out.status.success(), "{}", stderr(&out));
    let vectors = Csv::read(&dir.path().join("vectors.csv"));
    let table = Csv::read(&dir.path().join("out.csv"));
    let s = summary(&dir.path().join("s.json"));
    assert_eq!(vectors.rows.len() as u64, s["distinct_vectors"].as_u64().unwrap(), "one row per vector");
    let levels = ["stars_1", "stars_2", "stars_3", "stars_4", "stars_5"];
    assert_eq!(vectors.header[..6], ["stars_1", "stars_2", "stars_3", "stars_4", "stars_5", "group_count"]);
    // The output's columns after the id are the vector's, in the same order.
    assert_eq!(vectors.header[6..], table.header[6..]);
    let key = |row: &[String], header: &[String]| -> Vec<String> {
        levels.iter().map(|l| row[header.iter().position(|h| h == l).unwrap()].clone()).collect()
    };
    let by_vector: std::collections::HashMap<Vec<String>, &Vec<String>> =
        vectors.rows.iter().map(|row| (key(row, &vectors.header), row)).collect();
    assert_eq!(by_vector.len(), vectors.rows.len(), "each vector once");
    // Joined back on the count columns, every seller's row is its vector's, and the group counts add up.
    let mut counted: std::collections::HashMap<Vec<String>, i64> = std::collections::HashMap::new();
    for row in &table.rows {
        let vector = key(row, &table.header);
        let joined = by_vector[&vector];
        assert_eq!(row[6..], joined[6..], "{vector:?}");
        *counted.entry(vector).or_default() += 1;
    }
    for (vector, row) in &by_vector {
        assert_eq!(counted[vector], row[5].parse::<i64>().unwrap(), "group_count of {vector:?}");
    }
}

/// `sellers` invented sellers per kind, each with `ratings` star ratings:
/// shares drawn from Dirichlet(strength × mean) of its kind (rand_distr's
/// Gamma draws over their sum), counts multinomial (binomial given the
/// levels before), as CSV with the demo's columns.
fn drawn_sellers(kinds: &[[f64; 5]], strength: f64, sellers: usize, ratings: u64, seed: u64) -> String {
    use rand::SeedableRng;
    use rand_distr::{Binomial, Distribution, Gamma};
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    let mut text = String::from("seller_id,stars_1,stars_2,stars_3,stars_4,stars_5\n");
    for (kind, mean) in kinds.iter().enumerate() {
        for seller in 0..sellers {
            let draws: Vec<f64> =
                mean.iter().map(|m| Gamma::new(strength * m, 1.0).unwrap().sample(&mut rng)).collect();
            let (mut rest, mut left) = (draws.iter().sum::<f64>(), ratings);
            let mut counts = Vec::new();
            for draw in &draws {
                let n = if left == 0 {
                    0
                } else {
                    Binomial::new(left, (draw / rest).min(1.0)).unwrap().sample(&mut rng)
                };
                counts.push(n.to_string());
                left -= n;
                rest -= draw;
            }
            text += &format!("kind{kind}-{seller},{}\n", counts.join(","));
        }
    }
    text
}

#[test]
fn the_calibration_check_fits_one_kind_and_finds_two() {
    // Source: the check's own claim, that each seller's place among nine
    // replicates from its prior predictive is uniform when the model holds
    // (exchangeability: the rank argument of simulation-based calibration,
    // Talts et al. 2018). Sellers drawn from one Dirichlet fit; sellers of
    // two kinds (mostly five stars, and spread over the scale) cannot be
    // one Dirichlet, and the check says so, in the summary, the terminal and a warning.
    let dir = tempfile::tempdir().unwrap();
    let cases = [
        ("one.csv", vec![[0.05, 0.03, 0.06, 0.2, 0.66]], "fits"),
        ("two.csv", vec![[0.02, 0.02, 0.03, 0.13, 0.8], [0.25, 0.2, 0.2, 0.2, 0.15]], "poor fit"),
    ];
    for (name, kinds, verdict) in cases {
        let input = write(dir.path(), name, &drawn_sellers(&kinds, 40.0, 1500, 20, 5));
        let mut args = vec!["fit", "--input", input.as_str()];
        args.extend(STARS);
        args.extend(["--output", "out.csv", "--summary", "s.json"]);
        let out = ratepool(dir.path(), &args);
        assert!(out.status.success(), "{}", stderr(&out));
        let s = summary(&dir.path().join("s.json"));
        let checks = &s["checks"];
        assert_eq!(checks["verdict"], verdict, "{name}: {checks}");
        assert_eq!(checks["replicates"], 9);
        let bins: Vec<u64> =
            checks["calibration"]["bins"].as_array().unwrap().iter().map(|b| b.as_u64().unwrap()).collect();
        assert_eq!(bins.iter().sum::<u64>(), 1500 * kinds.len() as u64);
        let text = String::from_utf8_lossy(&out.stdout);
        assert!(
            text.contains("placed among 9 replicates") && text.contains(&format!(": {verdict}\n")),
            "{text}"
        );
        let warned = s["warnings"]
            .as_array()
            .unwrap()
            .iter()
            .any(|w| w.as_str().unwrap().contains("calibration chi-square"));
        assert_eq!(warned, verdict == "poor fit", "{name}: {}", s["warnings"]);
        // The same seed gives the same bins; another seed other bins.
        let again = ratepool(dir.path(), &args);
        assert!(again.status.success());
        assert_eq!(summary(&dir.path().join("s.json"))["checks"], *checks);
        args.extend(["--seed", "99"]);
        assert!(ratepool(dir.path(), &args).status.success());
        assert_ne!(
            summary(&dir.path().join("s.json"))["checks"]["calibration"]["bins"],
            checks["calibration"]["bins"]
        );
    }
}

fn demo_shops() -> String {
    format!("{}/demo-data/star_shops.csv", env!("CARGO_MANIFEST_DIR"))
}

/// The demo shops' columns and model.
const SHOPS: [&str; 6] = [
    "--model",
    "dirichlet-multinomial",
    "--group",
    "shop_id",
    "--level-counts",
    "stars_1,stars_2,stars_3,stars_4,stars_5",
];

/// The Dirichlet-multinomial log pmf of `counts` at `shapes` (the handbook
/// formula: ln N!/Π n_k! + ln Γ(A)/Γ(A + N) + Σ ln Γ(a_k + n_k)/Γ(a_k)),
/// with statrs' ln Γ.
fn dirichlet_multinomial_ln_pmf(shapes: &[f64], counts: &[f64]) -> f64 {
    use statrs::function::gamma::ln_gamma;
    let (strength, n) = (shapes.iter().sum::<f64>(), counts.iter().sum::<f64>());
    let mut ln = ln_gamma(n + 1.0) + ln_gamma(strength) - ln_gamma(strength + n);
    for (a, k) in shapes.iter().zip(counts) {
        ln += ln_gamma(a + k) - ln_gamma(*a) - ln_gamma(k + 1.0);
    }
    ln
}

#[test]
fn each_segment_is_scored_as_its_shops_alone_and_a_small_one_takes_the_all_shops_prior() {
    // Source: a segment's prior is the fit of its rows alone (the definition
    // of --by); the fallback segment is scored as the fit without --by scores
    // it; the segment test's likelihoods are the handbook Dirichlet-multinomial
    // pmf at the fitted shapes.
    let dir = tempfile::tempdir().unwrap();
    let input = demo_shops();
    let run = |args: &[&str], output: &str, summary_file: &str| {
        let mut full = vec!["--quiet", "fit", "--input"];
        full.extend(args);
        full.extend(SHOPS);
        full.extend(["--above", "4.5", "--output", output, "--summary", summary_file]);
        let out = ratepool(dir.path(), &full);
        assert!(out.status.success(), "{}", stderr(&out));
        (Csv::read(&dir.path().join(output)), summary(&dir.path().join(summary_file)))
    };
    let (segmented, s) = run(&[input.as_str(), "--by", "category"], "by.csv", "by.json");
    let (plain, all) = run(&[input.as_str()], "all.csv", "all.json");
    assert_eq!(segmented.header[..2], ["shop_id".to_string(), "category".to_string()]);
    let per_row = [
        "raw_mean",
        "posterior_mean",
        "posterior_sd",
        "interval_lo",
        "interval_hi",
        "pool_weight",
        "posterior_share_stars_1",
        "posterior_share_stars_5",
        "prob_above",
    ];
    let categories = segmented.column("category");
    let fallback = segmented.column("prior_fallback");
    let text = std::fs::read_to_string(&input).unwrap();
    let header = text.lines().next().unwrap();
    let mut own_likelihood = 0.0;
    for category in ["food", "prints", "repairs"] {
        let rows: Vec<&str> =
            text.lines().skip(1).filter(|l| l.split(',').nth(1) == Some(category)).collect();
        let alone =
            write(dir.path(), &format!("{category}.csv"), &format!("{header}\n{}\n", rows.join("\n")));
        let (table, own) =
            run(&[alone.as_str()], &format!("{category}-out.csv"), &format!("{category}.json"));
        own_likelihood += own["log_marginal_likelihood"].as_f64().unwrap();
        let at: Vec<usize> = (0..categories.len()).filter(|&i| categories[i] == category).collect();
        assert_eq!(at.len(), table.rows.len());
        for column in per_row {
            let (mine, theirs) = (segmented.column(column), table.column(column));
            for (j, &i) in at.iter().enumerate() {
                assert_eq!(mine[i], theirs[j], "{category} {column} row {i}");
            }
        }
        assert!(at.iter().all(|&i| fallback[i] == "false"));
    }
    // The gadgets: 15 shops, under --min-groups 30, on the all-shops prior.
    let gadgets: Vec<usize> = (0..categories.len()).filter(|&i| categories[i] == "gadgets").collect();
    assert_eq!(gadgets.len(), 15);
    for column in per_row {
        let (mine, theirs) = (segmented.column(column), plain.column(column));
        for &i in &gadgets {
            assert_eq!(mine[i], theirs[i], "gadgets {column} row {i}");
            assert_eq!(fallback[i], "true");
        }
    }
    let report = &s["segments"]["segments"];
    let keys: Vec<&str> =
        report.as_array().unwrap().iter().map(|r| r["key"]["category"].as_str().unwrap()).collect();
    assert_eq!(keys, ["food", "gadgets", "prints", "repairs"]);
    assert!(report[1]["fallback"].as_str().unwrap().contains("--min-groups 30"));
    assert_eq!(s["log_marginal_likelihood"], all["log_marginal_likelihood"]);
    // One prior for all against one per segment: 3 × 5 shapes.
    let shapes: Vec<f64> =
        all["levels"].as_array().unwrap().iter().map(|l| l["prior_shape"].as_f64().unwrap()).collect();
    let gadget_likelihood: f64 = text
        .lines()
        .skip(1)
        .filter(|l| l.split(',').nth(1) == Some("gadgets"))
        .map(|l| {
            let counts: Vec<f64> = l.split(',').skip(2).map(|c| c.parse().unwrap()).collect();
            dirichlet_multinomial_ln_pmf(&shapes, &counts)
        })
        .sum();
    let test = &s["segment_test"];
    assert_eq!(test["degrees_of_freedom"], 15);
    let statistic =
        2.0 * (own_likelihood + gadget_likelihood - all["log_marginal_likelihood"].as_f64().unwrap());
    assert!(
        (test["statistic"].as_f64().unwrap() - statistic).abs() < 1e-6 * statistic,
        "{test} vs {statistic}"
    );
    assert!(s["warnings"]
        .as_array()
        .unwrap()
        .iter()
        .any(|w| w.as_str().unwrap().contains("1 of 4 segments")));
}

#[test]
fn segments_of_star_ratings_refuse_what_they_do_not_yet_take() {
    let dir = tempfile::tempdir().unwrap();
    let input = demo_shops();
    let mut by_level = vec!["fit", "--input", input.as_str()];
    by_level.extend(SHOPS);
    by_level.extend(["--by", "stars_2", "--output", "o.csv"]);
    assert_refused(dir.path(), &by_level, "--by names 'stars_2'", "o.csv");
}

#[test]
fn score_with_a_segmented_star_prior_gives_each_segment_its_saved_prior() {
    // Source: the fit itself. Its shops scored with its own summary give its
    // table byte for byte; shops of a category the file does not hold are
    // scored as the fit without --by scores them, with prior_fallback.
    let dir = tempfile::tempdir().unwrap();
    let input = demo_shops();
    let fit = |extra: &[&str], output: &str, summary_file: &str| {
        let mut args = vec!["--quiet", "fit", "--input", input.as_str()];
        args.extend(SHOPS);
        args.extend(extra);
        args.extend([
            "--above",
            "4.5",
            "--flag-fdr",
            "0.1",
            "--ranks",
            "--output",
            output,
            "--summary",
            summary_file,
        ]);
        assert!(ratepool(dir.path(), &args).status.success());
    };
    fit(&["--by", "category"], "fit.csv", "by.json");
    fit(&[], "plain.csv", "plain.json");
    let score = |input: &str, extra: &[&str], output: &str| {
        let mut args = vec!["--quiet", "score", "--prior", "by.json", "--input", input, "--group", "shop_id"];
        args.extend(extra);
        args.extend(["--above", "4.5", "--flag-fdr", "0.1", "--ranks", "--output", output]);
        ratepool(dir.path(), &args)
    };
    let out = score(&input, &["--by", "category"], "scored.csv");
    assert!(out.status.success(), "{}", stderr(&out));
    let read = |name: &str| std::fs::read(dir.path().join(name)).unwrap();
    assert_eq!(read("scored.csv"), read("fit.csv"));
    // The gadgets renamed: a category the file does not hold.
    let renamed = std::fs::read_to_string(&input).unwrap().replace(",gadgets,", ",toys,");
    let toys = write(dir.path(), "toys.csv", &renamed);
    assert!(score(&toys, &["--by", "category"], "toys-out.csv").status.success());
    let (scored, plain) =
        (Csv::read(&dir.path().join("toys-out.csv")), Csv::read(&dir.path().join("plain.csv")));
    let categories = scored.column("category");
    let toy_rows: Vec<usize> = (0..categories.len()).filter(|&i| categories[i] == "toys").collect();
    assert_eq!(toy_rows.len(), 15);
    for column in ["posterior_mean", "interval_lo", "interval_hi", "prob_above"] {
        for &i in &toy_rows {
            assert_eq!(scored.column(column)[i], plain.column(column)[i], "{column} row {i}");
        }
    }
    assert!(toy_rows.iter().all(|&i| scored.column("prior_fallback")[i] == "true"));
    let refused = |extra: &[&str], message: &str| {
        let mut args = vec!["score", "--prior", "by.json", "--input", input.as_str(), "--group", "shop_id"];
        args.extend(extra);
        args.extend(["--output", "no.csv"]);
        assert_refused(dir.path(), &args, message, "no.csv");
    };
    refused(&[], "give --by category");
    refused(&["--by", "shop_id"], "--by names 'shop_id'");
}

#[test]
fn one_row_per_rating_by_segment_gives_the_same_shops_as_their_counts() {
    // The demo shops written out as one row per rating (shops mixed, each
    // shop's first rating in shop order so both outputs list the shops alike),
    // fitted by category: every shop's row as from its counts, and the same summary figures.
    let dir = tempfile::tempdir().unwrap();
    let shops = Csv::read(std::path::Path::new(&demo_shops()));
    let mut first = String::from("shop_id,category,stars\n");
    let mut rest = String::new();
    for row in &shops.rows {
        let mut own = Vec::new();
        for (stars, count) in row[2..].iter().enumerate() {
            own.extend(std::iter::repeat_n(stars + 1, count.parse::<usize>().unwrap()));
        }
        for (j, stars) in own.iter().enumerate() {
            let line = format!("{},{},{stars}\n", row[0], row[1]);
            if j == 0 {
                first += &line;
            } else {
                rest += &line;
            }
        }
    }
    write(dir.path(), "ratings.csv", &(first + &rest));
    let input = demo_shops();
    let mut counts = vec!["--quiet", "fit", "--input", &input];
    counts.extend(SHOPS);
    counts.extend([
        "--by",
        "category",
        "--output",
        "counts.csv",
        "--summary",
        "counts.json",
        "--above",
        "4.5",
    ]);
    assert!(ratepool(dir.path(), &counts).status.success());
    let rows = rating_rows_run("shop_id", &["--by", "category", "--above", "4.5", "--summary", "rows.json"]);
    let out = ratepool(dir.path(), &rows);
    assert!(out.status.success(), "{}", stderr(&out));
    rated_groups_match(dir.path(), 2..7);
    let (a, b) = (summary(&dir.path().join("counts.json")), summary(&dir.path().join("rows.json")));
    for (x, y) in a["segments"]["segments"]
        .as_array()
        .unwrap()
        .iter()
        .zip(b["segments"]["segments"].as_array().unwrap())
    {
        assert_eq!(x["key"], y["key"]);
        // Shops without ratings add nothing to a fit.
        assert_eq!(x["shapes"], y["shapes"]);
    }
}
