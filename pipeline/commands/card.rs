//! `tabcard card <results folder> [--templates DIR]`: re-render the model card and its figures
//! from stored results alone, optionally with a user's template folder.

use std::path::Path;

use crate::card::write_card;
use crate::error::Result;
use crate::store::Layout;

pub fn run(results_folder: &Path, templates: Option<&Path>) -> Result<String> {
    let layout = Layout::new(results_folder);
    write_card(&layout, templates)?;
    Ok(format!("card     {}\nfigures  {}\n", layout.card().display(), layout.figures().display()))
}
