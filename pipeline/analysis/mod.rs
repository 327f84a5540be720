//! Analyses of the deployed model computed after selection from the stored runs and the test
//! split: each a file, each seeded from the experiment's seed (or free of randomness), stored as
//! evidence and re-derived by `verify`: the disparity of the deployed decision across groups
//! (`fairness.rs`, with the proxy probe of `proxy.rs`), permutation importance
//! (`importance.rs`), and what moves the output (`sensitivity.rs`: reference rows, the
//! sensitivity table, integrated gradients and principal reasons; the heavier of these on at most
//! `sample::MAX_ROWS` test rows, `sample.rs`).

pub(crate) mod attribution;
pub(crate) mod curves;
pub(crate) mod estimate;
pub(crate) mod fairness;
pub(crate) mod importance;
pub(crate) mod profile;
pub(crate) mod proxy;
pub(crate) mod reasons;
pub(crate) mod reference;
pub(crate) mod sample;
pub(crate) mod sensitivity;
pub(crate) mod shifts;

/// Working memory of one thread scoring an analysis's rows (a copy of the scoring engine and its
/// share of the outputs): what the helper pools of the analyses are sized by.
pub(crate) const SCORING_BYTES_PER_THREAD: u64 = 64 << 20;
