//! The network on candle: layers, the MLP built from a model configuration, losses, optimizers and
//! learning-rate schedules. Every random draw comes from a `rng::Stream` passed in; nothing here
//! uses candle's own (thread-local) random functions.

pub mod layers;
pub mod loss;
pub mod mlp;
pub mod optim;
