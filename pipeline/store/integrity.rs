//! The integrity lists of a results folder and its results digest.
//!
//! A folder has three parts. The **evidence** is written once by `train`: manifest copies,
//! experiment record, data summary, plan, preprocessor, selection, test predictions and every
//! run's files. The **rendered** files (`card.md`, `figures/`) are rendered from it and from the
//! records, and may be rendered again. The **records** say where and on what it was trained
//! (`location.json`, each run's `environment.json`) and lie outside the evidence, so the same
//! experiment has the same digest in any checkout and on any machine. **Attached records**
//! (`reviews/`, `monitoring/`, see `attached.rs`) are added later, each sealed by its own list.
//!
//! From layout 4, `integrity.sha256` lists the evidence alone and `records.sha256` the records
//! and rendered files; in layouts 2 and 3, `integrity.sha256` lists the evidence (run
//! environments included) and then the rendered files. One `<SHA-256>  <path>` line per file,
//! sorted by path, in the format `sha256sum -c` reads. The **results digest** is the SHA-256 of
//! the evidence lines, bytes as written, so the card can name it without naming itself:
//!
//! ```text
//! sha256sum -c integrity.sha256 records.sha256   # every listed file (layout 4)
//! sha256sum integrity.sha256                     # the results digest (layout 4)
//! grep -v -e '  card\.md$' -e '  figures/' integrity.sha256 | sha256sum   # the digest (layouts 2, 3)
//! ```
//!
//! Timing records (`timing.json`, a run's `timing.json`) are never listed, since two identical
//! sweeps write different ones; they are checked field by field when read (`timing.rs`). A file
//! that differs from its line, a listed file that is gone and a file that is not listed are all
//! reported by name.

use std::path::Path;

use super::attached;
use super::files::write_atomic;
use super::hash_list::{self, plain_relative};
use crate::error::Result;
use crate::fingerprint::sha256_hex;

/// The evidence list (layout 4), or the list of every file (layouts 2 and 3).
pub const FILE: &str = "integrity.sha256";

/// The list of records and rendered files (layout 4).
pub const RECORDS_FILE: &str = "records.sha256";

/// Where the experiment was trained from (layout 4): a record outside the evidence.
pub const LOCATION: &str = "location.json";

/// The first layout with separate evidence and record lists.
const SPLIT_LISTS_FROM: u32 = 4;

/// Which part of a results folder a file belongs to.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Part {
    Evidence,
    /// Where and on what the experiment was trained (layout 4 on).
    Record,
    /// Rendered from the evidence and records: the card and its figures.
    Rendered,
}

/// The part of a listed file (relative path) in a folder of layout `version`.
pub fn part(path: &str, version: u32) -> Part {
    if path == "card.md" || path.starts_with("figures/") {
        Part::Rendered
    } else if version >= SPLIT_LISTS_FROM && (path == LOCATION || is_run_environment(path)) {
        Part::Record
    } else {
        Part::Evidence
    }
}

/// `runs/<id>/environment.json`.
fn is_run_environment(path: &str) -> bool {
    let parts: Vec<&str> = path.split('/').collect();
    parts.len() == 3 && parts[0] == "runs" && parts[2] == "environment.json"
}

/// Whether a path is a timing record (the experiment's or a run's): never listed, since two
/// identical sweeps write different ones.
fn is_timing(path: &str) -> bool {
    path == "timing.json" || path.ends_with("/timing.json")
}

/// Whether a file (path relative to the folder, `/`-separated) belongs in a list. Only plain
/// relative paths qualify: no absolute path, no empty, `.` or `..` component, no dot-entry.
fn listed(path: &str) -> bool {
    path != FILE && path != RECORDS_FILE && !is_timing(path) && plain_relative(path)
}

/// Entries that may sit in a results folder without being listed: the lists themselves, timing
/// records (regular files), the writer lock while `train` holds it, a run being written
/// (`runs/.partial-*`, removed on the next `train`), and the attached-record folders (each
/// checked by its own list).
fn tolerated_unlisted(path: &str, kind: std::fs::FileType) -> bool {
    path == FILE
        || path == RECORDS_FILE
        || is_timing(path) && kind.is_file()
        || path == super::lock::FILE
        || (path.starts_with("runs/.") && !path["runs/".len()..].contains('/'))
        || attached::KINDS.contains(&path)
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

/// The layout version `format.json` records (read again, and checked, by the folder's own
/// check); when it cannot be read, the first layout with split lists, so a folder without one is
/// sealed and checked in today's form.
pub fn folder_version(root: &Path) -> u32 {
    std::fs::read(root.join("format.json"))
        .ok()
        .and_then(|b| serde_json::from_slice::<serde_json::Value>(&b).ok())
        .and_then(|v| v.get("version")?.as_u64())
        .map_or(SPLIT_LISTS_FROM, |v| v as u32)
}

/// Every file a list may name under `root` (attached records aside), relative and sorted.
fn files(root: &Path) -> Result<Vec<String>> {
    Ok(hash_list::entries(root, attached::KINDS)?
        .into_iter()
        .map(|(p, _)| p)
        .filter(|p| listed(p) && !attached::KINDS.contains(&p.as_str()))
        .collect())
}

/// Hashes the evidence, hands its digest to `render` (which writes the card and figures), then
/// writes the lists atomically, in the form of the folder's layout version; the evidence list
/// is written only when it is new or would change. Returns the results digest.
pub fn seal(root: &Path, render: impl FnOnce(&str) -> Result<()>) -> Result<String> {
    let version = folder_version(root);
    let of =
        |part_wanted: Part, all: &[String]| -> Vec<String> { all.iter().filter(|p| part(p, version) == part_wanted).cloned().collect() };
    let evidence_lines = hash_list::lines(root, &of(Part::Evidence, &files(root)?))?;
    let digest = sha256_hex(evidence_lines.as_bytes());
    render(&digest)?;
    let after = files(root)?;
    let rendered = hash_list::lines(root, &of(Part::Rendered, &after))?;
    if version >= SPLIT_LISTS_FROM {
        let records = hash_list::lines(root, &of(Part::Record, &after))?;
        write_atomic(&root.join(RECORDS_FILE), (records + &rendered).as_bytes())?;
        // Written last: its presence marks a sealed folder.
        if std::fs::read(root.join(FILE)).ok().as_deref() != Some(evidence_lines.as_bytes()) {
            write_atomic(&root.join(FILE), evidence_lines.as_bytes())?;
        }
    } else {
        write_atomic(&root.join(FILE), (evidence_lines + &rendered).as_bytes())?;
    }
    Ok(digest)
}

/// Checks every file of the folder against its lists, and every attached record against its
/// own (reviews aside: `review::judge` judges each, see `attached::JUDGED_ONE_BY_ONE`), and
/// returns the results digest; the first file that differs, is gone or is not listed
/// is named in the error.
pub fn check(root: &Path) -> Result<String> {
    check_parts(root, false)
}

/// [`check`] where rendered files (card, figures, and temporaries of their interrupted writes)
/// may differ, be missing or be unlisted. For `card`, which renders them anew and reseals, so a
/// `card` killed between writing the card and sealing its list can be repaired.
pub fn check_evidence(root: &Path) -> Result<String> {
    check_parts(root, true)
}

fn check_parts(root: &Path, rendered_may_differ: bool) -> Result<String> {
    let version = folder_version(root);
    let split = version >= SPLIT_LISTS_FROM;
    let list_path = root.join(FILE);
    let mut recorded = hash_list::read(&list_path, |p| listed(p) && (!split || part(p, version) == Part::Evidence))?;
    let evidence_lines: String =
        recorded.iter().filter(|l| part(&l.path, version) == Part::Evidence).map(|l| format!("{}\n", l.text)).collect();
    hash_list::check_files(root, FILE, &recorded, |p| rendered_may_differ && part(p, version) == Part::Rendered)?;
    if split {
        let records_path = root.join(RECORDS_FILE);
        let others = hash_list::read(&records_path, |p| listed(p) && part(p, version) != Part::Evidence)?;
        hash_list::check_files(root, RECORDS_FILE, &others, |p| rendered_may_differ && part(p, version) == Part::Rendered)?;
        recorded.extend(others);
    }
    let named: std::collections::BTreeSet<&str> = recorded.iter().map(|l| l.path.as_str()).collect();
    for (path, kind) in hash_list::entries(root, attached::KINDS)? {
        if named.contains(path.as_str()) || tolerated_unlisted(&path, kind) {
            continue;
        }
        let name = path.rsplit('/').next().unwrap_or(&path);
        if rendered_may_differ && (part(&path, version) == Part::Rendered || is_temporary(name)) {
            continue;
        }
        let list_name = if split && part(&path, version) != Part::Evidence { RECORDS_FILE } else { FILE };
        return Err(hash_list::unlisted(root, &path, kind, list_name));
    }
    attached::check_for_folder(root)?;
    Ok(sha256_hex(evidence_lines.as_bytes()))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A folder of layout `version` with evidence, a run environment, timing records and a run
    /// being written, sealed with a card and a figure.
    fn sealed_folder(version: u32) -> (tempfile::TempDir, String) {
        let dir = tempfile::tempdir().unwrap();
        let root = dir.path();
        for (path, text) in [
            ("format.json", format!("{{\"version\": {version}}}").as_str()),
            ("selection.json", "s"),
            ("timing.json", "t"),
            ("runs/a/weights.safetensors", "w"),
            ("runs/a/environment.json", "e"),
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
        (dir, digest)
    }

    fn paths(list: &Path) -> Vec<String> {
        std::fs::read_to_string(list).unwrap().lines().map(|l| l.split_once("  ").unwrap().1.to_string()).collect()
    }

    #[test]
    fn layout_4_lists_the_evidence_alone_and_its_digest_is_the_lists_hash() {
        let (dir, digest) = sealed_folder(4);
        let root = dir.path();
        assert_eq!(paths(&root.join(FILE)), ["format.json", "runs/a/weights.safetensors", "selection.json"]);
        assert_eq!(paths(&root.join(RECORDS_FILE)), ["runs/a/environment.json", "card.md", "figures/a.svg"]);
        assert_eq!(digest, sha256_hex(&std::fs::read(root.join(FILE)).unwrap()));
        assert_eq!(check(root).unwrap(), digest);
        // Timing may change; evidence and records may not, and each is named by its own list.
        std::fs::write(root.join("runs/a/timing.json"), "later").unwrap();
        assert_eq!(check(root).unwrap(), digest);
        std::fs::write(root.join("runs/a/environment.json"), "E").unwrap();
        assert!(check(root)
            .unwrap_err()
            .to_string()
            .contains("environment.json: was changed after it was recorded: its SHA-256 differs from records.sha256"));
        std::fs::write(root.join("runs/a/environment.json"), "e").unwrap();
        std::fs::write(root.join("selection.json"), "S").unwrap();
        assert!(check(root)
            .unwrap_err()
            .to_string()
            .contains("selection.json: was changed after it was recorded: its SHA-256 differs from integrity.sha256"));
        std::fs::write(root.join("selection.json"), "s").unwrap();
        std::fs::write(root.join("location.json"), "{}").unwrap();
        assert!(check(root).unwrap_err().to_string().contains("location.json: is not listed in records.sha256"));
    }

    #[test]
    fn layouts_2_and_3_keep_one_list_with_run_environments_in_the_evidence() {
        let (dir, digest) = sealed_folder(3);
        let root = dir.path();
        assert!(!root.join(RECORDS_FILE).exists());
        let listed = paths(&root.join(FILE));
        assert_eq!(
            listed,
            ["format.json", "runs/a/environment.json", "runs/a/weights.safetensors", "selection.json", "card.md", "figures/a.svg"]
        );
        let text = std::fs::read_to_string(root.join(FILE)).unwrap();
        let evidence: String = text.lines().take(4).map(|l| format!("{l}\n")).collect();
        assert_eq!(digest, sha256_hex(evidence.as_bytes()));
        assert_eq!(check(root).unwrap(), digest);
    }

    #[test]
    fn attached_records_leave_the_digest_alone_and_are_checked_by_their_own_lists() {
        let (dir, digest) = sealed_folder(4);
        let root = dir.path();
        let evidence_list = std::fs::read(root.join(FILE)).unwrap();
        attached::attach(root, "reviews", "r1", &[("review.json", b"{}")]).unwrap();
        attached::attach(root, "monitoring", "m1", &[("report.json", b"{}")]).unwrap();
        assert_eq!(check(root).unwrap(), digest);
        assert_eq!(std::fs::read(root.join(FILE)).unwrap(), evidence_list);
        std::fs::write(root.join("monitoring/m1/report.json"), "{ }").unwrap();
        assert!(check(root).unwrap_err().to_string().contains("monitoring/m1/report.json: was changed"));
    }
}
