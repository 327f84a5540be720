//! Reading safely: data files must be regular files, and a panic inside the parquet crate on
//! hostile input becomes an error (kept off the terminal) instead of ending the process.

use std::path::Path;

use crate::error::{Error, Result};

/// Opens a data file for reading, refusing anything but a regular file (a FIFO would block the
/// read forever, a folder or device is never a table). Symbolic links are followed.
pub fn open_regular(path: &Path) -> Result<std::fs::File> {
    let meta = std::fs::metadata(path).map_err(|e| Error::io(path, "open the data file", e))?;
    if let Some(problem) = not_a_table_file(&meta) {
        return Err(Error::data(path, None, problem));
    }
    std::fs::File::open(path).map_err(|e| Error::io(path, "open the data file", e))
}

/// Why an existing path cannot be a Parquet table, if it cannot: a folder, or not a regular file.
pub fn not_a_table_file(meta: &std::fs::Metadata) -> Option<&'static str> {
    if meta.is_dir() {
        Some("is a folder, not a Parquet file")
    } else if !meta.is_file() {
        Some("is not a regular file (a pipe, socket or device); tabcard reads Parquet tables from regular files only")
    } else {
        None
    }
}

thread_local! {
    /// Set while this thread runs a [`guarded`] read: its panics become errors, so the hook keeps
    /// them off the terminal. Any other panic, on any thread, is printed as usual.
    static IN_GUARDED_READ: std::cell::Cell<bool> = const { std::cell::Cell::new(false) };
}

/// Installs (once) a panic hook that stays silent for panics inside a guarded read on the
/// panicking thread and hands every other panic to the hook that was there before.
fn quiet_guarded_panics() {
    static INSTALL: std::sync::Once = std::sync::Once::new();
    INSTALL.call_once(|| {
        let previous = std::panic::take_hook();
        std::panic::set_hook(Box::new(move |info| {
            if !IN_GUARDED_READ.with(|flag| flag.get()) {
                previous(info);
            }
        }));
    });
}

/// Runs `f`, turning a panic inside the parquet crate on hostile input into a corrupt-file error:
/// never allowed to end the process, and never printed (the error says what failed).
pub(super) fn guarded<T>(path: &Path, f: impl FnOnce() -> Result<T>) -> Result<T> {
    quiet_guarded_panics();
    let outer = IN_GUARDED_READ.with(|flag| flag.replace(true));
    let result = std::panic::catch_unwind(std::panic::AssertUnwindSafe(f));
    IN_GUARDED_READ.with(|flag| flag.set(outer));
    match result {
        Ok(result) => result,
        Err(panic) => {
            let detail =
                panic.downcast_ref::<String>().cloned().or_else(|| panic.downcast_ref::<&str>().map(|s| s.to_string())).unwrap_or_default();
            Err(Error::data(path, None, format!("corrupt Parquet file: the reader failed ({detail})")))
        }
    }
}

#[cfg(test)]
mod tests {
    use super::guarded;
    use crate::error::Result;
    use std::path::Path;

    const CHILD: &str = "TABCARD_GUARDED_PANIC_CHILD";
    const NAME: &str = "data::parquet::guard::tests::a_panic_inside_a_guarded_read_is_an_error_and_prints_nothing";

    #[test]
    fn a_panic_inside_a_guarded_read_is_an_error_and_prints_nothing() {
        if std::env::var_os(CHILD).is_some() {
            // In a child process, so its stderr can be read: a guarded panic becomes an error...
            let read: Result<()> = guarded(Path::new("x.parquet"), || panic!("boom inside the reader"));
            assert!(read.unwrap_err().to_string().contains("the reader failed (boom inside the reader)"));
            // ...while any other panic still reaches the previous hook.
            let _ = std::panic::catch_unwind(|| panic!("outside any guarded read"));
            return;
        }
        let exe = std::env::current_exe().unwrap();
        let out =
            std::process::Command::new(exe).args(["--exact", NAME, "--nocapture", "--test-threads=1"]).env(CHILD, "1").output().unwrap();
        let err = String::from_utf8_lossy(&out.stderr);
        assert!(out.status.success(), "{err}");
        assert!(!err.contains("boom inside the reader"), "a guarded panic was printed: {err}");
        assert!(err.contains("outside any guarded read"), "other panics still print: {err}");
    }
}
