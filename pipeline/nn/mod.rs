//! The network: the MLP on candle (layers, model configuration, stored tensors, and the autograd
//! reference the engine is tested against), the hand-written engine over `gemm` that trains,
//! validates and scores, losses, optimizers and learning-rate schedules.
//! Every random draw comes from a `rng::Stream` passed in; nothing here uses candle's own
//! (thread-local) random functions.

pub mod dispatch;
pub mod engine;
pub mod layers;
pub mod loss;
pub mod matmul;
pub mod microkernel;
pub mod mlp;
pub mod optim;
pub mod scalar;
