//! One run's folder: written complete under a temporary name and renamed into place in one step,
//! so a run folder under its final name is always whole; read back with every file's SHA-256
//! checked against the run's own list (`checksums.json`). Folders of results layout 2 (tabcard
//! 0.3) named three files differently (`metrics.json`, `config.json`, `run.json`); they are read
//! under those names.

use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;
use std::io::Write;
use std::path::{Path, PathBuf};

use super::files::{read_json, to_json};
use super::layout::Layout;
use super::weights;
use crate::data::prep::Preprocessor;
use crate::error::{Error, Result};
use crate::fingerprint::sha256_hex;
use crate::metrics::MetricSet;
use crate::nn::mlp::NamedTensor;
use crate::numerics::NumericsFingerprint;
use crate::training::RunConfig;
use crate::training::{EpochRecord, Head, Outcome, TargetScaling};

/// The record of one run (`result.json`): outcome, epochs, size, metrics and weight digests.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RunRecord {
    pub run_id: String,
    pub config_id: String,
    pub seed: u64,
    pub baseline: bool,
    pub outcome: Outcome,
    pub best_epoch: usize,
    pub epochs_run: usize,
    pub stopped_early: bool,
    pub parameter_count: usize,
    pub head: Head,
    pub target_scaling: Option<TargetScaling>,
    pub train: MetricSet,
    pub validation: MetricSet,
    pub weights_sha256: String,
    pub tensor_sha256: BTreeMap<String, String>,
}

/// Everything a finished run leaves behind.
pub struct RunArtifacts<'a> {
    pub record: RunRecord,
    pub config: &'a RunConfig,
    pub preprocessor: &'a Preprocessor,
    pub tensors: &'a [NamedTensor],
    pub history: &'a [EpochRecord],
    /// (table row, values) for each validation row.
    pub validation_rows: &'a [usize],
    pub validation_outputs: &'a [f64],
    pub environment: &'a NumericsFingerprint,
    pub seconds: f64,
    /// Threads that computed pieces of the run: with the seconds, in the run's timing record.
    pub threads_taken: usize,
}

/// The checksum list of a run folder (`checksums.json`): every evidence file, with its SHA-256
/// (from layout 4 not the environment record, which lies outside the evidence, nor timing).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RunIndex {
    pub run_id: String,
    pub files: BTreeMap<String, String>,
}

/// The run's record ([`RunRecord`]).
pub const RESULT: &str = "result.json";
/// The run's model and training settings ([`RunConfig`]).
pub const SETTINGS: &str = "settings.json";
pub const WEIGHTS: &str = "weights.safetensors";
pub const PREPROCESSOR: &str = "preprocessor.json";
pub const HISTORY: &str = "history.csv";
pub const VALIDATION_PREDICTIONS: &str = "validation-predictions.csv";
pub const ENVIRONMENT: &str = "environment.json";
pub const TIMING: &str = "timing.json";
/// The run's checksum list ([`RunIndex`]); its presence marks a complete run folder.
pub const CHECKSUMS: &str = "checksums.json";

/// The names of the three files that results layout 2 named differently.
struct Names {
    result: &'static str,
    settings: &'static str,
    checksums: &'static str,
}

const CURRENT: Names = Names { result: RESULT, settings: SETTINGS, checksums: CHECKSUMS };
const LAYOUT_2: Names = Names { result: "metrics.json", settings: "config.json", checksums: "run.json" };

/// The names a stored run folder uses: layout 2's when it has `run.json` and no `checksums.json`.
fn names_in(dir: &Path) -> &'static Names {
    if !dir.join(CHECKSUMS).exists() && dir.join(LAYOUT_2.checksums).exists() {
        &LAYOUT_2
    } else {
        &CURRENT
    }
}

/// Whether `dir` holds a complete run folder (of this layout or layout 2).
pub fn is_run_folder(dir: &Path) -> bool {
    dir.join(CHECKSUMS).exists() || dir.join(LAYOUT_2.checksums).exists()
}

fn opt(x: Option<f64>) -> String {
    x.map(|v| format!("{v:?}")).unwrap_or_default()
}

pub fn history_csv(history: &[EpochRecord]) -> String {
    let mut s = String::from("epoch,train_loss,validation_loss,validation_metric,learning_rate\n");
    for h in history {
        s.push_str(&format!("{},{:?},{:?},{},{:?}\n", h.epoch, h.train_loss, h.validation_loss, opt(h.validation_metric), h.learning_rate));
    }
    s
}

pub fn parse_history_csv(text: &str, path: &Path) -> Result<Vec<EpochRecord>> {
    let bad = |line: usize| Error::store(path, format!("line {line} is not a history row"));
    let mut out = Vec::new();
    for (i, line) in text.lines().enumerate().skip(1) {
        let f: Vec<&str> = line.split(',').collect();
        if f.len() != 5 {
            return Err(bad(i + 1));
        }
        let num = |s: &str| s.parse::<f64>().map_err(|_| bad(i + 1));
        out.push(EpochRecord {
            epoch: f[0].parse().map_err(|_| bad(i + 1))?,
            train_loss: num(f[1])?,
            validation_loss: num(f[2])?,
            validation_metric: if f[3].is_empty() { None } else { Some(num(f[3])?) },
            learning_rate: num(f[4])?,
        });
    }
    Ok(out)
}

/// The predictions file: a `row` column (the table row) and `output_c` per value, one line per
/// row, each value in Rust's shortest form that reads back to the same bits.
pub fn predictions_csv(rows: &[usize], outputs: &[f64], per_row: usize) -> String {
    use rayon::prelude::*;
    use std::fmt::Write;
    // Bands of rows are written on the pool's threads and joined in order: the same text.
    const BAND: usize = 16_384;
    let width = per_row.max(1);
    let mut s = String::from("row");
    for c in 0..per_row {
        let _ = write!(s, ",output_{c}");
    }
    s.push('\n');
    let bands: Vec<String> = rows
        .par_chunks(BAND)
        .zip(outputs.par_chunks(BAND * width))
        .map(|(rows, outputs)| {
            let mut band = String::with_capacity(rows.len() * (8 + 24 * per_row));
            for (r, chunk) in rows.iter().zip(outputs.chunks_exact(width)) {
                let _ = write!(band, "{r}");
                for v in chunk {
                    let _ = write!(band, ",{v:?}");
                }
                band.push('\n');
            }
            band
        })
        .collect();
    s.reserve(bands.iter().map(String::len).sum());
    bands.iter().for_each(|b| s.push_str(b));
    s
}

fn partial_dir(layout: &Layout, id: &str) -> PathBuf {
    static COUNTER: std::sync::atomic::AtomicU64 = std::sync::atomic::AtomicU64::new(0);
    let n = COUNTER.fetch_add(1, std::sync::atomic::Ordering::Relaxed);
    layout.runs().join(format!(".partial-{id}-{}-{n}@{}", std::process::id(), crate::provenance::host_name()))
}

fn write_file(dir: &Path, name: &str, bytes: &[u8]) -> std::io::Result<()> {
    let mut f = std::fs::File::create(dir.join(name))?;
    f.write_all(bytes)?;
    f.sync_all()
}

/// Writes a run folder: all files into a private temporary folder, then one rename.
pub fn write_run(layout: &Layout, a: &RunArtifacts<'_>) -> Result<()> {
    let id = &a.record.run_id;
    let per_row = a.record.head.values_per_row();
    let mut files: Vec<(&str, Vec<u8>)> = vec![
        (RESULT, to_json(&a.record)?),
        (SETTINGS, to_json(a.config)?),
        (PREPROCESSOR, to_json(a.preprocessor)?),
        (HISTORY, history_csv(a.history).into_bytes()),
    ];
    if !a.tensors.is_empty() {
        files.push((WEIGHTS, weights::encode(a.tensors)?));
        files.push((VALIDATION_PREDICTIONS, predictions_csv(a.validation_rows, a.validation_outputs, per_row).into_bytes()));
    }
    let index = RunIndex { run_id: id.clone(), files: files.iter().map(|(n, b)| (n.to_string(), sha256_hex(b))).collect() };
    files.push((CHECKSUMS, to_json(&index)?));
    // Records outside the evidence: where and on what the run was computed, and how long it took.
    files.push((ENVIRONMENT, to_json(a.environment)?));
    files.push((TIMING, to_json(&serde_json::json!({ "seconds": a.seconds, "threads": a.threads_taken }))?));

    place_run(layout, id, "write the run folder", |tmp| {
        for (name, bytes) in &files {
            write_file(tmp, name, bytes)?;
        }
        Ok(())
    })
}

/// Writes run `id`'s files with `fill` into a private temporary folder, syncs it, then renames it
/// into place in one step (another process that finished the same run first wins: its content is
/// the same by construction); `what` names the work in the error.
fn place_run(layout: &Layout, id: &str, what: &'static str, fill: impl FnOnce(&Path) -> std::io::Result<()>) -> Result<()> {
    let tmp = partial_dir(layout, id);
    let final_dir = layout.run(id);
    let result = (|| -> std::io::Result<()> {
        std::fs::create_dir_all(&tmp)?;
        fill(&tmp)?;
        std::fs::File::open(&tmp)?.sync_all()?;
        match std::fs::rename(&tmp, &final_dir) {
            Ok(()) => Ok(()),
            Err(_) if final_dir.join(CHECKSUMS).exists() => std::fs::remove_dir_all(&tmp),
            Err(e) => Err(e),
        }?;
        std::fs::File::open(layout.runs())?.sync_all()
    })();
    if let Err(e) = result {
        let _ = std::fs::remove_dir_all(&tmp);
        return Err(Error::io(&final_dir, what, e));
    }
    Ok(())
}

/// Where a run's folder was copied from: the other experiment folder (under the same results
/// root) that had trained the same run, with the same id and so the same bits.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Adopted {
    pub run_id: String,
    pub source: PathBuf,
}

/// Copies run `id` into `layout` from another experiment folder beside it that holds the same run
/// complete and intact (its files match its checksum list, and its settings and preprocessing are
/// byte for byte the ones this run would be trained with); `None` when no folder does. The copy is
/// written like a trained run (a private temporary folder, then one rename), file by file, never
/// as a link, so each experiment folder stays whole on its own; its timing record names the
/// source. A source that fails its check is passed over, never copied.
pub fn adopt(layout: &Layout, id: &str, settings: &RunConfig, preprocessor: &Preprocessor) -> Result<Option<Adopted>> {
    let Some(root) = layout.root.parent() else { return Ok(None) };
    let Ok(entries) = std::fs::read_dir(root) else { return Ok(None) };
    let mut folders: Vec<PathBuf> =
        entries.filter_map(|e| e.ok().map(|e| e.path())).filter(|p| p.join("runs").join(id).join(CHECKSUMS).is_file()).collect();
    if folders.is_empty() {
        return Ok(None);
    }
    folders.sort();
    let (settings, preprocessor) = (to_json(settings)?, to_json(preprocessor)?);
    for folder in folders {
        if folder == layout.root {
            continue;
        }
        let source = Layout::new(folder.clone());
        let Ok(Some(stored)) = read_run(&source, id) else { continue };
        let same = |name: &str, want: &[u8]| std::fs::read(stored.dir.join(name)).is_ok_and(|b| b == want);
        if !same(SETTINGS, &settings) || !same(PREPROCESSOR, &preprocessor) {
            continue;
        }
        copy_run(layout, id, &stored.dir, &folder)?;
        return Ok(Some(Adopted { run_id: id.to_string(), source: folder }));
    }
    Ok(None)
}

/// Copies the run folder `from` (of the experiment folder `source`) to run `id` of `layout`.
fn copy_run(layout: &Layout, id: &str, from: &Path, source: &Path) -> Result<()> {
    place_run(layout, id, "copy the run folder", |tmp| {
        let mut names: Vec<String> = std::fs::read_dir(from)?
            .filter_map(|e| e.ok())
            .filter(|e| e.path().is_file())
            .map(|e| e.file_name().to_string_lossy().into_owned())
            .collect();
        names.sort();
        for name in names {
            let bytes = std::fs::read(from.join(&name))?;
            let bytes = if name == TIMING {
                // Outside every list: the source's training time, and where the copy came from.
                let mut timing: serde_json::Value = serde_json::from_slice(&bytes).unwrap_or_else(|_| serde_json::json!({}));
                timing["copied_from"] = source.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default().into();
                serde_json::to_vec_pretty(&timing).map_err(std::io::Error::other)?
            } else {
                bytes
            };
            write_file(tmp, &name, &bytes)?;
        }
        Ok(())
    })
}

/// A run read back from disk, integrity-checked.
pub struct StoredRun {
    pub dir: PathBuf,
    pub record: RunRecord,
}

/// Every stored run of the plan, in plan order (runs without a folder yet are left out).
pub fn read_runs(layout: &Layout, plan: &crate::experiment::plan::Plan) -> Result<Vec<StoredRun>> {
    let mut out = Vec::new();
    for spec in &plan.runs {
        if let Some(r) = read_run(layout, &spec.id)? {
            out.push(r);
        }
    }
    Ok(out)
}

/// `None` when the run has no folder yet; an error when its folder fails the integrity check.
pub fn read_run(layout: &Layout, id: &str) -> Result<Option<StoredRun>> {
    let dir = layout.run(id);
    if !dir.exists() {
        return Ok(None);
    }
    let names = names_in(&dir);
    let index: RunIndex = read_json(&dir.join(names.checksums))?;
    if index.run_id != id {
        return Err(Error::store(&dir, format!("{} names run {}, not {id}", names.checksums, index.run_id)));
    }
    for (name, digest) in &index.files {
        let path = dir.join(name);
        let bytes = std::fs::read(&path).map_err(|e| Error::io(&path, "read", e))?;
        let actual = sha256_hex(&bytes);
        if &actual != digest {
            return Err(Error::store(&path, format!(
                "fails its integrity check: SHA-256 {actual}, {} records {digest}; the file was changed after training (delete the run folder to retrain it)",
                names.checksums
            )));
        }
    }
    let record: RunRecord = read_json(&dir.join(names.result))?;
    Ok(Some(StoredRun { dir, record }))
}

impl StoredRun {
    pub fn tensors(&self) -> Result<Vec<NamedTensor>> {
        let path = self.dir.join(WEIGHTS);
        let bytes = std::fs::read(&path).map_err(|e| Error::io(&path, "read", e))?;
        weights::decode(&bytes, &path)
    }

    /// [`StoredRun::tensors`], each checked against the SHA-256 the run's record holds for it: what
    /// scoring uses, so weights swapped together with a rewritten file list are still refused.
    pub fn checked_tensors(&self) -> Result<Vec<NamedTensor>> {
        let tensors = self.tensors()?;
        let recorded = &self.record.tensor_sha256;
        if !recorded.is_empty() {
            let on_disk = weights::tensor_digests(&tensors);
            let names: std::collections::BTreeSet<&String> = recorded.keys().chain(on_disk.keys()).collect();
            let differing = names.into_iter().find(|n| on_disk.get(*n) != recorded.get(*n));
            if let Some(name) = differing {
                return Err(Error::integrity(
                    self.dir.join(WEIGHTS),
                    format!("tensor `{name}` does not match the SHA-256 the run's record holds for it: the weights were replaced"),
                ));
            }
        }
        Ok(tensors)
    }

    pub fn config(&self) -> Result<RunConfig> {
        read_json(&self.dir.join(names_in(&self.dir).settings))
    }

    pub fn preprocessor(&self) -> Result<Preprocessor> {
        read_json(&self.dir.join(PREPROCESSOR))
    }

    pub fn history(&self) -> Result<Vec<EpochRecord>> {
        let path = self.dir.join(HISTORY);
        let text = std::fs::read_to_string(&path).map_err(|e| Error::io(&path, "read", e))?;
        parse_history_csv(&text, &path)
    }

    pub fn seconds(&self) -> f64 {
        read_json::<serde_json::Value>(&self.dir.join(TIMING)).ok().and_then(|v| v["seconds"].as_f64()).unwrap_or(0.0)
    }
}

/// Removes temporary run folders left by processes that no longer exist (killed mid-write). On a
/// shared results folder other hosts' processes cannot be seen, so their partial folders are
/// removed only once untouched for an hour (a partial folder lives for the seconds it takes to
/// write a finished run's files).
pub fn sweep_stale_partials(layout: &Layout) {
    let Ok(entries) = std::fs::read_dir(layout.runs()) else { return };
    let this_host = crate::provenance::host_name();
    for entry in entries.flatten() {
        let name = entry.file_name().to_string_lossy().into_owned();
        let Some(rest) = name.strip_prefix(".partial-") else { continue };
        let (local, host) = rest.split_once('@').unwrap_or((rest, ""));
        let stale = if host == this_host {
            let pid = local.split('-').nth(1).and_then(|p| p.parse::<u32>().ok());
            !pid.is_some_and(|p| p == std::process::id() || Path::new(&format!("/proc/{p}")).exists())
        } else {
            let age = entry.metadata().and_then(|m| m.modified()).ok().and_then(|t| t.elapsed().ok());
            age.is_some_and(|a| a > std::time::Duration::from_secs(3600))
        };
        if stale {
            let _ = std::fs::remove_dir_all(entry.path());
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn predictions_written_in_bands_read_as_one_line_per_row() {
        // Three bands and a part, two values a row, on a pool of 3 threads.
        let rows: Vec<usize> = (0..40_000).map(|r| r * 3 + 1).collect();
        let outputs: Vec<f64> = (0..80_000).map(|i| (i as f64).sqrt() / 7.0 - 3.0).collect();
        let pool = rayon::ThreadPoolBuilder::new().num_threads(3).build().expect("a pool");
        let text = pool.install(|| predictions_csv(&rows, &outputs, 2));
        let lines: Vec<&str> = text.lines().collect();
        assert_eq!(lines[0], "row,output_0,output_1");
        assert_eq!(lines.len(), rows.len() + 1);
        for (i, line) in lines[1..].iter().enumerate() {
            let fields: Vec<&str> = line.split(',').collect();
            assert_eq!(fields[0].parse::<usize>().ok(), Some(rows[i]));
            for c in 0..2 {
                assert_eq!(fields[1 + c].parse::<f64>().map(f64::to_bits).ok(), Some(outputs[i * 2 + c].to_bits()), "row {i}");
            }
        }
        assert_eq!(text, predictions_csv(&rows, &outputs, 2), "the same text off the pool");
    }
}
