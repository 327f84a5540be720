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

use super::write_atomic;
use crate::error::{Error, Result};
use crate::fingerprint::{file_sha256, sha256_hex};

/// The list's file name in a results folder.
pub const FILE: &str = "integrity.sha256";

/// Whether a file (path relative to the folder, `/`-separated) belongs in the list.
fn listed(path: &str) -> bool {
    path != FILE && path != "timing.json" && !path.ends_with("/timing.json") && !path.split('/').any(|part| part.starts_with('.'))
}

/// Whether a listed file is rendered from the evidence (and so may name the digest).
fn derived(path: &str) -> bool {
    path == "card.md" || path.starts_with("figures/")
}

/// Every listed file under `root`, relative and sorted by path.
fn files(root: &Path) -> Result<Vec<String>> {
    fn walk(root: &Path, dir: &Path, out: &mut Vec<String>) -> Result<()> {
        let entries = std::fs::read_dir(dir).map_err(|e| Error::io(dir, "list", e))?;
        for entry in entries {
            let entry = entry.map_err(|e| Error::io(dir, "list", e))?;
            let path = entry.path();
            let name = entry.file_name().to_string_lossy().into_owned();
            if name.starts_with('.') {
                continue;
            }
            let kind = entry.file_type().map_err(|e| Error::io(&path, "inspect", e))?;
            if kind.is_dir() {
                walk(root, &path, out)?;
            } else {
                let relative = path.strip_prefix(root).unwrap_or(&path);
                let text: Vec<String> = relative.components().map(|c| c.as_os_str().to_string_lossy().into_owned()).collect();
                out.push(text.join("/"));
            }
        }
        Ok(())
    }
    let mut out = Vec::new();
    walk(root, root, &mut out)?;
    out.retain(|p| listed(p));
    out.sort();
    Ok(out)
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
        let file = root.join(path);
        if !file.is_file() {
            return Err(Error::integrity(&file, "is listed in integrity.sha256 but missing"));
        }
        if file_sha256(&file)? != *sha {
            return Err(Error::integrity(
                &file,
                format!("was changed after it was recorded: its SHA-256 differs from integrity.sha256 ({sha})"),
            ));
        }
    }
    let listed: std::collections::BTreeSet<&str> = recorded.iter().map(|(path, _)| path.as_str()).collect();
    if let Some(extra) = files(root)?.into_iter().find(|p| !listed.contains(p.as_str())) {
        return Err(Error::integrity(root.join(extra), "is not listed in integrity.sha256: it was added after the results were recorded"));
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
