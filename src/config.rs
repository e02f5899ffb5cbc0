//! Job files: every option of a run in a TOML file (`--config job.toml`),
//! keys named as the long options (`successes = "k"`, `flag-fdr = 0.1`,
//! `by = ["kind"]`, `ranks = true`), command-line flags overriding the file;
//! and `check-config`, which names the key and line of each mistake.
//!
//! The file is turned into the arguments it stands for, inserted right after
//! the subcommand, so that one parser (clap's, with later occurrences
//! overriding earlier ones) reads both and their meaning cannot drift apart.

use crate::error::{Error, Result};
use clap::error::ErrorKind;
use std::ffi::OsString;
use std::path::Path;

/// The subcommands a job file may describe.
const RUNS: [&str; 2] = ["fit", "score"];

/// The first line of a clap error, without its `error: ` prefix: the
/// mistake in one line, for JSON logs and job-file reports.
pub fn clap_message(error: &clap::Error) -> String {
    let text = error.to_string();
    text.lines().next().unwrap_or_default().trim_start_matches("error: ").to_string()
}

/// One mistake in a job file.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Mistake {
    /// 1-based line of the key (0 when the mistake is not one key's).
    pub line: usize,
    /// The key.
    pub key: String,
    /// What is wrong.
    pub message: String,
}

impl std::fmt::Display for Mistake {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        if self.line == 0 {
            write!(f, "{}", self.message)
        } else {
            write!(f, "line {}, key '{}': {}", self.line, self.key, self.message)
        }
    }
}

/// The 1-based line where `key` is set in `text` (0 if not found).
fn line_of(text: &str, key: &str) -> usize {
    text.lines()
        .position(|line| {
            let line = line.trim_start();
            let rest = line.strip_prefix(key).or_else(|| {
                line.strip_prefix('"').and_then(|l| l.strip_prefix(key)).and_then(|l| l.strip_prefix('"'))
            });
            rest.is_some_and(|r| r.trim_start().starts_with('='))
        })
        .map_or(0, |i| i + 1)
}

/// A scalar TOML value as an argument's text.
fn scalar(value: &toml::Value) -> Option<String> {
    match value {
        toml::Value::String(s) => Some(s.clone()),
        toml::Value::Integer(i) => Some(i.to_string()),
        toml::Value::Float(x) => Some(x.to_string()),
        _ => None,
    }
}

/// The option a mistyped key most likely means: the same with dashes for
/// underscores, or the nearest by edit distance (at most two edits).
fn closest<'a>(key: &str, options: impl Iterator<Item = &'a str>) -> Option<&'a str> {
    let dashed = key.replace('_', "-");
    let mut best: Option<(usize, &str)> = None;
    for option in options {
        let distance = if option == dashed { 0 } else { edit_distance(&dashed, option) };
        if distance <= 2 && best.is_none_or(|(d, _)| distance < d) {
            best = Some((distance, option));
        }
    }
    best.map(|(_, option)| option)
}

/// Levenshtein distance between two short texts.
fn edit_distance(a: &str, b: &str) -> usize {
    let b: Vec<char> = b.chars().collect();
    let mut row: Vec<usize> = (0..=b.len()).collect();
    for (i, ca) in a.chars().enumerate() {
        let mut diagonal = row[0];
        row[0] = i + 1;
        for (j, cb) in b.iter().enumerate() {
            let above = row[j + 1];
            row[j + 1] = (diagonal + usize::from(ca != *cb)).min(row[j] + 1).min(above + 1);
            diagonal = above;
        }
    }
    row[b.len()]
}

/// A value the option's parser refused, in plain words: what kind of value
/// the key takes and what the file gave (`must be a number, such as 0.95,
/// not the text "high"`), or the parser's own reason where it is already
/// written for people (the accepted values of a choice).
fn plain_value_mistake(message: &str, value: &toml::Value) -> String {
    let given = match value {
        toml::Value::String(text) => format!("the text \"{text}\""),
        other => other.to_string(),
    };
    let reason = message.rsplit_once("': ").map_or(message, |(_, reason)| reason);
    if reason.contains("invalid float literal") {
        format!("must be a number, such as 0.95 or 1 (without quotes), not {given}")
    } else if reason.contains("invalid digit") || reason.contains("number too large") {
        format!("must be a whole number, such as 20 (without quotes), not {given}")
    } else {
        format!("{reason} (the file gives {given})")
    }
}

/// A job file read: the subcommand it names (if any) and its keys in file order.
pub struct JobFile {
    text: String,
    table: toml::Table,
}

impl JobFile {
    /// Reads and parses `path`; a syntax error names its line.
    pub fn read(path: &Path) -> Result<Self> {
        let text = std::fs::read_to_string(path)
            .map_err(|e| Error::Input(format!("{}: cannot read the job file: {e}", path.display())))?;
        let table: toml::Table = text.parse().map_err(|e: toml::de::Error| {
            let line = e.span().map_or(0, |s| text[..s.start].lines().count().max(1));
            let message = e.message().to_string();
            Error::Usage(format!("{}: line {line}: {message}", path.display()))
        })?;
        Ok(JobFile { text, table })
    }

    /// How many keys the file sets.
    pub fn keys(&self) -> usize {
        self.table.len()
    }

    /// The subcommand named by the `command` key.
    pub fn command(&self) -> Option<&str> {
        self.table.get("command").and_then(toml::Value::as_str)
    }

    /// The arguments the file stands for under `command` of the command
    /// line `root` (the parser's definition, passed in so that job files
    /// need nothing of the command line's module), or every mistake.
    pub fn arguments(
        &self,
        root: &clap::Command,
        command: &str,
    ) -> std::result::Result<Vec<String>, Vec<Mistake>> {
        let sub = root.find_subcommand(command).cloned().unwrap_or_default();
        let mut arguments = Vec::new();
        let mut mistakes = Vec::new();
        for (key, value) in &self.table {
            let mistake =
                |message: String| Mistake { line: line_of(&self.text, key), key: key.clone(), message };
            if key == "command" {
                match value.as_str() {
                    Some(c) if c == command => {}
                    Some(c) if RUNS.contains(&c) => {
                        mistakes.push(mistake(format!("the file is for `{c}`, not `{command}`")));
                    }
                    _ => mistakes.push(mistake(format!("must be one of {}", RUNS.join(", ")))),
                }
                continue;
            }
            let arg = sub
                .get_arguments()
                .chain(root.get_arguments())
                .find(|a| a.get_long() == Some(key.as_str()) && key != "config");
            let Some(arg) = arg else {
                let options = sub.get_arguments().chain(root.get_arguments()).filter_map(|a| a.get_long());
                let hint = closest(key, options).map_or(String::new(), |k| format!("; did you mean `{k}`?"));
                mistakes.push(mistake(format!("not an option of `{command}`{hint}")));
                continue;
            };
            let option = format!("--{key}");
            let these: Vec<String> = match (value, arg.get_action()) {
                (toml::Value::Boolean(true), clap::ArgAction::SetTrue) => vec![option],
                (toml::Value::Boolean(false), clap::ArgAction::SetTrue) => vec![],
                (value, clap::ArgAction::SetTrue) => {
                    mistakes.push(mistake(format!("must be true or false (without quotes), not {value}")));
                    continue;
                }
                (toml::Value::Array(items), _) if arg.get_value_delimiter().is_some() => {
                    match items.iter().map(scalar).collect::<Option<Vec<String>>>() {
                        Some(items) => vec![option, items.join(",")],
                        None => {
                            mistakes.push(mistake("must be a list of names".to_string()));
                            continue;
                        }
                    }
                }
                (value, _) => match scalar(value) {
                    Some(text) => vec![option, text],
                    None => {
                        mistakes.push(mistake(
                            "must be a text, a number or (for a flag) true or false".to_string(),
                        ));
                        continue;
                    }
                },
            };
            // The value alone through the option's own parser: a wrong value is this key's mistake.
            if these.len() == 2 {
                let trial = sub.clone().try_get_matches_from(["ratepool", &these[0], &these[1]]);
                if let Err(e) = trial {
                    if matches!(e.kind(), ErrorKind::InvalidValue | ErrorKind::ValueValidation) {
                        mistakes.push(mistake(plain_value_mistake(&clap_message(&e), value)));
                        continue;
                    }
                }
            }
            arguments.extend(these);
        }
        if mistakes.is_empty() {
            Ok(arguments)
        } else {
            Err(mistakes)
        }
    }

    /// The line of the key an error message names by its option (`--key`), if any.
    pub fn mistake_of(&self, message: &str) -> Mistake {
        let named = self.table.keys().find(|k| message.contains(&format!("--{k}")));
        match named {
            Some(key) => {
                Mistake { line: line_of(&self.text, key), key: key.clone(), message: message.to_string() }
            }
            None => Mistake { line: 0, key: String::new(), message: message.to_string() },
        }
    }
}

/// The command line with the job file of `--config FILE` (or `--config=FILE`)
/// expanded into arguments right after the subcommand, so that the flags
/// given on the command line, which come later, override the file's.
pub fn expand(args: Vec<OsString>, root: &clap::Command) -> Result<Vec<OsString>> {
    let Some(at) = args.iter().position(|a| a.to_str().is_some_and(|a| RUNS.contains(&a))) else {
        return Ok(args);
    };
    let mut path = None;
    for (i, arg) in args.iter().enumerate().skip(at + 1) {
        match arg.to_str() {
            Some("--config") => path = args.get(i + 1).cloned(),
            Some(a) if a.starts_with("--config=") => path = Some(OsString::from(&a["--config=".len()..])),
            _ => {}
        }
    }
    let Some(path) = path else { return Ok(args) };
    let path = Path::new(&path);
    let file = JobFile::read(path)?;
    let command = args[at].to_str().unwrap_or_default();
    let inserted = file.arguments(root, command).map_err(|mistakes| mistakes_error(path, &mistakes))?;
    let mut expanded = args[..=at].to_vec();
    expanded.extend(inserted.into_iter().map(OsString::from));
    expanded.extend(args[at + 1..].iter().cloned());
    Ok(expanded)
}

/// Every mistake of a job file as one usage error, each line naming the file.
pub fn mistakes_error(path: &Path, mistakes: &[Mistake]) -> Error {
    let lines: Vec<String> = mistakes.iter().map(|m| format!("{}: {m}", path.display())).collect();
    Error::Usage(lines.join("\n"))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn file(text: &str) -> JobFile {
        JobFile { text: text.to_string(), table: text.parse().expect("valid TOML") }
    }

    /// A command line of the shape job files serve: a `fit` with options of
    /// each kind (a flag, a list, a number, a choice, a text).
    fn root() -> clap::Command {
        use clap::{Arg, ArgAction, Command};
        let fit = Command::new("fit")
            .arg(Arg::new("input").long("input"))
            .arg(Arg::new("model").long("model").value_parser(["beta-binomial", "gamma-poisson"]))
            .arg(Arg::new("ranks").long("ranks").action(ArgAction::SetTrue))
            .arg(Arg::new("quiet").long("quiet").action(ArgAction::SetTrue))
            .arg(Arg::new("by").long("by").value_delimiter(','))
            .arg(Arg::new("level").long("level").value_parser(clap::value_parser!(f64)))
            .arg(Arg::new("config").long("config"));
        Command::new("ratepool").subcommand(fit).subcommand(Command::new("score"))
    }

    #[test]
    fn keys_become_arguments_in_the_parsers_own_forms() {
        let job = file(
            "model = \"beta-binomial\"\nranks = true\nquiet = false\nby = [\"a\", \"b\"]\nlevel = 0.9\n",
        );
        let args = job.arguments(&root(), "fit").expect("valid");
        assert_eq!(args, ["--by", "a,b", "--level", "0.9", "--model", "beta-binomial", "--ranks"]);
    }

    #[test]
    fn each_mistake_names_its_key_and_line() {
        let job = file("input = \"x.csv\"\nlevle = 0.9\nranks = \"yes\"\nmodel = \"beta-poisson\"\ncommand = \"score\"\nlevel = \"high\"\n");
        let mistakes = job.arguments(&root(), "fit").expect_err("five mistakes");
        let found: Vec<(usize, &str)> = mistakes.iter().map(|m| (m.line, m.key.as_str())).collect();
        assert_eq!(found, [(5, "command"), (6, "level"), (2, "levle"), (4, "model"), (3, "ranks")]);
        assert!(mistakes[1].message.contains("must be a number"), "{}", mistakes[1].message);
        assert!(mistakes[2].message.contains("did you mean `level`?"), "{}", mistakes[2].message);
        assert!(mistakes[3].message.contains("beta-poisson"), "{}", mistakes[3].message);
    }

    #[test]
    fn the_file_goes_after_the_subcommand_so_the_command_line_wins() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("job.toml");
        std::fs::write(&path, "level = 0.9\n").unwrap();
        let args: Vec<OsString> =
            ["ratepool", "--quiet", "fit", "--config", path.to_str().unwrap(), "--level", "0.8"]
                .iter()
                .map(OsString::from)
                .collect();
        let expanded = expand(args, &root()).unwrap();
        let text: Vec<&str> = expanded.iter().map(|a| a.to_str().unwrap()).collect();
        assert_eq!(&text[..5], ["ratepool", "--quiet", "fit", "--level", "0.9"]);
        assert_eq!(&text[text.len() - 2..], ["--level", "0.8"]);
    }
}
