//! The architecture DEVELOPERS.md describes, checked on the source: no
//! file outside `src/core/model/` names a particular family, and no layer
//! imports one listed below it.

use std::path::{Path, PathBuf};

/// Every `.rs` file under `folder`.
fn sources(folder: &Path) -> Vec<PathBuf> {
    let mut found = Vec::new();
    for entry in std::fs::read_dir(folder).unwrap() {
        let path = entry.unwrap().path();
        if path.is_dir() {
            found.extend(sources(&path));
        } else if path.extension().is_some_and(|e| e == "rs") {
            found.push(path);
        }
    }
    found.sort();
    found
}

/// The lines of a file that are code: its unit tests (a `#[cfg(test)]`
/// module ends every file that has one) and comments left out, with their
/// line numbers.
fn code_lines(path: &Path) -> Vec<(usize, String)> {
    let text = std::fs::read_to_string(path).unwrap();
    let code = text.split("#[cfg(test)]").next().unwrap_or_default();
    code.lines()
        .enumerate()
        .map(|(i, line)| (i + 1, line.split("//").next().unwrap_or_default().to_string()))
        .filter(|(_, line)| !line.trim().is_empty())
        .collect()
}

fn src() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("src")
}

#[test]
fn no_file_outside_the_model_folder_names_a_family() {
    // A family is named by its type, its module, the variant of its law, or
    // its name compared or matched as text. The command line's help prose
    // (attributes) may say which model an option serves.
    let named = [
        "BetaBinomial",
        "GammaPoisson",
        "NormalNormal",
        "beta_binomial",
        "gamma_poisson",
        "normal_normal",
        "RateLaw::Beta",
        "RateLaw::Gamma",
        "RateLaw::Normal",
    ];
    let names = ["\"beta-binomial\"", "\"gamma-poisson\"", "\"normal-normal\""];
    let models = src().join("core").join("model");
    let mut found = Vec::new();
    for path in sources(&src()).into_iter().filter(|p| !p.starts_with(&models)) {
        for (number, line) in code_lines(&path) {
            let attribute = line.trim_start().starts_with("#[");
            let compared = names.iter().any(|name| {
                [format!("{name} =>"), format!("== {name}"), format!("!= {name}"), format!("{name} ==")]
                    .iter()
                    .any(|form| line.contains(form.as_str()))
            });
            if compared || (!attribute && named.iter().any(|n| line.contains(n))) {
                found.push(format!("{}:{number}: {}", path.display(), line.trim()));
            }
        }
    }
    assert!(found.is_empty(), "a family named outside src/core/model/:\n{}", found.join("\n"));
}

#[test]
fn no_layer_imports_one_listed_below_it() {
    // DEVELOPERS.md's table, top to bottom: each may use those above it.
    let layers: [(&str, &[&str]); 8] = [
        ("core", &["core"]),
        ("io", &["io"]),
        ("summary", &["summary.rs"]),
        ("pipeline", &["pipeline"]),
        ("report", &["report.rs", "progress.rs"]),
        ("view", &["view"]),
        ("config", &["config.rs"]),
        ("cli", &["cli.rs", "main.rs"]),
    ];
    let layer_of = |path: &Path| {
        let relative = path.strip_prefix(src()).unwrap();
        let first = relative.components().next().unwrap().as_os_str().to_str().unwrap().to_string();
        layers.iter().position(|(_, parts)| parts.contains(&first.as_str()))
    };
    let mut found = Vec::new();
    for path in sources(&src()) {
        let Some(own) = layer_of(&path) else { continue };
        for (number, line) in code_lines(&path) {
            for (below, (name, _)) in layers.iter().enumerate().skip(own + 1) {
                let reached =
                    [format!("crate::{name}::"), format!("crate::{name};"), format!("crate::{name}}}")];
                if reached.iter().any(|form| line.contains(form.as_str())) {
                    found.push(format!(
                        "{}:{number} ({} uses {}): {}",
                        path.display(),
                        layers[own].0,
                        layers[below].0,
                        line.trim()
                    ));
                }
            }
        }
    }
    assert!(found.is_empty(), "a layer uses one below it:\n{}", found.join("\n"));
}

#[test]
fn the_pipeline_and_the_layers_above_it_print_nothing() {
    // Progress and timings reach the terminal through the observer the
    // command line hands the pipeline (src/progress.rs), not from inside it.
    let quiet = ["core", "io", "pipeline", "summary.rs"];
    let mut found = Vec::new();
    for path in sources(&src()) {
        let first = path.strip_prefix(src()).unwrap().components().next().unwrap().as_os_str().to_owned();
        if !quiet.iter().any(|q| first == *q) {
            continue;
        }
        for (number, line) in code_lines(&path) {
            if ["println!", "print!", "eprint!", "eprintln!", "dbg!"].iter().any(|m| line.contains(m)) {
                found.push(format!("{}:{number}: {}", path.display(), line.trim()));
            }
        }
    }
    assert!(found.is_empty(), "printing inside the run:\n{}", found.join("\n"));
}
