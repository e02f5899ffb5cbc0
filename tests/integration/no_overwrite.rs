//! No run may write over its input, its prior or another of its outputs: each
//! such run is refused before anything is read (exit 2, both options named),
//! and every file in the folder keeps its bytes. Also: all outputs or none,
//! and CSV input with another field separator.

use crate::util::{ratepool, stderr, write, Csv};
use std::collections::BTreeMap;
use std::path::Path;

const GOOD: &str = "id,k,n\na,1,4\nb,3,9\nc,0,2\nd,7,10\ne,2,2\nf,5,12\ng,0,0\nh,9,30\n";
const WITH_A_BAD_ROW: &str = "id,k,n\na,1,4\nb,3,9\nc,0,2\nd,7,10\ne,2,2\nf,5,12\ng,0,0\nh,9,30\ni,5,2\n";

const COLUMNS: [&str; 8] = ["--model", "beta-binomial", "--group", "id", "--successes", "k", "--trials", "n"];

/// Every regular file below `dir` with its bytes (links followed).
fn snapshot(dir: &Path) -> BTreeMap<String, Vec<u8>> {
    let mut files = BTreeMap::new();
    let mut folders = vec![dir.to_path_buf()];
    while let Some(folder) = folders.pop() {
        for entry in std::fs::read_dir(&folder).unwrap() {
            let path = entry.unwrap().path();
            if path.is_dir() {
                folders.push(path);
            } else {
                let name = path.strip_prefix(dir).unwrap().display().to_string();
                files.insert(name, std::fs::read(&path).unwrap());
            }
        }
    }
    files
}

/// Runs `args` in `dir`, which must be refused with exit 2 naming both
/// options, leaving every file as it was.
fn assert_clobber_refused(dir: &Path, args: &[&str], options: [&str; 2]) {
    let before = snapshot(dir);
    let out = ratepool(dir, args);
    let message = stderr(&out);
    assert_eq!(out.status.code(), Some(2), "{message}");
    for option in options {
        assert!(message.contains(option), "expected {option} in: {message}");
    }
    assert_eq!(snapshot(dir), before, "a refused run changed a file");
}

fn fit<'a>(input: &'a str, rest: &[&'a str]) -> Vec<&'a str> {
    let mut args = vec!["fit", "--input", input];
    args.extend(COLUMNS);
    args.extend(rest);
    args
}

#[test]
fn an_output_naming_the_input_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    write(dir.path(), "g.csv", GOOD);
    assert_clobber_refused(dir.path(), &fit("g.csv", &["--output", "g.csv"]), ["--input", "--output"]);
}

#[test]
fn rejects_naming_the_input_are_refused() {
    let dir = tempfile::tempdir().unwrap();
    write(dir.path(), "g.csv", WITH_A_BAD_ROW);
    let args = fit("g.csv", &["--on-invalid", "skip", "--rejects", "g.csv", "--output", "o.csv"]);
    assert_clobber_refused(dir.path(), &args, ["--input", "--rejects"]);
}

#[test]
fn a_summary_naming_the_output_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    write(dir.path(), "g.csv", GOOD);
    write(dir.path(), "out.csv", "an earlier output\n");
    let args = fit("g.csv", &["--output", "out.csv", "--summary", "out.csv"]);
    assert_clobber_refused(dir.path(), &args, ["--output", "--summary"]);
}

#[test]
fn rejects_naming_the_output_are_refused() {
    let dir = tempfile::tempdir().unwrap();
    write(dir.path(), "g.csv", WITH_A_BAD_ROW);
    let args = fit("g.csv", &["--output", "o.csv", "--on-invalid", "skip", "--rejects", "o.csv"]);
    assert_clobber_refused(dir.path(), &args, ["--output", "--rejects"]);
}

#[test]
fn every_spelling_of_the_input_is_caught() {
    let dir = tempfile::tempdir().unwrap();
    write(dir.path(), "g.csv", GOOD);
    std::fs::create_dir(dir.path().join("sub")).unwrap();
    std::os::unix::fs::symlink(dir.path().join("g.csv"), dir.path().join("link.csv")).unwrap();
    std::fs::hard_link(dir.path().join("g.csv"), dir.path().join("hard.csv")).unwrap();
    let absolute = dir.path().join("g.csv").display().to_string();
    for spelling in ["./g.csv", "sub/../g.csv", "link.csv", "hard.csv", absolute.as_str()] {
        assert_clobber_refused(dir.path(), &fit("g.csv", &["--output", spelling]), ["--input", "--output"]);
        // The other way round: the input spelled differently, the output plain.
        assert_clobber_refused(dir.path(), &fit(spelling, &["--output", "g.csv"]), ["--input", "--output"]);
    }
    let summary_over_input = fit("g.csv", &["--output", "o.csv", "--summary", "sub/../hard.csv"]);
    assert_clobber_refused(dir.path(), &summary_over_input, ["--input", "--summary"]);
}

#[test]
fn an_output_inside_an_input_folder_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    std::fs::create_dir(dir.path().join("parts")).unwrap();
    write(dir.path(), "parts/part-0.parquet", "stands in for a part: never read");
    let args = fit("parts", &["--output", "parts/scored.parquet"]);
    assert_clobber_refused(dir.path(), &args, ["--input", "--output"]);
    let args = fit("parts", &["--output", "o.parquet", "--summary", "./parts/../parts/s.json"]);
    assert_clobber_refused(dir.path(), &args, ["--input", "--summary"]);
}

#[test]
fn score_may_not_write_over_its_prior() {
    let dir = tempfile::tempdir().unwrap();
    write(dir.path(), "g.csv", GOOD);
    let fitted =
        ratepool(dir.path(), &fit("g.csv", &["--quiet", "--output", "o.csv", "--summary", "p.json"]));
    assert!(fitted.status.success(), "{}", stderr(&fitted));
    let score = |rest: &[&'static str]| {
        let mut args = vec!["score", "--input", "g.csv", "--prior", "p.json", "--group", "id"];
        args.extend(["--successes", "k", "--trials", "n"]);
        args.extend(rest);
        args
    };
    assert_clobber_refused(dir.path(), &score(&["--output", "p.json"]), ["--prior", "--output"]);
    assert_clobber_refused(
        dir.path(),
        &score(&["--output", "s.csv", "--summary", "./p.json"]),
        ["--prior", "--summary"],
    );
}

/// An output that cannot be written (its folder is missing) leaves no other
/// output behind, whichever it is and whichever layout wrote it.
#[test]
fn a_failed_rejects_file_leaves_no_table_and_no_summary() {
    let dir = tempfile::tempdir().unwrap();
    write(dir.path(), "g.csv", WITH_A_BAD_ROW);
    let before = snapshot(dir.path());
    let args = fit("g.csv", &["--output", "o.csv", "--summary", "s.json"]);
    let args: Vec<&str> = args.into_iter().chain(["--on-invalid", "skip", "--rejects", "no/r.csv"]).collect();
    let out = ratepool(dir.path(), &args);
    assert_eq!(out.status.code(), Some(1), "{}", stderr(&out));
    assert!(stderr(&out).contains("no"), "{}", stderr(&out));
    assert_eq!(snapshot(dir.path()), before, "a run that failed to write its rejects left an output");
}

#[test]
fn semicolon_and_tab_separated_input_read_with_delimiter() {
    let dir = tempfile::tempdir().unwrap();
    write(dir.path(), "comma.csv", GOOD);
    write(dir.path(), "semi.csv", &GOOD.replace(',', ";"));
    write(dir.path(), "tab.csv", &GOOD.replace(',', "\t"));
    let run = |input: &str, output: &str, extra: &[&str]| {
        let mut args = fit(input, &["--quiet", "--output", output]);
        args.extend(extra);
        ratepool(dir.path(), &args)
    };
    assert!(run("comma.csv", "comma-out.csv", &[]).status.success());
    assert!(run("semi.csv", "semi-out.csv", &["--delimiter", ";"]).status.success());
    assert!(run("tab.csv", "tab-out.csv", &["--delimiter", "tab"]).status.success());
    let expected = Csv::read(&dir.path().join("comma-out.csv")).rows;
    assert_eq!(Csv::read(&dir.path().join("semi-out.csv")).rows, expected);
    assert_eq!(Csv::read(&dir.path().join("tab-out.csv")).rows, expected);
    // Without the flag, the missing-column error says what the file looks like.
    let semi = run("semi.csv", "x.csv", &[]);
    assert_eq!(semi.status.code(), Some(2));
    assert!(stderr(&semi).contains("--delimiter ';'"), "{}", stderr(&semi));
    let tab = run("tab.csv", "x.csv", &[]);
    assert!(stderr(&tab).contains("--delimiter tab"), "{}", stderr(&tab));
    assert!(!dir.path().join("x.csv").exists());
}

#[test]
fn a_pair_output_naming_another_file_of_the_run_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    write(dir.path(), "g.csv", GOOD);
    let args = fit("g.csv", &["--output", "o.csv", "--pair-output", "./o.csv"]);
    assert_clobber_refused(dir.path(), &args, ["--output", "--pair-output"]);
    let args = fit("g.csv", &["--output", "o.csv", "--pair-output", "g.csv"]);
    assert_clobber_refused(dir.path(), &args, ["--input", "--pair-output"]);
}

#[cfg(unix)]
#[test]
fn outputs_are_created_like_any_new_file_readable_by_other_tools() {
    // A temporary file is private (0600); an output is not: it takes 0666
    // less the umask, as a file made by File::create does.
    use std::os::unix::fs::PermissionsExt;
    let dir = tempfile::tempdir().unwrap();
    write(dir.path(), "in.csv", GOOD);
    let out = ratepool(dir.path(), &fit("in.csv", &["--output", "out.parquet", "--summary", "s.json"]));
    assert!(out.status.success(), "{}", stderr(&out));
    let plain = dir.path().join("plain");
    std::fs::File::create(&plain).unwrap();
    let mode = |name: &str| std::fs::metadata(dir.path().join(name)).unwrap().permissions().mode() & 0o777;
    for name in ["out.parquet", "s.json"] {
        assert_eq!(mode(name), mode("plain"), "{name}");
    }
}
