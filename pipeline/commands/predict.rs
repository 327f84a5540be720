//! `tabcard predict <run or results folder> <input.parquet> --out <predictions.parquet|.csv>`: score
//! new rows with a stored model: the input schema is checked against the training schema, unseen
//! category levels go to the unseen bucket and are counted, numbers outside the training range
//! are flagged, and probabilities or predictions are written with the id columns, in the format
//! the output's extension names. The output never overwrites evidence: an existing file only with
//! `--force`, and never the input table or a path inside a results store.

use arrow::array::{ArrayRef, BooleanArray, Float64Array, Int64Array, StringArray};
use std::fmt::Write;
use std::path::Path;
use std::sync::Arc;

use crate::calibrate::CalibrationMap;
use crate::data::parquet::{encode_with_metadata, read_table, WriteOptions};
use crate::data::prep::{InputEncoding, RowFlags};
use crate::data::summary::DataSummary;
use crate::data::table::{Column, ColumnValues, Table};
use crate::error::{Error, Result};
use crate::manifest::Task;
use crate::output_schema as schema;
use crate::results::Sealed;
use crate::selection::deployed::mean_outputs;
use crate::selection::scoring::ScoringModel;
use crate::store::decision_log::{self, Scoring};
use crate::store::run::is_run_folder;
use crate::store::write_atomic;
use crate::text::terminal_safe;

pub struct PredictOptions {
    /// Copy input columns that are neither features nor ids into the output.
    pub keep_extra: bool,
    /// Replace an existing output file (never the input, never a file in a results store).
    pub force: bool,
    /// CSV only: prefix text cells (and names) that a spreadsheet would read as a formula with `'`.
    pub guard_formulas: bool,
    /// Binary models: decide at this threshold instead of the deployed one.
    pub threshold: Option<f64>,
    /// Give each row its principal reasons, at most this many, from this reference.
    pub reasons: Option<(usize, ReferenceChoice)>,
    /// Append this scoring to the hash-chained decision log at this path.
    pub log: Option<std::path::PathBuf>,
}

/// The reference row principal reasons are measured from.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ReferenceChoice {
    /// The training median row.
    Median,
    /// Binary models: the mean of the training rows scored at or just above the deployed threshold.
    Threshold,
}

impl ReferenceChoice {
    pub fn as_str(self) -> &'static str {
        match self {
            ReferenceChoice::Median => "median",
            ReferenceChoice::Threshold => "threshold",
        }
    }
}

/// The file formats `--out` can name by its extension.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum OutputFormat {
    Parquet,
    Csv,
}

impl OutputFormat {
    /// The format `path`'s extension names (`.parquet`, `.csv`; any case), else a usage error.
    pub fn of(path: &Path) -> Result<Self> {
        match path.extension().and_then(|e| e.to_str()).map(str::to_ascii_lowercase).as_deref() {
            Some("parquet") => Ok(OutputFormat::Parquet),
            Some("csv") => Ok(OutputFormat::Csv),
            _ => Err(Error::Usage(format!("--out {}: the extension names the format written: `.parquet` or `.csv`", path.display()))),
        }
    }
}

/// Refuses an output that would overwrite evidence or the input, before any scoring is done.
pub fn check_output(output: &Path, input: &Path, force: bool) -> Result<OutputFormat> {
    crate::store::check_output_path("--out", "the predictions", output, &[input], force)?;
    OutputFormat::of(output)
}

/// (experiment folder, run id) for a run folder or an experiment's results folder.
/// The sealed folder, the run to score, and whether the target was the whole results folder
/// (which deploys the ensemble when the selection holds one).
fn locate(target: &Path) -> Result<(Sealed, String, bool)> {
    if is_run_folder(target) {
        let id = target.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
        let root = target.parent().and_then(Path::parent).ok_or_else(|| Error::store(target, "is not inside a results folder"))?;
        return Ok((Sealed::open(root)?, id, false));
    }
    let folder = Sealed::open(target)?;
    let selected = folder.selection()?.selected_run;
    Ok((folder, selected, true))
}

fn numeric_kind(c: &Column) -> bool {
    !matches!(c.values, ColumnValues::Text { .. })
}

/// Every training feature must be present with a compatible type.
fn check_schema(table: &Table, summary: &DataSummary, inputs: &[InputEncoding], file: &Path) -> Result<()> {
    let missing: Vec<&str> = inputs.iter().map(InputEncoding::name).filter(|n| table.column(n).is_none()).collect();
    if !missing.is_empty() {
        return Err(Error::data(
            file,
            Some(missing[0]),
            format!(
                "is missing: the model was trained with it (missing: {})",
                missing.iter().map(|m| format!("`{}`", terminal_safe(m))).collect::<Vec<_>>().join(", ")
            ),
        ));
    }
    for enc in inputs {
        let name = enc.name();
        let Some(col) = table.column(name) else { continue };
        let trained = summary.columns.iter().find(|c| c.name == name).map(|c| c.kind.as_str()).unwrap_or("");
        let ok = match enc {
            InputEncoding::Numeric { .. } => numeric_kind(col),
            InputEncoding::Categorical { .. } => (trained == "string") == col.is_text(),
        };
        if !ok {
            return Err(Error::data(
                file,
                Some(name),
                format!("has type {} but the model was trained on a {trained} column", col.source_type),
            ));
        }
    }
    Ok(())
}

fn passthrough(col: &Column) -> ArrayRef {
    let n = col.len();
    match &col.values {
        ColumnValues::Float(v) => Arc::new(Float64Array::from((0..n).map(|r| col.is_valid(r).then(|| v[r])).collect::<Vec<_>>())),
        ColumnValues::Float32(v) => {
            Arc::new(Float64Array::from((0..n).map(|r| col.is_valid(r).then(|| f64::from(v[r]))).collect::<Vec<_>>()))
        }
        ColumnValues::Int(v) => Arc::new(Int64Array::from((0..n).map(|r| col.is_valid(r).then(|| v[r])).collect::<Vec<_>>())),
        ColumnValues::Bool(v) => Arc::new(BooleanArray::from((0..n).map(|r| col.is_valid(r).then(|| v[r])).collect::<Vec<_>>())),
        ColumnValues::Text { .. } => Arc::new(StringArray::from((0..n).map(|r| col.label(r)).collect::<Vec<_>>())),
    }
}

/// What scored the rows, for the output's metadata (Parquet) or its columns (CSV).
pub struct Provenance {
    pub model_id: String,
    pub results_digest: String,
    pub experiment: String,
    /// With `--reasons`: how they were computed.
    pub reasons: Option<String>,
}

impl Provenance {
    fn metadata(&self) -> Vec<(String, String)> {
        vec![
            (schema::META_SCHEMA_VERSION.into(), schema::VERSION.to_string()),
            (schema::META_MODEL_ID.into(), self.model_id.clone()),
            (schema::META_RESULTS_DIGEST.into(), self.results_digest.clone()),
            (schema::META_EXPERIMENT.into(), self.experiment.clone()),
        ]
        .into_iter()
        .chain(self.reasons.iter().map(|r| (schema::META_REASONS.into(), r.clone())))
        .collect()
    }

    /// The CSV form: the same three facts as constant columns.
    fn columns(&self, rows: usize) -> Vec<(String, ArrayRef)> {
        let constant = |v: &str| -> ArrayRef { Arc::new(StringArray::from(vec![v; rows])) };
        vec![
            (schema::MODEL_ID.into(), constant(&self.model_id)),
            (schema::RESULTS_DIGEST.into(), constant(&self.results_digest)),
            (schema::SCHEMA_VERSION.into(), Arc::new(Int64Array::from(vec![i64::from(schema::VERSION); rows]))),
        ]
    }
}

/// A list of column names as one JSON array text (`[]` when empty).
fn names_json(names: &[String]) -> String {
    serde_json::to_string(names).unwrap_or_else(|_| "[]".into())
}

/// What scoring produced: the output columns (scoring-output schema, see
/// [`crate::output_schema`]), what scored them, and the summary printed.
pub struct Scored {
    pub columns: Vec<(String, ArrayRef)>,
    pub provenance: Provenance,
    pub report: String,
    /// What the decision log records of this scoring (only with `--log`).
    pub scoring: Option<Scoring>,
    /// The results folder that scored.
    pub results_folder: std::path::PathBuf,
}

/// Scores `input` with the stored model `target` names.
pub fn score(target: &Path, input: &Path, options: &PredictOptions) -> Result<Scored> {
    let (folder, run_id, whole_folder) = locate(target)?;
    let summary: DataSummary = folder.summary()?;
    let run = folder.run(&run_id)?;
    let record = &folder.record;
    if !run.record.outcome.is_completed() {
        return Err(Error::store(&run.dir, format!("holds no model: the run {}", run.record.outcome.describe())));
    }
    let manifest = folder.manifest()?;
    let selection = folder.selection()?;
    let mut deployed = selection.deployed_threshold(folder.layout_version);
    if let Some(t) = options.threshold {
        if record.task != Task::Binary {
            return Err(Error::Usage(format!(
                "--threshold applies to binary models; this model is {} (a multiclass model decides the most probable class)",
                record.task.as_str()
            )));
        }
        if !(t > 0.0 && t < 1.0) {
            return Err(Error::Usage(format!("--threshold must be in (0, 1), got {t}")));
        }
        deployed.value = t;
    }
    // The calibration map and the interval were fitted for the selected run only.
    let is_selected = run_id == selection.selected_run;
    // A seed ensemble is deployed when the whole folder is named; each member keeps its own map.
    let ensemble = selection.ensemble.as_ref().filter(|_| whole_folder);
    let member_map = |id: &str| -> Option<&CalibrationMap> {
        match &selection.ensemble {
            Some(e) => e.members.iter().position(|m| m == id).and_then(|i| e.maps.get(i)),
            None => selection.calibration.as_ref().filter(|_| id == selection.selected_run).map(|c| &c.map),
        }
    };
    let map = member_map(&run_id);
    let interval = selection.interval.as_ref().filter(|_| if selection.ensemble.is_some() { ensemble.is_some() } else { is_selected });
    let mut model = ScoringModel::from_stored(&run)?;
    let table = read_table(input)?;
    if table.rows == 0 {
        return Err(Error::data(input, None, "has no rows"));
    }
    check_schema(&table, &summary, &model.preprocessor.inputs, input)?;
    let rows: Vec<usize> = (0..table.rows).collect();
    let (x, report) = model.preprocessor.transform(&table, &rows, input)?;
    // Scoring and the reasons' integrated gradients run on every core the process may use: a
    // row's outputs and gradients do not depend on the rows computed with it (nor on the thread).
    let pool = crate::threads::helper_pool(crate::analysis::SCORING_BYTES_PER_THREAD, "score the rows")?;
    let outputs = pool.install(|| -> Result<Vec<f64>> {
        Ok(match ensemble {
            Some(e) => {
                let mut scored = Vec::with_capacity(e.members.len());
                for id in &e.members {
                    let mut member = ScoringModel::from_stored(&folder.run(id)?)?;
                    scored.push(member.score_calibrated(&x, member_map(id))?);
                }
                mean_outputs(&scored.iter().map(Vec::as_slice).collect::<Vec<_>>())
            }
            None => model.score_calibrated(&x, map)?,
        })
    })?;
    let mut columns: Vec<(String, ArrayRef)> = Vec::new();
    for id in &record.ids {
        if let Some(col) = table.column(id) {
            columns.push((id.clone(), passthrough(col)));
        }
    }
    columns.push((schema::ROW.into(), Arc::new(Int64Array::from((0..table.rows as i64).collect::<Vec<_>>()))));
    let k = model.head.values_per_row();
    let labels = &record.class_labels;
    // Rows per decided class (by index), for the decision log.
    let mut decision_counts = vec![0usize; labels.len()];
    match record.task {
        Task::Regression => {
            columns.push((schema::PREDICTION.into(), Arc::new(Float64Array::from(outputs.clone()))));
            if let Some(i) = interval {
                let bound = |sign: f64| Arc::new(Float64Array::from(outputs.iter().map(|p| p + sign * i.half_width).collect::<Vec<_>>()));
                columns.push((schema::INTERVAL_LOWER.into(), bound(-1.0)));
                columns.push((schema::INTERVAL_UPPER.into(), bound(1.0)));
            }
        }
        task => {
            for (c, label) in labels.iter().enumerate() {
                if task == Task::Binary && c == 0 {
                    continue;
                }
                let p: Vec<f64> = outputs.chunks_exact(k).map(|r| r[c]).collect();
                columns.push((format!("{}{label}", schema::PROBABILITY_PREFIX), Arc::new(Float64Array::from(p))));
            }
            let decided: Vec<usize> = if task == Task::Binary {
                outputs.chunks_exact(k).map(|r| usize::from(r[1] >= deployed.value)).collect()
            } else {
                outputs.chunks_exact(k).map(crate::metrics::classification::argmax).collect()
            };
            for &c in &decided {
                decision_counts[c] += 1;
            }
            columns.push((
                schema::DECISION.into(),
                Arc::new(StringArray::from(decided.iter().map(|&c| labels[c].clone()).collect::<Vec<_>>())),
            ));
            if task == Task::Binary {
                columns.push((schema::DECISION_THRESHOLD.into(), Arc::new(Float64Array::from(vec![deployed.value; table.rows]))));
                let favourable = manifest.decision.as_ref().and_then(|d| d.favourable.as_ref());
                let flags: Vec<Option<bool>> = decided.iter().map(|&c| favourable.map(|f| labels[c] == *f)).collect();
                columns.push((schema::DECISION_FAVOURABLE.into(), Arc::new(BooleanArray::from(flags))));
            }
        }
    }
    columns.push((schema::OUTSIDE_TRAINING_RANGE.into(), Arc::new(BooleanArray::from(report.out_of_range.clone()))));
    for (name, pick) in [
        (schema::OUTSIDE_RANGE_COLUMNS, (|f: &RowFlags| &f.out_of_range) as fn(&RowFlags) -> &Vec<String>),
        (schema::IMPUTED_COLUMNS, |f: &RowFlags| &f.imputed),
        (schema::UNSEEN_LEVEL_COLUMNS, |f: &RowFlags| &f.unseen_level),
    ] {
        let texts: Vec<String> = report.row_flags.iter().map(|f| names_json(pick(f))).collect();
        columns.push((name.into(), Arc::new(StringArray::from(texts))));
    }
    if options.keep_extra {
        let used: Vec<&str> =
            model.preprocessor.inputs.iter().map(InputEncoding::name).chain(record.ids.iter().map(String::as_str)).collect();
        for col in table.columns.iter().filter(|c| !used.contains(&c.name.as_str())) {
            if columns.iter().any(|(n, _)| *n == col.name) || schema::FIXED_NAMES.contains(&col.name.as_str()) {
                return Err(Error::data(input, Some(&col.name), "clashes with an output column name"));
            }
            columns.push((col.name.clone(), passthrough(col)));
        }
    }
    // An id named like an output column (`ids = ["decision"]`) would give two columns of one name.
    for id in &record.ids {
        if columns.iter().filter(|(n, _)| n == id).count() > 1 || schema::FIXED_NAMES.contains(&id.as_str()) {
            return Err(Error::data(
                input,
                Some(id),
                "is an id column named like one of predict's output columns; rename the id column in the data and the manifest",
            ));
        }
    }
    let model_id = match ensemble {
        Some(e) => format!("ensemble:{}", e.members.join("+")),
        None => run_id.clone(),
    };
    let mut out = String::new();
    let mut reasons_meta = None;
    let mut reasons_line = String::new();
    if let Some((n, choice)) = options.reasons {
        let members: Vec<String> = match ensemble {
            Some(e) => e.members.clone(),
            None => vec![run_id.clone()],
        };
        let classes = crate::analysis::sensitivity::explained_classes(record.task, &outputs, k);
        let (mut cols, meta, line) = pool.install(|| reason_columns(&folder, &manifest, &members, model, &x, &classes, n, choice))?;
        columns.append(&mut cols);
        reasons_meta = Some(meta);
        reasons_line = line;
    }
    let provenance =
        Provenance { model_id, results_digest: folder.digest.clone(), experiment: record.fingerprint.clone(), reasons: reasons_meta };
    match ensemble {
        Some(e) => {
            let _ = writeln!(
                out,
                "scored    {} rows with the mean of {} seeds (runs {}) of experiment {}",
                table.rows,
                e.members.len(),
                e.members.join(", "),
                &record.fingerprint[..16]
            );
        }
        None => {
            let _ = writeln!(out, "scored    {} rows with run {} of experiment {}", table.rows, run_id, &record.fingerprint[..16]);
        }
    }
    if let Some(c) = selection.calibration.as_ref().filter(|_| map.is_some() || ensemble.is_some()) {
        let _ = writeln!(out, "calibrated probabilities through the stored {} map (see the card's Calibration)", c.map.method().as_str());
    }
    if let Some(i) = interval {
        let _ = writeln!(
            out,
            "intervals {}% split conformal: prediction -+ {} (interval_lower, interval_upper)",
            crate::format::sig(100.0 * i.coverage, 4),
            crate::format::sig(i.half_width, 6)
        );
    }
    if let Some(t) = options.threshold.filter(|_| record.task == Task::Binary) {
        let stated = selection.deployed_threshold(folder.layout_version).value;
        let _ = writeln!(
            out,
            "threshold decided at {} (--threshold), not the deployed {} the card states",
            crate::format::sig(t, 6),
            crate::format::sig(stated, 6)
        );
    }
    let deployed_model = if selection.ensemble.is_some() { ensemble.is_some() } else { is_selected };
    if !deployed_model && folder.layout_version >= crate::selection::deployed::CALIBRATION_FROM {
        let _ = writeln!(
            out,
            "note      run {run_id} alone is not the deployed model (name the results folder for it): no prediction interval, and no calibration map unless it is the run's own"
        );
    }
    out.push_str(&reasons_line);
    let _ = writeln!(out, "flagged   {} rows with a number outside the training range", report.out_of_range_rows);
    if report.unseen_levels.is_empty() {
        let _ = writeln!(out, "unseen    no category levels unseen in training");
    }
    for (col, n) in &report.unseen_levels {
        let _ =
            writeln!(out, "unseen    {} rows of `{}` hold a level unseen in training (scored as the unseen bucket)", n, terminal_safe(col));
    }
    for (col, n) in &report.imputed_unseen_missing {
        let every = if *n == table.rows { " (every row: check the input's export)" } else { "" };
        let _ = writeln!(
            out,
            "imputed   {n} rows of `{}` have no value{every}, though it was never missing in training: scored with the training \
             fill value and no missing-value indicator, an extrapolation",
            terminal_safe(col)
        );
    }
    // Only a logged scoring hashes the input table.
    let scoring = options.log.is_some().then(|| Scoring {
        fingerprint: record.fingerprint.clone(),
        model_id: provenance.model_id.clone(),
        results: crate::store::folder_name(&folder.layout.root),
        results_digest: folder.digest.clone(),
        input_sha256: table.content_hash(),
        rows: table.rows,
        threshold: (record.task == Task::Binary).then_some(deployed.value),
        decisions: (record.task != Task::Regression)
            .then(|| labels.iter().zip(&decision_counts).filter(|(_, &n)| n > 0).map(|(l, &n)| (l.clone(), n)).collect()),
    });
    Ok(Scored { columns, provenance, report: out, scoring, results_folder: folder.layout.root.clone() })
}

/// Named output columns.
type Columns = Vec<(String, ArrayRef)>;

/// The principal-reason columns for every row of `x` (see [`crate::output_schema::REASONS`]), the
/// metadata text saying how they were computed, and the report's lines. `model` is the scored
/// run, reused when it is the only member.
#[allow(clippy::too_many_arguments)]
fn reason_columns(
    folder: &Sealed,
    manifest: &crate::manifest::Manifest,
    members: &[String],
    model: ScoringModel,
    x: &crate::data::prep::Matrix,
    classes: &[usize],
    n: usize,
    choice: ReferenceChoice,
) -> Result<(Columns, String, String)> {
    use crate::analysis::attribution::{of_networks, Explained};
    use crate::analysis::reasons::{principal, Toward};
    use crate::analysis::reference::ThresholdReference;
    if n == 0 {
        return Err(Error::Usage("--reasons must be at least 1 (Regulation B practice is 4, the default)".into()));
    }
    let Some(sensitivity) = folder.sensitivity()? else {
        return Err(Error::store(
            &folder.layout.root,
            format!(
                "holds no reference rows (results layout {}; they came with layout {}): retrain it with this version to score reasons",
                folder.layout_version,
                crate::analysis::sensitivity::SENSITIVITY_FROM
            ),
        ));
    };
    let reference = match (choice, &sensitivity.references.threshold) {
        (ReferenceChoice::Median, _) => sensitivity.references.median.clone(),
        (ReferenceChoice::Threshold, Some(ThresholdReference::Available { values, .. })) => values.clone(),
        (ReferenceChoice::Threshold, Some(ThresholdReference::Unavailable { reason })) => {
            return Err(Error::Usage(format!(
                "--reference threshold: this experiment has no threshold reference: {reason} (lower analysis.reference_rows in the manifest and retrain, or use --reference median)"
            )))
        }
        (ReferenceChoice::Threshold, None) => {
            return Err(Error::Usage("--reference threshold applies to binary models; use --reference median".into()));
        }
    };
    let steps = manifest.analysis.clone().unwrap_or_default().integration_steps();
    let explained = Explained::of(&model.head, model.scaling.map(|s| s.std));
    let mut networks = vec![model];
    if members.len() > 1 {
        networks = members.iter().map(|id| ScoringModel::from_stored(&folder.run(id)?)).collect::<Result<_>>()?;
    }
    let preprocessor = folder.preprocessor()?;
    let widths: Vec<usize> = preprocessor.inputs.iter().map(InputEncoding::width).collect();
    let attr = of_networks(networks.iter_mut(), explained, x, &reference, classes, &widths, steps)?;
    let names: Vec<String> = preprocessor.inputs.iter().map(|e| e.name().to_string()).collect();
    let texts: Vec<String> =
        names.iter().map(|f| manifest.reasons.as_ref().and_then(|r| r.get(f)).cloned().unwrap_or_else(|| f.clone())).collect();
    let record = &folder.record;
    let favourable = manifest.decision.as_ref().and_then(|d| d.favourable.as_ref());
    let toward = Toward::of(record.task, &record.class_labels, favourable);
    let (mut reason_texts, mut features, mut contributions) = (Vec::new(), Vec::new(), Vec::new());
    for row in attr.per_feature(&widths) {
        let chosen = principal(&row, toward, n);
        reason_texts.push(names_json(&chosen.iter().map(|&(f, _)| texts[f].clone()).collect::<Vec<_>>()));
        features.push(names_json(&chosen.iter().map(|&(f, _)| names[f].clone()).collect::<Vec<_>>()));
        contributions.push(serde_json::to_string(&chosen.iter().map(|&(_, c)| c).collect::<Vec<_>>()).unwrap_or_else(|_| "[]".into()));
    }
    let columns: Columns = vec![
        (schema::REASONS.into(), Arc::new(StringArray::from(reason_texts))),
        (schema::REASON_FEATURES.into(), Arc::new(StringArray::from(features))),
        (schema::REASON_CONTRIBUTIONS.into(), Arc::new(StringArray::from(contributions))),
        (schema::REASONS_GAP.into(), Arc::new(Float64Array::from(attr.gap.clone()))),
        (schema::REASONS_TOTAL.into(), Arc::new(Float64Array::from(attr.difference.clone()))),
    ];
    let worst = attr.gap.iter().copied().fold(0.0, f64::max);
    let worst_estimate = attr.estimate.iter().copied().fold(0.0, f64::max);
    let refined = attr.steps.iter().filter(|&&s| s > steps).count();
    let explains = if record.task == Task::Regression { "the prediction" } else { "the log-odds" };
    let meta = format!(
        "integrated gradients of {explains} from the {} reference, trapezoid rule over {steps} intervals (rows missing the completeness or error-estimate tolerance integrated again with 4, 16 and 64 times as many); worst completeness gap {worst:e}, worst error estimate {worst_estimate:e}",
        choice.as_str()
    );
    let mut line = String::new();
    let _ = writeln!(line, "reasons   up to {n} per row: {}", toward.describe(record.task, &record.class_labels, favourable));
    let _ = writeln!(
        line,
        "          integrated gradients of {explains} from the training {} row, {steps} intervals ({refined} rows again with more); worst completeness gap {}, worst error estimate {} (tolerance {} or {}% of the row's move, whichever is larger)",
        if choice == ReferenceChoice::Median { "median" } else { "threshold" },
        crate::format::sig(worst, 3),
        crate::format::sig(worst_estimate, 3),
        crate::format::sig(sensitivity.attributions.tolerance, 3),
        crate::format::sig(100.0 * sensitivity.attributions.relative_tolerance, 3)
    );
    Ok((columns, meta, line))
}

pub fn run(target: &Path, input: &Path, output: &Path, options: &PredictOptions) -> Result<String> {
    let format = check_output(output, input, options.force)?;
    let Scored { mut columns, provenance, mut report, scoring, results_folder } = score(target, input, options)?;
    let bytes = match format {
        OutputFormat::Parquet => encode_with_metadata(columns, WriteOptions::default(), &provenance.metadata())?,
        OutputFormat::Csv => {
            let rows = columns.first().map_or(0, |(_, c)| c.len());
            columns.extend(provenance.columns(rows));
            crate::data::csv::encode_with(&columns, options.guard_formulas)?.into_bytes()
        }
    };
    write_atomic(output, &bytes)?;
    let _ = writeln!(report, "wrote     {}", output.display());
    if let (Some(log), Some(scoring)) = (&options.log, scoring) {
        let head = decision_log::append(log, scoring)
            .map_err(|e| Error::store(log, format!("{e} (the predictions were written to {})", output.display())))?;
        decision_log::record_head(&results_folder, &head)?;
        let _ = writeln!(
            report,
            "logged    line {} of {} (chain {}), its SHA-256 also recorded in {}/{}/",
            head.seq,
            log.display(),
            head.chain,
            results_folder.display(),
            decision_log::KIND
        );
    }
    Ok(report)
}
