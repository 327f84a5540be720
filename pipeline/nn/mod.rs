//! The network: the MLP on candle (layers, model configuration, evaluation, stored tensors), the
//! hand-written training engine over `gemm`, losses, optimizers and learning-rate schedules.
//! Every random draw comes from a `rng::Stream` passed in; nothing here uses candle's own
//! (thread-local) random functions.

pub mod engine;
pub mod layers;
pub mod loss;
pub mod matmul;
pub mod mlp;
pub mod optim;
pub mod scalar;
