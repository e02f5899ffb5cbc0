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
