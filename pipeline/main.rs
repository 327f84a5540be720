//! The `tabcard` command line: parse arguments, run one command, print its report, map errors to
//! exit codes. The only place that talks to the terminal (including the progress bar).

use clap::{Parser, Subcommand};
use std::io::IsTerminal;
use std::path::PathBuf;
use std::process::ExitCode;

use tabcard::commands;
use tabcard::error::exit;
use tabcard::sweep::Event;

#[derive(Parser)]
#[command(name = "tabcard", version, about = "Seeded MLP experiments on tabular data, with model cards an auditor can rerun bit-for-bit")]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Validate a manifest and its data; print fingerprints, data summary and run plan.
    Check { manifest: PathBuf },
    /// Train every pending run of an experiment, select and test the best configuration, write the card.
    Train {
        manifest: PathBuf,
        /// Folder holding one results folder per experiment fingerprint, and the ledger.
        #[arg(long, default_value = "results")]
        results: PathBuf,
        /// Runs trained at once (each run is single-threaded); default: available cores.
        #[arg(long)]
        jobs: Option<usize>,
        /// Train only shard K of N of the run list (0 <= K < N, run i belongs to shard i mod N), e.g. one task of a job array.
        #[arg(long, value_name = "K/N")]
        shard: Option<tabcard::shard::Shard>,
    },
    /// Write a SLURM job array that trains the experiment shard by shard on a cluster, plus the merge job; --submit hands both to sbatch.
    Slurm {
        manifest: PathBuf,
        /// Results root on a file system every node shares (written into the scripts as an absolute path).
        #[arg(long, default_value = "results")]
        results: PathBuf,
        /// CPUs per array task; each task trains that many runs at once.
        #[arg(long, default_value_t = 2)]
        cpus_per_task: usize,
        /// Runs packed into one array task (default: --cpus-per-task); more tasks are capped by the cluster's MaxArraySize.
        #[arg(long)]
        runs_per_task: Option<usize>,
        /// Memory per task, as sbatch --mem takes it.
        #[arg(long, default_value = "4G")]
        mem: String,
        /// Time limit per task, as sbatch --time takes it (default: the partition's).
        #[arg(long)]
        time: Option<String>,
        #[arg(long)]
        partition: Option<String>,
        #[arg(long)]
        account: Option<String>,
        /// An environment module to load in each task (repeatable, in order).
        #[arg(long = "module", value_name = "MODULE")]
        modules: Vec<String>,
        /// The tabcard executable the tasks run (default: this one).
        #[arg(long)]
        executable: Option<PathBuf>,
        /// Submit the array and the dependent merge job with sbatch.
        #[arg(long)]
        submit: bool,
    },
    /// Rerun an experiment from its results folder (or manifest) and compare every tensor, history row and metric.
    Verify {
        /// A results folder, or a manifest whose results live under --results.
        target: PathBuf,
        /// Retrain every run, not only the selected configuration's.
        #[arg(long)]
        all: bool,
        #[arg(long, default_value = "results")]
        results: PathBuf,
        #[arg(long)]
        jobs: Option<usize>,
        /// Data file to use instead of the recorded path (it must match the recorded fingerprints).
        #[arg(long)]
        data: Option<PathBuf>,
    },
    /// Score a Parquet file with a stored model (a run folder, or a results folder's selected run).
    Predict {
        model: PathBuf,
        input: PathBuf,
        /// The predictions file to write: `.parquet` or `.csv` (the extension names the format).
        /// Never the input table nor a path inside a results store.
        #[arg(long)]
        out: PathBuf,
        /// Copy input columns that are neither features nor ids into the output.
        #[arg(long)]
        keep_extra: bool,
        /// Replace `--out` if it exists.
        #[arg(long)]
        force: bool,
    },
    /// Show what changed between two results folders: manifest keys, data, metrics.
    Compare { a: PathBuf, b: PathBuf },
    /// List every recorded train invocation and whether it was verified.
    History {
        #[arg(long, default_value = "results")]
        results: PathBuf,
    },
    /// Re-render the model card of a results folder from stored results (no retraining).
    Card {
        results_folder: PathBuf,
        /// Folder of tera templates overriding the built-in ones file by file (card.md.tera, cautions.md.tera).
        #[arg(long)]
        templates: Option<PathBuf>,
    },
    /// Write the invented demo tables (lease defaults, greenhouse yield) as Parquet.
    DemoData {
        #[arg(default_value = "data-demo")]
        folder: PathBuf,
        #[arg(long, default_value_t = 20261202)]
        seed: u64,
    },
}

fn progress_display() -> (indicatif::ProgressBar, impl Fn(Event) + Sync) {
    let bar = if std::io::stderr().is_terminal() { indicatif::ProgressBar::new(0) } else { indicatif::ProgressBar::hidden() };
    bar.set_style(
        indicatif::ProgressStyle::with_template("{bar:30} {pos}/{len} runs  {msg}  eta {eta}")
            .unwrap_or_else(|_| indicatif::ProgressStyle::default_bar()),
    );
    let failed = std::sync::atomic::AtomicUsize::new(0);
    let handle = bar.clone();
    let on_event = move |event: Event| match event {
        Event::Waiting(message) => eprintln!("{message}"),
        Event::Planned { pending, reused } => {
            handle.set_length(pending as u64);
            handle.set_message(format!("{reused} reused"));
        }
        Event::Finished { outcome, .. } => {
            if !outcome.is_completed() {
                let n = failed.fetch_add(1, std::sync::atomic::Ordering::Relaxed) + 1;
                handle.set_message(format!("{n} failed"));
            }
            handle.inc(1);
        }
    };
    (bar, on_event)
}

fn default_jobs() -> usize {
    std::thread::available_parallelism().map(|n| n.get()).unwrap_or(1)
}

fn main() -> ExitCode {
    tabcard::numerics::prepare_process();
    let cli = Cli::parse();
    let result = match cli.command {
        Command::Check { manifest } => commands::check::run(&manifest, default_jobs()).map(|r| (r, exit::OK)),
        Command::Train { manifest, results, jobs, shard } => {
            let jobs = jobs.unwrap_or_else(default_jobs);
            let (bar, on_event) = progress_display();
            let options = commands::train::TrainOptions { results_root: results, jobs, shard };
            let outcome = commands::train::run(&manifest, &options, &on_event);
            bar.finish_and_clear();
            outcome.map(|o| (o.report, if o.failed_runs > 0 { exit::RUNS_FAILED } else { exit::OK }))
        }
        Command::Verify { target, all, results, jobs, data } => {
            let options = commands::verify::VerifyOptions { all, jobs: jobs.unwrap_or_else(default_jobs), data, results_root: results };
            commands::verify::run(&target, &options).map(|o| (o.report, if o.identical { exit::OK } else { exit::NOT_VERIFIED }))
        }
        Command::Predict { model, input, out, keep_extra, force } => {
            commands::predict::run(&model, &input, &out, &commands::predict::PredictOptions { keep_extra, force }).map(|r| (r, exit::OK))
        }
        Command::Slurm { manifest, results, cpus_per_task, runs_per_task, mem, time, partition, account, modules, executable, submit } => {
            let resources = tabcard::slurm::TaskResources { cpus_per_task, memory: mem, time_limit: time, partition, account, modules };
            let options = commands::slurm::SlurmOptions { results_root: results, resources, runs_per_task, executable, submit };
            commands::slurm::run(&manifest, &options).map(|r| (r, exit::OK))
        }
        Command::Compare { a, b } => commands::compare::run(&a, &b).map(|r| (r, exit::OK)),
        Command::History { results } => commands::history::run(&results).map(|r| (r, exit::OK)),
        Command::Card { results_folder, templates } => commands::card::run(&results_folder, templates.as_deref()).map(|r| (r, exit::OK)),
        Command::DemoData { folder, seed } => commands::demo::run(&folder, seed).map(|r| (r, exit::OK)),
    };
    match result {
        Ok((report, code)) => {
            print!("{report}");
            match code {
                exit::RUNS_FAILED => eprintln!("error: some runs failed or diverged (see above)"),
                exit::NOT_VERIFIED => eprintln!("error: verification found differences (see above)"),
                _ => {}
            }
            ExitCode::from(code)
        }
        Err(e) => {
            eprintln!("error: {}", tabcard::text::terminal_safe(&e.to_string()));
            ExitCode::from(e.exit_code())
        }
    }
}
