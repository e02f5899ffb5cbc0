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

/// A file's module path from the crate root (`src/view/map.rs` is `view::map`,
/// `src/view/mod.rs` is `view`, `src/lib.rs` the root).
fn module_of(path: &Path) -> Vec<String> {
    let relative = path.strip_prefix(src()).unwrap().with_extension("");
    let mut parts: Vec<String> =
        relative.components().map(|c| c.as_os_str().to_str().unwrap().to_string()).collect();
    if matches!(parts.last().map(String::as_str), Some("mod" | "lib" | "main")) {
        parts.pop();
    }
    parts
}

/// The paths a braced list names: `a::{b, c::{d, e}}` after `prefix` is
/// `a::b`, `a::c::d` and `a::c::e`.
fn expand(prefix: &[String], body: &str) -> Vec<Vec<String>> {
    let (mut items, mut depth, mut current) = (Vec::new(), 0, String::new());
    for ch in body.chars().chain([',']) {
        match ch {
            '{' => depth += 1,
            '}' => depth -= 1,
            ',' if depth == 0 => {
                items.push(std::mem::take(&mut current));
                continue;
            }
            _ => {}
        }
        current.push(ch);
    }
    let mut paths = Vec::new();
    for item in items.iter().map(|i| i.trim()).filter(|i| !i.is_empty()) {
        let item = item.split(" as ").next().unwrap().trim();
        match item.find('{') {
            Some(open) => {
                let mut inner = prefix.to_vec();
                inner.extend(item[..open].split("::").filter(|p| !p.is_empty()).map(str::to_string));
                paths.extend(expand(&inner, &item[open + 1..item.len() - 1]));
            }
            None => {
                let mut path = prefix.to_vec();
                path.extend(item.split("::").filter(|p| !p.is_empty()).map(str::to_string));
                paths.push(path);
            }
        }
    }
    paths
}

/// Where `root` (`crate`, `self` or `super`) starts, from `module`.
fn root_of(root: &str, module: &[String]) -> Vec<String> {
    match root {
        "crate" => Vec::new(),
        "self" => module.to_vec(),
        _ => module[..module.len().saturating_sub(1)].to_vec(),
    }
}

/// Every path `text` (of `module`) names from the crate, itself or its parent:
/// its `use` lists and the paths written inline.
fn named_paths(text: &str, module: &[String]) -> Vec<Vec<String>> {
    let starts_word = |at: usize| at == 0 || !text[..at].ends_with(|c: char| c.is_alphanumeric() || c == '_');
    let mut paths = Vec::new();
    let mut rest = String::new();
    let mut at = 0;
    while let Some(found) = text[at..].find("use ") {
        let start = at + found;
        let body_start = start + 4;
        let root = ["crate::", "self::", "super::"].into_iter().find(|r| text[body_start..].starts_with(r));
        match root.filter(|_| starts_word(start)) {
            Some(root) => {
                rest.push_str(&text[at..start]);
                let end = body_start + text[body_start..].find(';').unwrap();
                let mut base = root_of(root.trim_end_matches("::"), module);
                let mut body = text[body_start + root.len()..end].trim();
                while let Some(more) = body.strip_prefix("super::") {
                    base.pop();
                    body = more;
                }
                paths.extend(expand(&base, body));
                at = end + 1;
            }
            None => {
                rest.push_str(&text[at..body_start]);
                at = body_start;
            }
        }
    }
    rest.push_str(&text[at..]);
    // Inline paths: `crate::a::b` or `super::a` outside the use lists.
    for root in ["crate::", "super::"] {
        let mut from = 0;
        while let Some(found) = rest[from..].find(root) {
            let start = from + found;
            from = start + root.len();
            if start > 0 && rest[..start].ends_with(|c: char| c.is_alphanumeric() || c == '_' || c == ':') {
                continue;
            }
            let chain: String =
                rest[from..].chars().take_while(|c| c.is_alphanumeric() || *c == '_' || *c == ':').collect();
            let mut path = root_of(root.trim_end_matches("::"), module);
            for part in chain.split("::").filter(|p| !p.is_empty()) {
                if part == "super" {
                    path.pop();
                } else {
                    path.push(part.to_string());
                }
            }
            paths.push(path);
        }
    }
    paths
}

#[test]
fn no_file_imports_one_that_imports_it_back() {
    // Each file's imports, as files: a path names the file of the deepest module it
    // reaches. A module's own children and the crate root are not counted (common
    // practice: a parent declares its children, and the root re-exports).
    let files: std::collections::BTreeMap<Vec<String>, PathBuf> =
        sources(&src()).into_iter().map(|path| (module_of(&path), path)).collect();
    let mut edges: std::collections::BTreeMap<&Vec<String>, std::collections::BTreeSet<&Vec<String>>> =
        Default::default();
    for (module, path) in &files {
        let code: String = code_lines(path).into_iter().map(|(_, line)| line + "\n").collect();
        for named in named_paths(&code, module) {
            let named: Vec<String> = named.into_iter().filter(|p| p != "self").collect();
            let target = (1..=named.len()).rev().map(|k| named[..k].to_vec()).find(|p| files.contains_key(p));
            let Some(target) = target else { continue };
            let (target, _) = files.get_key_value(&target).unwrap();
            if target != module && !target.starts_with(module) {
                edges.entry(module).or_default().insert(target);
            }
        }
    }
    // A depth-first walk finds any loop, and names its files.
    fn walk<'a>(
        at: &'a Vec<String>,
        edges: &std::collections::BTreeMap<&'a Vec<String>, std::collections::BTreeSet<&'a Vec<String>>>,
        done: &mut std::collections::BTreeSet<&'a Vec<String>>,
        path: &mut Vec<&'a Vec<String>>,
    ) -> Option<Vec<String>> {
        if let Some(open) = path.iter().position(|m| *m == at) {
            return Some(path[open..].iter().map(|m| m.join("::")).chain([at.join("::")]).collect());
        }
        if !done.insert(at) {
            return None;
        }
        path.push(at);
        for next in edges.get(at).into_iter().flatten() {
            if let Some(loop_found) = walk(next, edges, done, path) {
                return Some(loop_found);
            }
        }
        path.pop();
        None
    }
    let mut done = Default::default();
    for module in files.keys() {
        if let Some(found) = walk(module, &edges, &mut done, &mut Vec::new()) {
            panic!("an import circle: {}", found.join(" -> "));
        }
    }
    assert!(edges.len() > 30, "imports were read ({} files import others)", edges.len());
}
