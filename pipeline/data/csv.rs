//! Writing a table of Arrow columns as CSV (RFC 4180): a header row, one line per row, fields
//! holding a comma, a double quote or a line break quoted with inner quotes doubled, nulls as empty
//! fields, floats in the shortest form that reads back to the same value.

use arrow::array::{Array, ArrayRef, BooleanArray, Float64Array, Int64Array, StringArray};
use std::fmt::Write;

use crate::error::{Error, Result};

fn field(out: &mut String, text: &str) {
    if text.contains([',', '"', '\n', '\r']) {
        out.push('"');
        out.push_str(&text.replace('"', "\"\""));
        out.push('"');
    } else {
        out.push_str(text);
    }
}

/// The characters that make a spreadsheet read a cell as a formula (or, for tab and carriage
/// return, hide one); the common guard prefixes such a text cell with `'`, which spreadsheets show
/// as text and do not display.
const FORMULA_STARTS: [char; 6] = ['=', '+', '-', '@', '\t', '\r'];

/// Text written as a spreadsheet shows it as text: with the guard, a leading `'` before a
/// formula start (see [`FORMULA_STARTS`]); unchanged otherwise.
fn guarded_text(text: &str, guard: bool) -> String {
    if guard && text.starts_with(FORMULA_STARTS) {
        format!("'{text}")
    } else {
        text.to_string()
    }
}

/// One cell of `column` at `row` as CSV text (empty for null); the formula guard applies to text
/// cells only, never to numbers such as -5.
fn cell(column: &ArrayRef, row: usize, guard: bool) -> Result<String> {
    if column.is_null(row) {
        return Ok(String::new());
    }
    let any = column.as_any();
    if let Some(a) = any.downcast_ref::<Float64Array>() {
        return Ok(format!("{:?}", a.value(row)));
    }
    if let Some(a) = any.downcast_ref::<Int64Array>() {
        return Ok(a.value(row).to_string());
    }
    if let Some(a) = any.downcast_ref::<BooleanArray>() {
        return Ok(a.value(row).to_string());
    }
    if let Some(a) = any.downcast_ref::<StringArray>() {
        return Ok(guarded_text(a.value(row), guard));
    }
    Err(Error::Usage(format!(
        "CSV output of a {} column is not supported; write Parquet (--out with .parquet) instead",
        column.data_type()
    )))
}

/// The columns (equal lengths) as CSV text, with the spreadsheet formula guard on text cells and
/// column names when `guard`.
pub(crate) fn encode_with(columns: &[(String, ArrayRef)], guard: bool) -> Result<String> {
    let rows = columns.first().map_or(0, |(_, c)| c.len());
    let mut out = String::new();
    for (i, (name, _)) in columns.iter().enumerate() {
        if i > 0 {
            out.push(',');
        }
        field(&mut out, &guarded_text(name, guard));
    }
    out.push('\n');
    for row in 0..rows {
        for (i, (_, column)) in columns.iter().enumerate() {
            if i > 0 {
                out.push(',');
            }
            field(&mut out, &cell(column, row, guard)?);
        }
        let _ = out.write_char('\n');
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::sync::Arc;

    #[test]
    fn the_formula_guard_prefixes_text_cells_only() {
        let columns: Vec<(String, ArrayRef)> = vec![
            ("=name".into(), Arc::new(StringArray::from(vec!["=HYPERLINK(\"http://x\")", "+1", "-x", "@SUM(A1)", "plain", "a-b"]))),
            ("n".into(), Arc::new(Int64Array::from(vec![-5, 1, 2, 3, 4, 5]))),
            ("p".into(), Arc::new(Float64Array::from(vec![-0.5, 1.0, 2.0, 3.0, 4.0, 5.0]))),
        ];
        let guarded = encode_with(&columns, true).unwrap();
        let lines: Vec<&str> = guarded.lines().collect();
        assert_eq!(lines[0], "'=name,n,p");
        assert_eq!(lines[1], "\"'=HYPERLINK(\"\"http://x\"\")\",-5,-0.5", "numbers keep their sign");
        assert_eq!(&lines[2..], ["'+1,1,1.0", "'-x,2,2.0", "'@SUM(A1),3,3.0", "plain,4,4.0", "a-b,5,5.0"]);
        assert!(encode_with(&columns, false).unwrap().starts_with("=name,n,p\n\"=HYPERLINK"), "off by default");
    }

    #[test]
    fn quotes_nulls_and_round_trip_floats() {
        let columns: Vec<(String, ArrayRef)> = vec![
            ("id".into(), Arc::new(StringArray::from(vec![Some("a,b"), Some("say \"hi\""), None]))),
            ("p".into(), Arc::new(Float64Array::from(vec![Some(0.1), None, Some(1e-7)]))),
            ("n".into(), Arc::new(Int64Array::from(vec![Some(-3), Some(0), None]))),
            ("flag".into(), Arc::new(BooleanArray::from(vec![Some(true), Some(false), None]))),
        ];
        let text = encode_with(&columns, false).unwrap();
        assert_eq!(text, "id,p,n,flag\n\"a,b\",0.1,-3,true\n\"say \"\"hi\"\"\",,0,false\n,1e-7,,\n");
        assert_eq!("1e-7".parse::<f64>().unwrap(), 1e-7);
    }
}
