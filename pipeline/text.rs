//! Making untrusted text (column names, category levels, manifest strings) safe to show: in a
//! terminal (no control characters, bounded length) and in markdown (no links, HTML or structure).

/// Replaces control and bidirectional-override characters with visible escapes.
pub fn terminal_safe(s: &str) -> String {
    let mut out = String::new();
    for c in s.chars() {
        if c.is_control() || matches!(c, '\u{200b}'..='\u{200f}' | '\u{202a}'..='\u{202e}' | '\u{2066}'..='\u{2069}') {
            out.extend(c.escape_unicode());
        } else {
            out.push(c);
        }
    }
    out
}

/// [`terminal_safe`], shortened to `max` characters, for table cells.
pub fn terminal_cell(s: &str, max: usize) -> String {
    let safe = terminal_safe(s);
    if safe.chars().count() <= max {
        return safe;
    }
    let mut out: String = safe.chars().take(max.saturating_sub(1)).collect();
    out.push('…');
    out
}

/// Escapes text for one line of a markdown table or paragraph: every character with meaning in
/// CommonMark or HTML becomes an entity or a backslash escape, line breaks and control characters
/// become visible escapes, and the length is bounded (200 characters: names and levels in table
/// cells). The result renders as the literal text.
///
/// Names must stay told apart: an empty one shows as an italic *(empty)* (a literal one would show
/// its escaped brackets), and one cut at the bound ends with the start of its SHA-256, so two long
/// names that share their first 200 characters still read differently.
pub fn markdown_safe(s: &str) -> String {
    if s.is_empty() {
        return "*(empty)*".into();
    }
    let mut out = escape_line(s, Some(MAX_CELL_CHARS));
    if s.chars().count() > MAX_CELL_CHARS {
        use sha2::Digest;
        let digest: String = sha2::Sha256::digest(s.as_bytes()).iter().take(6).map(|b| format!("{b:02x}")).collect();
        out.push_str(&format!(" (cut; SHA-256 {digest})"));
    }
    out
}

/// The characters [`markdown_safe`] keeps of a name.
pub const MAX_CELL_CHARS: usize = 200;

/// Manifest prose for a table cell (owner, trained by): its lines joined with ` / `, each escaped
/// as in [`markdown_line`], so a line break can never end the row or the table.
pub fn markdown_cell_text(s: &str) -> String {
    s.lines().map(str::trim).filter(|l| !l.is_empty()).map(|l| escape_line(l, None)).collect::<Vec<_>>().join(" / ")
}

/// [`markdown_safe`] without the length bound, for sentences the tool writes itself (findings,
/// environment descriptions) that embed untrusted names.
pub fn markdown_line(s: &str) -> String {
    escape_line(s, None)
}

/// Long prose from the manifest (description, intended use...): kept whole, each line escaped as
/// in [`markdown_safe`] (and a leading list or heading marker neutralised), lines of one
/// paragraph kept together and paragraphs (separated by blank lines) rendered as paragraphs.
pub fn markdown_text(s: &str) -> String {
    let mut paragraphs: Vec<Vec<String>> = vec![Vec::new()];
    for line in s.lines() {
        let line = line.trim();
        if line.is_empty() {
            if paragraphs.last().is_some_and(|p| !p.is_empty()) {
                paragraphs.push(Vec::new());
            }
            continue;
        }
        let mut escaped = escape_line(line, None);
        // A line starting "- ", "+ ", "1. ", "1) " or "=" would open a list or underline a heading.
        let digits = escaped.chars().take_while(char::is_ascii_digit).count();
        if escaped.starts_with('-') || escaped.starts_with('+') || escaped.starts_with('=') {
            escaped.insert(0, '\\');
        } else if digits > 0 && matches!(escaped[digits..].chars().next(), Some('.') | Some(')')) {
            escaped.insert(digits, '\\');
        }
        if let Some(p) = paragraphs.last_mut() {
            p.push(escaped);
        }
    }
    paragraphs.into_iter().filter(|p| !p.is_empty()).map(|p| p.join("\n")).collect::<Vec<_>>().join("\n\n")
}

/// A markdown code span showing `s` verbatim (paths, commands): no backslash escapes, which a
/// code span would show literally; a fence longer than any backtick run inside; control
/// characters as visible escapes; `|` escaped so the span can sit in a table cell.
pub fn code_span(s: &str) -> String {
    let body: String = terminal_safe(s).replace('|', "\\|");
    let longest = body.split(|c| c != '`').map(str::len).max().unwrap_or(0);
    let fence = "`".repeat(longest + 1);
    let pad = if body.starts_with('`') || body.ends_with('`') { " " } else { "" };
    format!("{fence}{pad}{body}{pad}{fence}")
}

/// Whether the characters before position `i` of `chars` end in `www` (any case).
fn after_www(chars: &[char], i: usize) -> bool {
    i >= 3 && chars[i - 3..i].iter().collect::<String>().eq_ignore_ascii_case("www")
}

fn escape_line(s: &str, max: Option<usize>) -> String {
    let mut out = String::with_capacity(s.len());
    let chars: Vec<char> = s.chars().collect();
    for (i, &c) in chars.iter().enumerate() {
        if Some(i) == max {
            out.push('…');
            break;
        }
        match c {
            // What GitHub-flavoured autolinks start from (`scheme://`, `www.`, `user@host`):
            // backslash-escaped, the text stays as it reads but is no longer a link.
            ':' if chars.get(i + 1..i + 3) == Some(&['/', '/']) => out.push_str("\\:"),
            '.' if after_www(&chars, i) => out.push_str("\\."),
            '@' => out.push_str("\\@"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '&' => out.push_str("&amp;"),
            '|' => out.push_str("&#124;"),
            '\\' | '`' | '*' | '_' | '[' | ']' | '(' | ')' | '#' | '!' | '~' | '{' | '}' => {
                out.push('\\');
                out.push(c);
            }
            '\n' => out.push_str("\\\\n"),
            '\r' => out.push_str("\\\\r"),
            c if c.is_control() || matches!(c, '\u{200b}'..='\u{200f}' | '\u{202a}'..='\u{202e}' | '\u{2066}'..='\u{2069}') => {
                out.push_str(&format!("U+{:04X}", c as u32));
            }
            c => out.push(c),
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn terminal_text_has_no_control_characters() {
        let s = terminal_safe("a\u{1b}[31mred\nx");
        assert!(!s.chars().any(char::is_control), "{s}");
    }

    #[test]
    fn long_text_keeps_every_word_and_its_paragraphs() {
        let long = "word ".repeat(100);
        let text = format!("First line\nsame paragraph\n\n- not a list\n1. not a list either\n\n{long}");
        let out = markdown_text(&text);
        assert_eq!(out.matches("word").count(), 100);
        assert!(out.starts_with("First line\nsame paragraph\n\n\\- not a list\n1\\. not a list"), "{out}");
        assert!(!out.contains("\\n"), "{out}");
    }

    #[test]
    fn code_spans_show_paths_verbatim() {
        assert_eq!(code_span("../data/breast_cancer.parquet"), "`../data/breast_cancer.parquet`");
        assert_eq!(code_span("a`b"), "``a`b``");
        assert_eq!(code_span("x|y"), "`x\\|y`");
    }

    #[test]
    fn names_stay_told_apart_when_empty_or_cut() {
        assert_eq!(markdown_safe(""), "*(empty)*");
        let (a, b) = (format!("{}a", "x".repeat(250)), format!("{}b", "x".repeat(250)));
        let (sa, sb) = (markdown_safe(&a), markdown_safe(&b));
        assert_ne!(sa, sb);
        assert!(sa.starts_with(&"x".repeat(200)) && sa.contains("… (cut; SHA-256 "), "{sa}");
        assert_eq!(markdown_safe("short"), "short");
    }

    #[test]
    fn multi_line_prose_stays_in_one_cell() {
        assert_eq!(markdown_cell_text("Ann\n\n| x | y |\n## Approved"), "Ann / &#124; x &#124; y &#124; / \\#\\# Approved");
    }

    #[test]
    fn markdown_text_cannot_open_links_html_or_rows() {
        let s = markdown_safe("[click](http://x) <script>|\n# Approved");
        for bad in ["<", ">", "\n", "](", "|"] {
            assert!(!s.contains(bad), "{bad:?} in {s}");
        }
    }
}
