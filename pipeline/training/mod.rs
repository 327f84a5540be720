//! Training one run: its settings ([`RunConfig`]), what the task's network outputs ([`Head`],
//! [`Labels`]), the seeded training loop ([`train`]), what a run leaves ([`RunResult`]) and the
//! regularizers a run can use, described once for the manifest and the card.

pub(crate) mod config;
pub(crate) mod head;
pub(crate) mod record;
pub(crate) mod regularizers;
pub(crate) mod run;

pub use config::RunConfig;
pub use head::{Head, Labels, TargetScaling, OBJECTIVE};
pub use record::{EpochRecord, Outcome, RunResult};
pub use run::{train, train_with_dtype, RunData};
