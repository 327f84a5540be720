//! SHA-256 file lists in the format `sha256sum -c` reads (`<SHA-256>  <path>`, one per line):
//! walking a folder into sorted relative paths, writing the lines, reading them back, and
//! checking the files they name. The results folder's lists (`integrity.rs`) and each attached
//! record's list (`attached.rs`) are made of these.

use std::fs::FileType;
use std::path::Path;

use crate::error::{Error, Result};
use crate::fingerprint::file_sha256;

/// A plain relative path, `/`-separated: no absolute path, no backslash, no empty, `.` or `..`
/// component, no dot-entry. Only such paths are ever listed.
pub(super) fn plain_relative(path: &str) -> bool {
    !path.starts_with('/') && !path.contains('\\') && path.split('/').all(|part| !part.is_empty() && !part.starts_with('.'))
}

/// Every entry under `root` that is not a folder to walk, relative and `/`-separated, sorted by
/// path: files, and dot-entries of any kind (a dot-folder is one entry, never walked; the caller
/// decides what to do with them). A symbolic link is an entry of its own, never followed.
/// Folders named in `unwalked` (relative paths) are entries of their own, never walked.
pub(super) fn entries(root: &Path, unwalked: &[&str]) -> Result<Vec<(String, FileType)>> {
    fn walk(root: &Path, dir: &Path, unwalked: &[&str], out: &mut Vec<(String, FileType)>) -> Result<()> {
        let listing = std::fs::read_dir(dir).map_err(|e| Error::io(dir, "list", e))?;
        for entry in listing {
            let entry = entry.map_err(|e| Error::io(dir, "list", e))?;
            let path = entry.path();
            let kind = entry.file_type().map_err(|e| Error::io(&path, "inspect", e))?;
            let dot = entry.file_name().to_string_lossy().starts_with('.');
            let relative = relative(root, &path);
            if kind.is_dir() && !dot && !unwalked.contains(&relative.as_str()) {
                walk(root, &path, unwalked, out)?;
            } else {
                out.push((relative, kind));
            }
        }
        Ok(())
    }
    fn relative(root: &Path, path: &Path) -> String {
        let relative = path.strip_prefix(root).unwrap_or(path);
        relative.components().map(|c| c.as_os_str().to_string_lossy().into_owned()).collect::<Vec<_>>().join("/")
    }
    let mut out = Vec::new();
    walk(root, root, unwalked, &mut out)?;
    out.sort_by(|a, b| a.0.cmp(&b.0));
    Ok(out)
}

/// The list's lines for `paths` (relative to `root`), in the order given.
pub(super) fn lines(root: &Path, paths: &[String]) -> Result<String> {
    let mut text = String::new();
    for path in paths {
        text.push_str(&file_sha256(&root.join(path))?);
        text.push_str("  ");
        text.push_str(path);
        text.push('\n');
    }
    Ok(text)
}

/// One line of a list: the recorded SHA-256, the path, and the line as written.
pub(super) struct Line {
    pub(super) sha256: String,
    pub(super) path: String,
    pub(super) text: String,
}

/// Reads a list; a missing list, or a line that is not `<SHA-256>  <path>` of a path `accept`s,
/// is an integrity error naming the list (and the line).
pub(super) fn read(list: &Path, accept: impl Fn(&str) -> bool) -> Result<Vec<Line>> {
    let text = std::fs::read_to_string(list).map_err(|e| match e.kind() {
        std::io::ErrorKind::NotFound => {
            Error::integrity(list, "is missing: the folder's files cannot be checked against their recorded SHA-256")
        }
        _ => Error::io(list, "read", e),
    })?;
    text.lines()
        .enumerate()
        .map(|(number, line)| {
            line.split_once("  ")
                .filter(|(sha, path)| sha.len() == 64 && sha.bytes().all(|b| b.is_ascii_hexdigit()) && plain_relative(path) && accept(path))
                .map(|(sha, path)| Line { sha256: sha.to_string(), path: path.to_string(), text: line.to_string() })
                .ok_or_else(|| {
                    Error::integrity(list, format!("line {} is not `<SHA-256>  <path>` of a file this list may name", number + 1))
                })
        })
        .collect()
}

/// Checks each listed file under `root` (those `skip` passes over aside): a symbolic link, a
/// missing file or one whose SHA-256 differs is named in the error, with `list` as the record.
pub(super) fn check_files(root: &Path, list_name: &str, recorded: &[Line], skip: impl Fn(&str) -> bool) -> Result<()> {
    for line in recorded.iter().filter(|l| !skip(&l.path)) {
        let file = root.join(&line.path);
        let kind = std::fs::symlink_metadata(&file).map(|m| m.file_type());
        if kind.as_ref().is_ok_and(|k| k.is_symlink()) {
            return Err(Error::integrity(&file, "is a symbolic link: a results folder holds its recorded files themselves"));
        }
        if !kind.is_ok_and(|k| k.is_file()) {
            return Err(Error::integrity(&file, format!("is listed in {list_name} but missing")));
        }
        if file_sha256(&file)? != line.sha256 {
            return Err(Error::integrity(
                &file,
                format!("was changed after it was recorded: its SHA-256 differs from {list_name} ({})", line.sha256),
            ));
        }
    }
    Ok(())
}

/// The error for an entry no list names.
pub(super) fn unlisted(root: &Path, path: &str, kind: FileType, list_name: &str) -> Error {
    let what = if kind.is_symlink() {
        "is a symbolic link not listed"
    } else if kind.is_dir() {
        "is a folder not listed"
    } else {
        "is not listed"
    };
    Error::integrity(root.join(path), format!("{what} in {list_name}: it was added after the results were recorded"))
}
