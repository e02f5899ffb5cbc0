//! What a run says on stderr: one JSON object per line with
//! `--log-format json` (each phase, each warning, the end), and nothing but
//! errors when stderr is not a terminal and nothing was asked (no progress
//! bars in logs or pipes).

use crate::util::{ratepool, stderr, write};
use serde_json::Value;

const DATA: &str = "id,k,n\na,1,4\nb,3,9\nc,0,2\nd,7,10\ne,2,2\nf,5,12\ng,0,0\nh,9,30\ni,4,11\nj,2,19\n";

fn lines(text: &str) -> Vec<Value> {
    text.lines().map(|l| serde_json::from_str(l).unwrap_or_else(|e| panic!("not JSON: {l}: {e}"))).collect()
}

#[test]
fn a_json_log_has_one_object_per_phase_and_one_for_the_end() {
    let dir = tempfile::tempdir().unwrap();
    write(dir.path(), "in.csv", DATA);
    let args = [
        "--log-format",
        "json",
        "fit",
        "--input",
        "in.csv",
        "--model",
        "beta-binomial",
        "--group",
        "id",
        "--successes",
        "k",
        "--trials",
        "n",
        "--output",
        "out.parquet",
        "--summary",
        "s.json",
        "--report",
        "r.html",
    ];
    let out = ratepool(dir.path(), &args);
    assert!(out.status.success(), "{}", stderr(&out));
    let events = lines(&stderr(&out));
    let phases: Vec<&str> =
        events.iter().filter(|e| e["event"] == "phase").map(|e| e["name"].as_str().unwrap()).collect();
    assert_eq!(phases, ["pass-1", "repeated-ids", "fit", "posteriors", "pass-2"]);
    for phase in events.iter().filter(|e| e["event"] == "phase") {
        assert!(phase["seconds"].as_f64().unwrap() >= 0.0);
    }
    assert_eq!(events[0]["rows"], 10);
    let fit = events.iter().find(|e| e["name"] == "fit").unwrap();
    assert_eq!(fit["pairs"].as_u64(), Some(10));
    let end = events.last().unwrap();
    assert_eq!(
        (end["event"].as_str(), end["status"].as_str(), end["exit_code"].as_i64()),
        (Some("end"), Some("ok"), Some(0))
    );
    assert_eq!(end["outputs"], serde_json::json!(["out.parquet", "s.json", "r.html"]));
    // The summary still goes to stdout, for people.
    assert!(String::from_utf8_lossy(&out.stdout).starts_with("ratepool beta-binomial"));
}

#[test]
fn errors_and_warnings_are_json_too() {
    let dir = tempfile::tempdir().unwrap();
    write(dir.path(), "in.csv", DATA);
    let bad =
        ["--log-format", "json", "fit", "--input", "in.csv", "--model", "beta-binomial", "--group", "id"];
    let out = ratepool(
        dir.path(),
        &[&bad[..], &["--successes", "k", "--trials", "nope", "--output", "o.csv"]].concat(),
    );
    assert_eq!(out.status.code(), Some(2));
    let events = lines(&stderr(&out));
    assert_eq!(events.len(), 1, "{events:?}");
    assert_eq!(events[0]["status"], "error");
    assert_eq!(events[0]["exit_code"], 2);
    assert!(events[0]["error"].as_str().unwrap().contains("no column 'nope'"));
    // A usage mistake, caught by the parser, ends the log the same way.
    let out = ratepool(dir.path(), &["--log-format", "json", "fit", "--levle", "0.9"]);
    assert_eq!(out.status.code(), Some(2));
    assert_eq!(lines(&stderr(&out))[0]["status"], "error");
    // A warning (every group has the same rate: no overdispersion) is an object of its own.
    write(dir.path(), "flat.csv", "id,k,n\na,5,10\nb,5,10\nc,5,10\nd,5,10\n");
    let flat =
        ["--log-format", "json", "fit", "--input", "flat.csv", "--model", "beta-binomial", "--group", "id"];
    let out = ratepool(
        dir.path(),
        &[&flat[..], &["--successes", "k", "--trials", "n", "--output", "f.csv"]].concat(),
    );
    assert!(out.status.success(), "{}", stderr(&out));
    let events = lines(&stderr(&out));
    assert!(events.iter().any(|e| e["event"] == "warning"), "{events:?}");
}

#[test]
fn without_a_terminal_nothing_but_the_asked_for_reaches_stderr() {
    let dir = tempfile::tempdir().unwrap();
    write(dir.path(), "in.csv", DATA);
    let args = [
        "fit",
        "--input",
        "in.csv",
        "--model",
        "beta-binomial",
        "--group",
        "id",
        "--successes",
        "k",
        "--trials",
        "n",
        "--output",
        "out.csv",
    ];
    let out = ratepool(dir.path(), &args);
    assert!(out.status.success());
    // No progress bar (stderr is a pipe here), no control characters.
    assert!(stderr(&out).is_empty(), "{:?}", stderr(&out));
}

#[test]
fn a_star_rating_run_logs_its_phases_too() {
    // Both layouts: a count per level, and one row per rating.
    let dir = tempfile::tempdir().unwrap();
    write(dir.path(), "counts.csv", "id,s1,s2,s3\na,1,0,3\nb,0,2,2\nc,4,1,0\nd,0,0,5\ne,1,1,1\nf,2,0,0\n");
    write(dir.path(), "ratings.csv", "id,stars\na,1\na,3\nb,2\nb,3\nc,1\nc,1\nd,3\ne,2\nf,3\nf,1\n");
    let common =
        ["--model", "dirichlet-multinomial", "--group", "id", "--output", "out.csv", "--summary", "s.json"];
    let runs: [(&[&str], &[&str], u64); 2] = [
        (
            &["--input", "counts.csv", "--level-counts", "s1,s2,s3"],
            &["pass-1", "repeated-ids", "fit", "posteriors", "summary", "pass-2"],
            6,
        ),
        (
            &["--input", "ratings.csv", "--outcome", "stars", "--levels", "1,2,3"],
            &["read-and-count", "fit", "posteriors", "summary", "write"],
            10,
        ),
    ];
    for (input, expected, rows) in runs {
        let mut args = vec!["--log-format", "json", "fit"];
        args.extend(input);
        args.extend(common);
        let out = ratepool(dir.path(), &args);
        assert!(out.status.success(), "{}", stderr(&out));
        let events = lines(&stderr(&out));
        let phases: Vec<&Value> = events.iter().filter(|e| e["event"] == "phase").collect();
        let names: Vec<&str> = phases.iter().map(|e| e["name"].as_str().unwrap()).collect();
        assert_eq!(names, expected);
        assert!(phases.iter().all(|p| p["seconds"].as_f64().unwrap() >= 0.0));
        assert_eq!(phases[0]["rows"].as_u64(), Some(rows), "{:?}", phases[0]);
        assert_eq!(events.last().unwrap()["status"], "ok");
    }
}
