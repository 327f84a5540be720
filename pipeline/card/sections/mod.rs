//! The card's sections, one file each: a typed struct (what the template reads) and the one
//! function that builds it from the stored results.

pub(crate) mod about;
pub(crate) mod calibration;
pub(crate) mod capacity;
pub(crate) mod data;
pub(crate) mod decision;
pub(crate) mod groups;
pub(crate) mod importance;
pub(crate) mod provenance;
pub(crate) mod replaced;
pub(crate) mod results;
pub(crate) mod review;
pub(crate) mod sensitivity;
