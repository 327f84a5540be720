//! Maps between byte spans in a manifest's source and the things a user can find in an editor:
//! line and column numbers, and dotted key paths. Also the nearest-key suggestion for misspellings.

use std::ops::Range;
use toml::de::{DeTable, DeValue};

/// A key path as segments; displayed dotted, quoting segments that contain dots.
#[derive(Debug, Clone, PartialEq, Eq)]
pub(crate) struct KeyPath(pub Vec<String>);

impl KeyPath {
    pub(crate) fn parse_dotted(dotted: &str) -> Self {
        KeyPath(dotted.split('.').map(str::to_string).collect())
    }

    pub(crate) fn child(&self, segment: &str) -> Self {
        let mut v = self.0.clone();
        v.push(segment.to_string());
        KeyPath(v)
    }
}

impl std::fmt::Display for KeyPath {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        for (i, seg) in self.0.iter().enumerate() {
            if i > 0 {
                f.write_str(".")?;
            }
            if seg.contains('.') || seg.is_empty() {
                write!(f, "\"{seg}\"")?;
            } else {
                f.write_str(seg)?;
            }
        }
        Ok(())
    }
}

/// 1-based line and column (in characters) of a byte offset.
pub(crate) fn line_col(source: &str, offset: usize) -> (usize, usize) {
    let offset = offset.min(source.len());
    let before = &source[..floor_char_boundary(source, offset)];
    let line = before.matches('\n').count() + 1;
    let line_start = before.rfind('\n').map(|i| i + 1).unwrap_or(0);
    let column = before[line_start..].chars().count() + 1;
    (line, column)
}

fn floor_char_boundary(s: &str, mut i: usize) -> usize {
    while i > 0 && !s.is_char_boundary(i) {
        i -= 1;
    }
    i
}

/// The deepest key whose key span, or whose (non-table) value span, contains `offset`. Tables are
/// searched whether or not their own span covers the offset, because a `[section]` table's span
/// does not always include its body.
pub(crate) fn key_at(table: &DeTable<'_>, offset: usize) -> Option<(KeyPath, Range<usize>)> {
    fn walk(table: &DeTable<'_>, offset: usize, prefix: &KeyPath) -> Option<(KeyPath, Range<usize>)> {
        for (key, value) in table.iter() {
            let path = prefix.child(key.get_ref());
            if let DeValue::Table(inner) = value.get_ref() {
                if let Some(found) = walk(inner, offset, &path) {
                    return Some(found);
                }
            }
        }
        for (key, value) in table.iter() {
            let path = prefix.child(key.get_ref());
            let key_span = key.span();
            let value_span = value.span();
            let is_table = matches!(value.get_ref(), DeValue::Table(_));
            if key_span.contains(&offset) || (!is_table && value_span.contains(&offset)) {
                return Some((path, key_span));
            }
        }
        None
    }
    walk(table, offset, &KeyPath(Vec::new()))
}

/// The span of a key path's value (or of the element `index` of an array value).
pub(crate) fn span_of(table: &DeTable<'_>, path: &KeyPath, index: Option<usize>) -> Option<Range<usize>> {
    let mut current = table;
    let (last, parents) = path.0.split_last()?;
    for seg in parents {
        let (_, value) = current.iter().find(|(k, _)| k.get_ref() == seg)?;
        match value.get_ref() {
            DeValue::Table(t) => current = t,
            _ => return None,
        }
    }
    let (key, value) = current.iter().find(|(k, _)| k.get_ref() == last)?;
    match (index, value.get_ref()) {
        (Some(i), DeValue::Array(items)) => items.get(i).map(|v| v.span()),
        (None, _) => Some(key.span()),
        _ => Some(value.span()),
    }
}

/// Levenshtein distance, for "did you mean" hints.
pub(crate) fn edit_distance(a: &str, b: &str) -> usize {
    let b: Vec<char> = b.chars().collect();
    let mut row: Vec<usize> = (0..=b.len()).collect();
    for (i, ca) in a.chars().enumerate() {
        let mut prev = row[0];
        row[0] = i + 1;
        for (j, cb) in b.iter().enumerate() {
            let cur = row[j + 1];
            row[j + 1] = if ca == *cb { prev } else { 1 + prev.min(cur).min(row[j]) };
            prev = cur;
        }
    }
    row[b.len()]
}

/// The candidate nearest to `word`, if it is close enough to be a plausible misspelling.
pub(crate) fn nearest<'a>(word: &str, candidates: impl IntoIterator<Item = &'a str>) -> Option<&'a str> {
    candidates
        .into_iter()
        .map(|c| (edit_distance(word, c), c))
        .filter(|(d, c)| *d <= (c.len().max(word.len()) / 3).max(2) && *d < c.len().max(word.len()))
        .min_by_key(|(d, c)| (*d, !(c.starts_with(word) || word.starts_with(*c))))
        .map(|(_, c)| c)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn line_and_column_are_one_based() {
        let src = "a = 1\nbb = 2\n";
        assert_eq!(line_col(src, 0), (1, 1));
        assert_eq!(line_col(src, 6), (2, 1));
        assert_eq!(line_col(src, 9), (2, 4));
    }

    #[test]
    fn finds_key_under_offset() {
        let src = "[model]\nhidden = [4]\ndropout = 2.0\n";
        let table = DeTable::parse(src).unwrap();
        let offset = src.find("2.0").unwrap();
        let (path, _) = key_at(table.get_ref(), offset).unwrap();
        assert_eq!(path.to_string(), "model.dropout");
    }

    #[test]
    fn suggests_nearest_key() {
        assert_eq!(nearest("dropuot", ["dropout", "hidden", "residual"]), Some("dropout"));
        assert_eq!(nearest("zzzzzz", ["dropout", "hidden"]), None);
    }
}
