//! One writer per experiment: `train` (without `--shard`) holds `.writer.lock` in the results
//! folder while it sweeps, selects, tests, writes the card and the ledger line. A second `train`
//! of the same experiment waits, says for whom (even under `--quiet`) and how to clear a lock left
//! behind, and then finds the runs stored. Shards of one SLURM array take no lock: they own
//! disjoint runs, and only the merge selects.
//!
//! The lock file holds `host pid time start`: the holder's host, process id, the Unix time it took
//! the lock and its process start time (field 22 of `/proc/<pid>/stat`, clock ticks since boot).
//! A lock is stale when its holder is gone:
//! - on this host, when no process has that pid; when the process with that pid started at
//!   another time (the pid was reused: pid 1 of a restarted container, a busy machine); or when
//!   the pid is this process's own and this process does not hold that lock (a `kill -9`ed
//!   predecessor with the same pid);
//! - from another host (a shared cluster file system, where that process cannot be seen), when the
//!   file has not been touched for [`STALE_AFTER`]: the holder touches it every [`HEARTBEAT`].
//!
//! Locks written by tabcard 0.5 have no start field: their holder is stale when its process
//! started after the lock's time.

use std::io::Write;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, Mutex};
use std::time::{Duration, SystemTime};

use crate::error::{Error, Result};

pub(crate) const FILE: &str = ".writer.lock";
/// How often the holder touches the lock file.
pub(crate) const HEARTBEAT: Duration = Duration::from_secs(60);
/// How long another host's lock may go untouched before it is taken over.
pub(crate) const STALE_AFTER: Duration = Duration::from_secs(600);

/// The lock lines this process holds right now (a process may hold several folders' locks, and
/// its threads may wait for each other's).
static HELD: Mutex<Vec<String>> = Mutex::new(Vec::new());

/// A held lock; released (the file removed) when dropped.
pub(crate) struct WriterLock {
    path: PathBuf,
    /// The line this process wrote: the lock is removed on drop only while it still holds it.
    holder: String,
    stop: Arc<AtomicBool>,
    heartbeat: Option<std::thread::JoinHandle<()>>,
}

/// Field 22 of `/proc/<pid>/stat`: when the process started, in clock ticks since boot. The
/// command name (field 2) is in parentheses and may hold spaces, so fields are counted after
/// its closing parenthesis.
fn process_start_ticks(pid: &str) -> Option<u64> {
    let stat = std::fs::read_to_string(format!("/proc/{pid}/stat")).ok()?;
    let after_name = &stat[stat.rfind(')')? + 1..];
    after_name.split_whitespace().nth(19)?.parse().ok()
}

/// The Unix time a process started, to the second: boot time plus its start ticks at USER_HZ,
/// which is 100 on every Linux architecture tabcard builds for.
fn process_start_unix(pid: &str) -> Option<u64> {
    let stat = std::fs::read_to_string("/proc/stat").ok()?;
    let boot: u64 = stat.lines().find_map(|l| l.strip_prefix("btime "))?.trim().parse().ok()?;
    Some(boot + process_start_ticks(pid)? / 100)
}

fn holder_text() -> String {
    let since = SystemTime::now().duration_since(SystemTime::UNIX_EPOCH).map(|d| d.as_secs()).unwrap_or(0);
    let pid = std::process::id();
    let start = process_start_ticks("self").map(|t| t.to_string()).unwrap_or_else(|| "-".into());
    format!("{} {pid} {since} {start}\n", crate::provenance::host_name())
}

/// Why the lock described by `text` (touched at `modified`) is stale, or `None` while its holder
/// may still be alive.
fn stale_because(text: &str, modified: Option<SystemTime>) -> Option<&'static str> {
    let mut parts = text.split_whitespace();
    let (Some(host), Some(pid)) = (parts.next(), parts.next().filter(|p| p.parse::<u32>().is_ok())) else {
        return Some("it is not a lock line tabcard writes");
    };
    let since: Option<u64> = parts.next().and_then(|t| t.parse().ok());
    let start: Option<&str> = parts.next();
    if host != crate::provenance::host_name() {
        let old = modified.and_then(|m| m.elapsed().ok()).is_some_and(|age| age > STALE_AFTER);
        return old.then_some("another host's lock untouched for longer than its heartbeat allows");
    }
    if pid == std::process::id().to_string() {
        let held = HELD.lock().map(|h| h.iter().any(|line| line.trim_end() == text.trim_end())).unwrap_or(false);
        return (!held).then_some("it names this process's pid, which does not hold it (a killed predecessor with the same pid)");
    }
    if !Path::new(&format!("/proc/{pid}")).exists() {
        return Some("its process is gone");
    }
    match start {
        Some(recorded) if recorded != "-" => {
            let now = process_start_ticks(pid).map(|t| t.to_string());
            (now.as_deref().is_some_and(|now| now != recorded)).then_some("its pid now belongs to a process started at another time")
        }
        // A lock of tabcard 0.5: the process must have started no later than the lock was taken.
        _ => {
            let started_after = since.zip(process_start_unix(pid)).is_some_and(|(since, started)| started > since + 1);
            started_after.then_some("its pid now belongs to a process started after the lock was taken")
        }
    }
}

/// Takes the lock of the results folder `folder`, waiting while a live process holds it;
/// `on_wait` is told the holder once.
pub(crate) fn acquire(folder: &Path, on_wait: &dyn Fn(&str)) -> Result<WriterLock> {
    super::files::create_dir(folder)?;
    let path = folder.join(FILE);
    let mut told = false;
    loop {
        match std::fs::OpenOptions::new().write(true).create_new(true).open(&path) {
            Ok(mut file) => {
                let holder = holder_text();
                if let Ok(mut held) = HELD.lock() {
                    held.push(holder.clone());
                }
                file.write_all(holder.as_bytes()).map_err(|e| Error::io(&path, "write", e))?;
                let stop = Arc::new(AtomicBool::new(false));
                let (flag, beat) = (stop.clone(), path.clone());
                let heartbeat = std::thread::spawn(move || {
                    let mut waited = Duration::ZERO;
                    while !flag.load(Ordering::Relaxed) {
                        std::thread::sleep(Duration::from_millis(200));
                        waited += Duration::from_millis(200);
                        if waited >= HEARTBEAT {
                            waited = Duration::ZERO;
                            if let Ok(f) = std::fs::OpenOptions::new().append(true).open(&beat) {
                                let _ = f.set_modified(SystemTime::now());
                            }
                        }
                    }
                });
                return Ok(WriterLock { path, holder, stop, heartbeat: Some(heartbeat) });
            }
            Err(e) if e.kind() == std::io::ErrorKind::AlreadyExists => {
                let text = std::fs::read_to_string(&path).unwrap_or_default();
                let modified = std::fs::metadata(&path).and_then(|m| m.modified()).ok();
                // A holder between creating the file and writing its line is alive: give it a few
                // seconds (a process killed in between leaves an empty file for good).
                let empty_and_old =
                    text.is_empty() && modified.and_then(|m| m.elapsed().ok()).is_some_and(|age| age > Duration::from_secs(10));
                if empty_and_old || (!text.is_empty() && stale_because(&text, modified).is_some()) {
                    let _ = std::fs::remove_file(&path);
                    continue;
                }
                if !told && !text.is_empty() {
                    let mut parts = text.split_whitespace();
                    let (host, pid) = (parts.next().unwrap_or("?"), parts.next().unwrap_or("?"));
                    let since = parts.next().and_then(|t| t.parse::<i64>().ok()).map(crate::provenance::rfc3339);
                    on_wait(&format!(
                        "waiting for {} (pid {}{}), which is writing this experiment; if no tabcard is running for it, \
                         delete {} and run again",
                        crate::text::terminal_safe(host),
                        crate::text::terminal_safe(pid),
                        since.map(|s| format!(", since {s}")).unwrap_or_default(),
                        path.display()
                    ));
                    told = true;
                }
                std::thread::sleep(Duration::from_millis(250));
            }
            Err(e) => return Err(Error::io(&path, "create the writer lock", e)),
        }
    }
}

impl Drop for WriterLock {
    fn drop(&mut self) {
        self.stop.store(true, Ordering::Relaxed);
        if let Some(h) = self.heartbeat.take() {
            let _ = h.join();
        }
        if std::fs::read_to_string(&self.path).is_ok_and(|t| t == self.holder) {
            let _ = std::fs::remove_file(&self.path);
        }
        if let Ok(mut held) = HELD.lock() {
            held.retain(|line| *line != self.holder);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_lock_of_a_dead_local_process_is_stale_and_a_live_one_is_not() {
        let host = crate::provenance::host_name();
        assert!(stale_because(&format!("{host} 4294967 0 1"), None).is_some(), "no such pid");
        let now = Some(SystemTime::now());
        assert!(stale_because("another-host 1 0", now).is_none(), "another host's fresh lock is kept");
        assert!(stale_because("another-host 1 0", Some(SystemTime::now() - STALE_AFTER - Duration::from_secs(1))).is_some());
        assert!(stale_because("garbage", now).is_some());
    }

    #[test]
    fn a_reused_pid_is_stale_and_the_living_holder_is_not() {
        let host = crate::provenance::host_name();
        // A child process stands for another holder on this host.
        let mut child = std::process::Command::new("sleep").arg("30").spawn().unwrap();
        let pid = child.id().to_string();
        let ticks = process_start_ticks(&pid).unwrap();
        let since = SystemTime::now().duration_since(SystemTime::UNIX_EPOCH).unwrap().as_secs();
        assert!(stale_because(&format!("{host} {pid} {since} {ticks}"), None).is_none(), "the holder itself");
        assert!(stale_because(&format!("{host} {pid} {since} {}", ticks + 1), None).is_some(), "same pid, other start time");
        // A 0.5 lock (no start field): stale when the process started after the lock was taken.
        assert!(stale_because(&format!("{host} {pid} {since}"), None).is_none());
        assert!(stale_because(&format!("{host} {pid} {}", since - 3600), None).is_some());
        child.kill().unwrap();
        let _ = child.wait();
        // This process's own pid, in a lock it does not hold (a killed predecessor's): stale.
        let own = format!("{host} {} {} {}", std::process::id(), since - 7, process_start_ticks("self").unwrap());
        assert!(stale_because(&own, None).is_some());
    }

    #[test]
    fn a_lock_left_with_this_processs_pid_is_taken_over_at_once() {
        let dir = tempfile::tempdir().unwrap();
        let host = crate::provenance::host_name();
        std::fs::write(dir.path().join(FILE), format!("{host} {} 0 1\n", std::process::id())).unwrap();
        let told = std::sync::Mutex::new(Vec::new());
        let lock = acquire(dir.path(), &|m| told.lock().unwrap().push(m.to_string())).unwrap();
        assert!(told.lock().unwrap().is_empty(), "no wait");
        drop(lock);
        assert!(!dir.path().join(FILE).exists());
    }

    #[test]
    fn acquire_waits_for_the_holder_and_drop_releases() {
        let dir = tempfile::tempdir().unwrap();
        let first = acquire(dir.path(), &|_| {}).unwrap();
        assert!(dir.path().join(FILE).exists());
        let released = std::thread::spawn({
            let path = dir.path().to_path_buf();
            move || {
                let told = std::sync::Mutex::new(Vec::new());
                let _second = acquire(&path, &|m| told.lock().unwrap().push(m.to_string())).unwrap();
                told.into_inner().unwrap()
            }
        });
        std::thread::sleep(Duration::from_millis(600));
        drop(first);
        let told = released.join().unwrap();
        assert_eq!(told.len(), 1);
        assert!(told[0].starts_with("waiting for ") && told[0].contains(&format!("(pid {}, since ", std::process::id())), "{told:?}");
        assert!(told[0].contains("if no tabcard is running for it, delete ") && told[0].contains(FILE), "{told:?}");
        assert!(!dir.path().join(FILE).exists(), "the second holder released it too");
    }
}
