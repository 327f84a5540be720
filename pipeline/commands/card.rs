//! `tabcard card <results folder> [--templates DIR]`: re-render the model card and its figures
//! from stored results alone, optionally with a user's template folder, after checking every
//! stored file against the folder's integrity list (a tampered folder gets no card).

use std::path::Path;

use crate::card::write_card;
use crate::error::Result;
use crate::results::Sealed;

pub fn run(results_folder: &Path, templates: Option<&Path>) -> Result<String> {
    // A `card` killed mid-write leaves temporaries, or a card and figures its list does not name
    // yet: the evidence decides, and the rendered files are written anew and sealed. The folder
    // is hashed twice only in that case.
    crate::store::remove_temporaries(results_folder);
    let (folder, repaired) = match Sealed::open(results_folder) {
        Ok(folder) => (folder, None),
        Err(strict) => (Sealed::open_evidence(results_folder)?, Some(strict)),
    };
    let layout = folder.layout;
    let digest = write_card(&layout, templates)?;
    let note = repaired
        .map(|e| {
            format!("repaired: the evidence matches its list, but a rendered file did not ({e}); card and figures were rendered anew\n")
        })
        .unwrap_or_default();
    Ok(format!(
        "{note}card     {}\nfigures  {}\ndigest   {digest} (results digest, unchanged)\n",
        layout.card().display(),
        layout.figures().display()
    ))
}
