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

/// One cell of `column` at `row` as CSV text (empty for null).
fn cell(column: &ArrayRef, row: usize) -> Result<String> {
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
        return Ok(a.value(row).to_string());
    }
    Err(Error::Usage(format!(
        "CSV output of a {} column is not supported; write Parquet (--out with .parquet) instead",
        column.data_type()
    )))
}

/// The columns (equal lengths) as CSV text.
pub fn encode(columns: &[(String, ArrayRef)]) -> Result<String> {
    let rows = columns.first().map_or(0, |(_, c)| c.len());
    let mut out = String::new();
    for (i, (name, _)) in columns.iter().enumerate() {
        if i > 0 {
            out.push(',');
        }
        field(&mut out, name);
    }
    out.push('\n');
    for row in 0..rows {
        for (i, (_, column)) in columns.iter().enumerate() {
            if i > 0 {
                out.push(',');
            }
            field(&mut out, &cell(column, row)?);
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
    fn quotes_nulls_and_round_trip_floats() {
        let columns: Vec<(String, ArrayRef)> = vec![
            ("id".into(), Arc::new(StringArray::from(vec![Some("a,b"), Some("say \"hi\""), None]))),
            ("p".into(), Arc::new(Float64Array::from(vec![Some(0.1), None, Some(1e-7)]))),
            ("n".into(), Arc::new(Int64Array::from(vec![Some(-3), Some(0), None]))),
            ("flag".into(), Arc::new(BooleanArray::from(vec![Some(true), Some(false), None]))),
        ];
        let text = encode(&columns).unwrap();
        assert_eq!(text, "id,p,n,flag\n\"a,b\",0.1,-3,true\n\"say \"\"hi\"\"\",,0,false\n,1e-7,,\n");
        assert_eq!("1e-7".parse::<f64>().unwrap(), 1e-7);
    }
}
