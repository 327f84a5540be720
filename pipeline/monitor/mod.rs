//! Monitoring after approval: a batch of new rows (and, once they arrive, its outcomes) set
//! against the reference population stored at training time (`analysis::profile`), judged
//! stable, watch or act, and recorded beside the experiment it watches as an attached record,
//! never changing the evidence.
//! - `batch.rs`: the schema check and the one streamed pass that counts and scores the batch;
//! - `stability.rs`: the population stability index and the chi-square test;
//! - `outcomes.rs`: metrics with intervals and calibration, once labels arrive;
//! - `status.rs`: the statuses and the thresholds;
//! - `report.rs`: the report of one batch; `record.rs`: its record folder, markdown and figure.

pub(crate) mod batch;
pub(crate) mod outcomes;
pub(crate) mod record;
pub(crate) mod report;
pub mod stability;
pub(crate) mod status;
