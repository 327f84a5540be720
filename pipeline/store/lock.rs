//! One writer per experiment: `train` (without `--shard`) holds `.writer.lock` in the results
//! folder while it sweeps, selects, tests, writes the card and the ledger line. A second `train`
//! of the same experiment waits, says for whom, and then finds the runs stored. Shards of one
//! SLURM array take no lock: they own disjoint runs, and only the merge selects.
//!
//! The lock file holds `host pid start-time`. A lock is stale when its holder is gone: on this
//! host, when the process no longer exists; from another host (a shared cluster file system,
//! where that process cannot be seen), when the file has not been touched for [`STALE_AFTER`]: the
//! holder touches it every [`HEARTBEAT`] while it lives.

use std::io::Write;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;
use std::time::{Duration, SystemTime};

use crate::error::{Error, Result};

pub const FILE: &str = ".writer.lock";
/// How often the holder touches the lock file.
pub const HEARTBEAT: Duration = Duration::from_secs(60);
/// How long another host's lock may go untouched before it is taken over.
pub const STALE_AFTER: Duration = Duration::from_secs(600);

/// A held lock; released (the file removed) when dropped.
pub struct WriterLock {
    path: PathBuf,
    /// The line this process wrote: the lock is removed on drop only while it still holds it.
    holder: String,
    stop: Arc<AtomicBool>,
    heartbeat: Option<std::thread::JoinHandle<()>>,
}

fn holder_text() -> String {
    let since = SystemTime::now().duration_since(SystemTime::UNIX_EPOCH).map(|d| d.as_secs()).unwrap_or(0);
    format!("{} {} {since}\n", crate::provenance::host_name(), std::process::id())
}

/// Whether the lock described by `text` (touched at `modified`) is held by a live process.
fn is_stale(text: &str, modified: Option<SystemTime>) -> bool {
    let mut parts = text.split_whitespace();
    let (Some(host), Some(pid)) = (parts.next(), parts.next().and_then(|p| p.parse::<u32>().ok())) else { return true };
    if host == crate::provenance::host_name() {
        return pid != std::process::id() && !Path::new(&format!("/proc/{pid}")).exists();
    }
    modified.and_then(|m| m.elapsed().ok()).is_some_and(|age| age > STALE_AFTER)
}

/// Takes the lock of the results folder `folder`, waiting while a live process holds it;
/// `on_wait` is told the holder once.
pub fn acquire(folder: &Path, on_wait: &dyn Fn(&str)) -> Result<WriterLock> {
    crate::store::create_dir(folder)?;
    let path = folder.join(FILE);
    let mut told = false;
    loop {
        match std::fs::OpenOptions::new().write(true).create_new(true).open(&path) {
            Ok(mut file) => {
                let holder = holder_text();
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
                if empty_and_old || (!text.is_empty() && is_stale(&text, modified)) {
                    let _ = std::fs::remove_file(&path);
                    continue;
                }
                if !told && !text.is_empty() {
                    let mut parts = text.split_whitespace();
                    on_wait(&format!(
                        "waiting for {} (pid {}), which is writing this experiment",
                        parts.next().unwrap_or("?"),
                        parts.next().unwrap_or("?")
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
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_lock_of_a_dead_local_process_is_stale_and_a_live_one_is_not() {
        let host = crate::provenance::host_name();
        assert!(!is_stale(&format!("{host} {} 0", std::process::id()), None));
        assert!(is_stale(&format!("{host} 4294967 0"), None), "no such pid");
        let now = Some(SystemTime::now());
        assert!(!is_stale("another-host 1 0", now), "another host's fresh lock is kept");
        assert!(is_stale("another-host 1 0", Some(SystemTime::now() - STALE_AFTER - Duration::from_secs(1))));
        assert!(is_stale("garbage", now));
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
        assert!(told[0].starts_with("waiting for ") && told[0].contains(&format!("(pid {})", std::process::id())), "{told:?}");
        assert!(!dir.path().join(FILE).exists(), "the second holder released it too");
    }
}
