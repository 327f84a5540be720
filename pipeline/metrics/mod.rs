//! Evaluation metrics as plain functions over slices: classification, calibration, regression and
//! bootstrap intervals. Undefined values (AUC with a single class present, say) are `None`, never a
//! panic or a NaN.

pub mod bootstrap;
pub mod calibration;
pub mod classification;
pub mod order_statistics;
pub mod ranked;
pub mod registry;
pub mod regression;
pub mod resample;
pub mod wilson;

use std::collections::BTreeMap;

/// Named scalar metrics; `None` where a metric is undefined for the data.
pub type MetricSet = BTreeMap<String, Option<f64>>;
