//! The experiment manifest: loading a TOML file into a validated, fully resolved [`Manifest`] with
//! errors that point at file, key, line and column, and its canonical form and hash.

pub(crate) mod grid;
pub(crate) mod locate;
pub(crate) mod schema;
pub(crate) mod validate;

use std::path::{Path, PathBuf};
use toml::de::DeTable;

pub use schema::*;

use crate::error::{Error, ManifestError, Result};
use crate::fingerprint::sha256_hex;
use crate::metrics::registry;
use locate::{key_at, line_col, nearest, span_of, KeyPath};
use validate::Problem;

/// A manifest loaded from disk, with where it came from.
#[derive(Debug, Clone)]
pub struct LoadedManifest {
    pub path: PathBuf,
    pub manifest: Manifest,
    /// Keys set in their section that the grid overrides ([`grid::overridden_keys`]).
    pub overridden_by_grid: Vec<String>,
}

impl LoadedManifest {
    /// The data file's path, resolved against the manifest's folder.
    pub fn data_path(&self) -> PathBuf {
        let base = self.path.parent().unwrap_or(Path::new("."));
        base.join(&self.manifest.data.path)
    }
}

/// Whether a command-line target names a manifest (a `.toml` file) rather than a results folder.
pub fn is_manifest_path(path: &Path) -> bool {
    path.extension().is_some_and(|e| e == "toml")
}

/// Reads, parses, validates and resolves a manifest file.
pub fn load(path: &Path) -> Result<LoadedManifest> {
    let source = read_source(path)?;
    let manifest = parse(path, &source)?;
    let overridden_by_grid = grid::overridden_keys(&source, &manifest);
    Ok(LoadedManifest { path: path.to_path_buf(), manifest, overridden_by_grid })
}

/// The manifest's text. A manifest that is missing, not a regular file or not UTF-8 is bad input
/// (exit 2), named with its path (and the byte where UTF-8 fails).
fn read_source(path: &Path) -> Result<String> {
    let bad = |message: String| ManifestError { file: path.to_path_buf(), key: None, line: None, column: None, message, hint: None };
    match std::fs::metadata(path) {
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => return Err(bad("no such manifest file".into()).into()),
        Ok(m) if !m.is_file() => return Err(bad("is not a regular file; a manifest is a TOML file".into()).into()),
        _ => {}
    }
    let bytes = std::fs::read(path).map_err(|e| Error::io(path, "read the manifest", e))?;
    String::from_utf8(bytes).map_err(|e| {
        let at = e.utf8_error().valid_up_to();
        let line = e.as_bytes()[..at].iter().filter(|&&b| b == b'\n').count() + 1;
        ManifestError { line: Some(line), ..bad(format!("is not UTF-8 text (invalid byte at offset {at}); save the manifest as UTF-8")) }
            .into()
    })
}

/// An error about the key `dotted` of the manifest at `path`, located at its line when the file
/// still parses (used after loading, e.g. for a data file that cannot be opened).
pub fn key_error(path: &Path, dotted: &str, message: String, hint: Option<String>) -> Error {
    let problem = Problem { key: KeyPath::parse_dotted(dotted), index: None, message: message.clone(), hint: hint.clone() };
    let unlocated = || ManifestError { file: path.to_path_buf(), key: Some(dotted.into()), line: None, column: None, message, hint };
    let Ok(source) = std::fs::read_to_string(path) else { return unlocated().into() };
    match DeTable::parse(&source) {
        Ok(document) => locate_problem(path, &source, document.get_ref(), problem).into(),
        Err(_) => unlocated().into(),
    }
}

/// Parses and resolves manifest text; `path` is only used in error messages.
pub fn parse(path: &Path, source: &str) -> Result<Manifest> {
    let document = DeTable::parse(source).map_err(|e| {
        let (partial, _) = DeTable::parse_recoverable(source);
        syntax_error(path, source, partial.get_ref(), &e)
    })?;
    let mut manifest: Manifest = toml::from_str(source).map_err(|e| schema_error(path, source, document.get_ref(), &e))?;
    let located = |p: Problem| locate_problem(path, source, document.get_ref(), p);
    if let Some(p) = validate::validate(&manifest).into_iter().next() {
        return Err(located(p).into());
    }
    if let Some(p) = ignored_by_split_column(source, &manifest) {
        return Err(located(p).into());
    }
    if let Some(p) = grid::normalise(&mut manifest).into_iter().next() {
        return Err(located(p).into());
    }
    let runs = planned_run_count(&manifest);
    if runs > manifest.sweep.max_runs {
        return Err(located(Problem {
            key: KeyPath::parse_dotted("sweep.grid"),
            index: None,
            message: format!(
                "the grid ({} configurations) x {} seeds{} expands to {runs} runs, above sweep.max_runs = {}",
                grid::point_count(&manifest),
                manifest.sweep.seeds.len(),
                if manifest.selection.baseline { " plus the baseline" } else { "" },
                manifest.sweep.max_runs
            ),
            hint: Some("shrink the grid, or raise sweep.max_runs if this many runs is intended".into()),
        })
        .into());
    }
    if let Err(p) = grid::expand(&manifest) {
        return Err(located(p).into());
    }
    if manifest.selection.metric.is_empty() {
        manifest.selection.metric = registry::default_selection_metric(manifest.data.task).to_string();
    }
    Ok(manifest)
}

/// A split fraction or seed written beside `split.column`, which decides every row's split by
/// itself: the key would be silently ignored, so it is refused by name.
fn ignored_by_split_column(source: &str, m: &Manifest) -> Option<Problem> {
    m.split.column.as_ref()?;
    let table: toml::Table = source.parse().ok()?;
    let split = table.get("split")?.as_table()?;
    let key = ["validation", "test", "seed"].into_iter().find(|k| split.contains_key(*k))?;
    Some(Problem {
        key: KeyPath::parse_dotted(&format!("split.{key}")),
        index: None,
        message: "has no effect with split.column, which decides every row's split by itself".into(),
        hint: Some(format!("remove split.{key}, or remove split.column to split at random")),
    })
}

/// Grid points x seeds, plus the baseline's seeds.
pub fn planned_run_count(m: &Manifest) -> usize {
    let seeds = m.sweep.seeds.len();
    grid::point_count(m).saturating_mul(seeds).saturating_add(if m.selection.baseline { seeds } else { 0 })
}

/// The canonical form: the resolved manifest as JSON with fixed key order (struct fields in schema
/// order, maps sorted) and shortest round-trip floats. Comments, whitespace, key order and
/// spelling of equal values in the TOML do not reach it; every change of meaning does.
pub fn canonical_json(m: &Manifest) -> String {
    // Serialising plain structs of strings, numbers and lists into a String cannot fail.
    serde_json::to_string_pretty(m).unwrap_or_default() + "\n"
}

/// SHA-256 of the canonical form.
pub fn canonical_hash(m: &Manifest) -> String {
    sha256_hex(canonical_json(m).as_bytes())
}

fn syntax_error(path: &Path, source: &str, partial: &DeTable<'_>, e: &toml::de::Error) -> Error {
    let (line, column) = e.span().map(|s| line_col(source, s.start)).unzip();
    ManifestError {
        file: path.to_path_buf(),
        key: e.span().and_then(|s| key_at(partial, s.start)).map(|(k, _)| k.to_string()),
        line,
        column,
        message: match e.span().and_then(|s| source.get(s)) {
            Some(text) if e.message().trim() == "duplicate key" => format!("malformed TOML: duplicate key `{}`", text.trim()),
            _ => format!("malformed TOML: {}", e.message().trim()),
        },
        hint: None,
    }
    .into()
}

/// Text between the first pair of backticks after `marker`.
fn quoted_after<'a>(message: &'a str, marker: &str) -> Option<&'a str> {
    let rest = &message[message.find(marker)? + marker.len()..];
    let start = rest.find('`')? + 1;
    let len = rest[start..].find('`')?;
    Some(&rest[start..start + len])
}

/// The backticked names listed after "expected one of".
fn expected_names(message: &str) -> Vec<&str> {
    match message.find("expected one of") {
        Some(i) => message[i..].split('`').skip(1).step_by(2).collect(),
        None => Vec::new(),
    }
}

fn schema_error(path: &Path, source: &str, document: &DeTable<'_>, e: &toml::de::Error) -> Error {
    let raw = e.message().trim().to_string();
    let span = e.span();
    let (line, column) = span.clone().map(|s| line_col(source, s.start)).unzip();
    let located_key = span.and_then(|s| key_at(document, s.start));
    let mut key = located_key.map(|(k, _)| k.to_string());
    let mut hint = None;
    let message = if let Some(field) = quoted_after(&raw, "unknown field") {
        let expected = expected_names(&raw);
        hint = nearest(field, expected.iter().copied()).map(|n| format!("did you mean `{n}`?"));
        if hint.is_none() && !expected.is_empty() {
            hint = Some(format!("valid keys here: {}", expected.join(", ")));
        }
        format!("unknown key `{field}`")
    } else if let Some(variant) = quoted_after(&raw, "unknown variant") {
        let expected = expected_names(&raw);
        hint = nearest(variant, expected.iter().copied())
            .map(|n| format!("did you mean `{n}`?"))
            .or_else(|| Some(format!("one of {}", expected.join(", "))));
        format!("unknown value `{variant}`")
    } else if let Some(field) = quoted_after(&raw, "missing field") {
        let table = key.take().unwrap_or_default();
        key = Some(if table.is_empty() { field.to_string() } else { format!("{table}.{field}") });
        "is required but missing".to_string()
    } else {
        plain_type_error(&raw).unwrap_or(raw)
    };
    ManifestError { file: path.to_path_buf(), key, line, column, message, hint }.into()
}

/// The parser's "invalid type: integer `64`, expected a sequence" or "invalid value: integer
/// `-1`, expected u64" in the manifest's own words: what the key takes and what it got.
fn plain_type_error(raw: &str) -> Option<String> {
    let rest = raw.strip_prefix("invalid type: ").or_else(|| raw.strip_prefix("invalid value: "))?;
    let (got, expected) = rest.split_once(", expected ")?;
    let got = got
        .strip_prefix("integer ")
        .or_else(|| got.strip_prefix("floating point "))
        .or_else(|| got.strip_prefix("boolean "))
        .map(|v| v.trim_matches('`').to_string())
        .or_else(|| got.strip_prefix("string ").map(str::to_string))
        .unwrap_or_else(|| got.to_string());
    let wanted = match expected.trim() {
        "u64" => "a whole number from 0 to 9223372036854775807 (2^63 - 1, TOML's largest integer)".to_string(),
        "usize" | "u32" | "u16" | "u8" => "a whole number, 0 or more".to_string(),
        "i64" | "i32" => "a whole number".to_string(),
        "f64" | "f32" => "a number, such as 0.001".to_string(),
        "a boolean" => "true or false (without quotes)".to_string(),
        "a sequence" => "a list in brackets, such as [64, 64]".to_string(),
        "a string" => "text in double quotes".to_string(),
        other => other.to_string(),
    };
    Some(format!("must be {wanted}, got {got}"))
}

fn locate_problem(path: &Path, source: &str, document: &DeTable<'_>, p: Problem) -> ManifestError {
    // Point at the value (or the key when the value is absent, as for a default), falling back to
    // the parent table, so that the line is right even for keys left at their defaults.
    let mut span = span_of(document, &p.key, p.index);
    let mut parent = p.key.clone();
    while span.is_none() && parent.0.len() > 1 {
        parent.0.pop();
        span = span_of(document, &parent, None);
    }
    let (line, column) = span.map(|s| line_col(source, s.start)).unzip();
    let key = match p.index {
        Some(i) => format!("{}[{i}]", p.key),
        None => p.key.to_string(),
    };
    ManifestError { file: path.to_path_buf(), key: Some(key), line, column, message: p.message, hint: p.hint }
}
