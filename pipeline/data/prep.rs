//! Preprocessing fitted on training rows only: median imputation plus a missing-indicator for
//! numeric columns, standardisation (a zero-variance column gets scale 1), and one-hot encoding of
//! categories with a bucket for levels unseen in training (missing categories take the most
//! frequent level plus an indicator). The fitted [`Preprocessor`] is plain data, stored with each
//! model, so scoring new rows later applies exactly the same transformation. Fitting and encoding
//! work one feature column at a time, so the matrices can be built from a file read column by
//! column ([`Preprocessor::transform_source`]).

use rayon::prelude::*;
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

    /// The rows at `positions`, in that order.
    pub fn rows_at(&self, positions: &[usize]) -> Matrix {
        let data = positions.iter().flat_map(|&p| self.row(p).iter().copied()).collect();
        Matrix { rows: positions.len(), cols: self.cols, data }
    }
}

/// Whether two runs of inputs differ in any bit (a row whose inputs do not keeps its outputs).
pub fn bits_differ(a: &[f32], b: &[f32]) -> bool {
    a.iter().zip(b).any(|(x, y)| x.to_bits() != y.to_bits())
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
    ///
    /// Windows of columns are read and encoded on a helper pool, as many at once as it has
    /// threads (each into blocks of its own columns), then copied into place in column order; the
    /// matrices and reports are the ones a window-by-window pass gives, and an error is the first
    /// in column order.
    pub fn transform_source(&self, source: &(dyn ColumnSource + Sync), parts: &[&[usize]]) -> Result<Vec<(Matrix, TransformReport)>> {
        let per_read = super::source::columns_per_read(source.rows(), 1);
        // A thread holds a window's decoded columns (f64 values and validity) and its blocks.
        let part_rows: usize = parts.iter().map(|p| p.len()).sum();
        let widest = self.windows(per_read).iter().map(|w| w.width).max().unwrap_or(0);
        let per_thread = (source.rows() as u64 * 16).saturating_mul(per_read as u64) + (part_rows as u64) * (4 * widest as u64 + 1);
        let pool = crate::threads::helper_pool(per_thread, "encode the matrices' columns")?;
        let matrices = self.transform_source_on(&pool, source, parts);
        // The threads' decoded columns were freed into their own heaps; hand them back before
        // the matrices are put to work.
        crate::memory::return_freed_memory();
        matrices
    }

    /// [`Preprocessor::transform_source`] on `pool`.
    fn transform_source_on(
        &self,
        pool: &rayon::ThreadPool,
        source: &(dyn ColumnSource + Sync),
        parts: &[&[usize]],
    ) -> Result<Vec<(Matrix, TransformReport)>> {
        let width = self.width();
        let mut outs: Vec<Encoded> = parts.iter().map(|rows| Encoded::new(width, rows)).collect();
        let windows = self.windows(super::source::columns_per_read(source.rows(), 1));
        let encode_window = |window: &Window| -> Result<Vec<Encoded>> {
            let names: Vec<&str> = window.inputs.iter().map(InputEncoding::name).collect();
            let columns = source.columns(&names)?;
            let mut blocks: Vec<Encoded> = parts.iter().map(|rows| Encoded::new(window.width, rows)).collect();
            let mut at = 0;
            for (enc, col) in window.inputs.iter().zip(&columns) {
                for block in &mut blocks {
                    block.encode(enc, col, at, source.path())?;
                }
                at += enc.width();
            }
            Ok(blocks)
        };
        for batch in windows.chunks(pool.current_num_threads()) {
            let encoded: Vec<Result<Vec<Encoded>>> = pool.install(|| batch.par_iter().map(encode_window).collect());
            for (window, blocks) in batch.iter().zip(encoded) {
                for (out, block) in outs.iter_mut().zip(blocks?) {
                    pool.install(|| out.absorb(block, window.offset));
                }
            }
        }
        Ok(outs.into_iter().map(Encoded::finish).collect())
    }

    /// The inputs in windows of `per_read` columns (one read each), with where each window's
    /// outputs start and how many there are.
    fn windows(&self, per_read: usize) -> Vec<Window<'_>> {
        self.inputs
            .chunks(per_read)
            .scan(0, |offset, inputs| {
                let width = inputs.iter().map(InputEncoding::width).sum::<usize>();
                let window = Window { offset: *offset, width, inputs };
                *offset += width;
                Some(window)
            })
            .collect()
    }
}

/// Feature columns read together, and the outputs they fill.
struct Window<'a> {
    offset: usize,
    width: usize,
    inputs: &'a [InputEncoding],
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

    /// Takes in `block`, the same rows encoded for the columns from `offset` on: its values copied
    /// into place (row bands in parallel on the current pool, so the fresh pages they touch are
    /// faulted in on every thread), its flags and counts merged.
    fn absorb(&mut self, block: Encoded, offset: usize) {
        let (width, block_width) = (self.m.cols, block.m.cols);
        if block_width > 0 {
            const BAND_ROWS: usize = 4096;
            self.m.data.par_chunks_mut(BAND_ROWS * width).zip(block.m.data.par_chunks(BAND_ROWS * block_width)).for_each(|(out, from)| {
                for (row, values) in out.chunks_exact_mut(width).zip(from.chunks_exact(block_width)) {
                    row[offset..offset + block_width].copy_from_slice(values);
                }
            });
        }
        for (flag, &out_of_range) in self.report.out_of_range.iter_mut().zip(&block.report.out_of_range) {
            *flag |= out_of_range;
        }
        self.report.unseen_levels.extend(block.report.unseen_levels);
        self.report.imputed_unseen_missing.extend(block.report.imputed_unseen_missing);
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

    /// A Parquet file of 160,000 rows: 26 numeric columns (some with missing values, some with
    /// values beyond the first rows' range, `nan_in` holding a NaN in row 99,999) and two text
    /// columns (missing values, and a level the first rows never hold). At this length a read
    /// takes 13 whole columns, so the 28 columns are three windows.
    fn mixed_file(dir: &Path, nan_in: &[usize]) -> (std::path::PathBuf, Vec<Feature>) {
        use arrow::array::{ArrayRef, Float64Array, StringArray};
        use std::sync::Arc;
        let rows = 160_000;
        let mut stream = crate::rng::Stream::new(8, crate::rng::Purpose::DemoData);
        let mut columns: Vec<(String, ArrayRef)> = Vec::new();
        let mut features = Vec::new();
        for c in 0..26 {
            let values: Vec<Option<f64>> = (0..rows)
                .map(|r| {
                    let v = stream.normal() * (c + 1) as f64;
                    match r {
                        99_999 if nan_in.contains(&c) => Some(f64::NAN),
                        _ if c % 3 == 0 && r % 17 == 5 => None,
                        _ if r > 100_000 && r % 1_001 == 0 => Some(v * 50.0),
                        _ => Some(v),
                    }
                })
                .collect();
            columns.push((format!("n{c:02}"), Arc::new(Float64Array::from(values)) as ArrayRef));
            features.push(Feature { name: format!("n{c:02}"), categorical: false });
        }
        for c in 0..2 {
            let labels: Vec<Option<&str>> = (0..rows)
                .map(|r| match (r % 13, stream.below(3)) {
                    (4, _) => None,
                    _ if r > 120_000 && r % 7 == c => Some("unseen"),
                    (_, 0) => Some("a"),
                    (_, 1) => Some("b"),
                    _ => Some("c"),
                })
                .collect();
            columns.push((format!("c{c}"), Arc::new(StringArray::from(labels)) as ArrayRef));
            features.push(Feature { name: format!("c{c}"), categorical: true });
        }
        let path = dir.join("mixed.parquet");
        std::fs::write(&path, super::super::parquet::encode(columns, Default::default()).unwrap()).unwrap();
        (path, features)
    }

    /// Built column window by column window on pools of 1 to 3 threads, the matrices and reports
    /// are the ones the one-table transform gives, bit for bit.
    #[test]
    fn matrices_from_the_file_on_any_pool_equal_the_whole_table_transform() {
        let dir = tempfile::tempdir().unwrap();
        let (path, features) = mixed_file(dir.path(), &[]);
        let table = super::super::parquet::read_table(&path).unwrap();
        let first: Vec<usize> = (0..100_000).collect();
        let rest: Vec<usize> = (100_000..160_000).rev().chain([3, 5, 5]).collect();
        let pre = Preprocessor::fit(&table, &features, &first, &path).unwrap();
        let source = super::super::parquet::ParquetSource::open(&path).unwrap();
        assert_eq!(super::super::source::columns_per_read(source.rows(), 1), 13, "three windows");
        let wanted: Vec<(Matrix, TransformReport)> =
            [&first, &rest].iter().map(|rows| pre.transform(&table, rows, &path).unwrap()).collect();
        assert!(wanted[1].1.out_of_range_rows > 0 && !wanted[1].1.unseen_levels.is_empty() && wanted[0].1.unseen_levels.is_empty());
        for threads in 1..=3 {
            let pool = rayon::ThreadPoolBuilder::new().num_threads(threads).build().unwrap();
            let got = pre.transform_source_on(&pool, &source, &[&first, &rest]).unwrap();
            for ((m, report), (want_m, want_report)) in got.iter().zip(&wanted) {
                assert_eq!((m.rows, m.cols), (want_m.rows, want_m.cols));
                assert!(m.data.iter().zip(&want_m.data).all(|(a, b)| a.to_bits() == b.to_bits()), "{threads} threads");
                assert_eq!(report.out_of_range, want_report.out_of_range);
                assert_eq!(report.out_of_range_rows, want_report.out_of_range_rows);
                assert_eq!(report.unseen_levels, want_report.unseen_levels);
                assert_eq!(report.imputed_unseen_missing, want_report.imputed_unseen_missing);
            }
        }
    }

    /// Two bad columns in different windows: the error names the first in column order, on
    /// any pool.
    #[test]
    fn the_first_bad_column_is_the_one_reported_on_any_pool() {
        let dir = tempfile::tempdir().unwrap();
        let (path, features) = mixed_file(dir.path(), &[20, 4]);
        let first: Vec<usize> = (0..1_000).collect();
        let table = super::super::parquet::read_table(&path).unwrap();
        let pre = Preprocessor::fit(&table, &features, &first, &path).unwrap();
        let source = super::super::parquet::ParquetSource::open(&path).unwrap();
        let all: Vec<usize> = (0..source.rows()).collect();
        for threads in 1..=3 {
            let pool = rayon::ThreadPoolBuilder::new().num_threads(threads).build().unwrap();
            let message = pre.transform_source_on(&pool, &source, &[&all]).unwrap_err().to_string();
            assert!(message.contains("n04") && message.contains("row 99999"), "{threads} threads: {message}");
        }
    }

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
