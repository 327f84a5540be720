//! The crate's typed errors: every failure a user can cause names the file, and the key or column,
//! and the line where it is known. Library code returns these; only `main.rs` turns them into text
//! and exit codes.

use std::fmt;
use std::path::{Path, PathBuf};

/// A problem in an experiment manifest, located as precisely as the parser allows.
#[derive(Debug, Clone, PartialEq)]
pub struct ManifestError {
    pub file: PathBuf,
    /// Dotted key, e.g. `model.dropout`, when the problem belongs to one key.
    pub key: Option<String>,
    /// 1-based line and column of the key or value, when known.
    pub line: Option<usize>,
    pub column: Option<usize>,
    pub message: String,
    /// A suggestion such as the nearest valid key name.
    pub hint: Option<String>,
}

impl fmt::Display for ManifestError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}", self.file.display())?;
        if let Some(line) = self.line {
            write!(f, ":{line}")?;
            if let Some(column) = self.column {
                write!(f, ":{column}")?;
            }
        }
        write!(f, ": ")?;
        if let Some(key) = &self.key {
            write!(f, "key `{key}`: ")?;
        }
        write!(f, "{}", self.message)?;
        if let Some(hint) = &self.hint {
            write!(f, " ({hint})")?;
        }
        Ok(())
    }
}

/// Every error the library reports.
#[derive(Debug, thiserror::Error)]
pub enum Error {
    #[error("{0}")]
    Manifest(Box<ManifestError>),

    /// A problem with a data file, optionally tied to one column.
    #[error("{}: {}{message}", file.display(), column.as_ref().map(|c| format!("column `{c}`: ")).unwrap_or_default())]
    Data { file: PathBuf, column: Option<String>, message: String },

    #[error("{}: cannot {action}: {source}", path.display())]
    Io {
        path: PathBuf,
        action: &'static str,
        #[source]
        source: std::io::Error,
    },

    /// A results folder that is missing pieces, was tampered with, or comes from another version.
    #[error("{}: {message}", path.display())]
    Store { path: PathBuf, message: String },

    /// A failure inside the numerical engine (a bug or an unsupported shape, never user input).
    #[error("training engine: {0}")]
    Engine(String),

    /// No configuration left a usable run (every run failed or diverged), so nothing can be
    /// selected or tested.
    #[error("{0}")]
    NoUsableRun(String),

    /// An output could not be encoded (safetensors, Parquet); nothing is written.
    #[error("cannot encode {0}")]
    Encode(String),

    /// The machine refused something tabcard needs (worker threads).
    #[error("{0}")]
    Environment(String),

    /// A broken invariant inside tabcard: a bug to report, never caused by input.
    #[error("internal error (please report): {0}")]
    Internal(String),

    /// A results folder whose files differ from its integrity list (`integrity.sha256`).
    #[error("{}: {message}", path.display())]
    Integrity { path: PathBuf, message: String },

    /// The command line asked for something that cannot be done.
    #[error("{0}")]
    Usage(String),

    /// The environment asked for a numerical kernel this build or CPU cannot run
    /// (`TABCARD_KERNEL`).
    #[error("{0}")]
    Kernel(String),
}

pub type Result<T, E = Error> = std::result::Result<T, E>;

impl Error {
    pub fn io(path: impl AsRef<Path>, action: &'static str, source: std::io::Error) -> Self {
        Error::Io { path: path.as_ref().to_path_buf(), action, source }
    }

    pub fn data(file: impl AsRef<Path>, column: Option<&str>, message: impl Into<String>) -> Self {
        Error::Data { file: file.as_ref().to_path_buf(), column: column.map(str::to_string), message: message.into() }
    }

    pub fn integrity(path: impl AsRef<Path>, message: impl Into<String>) -> Self {
        Error::Integrity { path: path.as_ref().to_path_buf(), message: message.into() }
    }

    pub fn store(path: impl AsRef<Path>, message: impl Into<String>) -> Self {
        Error::Store { path: path.as_ref().to_path_buf(), message: message.into() }
    }

    /// The process exit status for this error ([`exit`] lists them all).
    pub fn exit_code(&self) -> u8 {
        match self {
            Error::Manifest(_) | Error::Data { .. } | Error::Usage(_) | Error::Kernel(_) => exit::BAD_INPUT,
            Error::Store { .. } | Error::Io { .. } | Error::Encode(_) => exit::STORE,
            Error::Engine(_) | Error::Internal(_) => exit::INTERNAL,
            Error::NoUsableRun(_) => exit::RUNS_FAILED,
            Error::Integrity { .. } => exit::NOT_VERIFIED,
            Error::Environment(_) => exit::ENVIRONMENT,
        }
    }
}

/// Every exit status tabcard uses, in one place (README, "Exit status", lists the same).
pub mod exit {
    pub const OK: u8 = 0;
    /// A bad manifest, data file, command line or forced kernel level.
    pub const BAD_INPUT: u8 = 2;
    /// Reading or writing a results store or an output file failed.
    pub const STORE: u8 = 3;
    /// The engine or an invariant failed: a bug, never caused by input.
    pub const INTERNAL: u8 = 4;
    /// Some runs failed or diverged (the rest are stored), or none left a usable run.
    pub const RUNS_FAILED: u8 = 5;
    /// `verify` found differences, or a results folder differs from its integrity list.
    pub const NOT_VERIFIED: u8 = 6;
    /// The machine refused what tabcard needs (worker threads).
    pub const ENVIRONMENT: u8 = 7;
    /// `monitor`: a check reads "watch".
    pub const MONITOR_WATCH: u8 = 8;
    /// `monitor`: a check reads "act" (a scheduler's alert).
    pub const MONITOR_ACT: u8 = 9;
    /// `verify`: the bits reproduce, but a recorded review does not hold (bad signature, unknown
    /// or mismatched signer, another folder's review, a card changed after review, expired,
    /// separation of duties, or no allowed-signers file to check signers against).
    pub const REVIEW_PROBLEM: u8 = 10;
}

impl From<ManifestError> for Error {
    fn from(e: ManifestError) -> Self {
        Error::Manifest(Box::new(e))
    }
}

impl From<candle_core::Error> for Error {
    fn from(e: candle_core::Error) -> Self {
        Error::Engine(e.to_string())
    }
}
