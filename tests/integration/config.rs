//! Job files: `--config job.toml` runs as its command line would, flags on
//! the command line override the file, and `check-config` names the key and
//! line of each mistake without running anything.

use crate::util::{ratepool, stderr, write};
use std::path::Path;

const JOB: &str = "command = \"fit\"\n\
input = \"in.csv\"\n\
model = \"beta-binomial\"\n\
group = \"id\"\n\
successes = \"k\"\n\
trials = \"n\"\n\
output = \"from-file.csv\"\n\
above = 0.3\n\
ranks = true\n\
level = 0.9\n";

const DATA: &str = "id,k,n\na,1,4\nb,3,9\nc,0,2\nd,7,10\ne,2,2\nf,5,12\ng,0,0\nh,9,30\ni,4,11\nj,2,19\n";

fn bytes(dir: &Path, name: &str) -> Vec<u8> {
    std::fs::read(dir.join(name)).unwrap_or_else(|e| panic!("{name}: {e}"))
}

#[test]
fn a_job_file_runs_as_its_command_line_and_the_command_line_overrides_it() {
    let dir = tempfile::tempdir().unwrap();
    write(dir.path(), "in.csv", DATA);
    write(dir.path(), "job.toml", JOB);
    let out = ratepool(dir.path(), &["--quiet", "fit", "--config", "job.toml"]);
    assert!(out.status.success(), "{}", stderr(&out));
    let direct = [
        "--quiet",
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
        "--above",
        "0.3",
        "--ranks",
        "--level",
        "0.9",
        "--output",
        "direct.csv",
    ];
    assert!(ratepool(dir.path(), &direct).status.success());
    assert_eq!(bytes(dir.path(), "from-file.csv"), bytes(dir.path(), "direct.csv"));
    // The command line wins over the file: another level, another output.
    let args = ["--quiet", "fit", "--config", "job.toml", "--level", "0.8", "--output", "override.csv"];
    assert!(ratepool(dir.path(), &args).status.success());
    let mut direct = direct.to_vec();
    direct[16] = "0.8";
    direct[18] = "direct-08.csv";
    assert!(ratepool(dir.path(), &direct).status.success());
    assert_eq!(bytes(dir.path(), "override.csv"), bytes(dir.path(), "direct-08.csv"));
}

#[test]
fn check_config_names_the_key_and_line_of_each_mistake_and_runs_nothing() {
    let dir = tempfile::tempdir().unwrap();
    write(dir.path(), "in.csv", DATA);
    write(dir.path(), "good.toml", JOB);
    let out = ratepool(dir.path(), &["check-config", "good.toml"]);
    assert!(out.status.success(), "{}", stderr(&out));
    assert!(String::from_utf8_lossy(&out.stdout).contains("a valid `fit` job (10 keys)"));
    assert!(!dir.path().join("from-file.csv").exists(), "check-config ran the job");
    // Three mistakes, each with its key and line.
    let bad = JOB
        .replace("level = 0.9", "levle = 0.9")
        .replace("ranks = true", "ranks = \"yes\"")
        .replace("model = \"beta-binomial\"", "model = \"beta-poisson\"");
    write(dir.path(), "bad.toml", &bad);
    let out = ratepool(dir.path(), &["check-config", "bad.toml"]);
    assert_eq!(out.status.code(), Some(2));
    let message = stderr(&out);
    for expected in ["line 10, key 'levle'", "line 9, key 'ranks'", "line 3, key 'model'", "beta-poisson"] {
        assert!(message.contains(expected), "{expected}: {message}");
    }
    // A mistake only the whole job shows: a flag rule without its threshold.
    write(dir.path(), "rule.toml", &JOB.replace("above = 0.3\n", "flag-fdr = 0.1\n"));
    let out = ratepool(dir.path(), &["check-config", "rule.toml"]);
    assert_eq!(out.status.code(), Some(2));
    assert!(stderr(&out).contains("line 8, key 'flag-fdr'"), "{}", stderr(&out));
    // A syntax error names its line; the job file cannot be an output.
    write(dir.path(), "syntax.toml", "model = \"beta-binomial\"\nlevel = \n");
    let out = ratepool(dir.path(), &["check-config", "syntax.toml"]);
    assert_eq!(out.status.code(), Some(2));
    assert!(stderr(&out).contains("line 2"), "{}", stderr(&out));
    let out = ratepool(dir.path(), &["fit", "--config", "good.toml", "--summary", "good.toml"]);
    assert_eq!(out.status.code(), Some(2), "{}", stderr(&out));
    assert_eq!(std::fs::read_to_string(dir.path().join("good.toml")).unwrap(), JOB);
}

#[test]
fn the_demo_job_files_are_valid() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let out = ratepool(root, &["check-config", "demo-data/jobs/weekly-fit.toml"]);
    assert!(out.status.success(), "{}", stderr(&out));
    // The nightly job reads the weekly job's prior, which a fresh clone does not have.
    let dir = tempfile::tempdir().unwrap();
    let weekly = std::fs::read_to_string(root.join("demo-data/jobs/weekly-fit.toml")).unwrap();
    let data = root.join("demo-data/districts.csv");
    let weekly = weekly.replace("\"demo-data/districts.csv\"", &format!("{:?}", data.to_str().unwrap()));
    write(dir.path(), "weekly.toml", &weekly);
    let out = ratepool(dir.path(), &["--quiet", "fit", "--config", "weekly.toml"]);
    assert!(out.status.success(), "{}", stderr(&out));
    let nightly = std::fs::read_to_string(root.join("demo-data/jobs/nightly-score.toml")).unwrap();
    let nightly = nightly.replace("\"demo-data/districts.csv\"", &format!("{:?}", data.to_str().unwrap()));
    write(dir.path(), "nightly.toml", &nightly);
    let out = ratepool(dir.path(), &["check-config", "nightly.toml"]);
    assert!(out.status.success(), "{}", stderr(&out));
    let out = ratepool(dir.path(), &["score", "--config", "nightly.toml"]);
    assert!(out.status.success(), "{}", stderr(&out));
    let summary = crate::util::summary(&dir.path().join("nightly.json"));
    assert_eq!(summary["checks"]["data"], "the scored data under the saved prior");
}

#[test]
fn check_config_checks_star_rating_fits_and_scores_as_they_would_run() {
    let dir = tempfile::tempdir().unwrap();
    let sellers = format!("{}/demo-data/star_sellers.csv", env!("CARGO_MANIFEST_DIR"));
    let fit = format!(
        "command = \"fit\"\ninput = \"{sellers}\"\nmodel = \"dirichlet-multinomial\"\ngroup = \"seller_id\"\nlevel-counts = [\"stars_1\", \"stars_2\", \"stars_3\", \"stars_4\", \"stars_5\"]\noutput = \"stars.csv\"\nsummary = \"stars.json\"\n"
    );
    write(dir.path(), "fit.toml", &fit);
    let out = ratepool(dir.path(), &["check-config", "fit.toml"]);
    assert!(out.status.success(), "{}", stderr(&out));
    assert!(!dir.path().join("stars.csv").exists(), "check-config ran the job");
    write(
        dir.path(),
        "one.toml",
        &fit.replace("\"stars_1\", \"stars_2\", \"stars_3\", \"stars_4\", \"stars_5\"", "\"stars_1\""),
    );
    let out = ratepool(dir.path(), &["check-config", "one.toml"]);
    assert_eq!(out.status.code(), Some(2));
    assert!(
        stderr(&out).contains(
            "line 5, key 'level-counts': the dirichlet-multinomial model needs at least two levels"
        ),
        "{}",
        stderr(&out)
    );
    // A score with the fit's saved prior is checked as a star-rating score.
    let ran = ratepool(dir.path(), &["--quiet", "fit", "--config", "fit.toml"]);
    assert!(ran.status.success(), "{}", stderr(&ran));
    let score = format!("command = \"score\"\ninput = \"{sellers}\"\nprior = \"stars.json\"\ngroup = \"seller_id\"\noutput = \"scored.csv\"\n");
    write(dir.path(), "score.toml", &score);
    let out = ratepool(dir.path(), &["check-config", "score.toml"]);
    assert!(out.status.success(), "{}", stderr(&out));
    write(dir.path(), "rows.toml", &format!("{score}outcome = \"stars\"\n"));
    let out = ratepool(dir.path(), &["check-config", "rows.toml"]);
    assert_eq!(out.status.code(), Some(2));
    assert!(stderr(&out).contains("not one row per rating"), "{}", stderr(&out));
}
