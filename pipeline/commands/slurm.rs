//! `tabcard slurm <manifest>`: write (and with `--submit`, submit) a SLURM job array that trains the
//! experiment's runs shard by shard into a shared results folder, plus the dependent merge job
//! that selects, tests and writes the card. The array size follows the cluster's `MaxArraySize`.

use std::fmt::Write;
use std::path::{Path, PathBuf};
use std::process::Command;

use crate::error::{Error, Result};
use crate::experiment::open;
use crate::experiment::plan;
use crate::store::{create_dir, write_atomic, Layout};
use crate::sweep::slurm::{
    array_script, merge_script, parse_max_array_size, task_count, ScriptInputs, TaskResources, DEFAULT_MAX_ARRAY_SIZE,
};

pub struct SlurmOptions {
    pub results_root: PathBuf,
    pub resources: TaskResources,
    /// Runs packed into one array task; default: one per CPU of the task.
    pub runs_per_task: Option<usize>,
    /// The tabcard binary the tasks run; default: this one.
    pub executable: Option<PathBuf>,
    pub submit: bool,
}

fn absolute(path: &Path) -> Result<PathBuf> {
    std::path::absolute(path).map_err(|e| Error::io(path, "resolve the absolute path of", e))
}

/// The cluster's array cap and where it came from, or SLURM's default when `scontrol` is absent.
fn max_array_size() -> (usize, &'static str) {
    let output = Command::new("scontrol").args(["show", "config"]).output();
    match output.ok().filter(|o| o.status.success()).and_then(|o| parse_max_array_size(&String::from_utf8_lossy(&o.stdout))) {
        Some(n) => (n, "from scontrol show config"),
        None => (DEFAULT_MAX_ARRAY_SIZE, "SLURM's default; scontrol did not answer"),
    }
}

/// Runs `sbatch --parsable` with `args` and returns the job id it prints.
fn sbatch(args: &[&str]) -> Result<String> {
    let output = Command::new("sbatch")
        .arg("--parsable")
        .args(args)
        .output()
        .map_err(|e| Error::Usage(format!("cannot run sbatch (is SLURM installed and on PATH?): {e}")))?;
    if !output.status.success() {
        return Err(Error::Usage(format!("sbatch {} failed: {}", args.join(" "), String::from_utf8_lossy(&output.stderr).trim())));
    }
    let stdout = String::from_utf8_lossy(&output.stdout);
    let id = stdout.trim().split(';').next().unwrap_or_default().to_string();
    if id.is_empty() || !id.chars().all(|c| c.is_ascii_digit()) {
        return Err(Error::Usage(format!("sbatch printed no job id (got `{}`)", stdout.trim())));
    }
    Ok(id)
}

pub fn run(manifest_path: &Path, options: &SlurmOptions) -> Result<String> {
    let r = &options.resources;
    if r.cpus_per_task == 0 {
        return Err(Error::Usage("--cpus-per-task must be at least 1".into()));
    }
    let results_root = absolute(&options.results_root)?;
    crate::sweep::slurm::check_directive_values(r, &results_root).map_err(Error::Usage)?;
    let exp = open(manifest_path)?;
    let plan = plan::build(&exp.manifest, &exp.run_naming())?;
    let manifest = absolute(manifest_path)?;
    let executable = match &options.executable {
        Some(p) => absolute(p)?,
        None => std::env::current_exe().map_err(|e| Error::io(Path::new("tabcard"), "locate the running executable", e))?,
    };
    let runs_per_task = options.runs_per_task.unwrap_or(r.cpus_per_task).max(1);
    let (cap, cap_source) = max_array_size();
    let tasks = task_count(plan.runs.len(), runs_per_task, cap);

    let folder = results_root.join("slurm").join(exp.short_id());
    let logs = folder.join("logs");
    create_dir(&logs)?;
    let inputs = ScriptInputs {
        experiment_name: &exp.manifest.experiment.name,
        fingerprint: &exp.fingerprint,
        runs: plan.runs.len(),
        tasks,
        executable: &executable,
        manifest: &manifest,
        results_root: &results_root,
        logs: &logs,
        resources: r,
    };
    let array = array_script(&inputs);
    let merge = merge_script(&inputs);
    let array_path = folder.join("array.sh");
    let merge_path = folder.join("merge.sh");
    write_atomic(&array_path, array.as_bytes())?;
    write_atomic(&merge_path, merge.as_bytes())?;

    let stored = Layout::new(results_root.join(exp.short_id()));
    let done = plan.runs.iter().filter(|s| crate::store::run::is_run_folder(&stored.run(&s.id))).count();

    let mut out = String::new();
    let _ = writeln!(out, "experiment {} ({})", crate::text::terminal_safe(&exp.manifest.experiment.name), exp.fingerprint);
    let _ = writeln!(
        out,
        "{} runs ({done} already stored) in {tasks} array tasks of up to {} runs, {} each; MaxArraySize {cap} ({cap_source})",
        plan.runs.len(),
        plan.runs.len().div_ceil(tasks),
        crate::format::count(r.cpus_per_task, "CPU", "CPUs")
    );
    let _ = writeln!(out, "array script  {}", array_path.display());
    let _ = writeln!(out, "merge script  {}", merge_path.display());
    let _ = writeln!(out, "task logs     {}", logs.display());
    let _ = writeln!(out, "\n{array}");
    if options.submit {
        let array_path = array_path.to_string_lossy();
        let merge_path = merge_path.to_string_lossy();
        let array_job = sbatch(&[&array_path])?;
        let dependency = format!("--dependency=afterany:{array_job}");
        let merge_job = sbatch(&[&dependency, &merge_path])?;
        let _ = writeln!(out, "submitted array job {array_job} and merge job {merge_job} (runs after every array task has ended)");
    } else {
        let _ = writeln!(
            out,
            "submit with:  jobid=$(sbatch --parsable {}) && sbatch --dependency=afterany:$jobid {}",
            array_path.display(),
            merge_path.display()
        );
        let _ = writeln!(out, "or rerun this command with --submit");
    }
    Ok(out)
}
