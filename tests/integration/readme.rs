//! The README's demo figures, repeated: every terminal output it pastes
//! (compared line by line; a line `...` stands for lines left out), and the
//! figures its prose quotes from the demo outputs, each at the digits the
//! README prints. A change that moves one fails here, not in a reader's hands.

use crate::util::{ratepool, stderr, summary, Csv};
use ratepool::summary::p_value_text;
use std::path::Path;

fn root() -> &'static Path {
    Path::new(env!("CARGO_MANIFEST_DIR"))
}

/// A scratch folder with the demo data where the README's commands name it.
fn scratch() -> tempfile::TempDir {
    let dir = tempfile::tempdir().unwrap();
    std::os::unix::fs::symlink(root().join("demo-data"), dir.path().join("demo-data")).unwrap();
    dir
}

/// Runs a README command line (`cargo run -- ARGS`) in `dir`; stdout.
fn run(dir: &Path, line: &str) -> String {
    let args: Vec<&str> = line.trim().trim_start_matches("cargo run -- ").split_whitespace().collect();
    let out = ratepool(dir, &args);
    assert!(out.status.success(), "{line}: {}", stderr(&out));
    String::from_utf8(out.stdout).unwrap()
}

/// The fenced blocks of the README, in order.
fn blocks(readme: &str) -> Vec<String> {
    let mut blocks = Vec::new();
    let mut current: Option<Vec<&str>> = None;
    for line in readme.lines() {
        match (&mut current, line.starts_with("```")) {
            (None, true) => current = Some(Vec::new()),
            (Some(lines), true) => {
                blocks.push(lines.join("\n"));
                current = None;
            }
            (Some(lines), false) => lines.push(line),
            (None, false) => {}
        }
    }
    blocks
}

/// True when `printed` matches `pasted`, where a pasted line `...` stands for any lines.
fn matches(pasted: &[&str], printed: &[&str]) -> bool {
    match pasted.split_first() {
        None => printed.is_empty(),
        Some((line, rest)) if line.trim() == "..." => {
            (0..=printed.len()).any(|skip| matches(rest, &printed[skip..]))
        }
        Some((line, rest)) => printed.first() == Some(line) && matches(rest, &printed[1..]),
    }
}

#[test]
fn every_terminal_output_the_readme_pastes_is_what_the_command_prints() {
    let readme = std::fs::read_to_string(root().join("README.md")).unwrap();
    let blocks = blocks(&readme);
    let mut compared = 0;
    for (i, block) in blocks.iter().enumerate() {
        if !block.starts_with("ratepool ") || !block.contains(" groups scored (") {
            continue;
        }
        // The command is the last `cargo run -- fit` line of the nearest block before it that has one.
        let command = blocks[..i]
            .iter()
            .rev()
            .find_map(|b| b.lines().rfind(|l| l.starts_with("cargo run -- fit")))
            .unwrap_or_else(|| panic!("no command before the output {block}"));
        let dir = scratch();
        // A neighbour table the command reads is made first, as the README's block makes it.
        let block_of_command = blocks[..i].iter().rev().find(|b| b.lines().any(|l| l == command)).unwrap();
        for line in block_of_command.lines().filter(|l| l.starts_with("cargo run -- neighbours")) {
            run(dir.path(), line);
        }
        let printed = run(dir.path(), command);
        let (pasted, printed): (Vec<&str>, Vec<&str>) = (block.lines().collect(), printed.lines().collect());
        assert!(
            matches(&pasted, &printed),
            "{command}\nthe README pastes:\n{block}\nit prints:\n{}",
            printed.join("\n")
        );
        compared += 1;
    }
    assert_eq!(
        compared, 9,
        "the marketplace, sellers, storefronts, star sellers, star shops, district bands (global and neighbour priors), returns and clinics outputs"
    );
}

/// The row of `group` in a CSV output.
fn row<'a>(table: &'a Csv, group_column: &str, group: &str) -> impl Fn(&str) -> f64 + 'a {
    let at =
        table.column(group_column).iter().position(|g| g == group).unwrap_or_else(|| panic!("no {group}"));
    move |column: &str| table.column(column)[at].parse().unwrap_or(f64::NAN)
}

/// The (mean, conservative) ranks of `group` in a CSV output.
fn ranks(table: &Csv, group_column: &str, group: &str) -> (u64, u64) {
    let of = row(table, group_column, group);
    (of("rank_mean") as u64, of("rank_conservative") as u64)
}

/// `value` printed to `decimals` places is `text`.
fn printed(value: f64, decimals: usize, text: &str) {
    assert_eq!(format!("{value:.decimals$}"), text, "{value}");
}

#[test]
fn the_marketplace_figures_in_the_prose() {
    let dir = scratch();
    let common = "fit --input demo-data/marketplace.csv --model beta-binomial --group seller_id --successes positive_ratings --trials total_ratings";
    run(dir.path(), &format!("{common} --ranks --output m.csv --summary m.json"));
    let table = Csv::read(&dir.path().join("m.csv"));
    let s = summary(&dir.path().join("m.json"));
    printed(s["prior"]["alpha"].as_f64().unwrap(), 2, "18.30");
    printed(s["prior"]["beta"].as_f64().unwrap(), 2, "2.01");
    let seller = row(&table, "seller_id", "seller-00073");
    printed(seller("posterior_mean"), 3, "0.859");
    printed(seller("interval_lo"), 3, "0.686");
    printed(seller("interval_hi"), 3, "0.968");
    printed(seller("pool_weight"), 3, "0.953");
    let seller = row(&table, "seller_id", "seller-09140");
    printed(seller("raw_proportion"), 3, "0.678");
    printed(seller("posterior_mean"), 3, "0.681");
    printed(seller("pool_weight"), 3, "0.016");
    assert_eq!(ranks(&table, "seller_id", "seller-00001"), (7803, 9480));
    assert_eq!(ranks(&table, "seller_id", "seller-06391"), (1, 1));
    assert_eq!(ranks(&table, "seller_id", "seller-19835"), (2, 4));
    // Fourth conservatively, behind seller-15439 (3,091 of 3,124), whose interval is narrower.
    assert!(ranks(&table, "seller_id", "seller-15439").1 < 4);
    let behind = row(&table, "seller_id", "seller-15439");
    assert_eq!((behind("positive_ratings"), behind("total_ratings")), (3091.0, 3124.0));
    let all_positive = table.column("raw_proportion").iter().filter(|r| r.parse() == Ok(1.0)).count();
    assert_eq!(all_positive, 8420);
    // prob_top with --top 20 (5,000 draws by default at 20,000 groups).
    run(dir.path(), &format!("{common} --top 20 --output t.csv"));
    let table = Csv::read(&dir.path().join("t.csv"));
    let top = |id: &str| row(&table, "seller_id", id)("prob_top");
    printed(top("seller-19835"), 3, "0.096");
    printed(top("seller-06391"), 3, "0.063");
    printed(top("seller-00001"), 4, "0.0011");
    let largest = table.floats("prob_top").iter().copied().fold(0.0, f64::max);
    assert_eq!(largest, top("seller-19835"), "seller-19835 has the largest");
}

#[test]
fn the_sellers_figures_in_the_prose() {
    let dir = scratch();
    let common = "fit --input demo-data/sellers.csv --model beta-binomial --group seller_id --successes positive_ratings --trials total_ratings";
    run(
        dir.path(),
        &format!(
            "{common} --covariates category --covariates-log tenure_months --output c.csv --summary c.json"
        ),
    );
    run(dir.path(), &format!("{common} --output p.csv --summary p.json"));
    let (with, without) = (Csv::read(&dir.path().join("c.csv")), Csv::read(&dir.path().join("p.csv")));
    let s = summary(&dir.path().join("c.json"));
    let coefficient = |name: &str| {
        let all = s["prior"]["coefficients"].as_array().unwrap();
        all.iter().find(|c| c["name"] == name).unwrap()["estimate"].as_f64().unwrap()
    };
    printed(2f64.powf(coefficient("log(tenure_months)")), 2, "1.39");
    printed(coefficient("category=games").exp(), 2, "0.65");
    printed(summary(&dir.path().join("p.json"))["prior"]["strength"].as_f64().unwrap(), 1, "16.8");
    let seller = row(&with, "seller_id", "seller-00284");
    assert_eq!(
        (seller("tenure_months"), seller("positive_ratings"), seller("total_ratings")),
        (1.0, 1.0, 1.0)
    );
    printed(seller("prior_mean"), 3, "0.758");
    printed(seller("posterior_mean"), 3, "0.764");
    printed(row(&without, "seller_id", "seller-00284")("posterior_mean"), 3, "0.880");
    let seller = row(&with, "seller_id", "seller-04470");
    assert_eq!(
        (seller("tenure_months"), seller("positive_ratings"), seller("total_ratings")),
        (453.0, 1.0, 1.0)
    );
    printed(seller("posterior_mean"), 3, "0.978");
    printed(row(&without, "seller_id", "seller-04470")("posterior_mean"), 3, "0.880");
}

#[test]
fn the_district_figures_in_the_prose() {
    let dir = scratch();
    let common = "fit --input demo-data/districts.csv --model gamma-poisson --group district_id --events observed_cases --exposure expected_cases";
    run(dir.path(), &format!("{common} --above 1 --flag-fdr 0.1 --output d.csv --summary d.json"));
    let table = Csv::read(&dir.path().join("d.csv"));
    let district = row(&table, "district_id", "district-2581");
    printed(district("raw_rate"), 1, "12.3");
    printed(district("posterior_mean"), 2, "1.42");
    printed(district("prob_above"), 2, "0.81");
    let district = row(&table, "district_id", "district-0616");
    printed(district("raw_rate"), 2, "1.60");
    printed(district("posterior_mean"), 2, "1.58");
    printed(district("prob_above"), 10, "0.9999999997");
    assert_eq!(table.floats("prob_above").iter().filter(|&&p| p > 0.95).count(), 111);
    let s = summary(&dir.path().join("d.json"));
    assert_eq!(s["flags"]["groups_flagged"], 334);
    printed(s["flags"]["expected_false_flags"].as_f64().unwrap(), 1, "33.4");
    printed(s["prior"]["shape"].as_f64().unwrap(), 3, "6.008");
    printed(s["prior"]["rate"].as_f64().unwrap(), 3, "6.113");
    printed(s["prior"]["mean"].as_f64().unwrap(), 3, "0.983");
}

#[test]
fn the_district_bands_figures_in_the_prose() {
    let dir = scratch();
    run(dir.path(), "fit --model gamma-poisson --input demo-data/district_bands.csv --group district_id --events cases --population population --strata age_band --above 1.2 --flag-fdr 0.1 --output b.csv");
    let table = Csv::read(&dir.path().join("b.csv"));
    let (ids, flagged) = (table.column("district_id"), table.column("flagged"));
    let flag_of = |id: &str| flagged[ids.iter().position(|g| g == id).unwrap()] == "true";
    let district = row(&table, "district_id", "district-0190");
    printed(district("smr"), 2, "2.15");
    printed(district("cases"), 0, "17");
    printed(district("expected"), 2, "7.92");
    printed(district("posterior_mean"), 2, "1.32");
    assert!(!flag_of("district-0190"));
    let highest = table.floats("smr").into_iter().fold(f64::MIN, f64::max);
    assert_eq!(highest, district("smr"), "the highest SMR");
    let hot: Vec<String> = (101..=112).map(|i| format!("district-{i:04}")).collect();
    assert_eq!(hot.iter().filter(|id| flag_of(id)).count(), 7);
    let district = row(&table, "district_id", "district-0101");
    printed(district("smr"), 2, "1.70");
    printed(district("cases"), 0, "14");
    assert!(!flag_of("district-0101"));
}

/// Mean squared error of `column` against the districts' hidden risks, over `ids` (or all).
fn squared_error(
    table: &Csv,
    column: &str,
    truth: &std::collections::HashMap<String, f64>,
    ids: Option<&[String]>,
) -> f64 {
    let (names, values) = (table.column("district_id"), table.floats(column));
    let chosen: Vec<(f64, f64)> = names
        .iter()
        .zip(values)
        .filter(|(id, _)| ids.is_none_or(|ids| ids.contains(id)))
        .map(|(id, v)| (v, truth[id]))
        .collect();
    assert!(!chosen.is_empty());
    chosen.iter().map(|(v, t)| (v - t) * (v - t)).sum::<f64>() / chosen.len() as f64
}

#[test]
fn the_neighbour_prior_figures_in_the_prose() {
    let dir = scratch();
    let common = "fit --model gamma-poisson --input demo-data/district_bands.csv --group district_id --events cases --population population --strata age_band --above 1.2 --flag-fdr 0.1";
    run(
        dir.path(),
        "neighbours --map demo-data/district_map.geojson --key district_id --output district_neighbours.csv",
    );
    run(dir.path(), &format!("{common} --output global.csv"));
    run(dir.path(), &format!("{common} --neighbours district_neighbours.csv --output local.csv"));
    let truth_table = Csv::read(&root().join("demo-data/district_truth.csv"));
    let truth: std::collections::HashMap<String, f64> =
        truth_table.column("district_id").into_iter().zip(truth_table.floats("true_risk")).collect();
    let hot: Vec<String> = (101..=112).map(|i| format!("district-{i:04}")).collect();
    let (global, local) =
        (Csv::read(&dir.path().join("global.csv")), Csv::read(&dir.path().join("local.csv")));
    let flagged = |table: &Csv| -> Vec<String> {
        let ids = table.column("district_id");
        ids.into_iter().zip(table.column("flagged")).filter(|(_, f)| f == "true").map(|(id, _)| id).collect()
    };
    let (global_flags, local_flags) = (flagged(&global), flagged(&local));
    let truly = |flags: &[String]| flags.iter().filter(|id| truth[id.as_str()] > 1.2).count();
    let in_hot = |flags: &[String]| flags.iter().filter(|id| hot.contains(id)).count();
    assert_eq!((global_flags.len(), truly(&global_flags), in_hot(&global_flags)), (19, 19, 7));
    assert_eq!((local_flags.len(), truly(&local_flags), in_hot(&local_flags)), (31, 29, 9));
    let wrong: Vec<&String> = local_flags.iter().filter(|id| truth[id.as_str()] <= 1.2).collect();
    assert_eq!(wrong, ["district-0076", "district-0208"]);
    let (before, after) =
        (row(&global, "district_id", "district-0101"), row(&local, "district_id", "district-0101"));
    printed(after("smr"), 2, "1.70");
    printed(after("cases"), 0, "14");
    printed(before("posterior_mean"), 2, "1.19");
    assert!(
        !global_flags.contains(&"district-0101".to_string())
            && local_flags.contains(&"district-0101".to_string())
    );
    printed(after("prior_mean"), 2, "1.60");
    printed(after("posterior_mean"), 2, "1.62");
    printed(after("prob_above"), 2, "0.99");
    for (id, smr, risk, centre) in
        [("district-0076", "1.08", "0.90", "1.23"), ("district-0208", "1.16", "1.15", "1.29")]
    {
        let district = row(&local, "district_id", id);
        printed(district("smr"), 2, smr);
        printed(truth[id], 2, risk);
        printed(district("prior_mean"), 2, centre);
        // Local variance 0: the prior is the neighbours' pooled counts, so the posterior
        // mean is the neighbourhood's rate, the prior centre.
        assert!((district("posterior_mean") - district("prior_mean")).abs() < 1e-12, "{id}");
    }
    printed(squared_error(&local, "posterior_mean", &truth, Some(&hot)), 3, "0.023");
    printed(squared_error(&global, "posterior_mean", &truth, Some(&hot)), 3, "0.109");
    printed(squared_error(&global, "posterior_mean", &truth, None), 4, "0.0286");
    printed(squared_error(&local, "posterior_mean", &truth, None), 4, "0.0327");
    printed(squared_error(&local, "smr", &truth, None), 4, "0.0484");
    // The maps' two darkest classes (1.5 and above): on the raw map, and on the posterior map.
    let dark = |column: &str| -> (usize, usize) {
        let ids = local.column("district_id");
        let dark: Vec<&String> =
            ids.iter().zip(local.floats(column)).filter(|(_, v)| *v >= 1.5).map(|(id, _)| id).collect();
        (dark.len(), dark.iter().filter(|id| hot.contains(id)).count())
    };
    assert_eq!(dark("smr"), (23, 8));
    assert_eq!(dark("posterior_mean"), (8, 8));
}

#[test]
fn the_storefront_figures_in_the_prose() {
    let dir = scratch();
    let storefronts = "fit --input demo-data/storefronts.csv --model beta-binomial --group storefront_id --successes purchases --trials visits --below 0.02 --flag-fdr 0.05";
    run(dir.path(), &format!("{storefronts} --prior-shape free --output free.csv --summary free.json"));
    run(dir.path(), &format!("{storefronts} --output beta.csv --summary beta.json"));
    let s = summary(&dir.path().join("free.json"));
    let below: f64 = s["prior"]["support"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|point| point[0].as_f64().unwrap() < 0.02)
        .map(|point| point[1].as_f64().unwrap())
        .sum();
    printed(below, 2, "0.31");
    let comparison = &s["prior_comparison"];
    printed(comparison["parametric_prior"]["mean"].as_f64().unwrap(), 3, "0.045");
    printed(comparison["log_likelihood_gain"].as_f64().unwrap(), 0, "327");
    let (free, beta) = (Csv::read(&dir.path().join("free.csv")), Csv::read(&dir.path().join("beta.csv")));
    let flags = |table: &Csv| table.column("flagged").iter().map(|f| f == "true").collect::<Vec<bool>>();
    let (free_flags, beta_flags) = (flags(&free), flags(&beta));
    assert_eq!(free_flags.iter().filter(|&&f| f).count(), 597);
    assert_eq!(beta_flags.iter().filter(|&&f| f).count(), 114);
    assert!(free_flags.iter().zip(&beta_flags).all(|(free, beta)| *free || !beta), "one lost its flag");
    let (free_store, beta_store) =
        (row(&free, "storefront_id", "store-0240"), row(&beta, "storefront_id", "store-0240"));
    printed(free_store("purchases"), 0, "0");
    printed(free_store("visits"), 0, "45");
    printed(100.0 * free_store("posterior_mean"), 2, "1.84");
    printed(100.0 * beta_store("posterior_mean"), 2, "2.31");
}

#[test]
fn the_star_seller_figures_in_the_prose() {
    let dir = scratch();
    run(dir.path(), "fit --input demo-data/star_sellers.csv --model dirichlet-multinomial --group seller_id --level-counts stars_1,stars_2,stars_3,stars_4,stars_5 --above 4.5 --flag-fdr 0.1 --ranks --output stars.csv --summary stars.json");
    let s = summary(&dir.path().join("stars.json"));
    printed(s["mean_score"].as_f64().unwrap(), 2, "4.38");
    printed(s["strength"].as_f64().unwrap(), 1, "9.9");
    let table = Csv::read(&dir.path().join("stars.csv"));
    let three = row(&table, "seller_id", "seller-0007");
    let counts: Vec<f64> = (1..=5).map(|k| three(&format!("stars_{k}"))).collect();
    assert_eq!(counts, [0.0, 0.0, 0.0, 0.0, 3.0]);
    printed(three("raw_mean"), 1, "5.0");
    printed(three("posterior_mean"), 2, "4.53");
    printed(three("interval_lo"), 2, "3.88");
    printed(three("interval_hi"), 2, "4.89");
    printed(three("prob_above"), 2, "0.62");
    assert_eq!(
        table.column("flagged")[table.column("seller_id").iter().position(|g| g == "seller-0007").unwrap()],
        "false"
    );
    let many = row(&table, "seller_id", "seller-0042");
    printed((1..=5).map(|k| many(&format!("stars_{k}"))).sum::<f64>(), 0, "800");
    printed(many("raw_mean"), 2, "4.72");
    printed(many("posterior_mean"), 3, "4.716");
    printed(many("interval_lo"), 3, "4.661");
    printed(many("interval_hi"), 3, "4.765");
    assert!(many("prob_above") > 0.99999999);
    assert_eq!(ranks(&table, "seller_id", "seller-0042").1, 27);
    assert_eq!(ranks(&table, "seller_id", "seller-0007").1, 1048);
    let furthest = row(&table, "seller_id", "seller-0344");
    let counts: Vec<f64> = (1..=5).map(|k| furthest(&format!("stars_{k}"))).collect();
    assert_eq!(counts, [1.0, 0.0, 0.0, 0.0, 0.0]);
    printed(furthest("posterior_mean"), 2, "4.07");
    let none = row(&table, "seller_id", "seller-0002");
    printed(none("posterior_mean"), 2, "4.38");
    assert_eq!(none("pool_weight"), 1.0);
}

#[test]
fn the_star_shop_figures_in_the_prose() {
    let dir = scratch();
    let shops = "fit --input demo-data/star_shops.csv --model dirichlet-multinomial --group shop_id --level-counts stars_1,stars_2,stars_3,stars_4,stars_5 --above 4.5 --flag-fdr 0.1";
    run(dir.path(), &format!("{shops} --by category --output by.csv --summary by.json"));
    run(dir.path(), &format!("{shops} --output one.csv --summary one.json"));
    let s = summary(&dir.path().join("by.json"));
    printed(s["mean_score"].as_f64().unwrap(), 2, "4.10");
    let segments = s["segments"]["segments"].as_array().unwrap();
    for (segment, mean) in [(0, "4.13"), (2, "4.66"), (3, "3.52")] {
        assert!(segments[segment]["fallback"].is_null());
        printed(segments[segment]["mean_score"].as_f64().unwrap(), 2, mean);
    }
    assert_eq!(segments[1]["key"]["category"], "gadgets");
    assert_eq!(segments[1]["groups"], 15);
    assert!(segments[1]["fallback"].as_str().unwrap().contains("fewer than --min-groups 30"));
    let one = summary(&dir.path().join("one.json"));
    assert_eq!(one["checks"]["verdict"], "poor fit");
    assert_eq!(p_value_text(one["checks"]["calibration"]["p_value"].as_f64().unwrap()), "p = 9.3e-10");
    let (by, plain) = (Csv::read(&dir.path().join("by.csv")), Csv::read(&dir.path().join("one.csv")));
    for shop in ["shop-0003", "shop-0401"] {
        let counts: Vec<f64> = (1..=5).map(|k| row(&plain, "shop_id", shop)(&format!("stars_{k}"))).collect();
        assert_eq!(counts, [0.0, 0.0, 1.0, 2.0, 7.0]);
        printed(row(&plain, "shop_id", shop)("posterior_mean"), 2, "4.42");
        assert_eq!(text_of(&plain, "shop_id", shop, "flagged"), "false");
    }
    assert_eq!(text_of(&by, "shop_id", "shop-0003", "category"), "repairs");
    printed(row(&by, "shop_id", "shop-0003")("posterior_mean"), 2, "4.11");
    printed(row(&by, "shop_id", "shop-0003")("prob_above"), 2, "0.07");
    assert_eq!(text_of(&by, "shop_id", "shop-0401", "category"), "prints");
    printed(row(&by, "shop_id", "shop-0401")("posterior_mean"), 2, "4.63");
    printed(row(&by, "shop_id", "shop-0401")("prob_above"), 2, "0.82");
    assert_eq!(text_of(&by, "shop_id", "shop-0401", "flagged"), "true");
    let flagged_prints = |table: &Csv| {
        let (flags, categories) = (table.column("flagged"), by.column("category"));
        let flagged = flags.iter().filter(|f| *f == "true").count();
        let prints = flags.iter().zip(&categories).filter(|(f, c)| *f == "true" && *c == "prints").count();
        (flagged, prints)
    };
    assert_eq!(flagged_prints(&plain), (167, 141));
    assert_eq!(flagged_prints(&by), (351, 327));
}

/// The text of `column` in the row of `table` whose `key` column is `id`.
fn text_of(table: &Csv, key: &str, id: &str, column: &str) -> String {
    let at = table.column(key).iter().position(|g| g == id).unwrap();
    table.column(column)[at].clone()
}

#[test]
fn the_returns_and_clinics_figures_in_the_prose() {
    let dir = scratch();
    let returns = "fit --input demo-data/returns.csv --model beta-binomial --group store_id --outcome returned --above 0.1 --flag-fdr 0.1";
    run(dir.path(), &format!("{returns} --by store_kind --output by.csv --summary by.json"));
    run(dir.path(), &format!("{returns} --output one.csv --summary one.json"));
    let s = summary(&dir.path().join("by.json"));
    for segment in s["segments"].as_array().unwrap() {
        let mean = segment["prior"]["mean"].as_f64().unwrap();
        let want = match segment["key"]["store_kind"].as_str().unwrap() {
            "kiosk" => "0.041",
            "arcade" => "0.059",
            "warehouse" => "0.087",
            "web" => "0.149",
            other => panic!("an unknown kind {other}"),
        };
        printed(mean, 3, want);
    }
    let (by, one) = (Csv::read(&dir.path().join("by.csv")), Csv::read(&dir.path().join("one.csv")));
    for (store, alone, segmented) in [("store-201", "0.955", "0.846"), ("store-007", "0.735", "0.923")] {
        printed(row(&one, "store_id", store)("prob_above"), 3, alone);
        printed(row(&by, "store_id", store)("prob_above"), 3, segmented);
    }
    assert_eq!(summary(&dir.path().join("one.json"))["flags"]["groups_flagged"], 77);
    let clinics = "fit --input demo-data/clinic_waits.csv --model normal-normal --group clinic_id --estimate mean_wait_minutes --std-error wait_se --above 30 --rank-lowest-first --output c.csv --summary c.json";
    run(dir.path(), clinics);
    let table = Csv::read(&dir.path().join("c.csv"));
    let clinic = row(&table, "clinic_id", "clinic-166");
    printed(clinic("raw_estimate"), 1, "39.7");
    printed(clinic("wait_se"), 1, "5.6");
    printed(clinic("posterior_mean"), 1, "31.1");
    printed(clinic("pool_weight"), 2, "0.56");
    printed(clinic("prob_above"), 2, "0.61");
    let clinic = row(&table, "clinic_id", "clinic-000");
    printed(clinic("posterior_mean"), 2, "36.20");
    printed(clinic("pool_weight"), 3, "0.015");
    printed(clinic("prob_above"), 1, "1.0");
    assert_eq!(ranks(&table, "clinic_id", "clinic-325"), (3, 13));
    assert_eq!(ranks(&table, "clinic_id", "clinic-338"), (1, 1));
    let s = summary(&dir.path().join("c.json"));
    printed(s["prior"]["mean"].as_f64().unwrap(), 2, "24.18");
    printed(s["prior"]["variance"].as_f64().unwrap().sqrt(), 2, "5.02");
}

/// Every file under `dir` (the demo data's link left out), by relative path.
fn written_files(dir: &Path) -> Vec<std::path::PathBuf> {
    let mut found = Vec::new();
    let mut folders = vec![dir.to_path_buf()];
    while let Some(folder) = folders.pop() {
        for entry in std::fs::read_dir(&folder).unwrap() {
            let path = entry.unwrap().path();
            if path.ends_with("demo-data") {
                continue;
            }
            if path.is_dir() {
                folders.push(path);
            } else {
                found.push(path.strip_prefix(dir).unwrap().to_path_buf());
            }
        }
    }
    found.sort();
    found
}

#[test]
fn every_file_the_readme_commands_write_keeps_its_bytes() {
    // Each `cargo run -- ...` command of the README, in order in one folder (the
    // report reads what the fit before it wrote), and the XXH3-64 digest and
    // length of every file they leave. The digests were recorded by this test
    // (RATEPOOL_REFRESH_FIXTURES=1) at the commit where
    // scripts/compare_readme_outputs.sh found these 8 commands' 15 files
    // byte-identical to the ones written before the one-driver redesign
    // (d112bd2): a change to any output byte fails here, and is either a
    // regression or a format change to record (and explain) by refreshing.
    let readme = std::fs::read_to_string(root().join("README.md")).unwrap();
    let commands: Vec<&str> = readme
        .match_indices("cargo run -- ")
        .map(|(at, _)| readme[at..].split(['`', '\n']).next().unwrap())
        .collect();
    let dir = scratch();
    for command in &commands {
        run(dir.path(), &format!("--quiet {}", command.trim_start_matches("cargo run -- ")));
    }
    let digests: Vec<String> = written_files(dir.path())
        .iter()
        .map(|file| {
            let bytes = std::fs::read(dir.path().join(file)).unwrap();
            let digest = twox_hash::XxHash3_64::oneshot(&bytes);
            format!("{} {digest:016x} {}", file.display(), bytes.len())
        })
        .collect();
    let fixture = root().join("tests/fixtures/readme_outputs.txt");
    let found =
        format!("# {} README commands; file, XXH3-64, bytes\n{}\n", commands.len(), digests.join("\n"));
    if std::env::var_os("RATEPOOL_REFRESH_FIXTURES").is_some() {
        std::fs::write(&fixture, &found).unwrap();
    }
    let recorded = std::fs::read_to_string(&fixture).unwrap();
    assert_eq!(found, recorded, "the README commands' outputs changed (see {})", fixture.display());
}
