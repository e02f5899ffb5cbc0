//! Refusing runs whose files overlap: no output may be an input, lie inside
//! an input folder, or be another output. Checked before anything is read,
//! so a refused run changes no file.
//!
//! Two paths name the same file when their resolved forms agree (symbolic
//! links followed, `.` and `..` removed; for a path that does not exist yet,
//! its folder resolved and its name appended) or, where both exist, when
//! they share a device and inode (a hard link).

use crate::error::{Error, Result};
use std::path::{Component, Path, PathBuf};

/// A file or folder of the run, with the option that named it.
#[derive(Debug, Clone, Copy)]
pub struct RunPath<'a> {
    /// The command-line option, as the user typed it (`--output`).
    pub option: &'a str,
    /// The path given.
    pub path: &'a Path,
}

/// What a path is on disk, as far as can be told without reading it.
struct Identity {
    resolved: PathBuf,
    inode: Option<(u64, u64)>,
    is_folder: bool,
}

/// Removes `.` and `..` lexically (used only where the folder does not exist,
/// so no symbolic link can be in the way).
fn normalise(path: &Path) -> PathBuf {
    let mut out = PathBuf::new();
    for part in path.components() {
        match part {
            Component::CurDir => {}
            Component::ParentDir => {
                out.pop();
            }
            other => out.push(other),
        }
    }
    out
}

fn absolute(path: &Path) -> PathBuf {
    std::env::current_dir().map(|cwd| cwd.join(path)).unwrap_or_else(|_| path.to_path_buf())
}

#[cfg(unix)]
fn inode_of(metadata: &std::fs::Metadata) -> Option<(u64, u64)> {
    use std::os::unix::fs::MetadataExt;
    Some((metadata.dev(), metadata.ino()))
}

#[cfg(not(unix))]
fn inode_of(_: &std::fs::Metadata) -> Option<(u64, u64)> {
    None
}

fn identity(path: &Path) -> Identity {
    if let (Ok(resolved), Ok(metadata)) = (path.canonicalize(), std::fs::metadata(path)) {
        return Identity { resolved, inode: inode_of(&metadata), is_folder: metadata.is_dir() };
    }
    let absolute = absolute(path);
    let resolved = match (absolute.parent().map(Path::canonicalize), absolute.file_name()) {
        (Some(Ok(folder)), Some(name)) => folder.join(name),
        _ => normalise(&absolute),
    };
    Identity { resolved, inode: None, is_folder: false }
}

fn same_file(a: &Identity, b: &Identity) -> bool {
    a.resolved == b.resolved || (a.inode.is_some() && a.inode == b.inode)
}

fn clash(first: &RunPath<'_>, second: &RunPath<'_>, how: &str) -> Error {
    Error::Usage(format!(
        "{} and {} {how} ({} and {}): nothing was read or written; choose another {} path",
        first.option,
        second.option,
        first.path.display(),
        second.path.display(),
        second.option
    ))
}

/// Refuses, before anything is read, an output file whose folder does not
/// exist (a folder of plots is made as it is written).
fn refuse_missing_folders(outputs: &[RunPath<'_>]) -> Result<()> {
    for output in outputs.iter().filter(|o| o.option != "--plots") {
        let folder = match output.path.parent() {
            Some(p) if !p.as_os_str().is_empty() => p,
            _ => continue,
        };
        if !folder.is_dir() {
            // Exit 1, as any output that cannot be written.
            return Err(Error::Other(format!(
                "{} {}: the folder {} does not exist; create it first",
                output.option,
                output.path.display(),
                folder.display()
            )));
        }
    }
    Ok(())
}

/// Refuses the run when two of the paths name one file, or an output lies
/// inside an input folder. Inputs may share a file with each other (reading
/// twice harms nothing); an output may share with nothing.
pub fn refuse_overlaps(inputs: &[RunPath<'_>], outputs: &[RunPath<'_>]) -> Result<()> {
    refuse_missing_folders(outputs)?;
    let input_ids: Vec<Identity> = inputs.iter().map(|p| identity(p.path)).collect();
    let output_ids: Vec<Identity> = outputs.iter().map(|p| identity(p.path)).collect();
    for (output, output_id) in outputs.iter().zip(&output_ids) {
        for (input, input_id) in inputs.iter().zip(&input_ids) {
            if same_file(input_id, output_id) {
                return Err(clash(input, output, "name the same file"));
            }
            if input_id.is_folder && output_id.resolved.starts_with(&input_id.resolved) {
                return Err(clash(
                    input,
                    output,
                    "overlap: the output would lie inside the input folder and be read as a part next time",
                ));
            }
        }
    }
    for (i, (first, first_id)) in outputs.iter().zip(&output_ids).enumerate() {
        for (second, second_id) in outputs.iter().zip(&output_ids).skip(i + 1) {
            if same_file(first_id, second_id) {
                return Err(clash(first, second, "name the same file"));
            }
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn run_path<'a>(option: &'a str, path: &'a Path) -> RunPath<'a> {
        RunPath { option, path }
    }

    #[test]
    fn a_missing_folder_is_normalised_lexically() {
        assert_eq!(normalise(Path::new("/a/./b/../c")), PathBuf::from("/a/c"));
    }

    #[test]
    fn distinct_outputs_pass_and_an_equal_pair_is_refused() {
        let dir = tempfile::tempdir().unwrap();
        let input = dir.path().join("in.csv");
        std::fs::write(&input, "id\n").unwrap();
        let (a, b) = (dir.path().join("a.csv"), dir.path().join("sub/../a.csv"));
        std::fs::create_dir(dir.path().join("sub")).unwrap();
        let inputs = [run_path("--input", &input)];
        let fine = refuse_overlaps(&inputs, &[run_path("--output", &a)]);
        assert!(fine.is_ok());
        let error = refuse_overlaps(&inputs, &[run_path("--output", &a), run_path("--summary", &b)])
            .expect_err("refused")
            .to_string();
        assert!(error.contains("--output and --summary"), "{error}");
    }
}
