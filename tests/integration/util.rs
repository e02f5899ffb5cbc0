//! Helpers: running the binary in a scratch folder, reading fixtures and
//! output tables.

use serde_json::Value;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

/// Path of a committed fixture.
pub fn fixture(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests").join("fixtures").join(name)
}

/// A parsed JSON fixture.
pub fn json_fixture(name: &str) -> Value {
    let text = std::fs::read_to_string(fixture(name)).expect("fixture exists");
    serde_json::from_str(&text).expect("fixture is JSON")
}

/// Runs `ratepool` with `args` in `dir`.
pub fn ratepool(dir: &Path, args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_ratepool")).current_dir(dir).args(args).output().expect("binary runs")
}

/// The process's stderr as text.
pub fn stderr(output: &Output) -> String {
    String::from_utf8_lossy(&output.stderr).into_owned()
}

/// A small CSV table: header and rows of fields (no quoting needed here).
pub struct Csv {
    pub header: Vec<String>,
    pub rows: Vec<Vec<String>>,
}

impl Csv {
    pub fn read(path: &Path) -> Csv {
        let text = std::fs::read_to_string(path).expect("table exists");
        let mut lines = text.lines();
        let header = lines.next().expect("header").split(',').map(str::to_string).collect();
        let rows = lines.map(|l| l.split(',').map(str::to_string).collect()).collect();
        Csv { header, rows }
    }

    pub fn column(&self, name: &str) -> Vec<String> {
        let i = self.header.iter().position(|h| h == name).unwrap_or_else(|| panic!("no column {name}"));
        self.rows.iter().map(|r| r[i].clone()).collect()
    }

    pub fn floats(&self, name: &str) -> Vec<f64> {
        self.column(name).iter().map(|v| v.parse().unwrap_or_else(|_| panic!("{name}: {v}"))).collect()
    }
}

/// Writes `text` to `dir/name` and returns the name.
pub fn write(dir: &Path, name: &str, text: &str) -> String {
    std::fs::write(dir.join(name), text).expect("scratch file written");
    name.to_string()
}

/// Relative difference.
pub fn relative(a: f64, b: f64) -> f64 {
    if a == b {
        0.0
    } else {
        (a - b).abs() / b.abs().max(f64::MIN_POSITIVE)
    }
}

/// Reads a summary file.
pub fn summary(path: &Path) -> Value {
    serde_json::from_str(&std::fs::read_to_string(path).expect("summary exists")).expect("summary is JSON")
}

/// Runs `args` in `dir` and checks the run is refused as bad usage or input:
/// exit 2, `message` on stderr, and no `output` written.
pub fn assert_refused(dir: &Path, args: &[&str], message: &str, output: &str) {
    let out = ratepool(dir, args);
    assert_eq!(out.status.code(), Some(2), "{args:?}: {}", stderr(&out));
    assert!(stderr(&out).contains(message), "{args:?}: {}", stderr(&out));
    assert!(!dir.join(output).exists(), "{args:?} left {output}");
}

/// `got` and `want` side by side, after checking that they are the same
/// length and not empty: a zip alone passes an empty or short output.
pub fn paired<'a, A, B>(
    got: &'a [A],
    want: &'a [B],
    what: &str,
) -> std::iter::Zip<std::slice::Iter<'a, A>, std::slice::Iter<'a, B>> {
    assert!(!want.is_empty(), "{what}: nothing to compare");
    assert_eq!(got.len(), want.len(), "{what}: {} values against {} expected", got.len(), want.len());
    got.iter().zip(want)
}

/// The demo clinics' model and columns (demo-data/clinic_waits.csv).
pub const CLINICS: [&str; 8] = [
    "--model",
    "normal-normal",
    "--group",
    "clinic_id",
    "--estimate",
    "mean_wait_minutes",
    "--std-error",
    "wait_se",
];
