//! The `tabcard` command line: parse arguments, run one command, print its report, map errors to
//! exit codes. The only place that talks to the terminal (including the progress bar).

use clap::{Parser, Subcommand};
use std::path::PathBuf;
use std::process::ExitCode;

use tabcard::commands;
use tabcard::error::exit;

mod progress;
use progress::{note, progress_display};

#[derive(Parser)]
#[command(
    name = "tabcard",
    version,
    about = "Seeded MLP experiments on tabular data, with model cards an auditor can rerun bit-for-bit",
    after_help = "Start from your data:  tabcard scaffold data.parquet --target outcome --out experiment.toml\nThen:                 tabcard check experiment.toml && tabcard train experiment.toml"
)]
struct Cli {
    /// Print no progress (header, bar or per-run lines) on stderr; reports and errors still print.
    #[arg(long, global = true)]
    quiet: bool,
    /// Print the report as one JSON document instead of text; only check, train, verify, compare,
    /// history, list, monitor and log-check have one (each also takes `--json` after its name); fields are
    /// listed in README, "Machine-readable output".
    #[arg(long)]
    json: bool,
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Write a commented starter manifest for a Parquet file: every column with its detected type and suggested role, every section with its defaults.
    #[command(after_help = "Example:\n  tabcard scaffold data/claims.parquet --target approved --out experiments/claims.toml")]
    Scaffold {
        /// The Parquet file the experiment will use.
        data: PathBuf,
        /// The column to predict (default: the last column).
        #[arg(long)]
        target: Option<String>,
        /// Where to write the manifest (default: print it); the data path inside is relative to it.
        #[arg(long)]
        out: Option<PathBuf>,
        /// Replace `--out` if it exists.
        #[arg(long)]
        force: bool,
    },
    /// Validate a manifest and its data; print fingerprints, data summary, split checks, run plan and memory estimate.
    #[command(after_help = "Example:\n  tabcard check experiments/lease-default.toml")]
    Check {
        /// Print the report as one JSON document instead of text (fields: README, "Machine-readable output").
        #[arg(long)]
        json: bool,
        /// The experiment manifest (TOML).
        manifest: PathBuf,
    },
    /// Train every pending run of an experiment, select and test the best configuration, write the card.
    #[command(
        after_help = "Examples:\n  tabcard train experiments/lease-default.toml\n  tabcard train experiments/lease-default.toml --jobs 8 --results /shared/results"
    )]
    Train {
        /// Print the report as one JSON document instead of text (fields: README, "Machine-readable output").
        #[arg(long)]
        json: bool,
        /// The experiment manifest (TOML).
        manifest: PathBuf,
        /// Folder holding one results folder per experiment fingerprint, and the ledger.
        #[arg(long, default_value = "results")]
        results: PathBuf,
        /// Runs trained at once (each run is single-threaded), and the most threads reading the
        /// data or scoring bootstrap resamples (at most 4); default: available cores.
        #[arg(long)]
        jobs: Option<usize>,
        /// Train only shard K of N of the run list (0 <= K < N, run i belongs to shard i mod N), e.g. one task of a job array.
        #[arg(long, value_name = "K/N")]
        shard: Option<tabcard::sweep::shard::Shard>,
    },
    /// Write a SLURM job array that trains the experiment shard by shard on a cluster, plus the merge job; --submit hands both to sbatch.
    #[command(
        after_help = "Example:\n  tabcard slurm experiments/lease-default.toml --results /shared/results --cpus-per-task 4 --partition cpu --submit"
    )]
    Slurm {
        /// The experiment manifest (TOML), on a file system every node shares.
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
        /// The SLURM partition to submit to, as sbatch --partition takes it (default: the cluster's).
        #[arg(long)]
        partition: Option<String>,
        /// The SLURM account to charge, as sbatch --account takes it (default: yours).
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
    #[command(after_help = "Examples:\n  tabcard verify results/4f13816fd93d258d\n  tabcard verify experiments/lease-default.toml --all")]
    Verify {
        /// Print the report as one JSON document instead of text (fields: README, "Machine-readable output").
        #[arg(long)]
        json: bool,
        /// A results folder, or a manifest whose results live under --results.
        target: PathBuf,
        /// Retrain every run, not only the selected configuration's.
        #[arg(long)]
        all: bool,
        /// The results root, where a manifest's results folder is looked up.
        #[arg(long, default_value = "results")]
        results: PathBuf,
        /// Runs retrained at once, and the most threads reading the data or scoring bootstrap
        /// resamples (at most 4); default: available cores.
        #[arg(long)]
        jobs: Option<usize>,
        /// Data file to use instead of the recorded path (it must match the recorded fingerprints).
        #[arg(long)]
        data: Option<PathBuf>,
        /// The allowed-signers file (ssh-keygen's format) recorded reviews are checked against
        /// (default: $TABCARD_ALLOWED_SIGNERS, else allowed_signers at the results root).
        #[arg(long, value_name = "FILE")]
        allowed_signers: Option<PathBuf>,
    },
    /// Score a Parquet file with a stored model (a run folder, or a results folder's selected run).
    #[command(after_help = "Example:\n  tabcard predict results/4f13816fd93d258d new-applications.parquet --out scores.parquet")]
    Predict {
        /// A results folder (its selected run) or one run folder.
        model: PathBuf,
        /// The Parquet table to score; it needs the training features (by name) and may hold more.
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
        /// CSV only: write text cells and column names that begin with =, +, -, @, tab or carriage
        /// return with a leading ' so a spreadsheet shows them as text instead of running them as
        /// formulas (numbers such as -5 are never changed). The ' becomes part of the text for any
        /// program other than a spreadsheet.
        #[arg(long)]
        guard_formulas: bool,
        /// Binary models: decide at this threshold on the positive-class probability, in (0, 1),
        /// instead of the deployed one the card states (the output's decision_threshold records it).
        #[arg(long, allow_negative_numbers = true)]
        threshold: Option<f64>,
        /// Add each row's principal reasons, at most N (default 4, the US Regulation B practice):
        /// the features that moved its log-odds (classifiers) or prediction (regression) most, by
        /// integrated gradients from a reference row; columns reasons, reason_features,
        /// reason_contributions, reasons_gap.
        #[arg(long, value_name = "N", num_args = 0..=1, default_missing_value = "4", allow_negative_numbers = true)]
        reasons: Option<i64>,
        /// The reference row reasons are measured from: `median` (the training median row) or
        /// `threshold` (binary: the mean of training rows scored at or just above the deployed
        /// threshold).
        #[arg(long, value_enum, default_value = "median", requires = "reasons")]
        reference: ReferenceArg,
        /// Append this scoring to a hash-chained decision log (JSON lines: time, model, results
        /// digest, input content hash, rows, threshold, decision counts), its latest line's hash
        /// also recorded under the results folder's decisions/; `tabcard log-check` checks it.
        #[arg(long, value_name = "FILE")]
        log: Option<PathBuf>,
    },
    /// Check a decision log `predict --log` kept: every line's link to the one before, and the heads its results folders recorded.
    #[command(
        after_help = "Example:\n  tabcard log-check decisions.jsonl --results results\n\nExit status: 0 the log holds, 6 it does not (the first broken line, a removed tail or a rewritten chain is named)."
    )]
    LogCheck {
        /// Print the report as one JSON document instead of text (fields: README, "Machine-readable output").
        #[arg(long)]
        json: bool,
        /// The decision log.
        log: PathBuf,
        /// The results root holding the results folders that scored.
        #[arg(long, default_value = "results")]
        results: PathBuf,
    },
    /// Show what differs between two experiments, given as results folders or manifests: manifest keys, data and, for results, metrics; for manifests, which runs would be new.
    #[command(
        after_help = "Examples:\n  tabcard compare results/4f13816fd93d258d results/8e1f0c2a9b7d4e11\n  tabcard compare experiments/lease-default.toml experiments/lease-wider.toml"
    )]
    Compare {
        /// Print the report as one JSON document instead of text (fields: README, "Machine-readable output").
        #[arg(long)]
        json: bool,
        /// The first experiment: a results folder or a manifest.
        a: PathBuf,
        /// The second experiment: a results folder or a manifest.
        b: PathBuf,
        /// The results root, where stored runs are looked up for manifests.
        #[arg(long, default_value = "results")]
        results: PathBuf,
    },
    /// List every recorded train invocation and whether it was verified.
    #[command(after_help = "Example:\n  tabcard history --results results")]
    History {
        /// Print the report as one JSON document instead of text (fields: README, "Machine-readable output").
        #[arg(long)]
        json: bool,
        /// The results root holding ledger.jsonl.
        #[arg(long, default_value = "results")]
        results: PathBuf,
        /// The allowed-signers file (ssh-keygen's format) recorded reviews are checked against
        /// (default: $TABCARD_ALLOWED_SIGNERS, else allowed_signers at the results root).
        #[arg(long, value_name = "FILE")]
        allowed_signers: Option<PathBuf>,
    },
    /// List the experiments in a results root: fingerprint, name, date, selected configuration, headline, verified or not.
    #[command(after_help = "Example:\n  tabcard list --results results")]
    List {
        /// Print the report as one JSON document instead of text (fields: README, "Machine-readable output").
        #[arg(long)]
        json: bool,
        /// The results root.
        #[arg(long, default_value = "results")]
        results: PathBuf,
    },
    /// Re-render the model card of a results folder from stored results (no retraining).
    #[command(after_help = "Example:\n  tabcard card results/4f13816fd93d258d --templates my-templates/")]
    Card {
        /// The results folder whose card to write.
        results_folder: PathBuf,
        /// Folder of tera templates overriding the built-in ones file by file (card.md.tera, cautions.md.tera).
        #[arg(long)]
        templates: Option<PathBuf>,
    },
    /// Set a batch of new rows (and its outcomes, when it holds the target) against the population the model was trained on; record the result beside the experiment.
    #[command(
        after_help = "Examples:\n  tabcard monitor results/4f13816fd93d258d applications-2027-01.parquet\n  tabcard monitor experiments/lease-default.toml outcomes-2027-01.parquet --outcomes\n  tabcard monitor results/4f13816fd93d258d --history\n\nExit status: 0 stable, 8 watch, 9 act (6 when a batch monitored again does not reproduce its record)."
    )]
    Monitor {
        /// Print the report as one JSON document instead of text (fields: README, "Machine-readable output").
        #[arg(long)]
        json: bool,
        /// A results folder, or a manifest whose results live under --results.
        target: PathBuf,
        /// The batch (Parquet) with the model's feature columns, and the target once outcomes are known.
        #[arg(required_unless_present = "history")]
        batch: Option<PathBuf>,
        /// Require the target column and compare the batch's outcomes with the card's test figures.
        #[arg(long)]
        outcomes: bool,
        /// Print every recorded batch of the folder, oldest first, instead of monitoring one.
        #[arg(long, conflicts_with_all = ["batch", "outcomes"])]
        history: bool,
        /// The results root, where a manifest's results folder is looked up and monitoring.jsonl is kept.
        #[arg(long, default_value = "results")]
        results: PathBuf,
    },
    /// Record a signed review of a results folder's card (developer, validator or approver), as an attached record that never changes the evidence.
    #[command(
        after_help = "Examples:\n  tabcard review results/4f13816fd93d258d --role validator --decision approved --valid-until 2027-06-30 --key ~/.ssh/id_ed25519\n  tabcard review results/4f13816fd93d258d --role approver --decision approved-with-conditions --conditions 'monthly monitoring' --statement-out review.json\n  ssh-keygen -Y sign -n tabcard-review -f ~/.ssh/id_ed25519 review.json\n  tabcard review results/4f13816fd93d258d --statement review.json --signature review.json.sig\n\nverify and history check every review against an allowed-signers file (ssh-keygen's format): --allowed-signers, else $TABCARD_ALLOWED_SIGNERS, else allowed_signers at the results root."
    )]
    Review {
        /// The results folder whose card was reviewed.
        results_folder: PathBuf,
        /// The reviewer's duty for this model.
        #[arg(long, value_enum, required_unless_present = "statement")]
        role: Option<tabcard::review::statement::Role>,
        /// What the reviewer decided.
        #[arg(long, value_enum, required_unless_present = "statement")]
        decision: Option<tabcard::review::statement::Decision>,
        /// The conditions of approved-with-conditions (signed with the decision).
        #[arg(long)]
        conditions: Option<String>,
        /// A text file with the reviewer's note (its text is signed with the decision).
        #[arg(long)]
        note: Option<PathBuf>,
        /// The last day the review stands, YYYY-MM-DD (UTC); verify and history report it expired after.
        #[arg(long, value_name = "DATE")]
        valid_until: Option<String>,
        /// Your identity as the allowed-signers file names you (default: git's user.email, else USER).
        #[arg(long)]
        signer: Option<String>,
        /// Sign with this unencrypted Ed25519 OpenSSH private key.
        #[arg(long, conflicts_with_all = ["statement_out", "statement"], required_unless_present_any = ["statement_out", "statement"])]
        key: Option<PathBuf>,
        /// Write the statement here instead, to sign with `ssh-keygen -Y sign -n tabcard-review` (any key it can use).
        #[arg(long, conflicts_with = "statement")]
        statement_out: Option<PathBuf>,
        /// Replace --statement-out if it exists.
        #[arg(long, requires = "statement_out")]
        force: bool,
        /// Attach this statement (written by --statement-out) ...
        #[arg(long, requires = "signature", conflicts_with_all = ["role", "decision", "conditions", "note", "valid_until", "signer"])]
        statement: Option<PathBuf>,
        /// ... with this armoured SSH signature of it (ssh-keygen's `.sig`).
        #[arg(long, requires = "statement")]
        signature: Option<PathBuf>,
        /// The allowed-signers file the new review is checked against (it is recorded either way).
        #[arg(long, value_name = "FILE")]
        allowed_signers: Option<PathBuf>,
    },
    /// Write the invented demo tables (lease defaults, greenhouse yield) as Parquet.
    #[command(after_help = "Example:\n  tabcard demo-data data-demo")]
    DemoData {
        /// The folder to write the two tables into.
        #[arg(default_value = "data-demo")]
        folder: PathBuf,
        /// The seed of the invented data.
        #[arg(long, default_value_t = 20261202)]
        seed: u64,
        /// Replace a table already there that differs from the one this seed gives.
        #[arg(long)]
        force: bool,
    },
}

/// The regular file standard output is redirected to, where the system says (Linux's
/// `/proc/self/fd/1`); `None` for a terminal, a pipe or another system.
fn redirected_stdout() -> Option<PathBuf> {
    let path = std::fs::read_link("/proc/self/fd/1").ok()?;
    std::fs::metadata(&path).ok()?.is_file().then_some(path)
}

fn default_jobs() -> usize {
    std::thread::available_parallelism().map(|n| n.get()).unwrap_or(1)
}

/// What a command leaves to print: its text, its JSON when it has one, and its exit status.
struct Done {
    text: String,
    json: Option<serde_json::Value>,
    code: u8,
}

impl Done {
    fn text(text: String) -> Self {
        Done { text, json: None, code: exit::OK }
    }

    fn report(r: commands::Report) -> Self {
        Done { text: r.text, json: Some(r.json), code: exit::OK }
    }
}

fn run(cli: Cli) -> tabcard::Result<Done> {
    let quiet = cli.quiet;
    Ok(match cli.command {
        Command::Scaffold { data, target, out, force } => {
            let stdout_file = if out.is_none() { redirected_stdout() } else { None };
            Done::text(commands::scaffold::run(&data, &commands::scaffold::ScaffoldOptions { target, out, force, stdout_file })?)
        }
        Command::Check { manifest, .. } => Done::report(commands::check::run(&manifest, default_jobs())?),
        Command::Train { manifest, results, jobs, shard, .. } => {
            let jobs = tabcard::threads::workers(jobs.unwrap_or_else(default_jobs), tabcard::threads::MAX_WORKERS)?;
            tabcard::threads::limit_to(jobs);
            let (bar, on_event) = progress_display(quiet);
            let options = commands::train::TrainOptions { results_root: results, jobs, shard };
            let outcome = commands::train::run(&manifest, &options, &on_event);
            bar.finish_and_clear();
            let o = outcome?;
            Done { text: o.report, json: Some(o.json), code: if o.failed_runs > 0 { exit::RUNS_FAILED } else { exit::OK } }
        }
        Command::Verify { target, all, results, jobs, data, allowed_signers, .. } => {
            let jobs = tabcard::threads::workers(jobs.unwrap_or_else(default_jobs), tabcard::threads::MAX_WORKERS)?;
            tabcard::threads::limit_to(jobs);
            let options = commands::verify::VerifyOptions { all, jobs, data, results_root: results, allowed_signers };
            let (bar, on_event) = progress_display(quiet);
            let outcome = commands::verify::run(&target, &options, &on_event);
            bar.finish_and_clear();
            let o = outcome?;
            let code = match (o.identical, o.reviews_hold) {
                (false, _) => exit::NOT_VERIFIED,
                (true, false) => exit::REVIEW_PROBLEM,
                (true, true) => exit::OK,
            };
            Done { text: o.report, json: Some(o.json), code }
        }
        Command::Predict { model, input, out, keep_extra, force, guard_formulas, threshold, reasons, reference, log } => {
            let reasons = match reasons {
                Some(n) if n < 1 => {
                    return Err(tabcard::error::Error::Usage(format!(
                        "--reasons must be at least 1, got {n} (Regulation B practice is 4, the default)"
                    )))
                }
                Some(n) => Some((n as usize, reference.into())),
                None => None,
            };
            if guard_formulas && commands::predict::OutputFormat::of(&out)? != commands::predict::OutputFormat::Csv {
                return Err(tabcard::Error::Usage("--guard-formulas applies to CSV output only (--out ending in .csv)".into()));
            }
            if let Some(log) = &log {
                tabcard::store::check_output_path("--log", "the decision log", log, &[&input, &out], true)?;
            }
            let options = commands::predict::PredictOptions { keep_extra, force, guard_formulas, threshold, reasons, log };
            Done::text(commands::predict::run(&model, &input, &out, &options)?)
        }
        Command::Slurm { manifest, results, cpus_per_task, runs_per_task, mem, time, partition, account, modules, executable, submit } => {
            let resources =
                tabcard::sweep::slurm::TaskResources { cpus_per_task, memory: mem, time_limit: time, partition, account, modules };
            let options = commands::slurm::SlurmOptions { results_root: results, resources, runs_per_task, executable, submit };
            Done::text(commands::slurm::run(&manifest, &options)?)
        }
        Command::Compare { a, b, results, .. } => Done::report(commands::compare::run(&a, &b, &results)?),
        Command::History { results, allowed_signers, .. } => Done::report(commands::history::run(&results, allowed_signers.as_deref())?),
        Command::List { results, .. } => Done::report(commands::list::run(&results)?),
        Command::Card { results_folder, templates } => Done::text(commands::card::run(&results_folder, templates.as_deref())?),
        Command::Monitor { target, batch, outcomes, history, results, .. } => {
            let o = match batch {
                Some(batch) if !history => {
                    commands::monitor::run(&target, &batch, &commands::monitor::MonitorOptions { results_root: results, outcomes })?
                }
                _ => commands::monitor::history(&target, &results)?,
            };
            let code = match (o.reproduced, o.status) {
                (false, _) => exit::NOT_VERIFIED,
                (_, Some("act")) => exit::MONITOR_ACT,
                (_, Some("watch")) => exit::MONITOR_WATCH,
                _ => exit::OK,
            };
            Done { text: o.report, json: Some(o.json), code }
        }
        Command::Review {
            results_folder,
            role,
            decision,
            conditions,
            note,
            valid_until,
            signer,
            key,
            statement_out,
            force,
            statement,
            signature,
            allowed_signers,
        } => {
            use commands::review::Signing;
            let signing = match (key, statement_out, statement, signature) {
                (Some(key), _, _, _) => Signing::Key(key),
                (_, Some(path), _, _) => Signing::StatementOut { path, force },
                (_, _, Some(statement), Some(signature)) => Signing::Signed { statement, signature },
                _ => return Err(tabcard::Error::Usage("review needs --key, --statement-out, or --statement with --signature".into())),
            };
            let options =
                commands::review::ReviewOptions { role, decision, conditions, note, valid_until, signer, signing, allowed_signers };
            Done::text(commands::review::run(&results_folder, &options)?)
        }
        Command::LogCheck { log, results, .. } => {
            let o = commands::log_check::run(&log, &results)?;
            Done { text: o.report, json: Some(o.json), code: if o.holds { exit::OK } else { exit::NOT_VERIFIED } }
        }
        Command::DemoData { folder, seed, force } => Done::text(commands::demo::run(&folder, seed, force)?),
    })
}

fn main() -> ExitCode {
    use std::io::Write;
    tabcard::numerics::prepare_process();
    let cli = Cli::parse();
    let json = cli.json
        || matches!(
            cli.command,
            Command::Check { json: true, .. }
                | Command::Train { json: true, .. }
                | Command::Verify { json: true, .. }
                | Command::Compare { json: true, .. }
                | Command::History { json: true, .. }
                | Command::List { json: true, .. }
                | Command::Monitor { json: true, .. }
                | Command::LogCheck { json: true, .. }
        );
    let reports_json = matches!(
        cli.command,
        Command::Check { .. }
            | Command::Train { .. }
            | Command::Verify { .. }
            | Command::Compare { .. }
            | Command::History { .. }
            | Command::List { .. }
            | Command::Monitor { .. }
            | Command::LogCheck { .. }
    );
    if json && !reports_json {
        note("error: --json is available for check, train, verify, compare, history, list, monitor and log-check, not for this command");
        return ExitCode::from(exit::BAD_INPUT);
    }
    match run(cli) {
        Ok(done) => {
            let mut stdout = std::io::stdout();
            // A closed stdout (`| head`) must not turn finished work into a panic.
            let _ = match (json, &done.json) {
                (true, Some(value)) => writeln!(stdout, "{}", serde_json::to_string_pretty(value).unwrap_or_default()),
                _ => write!(stdout, "{}", done.text),
            };
            match done.code {
                exit::RUNS_FAILED => note("error: some runs failed or diverged (see above)"),
                exit::NOT_VERIFIED => note("error: verification found differences (see above)"),
                exit::MONITOR_ACT => note("monitor: a check reads act (see above)"),
                exit::MONITOR_WATCH => note("monitor: a check reads watch (see above)"),
                _ => {}
            }
            ExitCode::from(done.code)
        }
        Err(e) => {
            note(&format!("error: {}", tabcard::text::terminal_safe(&e.to_string())));
            ExitCode::from(e.exit_code())
        }
    }
}

/// `--reference`.
#[derive(Debug, Clone, Copy, clap::ValueEnum)]
enum ReferenceArg {
    Median,
    Threshold,
}

impl From<ReferenceArg> for commands::predict::ReferenceChoice {
    fn from(r: ReferenceArg) -> Self {
        match r {
            ReferenceArg::Median => commands::predict::ReferenceChoice::Median,
            ReferenceArg::Threshold => commands::predict::ReferenceChoice::Threshold,
        }
    }
}
