//! `tabcard card <results folder> [--templates DIR]`: re-render the model card and its figures
//! from stored results alone, optionally with a user's template folder, after checking every
//! stored file against the folder's integrity list (a tampered folder gets no card).

use std::path::Path;

use crate::card::write_card;
use crate::error::Result;
use crate::store::Layout;

pub fn run(results_folder: &Path, templates: Option<&Path>) -> Result<String> {
    let layout = Layout::new(results_folder);
    layout.check_sealed()?;
    let digest = write_card(&layout, templates)?;
    Ok(format!(
        "card     {}\nfigures  {}\ndigest   {digest} (results digest, unchanged)\n",
        layout.card().display(),
        layout.figures().display()
    ))
}
