//! The neighbour prior (Marshall's local empirical Bayes) against numpy on
//! open data: the North Carolina SIDS counties of libpysal's `sids2` example
//! (Cressie 1993, pp. 386-389), 1974 births and deaths, expected deaths by
//! the internal standard, and the counties' queen contiguity from the
//! example's GAL file (scripts/make_neighbour_fixtures.py; the reference is
//! Marshall 1991's formulas computed with numpy).

use crate::util::{assert_refused, fixture, json_fixture, ratepool, relative, stderr, Csv};
use ratepool::core::model::neighbourhood::{local_priors, Neighbourhoods};
use std::collections::HashMap;

#[test]
fn the_local_priors_and_posterior_means_of_the_nc_counties_are_numpys() {
    let counties = Csv::read(&fixture("neighbours/nc_sids.csv"));
    let ids = counties.column("county");
    let place: HashMap<&str, u32> = ids.iter().enumerate().map(|(i, id)| (id.as_str(), i as u32)).collect();
    let pairs = Csv::read(&fixture("neighbours/nc_sids_neighbours.csv"));
    let hoods = Neighbourhoods::from_pairs(
        ids.len(),
        pairs.rows.iter().map(|r| (place[r[0].as_str()], place[r[1].as_str()])),
    );
    let (deaths, expected) = (counties.floats("deaths"), counties.floats("expected"));
    let priors = local_priors(&deaths, &expected, &hoods);
    let reference = json_fixture("neighbours/marshall.json");
    let column = |name: &str| -> Vec<f64> {
        reference[name].as_array().unwrap().iter().map(|v| v.as_f64().unwrap()).collect()
    };
    let (means, variances) = (column("local_mean"), column("local_variance"));
    let (shrinkage, posterior) = (column("shrinkage"), column("posterior_mean"));
    let mut pooled = 0;
    for i in 0..ids.len() {
        let county = &ids[i];
        assert_eq!(reference["county"][i].as_i64().unwrap().to_string(), *county);
        assert_eq!(hoods.of(i).len() as i64, reference["neighbours"][i].as_i64().unwrap(), "{county}");
        let prior = priors[i].expect("every county has neighbours");
        assert!(relative(prior.mean, means[i]) < 1e-13, "{county}: m {} against {}", prior.mean, means[i]);
        if variances[i] == 0.0 {
            pooled += 1;
            assert_eq!(prior.variance, 0.0, "{county}");
        } else {
            assert!(relative(prior.variance, variances[i]) < 1e-11, "{county}: v {}", prior.variance);
        }
        assert!((prior.own_weight(expected[i]) - shrinkage[i]).abs() < 1e-12, "{county}");
        let ours = prior.posterior_mean(deaths[i], expected[i]);
        assert!(relative(ours, posterior[i]) < 1e-12, "{county}: {ours} against {}", posterior[i]);
        // The Gamma prior's conjugate posterior mean is Marshall's estimate.
        if let Some((shape, rate)) = prior.gamma() {
            assert!(relative((shape + deaths[i]) / (rate + expected[i]), posterior[i]) < 1e-12, "{county}");
        }
    }
    assert_eq!(pooled, 56, "the counties whose local variance is floored at 0, as numpy finds");
}

/// The pairs of a two-column table written by `neighbours`, as numbers.
fn written_pairs(path: &std::path::Path) -> Vec<(i64, i64)> {
    let table = Csv::read(path);
    assert_eq!(table.header, ["area", "neighbour"]);
    // Each pair once, in the map's order of areas; compared here smaller number first.
    let mut pairs: Vec<(i64, i64)> = table
        .rows
        .iter()
        .map(|r| (r[0].parse().unwrap(), r[1].parse().unwrap()))
        .map(|(a, b): (i64, i64)| (a.min(b), a.max(b)))
        .collect();
    pairs.sort_unstable();
    let count = pairs.len();
    pairs.dedup();
    assert_eq!(pairs.len(), count, "each pair once");
    pairs
}

fn reference_pairs(rule: &str) -> Vec<(i64, i64)> {
    let reference = json_fixture("neighbours/contiguity.json");
    let mut pairs: Vec<(i64, i64)> = reference[rule]
        .as_array()
        .unwrap()
        .iter()
        .map(|p| (p[0].as_i64().unwrap(), p[1].as_i64().unwrap()))
        .collect();
    pairs.sort_unstable();
    pairs
}

#[test]
fn the_neighbours_of_the_nc_counties_are_shapelys_and_the_rook_ones_the_gal_files() {
    let dir = tempfile::tempdir().unwrap();
    let map = fixture("neighbours/nc_counties.geojson");
    for (rule, extra) in [("queen", None), ("rook", Some("--rook"))] {
        let output = format!("{rule}.csv");
        let mut args =
            vec!["neighbours", "--map", map.to_str().unwrap(), "--key", "county", "--output", &output];
        args.extend(extra);
        let out = ratepool(dir.path(), &args);
        assert!(out.status.success(), "{}", stderr(&out));
        let pairs = written_pairs(&dir.path().join(&output));
        assert_eq!(pairs, reference_pairs(rule), "{rule}");
        let printed = String::from_utf8(out.stdout).unwrap();
        assert_eq!(printed.trim(), format!("100 areas, {} neighbour pairs ({rule} contiguity)", pairs.len()));
    }
    // The rook pairs are the GAL file's, the neighbour list the data ship with.
    let gal = Csv::read(&fixture("neighbours/nc_sids_neighbours.csv"));
    let gal: Vec<(i64, i64)> =
        gal.rows.iter().map(|r| (r[0].parse().unwrap(), r[1].parse().unwrap())).collect();
    assert_eq!(written_pairs(&dir.path().join("rook.csv")), gal);
}

#[test]
fn a_map_that_is_not_one_is_refused_by_feature_and_nothing_is_written() {
    let dir = tempfile::tempdir().unwrap();
    let square = |x: i32| format!("[[[{x},0],[{},0],[{},1],[{x},1],[{x},0]]]", x + 1, x + 1);
    let feature = |key: &str, kind: &str, coordinates: &str| {
        format!(
            r#"{{"type":"Feature","properties":{{{key}}},"geometry":{{"type":"{kind}","coordinates":{coordinates}}}}}"#
        )
    };
    let collection = |features: &[String]| {
        format!(r#"{{"type":"FeatureCollection","features":[{}]}}"#, features.join(","))
    };
    let cases = [
        ("not json", "not GeoJSON: not valid JSON".to_string()),
        (r#"{"type":"Feature"}"#, "not GeoJSON: the top level is not a FeatureCollection".to_string()),
        (
            &collection(&[
                feature(r#""id":"a""#, "Polygon", &square(0)),
                feature(r#""name":"b""#, "Polygon", &square(1)),
            ]),
            "feature 2 has no property 'id' (given as the key); its properties: name".to_string(),
        ),
        (
            &collection(&[
                feature(r#""id":"a""#, "Polygon", &square(0)),
                feature(r#""id":"a""#, "Polygon", &square(1)),
            ]),
            "features 1 and 2 have the same key 'a'".to_string(),
        ),
        (
            &collection(&[feature(r#""id":7"#, "Point", "[0,0]")]),
            "feature 1 ('7') is a Point; areas must be a Polygon or MultiPolygon".to_string(),
        ),
    ];
    for (i, (text, message)) in cases.iter().enumerate() {
        let map = format!("map{i}.geojson");
        std::fs::write(dir.path().join(&map), text).unwrap();
        assert_refused(
            dir.path(),
            &["neighbours", "--map", &map, "--key", "id", "--output", "pairs.csv"],
            message,
            "pairs.csv",
        );
    }
    // A good map with an island: the island is named.
    let map = collection(&[
        feature(r#""id":"a""#, "Polygon", &square(0)),
        feature(r#""id":"b""#, "MultiPolygon", &format!("[{}]", square(1))),
        feature(r#""id":"c""#, "Polygon", &square(5)),
    ]);
    std::fs::write(dir.path().join("good.geojson"), map).unwrap();
    let out = ratepool(
        dir.path(),
        &["neighbours", "--map", "good.geojson", "--key", "id", "--output", "pairs.csv"],
    );
    assert!(out.status.success(), "{}", stderr(&out));
    assert_eq!(
        String::from_utf8(out.stdout).unwrap().trim(),
        "3 areas, 1 neighbour pair (queen contiguity); 1 without neighbours: c"
    );
    assert_eq!(std::fs::read_to_string(dir.path().join("pairs.csv")).unwrap(), "area,neighbour\na,b\n");
}

#[test]
fn the_demo_district_map_is_a_hexagon_grid_with_its_hot_spot_in_one_piece() {
    let dir = tempfile::tempdir().unwrap();
    let map = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-data/district_map.geojson");
    let mut tables = Vec::new();
    for (output, extra) in [("queen.csv", None), ("rook.csv", Some("--rook"))] {
        let mut args =
            vec!["neighbours", "--map", map.to_str().unwrap(), "--key", "district_id", "--output", output];
        args.extend(extra);
        let out = ratepool(dir.path(), &args);
        assert!(out.status.success(), "{}", stderr(&out));
        if extra.is_none() {
            // As the README quotes it.
            let printed = String::from_utf8(out.stdout).unwrap();
            assert_eq!(printed.trim(), "400 areas, 1121 neighbour pairs (queen contiguity)");
        }
        tables.push(Csv::read(&dir.path().join(output)).rows);
    }
    // Hexagons meet only along edges, so queen and rook agree; a 20 x 20 grid of
    // them (odd rows shifted) has 19 x 20 pairs within rows and 19 x 39 between.
    assert_eq!(tables[0], tables[1]);
    let pairs = &tables[0];
    assert_eq!(pairs.len(), 19 * 20 + 19 * 39);
    let mut count: HashMap<&str, usize> = HashMap::new();
    for pair in pairs {
        *count.entry(&pair[0]).or_default() += 1;
        *count.entry(&pair[1]).or_default() += 1;
    }
    assert_eq!(count.len(), 400);
    assert_eq!(count.values().max(), Some(&6));
    // The hidden hot spot (district-0101 to district-0112) is one connected patch.
    let hot = |id: &str| ("district-0101".."district-0113").contains(&id);
    let inside: Vec<&Vec<String>> = pairs.iter().filter(|p| hot(&p[0]) && hot(&p[1])).collect();
    let mut reached = vec!["district-0101"];
    while let Some(next) = inside
        .iter()
        .flat_map(|p| [(&p[0], &p[1]), (&p[1], &p[0])])
        .find(|(a, b)| reached.contains(&a.as_str()) && !reached.contains(&b.as_str()))
        .map(|(_, b)| b.as_str())
    {
        reached.push(next);
    }
    assert_eq!(reached.len(), 12, "{reached:?}");
}

/// The NC counties' fit, run in `dir`: `more` options after the model and columns
/// (`--neighbours FILE` for the neighbour prior).
fn fit_counties_with(dir: &std::path::Path, more: &[&str]) -> std::process::Output {
    let input = fixture("neighbours/nc_sids.csv");
    let mut args = counties_fit(input.to_str().unwrap());
    args.extend(more);
    ratepool(dir, &args)
}

/// The arguments of the NC counties' fit of `input`, up to the options of a test.
fn counties_fit(input: &str) -> Vec<&str> {
    let columns = "--group county --events deaths --exposure expected";
    let mut args = vec!["fit", "--model", "gamma-poisson", "--input", input];
    args.extend(columns.split(' '));
    args
}

/// The NC counties' fit with `table` as the neighbour table; more options after.
fn fit_counties(dir: &std::path::Path, table: &str, more: &[&str]) -> std::process::Output {
    let mut args = vec!["--neighbours", table];
    args.extend(more);
    fit_counties_with(dir, &args)
}

#[test]
fn fit_with_neighbours_gives_each_county_marshalls_estimate_and_its_gamma_posterior() {
    let dir = tempfile::tempdir().unwrap();
    let gal = fixture("neighbours/nc_sids_neighbours.csv");
    let out =
        fit_counties(dir.path(), gal.to_str().unwrap(), &["--output", "out.csv", "--summary", "s.json"]);
    assert!(out.status.success(), "{}", stderr(&out));
    let table = Csv::read(&dir.path().join("out.csv"));
    let reference = json_fixture("neighbours/marshall.json");
    let column = |name: &str| -> Vec<f64> {
        reference[name].as_array().unwrap().iter().map(|v| v.as_f64().unwrap()).collect()
    };
    let (means, variances) = (column("local_mean"), column("local_variance"));
    let (shrinkage, posterior) = (column("shrinkage"), column("posterior_mean"));
    let (deaths, expected) = (table.floats("deaths"), table.floats("expected"));
    let (sds, weights) = (table.floats("posterior_sd"), table.floats("pool_weight"));
    let (ours_prior, ours_posterior) = (table.floats("prior_mean"), table.floats("posterior_mean"));
    let counts = table.column("neighbours");
    // Each county's neighbourhood (itself and its GAL neighbours): total deaths and expected.
    let ids = table.column("county");
    let mut totals: HashMap<&str, (f64, f64)> =
        ids.iter().enumerate().map(|(i, id)| (id.as_str(), (deaths[i], expected[i]))).collect();
    let place: HashMap<&str, usize> = ids.iter().enumerate().map(|(i, id)| (id.as_str(), i)).collect();
    for pair in &Csv::read(&gal).rows {
        for (a, b) in [(&pair[0], &pair[1]), (&pair[1], &pair[0])] {
            let total = totals.get_mut(a.as_str()).unwrap();
            total.0 += deaths[place[b.as_str()]];
            total.1 += expected[place[b.as_str()]];
        }
    }
    let mut pooled = 0;
    for (i, county) in ids.iter().enumerate() {
        assert_eq!(reference["county"][i].as_i64().unwrap().to_string(), *county, "row order is the input's");
        assert_eq!(counts[i], reference["neighbours"][i].as_i64().unwrap().to_string(), "{county}");
        assert!(relative(ours_prior[i], means[i]) < 1e-13, "{county}: prior_mean {}", ours_prior[i]);
        assert!(relative(ours_posterior[i], posterior[i]) < 1e-12, "{county}: {}", ours_posterior[i]);
        // The Gamma posterior with prior mean m and variance v (textbook conjugacy):
        // shape m²/v + O, rate m/v + E, so sd = sqrt(shape) / rate, and pool_weight (the
        // prior's share of the posterior mean) is 1 - C_i. Where v = 0 the posterior is the
        // neighbourhood's pooled counts, Gamma(Σ O, Σ E) (the README's rule): mean m_i, and
        // pool_weight the neighbours' share of the exposure.
        let (want_sd, want_weight) = if variances[i] > 0.0 {
            let (shape, rate) = (means[i] * means[i] / variances[i], means[i] / variances[i]);
            ((shape + deaths[i]).sqrt() / (rate + expected[i]), 1.0 - shrinkage[i])
        } else {
            pooled += 1;
            let (events, exposure) = totals[county.as_str()];
            assert!(
                relative(events / exposure, means[i]) < 1e-13,
                "{county}: the local mean is the pooled rate"
            );
            if events > deaths[i] {
                (events.sqrt() / exposure, 1.0 - expected[i] / exposure)
            } else {
                // The neighbours have no deaths: a point mass at m_i, as Marshall's estimate.
                (0.0, 1.0)
            }
        };
        assert!((weights[i] - want_weight).abs() < 1e-12, "{county}: pool_weight {}", weights[i]);
        assert!(
            (sds[i] - want_sd).abs() <= 1e-12 * want_sd.max(1e-300),
            "{county}: sd {} against {want_sd}",
            sds[i]
        );
    }
    assert_eq!(pooled, 56);
    let hoods = &crate::util::summary(&dir.path().join("s.json"))["neighbourhood"];
    assert_eq!(hoods["areas"], 100);
    assert_eq!(hoods["pairs"], 231);
    assert_eq!(hoods["rows"], 231);
    assert_eq!(hoods["zero_variance"], 56, "the counties numpy floors at 0");
    assert_eq!(hoods["without_neighbours"], 0);
    assert_eq!(hoods["rows_left_out"], 0);
    let printed = String::from_utf8(out.stdout).unwrap();
    assert!(printed.contains("  all areas    Gamma("), "{printed}");
    assert!(printed.contains("(231 pairs of neighbours over 100 areas, "), "{printed}");
    assert!(
        printed.contains("56 pooled to the local rate (local variance 0), 0 without neighbours"),
        "{printed}"
    );
}

#[test]
fn a_neighbour_table_listed_either_way_round_or_twice_gives_the_same_output() {
    let dir = tempfile::tempdir().unwrap();
    let gal = Csv::read(&fixture("neighbours/nc_sids_neighbours.csv"));
    let lines = |rows: &mut dyn Iterator<Item = String>| -> String {
        std::iter::once("from,to".to_string()).chain(rows).map(|l| l + "\n").collect()
    };
    let reversed = lines(&mut gal.rows.iter().map(|r| format!("{},{}", r[1], r[0])));
    let twice = lines(
        &mut gal.rows.iter().flat_map(|r| [format!("{},{}", r[0], r[1]), format!("{},{}", r[1], r[0])]),
    );
    let original = fixture("neighbours/nc_sids_neighbours.csv");
    let mut outputs = Vec::new();
    for (name, text) in [("reversed.csv", Some(reversed)), ("twice.csv", Some(twice)), ("original.csv", None)]
    {
        let table = match text {
            Some(text) => crate::util::write(dir.path(), name, &text),
            None => original.to_str().unwrap().to_string(),
        };
        let output = format!("out-{name}");
        let out = fit_counties(dir.path(), &table, &["--output", &output]);
        assert!(out.status.success(), "{}", stderr(&out));
        outputs.push(std::fs::read(dir.path().join(output)).unwrap());
    }
    assert!(outputs[0] == outputs[2] && outputs[1] == outputs[2], "the relation is made symmetric");
}

#[test]
fn an_area_without_neighbours_takes_the_all_areas_prior_and_unknown_areas_are_left_out_with_a_warning() {
    let dir = tempfile::tempdir().unwrap();
    let gal = Csv::read(&fixture("neighbours/nc_sids_neighbours.csv"));
    // Ashe (37009) loses its neighbours; a row names an area not in the data.
    let mut text = String::from("area,neighbour\n");
    for row in gal.rows.iter().filter(|r| r[0] != "37009" && r[1] != "37009") {
        text.push_str(&format!("{},{}\n", row[0], row[1]));
    }
    text.push_str("37001,99999\n");
    let table = crate::util::write(dir.path(), "pairs.csv", &text);
    let out = fit_counties(dir.path(), &table, &["--output", "local.csv", "--summary", "s.json"]);
    assert!(out.status.success(), "{}", stderr(&out));
    let warnings = stderr(&out);
    assert!(warnings.contains("1 of 100 areas have no neighbour among the areas scored"), "{warnings}");
    assert!(warnings.contains("1 of the 229 rows of the neighbour table"), "{warnings}");
    assert!(warnings.contains("(the first: '99999'); they were left out"), "{warnings}");
    let hoods = &crate::util::summary(&dir.path().join("s.json"))["neighbourhood"];
    assert_eq!((hoods["without_neighbours"].as_u64(), hoods["rows_left_out"].as_u64()), (Some(1), Some(1)));
    assert_eq!(hoods["first_left_out"], "99999");
    // The plain fit of the same counties gives Ashe the all-areas prior's posterior.
    let plain = fit_counties_with(dir.path(), &["--output", "plain.csv"]);
    assert!(plain.status.success(), "{}", stderr(&plain));
    let (local, plain) = (Csv::read(&dir.path().join("local.csv")), Csv::read(&dir.path().join("plain.csv")));
    assert_eq!(local.column("county")[0], "37009");
    assert_eq!(local.column("neighbours")[0], "0");
    for column in ["posterior_mean", "posterior_sd", "interval_lo", "interval_hi"] {
        assert_eq!(local.column(column)[0], plain.column(column)[0], "{column}");
    }
}

#[test]
fn summed_areas_by_stratum_take_the_same_neighbour_priors_as_one_row_per_area() {
    let dir = tempfile::tempdir().unwrap();
    let root = std::path::Path::new(env!("CARGO_MANIFEST_DIR"));
    let bands = root.join("demo-data/district_bands.csv");
    let map = root.join("demo-data/district_map.geojson");
    let made = ratepool(
        dir.path(),
        &["neighbours", "--map", map.to_str().unwrap(), "--key", "district_id", "--output", "pairs.csv"],
    );
    assert!(made.status.success(), "{}", stderr(&made));
    let summed = ratepool(
        dir.path(),
        &[
            "fit",
            "--model",
            "gamma-poisson",
            "--input",
            bands.to_str().unwrap(),
            "--group",
            "district_id",
            "--events",
            "cases",
            "--population",
            "population",
            "--strata",
            "age_band",
            "--neighbours",
            "pairs.csv",
            "--above",
            "1.2",
            "--output",
            "summed.csv",
            "--report",
            "r.html",
        ],
    );
    assert!(summed.status.success(), "{}", stderr(&summed));
    // The report says where each area's centre comes from, and what that costs.
    let page = std::fs::read_to_string(dir.path().join("r.html")).unwrap();
    assert!(
        page.contains("each area&#39;s own, fitted by moments to its neighbourhood (400 areas, 1121 pairs")
    );
    assert!(
        page.contains("Raw value against each group&#39;s prior centre (`prior_mean`, from its neighbours)")
    );
    assert!(page.contains("an area can be flagged for its neighbours&#39; cases rather than its own"));
    // The summed table's areas, read again one row per area.
    let once = ratepool(
        dir.path(),
        &[
            "fit",
            "--model",
            "gamma-poisson",
            "--input",
            "summed.csv",
            "--group",
            "district_id",
            "--events",
            "cases",
            "--exposure",
            "expected",
            "--neighbours",
            "pairs.csv",
            "--above",
            "1.2",
            "--output",
            "once.csv",
        ],
    );
    assert!(once.status.success(), "{}", stderr(&once));
    let (summed, once) = (Csv::read(&dir.path().join("summed.csv")), Csv::read(&dir.path().join("once.csv")));
    assert_eq!(summed.column("district_id").len(), 400);
    for column in ["district_id", "neighbours", "prior_mean", "posterior_mean", "interval_hi", "prob_above"] {
        assert_eq!(summed.column(column), once.column(column), "{column}");
    }
}

#[test]
fn neighbour_tables_and_options_that_cannot_be_used_are_refused_and_nothing_is_written() {
    let dir = tempfile::tempdir().unwrap();
    let gal = fixture("neighbours/nc_sids_neighbours.csv");
    let gal = gal.to_str().unwrap();
    let input = fixture("neighbours/nc_sids.csv");
    let input = input.to_str().unwrap();
    let mut base = counties_fit(input);
    base.extend(["--output", "out.csv"]);
    let refused = |table: &str, more: &[&str], message: &str| {
        let mut args = base.to_vec();
        args.extend(["--neighbours", table]);
        args.extend(more);
        assert_refused(dir.path(), &args, message, "out.csv");
    };
    let missing = crate::util::write(dir.path(), "missing.csv", "a,b\n37001,37033\n37001,\n");
    refused(&missing, &[], "missing.csv: row 2, column 'b': missing neighbour");
    let one = crate::util::write(dir.path(), "one.csv", "a\n37001\n");
    refused(&one, &[], "a neighbour table needs two columns, an area and its neighbour (by the ids of the column 'county'); it has 1");
    let strangers = crate::util::write(dir.path(), "strangers.csv", "a,b\nx,y\nx,z\n");
    refused(
        &strangers,
        &[],
        "none of its 2 rows names two areas of the input (the first area not found: 'x')",
    );
    refused("absent.csv", &[], "absent.csv: no such file");
    refused(gal, &["--by", "name"], "--neighbours does not combine with --by");
    refused(gal, &["--covariates", "births"], "--neighbours does not combine with covariates");
    refused(gal, &["--intervals", "corrected"], "--neighbours does not combine with --intervals corrected");
    refused(gal, &["--prior-shape", "free"], "--neighbours does not combine with --prior-shape free");
    refused(gal, &["--pair-output", "pairs.csv"], "--neighbours does not combine with --pair-output");
    refused(gal, &["--output", gal], "--neighbours");
    // Only the gamma-poisson model has a neighbour prior.
    let rates = crate::util::write(dir.path(), "rates.csv", "county,k,n\n37001,1,4\n37033,2,5\n");
    assert_refused(
        dir.path(),
        &[
            "fit", "--model", "beta-binomial", "--input", &rates, "--group", "county", "--successes", "k",
            "--trials", "n", "--neighbours", gal, "--output", "out.csv",
        ],
        "--neighbours applies to the gamma-poisson model (areas' events against their expected counts), not beta-binomial",
        "out.csv",
    );
    // A saved neighbour fit is not a prior for other areas.
    let fitted = fit_counties(dir.path(), gal, &["--output", "fitted.csv", "--summary", "s.json"]);
    assert!(fitted.status.success(), "{}", stderr(&fitted));
    assert_refused(
        dir.path(),
        &[
            "score", "--prior", "s.json", "--input", input, "--group", "county", "--events", "deaths",
            "--exposure", "expected", "--output", "out.csv",
        ],
        "each area's prior came from its neighbours' data, which the summary does not hold; fit again with --neighbours",
        "out.csv",
    );
}

/// The demo districts' neighbour fit with the map in the report, in `dir`
/// (the neighbour table made first); more options after.
fn mapped_districts(dir: &std::path::Path, map: &str, more: &[&str]) -> std::process::Output {
    let root = std::path::Path::new(env!("CARGO_MANIFEST_DIR"));
    let demo_map = root.join("demo-data/district_map.geojson");
    let made = ratepool(
        dir,
        &["neighbours", "--map", demo_map.to_str().unwrap(), "--key", "district_id", "--output", "pairs.csv"],
    );
    assert!(made.status.success(), "{}", stderr(&made));
    let bands = root.join("demo-data/district_bands.csv");
    let line = "fit --model gamma-poisson --group district_id --events cases --population population --strata age_band --neighbours pairs.csv --above 1.2 --flag-fdr 0.1 --map-key district_id";
    let mut args: Vec<&str> = line.split(' ').collect();
    args.extend(["--input", bands.to_str().unwrap(), "--map", map]);
    args.extend(more);
    ratepool(dir, &args)
}

#[test]
fn the_report_maps_every_area_once_per_panel_with_its_values_and_the_flags_outlined() {
    let dir = tempfile::tempdir().unwrap();
    let map = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-data/district_map.geojson");
    let map = map.to_str().unwrap();
    let more = ["--output", "out.csv", "--summary", "s.json", "--report", "r.html"];
    let out = mapped_districts(dir.path(), map, &more);
    assert!(out.status.success(), "{}", stderr(&out));
    let page = std::fs::read_to_string(dir.path().join("r.html")).unwrap();
    // Two panels (raw and posterior) and the exceedance map, each drawing the 400 areas once.
    assert_eq!(page.matches(r#"<path class="area""#).count(), 3 * 400);
    assert_eq!(page.matches(r#"data-key="district-0101""#).count(), 3);
    let table = Csv::read(&dir.path().join("out.csv"));
    let flagged = table.column("flagged").iter().filter(|f| *f == "true").count();
    assert_eq!(flagged, 31);
    assert_eq!(page.matches(r#"class="flag-outline""#).count(), 3 * flagged);
    // The hover text holds the area's values as the table has them (to the page's four digits).
    let row = table.column("district_id").iter().position(|id| id == "district-0101").unwrap();
    let start = page.find("<title>district-0101: SMR ").expect("district-0101's hover text");
    let text = &page[start + "<title>district-0101: ".len()..];
    let text = &text[..text.find("</title>").unwrap()];
    assert!(text.starts_with("SMR ") && text.ends_with(", flagged"), "{text}");
    let figures: Vec<f64> = text
        .split(|c: char| !(c.is_ascii_digit() || c == '.'))
        .filter(|t| !t.is_empty() && t.chars().any(|c| c.is_ascii_digit()))
        .map(|t| t.parse().unwrap())
        .collect();
    let wanted: Vec<f64> = ["smr", "posterior_mean", "interval_lo", "interval_hi"]
        .iter()
        .map(|c| table.column(c)[row].parse::<f64>().unwrap())
        .chain([1.2, table.column("prob_above")[row].parse().unwrap()])
        .collect();
    for (shown, value) in crate::util::paired(&figures, &wanted, "hover figures") {
        assert!(relative(*shown, *value) < 1e-3, "{text}: {shown} against {value}");
    }
    // One legend per map: the ratio scale's breaks, and the probability scale's.
    assert_eq!(page.matches(r#"<g class="legend""#).count(), 2);
    for break_label in ["0.50", "0.67", "0.80", "0.91", "1.10", "1.25", "1.50", "2.00", "0.05", "0.95"] {
        assert!(page.contains(&format!(r#"text-anchor="middle">{break_label}</text>"#)), "{break_label}");
    }
    assert!(page.contains("observed over expected (1: as expected)"));
    assert!(!page.contains("not in the table"), "every area is in the table");
    // `ratepool report` with the same map writes the same page.
    let again = ratepool(
        dir.path(),
        &[
            "report",
            "--table",
            "out.csv",
            "--summary",
            "s.json",
            "--output",
            "again.html",
            "--map",
            map,
            "--map-key",
            "district_id",
        ],
    );
    assert!(again.status.success(), "{}", stderr(&again));
    assert!(std::fs::read(dir.path().join("again.html")).unwrap() == page.as_bytes());
}

#[test]
fn areas_on_one_side_only_are_listed_and_a_bad_map_writes_nothing() {
    let dir = tempfile::tempdir().unwrap();
    let demo = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-data/district_map.geojson");
    let mut document: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(demo).unwrap()).unwrap();
    // Leave out district-0001's feature; rename district-0002's to an area of no table.
    let features = document["features"].as_array_mut().unwrap();
    features.remove(0);
    features[0]["properties"]["district_id"] = "district-9999".into();
    std::fs::write(dir.path().join("partial.geojson"), document.to_string()).unwrap();
    let out = mapped_districts(dir.path(), "partial.geojson", &["--output", "out.csv", "--report", "r.html"]);
    assert!(out.status.success(), "{}", stderr(&out));
    let page = std::fs::read_to_string(dir.path().join("r.html")).unwrap();
    assert!(page.contains("Areas on the map but not in the table (grey): district-9999."), "missing");
    assert!(
        page.contains("Areas in the table but not on the map: district-0001, district-0002."),
        "unmapped"
    );
    assert!(page.contains("<title>district-9999: not in the table</title>"));
    // A map that cannot be drawn stops the run before anything is written.
    let cases = [
        ("not.geojson", "not json".to_string(), "not GeoJSON: not valid JSON"),
        (
            "nokey.geojson",
            r#"{"type":"FeatureCollection","features":[{"type":"Feature","properties":{"name":"x"},"geometry":{"type":"Polygon","coordinates":[[[0,0],[1,0],[1,1],[0,0]]]}}]}"#.to_string(),
            "feature 1 has no property 'district_id' (given as the key); its properties: name",
        ),
    ];
    for (name, text, message) in cases {
        std::fs::write(dir.path().join(name), text).unwrap();
        let out = mapped_districts(dir.path(), name, &["--output", "bad.csv", "--report", "bad.html"]);
        assert_eq!(out.status.code(), Some(2), "{name}: {}", stderr(&out));
        assert!(stderr(&out).contains(message), "{name}: {}", stderr(&out));
        assert!(!dir.path().join("bad.csv").exists() && !dir.path().join("bad.html").exists(), "{name}");
    }
    // A map needs a report to be drawn in, and its key.
    let input = fixture("neighbours/nc_sids.csv");
    for (extra, message) in [
        (vec!["--map", "partial.geojson", "--map-key", "district_id"], "--report"),
        (vec!["--report", "r2.html", "--map", "partial.geojson"], "--map-key"),
    ] {
        let mut args = counties_fit(input.to_str().unwrap());
        args.extend(["--output", "x.csv"]);
        args.extend(extra);
        assert_refused(dir.path(), &args, message, "x.csv");
    }
}

#[test]
fn a_score_draws_the_nc_counties_map_in_longitude_and_latitude() {
    let dir = tempfile::tempdir().unwrap();
    let fitted = fit_counties_with(dir.path(), &["--output", "fit.csv", "--summary", "s.json"]);
    assert!(fitted.status.success(), "{}", stderr(&fitted));
    let input = fixture("neighbours/nc_sids.csv");
    let map = fixture("neighbours/nc_counties.geojson");
    let line = "score --prior s.json --group county --events deaths --exposure expected --above 1.5 --output scored.csv --report r.html --map-key county";
    let mut args: Vec<&str> = line.split(' ').collect();
    args.extend(["--input", input.to_str().unwrap(), "--map", map.to_str().unwrap()]);
    let out = ratepool(dir.path(), &args);
    assert!(out.status.success(), "{}", stderr(&out));
    let page = std::fs::read_to_string(dir.path().join("r.html")).unwrap();
    assert_eq!(page.matches(r#"<path class="area""#).count(), 3 * 100, "two panels and the exceedance map");
    assert!(page.contains("<title>37009: raw rate "), "the counties' ids as the map's property holds them");
    // The panel's width over its height is the map's span of longitude times the cosine
    // of its middle latitude over its span of latitude, computed here from the file.
    let document: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(&map).unwrap()).unwrap();
    let (mut lon, mut lat) = ([f64::MAX, f64::MIN], [f64::MAX, f64::MIN]);
    let mut visit = |point: &serde_json::Value| {
        let (x, y) = (point[0].as_f64().unwrap(), point[1].as_f64().unwrap());
        lon = [lon[0].min(x), lon[1].max(x)];
        lat = [lat[0].min(y), lat[1].max(y)];
    };
    for feature in document["features"].as_array().unwrap() {
        let geometry = &feature["geometry"];
        let polygons = match geometry["type"].as_str().unwrap() {
            "Polygon" => vec![&geometry["coordinates"]],
            _ => geometry["coordinates"].as_array().unwrap().iter().collect(),
        };
        for ring in polygons.iter().flat_map(|p| p.as_array().unwrap()) {
            ring.as_array().unwrap().iter().for_each(&mut visit);
        }
    }
    let want = (lon[1] - lon[0]) * ((lat[0] + lat[1]) / 2.0).to_radians().cos() / (lat[1] - lat[0]);
    let svg = &page[page.find(r#"data-areas="100""#).unwrap()..];
    let paths: Vec<&str> = svg.split(r#"d="M"#).skip(1).take(100).collect();
    let (mut low, mut high) = ([f64::MAX; 2], [f64::MIN; 2]);
    for path in paths {
        let d = &path[..path.find('"').unwrap()];
        for point in d.split(['M', 'L', 'Z']).filter(|p| !p.is_empty()) {
            let xy: Vec<f64> = point.split(' ').map(|v| v.parse().unwrap()).collect();
            for k in 0..2 {
                low[k] = low[k].min(xy[k]);
                high[k] = high[k].max(xy[k]);
            }
        }
    }
    let aspect = (high[0] - low[0]) / (high[1] - low[1]);
    assert!(relative(aspect, want) < 2e-3, "width over height {aspect} against {want}");
}

#[test]
fn a_parquet_neighbour_table_made_from_the_map_gives_the_csv_tables_output() {
    let dir = tempfile::tempdir().unwrap();
    let map = fixture("neighbours/nc_counties.geojson");
    let made = ratepool(
        dir.path(),
        &[
            "neighbours",
            "--map",
            map.to_str().unwrap(),
            "--key",
            "county",
            "--rook",
            "--output",
            "rook.parquet",
        ],
    );
    assert!(made.status.success(), "{}", stderr(&made));
    let gal = fixture("neighbours/nc_sids_neighbours.csv");
    let mut outputs = Vec::new();
    for (table, output) in [("rook.parquet", "from-parquet.csv"), (gal.to_str().unwrap(), "from-csv.csv")] {
        let out = fit_counties(dir.path(), table, &["--output", output]);
        assert!(out.status.success(), "{}", stderr(&out));
        outputs.push(std::fs::read(dir.path().join(output)).unwrap());
    }
    assert!(outputs[0] == outputs[1], "the map's rook pairs are the GAL file's, so the outputs agree");
}
