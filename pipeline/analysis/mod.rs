//! Analyses of the deployed model computed after selection from the stored runs and the test
//! split: each a file, each seeded from the experiment's seed, stored as evidence and re-derived
//! by `verify`. Today: the disparity of the deployed decision across groups (`fairness.rs`) and
//! how well the network's inputs predict each group column (`proxy.rs`), stored together.

pub(crate) mod estimate;
pub(crate) mod fairness;
pub(crate) mod importance;
pub(crate) mod proxy;
