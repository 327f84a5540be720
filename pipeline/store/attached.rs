//! Attached records: what is added to a results folder after training without touching its
//! evidence: reviews (`reviews/`), monitoring reports (`monitoring/`), the heads of decision
//! logs (`decisions/`) and the comparison with a replaced model recorded at training
//! (`comparisons/`). Each record is
//! one sub-folder `<kind>/<name>/` sealed by its own list, `contents.sha256`, in the format
//! `sha256sum -c` reads; the record's digest is the SHA-256 of that list. A record is written
//! whole into a hidden folder and renamed into place, so a reader sees it complete or not at all.
//! Anything else under a kind's folder (a loose file, a record without its list, a file its list
//! does not name) is named by the folder's check.

use std::path::Path;

use super::files::write_atomic;
use super::hash_list::{self, plain_relative};
use crate::error::{Error, Result};
use crate::fingerprint::{file_sha256, sha256_hex};

/// The folders of attached records at the top of a results folder.
pub const KINDS: &[&str] = &["reviews", "monitoring", "decisions", "comparisons"];

/// The list that seals one record, inside its folder.
pub const CONTENTS: &str = "contents.sha256";

/// Hidden folders of records being written (`<kind>/.partial-<name>`), tolerated by the check and
/// replaced by the next write of the same record.
const PARTIAL: &str = ".partial-";

/// One sealed record.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct AttachedRecord {
    pub kind: String,
    pub name: String,
    /// SHA-256 of the record's `contents.sha256`.
    pub digest: String,
}

fn name_ok(name: &str) -> bool {
    !name.is_empty() && !name.starts_with('.') && name.bytes().all(|b| b.is_ascii_alphanumeric() || matches!(b, b'-' | b'_' | b'.'))
}

/// Writes a new record `<kind>/<name>/` holding `files` (relative paths and bytes) and its list,
/// and returns it. An existing record of that name is never replaced.
pub fn attach(root: &Path, kind: &str, name: &str, files: &[(&str, &[u8])]) -> Result<AttachedRecord> {
    if !KINDS.contains(&kind) {
        return Err(Error::Internal(format!("`{kind}` is not a kind of attached record")));
    }
    if !name_ok(name) {
        return Err(Error::Usage(format!("`{name}` cannot name a record: use letters, digits, `-`, `_` and `.`")));
    }
    let kind_dir = root.join(kind);
    let target = kind_dir.join(name);
    if target.exists() {
        return Err(Error::store(&target, "already exists: an attached record is written once"));
    }
    let partial = kind_dir.join(format!("{PARTIAL}{name}"));
    let _ = std::fs::remove_dir_all(&partial);
    std::fs::create_dir_all(&partial).map_err(|e| Error::io(&partial, "create", e))?;
    let mut paths = Vec::new();
    for (path, bytes) in files {
        if !plain_relative(path) || *path == CONTENTS {
            return Err(Error::Internal(format!("`{path}` cannot be a file of an attached record")));
        }
        let file = partial.join(path);
        if let Some(parent) = file.parent() {
            std::fs::create_dir_all(parent).map_err(|e| Error::io(parent, "create", e))?;
        }
        write_atomic(&file, bytes)?;
        paths.push(path.to_string());
    }
    paths.sort();
    let list = hash_list::lines(&partial, &paths)?;
    write_atomic(&partial.join(CONTENTS), list.as_bytes())?;
    std::fs::rename(&partial, &target).map_err(|e| Error::io(&target, "create", e))?;
    Ok(AttachedRecord { kind: kind.into(), name: name.into(), digest: sha256_hex(list.as_bytes()) })
}

/// Kinds whose records are judged one by one by their own checks rather than by the folder's:
/// a review that does not hold is a finding about the review (`review::judge` names it, and
/// `verify` exits 10), never a reason to refuse the model.
pub const JUDGED_ONE_BY_ONE: &[&str] = &["reviews"];

/// Checks every attached record of the kinds the folder's own check covers (all but
/// [`JUDGED_ONE_BY_ONE`]) against its own list and returns them, sorted by kind and name; the
/// first file that differs, is gone or is not listed is named.
pub fn check_for_folder(root: &Path) -> Result<Vec<AttachedRecord>> {
    let kinds: Vec<&str> = KINDS.iter().copied().filter(|k| !JUDGED_ONE_BY_ONE.contains(k)).collect();
    check_kinds(root, &kinds)
}

fn check_kinds(root: &Path, kinds: &[&str]) -> Result<Vec<AttachedRecord>> {
    let mut records = Vec::new();
    for kind in kinds {
        for (_, record) in check_each(root, kind)? {
            records.push(record?);
        }
    }
    Ok(records)
}

/// Every entry under `<kind>/`, by name, each with its own verdict: the record, or what is wrong
/// with it (a loose file, a changed, missing or unlisted file). Only a `<kind>` that is not a
/// folder, or cannot be listed, fails the whole call.
pub fn check_each(root: &Path, kind: &str) -> Result<Vec<(String, Result<AttachedRecord>)>> {
    let kind_dir = root.join(kind);
    let Ok(meta) = std::fs::symlink_metadata(&kind_dir) else { return Ok(Vec::new()) };
    if !meta.is_dir() {
        return Err(Error::integrity(&kind_dir, "is not a folder: it is where attached records are kept"));
    }
    let mut names: Vec<_> = std::fs::read_dir(&kind_dir)
        .map_err(|e| Error::io(&kind_dir, "list", e))?
        .map(|e| e.map(|e| e.file_name().to_string_lossy().into_owned()))
        .collect::<std::io::Result<_>>()
        .map_err(|e| Error::io(&kind_dir, "list", e))?;
    names.sort();
    let mut out = Vec::new();
    for name in names {
        let dir = kind_dir.join(&name);
        let is_dir = std::fs::symlink_metadata(&dir).is_ok_and(|m| m.is_dir());
        if name.starts_with(PARTIAL) && is_dir {
            continue;
        }
        let verdict = if !is_dir || !name_ok(&name) {
            Err(Error::integrity(&dir, format!("is not a sealed record: {kind}/ holds only record folders with their {CONTENTS}")))
        } else {
            check_record(&dir, kind, &name)
        };
        out.push((name, verdict));
    }
    Ok(out)
}

fn check_record(dir: &Path, kind: &str, name: &str) -> Result<AttachedRecord> {
    let list = dir.join(CONTENTS);
    let lines = hash_list::read(&list, |p| p != CONTENTS)?;
    let list_name = format!("{kind}/{name}/{CONTENTS}");
    hash_list::check_files(dir, &list_name, &lines, |_| false)?;
    let named: std::collections::BTreeSet<&str> = lines.iter().map(|l| l.path.as_str()).collect();
    for (path, kind_of) in hash_list::entries(dir, &[])? {
        if path != CONTENTS && !named.contains(path.as_str()) {
            return Err(hash_list::unlisted(dir, &path, kind_of, &list_name));
        }
    }
    Ok(AttachedRecord { kind: kind.into(), name: name.into(), digest: file_sha256(&list)? })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_record_is_sealed_by_its_own_list_and_every_change_is_named() {
        let dir = tempfile::tempdir().unwrap();
        let root = dir.path();
        let record = attach(root, "reviews", "2026-12-03-risk", &[("review.json", b"{}"), ("notes/a.md", b"ok")]).unwrap();
        let check = |root: &Path| check_kinds(root, KINDS);
        assert_eq!(check(root).unwrap(), vec![record.clone()]);
        assert!(attach(root, "reviews", "2026-12-03-risk", &[]).is_err(), "written once");
        std::fs::write(root.join("reviews/2026-12-03-risk/notes/a.md"), "OK").unwrap();
        let err = check(root).unwrap_err().to_string();
        assert!(err.contains("notes/a.md") && err.contains("was changed"), "{err}");
        std::fs::write(root.join("reviews/2026-12-03-risk/notes/a.md"), "ok").unwrap();
        std::fs::write(root.join("reviews/stray.txt"), "x").unwrap();
        assert!(check(root).unwrap_err().to_string().contains("stray.txt: is not a sealed record"));
        std::fs::remove_file(root.join("reviews/stray.txt")).unwrap();
        std::fs::write(root.join("reviews/2026-12-03-risk/extra"), "x").unwrap();
        assert!(check(root).unwrap_err().to_string().contains("extra: is not listed in reviews/2026-12-03-risk/contents.sha256"));
    }
}
