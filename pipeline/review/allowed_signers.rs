//! The allowed-signers file, as `ssh-keygen -Y verify -f` reads it (ssh-keygen(1), "ALLOWED
//! SIGNERS"): one key per line, `principals [options] keytype base64-key [comment]`, `#` comments
//! and blank lines ignored. The subset read here is what review checks need: principals as a
//! pattern-list (`*`, `?`, `!` negation, as ssh_config(5) "PATTERNS" describes), and the options
//! `namespaces="..."`, `valid-after="..."` and `valid-before="..."`. A `cert-authority` line or
//! any other option is an error naming its line, never silently skipped. One difference from
//! OpenSSH: a timestamp without `Z` is read as UTC, where OpenSSH reads it in the local time zone.

use std::path::{Path, PathBuf};

use ssh_key::PublicKey;

use crate::error::{Error, Result};

/// One key line.
#[derive(Debug, Clone)]
pub struct SignerLine {
    /// 1-based line number in the file.
    pub line: usize,
    /// The principals pattern-list, as written.
    pub principals: String,
    /// The `namespaces=` pattern-list, when the line restricts them.
    pub namespaces: Option<String>,
    /// Unix seconds the key is valid at or after / at or before.
    pub valid_after: Option<i64>,
    pub valid_before: Option<i64>,
    pub key: PublicKey,
}

/// A parsed allowed-signers file.
#[derive(Debug, Clone)]
pub struct AllowedSigners {
    pub path: PathBuf,
    pub lines: Vec<SignerLine>,
}

/// Whether a key may sign as a principal in a namespace at a time, and if not, why.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Acceptance {
    /// Accepted by this line.
    Accepted { line: usize },
    /// No line lists the key.
    UnknownKey,
    /// Lines list the key, under these principals, none of which the identity matches.
    OtherPrincipal { listed: Vec<String> },
    /// The key and principal are listed, but not for this namespace or at this time.
    Refused { line: usize, reason: String },
}

fn error(path: &Path, line: usize, message: impl std::fmt::Display) -> Error {
    Error::Usage(format!("{}:{line}: {message}", path.display()))
}

/// `s` against one pattern with `*` (any run) and `?` (any one character), case-sensitively.
fn match_pattern(s: &[char], p: &[char]) -> bool {
    match p.split_first() {
        None => s.is_empty(),
        Some(('*', rest)) => (0..=s.len()).any(|i| match_pattern(&s[i..], rest)),
        Some(('?', rest)) => !s.is_empty() && match_pattern(&s[1..], rest),
        Some((c, rest)) => s.first() == Some(c) && match_pattern(&s[1..], rest),
    }
}

/// OpenSSH's `match_pattern_list`: true when some pattern of the comma-separated list matches
/// and no negated one (`!pattern`) does.
pub fn match_pattern_list(s: &str, list: &str) -> bool {
    let s: Vec<char> = s.chars().collect();
    let mut matched = false;
    for pattern in list.split(',') {
        let (negated, pattern) = match pattern.strip_prefix('!') {
            Some(p) => (true, p),
            None => (false, pattern),
        };
        let p: Vec<char> = pattern.chars().collect();
        if match_pattern(&s, &p) {
            if negated {
                return false;
            }
            matched = true;
        }
    }
    matched
}

/// An allowed-signers timestamp: `YYYYMMDD[Z]` or `YYYYMMDDHHMM[SS][Z]`, in Unix seconds.
fn timestamp(text: &str) -> Option<i64> {
    let digits = text.strip_suffix('Z').unwrap_or(text);
    if !digits.bytes().all(|b| b.is_ascii_digit()) || ![8, 12, 14].contains(&digits.len()) {
        return None;
    }
    let date = format!("{}-{}-{}", &digits[..4], &digits[4..6], &digits[6..8]);
    let field = |range: std::ops::Range<usize>| digits.get(range).map(|d| d.parse::<i64>().unwrap_or(99)).unwrap_or(0);
    let (h, m, s) = (field(8..10), field(10..12), field(12..14));
    if h > 23 || m > 59 || s > 59 {
        return None;
    }
    Some(crate::provenance::date_days(&date)? * 86_400 + h * 3600 + m * 60 + s)
}

/// Splits off the first whitespace-delimited field, where double quotes protect spaces.
fn first_field(rest: &str) -> (&str, &str) {
    let rest = rest.trim_start();
    let mut quoted = false;
    for (i, c) in rest.char_indices() {
        match c {
            '"' => quoted = !quoted,
            c if c.is_whitespace() && !quoted => return (&rest[..i], &rest[i..]),
            _ => {}
        }
    }
    (rest, "")
}

/// The options a line may carry.
#[derive(Default)]
struct LineOptions {
    namespaces: Option<String>,
    valid_after: Option<i64>,
    valid_before: Option<i64>,
}

/// The options of one line, comma-separated outside quotes.
fn parse_options(path: &Path, line: usize, field: &str) -> Result<LineOptions> {
    let mut out = LineOptions::default();
    let mut items = Vec::new();
    let (mut start, mut quoted) = (0, false);
    for (i, c) in field.char_indices() {
        match c {
            '"' => quoted = !quoted,
            ',' if !quoted => {
                items.push(&field[start..i]);
                start = i + 1;
            }
            _ => {}
        }
    }
    if quoted {
        return Err(error(path, line, "an option's quote is not closed"));
    }
    items.push(&field[start..]);
    for item in items {
        let (name, value) = item.split_once('=').unwrap_or((item, ""));
        let dequoted = || {
            value
                .strip_prefix('"')
                .and_then(|v| v.strip_suffix('"'))
                .filter(|v| !v.contains('"'))
                .ok_or_else(|| error(path, line, format!("{name}= needs a value in double quotes, as OpenSSH reads it")))
        };
        let time =
            |v: &str| timestamp(v).ok_or_else(|| error(path, line, format!("{name}=\"{v}\" is not YYYYMMDD[Z] or YYYYMMDDHHMM[SS][Z]")));
        match name.to_ascii_lowercase().as_str() {
            "namespaces" => out.namespaces = Some(dequoted()?.to_string()),
            "valid-after" => out.valid_after = Some(time(dequoted()?)?),
            "valid-before" => out.valid_before = Some(time(dequoted()?)?),
            "cert-authority" => return Err(error(path, line, "cert-authority lines (certificate signers) are not supported by tabcard")),
            _ => return Err(error(path, line, format!("`{item}` is not an option tabcard reads (namespaces, valid-after, valid-before)"))),
        }
    }
    Ok(out)
}

fn is_key_type(field: &str) -> bool {
    field.starts_with("ssh-") || field.starts_with("ecdsa-") || field.starts_with("sk-")
}

/// The environment variable naming the allowed-signers file when `--allowed-signers` does not.
pub const ENV: &str = "TABCARD_ALLOWED_SIGNERS";

/// The file looked for at the results root when neither names one.
pub const DEFAULT_FILE: &str = "allowed_signers";

/// The allowed-signers file to judge reviews with: `explicit` (`--allowed-signers`), else
/// [`ENV`], else [`DEFAULT_FILE`] at the results root. A file named by the first two must exist;
/// the default may be absent (`None`: reviews are then reported unchecked).
pub fn locate(explicit: Option<&Path>, results_root: &Path) -> Result<Option<AllowedSigners>> {
    let named = explicit.map(Path::to_path_buf).or_else(|| std::env::var_os(ENV).filter(|v| !v.is_empty()).map(PathBuf::from));
    match named {
        Some(path) => AllowedSigners::read(&path).map(Some),
        None => {
            let path = results_root.join(DEFAULT_FILE);
            if path.exists() {
                AllowedSigners::read(&path).map(Some)
            } else {
                Ok(None)
            }
        }
    }
}

impl AllowedSigners {
    /// Reads and parses `path`; every malformed line is an error naming it.
    pub fn read(path: &Path) -> Result<Self> {
        let text = std::fs::read_to_string(path).map_err(|e| Error::io(path, "read the allowed-signers file", e))?;
        Self::parse(path, &text)
    }

    pub fn parse(path: &Path, text: &str) -> Result<Self> {
        let mut lines = Vec::new();
        for (i, raw) in text.lines().enumerate() {
            let line = i + 1;
            let trimmed = raw.trim();
            if trimmed.is_empty() || trimmed.starts_with('#') {
                continue;
            }
            let (principals, rest) = first_field(trimmed);
            let (mut field, mut rest) = first_field(rest);
            if field.is_empty() {
                return Err(error(path, line, "needs principals, then optional options, then a key type and key"));
            }
            let mut options = LineOptions::default();
            if !is_key_type(field) {
                options = parse_options(path, line, field)?;
                (field, rest) = first_field(rest);
            }
            // What follows the key is a comment.
            let (base64, _comment) = first_field(rest);
            if !is_key_type(field) || base64.is_empty() {
                return Err(error(path, line, "needs a key type (ssh-ed25519, ecdsa-sha2-nistp256, ssh-rsa, ...) and its base64 key"));
            }
            let key = PublicKey::from_openssh(&format!("{field} {base64}"))
                .map_err(|e| error(path, line, format!("the {field} key cannot be read ({e})")))?;
            let LineOptions { namespaces, valid_after, valid_before } = options;
            lines.push(SignerLine { line, principals: principals.to_string(), namespaces, valid_after, valid_before, key });
        }
        Ok(AllowedSigners { path: path.to_path_buf(), lines })
    }

    /// Whether `key` may sign as `principal` in `namespace` at Unix time `at`, as
    /// `ssh-keygen -Y verify -I principal -n namespace -O verify-time=...` decides it.
    pub fn accepts(&self, key: &PublicKey, principal: &str, namespace: &str, at: i64) -> Acceptance {
        let with_key: Vec<&SignerLine> = self.lines.iter().filter(|l| l.key.key_data() == key.key_data()).collect();
        if with_key.is_empty() {
            return Acceptance::UnknownKey;
        }
        let named: Vec<&SignerLine> = with_key.iter().copied().filter(|l| match_pattern_list(principal, &l.principals)).collect();
        if named.is_empty() {
            return Acceptance::OtherPrincipal { listed: with_key.iter().map(|l| l.principals.clone()).collect() };
        }
        let mut refusal = None;
        for l in &named {
            let reason = if l.namespaces.as_deref().is_some_and(|ns| !match_pattern_list(namespace, ns)) {
                Some(format!("allows namespaces \"{}\", not {namespace}", l.namespaces.as_deref().unwrap_or_default()))
            } else if l.valid_after.is_some_and(|t| at < t) {
                Some(format!("is valid only from {}", crate::provenance::rfc3339(l.valid_after.unwrap_or_default())))
            } else if l.valid_before.is_some_and(|t| at > t) {
                Some(format!("was valid only until {}", crate::provenance::rfc3339(l.valid_before.unwrap_or_default())))
            } else {
                None
            };
            match reason {
                None => return Acceptance::Accepted { line: l.line },
                Some(r) => refusal = refusal.or(Some(Acceptance::Refused { line: l.line, reason: r })),
            }
        }
        refusal.unwrap_or(Acceptance::UnknownKey)
    }

    /// The principals of the first line listing `key` that is valid at `at`, one pattern each, as
    /// `ssh-keygen -Y find-principals` prints them (it reads no namespace).
    pub fn find_principals(&self, key: &PublicKey, at: i64) -> Vec<String> {
        self.lines
            .iter()
            .filter(|l| l.key.key_data() == key.key_data())
            .find(|l| l.valid_after.is_none_or(|t| at >= t) && l.valid_before.is_none_or(|t| at <= t))
            .map(|l| l.principals.split(',').map(String::from).collect())
            .unwrap_or_default()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const KEY: &str = "ssh-ed25519 AAAAC3NzaC1lZDI1NTE5AAAAIKwNDAX8QUaazx5KocZOfquBcB0/SUfCPJVb1oTtDrfz";

    #[test]
    fn pattern_lists_match_as_openssh_describes() {
        // ssh_config(5), PATTERNS: `*` any run, `?` one character, `!` negates and wins.
        assert!(match_pattern_list("ana@risk.example", "*@risk.example"));
        assert!(match_pattern_list("ana@risk.example", "bo@x,an?@risk.example"));
        assert!(!match_pattern_list("ana@risk.example", "*@risk.example,!ana@*"));
        assert!(!match_pattern_list("ana@risk.example", "!bo@risk.example"), "a list of negations alone matches nothing");
        assert!(!match_pattern_list("Ana@risk.example", "ana@risk.example"), "case-sensitive");
    }

    #[test]
    fn lines_parse_with_options_and_errors_name_the_line() {
        let path = Path::new("allowed_signers");
        let text = format!(
            "# team keys\n\nana@risk.example {KEY} ana's laptop\nbo@risk.example,cy@risk.example namespaces=\"tabcard-review,git\",valid-after=\"20260101\",valid-before=\"202612312359Z\" {KEY}\n"
        );
        let signers = AllowedSigners::parse(path, &text).unwrap();
        assert_eq!(signers.lines.len(), 2);
        assert_eq!(signers.lines[0].line, 3);
        let l = &signers.lines[1];
        assert_eq!(l.namespaces.as_deref(), Some("tabcard-review,git"));
        assert_eq!(l.valid_after, crate::provenance::rfc3339_seconds("2026-01-01T00:00:00Z"));
        assert_eq!(l.valid_before, crate::provenance::rfc3339_seconds("2026-12-31T23:59:00Z"));
        let bad = |text: &str| AllowedSigners::parse(path, text).unwrap_err().to_string();
        assert!(bad(&format!("x@y cert-authority {KEY}\n")).contains("allowed_signers:1: cert-authority"));
        assert!(
            bad(&format!("\nx@y valid-after=20260101 {KEY}\n")).contains("allowed_signers:2: valid-after= needs a value in double quotes")
        );
        assert!(bad(&format!("x@y valid-after=\"2026\" {KEY}\n")).contains("is not YYYYMMDD"));
        assert!(bad("x@y ssh-ed25519 AAAA\n").contains("cannot be read"));
        assert!(bad("x@y\n").contains("needs principals"));
        assert!(bad(&format!("x@y no-touch-required {KEY}\n")).contains("not an option tabcard reads"));
    }

    #[test]
    fn acceptance_names_why_a_key_is_refused() {
        let text =
            format!("ana@risk.example {KEY}\nbo@risk.example namespaces=\"git\" {KEY}\ncy@risk.example valid-before=\"20260101Z\" {KEY}\n");
        let signers = AllowedSigners::parse(Path::new("s"), &text).unwrap();
        let key = PublicKey::from_openssh(KEY).unwrap();
        let at = crate::provenance::rfc3339_seconds("2026-06-01T00:00:00Z").unwrap();
        assert_eq!(signers.accepts(&key, "ana@risk.example", "tabcard-review", at), Acceptance::Accepted { line: 1 });
        assert!(matches!(signers.accepts(&key, "dee@risk.example", "tabcard-review", at), Acceptance::OtherPrincipal { .. }));
        assert!(matches!(signers.accepts(&key, "bo@risk.example", "tabcard-review", at), Acceptance::Refused { line: 2, .. }));
        assert!(matches!(signers.accepts(&key, "cy@risk.example", "tabcard-review", at), Acceptance::Refused { line: 3, .. }));
        assert_eq!(signers.find_principals(&key, at), vec!["ana@risk.example".to_string()]);
    }
}
