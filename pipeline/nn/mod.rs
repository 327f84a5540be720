//! The network: the model's definition on candle (layers, configuration, stored tensors, and the
//! autograd reference the engine is tested against), the hand-written engine that trains,
//! validates and scores over tabcard's portable matrix kernels (`matmul`, `microkernel`,
//! `dispatch`) and the split of one run's work across threads (`spread`), losses, optimizers and learning-rate schedules.
//! Every random draw comes from a `rng::Stream` passed in; nothing here uses candle's own
//! (thread-local) random functions.

pub mod dispatch;
pub mod engine;
mod host_ops;
pub mod layers;
pub mod loss;
pub mod matmul;
pub(crate) mod microkernel;
pub mod mlp;
pub(crate) mod optim;
pub(crate) mod scalar;
pub mod spread;
