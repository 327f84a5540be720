//! Imports go downward only: every `crate::x` a library file names (outside its unit tests) is
//! its own top-level module or one in a lower layer. The layers are the ones DEVELOPERS.md lists.

use std::collections::BTreeSet;
use std::path::{Path, PathBuf};

/// Bottom first. A module may use its own layer's module (itself) and any lower layer.
const LAYERS: &[&[&str]] = &[
    &["error", "task"],
    &["format", "text", "rng", "fingerprint", "provenance", "threads"],
    &["metrics"],
    &["manifest"],
    &["data"],
    &["nn", "demo"],
    &["numerics", "plan", "regularizers", "shard", "slurm"],
    &["train"],
    &["experiment"],
    &["prepared", "feasibility"],
    &["store"],
    &["model", "sweep"],
    &["selection"],
    &["card"],
    &["commands"],
    &["main", "lib"],
];

fn layer_of(module: &str) -> Option<usize> {
    LAYERS.iter().position(|l| l.contains(&module))
}

fn rust_files(dir: &Path, out: &mut Vec<PathBuf>) {
    for entry in std::fs::read_dir(dir).unwrap() {
        let path = entry.unwrap().path();
        if path.is_dir() {
            rust_files(&path, out);
        } else if path.extension().is_some_and(|e| e == "rs") {
            out.push(path);
        }
    }
}

/// The top-level modules named after `crate::` in `code`, including inside `use crate::{a, b::c}`.
fn crate_modules(code: &str) -> BTreeSet<String> {
    let ident = |s: &str| s.trim_start().chars().take_while(|c| c.is_alphanumeric() || *c == '_').collect::<String>();
    let mut out = BTreeSet::new();
    for (i, _) in code.match_indices("crate::") {
        let rest = &code[i + "crate::".len()..];
        if let Some(group) = rest.strip_prefix('{') {
            let mut depth = 0;
            let mut item = String::new();
            for c in group.chars() {
                match c {
                    '{' => depth += 1,
                    '}' if depth == 0 => break,
                    '}' => depth -= 1,
                    ',' if depth == 0 => {
                        out.insert(ident(&item));
                        item.clear();
                        continue;
                    }
                    _ => {}
                }
                item.push(c);
            }
            out.insert(ident(&item));
        } else {
            out.insert(ident(rest));
        }
    }
    out.retain(|m| !m.is_empty());
    out
}

#[test]
fn every_import_points_down() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("pipeline");
    let mut files = Vec::new();
    rust_files(&root, &mut files);
    files.sort();
    // The build script is compiled on its own, not as part of the crate.
    files.retain(|f| f.file_name().is_some_and(|n| n != "build.rs"));
    let mut problems = Vec::new();
    for file in &files {
        let rel = file.strip_prefix(&root).unwrap();
        let module = rel.components().next().unwrap().as_os_str().to_string_lossy().trim_end_matches(".rs").to_string();
        let Some(own) = layer_of(&module) else {
            problems.push(format!("{}: module `{module}` is in no layer (add it to LAYERS and DEVELOPERS.md)", rel.display()));
            continue;
        };
        let text = std::fs::read_to_string(file).unwrap();
        let code = text.split("#[cfg(test)]").next().unwrap_or("");
        problems.extend(upward(&module, own, code).into_iter().map(|p| format!("{}: {p}", rel.display())));
    }
    assert!(problems.is_empty(), "{}", problems.join("\n"));
}

/// What `module` (in layer `own`) names in `code` that is not below it.
fn upward(module: &str, own: usize, code: &str) -> Vec<String> {
    crate_modules(code)
        .into_iter()
        .filter_map(|used| match layer_of(&used) {
            Some(l) if l < own || used == module => None,
            Some(_) => Some(format!("`{module}` uses `crate::{used}`, which is not below it")),
            None => Some(format!("uses `crate::{used}`, which is in no layer")),
        })
        .collect()
}

#[test]
fn an_upward_import_is_caught() {
    let card = layer_of("card").unwrap();
    assert_eq!(
        upward("card", card, "use crate::commands::train::config_label;"),
        vec!["`card` uses `crate::commands`, which is not below it"]
    );
    assert!(upward("card", card, "use crate::{plan::config_label, store::Layout};").is_empty());
    let metrics = layer_of("metrics").unwrap();
    assert_eq!(upward("metrics", metrics, "use crate::manifest::Task;").len(), 1);
}

#[test]
fn the_parser_sees_grouped_and_nested_imports() {
    let code = "use crate::{data::prep::{A, B}, error::Result};\nlet x = crate::store::read_json(p);";
    assert_eq!(crate_modules(code), ["data", "error", "store"].iter().map(|s| s.to_string()).collect());
}
