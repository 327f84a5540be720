//! Benchmark measurements (not tests), called by `tests/bench/run.sh`; each prints one JSON line.
//!
//! ```text
//! bench data ROWS COLS OUT.parquet [--no-target] [--binary K]
//!                                           synthetic table: x00.. float32 features, y = 0/1 (seed
//!                                           2026); the last K features as 0/1 flags (x > 0)
//! bench train DATA --hidden 256,256 --batch 256 --epochs 3 [--dropout P] [--bn] [--cols K]
//!       [--train-rows N] [--regression]    one single-threaded run, the reference AdamW settings;
//!                                           timed: `--epochs` epochs after one warm-up epoch
//!                                           (see bench_train), as torch_reference.py times them
//! bench hash DATA                           file hash and logical content hash vs sha2 on the same bytes
//! bench load DATA                           Parquet -> table -> standardised f32 training matrix
//! bench scale ROWS COLS                     one epoch of the reference MLP on an in-memory matrix, peak RSS
//! bench matmul [--level NAME]               the portable kernels' rate per dispatch level (or one),
//!                                           and gemm's, on the reference MLP's products
//! bench bootstrap ROWS [--resamples R] [--order drawn|rows] [--threads N]
//!                                           a binary test split's bootstrap (the deployed model's
//!                                           metrics, its decisions, the uncalibrated outputs) with
//!                                           resamples scored in draw order and in row order
//! bench medians ROWS COLS [--threads N]     every column's median of a row-major f32 matrix of
//!                                           standard-normal values (the median reference row)
//! ```

use std::path::Path;
use std::sync::Arc;
use std::time::Instant;

use arrow::array::{ArrayRef, Float32Array, Int64Array};
use sha2::{Digest, Sha256};
use tabcard::data::parquet::{encode, read_table, WriteOptions};
use tabcard::data::prep::{Matrix, Preprocessor};
use tabcard::data::roles::Feature;
use tabcard::data::table::Table;
use tabcard::manifest::{Activation, ModelSpec, Optimizer, RegressionLoss, Task, TrainingSpec};
use tabcard::rng::{Purpose, Stream};
use tabcard::training::RunConfig;
use tabcard::training::{train, Head, Labels, RunData};

fn arg<T: std::str::FromStr>(args: &[String], name: &str, default: T) -> T {
    args.iter().position(|a| a == name).and_then(|i| args.get(i + 1)).and_then(|v| v.parse().ok()).unwrap_or(default)
}

fn flag(args: &[String], name: &str) -> bool {
    args.iter().any(|a| a == name)
}

/// Invented data: standard-normal features, y = 1 when x0 + x1 x2 + noise > 0.
fn synthetic(rows: usize, cols: usize) -> (Vec<f32>, Vec<usize>) {
    let mut s = Stream::new(2026, Purpose::DemoData);
    let x: Vec<f32> = (0..rows * cols).map(|_| s.normal() as f32).collect();
    let y = (0..rows)
        .map(|r| {
            let v = &x[r * cols..];
            let signal = f64::from(v[0]) + f64::from(v[1 % cols]) * f64::from(v[2 % cols]) + 0.5 * s.normal();
            usize::from(signal > 0.0)
        })
        .collect();
    (x, y)
}

fn write_data(rows: usize, cols: usize, out: &Path, with_target: bool, binary: usize) {
    let (x, y) = synthetic(rows, cols);
    // The last `binary` features as flags, as many tables hold them (the target keeps its rule).
    let value = |r: usize, c: usize| if c + binary >= cols { f32::from(u8::from(x[r * cols + c] > 0.0)) } else { x[r * cols + c] };
    let mut columns: Vec<(String, ArrayRef)> = (0..cols)
        .map(|c| (format!("x{c:02}"), Arc::new(Float32Array::from((0..rows).map(|r| value(r, c)).collect::<Vec<f32>>())) as ArrayRef))
        .collect();
    if with_target {
        columns.push(("y".into(), Arc::new(Int64Array::from(y.iter().map(|&v| v as i64).collect::<Vec<i64>>()))));
    }
    let bytes = encode(columns, WriteOptions::default()).expect("encode");
    std::fs::write(out, &bytes).expect("write");
    println!("{{\"rows\": {rows}, \"cols\": {cols}, \"bytes\": {}}}", bytes.len());
}

/// The first `cols` feature columns and the target of a table written by `bench data`.
fn matrices(table: &Table, cols: usize) -> (Matrix, Labels) {
    let rows = table.rows;
    let mut data = vec![0f32; rows * cols];
    for c in 0..cols {
        let col = table.column(&format!("x{c:02}")).expect("feature column");
        for r in 0..rows {
            data[r * cols + c] = col.number(r).unwrap_or(0.0) as f32;
        }
    }
    let y = table.column("y").expect("target column");
    let labels = (0..rows).map(|r| y.number(r).unwrap_or(0.0) as usize).collect();
    (Matrix { rows, cols, data }, Labels::Classes { rows: labels, classes: 2 })
}

fn reference_config(hidden: Vec<usize>, batch: usize, epochs: usize, dropout: f64, batch_norm: bool) -> RunConfig {
    let mut training = TrainingSpec {
        optimizer: Optimizer::Adamw,
        learning_rate: 1e-3,
        weight_decay: 1e-2,
        epochs,
        batch_size: batch,
        ..TrainingSpec::default()
    };
    training.early_stopping.enabled = false;
    RunConfig { model: ModelSpec { hidden, activation: Activation::Relu, dropout, batch_norm, ..ModelSpec::default() }, training }
}

const HEAD: Head = Head { task: Task::Binary, classes: 2, loss: RegressionLoss::Mse, huber_delta: 1.0 };

fn subset(x: &Matrix, y: &Labels, rows: usize) -> (Matrix, Labels) {
    let m = Matrix { rows, cols: x.cols, data: x.data[..rows * x.cols].to_vec() };
    let l = match y {
        Labels::Classes { rows: r, classes } => Labels::Classes { rows: r[..rows].to_vec(), classes: *classes },
        Labels::Values(v) => Labels::Values(v[..rows].to_vec()),
    };
    (m, l)
}

/// One run timed over the same span as torch_reference.py: `epochs` training epochs (each with its
/// validation pass) after one warm-up epoch, without building the model and buffers and without
/// the final pass over all rows. The engine offers no per-epoch clock, so the span is measured as
/// the time of a run of `epochs + 1` epochs minus that of a 1-epoch run on the same data (both
/// include construction, the first epoch and the final pass, which cancel).
fn bench_train(args: &[String]) {
    let table = read_table(Path::new(&args[2])).expect("read data");
    let hidden: Vec<usize> =
        arg(args, "--hidden", "256,256".to_string()).split(',').filter(|s| !s.is_empty()).map(|s| s.parse().expect("width")).collect();
    let batch = arg(args, "--batch", 256usize);
    let epochs = arg(args, "--epochs", 3usize);
    let dropout = arg(args, "--dropout", 0.0f64);
    let batch_norm = flag(args, "--bn");
    let cols = arg(args, "--cols", table.columns.len() - 1);
    let validation_rows = arg(args, "--validation-rows", 1000usize);
    let regression = flag(args, "--regression");
    let (x, y) = matrices(&table, cols);
    let (vx, vy) = subset(&x, &y, validation_rows.min(x.rows));
    let train_rows = arg(args, "--train-rows", x.rows).min(x.rows);
    let (x, y) = subset(&x, &y, train_rows);
    let (y, vy, head, metric) = if regression {
        let values = |l: &Labels| match l {
            Labels::Classes { rows, .. } => Labels::Values(rows.iter().map(|&c| c as f64).collect()),
            Labels::Values(v) => Labels::Values(v.clone()),
        };
        (values(&y), values(&vy), Head { task: Task::Regression, classes: 0, loss: RegressionLoss::Mse, huber_delta: 1.0 }, "rmse")
    } else {
        (y, vy, HEAD, "roc_auc")
    };
    // --threads N: the run computes on a pool of N threads, as one run of `train --jobs N` does
    // (the pool is built outside the timer, as PyTorch's threads are).
    let threads = arg(args, "--threads", 1usize);
    let pool = rayon::ThreadPoolBuilder::new().num_threads(threads).build().expect("thread pool");
    let data = RunData { train_x: &x, train_y: &y, validation_x: &vx, validation_y: &vy };
    let timed_run = |epochs: usize| {
        let config = reference_config(hidden.clone(), batch, epochs, dropout, batch_norm);
        let started = Instant::now();
        let result =
            if threads > 1 { pool.install(|| train(head, &config, 1, &data, metric)) } else { train(head, &config, 1, &data, metric) }
                .expect("training");
        (started.elapsed().as_secs_f64(), result)
    };
    let (one, _) = timed_run(1);
    let (all, result) = timed_run(epochs + 1);
    let seconds = (all - one).max(f64::MIN_POSITIVE);
    let samples = (x.rows * epochs) as f64;
    let steps = (x.rows.div_ceil(batch) * epochs) as f64;
    println!(
        "{{\"seconds\": {seconds}, \"threads\": {threads}, \"threads_taken\": {}, \"samples_per_second\": {}, \"steps_per_second\": {}, \"parameters\": {}, \"validation_{metric}\": {}}}",
        result.threads_taken,
        samples / seconds,
        steps / seconds,
        result.parameter_count,
        result.validation_metrics.get(metric).copied().flatten().unwrap_or(f64::NAN)
    );
}

fn best_of<R>(reps: usize, mut f: impl FnMut() -> R) -> (f64, R) {
    let mut best = f64::INFINITY;
    let mut last = None;
    for _ in 0..reps {
        let t = Instant::now();
        let r = f();
        best = best.min(t.elapsed().as_secs_f64());
        last = Some(r);
    }
    (best, last.expect("at least one repetition"))
}

fn bench_hash(args: &[String]) {
    let path = Path::new(&args[2]);
    let bytes = std::fs::read(path).expect("read");
    let gb = bytes.len() as f64 / 1e9;
    let (raw, _) = best_of(3, || Sha256::digest(&bytes));
    let (file, _) = best_of(3, || tabcard::fingerprint::file_sha256(path).expect("hash"));
    let table = read_table(path).expect("read table");
    let (content, _) = best_of(3, || table.content_hash());
    println!(
        "{{\"bytes\": {}, \"sha2_in_memory_gb_s\": {}, \"file_hash_gb_s\": {}, \"content_hash_gb_s\": {}, \"content_hash_seconds\": {content}}}",
        bytes.len(),
        gb / raw,
        gb / file,
        gb / content
    );
}

fn bench_load(args: &[String]) {
    let path = Path::new(&args[2]);
    let bytes = std::fs::metadata(path).expect("stat").len() as f64;
    let (read, table) = best_of(3, || read_table(path).expect("read table"));
    let features: Vec<Feature> =
        table.columns.iter().filter(|c| c.name != "y").map(|c| Feature { name: c.name.clone(), categorical: false }).collect();
    let rows: Vec<usize> = (0..table.rows).collect();
    let (prep, matrix) = best_of(3, || {
        let p = Preprocessor::fit(&table, &features, &rows, path).expect("fit");
        p.transform(&table, &rows, path).expect("transform").0
    });
    let matrix_mb = (matrix.data.len() * 4) as f64 / 1e6;
    println!(
        "{{\"file_mb\": {}, \"matrix_mb\": {matrix_mb}, \"parquet_to_table_mb_s\": {}, \"table_to_matrix_mb_s\": {}, \"parquet_to_matrix_mb_s\": {}}}",
        bytes / 1e6,
        bytes / 1e6 / read,
        matrix_mb / prep,
        matrix_mb / (read + prep)
    );
}

fn peak_rss_bytes() -> u64 {
    let status = std::fs::read_to_string("/proc/self/status").unwrap_or_default();
    status
        .lines()
        .find_map(|l| l.strip_prefix("VmHWM:"))
        .and_then(|v| v.trim().trim_end_matches("kB").trim().parse::<u64>().ok())
        .unwrap_or(0)
        * 1024
}

fn bench_scale(args: &[String]) {
    let rows: usize = args.get(2).and_then(|s| s.parse().ok()).unwrap_or(1_000_000);
    let cols: usize = args.get(3).and_then(|s| s.parse().ok()).unwrap_or(64);
    let (data, labels) = synthetic(rows, cols);
    let x = Matrix { rows, cols, data };
    let y = Labels::Classes { rows: labels, classes: 2 };
    let (vx, vy) = subset(&x, &y, 10_000.min(rows));
    let config = reference_config(vec![256, 256], 256, 1, 0.0, false);
    let before = peak_rss_bytes();
    let started = Instant::now();
    let result =
        train(HEAD, &config, 1, &RunData { train_x: &x, train_y: &y, validation_x: &vx, validation_y: &vy }, "roc_auc").expect("training");
    let seconds = started.elapsed().as_secs_f64();
    let matrix_bytes = (x.data.len() * 4) as f64;
    let model_bytes = (result.parameter_count * 4) as f64;
    let peak = peak_rss_bytes() as f64;
    println!(
        "{{\"rows\": {rows}, \"cols\": {cols}, \"seconds\": {seconds}, \"samples_per_second\": {}, \"peak_rss_mb\": {}, \"rss_before_training_mb\": {}, \"matrix_mb\": {}, \"model_mb\": {}, \"rss_over_matrix_plus_model\": {}}}",
        rows as f64 / seconds,
        peak / 1e6,
        before as f64 / 1e6,
        matrix_bytes / 1e6,
        model_bytes / 1e6,
        peak / (matrix_bytes + model_bytes)
    );
}

/// The bootstrap of a binary test split as `selection::evaluate_test` runs it with a calibration
/// map and a threshold: every metric of the deployed outputs, the decisions' accuracy and
/// balanced accuracy, and the uncalibrated outputs' metrics, scored on the same resamples, on the
/// global rayon pool. Timed once per order; the timer covers preparing the samples and the
/// resamples, as the command's does.
fn bench_bootstrap(args: &[String]) {
    use tabcard::metrics::bootstrap::{shared_percentile_intervals, ResampleOrder, Scorer};
    use tabcard::metrics::registry::{named_resample_metrics, resample_metrics};
    use tabcard::metrics::resample::{decision_metrics, ClassifiedSample};
    use tabcard::metrics::MetricSet;
    let rows: usize = args.get(2).and_then(|s| s.parse().ok()).unwrap_or(1_000_000);
    let resamples: usize = arg(args, "--resamples", 200);
    let mut stream = Stream::new(2026, Purpose::DemoData);
    let labels: Vec<usize> = (0..rows).map(|_| stream.below(2) as usize).collect();
    // Scores that lean towards the label, with a calibration-like squeeze for the raw outputs.
    let probs: Vec<f64> = labels
        .iter()
        .flat_map(|&y| {
            let p = (0.35 * y as f64 + 0.65 * stream.uniform()).clamp(1e-6, 1.0 - 1e-6);
            [1.0 - p, p]
        })
        .collect();
    let raw: Vec<f64> = probs.iter().map(|p| 0.5 + (p - 0.5) * 0.8).collect();
    let decided: Vec<usize> = probs.chunks_exact(2).map(|r| usize::from(r[1] >= 0.5)).collect();
    let only: String = arg(args, "--order", String::new());
    let threads: usize = arg(args, "--threads", 1);
    let pool = rayon::ThreadPoolBuilder::new().num_threads(threads).build().expect("a thread pool");
    for order in [ResampleOrder::Drawn, ResampleOrder::Rows] {
        if !only.is_empty() && !format!("{order:?}").eq_ignore_ascii_case(&only) {
            continue;
        }
        let started = Instant::now();
        let (deployed, uncalibrated) = (ClassifiedSample::new(&labels, &probs, 2), ClassifiedSample::new(&labels, &raw, 2));
        let main = |idx: &[usize]| resample_metrics(&deployed.resample(idx));
        let decisions = |idx: &[usize]| {
            let (a, b) = decision_metrics(&labels, &decided, 2, idx);
            MetricSet::from([("accuracy".to_string(), a), ("balanced_accuracy".to_string(), b)])
        };
        // Before calibration, only the calibration metrics (as the test split's report keeps them).
        let before = |idx: &[usize]| named_resample_metrics(&uncalibrated.resample(idx), &["ece", "brier", "log_loss"]);
        let scorers: [&Scorer; 3] = [&main, &decisions, &before];
        let intervals = pool.install(|| shared_percentile_intervals(rows, resamples, 0.95, 7, order, &scorers));
        let seconds = started.elapsed().as_secs_f64();
        let auc = intervals[0].get("roc_auc").map_or(f64::NAN, |i| i.lower);
        println!(
            "{{\"rows\": {rows}, \"resamples\": {resamples}, \"order\": \"{order:?}\", \"threads\": {}, \"seconds\": {seconds:.3}, \"roc_auc_lower\": {auc}}}",
            pool.current_num_threads()
        );
    }
}

/// The exact median of every column of a `ROWS x COLS` row-major f32 matrix, as the sensitivity
/// analysis's median reference row finds it (`column_values_at_ranks`), on a pool of N threads.
/// The timer covers the selection only (the matrix is filled outside it); best of 3.
fn bench_medians(args: &[String]) {
    use tabcard::metrics::order_statistics::{column_values_at_ranks, linear_ranks};
    let rows: usize = args.get(2).and_then(|s| s.parse().ok()).unwrap_or(8_000_000);
    let cols: usize = args.get(3).and_then(|s| s.parse().ok()).unwrap_or(64);
    let threads: usize = arg(args, "--threads", 1);
    let pool = rayon::ThreadPoolBuilder::new().num_threads(threads).build().expect("a thread pool");
    let mut stream = Stream::new(2026, Purpose::DemoData);
    let data: Vec<f32> = (0..rows * cols).map(|_| stream.normal() as f32).collect();
    let columns: Vec<usize> = (0..cols).collect();
    let ranks = linear_ranks(rows - 1, 0.5);
    let (seconds, found) = best_of(3, || pool.install(|| column_values_at_ranks(&data, cols, &columns, &ranks)));
    println!(
        "{{\"rows\": {rows}, \"cols\": {cols}, \"threads\": {threads}, \"seconds\": {seconds:.3}, \"first_median\": {}}}",
        found[0][0]
    );
}

/// How a product reads its operands, as the engine's three products do.
#[derive(Clone, Copy)]
enum Orientation {
    /// x W (forward)
    Plain,
    /// h^T dz (weight gradient: the left operand read transposed)
    LeftTransposed,
    /// dz W^T (input gradient: the right operand read transposed)
    RightTransposed,
}

/// Single-threaded GFLOP/s of tabcard's portable kernels at every dispatch level this CPU runs,
/// and of the gemm crate (the kernels tabcard 0.2 trained with) at the same level, on the
/// products one training step of the reference MLP makes (batch 256) and on a 1024 cube. Each
/// figure is the best of 5 timed repetitions after one untimed warm-up call; the timer covers the
/// products only (operands allocated and filled outside it).
fn bench_matmul(args: &[String]) {
    use tabcard::nn::dispatch::Level;
    use tabcard::nn::matmul::{matmul, View, Workspace};
    use Orientation::*;
    let shapes = [
        (256usize, 32usize, 256usize, Plain, "x W1"),
        (256, 256, 256, Plain, "h W2"),
        (256, 256, 256, LeftTransposed, "h^T dz2"),
        (256, 256, 256, RightTransposed, "dz2 W2^T"),
        (32, 256, 256, LeftTransposed, "x^T dz1"),
        (256, 256, 1, Plain, "h W3 (head)"),
        (1024, 1024, 1024, Plain, "1024 cube"),
    ];
    let only: Option<String> = args.iter().position(|a| a == "--level").and_then(|i| args.get(i + 1)).cloned();
    let mut ours: Vec<(Level, Vec<String>)> =
        Level::available_levels().into_iter().filter(|l| only.as_deref().is_none_or(|o| o == l.name())).map(|l| (l, Vec::new())).collect();
    let mut theirs: Vec<(Level, Vec<String>)> = ours.iter().map(|(l, _)| (*l, Vec::new())).collect();
    for (m, k, n, orientation, what) in shapes {
        let a: Vec<f32> = (0..m * k).map(|i| (i % 7) as f32 * 0.1 - 0.3).collect();
        let b: Vec<f32> = (0..k * n).map(|i| (i % 5) as f32 * 0.1 - 0.2).collect();
        let mut c = vec![0f32; m * n];
        let reps = (2e9 / (2.0 * (m * n * k) as f64)).max(3.0) as usize;
        let flops = 2.0 * (m * n * k * reps) as f64;
        let label = format!("{m}x{k}x{n} {what}");
        let (va, vb) = match orientation {
            Plain => (View::new(&a, m, k), View::new(&b, k, n)),
            LeftTransposed => (View::new(&a, k, m).t(), View::new(&b, k, n)),
            RightTransposed => (View::new(&a, m, k), View::new(&b, n, k).t()),
        };
        for (level, parts) in &mut ours {
            let mut ws = Workspace::<f32>::new(*level);
            matmul(&mut c, va, vb, false, &mut ws);
            let (best, _) = best_of(5, || {
                for _ in 0..reps {
                    matmul(&mut c, va, vb, false, &mut ws);
                }
            });
            parts.push(format!("\"{label}\": {:.1}", flops / best / 1e9));
        }
        // gemm's strides: (column stride, row stride) of each operand as read.
        let (a_cs, a_rs) = match orientation {
            LeftTransposed => (m as isize, 1),
            _ => (1, k as isize),
        };
        let (b_cs, b_rs) = match orientation {
            RightTransposed => (k as isize, 1),
            _ => (1, n as isize),
        };
        for (level, parts) in &mut theirs {
            let product = GemmProduct { m, n, k, a: &a, a_strides: (a_cs, a_rs), b: &b, b_strides: (b_cs, b_rs) };
            product.run(*level, &mut c);
            let (best, _) = best_of(5, || {
                for _ in 0..reps {
                    product.run(*level, &mut c);
                }
            });
            parts.push(format!("\"{label}\": {:.1}", flops / best / 1e9));
        }
    }
    let by_level = |rates: &[(Level, Vec<String>)]| {
        rates.iter().map(|(l, parts)| format!("\"{}\": {{{}}}", l.name(), parts.join(", "))).collect::<Vec<_>>().join(", ")
    };
    println!("{{\"kernel_gflops\": {{{}}}, \"gemm_gflops\": {{{}}}}}", by_level(&ours), by_level(&theirs));
}

/// One product as the gemm crate takes it: `c (m x n, row-major) = a b`, each operand read
/// through its (column stride, row stride).
struct GemmProduct<'a> {
    m: usize,
    n: usize,
    k: usize,
    a: &'a [f32],
    a_strides: (isize, isize),
    b: &'a [f32],
    b_strides: (isize, isize),
}

impl GemmProduct<'_> {
    /// gemm at one dispatch level: for `avx2` and `scalar`, gemm's own driver
    /// (`gemm_common::gemm::gemm_basic_generic`, which also routes matrix-vector shapes to its
    /// gemv) with that level's microkernels (FMA, scalar), as `gemm::gemm` calls it on a CPU
    /// whose widest level that is; for `avx512`, `gemm::gemm` itself.
    fn run(&self, level: tabcard::nn::dispatch::Level, c: &mut [f32]) {
        use gemm_common::gemm::gemm_basic_generic;
        use gemm_common::simd::Scalar;
        #[cfg(target_arch = "x86_64")]
        use gemm_common::simd::V3;
        use tabcard::nn::dispatch::Level;
        let GemmProduct { m, n, k, a, a_strides: (a_cs, a_rs), b, b_strides: (b_cs, b_rs) } = *self;
        assert!(c.len() >= m * n);
        // Every gemm entry point takes the product as these arguments, between its own leading
        // and trailing ones.
        macro_rules! with_operands {
            ($f:expr, [$($head:expr),*], [$($tail:expr),*]) => {
                // SAFETY: every index gemm touches is inside a (m x k), b (k x n) and c (m x n)
                // as laid out by the strides; c does not alias a or b; the CPU runs the level
                // (checked by the caller: a simd token was created, or the feature detected).
                unsafe {
                    ($f)(
                        $($head,)* m, n, k, c.as_mut_ptr(), 1, n as isize, false, a.as_ptr(), a_cs, a_rs, b.as_ptr(), b_cs, b_rs,
                        1.0f32, 1.0f32, false, false, false, $($tail),*
                    )
                }
            };
        }
        macro_rules! call {
            ($simd:expr, $kernels:path, $lanes:expr) => {{
                use $kernels as kernels;
                with_operands!(
                    gemm_basic_generic::<
                        _,
                        f32,
                        { $lanes },
                        { kernels::MR_DIV_N * $lanes },
                        { kernels::NR },
                        { kernels::MR_DIV_N },
                        { kernels::H_M },
                        { kernels::H_N },
                    >,
                    [$simd],
                    [|x, y, z| x * y + z, &kernels::UKR, &kernels::H_UKR, false, gemm::Parallelism::None]
                )
            }};
        }
        match level {
            // gemm's public entry point, which takes its AVX-512F kernels on a CPU that has them
            // (as every CPU running tabcard's avx512 level does). Called through the same driver
            // as the other levels, instantiated here, its AVX-512 products ran at a quarter to a
            // half of that rate, so this level is timed as gemm's own users call it.
            #[cfg(target_arch = "x86_64")]
            Level::Avx512 => {
                assert!(std::arch::is_x86_feature_detected!("avx512f"));
                with_operands!(gemm::gemm, [], [gemm::Parallelism::None])
            }
            #[cfg(target_arch = "x86_64")]
            Level::Avx2 => call!(V3::try_new().expect("AVX2 and FMA"), gemm_f32::microkernel::fma::f32, 8),
            // NEON and scalar: gemm's scalar kernels (its NEON driver is not compared here).
            _ => call!(Scalar, gemm_f32::microkernel::scalar::f32, 1),
        }
    }
}

fn main() {
    tabcard::numerics::prepare_process();
    let args: Vec<String> = std::env::args().collect();
    match args.get(1).map(String::as_str) {
        Some("data") => {
            let binary = arg(&args, "--binary", 0usize);
            write_data(
                args[2].parse().expect("rows"),
                args[3].parse().expect("cols"),
                Path::new(&args[4]),
                !flag(&args, "--no-target"),
                binary,
            )
        }
        Some("train") => bench_train(&args),
        Some("hash") => bench_hash(&args),
        Some("load") => bench_load(&args),
        Some("scale") => bench_scale(&args),
        Some("matmul") => bench_matmul(&args),
        Some("bootstrap") => bench_bootstrap(&args),
        Some("medians") => bench_medians(&args),
        _ => {
            eprintln!("usage: bench data|train|hash|load|scale|matmul|bootstrap|medians ... (see tests/bench/bench.rs)");
            std::process::exit(2);
        }
    }
}
