//! Where an experiment came from: the git commit of the manifest's repository and whether it had
//! uncommitted changes, and the current UTC time.

use std::path::Path;
use std::process::Command;

/// (commit, dirty) of the repository holding `path`, or `None` outside git or without git.
pub fn git_state(path: &Path) -> (Option<String>, Option<bool>) {
    let dir = path.parent().filter(|p| !p.as_os_str().is_empty()).unwrap_or(Path::new("."));
    let run = |args: &[&str]| Command::new("git").arg("-C").arg(dir).args(args).output().ok().filter(|o| o.status.success());
    let commit = run(&["rev-parse", "HEAD"]).map(|o| String::from_utf8_lossy(&o.stdout).trim().to_string());
    let dirty = commit.as_ref().and_then(|_| run(&["status", "--porcelain", "--untracked-files=no"])).map(|o| !o.stdout.is_empty());
    (commit, dirty)
}

/// How git sees one file: `--untracked-files=no` in [`git_state`] cannot tell a manifest git has
/// never seen from a committed one, so each file the card names is asked about by itself.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum GitFileState {
    /// Tracked, and as the last commit holds it.
    Committed,
    /// Tracked or staged, and different from the last commit (or never committed).
    Changed,
    /// In the work tree, never added.
    Untracked,
    /// Matched by a `.gitignore` rule.
    Ignored,
    /// Not in a git work tree (or git is not installed).
    NotInGit,
}

impl GitFileState {
    /// As the card says it.
    pub fn describe(self) -> &'static str {
        match self {
            GitFileState::Committed => "committed",
            GitFileState::Changed => "changed since the last commit",
            GitFileState::Untracked => "untracked: git has never seen it",
            GitFileState::Ignored => "ignored by git",
            GitFileState::NotInGit => "not in a git repository",
        }
    }
}

/// How git sees the file `path` (a regular file).
pub fn git_file_state(path: &Path) -> GitFileState {
    let (Some(dir), Some(name)) = (path.parent(), path.file_name()) else { return GitFileState::NotInGit };
    let dir = if dir.as_os_str().is_empty() { Path::new(".") } else { dir };
    let git =
        |args: &[&str]| Command::new("git").arg("-C").arg(dir).args(args).arg("--").arg(name).output().ok().filter(|o| o.status.success());
    if Command::new("git")
        .arg("-C")
        .arg(dir)
        .args(["rev-parse", "--is-inside-work-tree"])
        .output()
        .ok()
        .filter(|o| o.status.success())
        .is_none()
    {
        return GitFileState::NotInGit;
    }
    let Some(status) = git(&["status", "--porcelain", "--ignored"]) else { return GitFileState::NotInGit };
    let text = String::from_utf8_lossy(&status.stdout);
    match text.get(..2) {
        None => match git(&["ls-files", "--error-unmatch"]) {
            Some(_) => GitFileState::Committed,
            None => GitFileState::Untracked,
        },
        Some("??") => GitFileState::Untracked,
        Some("!!") => GitFileState::Ignored,
        Some(_) => GitFileState::Changed,
    }
}

/// `to` relative to the folder `from_dir`, `/`-separated, climbing with `..` where needed (both
/// made absolute against the current folder first).
pub fn relative_path(from_dir: &Path, to: &Path) -> String {
    use std::path::Component;
    let abs = |p: &Path| std::path::absolute(p).unwrap_or_else(|_| p.to_path_buf());
    let (from, to) = (abs(from_dir), abs(to));
    let from: Vec<Component> = from.components().collect();
    let to_parts: Vec<Component> = to.components().collect();
    let common = from.iter().zip(&to_parts).take_while(|(a, b)| a == b).count();
    let mut parts: Vec<String> = std::iter::repeat_n("..".to_string(), from.len() - common).collect();
    parts.extend(to_parts[common..].iter().map(|c| c.as_os_str().to_string_lossy().into_owned()));
    parts.join("/")
}

/// The project a file belongs to: the nearest folder above it holding `.git` (a work tree), or
/// the file's own folder outside git. `None` when the file's folder cannot be resolved.
pub fn project_root(path: &Path) -> Option<std::path::PathBuf> {
    let dir = path.parent().filter(|p| !p.as_os_str().is_empty()).unwrap_or(Path::new("."));
    let dir = dir.canonicalize().ok()?;
    Some(dir.ancestors().find(|a| a.join(".git").exists()).map(Path::to_path_buf).unwrap_or(dir))
}

/// `path` relative to its [`project_root`], `/`-separated; the file name alone when unresolvable.
pub fn project_relative(path: &Path) -> String {
    let name = || path.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
    let (Some(root), Ok(full)) = (project_root(path), path.canonicalize()) else { return name() };
    match full.strip_prefix(&root) {
        Ok(rel) => rel.components().map(|c| c.as_os_str().to_string_lossy().into_owned()).collect::<Vec<_>>().join("/"),
        Err(_) => name(),
    }
}

/// Days since 1970-01-01 to a civil (year, month, day), after Howard Hinnant's `civil_from_days`.
fn civil_from_days(days: i64) -> (i64, u32, u32) {
    let z = days + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z.rem_euclid(146_097);
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = (doy - (153 * mp + 2) / 5 + 1) as u32;
    let m = if mp < 10 { mp + 3 } else { mp - 9 } as u32;
    (yoe + era * 400 + (m <= 2) as i64, m, d)
}

/// Days since 1970-01-01 of a civil date, after Howard Hinnant's `days_from_civil`.
fn days_from_civil(y: i64, m: u32, d: u32) -> i64 {
    let y = if m <= 2 { y - 1 } else { y };
    let era = y.div_euclid(400);
    let yoe = y.rem_euclid(400);
    let mp = if m > 2 { m - 3 } else { m + 9 } as i64;
    let doy = (153 * mp + 2) / 5 + d as i64 - 1;
    let doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
    era * 146_097 + doe - 719_468
}

/// Days since 1970-01-01 of a `YYYY-MM-DD` date; `None` when it is not one (February 30th is not).
pub fn date_days(text: &str) -> Option<i64> {
    let b = text.as_bytes();
    if b.len() != 10 || b[4] != b'-' || b[7] != b'-' {
        return None;
    }
    let (y, m, d) = (text[..4].parse::<i64>().ok()?, text[5..7].parse::<u32>().ok()?, text[8..].parse::<u32>().ok()?);
    let days = days_from_civil(y, m, d);
    (civil_from_days(days) == (y, m, d) && text[..4].bytes().all(|c| c.is_ascii_digit())).then_some(days)
}

/// Unix seconds of an RFC 3339 UTC timestamp as [`rfc3339`] writes it (`YYYY-MM-DDTHH:MM:SSZ`).
pub fn rfc3339_seconds(text: &str) -> Option<i64> {
    let (date, time) = text.split_once('T')?;
    let time = time.strip_suffix('Z')?;
    let parts: Vec<i64> = time.split(':').map(|p| if p.len() == 2 { p.parse().ok() } else { None }).collect::<Option<_>>()?;
    match parts[..] {
        [h, m, s] if h < 24 && m < 60 && s < 60 => Some(date_days(date)? * 86_400 + h * 3600 + m * 60 + s),
        _ => None,
    }
}

/// Today's date (UTC) as days since 1970-01-01.
pub fn today_days() -> i64 {
    std::time::SystemTime::now().duration_since(std::time::UNIX_EPOCH).map(|d| d.as_secs() as i64).unwrap_or(0).div_euclid(86_400)
}

/// A day count as `YYYY-MM-DD`.
pub fn date_text(days: i64) -> String {
    let (y, m, d) = civil_from_days(days);
    format!("{y:04}-{m:02}-{d:02}")
}

/// Who is training or reviewing here: git's `user.email` for the repository holding `path`, else
/// the login name (`USER`); `None` when neither is set.
pub fn user_identity(path: &Path) -> Option<String> {
    let dir = path.parent().filter(|p| !p.as_os_str().is_empty()).unwrap_or(Path::new("."));
    let email = Command::new("git").arg("-C").arg(dir).args(["config", "user.email"]).output().ok().filter(|o| o.status.success());
    email
        .map(|o| String::from_utf8_lossy(&o.stdout).trim().to_string())
        .filter(|e| !e.is_empty())
        .or_else(|| std::env::var("USER").ok().filter(|u| !u.is_empty()))
}

/// RFC 3339 UTC timestamp of a Unix time in seconds.
pub fn rfc3339(unix_seconds: i64) -> String {
    let (y, m, d) = civil_from_days(unix_seconds.div_euclid(86_400));
    let s = unix_seconds.rem_euclid(86_400);
    format!("{y:04}-{m:02}-{d:02}T{:02}:{:02}:{:02}Z", s / 3600, (s / 60) % 60, s % 60)
}

pub fn now_rfc3339() -> String {
    let secs = std::time::SystemTime::now().duration_since(std::time::UNIX_EPOCH).map(|d| d.as_secs() as i64).unwrap_or(0);
    rfc3339(secs)
}

/// This machine's host name (Linux: the kernel's), reduced to characters safe in a file name;
/// `unknown-host` when it cannot be read.
pub fn host_name() -> String {
    let raw = std::fs::read_to_string("/proc/sys/kernel/hostname").ok().or_else(|| std::env::var("HOSTNAME").ok()).unwrap_or_default();
    let safe: String = raw.trim().chars().filter(|c| c.is_ascii_alphanumeric() || matches!(c, '.' | '-' | '_')).collect();
    if safe.is_empty() {
        "unknown-host".into()
    } else {
        safe
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn unix_times_format_as_rfc3339() {
        assert_eq!(rfc3339(0), "1970-01-01T00:00:00Z");
        // 2000-02-29 is a leap day; 951782400 is its midnight (from memory, checked by arithmetic:
        // 30 years of 365 days + 7 leap days = 10957 days to 2000-01-01, + 59 days).
        assert_eq!(rfc3339(951_782_400), "2000-02-29T00:00:00Z");
        assert_eq!(rfc3339(1_800_000_000), "2027-01-15T08:00:00Z");
        assert_eq!(rfc3339_seconds("2027-01-15T08:00:00Z"), Some(1_800_000_000));
        assert_eq!(date_days("2000-02-29"), Some(951_782_400 / 86_400));
        assert_eq!(date_text(951_782_400 / 86_400), "2000-02-29");
        for bad in ["2001-02-29", "2026-13-01", "2026-1-01", "+026-01-01", "2026-01-01T"] {
            assert_eq!(date_days(bad), None, "{bad}");
        }
        assert_eq!(rfc3339_seconds("2027-01-15T24:00:00Z"), None);
    }
}
