//! Preprocessing fitted on training rows only: median imputation plus a missing-indicator for
//! numeric columns, standardisation (a zero-variance column gets scale 1), and one-hot encoding of
//! categories with a bucket for levels unseen in training (missing categories take the most
//! frequent level plus an indicator). The fitted [`Preprocessor`] is plain data, stored with each
//! model, so scoring new rows later applies exactly the same transformation. Fitting and encoding
//! work one feature column at a time, so the matrices can be built from a file read column by
//! column ([`Preprocessor::transform_source`]).

use serde::{Deserialize, Serialize};
use std::collections::{BTreeMap, HashMap};
use std::path::Path;

use super::roles::Feature;
use super::source::ColumnSource;
use super::table::{Column, ColumnValues, Table};
use crate::error::{Error, Result};

/// A dense row-major f32 matrix.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Matrix {
    pub rows: usize,
    pub cols: usize,
    pub data: Vec<f32>,
}

impl Matrix {
    pub fn zeros(rows: usize, cols: usize) -> Self {
        Matrix { rows, cols, data: vec![0.0; rows * cols] }
    }

    pub fn row(&self, r: usize) -> &[f32] {
        &self.data[r * self.cols..(r + 1) * self.cols]
    }
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "encoding", rename_all = "snake_case")]
pub enum InputEncoding {
    Numeric {
        name: String,
        /// Median of the training values, used for missing values.
        impute: f64,
        mean: f64,
        scale: f64,
        /// Whether a missing-indicator column follows the standardised value.
        indicator: bool,
        train_min: f64,
        train_max: f64,
    },
    Categorical {
        name: String,
        /// Training levels, most frequent first; one output each, then the unseen bucket.
        levels: Vec<String>,
        /// Index into `levels` used for missing values (the most frequent level).
        impute: usize,
        indicator: bool,
    },
}

impl InputEncoding {
    pub fn name(&self) -> &str {
        match self {
            InputEncoding::Numeric { name, .. } | InputEncoding::Categorical { name, .. } => name,
        }
    }

    pub fn width(&self) -> usize {
        match self {
            InputEncoding::Numeric { indicator, .. } => 1 + *indicator as usize,
            InputEncoding::Categorical { levels, indicator, .. } => levels.len() + 1 + *indicator as usize,
        }
    }
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Preprocessor {
    pub inputs: Vec<InputEncoding>,
    /// Names of the matrix columns, e.g. `income`, `income:missing`, `region=north`, `region=<unseen>`.
    pub output_names: Vec<String>,
}

/// What a transformation met that training did not.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct TransformReport {
    /// Rows per column whose category was not seen in training.
    pub unseen_levels: BTreeMap<String, usize>,
    /// Rows with at least one numeric value outside the training range.
    pub out_of_range_rows: usize,
    pub out_of_range: Vec<bool>,
    /// Rows per column with no value in a column that was never missing in training: imputed,
    /// with no missing-value indicator to tell the network (its scores there are extrapolation).
    pub imputed_unseen_missing: BTreeMap<String, usize>,
    /// Per row, the columns that flagged it (only from [`Preprocessor::transform`], which scoring
    /// uses; training's transforms leave it empty).
    #[serde(skip)]
    pub row_flags: Vec<RowFlags>,
}

/// The columns that flagged one scored row, each list in the preprocessor's input order.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct RowFlags {
    /// Numeric columns whose value lies outside the training range.
    pub out_of_range: Vec<String>,
    /// Columns with no value, filled with the training fill value.
    pub imputed: Vec<String>,
    /// Categorical columns holding a level unseen in training.
    pub unseen_level: Vec<String>,
}

/// Minimum, median (linear interpolation, as `quantile_sorted(_, 0.5)` on the sorted values) and
/// maximum of non-empty `values`, by selection instead of a full sort.
fn min_median_max(values: &[f64]) -> (f64, f64, f64) {
    let (min, max) = super::order::min_max(values).unwrap_or((f64::NAN, f64::NAN));
    (min, super::order::quantile(values, 0.5), max)
}

fn observed(col: &Column, rows: &[usize]) -> Vec<f64> {
    rows.iter().filter_map(|&r| col.number(r)).collect()
}

/// Fits one feature's encoding on the training rows `rows` of its column.
pub fn fit_feature(col: &Column, f: &Feature, rows: &[usize], file: &Path) -> Result<InputEncoding> {
    let has_missing = rows.iter().any(|&r| !col.is_valid(r));
    if f.categorical {
        let mut counts: BTreeMap<String, usize> = BTreeMap::new();
        for &r in rows {
            if let Some(l) = col.label(r) {
                *counts.entry(l).or_default() += 1;
            }
        }
        if counts.is_empty() {
            return Err(Error::data(file, Some(&f.name), "has no values in the training rows"));
        }
        let mut levels: Vec<(String, usize)> = counts.into_iter().collect();
        levels.sort_by(|a, b| b.1.cmp(&a.1).then_with(|| a.0.cmp(&b.0)));
        Ok(InputEncoding::Categorical {
            name: f.name.clone(),
            levels: levels.into_iter().map(|(l, _)| l).collect(),
            impute: 0,
            indicator: has_missing,
        })
    } else {
        if col.is_text() {
            return Err(Error::data(file, Some(&f.name), "is text but was expected to be numeric"));
        }
        let values = observed(col, rows);
        if values.is_empty() {
            return Err(Error::data(file, Some(&f.name), "has no values in the training rows"));
        }
        let n = values.len() as f64;
        let mean = values.iter().sum::<f64>() / n;
        let var = values.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / n;
        let std = var.sqrt();
        let (train_min, impute, train_max) = min_median_max(&values);
        Ok(InputEncoding::Numeric {
            name: f.name.clone(),
            impute,
            mean,
            scale: if std > 0.0 && std.is_finite() { std } else { 1.0 },
            indicator: has_missing,
            train_min,
            train_max,
        })
    }
}

impl Preprocessor {
    /// Fits the encodings on the training rows `rows` of `table`.
    pub fn fit(table: &Table, features: &[Feature], rows: &[usize], file: &Path) -> Result<Self> {
        let mut inputs = Vec::with_capacity(features.len());
        for f in features {
            let col = table.column(&f.name).ok_or_else(|| Error::data(file, Some(&f.name), "is missing"))?;
            inputs.push(fit_feature(col, f, rows, file)?);
        }
        Ok(Preprocessor::from_inputs(inputs))
    }

    /// The preprocessor of fitted encodings, in feature order.
    pub fn from_inputs(inputs: Vec<InputEncoding>) -> Self {
        let mut output_names = Vec::new();
        for enc in &inputs {
            match enc {
                InputEncoding::Numeric { name, indicator, .. } => {
                    output_names.push(name.clone());
                    if *indicator {
                        output_names.push(format!("{name}:missing"));
                    }
                }
                InputEncoding::Categorical { name, levels, indicator, .. } => {
                    output_names.extend(levels.iter().map(|l| format!("{name}={l}")));
                    output_names.push(format!("{name}=<unseen>"));
                    if *indicator {
                        output_names.push(format!("{name}:missing"));
                    }
                }
            }
        }
        Preprocessor { inputs, output_names }
    }

    pub fn width(&self) -> usize {
        self.inputs.iter().map(InputEncoding::width).sum()
    }

    /// Encodes rows `rows` of `table` (any table with the training columns, by name).
    pub fn transform(&self, table: &Table, rows: &[usize], file: &Path) -> Result<(Matrix, TransformReport)> {
        let mut out = Encoded::new(self.width(), rows);
        out.report.row_flags = vec![RowFlags::default(); rows.len()];
        let mut offset = 0;
        for enc in &self.inputs {
            let name = enc.name();
            let col = table.column(name).ok_or_else(|| Error::data(file, Some(name), "is missing: the model was trained with it"))?;
            out.encode(enc, col, offset, file)?;
            offset += enc.width();
        }
        Ok(out.finish())
    }

    /// Encodes each row list of `parts` into its own matrix, reading `source` a few feature columns
    /// at a time (`columns_per_read`): only the matrices and those decoded columns are ever held. Bit for bit what
    /// [`Preprocessor::transform`] gives for each part on the whole table.
    pub fn transform_source(&self, source: &dyn ColumnSource, parts: &[&[usize]]) -> Result<Vec<(Matrix, TransformReport)>> {
        let width = self.width();
        let mut outs: Vec<Encoded> = parts.iter().map(|rows| Encoded::new(width, rows)).collect();
        let mut offset = 0;
        for window in self.inputs.chunks(super::source::columns_per_read(source.rows(), 1)) {
            let names: Vec<&str> = window.iter().map(InputEncoding::name).collect();
            let columns = source.columns(&names)?;
            for (enc, col) in window.iter().zip(&columns) {
                for out in &mut outs {
                    out.encode(enc, col, offset, source.path())?;
                }
                offset += enc.width();
            }
        }
        Ok(outs.into_iter().map(Encoded::finish).collect())
    }
}

/// A matrix being filled one input encoding (one column's block of outputs) at a time.
struct Encoded<'a> {
    rows: &'a [usize],
    m: Matrix,
    report: TransformReport,
}

impl<'a> Encoded<'a> {
    fn new(width: usize, rows: &'a [usize]) -> Self {
        Encoded {
            rows,
            m: Matrix::zeros(rows.len(), width),
            report: TransformReport { out_of_range: vec![false; rows.len()], ..Default::default() },
        }
    }

    fn finish(mut self) -> (Matrix, TransformReport) {
        self.report.out_of_range_rows = self.report.out_of_range.iter().filter(|&&x| x).count();
        (self.m, self.report)
    }

    /// Writes `enc` of `col` (rows indexed as in the whole table) into the outputs from `offset`.
    fn encode(&mut self, enc: &InputEncoding, col: &Column, offset: usize, file: &Path) -> Result<()> {
        let (rows, m, report) = (self.rows, &mut self.m, &mut self.report);
        let width = m.cols;
        let name = enc.name();
        match enc {
            InputEncoding::Numeric { impute, mean, scale, indicator, train_min, train_max, .. } => {
                if col.is_text() {
                    return Err(Error::data(
                        file,
                        Some(name),
                        format!("has type {} but the model was trained on numbers", col.source_type),
                    ));
                }
                let mut imputed = 0usize;
                for (i, &r) in rows.iter().enumerate() {
                    let (value, missing) = match col.number(r) {
                        Some(v) if v.is_finite() => (v, false),
                        Some(v) => return Err(Error::data(file, Some(name), format!("row {r} holds {v}; tabcard needs finite numbers"))),
                        None => (*impute, true),
                    };
                    if !missing && (value < *train_min || value > *train_max) {
                        report.out_of_range[i] = true;
                        if let Some(flags) = report.row_flags.get_mut(i) {
                            flags.out_of_range.push(name.to_string());
                        }
                    }
                    if missing {
                        if let Some(flags) = report.row_flags.get_mut(i) {
                            flags.imputed.push(name.to_string());
                        }
                    }
                    let standardised = ((value - mean) / scale) as f32;
                    if !standardised.is_finite() {
                        return Err(Error::data(file, Some(name), format!(
                            "row {r} holds {value:e}, which standardises to {:e} (mean {mean:e}, scale {scale:e}): beyond single precision; rescale the column",
                            (value - mean) / scale
                        )));
                    }
                    m.data[i * width + offset] = standardised;
                    if *indicator {
                        m.data[i * width + offset + 1] = missing as u8 as f32;
                    } else if missing {
                        imputed += 1;
                    }
                }
                if imputed > 0 {
                    report.imputed_unseen_missing.insert(name.to_string(), imputed);
                }
            }
            InputEncoding::Categorical { levels, impute, indicator, .. } => {
                let index: HashMap<&str, usize> = levels.iter().enumerate().map(|(i, l)| (l.as_str(), i)).collect();
                let unseen_slot = levels.len();
                // Text columns map codes once; other columns render each value as a label.
                let code_slots: Option<Vec<usize>> = match &col.values {
                    ColumnValues::Text { levels: own, .. } => {
                        Some(own.iter().map(|l| index.get(l.as_str()).copied().unwrap_or(unseen_slot)).collect())
                    }
                    _ => None,
                };
                let (mut unseen, mut imputed) = (0usize, 0usize);
                for (i, &r) in rows.iter().enumerate() {
                    let slot = if !col.is_valid(r) {
                        if let Some(flags) = report.row_flags.get_mut(i) {
                            flags.imputed.push(name.to_string());
                        }
                        if *indicator {
                            m.data[i * width + offset + levels.len() + 1] = 1.0;
                        } else {
                            imputed += 1;
                        }
                        *impute
                    } else if let (Some(slots), ColumnValues::Text { codes, .. }) = (&code_slots, &col.values) {
                        slots[codes[r] as usize]
                    } else {
                        let label = col.label(r).unwrap_or_default();
                        index.get(label.as_str()).copied().unwrap_or(unseen_slot)
                    };
                    if slot == unseen_slot {
                        unseen += 1;
                        if let Some(flags) = report.row_flags.get_mut(i) {
                            flags.unseen_level.push(name.to_string());
                        }
                    }
                    m.data[i * width + offset + slot] = 1.0;
                }
                if unseen > 0 {
                    report.unseen_levels.insert(name.to_string(), unseen);
                }
                if imputed > 0 {
                    report.imputed_unseen_missing.insert(name.to_string(), imputed);
                }
            }
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::metrics::bootstrap::quantile_sorted;

    #[test]
    fn selection_gives_the_sorted_order_statistics() {
        let mut s = crate::rng::Stream::new(3, crate::rng::Purpose::DemoData);
        for n in [1usize, 2, 3, 10, 11, 1000, 1001] {
            let values: Vec<f64> = (0..n)
                .map(|i| match i % 7 {
                    0 => 0.5,
                    3 => -0.0,
                    5 => 0.0,
                    _ => s.normal(),
                })
                .collect();
            let mut sorted = values.clone();
            sorted.sort_by(f64::total_cmp);
            let (min, median, max) = min_median_max(&values);
            let want = (sorted[0].to_bits(), quantile_sorted(&sorted, 0.5).to_bits(), sorted[n - 1].to_bits());
            assert_eq!((min.to_bits(), median.to_bits(), max.to_bits()), want, "n = {n}");
        }
    }
}
