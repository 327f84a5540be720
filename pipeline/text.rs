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
/// become visible escapes, and the length is bounded. The result renders as the literal text.
pub fn markdown_safe(s: &str) -> String {
    const MAX: usize = 200;
    let mut out = String::with_capacity(s.len());
    for (i, c) in s.chars().enumerate() {
        if i == MAX {
            out.push('…');
            break;
        }
        match c {
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '&' => out.push_str("&amp;"),
            '"' => out.push_str("&quot;"),
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
    fn markdown_text_cannot_open_links_html_or_rows() {
        let s = markdown_safe("[click](http://x) <script>|\n# Approved");
        for bad in ["<", ">", "\n", "](", "|"] {
            assert!(!s.contains(bad), "{bad:?} in {s}");
        }
    }
}
