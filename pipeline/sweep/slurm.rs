//! Job-array scripts for the SLURM batch scheduler: how a plan's runs are packed into array tasks
//! (each task trains one shard), the submission script every task runs, and the merge script
//! that selects, tests and writes the card once the array is done. Pure text: running `scontrol`
//! and `sbatch` is the command's business.

use std::fmt::Write;
use std::path::Path;

/// The scheduler's cap on array indices when the cluster does not say (SLURM's default).
pub const DEFAULT_MAX_ARRAY_SIZE: usize = 1001;

/// What the user asked the scheduler for, per array task.
#[derive(Debug, Clone, PartialEq)]
pub struct TaskResources {
    pub cpus_per_task: usize,
    /// `--mem` as SLURM spells it, e.g. `4G`.
    pub memory: String,
    /// `--time`, e.g. `02:00:00`; the partition's default when `None`.
    pub time_limit: Option<String>,
    pub partition: Option<String>,
    pub account: Option<String>,
    /// Environment modules to load before tabcard starts, in order.
    pub modules: Vec<String>,
}

/// How many array tasks a sweep of `runs` runs needs at `runs_per_task` runs each, capped at the
/// cluster's `max_array_size` (indices 0..N-1 must stay below it): past the cap, each task
/// takes more runs.
pub fn task_count(runs: usize, runs_per_task: usize, max_array_size: usize) -> usize {
    let wanted = runs.div_ceil(runs_per_task.max(1));
    wanted.clamp(1, max_array_size.max(1))
}

/// `MaxArraySize` from the output of `scontrol show config`, if it is there.
pub fn parse_max_array_size(scontrol_config: &str) -> Option<usize> {
    scontrol_config.lines().find_map(|line| {
        let (key, value) = line.split_once('=')?;
        (key.trim() == "MaxArraySize").then(|| value.trim().parse().ok()).flatten()
    })
}

/// Everything a script needs to name.
pub struct ScriptInputs<'a> {
    pub experiment_name: &'a str,
    pub fingerprint: &'a str,
    pub runs: usize,
    pub tasks: usize,
    pub executable: &'a Path,
    pub manifest: &'a Path,
    pub results_root: &'a Path,
    pub logs: &'a Path,
    pub resources: &'a TaskResources,
}

/// Checks every value an `#SBATCH` line will carry before a script is written. sbatch reads those
/// lines itself, not through a shell, so quoting cannot protect them: a value with whitespace or
/// a line break (which would start a live shell line) is refused, and partition, account, memory
/// and time must have the forms SLURM gives them. Returns the first problem, naming the option.
pub fn check_directive_values(r: &TaskResources, results_root: &Path) -> Result<(), String> {
    let word = |s: &str, allowed: &dyn Fn(char) -> bool| !s.is_empty() && s.chars().all(allowed);
    let name_char = |c: char| c.is_ascii_alphanumeric() || "_.-".contains(c);
    if let Some(p) = &r.partition {
        if !word(p, &|c| name_char(c) || c == ',') {
            return Err(format!("--partition {p:?}: a partition name (or a comma-separated list) of letters, digits, _ . -"));
        }
    }
    if let Some(a) = &r.account {
        if !word(a, &name_char) {
            return Err(format!("--account {a:?}: an account name of letters, digits, _ . -"));
        }
    }
    let digits_then_unit = r.memory.trim_end_matches(['K', 'M', 'G', 'T']);
    if !word(digits_then_unit, &|c| c.is_ascii_digit()) || r.memory.len() > digits_then_unit.len() + 1 {
        return Err(format!("--mem {:?}: a size as sbatch --mem takes it, e.g. 4G or 4096M", r.memory));
    }
    if let Some(t) = &r.time_limit {
        if !word(t, &|c| c.is_ascii_digit() || c == ':' || c == '-') {
            return Err(format!("--time {t:?}: a time as sbatch --time takes it, e.g. 02:00:00 or 1-00:00:00"));
        }
    }
    let root = results_root.to_string_lossy();
    if root.chars().any(|c| c.is_whitespace() || c.is_control()) {
        return Err(format!(
            "--results {root:?}: the log paths of #SBATCH lines cannot hold spaces or line breaks; use a results root without them"
        ));
    }
    Ok(())
}

/// A word quoted for a POSIX shell.
pub fn shell_quote(word: &str) -> String {
    if !word.is_empty() && word.chars().all(|c| c.is_ascii_alphanumeric() || "/._-+=:,@%".contains(c)) {
        word.to_string()
    } else {
        format!("'{}'", word.replace('\'', "'\\''"))
    }
}

fn path_word(p: &Path) -> String {
    shell_quote(&p.to_string_lossy())
}

fn header(out: &mut String, inputs: &ScriptInputs<'_>, job_name: &str, log_name: &str) {
    let r = inputs.resources;
    let _ = writeln!(out, "#SBATCH --job-name={job_name}");
    let _ = writeln!(out, "#SBATCH --cpus-per-task={}", r.cpus_per_task);
    let _ = writeln!(out, "#SBATCH --ntasks=1");
    let _ = writeln!(out, "#SBATCH --mem={}", r.memory);
    if let Some(t) = &r.time_limit {
        let _ = writeln!(out, "#SBATCH --time={t}");
    }
    if let Some(p) = &r.partition {
        let _ = writeln!(out, "#SBATCH --partition={p}");
    }
    if let Some(a) = &r.account {
        let _ = writeln!(out, "#SBATCH --account={a}");
    }
    let _ = writeln!(out, "#SBATCH --output={}", inputs.logs.join(log_name).display());
}

fn preamble(out: &mut String, inputs: &ScriptInputs<'_>) {
    let _ = writeln!(out, "set -euo pipefail");
    for module in &inputs.resources.modules {
        let _ = writeln!(out, "module load {}", shell_quote(module));
    }
}

/// `exec tabcard train <manifest> --results <root> --jobs <the task's CPUs>`, as both scripts run it.
fn train_command(inputs: &ScriptInputs<'_>) -> String {
    format!(
        "exec {} train {} --results {} --jobs \"${{SLURM_CPUS_PER_TASK:-{}}}\"",
        path_word(inputs.executable),
        path_word(inputs.manifest),
        path_word(inputs.results_root),
        inputs.resources.cpus_per_task
    )
}

/// The job name: `tabcard-<role><first 8 hex digits of the fingerprint>`.
fn job_name(inputs: &ScriptInputs<'_>, role: &str) -> String {
    format!("tabcard-{role}{}", &inputs.fingerprint[..8.min(inputs.fingerprint.len())])
}

/// The array script: task K of N trains shard K/N of the plan on its CPUs.
pub fn array_script(inputs: &ScriptInputs<'_>) -> String {
    let n = inputs.tasks;
    let mut out = String::from("#!/bin/bash\n");
    let _ = writeln!(out, "# tabcard sweep as a SLURM job array: experiment {}", crate::text::terminal_safe(inputs.experiment_name));
    let _ = writeln!(out, "# fingerprint {}", inputs.fingerprint);
    let _ = writeln!(out, "# {} runs in {n} array tasks; task K trains shard K/{n} (run i belongs to shard i mod {n}).", inputs.runs);
    let _ = writeln!(out, "# The results folder must be on a file system every node shares.");
    header(&mut out, inputs, &job_name(inputs, ""), "array-%A_%a.out");
    let _ = writeln!(out, "#SBATCH --array=0-{}", n - 1);
    preamble(&mut out, inputs);
    let _ = writeln!(out, "{} --shard \"${{SLURM_ARRAY_TASK_ID}}/{n}\"", train_command(inputs));
    out
}

/// The merge script: after the array, finds every run stored (training any a failed task left
/// out), then selects, tests once, writes the card and the ledger line, as on one machine.
pub fn merge_script(inputs: &ScriptInputs<'_>) -> String {
    let mut out = String::from("#!/bin/bash\n");
    let _ = writeln!(out, "# tabcard merge step for experiment {}", crate::text::terminal_safe(inputs.experiment_name));
    let _ = writeln!(out, "# fingerprint {}", inputs.fingerprint);
    let _ = writeln!(out, "# Run after the array (sbatch --dependency=afterany:<array job id>): selects, tests and writes the card.");
    header(&mut out, inputs, &job_name(inputs, "merge-"), "merge-%j.out");
    preamble(&mut out, inputs);
    let _ = writeln!(out, "{}", train_command(inputs));
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn tasks_pack_runs_and_respect_the_array_cap() {
        assert_eq!(task_count(15, 4, 1001), 4);
        assert_eq!(task_count(16, 4, 1001), 4);
        assert_eq!(task_count(1, 4, 1001), 1);
        assert_eq!(task_count(5000, 1, 1001), 1001);
        assert_eq!(task_count(5000, 1, 0), 1);
        assert_eq!(task_count(0, 4, 1001), 1);
    }

    #[test]
    fn max_array_size_is_read_from_scontrol_output() {
        let text = "MaxArraySize            = 501\nMaxJobCount             = 10000\n";
        assert_eq!(parse_max_array_size(text), Some(501));
        assert_eq!(parse_max_array_size("MaxJobCount = 3\n"), None);
    }

    #[test]
    fn words_are_quoted_for_the_shell() {
        assert_eq!(shell_quote("/srv/results"), "/srv/results");
        assert_eq!(shell_quote("my results"), "'my results'");
        assert_eq!(shell_quote("it's"), "'it'\\''s'");
        assert_eq!(shell_quote(""), "''");
    }

    #[test]
    fn the_array_script_trains_one_shard_per_task() {
        let resources = TaskResources {
            cpus_per_task: 2,
            memory: "4G".into(),
            time_limit: Some("01:00:00".into()),
            partition: Some("cpu".into()),
            account: None,
            modules: vec!["rust/1.95".into()],
        };
        let inputs = ScriptInputs {
            experiment_name: "demo",
            fingerprint: "0123456789abcdef0123",
            runs: 15,
            tasks: 4,
            executable: Path::new("/opt/tabcard/bin/tabcard"),
            manifest: Path::new("/srv/exp/demo.toml"),
            results_root: Path::new("/srv/results"),
            logs: Path::new("/srv/results/slurm/0123456789abcdef/logs"),
            resources: &resources,
        };
        let s = array_script(&inputs);
        assert!(s.contains("#SBATCH --array=0-3\n"), "{s}");
        assert!(s.contains("#SBATCH --partition=cpu\n"));
        assert!(s.contains("#SBATCH --time=01:00:00\n"));
        assert!(s.contains("module load rust/1.95\n"));
        assert!(s.contains("--shard \"${SLURM_ARRAY_TASK_ID}/4\""), "{s}");
        assert!(!s.contains("--account"));
        let m = merge_script(&inputs);
        assert!(!m.contains("--array") && !m.contains("--shard"), "{m}");
        assert!(m.contains("exec /opt/tabcard/bin/tabcard train /srv/exp/demo.toml --results /srv/results"));
    }
}
