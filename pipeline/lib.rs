//! tabcard: seeded, fingerprinted multilayer-perceptron experiments on tabular data, with model
//! cards a reviewer can read and an auditor can rerun bit-for-bit.
//!
//! Data flows one way: manifest + Parquet -> [`experiment::Experiment`] -> [`plan::Plan`] -> runs
//! -> results store -> card. Everything below `commands` is a library usable without a terminal.
//!
//! The public face is what `main.rs`, the tests and the benches name; everything else is
//! `pub(crate)`, and the `unreachable_pub` lint (an error under CI's `-D warnings`) keeps it so.

#![warn(unreachable_pub)]

pub(crate) mod analysis;
pub mod calibrate;
pub(crate) mod card;
pub mod commands;
pub mod data;
pub mod demo;
pub mod error;
pub mod experiment;
pub mod fingerprint;
pub mod format;
pub mod manifest;
pub mod memory;
pub mod metrics;
pub mod monitor;
pub mod nn;
pub mod numerics;
pub mod output_schema;
pub mod provenance;
pub(crate) mod results;
pub mod review;
pub mod rng;
pub(crate) mod selection;
pub mod store;
pub mod sweep;
pub(crate) mod task;
pub mod text;
pub mod threads;
pub mod training;
pub(crate) mod verification;

pub use error::{Error, Result};
