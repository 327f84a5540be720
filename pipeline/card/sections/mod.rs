//! The card's sections, one file each: a typed struct (what the template reads) and the one
//! function that builds it from the stored results.

pub mod about;
pub mod capacity;
pub mod data;
pub mod provenance;
pub mod results;
