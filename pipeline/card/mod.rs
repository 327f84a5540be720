//! The model card: built from a results folder alone and rendered with tera.

use crate::error::Result;
use crate::store::Layout;
use std::path::Path;

pub fn write_card(_layout: &Layout, _templates: Option<&Path>) -> Result<()> {
    Ok(())
}
