//! Benchmark (not a test): training samples per second of one single-threaded run on the
//! reference configuration: 32 float inputs, hidden 256-256, ReLU, AdamW (lr 1e-3, wd 1e-2),
//! batch 256, on synthetic data from a fixed seed (100,000 rows by default).
//!
//! Run: `cargo run --release --example train_throughput -- [rows] [epochs] [dropout] [bn]`

use std::time::Instant;

use tabcard::data::prep::Matrix;
use tabcard::manifest::{Activation, ModelSpec, Optimizer, RegressionLoss, Task, TrainingSpec};
use tabcard::plan::RunConfig;
use tabcard::rng::{Purpose, Stream};
use tabcard::train::{train, Head, Labels, RunData};

fn main() {
    let args: Vec<String> = std::env::args().collect();
    let rows: usize = args.get(1).and_then(|s| s.parse().ok()).unwrap_or(100_000);
    let epochs: usize = args.get(2).and_then(|s| s.parse().ok()).unwrap_or(3);
    let dropout: f64 = args.get(3).and_then(|s| s.parse().ok()).unwrap_or(0.0);
    let batch_norm = args.get(4).is_some_and(|s| s == "bn");
    let cols = 32;
    let mut s = Stream::new(2026, Purpose::DemoData);
    let data: Vec<f32> = (0..rows * cols).map(|_| s.normal() as f32).collect();
    let labels: Vec<usize> = (0..rows).map(|r| ((data[r * cols] + data[r * cols + 1] * data[r * cols + 2]) > 0.0) as usize).collect();
    let x = Matrix { rows, cols, data };
    let y = Labels::Classes { rows: labels, classes: 2 };
    let vx = Matrix { rows: 1000, cols, data: x.data[..1000 * cols].to_vec() };
    let vy = match &y { Labels::Classes { rows, .. } => Labels::Classes { rows: rows[..1000].to_vec(), classes: 2 }, _ => unreachable!() };
    let mut training = TrainingSpec { optimizer: Optimizer::Adamw, learning_rate: 1e-3, weight_decay: 1e-2, epochs, batch_size: 256, ..TrainingSpec::default() };
    training.early_stopping.enabled = false;
    let config = RunConfig { model: ModelSpec { hidden: vec![256, 256], activation: Activation::Relu, dropout, batch_norm, ..ModelSpec::default() }, training };
    let head = Head { task: Task::Binary, classes: 2, loss: RegressionLoss::Mse, huber_delta: 1.0 };
    let started = Instant::now();
    let result = train(head, &config, 1, &RunData { train_x: &x, train_y: &y, validation_x: &vx, validation_y: &vy }, "roc_auc").expect("training");
    let seconds = started.elapsed().as_secs_f64();
    let samples = (rows * epochs) as f64;
    let params = result.parameter_count as f64;
    println!("reference MLP 32-256-256-1 (dropout {dropout}, batch norm {batch_norm}), {rows} rows x {epochs} epochs, batch 256, 1 thread");
    println!("  {:.0} training samples/s ({seconds:.2} s, {params} parameters, ~{:.2} GFLOP/s at 6 x parameters per sample)", samples / seconds, 6.0 * params * samples / seconds / 1e9);
}
