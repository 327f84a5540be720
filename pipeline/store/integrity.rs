//! The integrity list of a results folder (`integrity.sha256`) and its results digest.
//!
//! The list names every file of the folder except timing records (`timing.json`, a run's
//! `timing.json`) and temporary entries, one `<SHA-256>  <path>` line each in the format
//! `sha256sum -c` reads: first the evidence (manifest copies, experiment record, data summary,
//! plan, preprocessor, selection, every run's files), sorted by path, then the files rendered
//! from it (`card.md`, `figures/`), sorted. The **results digest** is the SHA-256 of the evidence
//! lines, bytes as written, so the card can name it without naming itself:
//!
//! ```text
//! sha256sum -c integrity.sha256                                      # every listed file
//! grep -v -e '  card\.md$' -e '  figures/' integrity.sha256 | sha256sum   # the results digest
//! ```
//!
//! A file that differs from its line, a listed file that is gone and a file that is not listed
//! are all reported by name.

use std::path::Path;

use super::files::write_atomic;
use crate::error::{Error, Result};
use crate::fingerprint::{file_sha256, sha256_hex};

/// The list's file name in a results folder.
pub const FILE: &str = "integrity.sha256";

/// Whether a path is a timing record (the experiment's or a run's): never listed, since two
/// identical sweeps write different ones.
fn is_timing(path: &str) -> bool {
    path == "timing.json" || path.ends_with("/timing.json")
}

/// Whether a file (path relative to the folder, `/`-separated) belongs in the list. Only plain
/// relative paths qualify: no absolute path, no empty, `.` or `..` component, no dot-entry.
fn listed(path: &str) -> bool {
    path != FILE
        && !is_timing(path)
        && !path.starts_with('/')
        && !path.contains('\\')
        && path.split('/').all(|part| !part.is_empty() && !part.starts_with('.'))
}

/// Entries that may sit in a results folder without being listed: the list itself, timing
/// records (regular files), the writer lock while `train` holds it, and a run being written
/// (`runs/.partial-*`, removed on the next `train`).
fn tolerated_unlisted(path: &str, kind: std::fs::FileType) -> bool {
    path == FILE
        || is_timing(path) && kind.is_file()
        || path == super::lock::FILE
        || (path.starts_with("runs/.") && !path["runs/".len()..].contains('/'))
}

/// A temporary file of an interrupted atomic write (`.<name>.tmp-<pid>-<n>`), safe to delete.
pub fn is_temporary(name: &str) -> bool {
    name.starts_with('.') && name.contains(".tmp-")
}

/// Deletes the temporary files interrupted atomic writes left in the folder and its `figures/`
/// (a `card` or `train` killed mid-write): a writer calls this before its own checks.
pub fn remove_temporaries(root: &Path) {
    for dir in [root.to_path_buf(), root.join("figures")] {
        let Ok(entries) = std::fs::read_dir(&dir) else { continue };
        for entry in entries.flatten() {
            if is_temporary(&entry.file_name().to_string_lossy()) && entry.file_type().is_ok_and(|t| t.is_file()) {
                let _ = std::fs::remove_file(entry.path());
            }
        }
    }
}

/// Whether a listed file is rendered from the evidence (and so may name the digest).
fn derived(path: &str) -> bool {
    path == "card.md" || path.starts_with("figures/")
}

/// Every entry under `root` that is not a folder to walk, relative and `/`-separated, sorted by
/// path: files, and dot-entries of any kind (a dot-folder is one entry, never walked; the caller
/// decides what to do with them). A symbolic link is an entry of its own, never followed.
fn entries(root: &Path) -> Result<Vec<(String, std::fs::FileType)>> {
    fn walk(root: &Path, dir: &Path, out: &mut Vec<(String, std::fs::FileType)>) -> Result<()> {
        let listing = std::fs::read_dir(dir).map_err(|e| Error::io(dir, "list", e))?;
        for entry in listing {
            let entry = entry.map_err(|e| Error::io(dir, "list", e))?;
            let path = entry.path();
            let kind = entry.file_type().map_err(|e| Error::io(&path, "inspect", e))?;
            let dot = entry.file_name().to_string_lossy().starts_with('.');
            if kind.is_dir() && !dot {
                walk(root, &path, out)?;
            } else {
                out.push((relative(root, &path), kind));
            }
        }
        Ok(())
    }
    fn relative(root: &Path, path: &Path) -> String {
        let relative = path.strip_prefix(root).unwrap_or(path);
        relative.components().map(|c| c.as_os_str().to_string_lossy().into_owned()).collect::<Vec<_>>().join("/")
    }
    let mut out = Vec::new();
    walk(root, root, &mut out)?;
    out.sort_by(|a, b| a.0.cmp(&b.0));
    Ok(out)
}

/// Every file the list names under `root`, relative and sorted by path.
fn files(root: &Path) -> Result<Vec<String>> {
    Ok(entries(root)?.into_iter().map(|(p, _)| p).filter(|p| listed(p)).collect())
}

fn lines(root: &Path, paths: &[String]) -> Result<String> {
    let mut text = String::new();
    for path in paths {
        text.push_str(&file_sha256(&root.join(path))?);
        text.push_str("  ");
        text.push_str(path);
        text.push('\n');
    }
    Ok(text)
}

/// Hashes the evidence, hands its digest to `render` (which writes the card and figures), then
/// writes the list of evidence and rendered files atomically. Returns the results digest.
pub fn seal(root: &Path, render: impl FnOnce(&str) -> Result<()>) -> Result<String> {
    let evidence: Vec<String> = files(root)?.into_iter().filter(|p| !derived(p)).collect();
    let evidence_lines = lines(root, &evidence)?;
    let digest = sha256_hex(evidence_lines.as_bytes());
    render(&digest)?;
    let rendered: Vec<String> = files(root)?.into_iter().filter(|p| derived(p)).collect();
    write_atomic(&root.join(FILE), (evidence_lines + &lines(root, &rendered)?).as_bytes())?;
    Ok(digest)
}

/// Checks every file of the folder against the list and returns the results digest; the first
/// file that differs, is gone or is not listed is named in the error.
pub fn check(root: &Path) -> Result<String> {
    check_parts(root, false)
}

/// [`check`] of the evidence alone: rendered files (card, figures, and temporaries of their
/// interrupted writes) may differ, be missing or be unlisted. For `card`, which renders them anew
/// and reseals, so a `card` killed between writing the card and sealing its list can be repaired.
pub fn check_evidence(root: &Path) -> Result<String> {
    check_parts(root, true)
}

fn check_parts(root: &Path, rendered_may_differ: bool) -> Result<String> {
    let list_path = root.join(FILE);
    let text = std::fs::read_to_string(&list_path).map_err(|e| match e.kind() {
        std::io::ErrorKind::NotFound => {
            Error::integrity(&list_path, "is missing: the folder's files cannot be checked against their recorded SHA-256")
        }
        _ => Error::io(&list_path, "read", e),
    })?;
    let mut recorded = Vec::new();
    let mut evidence_lines = String::new();
    for (number, line) in text.lines().enumerate() {
        let (sha, path) = line
            .split_once("  ")
            .filter(|(sha, path)| sha.len() == 64 && sha.bytes().all(|b| b.is_ascii_hexdigit()) && listed(path))
            .ok_or_else(|| Error::integrity(&list_path, format!("line {} is not `<SHA-256>  <path>` of a listed file", number + 1)))?;
        if !derived(path) {
            evidence_lines.push_str(line);
            evidence_lines.push('\n');
        }
        recorded.push((path.to_string(), sha.to_string()));
    }
    for (path, sha) in &recorded {
        if rendered_may_differ && derived(path) {
            continue;
        }
        let file = root.join(path);
        let kind = std::fs::symlink_metadata(&file).map(|m| m.file_type());
        if kind.as_ref().is_ok_and(|k| k.is_symlink()) {
            return Err(Error::integrity(&file, "is a symbolic link: a results folder holds its recorded files themselves"));
        }
        if !kind.is_ok_and(|k| k.is_file()) {
            return Err(Error::integrity(&file, "is listed in integrity.sha256 but missing"));
        }
        if file_sha256(&file)? != *sha {
            return Err(Error::integrity(
                &file,
                format!("was changed after it was recorded: its SHA-256 differs from integrity.sha256 ({sha})"),
            ));
        }
    }
    let named: std::collections::BTreeSet<&str> = recorded.iter().map(|(path, _)| path.as_str()).collect();
    for (path, kind) in entries(root)? {
        if named.contains(path.as_str()) || tolerated_unlisted(&path, kind) {
            continue;
        }
        let name = path.rsplit('/').next().unwrap_or(&path);
        if rendered_may_differ && (derived(&path) || is_temporary(name)) {
            continue;
        }
        let what = if kind.is_symlink() {
            "is a symbolic link not listed"
        } else if kind.is_dir() {
            "is a folder not listed"
        } else {
            "is not listed"
        };
        return Err(Error::integrity(root.join(path), format!("{what} in integrity.sha256: it was added after the results were recorded")));
    }
    Ok(sha256_hex(evidence_lines.as_bytes()))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn lists_all_but_timing_and_temporaries_with_rendered_files_last() {
        let dir = tempfile::tempdir().unwrap();
        let root = dir.path();
        for (path, text) in [
            ("selection.json", "s"),
            ("timing.json", "t"),
            ("runs/a/weights.safetensors", "w"),
            ("runs/a/timing.json", "t"),
            ("runs/.partial/x", "p"),
        ] {
            std::fs::create_dir_all(root.join(path).parent().unwrap()).unwrap();
            std::fs::write(root.join(path), text).unwrap();
        }
        let digest = seal(root, |_| {
            std::fs::create_dir_all(root.join("figures")).unwrap();
            std::fs::write(root.join("figures/a.svg"), "f").unwrap();
            std::fs::write(root.join("card.md"), "c").unwrap();
            Ok(())
        })
        .unwrap();
        let text = std::fs::read_to_string(root.join(FILE)).unwrap();
        let paths: Vec<&str> = text.lines().map(|l| l.split_once("  ").unwrap().1).collect();
        assert_eq!(paths, ["runs/a/weights.safetensors", "selection.json", "card.md", "figures/a.svg"]);
        let evidence: String = text.lines().take(2).map(|l| format!("{l}\n")).collect();
        assert_eq!(digest, sha256_hex(evidence.as_bytes()));
        assert_eq!(check(root).unwrap(), digest);
        // Timing may change; evidence may not.
        std::fs::write(root.join("runs/a/timing.json"), "later").unwrap();
        assert_eq!(check(root).unwrap(), digest);
        std::fs::write(root.join("selection.json"), "S").unwrap();
        assert!(check(root).unwrap_err().to_string().contains("selection.json: was changed after it was recorded"));
    }
}
