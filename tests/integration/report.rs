//! The HTML report: the same bytes from `fit --report` and from `report`,
//! self-contained, every plot present, its tables agreeing with the summary
//! and the table, and refusals that write nothing. (The check in a real
//! browser is scripts/check_report_in_browser.sh.)

use crate::util::{assert_refused, fixture, ratepool, stderr, summary, write, Csv};
use std::path::Path;

const PLOTS: [&str; 5] = ["shrinkage", "funnel", "prior", "calibration", "pool-weights"];

/// The demo districts with flags and ranks, fitted in `dir` with the report.
fn districts(dir: &Path, output: &str, extra: &[&str]) -> std::process::Output {
    let input = Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-data/districts.csv");
    let mut args = vec!["--quiet", "fit", "--input", input.to_str().unwrap(), "--model", "gamma-poisson"];
    args.extend(["--group", "district_id", "--events", "observed_cases", "--exposure", "expected_cases"]);
    args.extend(["--above", "1", "--flag-fdr", "0.1", "--ranks", "--output", output, "--summary", "s.json"]);
    args.extend(extra);
    ratepool(dir, &args)
}

/// An HTML page with no scripts and no external references.
fn assert_self_contained(page: &str) {
    assert!(page.starts_with("<!DOCTYPE html>"));
    for outside in ["<script", " src=", "href=", "@import", "url("] {
        assert!(!page.contains(outside), "the page holds {outside}");
    }
}

fn read(dir: &Path, name: &str) -> String {
    std::fs::read_to_string(dir.join(name)).unwrap_or_else(|e| panic!("{name}: {e}"))
}

#[test]
fn fit_with_report_and_report_later_give_the_same_self_contained_page() {
    let dir = tempfile::tempdir().unwrap();
    let out = districts(dir.path(), "d.parquet", &["--report", "fit.html", "--plots", "plots"]);
    assert!(out.status.success(), "{}", stderr(&out));
    let args = ["report", "--table", "d.parquet", "--summary", "s.json", "--output", "later.html"];
    let out = ratepool(dir.path(), &args);
    assert!(out.status.success(), "{}", stderr(&out));
    let page = read(dir.path(), "fit.html");
    assert_eq!(page, read(dir.path(), "later.html"), "the two ways give the same bytes");
    // The same again: no timestamps, seeded samples.
    let out = ratepool(
        dir.path(),
        &["report", "--table", "d.parquet", "--summary", "s.json", "--output", "again.html"],
    );
    assert!(out.status.success());
    assert_eq!(page, read(dir.path(), "again.html"));
    assert_self_contained(&page);
    for plot in PLOTS {
        assert!(page.contains(&format!("data-plot=\"{plot}\"")), "{plot} missing");
        let alone = read(&dir.path().join("plots"), &format!("{plot}.svg"));
        assert!(alone.starts_with("<svg") && page.contains(&alone), "{plot}.svg is the plot on the page");
    }
    for words in [
        "Diagnostics",
        "The fit converged",
        "Calibration:",
        "Cautions",
        "Results about small groups may identify the people behind them",
    ] {
        assert!(page.contains(words), "{words}");
    }
}

#[test]
fn the_report_of_an_arrow_ipc_table_is_the_report_of_its_parquet_twin() {
    let dir = tempfile::tempdir().unwrap();
    for table in ["d.parquet", "d.arrow"] {
        let page = format!("{table}.html");
        let out = districts(dir.path(), table, &["--report", &page]);
        assert!(out.status.success(), "{}", stderr(&out));
    }
    let page = |name: &str| read(dir.path(), name).replace(name.trim_end_matches(".html"), "TABLE");
    assert_eq!(page("d.parquet.html"), page("d.arrow.html"));
}

/// The group in the first row of the table under the heading `title`.
fn first_group<'a>(page: &'a str, title: &str) -> &'a str {
    let section = &page[page.find(&format!("<h3>{title}</h3>")).unwrap()..];
    let body = &section[section.find("<tbody>").unwrap()..];
    body[body.find("<tr><td>").unwrap() + 8..].split('<').next().unwrap()
}

#[test]
fn the_tables_agree_with_the_summary_and_the_output() {
    let dir = tempfile::tempdir().unwrap();
    let out = districts(dir.path(), "d.csv", &["--report", "r.html"]);
    assert!(out.status.success(), "{}", stderr(&out));
    let (page, s) = (read(dir.path(), "r.html"), summary(&dir.path().join("s.json")));
    // The group that moved furthest, as the pipeline's own pull summary names it, heads "Moved most".
    let furthest = s["pull"]["max_shift_group"].as_str().unwrap();
    assert_eq!(first_group(&page, "Moved most"), furthest);
    // The flag count is the summary's, and the flagged table lists flagged groups only.
    let flagged = s["flags"]["groups_flagged"].as_u64().unwrap();
    assert!(page.contains(&format!("{flagged} groups flagged;")), "{flagged}");
    let table = Csv::read(&dir.path().join("d.csv"));
    let (ids, flags) = (table.column("district_id"), table.column("flagged"));
    let listed = &page[page.find("<h3>Flagged</h3>").unwrap()..];
    let listed = &listed[..listed.find("</table>").unwrap()];
    let rows: Vec<&str> = listed.split("<tr><td>").skip(1).map(|r| r.split('<').next().unwrap()).collect();
    assert_eq!(rows.len(), 15);
    for id in rows {
        let at = ids.iter().position(|i| i == id).unwrap();
        assert_eq!(flags[at], "true", "{id} is listed as flagged");
    }
    // The top of the conservative ranking is rank 1 of rank_conservative.
    let first = first_group(&page, "Top of the conservative ranking");
    let ranks = table.column("rank_conservative");
    assert_eq!(ranks[ids.iter().position(|i| i == first).unwrap()], "1");
}

#[test]
fn segments_and_the_normal_model_get_their_sections() {
    let dir = tempfile::tempdir().unwrap();
    let input = Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-data/returns.csv");
    let mut args = vec!["--quiet", "fit", "--input", input.to_str().unwrap(), "--model", "beta-binomial"];
    args.extend(["--group", "store_id", "--outcome", "returned", "--by", "store_kind"]);
    args.extend(["--output", "r.parquet", "--summary", "s.json", "--report", "r.html"]);
    let out = ratepool(dir.path(), &args);
    assert!(out.status.success(), "{}", stderr(&out));
    let page = read(dir.path(), "r.html");
    for kind in ["arcade", "kiosk", "warehouse", "web"] {
        assert!(page.contains(&format!("store_kind = {kind}")), "{kind}");
    }
    assert_eq!(page.matches("class=\"segment\"").count(), 4);
    let input = fixture("normal_groups.csv");
    let mut args = vec!["--quiet", "fit", "--input", input.to_str().unwrap(), "--model", "normal-normal"];
    args.extend(["--group", "clinic", "--estimate", "wait_minutes", "--std-error", "wait_se"]);
    args.extend(["--output", "n.csv", "--summary", "n.json", "--report", "n.html"]);
    let out = ratepool(dir.path(), &args);
    assert!(out.status.success(), "{}", stderr(&out));
    let page = read(dir.path(), "n.html");
    assert!(page.contains("Normal(mean") && page.contains("precision 1/se"), "normal words");
}

#[test]
fn a_table_that_is_not_the_summarys_or_an_overlap_is_refused_and_nothing_written() {
    let dir = tempfile::tempdir().unwrap();
    let out = districts(dir.path(), "d.parquet", &[]);
    assert!(out.status.success(), "{}", stderr(&out));
    // Another run's table (fewer groups) under this summary.
    write(dir.path(), "small.csv", "district_id,observed_cases,expected_cases\na,1,2.0\nb,3,1.5\nc,0,0.4\n");
    let small = [
        "--quiet",
        "fit",
        "--input",
        "small.csv",
        "--model",
        "gamma-poisson",
        "--group",
        "district_id",
        "--events",
        "observed_cases",
        "--exposure",
        "expected_cases",
        "--above",
        "1",
        "--flag-fdr",
        "0.1",
        "--output",
        "small-out.csv",
    ];
    assert!(ratepool(dir.path(), &small).status.success());
    let mismatched = ["report", "--table", "small-out.csv", "--summary", "s.json", "--output", "r.html"];
    assert_refused(dir.path(), &mismatched, "give the table and summary of the same run", "r.html");
    let overlap = ["report", "--table", "d.parquet", "--summary", "s.json", "--output", "d.parquet"];
    assert_refused(dir.path(), &overlap, "--output", "r.html");
    assert!(Path::new(&dir.path().join("d.parquet")).exists());
    let clobber = ["report", "--table", "d.parquet", "--summary", "s.json", "--output", "s.json"];
    assert_refused(dir.path(), &clobber, "--summary", "r.html");
    assert!(
        summary(&dir.path().join("s.json"))["groups"].as_u64() == Some(3000),
        "the summary kept its bytes"
    );
}

#[test]
fn plots_alone_come_as_png_too_the_same_bytes_each_time() {
    let dir = tempfile::tempdir().unwrap();
    let out = districts(dir.path(), "d.parquet", &[]);
    assert!(out.status.success(), "{}", stderr(&out));
    for folder in ["png-1", "png-2"] {
        let args = [
            "report",
            "--table",
            "d.parquet",
            "--summary",
            "s.json",
            "--output",
            "r.html",
            "--plots",
            folder,
            "--plot-format",
            "png",
        ];
        let out = ratepool(dir.path(), &args);
        assert!(out.status.success(), "{}", stderr(&out));
    }
    for plot in PLOTS {
        let first = std::fs::read(dir.path().join("png-1").join(format!("{plot}.png"))).unwrap();
        assert!(first.starts_with(b"\x89PNG\r\n\x1a\n"), "{plot}");
        assert!(first.len() > 5_000, "{plot}: {} bytes", first.len());
        assert_eq!(
            first,
            std::fs::read(dir.path().join("png-2").join(format!("{plot}.png"))).unwrap(),
            "{plot}"
        );
    }
}

#[test]
fn a_free_prior_is_drawn_as_its_masses_beside_the_parametric_prior() {
    let dir = tempfile::tempdir().unwrap();
    let input = Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-data/storefronts.csv");
    let mut args = vec!["--quiet", "fit", "--input", input.to_str().unwrap(), "--model", "beta-binomial"];
    args.extend(["--group", "storefront_id", "--successes", "purchases", "--trials", "visits"]);
    args.extend(["--prior-shape", "free", "--output", "sf.csv", "--summary", "s.json"]);
    args.extend(["--report", "sf.html", "--plots", "plots"]);
    let out = ratepool(dir.path(), &args);
    assert!(out.status.success(), "{}", stderr(&out));
    let page = read(dir.path(), "sf.html");
    let s = summary(&dir.path().join("s.json"));
    let support = s["prior"]["support"].as_array().unwrap().len();
    assert!(
        page.contains(&format!("free: masses on 300 grid points (arcsine-root spacing), {support} of them"))
    );
    assert!(
        page.contains("masses (red bars: each point holding at least 0.001"),
        "the caption names what is drawn"
    );
    assert!(page.contains("the parametric prior fitted to the same data (grey line)"));
    assert!(!page.contains("complete pooling"), "a free prior is not complete pooling");
    // The prior plot: one red bar per support point shown, and the parametric prior's curve.
    let prior = read(dir.path(), "plots/prior.svg");
    assert_eq!(prior.matches("stroke=\"#C4362C\"").count(), support, "{prior:.400}");
    assert!(prior.matches("stroke=\"#5A5A5A\"").count() >= 1);
}

/// The demo shops' star ratings by category, fitted in `dir` with flags and ranks.
fn star_shops(dir: &Path, extra: &[&str]) -> std::process::Output {
    let input = Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-data/star_shops.csv");
    let mut args =
        vec!["--quiet", "fit", "--input", input.to_str().unwrap(), "--model", "dirichlet-multinomial"];
    args.extend(["--group", "shop_id", "--level-counts", "stars_1,stars_2,stars_3,stars_4,stars_5"]);
    args.extend(["--by", "category", "--above", "4.5", "--flag-fdr", "0.1", "--ranks"]);
    args.extend(["--output", "shops.csv", "--summary", "shops.json"]);
    args.extend(extra);
    ratepool(dir, &args)
}

#[test]
fn a_star_rating_report_lists_what_its_table_and_summary_say() {
    let dir = tempfile::tempdir().unwrap();
    let out = star_shops(dir.path(), &["--report", "fit.html", "--plots", "plots"]);
    assert!(out.status.success(), "{}", stderr(&out));
    let args = ["report", "--table", "shops.csv", "--summary", "shops.json", "--output", "later.html"];
    let out = ratepool(dir.path(), &args);
    assert!(out.status.success(), "{}", stderr(&out));
    let page = read(dir.path(), "fit.html");
    assert_eq!(page, read(dir.path(), "later.html"), "the two ways give the same bytes");
    assert_self_contained(&page);
    for plot in ["shrinkage", "calibration", "pool-weights"] {
        let alone = read(&dir.path().join("plots"), &format!("{plot}.svg"));
        assert!(page.contains(&format!("data-plot=\"{plot}\"")) && page.contains(&alone), "{plot}");
    }
    let s = summary(&dir.path().join("shops.json"));
    let table = Csv::read(&dir.path().join("shops.csv"));
    let ids = table.column("shop_id");
    // The seller that moved furthest, as the run's own pull summary names it, heads "Moved most".
    assert_eq!(first_group(&page, "Moved most"), s["pull"]["max_shift_group"].as_str().unwrap());
    // The top of the conservative ranking is rank 1 of rank_conservative.
    let first = first_group(&page, "Top of the conservative ranking");
    assert_eq!(table.column("rank_conservative")[ids.iter().position(|i| i == first).unwrap()], "1");
    // The flag count is the summary's; every listed seller is flagged in the table.
    let flagged = s["flags"]["groups_flagged"].as_u64().unwrap();
    assert!(page.contains(&format!("{flagged} sellers flagged;")), "{flagged}");
    let listed = &page[page.find("<h3>Flagged</h3>").unwrap()..];
    let listed = &listed[..listed.find("</table>").unwrap()];
    for id in listed.split("<tr><td>").skip(1).map(|r| r.split('<').next().unwrap()) {
        assert_eq!(table.column("flagged")[ids.iter().position(|i| i == id).unwrap()], "true", "{id}");
    }
    // Each level's share of all ratings: its column's sum over all columns' sums.
    let sums: Vec<f64> = (1..=5)
        .map(|k| table.column(&format!("stars_{k}")).iter().map(|v| v.parse::<f64>().unwrap()).sum())
        .collect();
    let all: f64 = sums.iter().sum();
    let levels = &page[page.find("<table id=\"levels\">").unwrap()..];
    let levels = &levels[..levels.find("</table>").unwrap()];
    for (k, row) in levels.split("<tr><td>").skip(1).enumerate() {
        let cells: Vec<&str> = row.split("<td>").map(|c| c.split('<').next().unwrap()).collect();
        assert_eq!(cells[0], format!("stars_{}", k + 1));
        let shown: f64 = cells[4].parse().unwrap();
        assert!((shown - sums[k] / all).abs() < 5e-4 * (sums[k] / all), "stars_{}: {shown}", k + 1);
    }
    // One row per segment of the summary, and the cautions of a ranked, flagged run.
    let segments = s["segments"]["segments"].as_array().unwrap();
    let section = &page[page.find("<section id=\"segments\">").unwrap()..];
    assert_eq!(section[..section.find("</table>").unwrap()].matches("<tr><td>").count(), segments.len());
    for words in [
        "Ranks order groups by their estimated rate",
        "A flag is a statement about a set",
        "Results about small groups",
    ] {
        assert!(page.contains(words), "{words}");
    }
}

#[test]
fn a_star_rating_report_refuses_a_map_and_an_old_summary_and_writes_nothing() {
    let dir = tempfile::tempdir().unwrap();
    let out = star_shops(dir.path(), &[]);
    assert!(out.status.success(), "{}", stderr(&out));
    let map = Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-data/district_map.geojson");
    let args = ["report", "--table", "shops.csv", "--summary", "shops.json", "--output", "r.html"];
    let mut with_map = args.to_vec();
    with_map.extend(["--map", map.to_str().unwrap(), "--map-key", "district_id"]);
    assert_refused(
        dir.path(),
        &with_map,
        "--map does not apply to the dirichlet-multinomial model",
        "r.html",
    );
    // A summary from before the group column was named in it.
    let mut old = summary(&dir.path().join("shops.json"));
    old.as_object_mut().unwrap().remove("group_column");
    write(dir.path(), "old.json", &old.to_string());
    let args = ["report", "--table", "shops.csv", "--summary", "old.json", "--output", "r.html"];
    assert_refused(dir.path(), &args, "does not name the group column", "r.html");
}
