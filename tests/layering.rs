//! Imports go downward only: every `crate::x` a library file names (outside its unit tests) is
//! its own top-level module or one in a lower layer (the layers DEVELOPERS.md lists), and inside
//! a wing no file-level module reaches back to one that reaches it: the graph of file modules
//! (through `crate::a::b`, `super::x`, `self::x` and a folder's `use child::`) has no circle.

use std::collections::{BTreeMap, BTreeSet};
use std::path::{Path, PathBuf};

/// Bottom first. A module may use its own layer's module (itself) and any lower layer.
const LAYERS: &[&[&str]] = &[
    &["error", "task", "memory"],
    &["format", "text", "rng", "fingerprint", "provenance", "threads", "output_schema"],
    &["metrics"],
    &["calibrate"],
    &["manifest"],
    &["data"],
    &["nn", "demo"],
    &["numerics"],
    &["training"],
    &["experiment"],
    &["store"],
    &["sweep"],
    &["selection"],
    &["analysis"],
    &["results"],
    &["review"],
    &["card"],
    &["verification"],
    &["monitor"],
    &["commands"],
    &["main", "lib", "progress"],
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
    assert!(upward("card", card, "use crate::{experiment::plan::config_label, store::Layout};").is_empty());
    let metrics = layer_of("metrics").unwrap();
    assert_eq!(upward("metrics", metrics, "use crate::manifest::Task;").len(), 1);
}

#[test]
fn the_parser_sees_grouped_and_nested_imports() {
    let code = "use crate::{data::prep::{A, B}, error::Result};\nlet x = crate::store::read_json(p);";
    assert_eq!(crate_modules(code), ["data", "error", "store"].iter().map(|s| s.to_string()).collect());
}

/// A library file's module path: `metrics/registry.rs` is `metrics::registry`, `metrics/mod.rs`
/// is `metrics`, `lib.rs` the crate root (empty).
fn module_path(rel: &Path) -> Vec<String> {
    let mut parts: Vec<String> = rel.components().map(|c| c.as_os_str().to_string_lossy().trim_end_matches(".rs").to_string()).collect();
    if parts.last().is_some_and(|l| l == "mod" || l == "lib" || l == "main") {
        parts.pop();
    }
    parts
}

/// The path expressions of `code` that start with `prefix` (`crate::`, `super::`, `self::`, or a
/// child's name after `use `), each as its segments, grouped imports expanded one level.
fn paths_after(code: &str, prefix: &str) -> Vec<Vec<String>> {
    let ident = |s: &str| s.chars().take_while(|c| c.is_alphanumeric() || *c == '_').collect::<String>();
    let mut out = Vec::new();
    for (i, _) in code.match_indices(prefix) {
        // Only at the start of a path (not inside `a::super::b` or an identifier).
        if code[..i].chars().last().is_some_and(|c| c.is_alphanumeric() || c == '_' || c == ':') {
            continue;
        }
        let mut rest = &code[i + prefix.len()..];
        let mut segments = Vec::new();
        loop {
            let id = ident(rest);
            if id.is_empty() {
                break;
            }
            rest = &rest[id.len()..];
            segments.push(id);
            match rest.strip_prefix("::") {
                Some(r) => rest = r,
                None => break,
            }
        }
        if let Some(group) = rest.strip_prefix('{') {
            for item in group.split([',', '}']).take_while(|_| true) {
                let id = ident(item.trim_start());
                if !id.is_empty() {
                    out.push(segments.iter().cloned().chain([id]).collect());
                }
                if item.contains('}') {
                    break;
                }
            }
        }
        out.push(segments);
    }
    out
}

/// The file-level modules `code` (the file of module `own`) names, as known module paths.
fn file_edges(own: &[String], is_folder: bool, code: &str, modules: &BTreeSet<Vec<String>>) -> BTreeSet<Vec<String>> {
    let longest_module =
        |path: Vec<String>| -> Option<Vec<String>> { (1..=path.len()).rev().map(|n| path[..n].to_vec()).find(|p| modules.contains(p)) };
    let parent: Vec<String> =
        if is_folder || own.is_empty() { own[..own.len().saturating_sub(1)].to_vec() } else { own[..own.len() - 1].to_vec() };
    let mut out = BTreeSet::new();
    for path in paths_after(code, "crate::") {
        out.extend(longest_module(path));
    }
    for path in paths_after(code, "super::") {
        out.extend(longest_module(parent.iter().cloned().chain(path).collect()));
    }
    for path in paths_after(code, "self::") {
        out.extend(longest_module(own.iter().cloned().chain(path).collect()));
    }
    // A folder names its own submodules by their bare names (`use child::x`, `child::f()`).
    if is_folder {
        for module in modules.iter().filter(|m| m.len() == own.len() + 1 && m.starts_with(own)) {
            let name = format!("{}::", module[own.len()]);
            if !paths_after(code, &name).is_empty() {
                out.insert(module.clone());
            }
        }
    }
    out.remove(own);
    out
}

/// `code` without its `//` comments (doc links name modules without importing them).
fn without_comments(code: &str) -> String {
    code.lines().map(|l| if l.trim_start().starts_with("//") { "" } else { l }).collect::<Vec<_>>().join("\n")
}

/// Every circle of `graph` (as the modules on it, starting from the smallest), found by DFS.
fn circles(graph: &BTreeMap<Vec<String>, BTreeSet<Vec<String>>>) -> Vec<Vec<String>> {
    fn visit(
        node: &Vec<String>,
        graph: &BTreeMap<Vec<String>, BTreeSet<Vec<String>>>,
        stack: &mut Vec<Vec<String>>,
        done: &mut BTreeSet<Vec<String>>,
        found: &mut BTreeSet<Vec<String>>,
    ) {
        if let Some(at) = stack.iter().position(|n| n == node) {
            let mut circle: Vec<String> = stack[at..].iter().map(|n| n.join("::")).collect();
            let start = circle.iter().enumerate().min_by_key(|(_, n)| n.to_string()).map(|(i, _)| i).unwrap_or(0);
            circle.rotate_left(start);
            found.insert(circle);
            return;
        }
        if done.contains(node) {
            return;
        }
        stack.push(node.clone());
        for next in graph.get(node).into_iter().flatten() {
            visit(next, graph, stack, done, found);
        }
        stack.pop();
        done.insert(node.clone());
    }
    let (mut done, mut found) = (BTreeSet::new(), BTreeSet::new());
    for node in graph.keys() {
        visit(node, graph, &mut Vec::new(), &mut done, &mut found);
    }
    found.into_iter().collect()
}

/// The file-module graph of the library: (module, the modules it names).
fn library_graph() -> BTreeMap<Vec<String>, BTreeSet<Vec<String>>> {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("pipeline");
    let mut files = Vec::new();
    rust_files(&root, &mut files);
    // The binary's own files (main, progress) use `tabcard::`, not `crate::`: they are no part of
    // the library's graph.
    files.retain(|f| f.file_name().is_some_and(|n| n != "build.rs" && n != "main.rs" && n != "progress.rs"));
    let modules: BTreeSet<Vec<String>> = files.iter().map(|f| module_path(f.strip_prefix(&root).unwrap())).collect();
    let mut graph = BTreeMap::new();
    for file in &files {
        let rel = file.strip_prefix(&root).unwrap();
        let own = module_path(rel);
        let is_folder = rel.file_name().is_some_and(|n| n == "mod.rs" || n == "lib.rs");
        let text = std::fs::read_to_string(file).unwrap();
        let code = without_comments(text.split("#[cfg(test)]").next().unwrap_or(""));
        graph.insert(own.clone(), file_edges(&own, is_folder, &code, &modules));
    }
    graph
}

#[test]
fn no_file_module_reaches_back_to_one_that_reaches_it() {
    let graph = library_graph();
    assert!(graph.len() > 60, "{} file modules", graph.len());
    let found = circles(&graph);
    assert!(found.is_empty(), "import circles: {}", found.iter().map(|c| c.join(" -> ")).collect::<Vec<_>>().join("; "));
}

#[test]
fn a_submodule_circle_is_caught() {
    // The circle tabcard 0.5.0 had: the metric table called the two metric families' wrappers,
    // which called the table back.
    let modules: BTreeSet<Vec<String>> = ["metrics", "metrics::registry", "metrics::classification", "metrics::regression", "task"]
        .iter()
        .map(|m| m.split("::").map(str::to_string).collect())
        .collect();
    let m = |s: &str| s.split("::").map(str::to_string).collect::<Vec<_>>();
    let mut graph = BTreeMap::new();
    graph.insert(
        m("metrics::registry"),
        file_edges(&m("metrics::registry"), false, "use super::{classification, regression};\nlet x = classification::auc(a);", &modules),
    );
    graph.insert(
        m("metrics::classification"),
        file_edges(
            &m("metrics::classification"),
            false,
            "pub fn scalar_metrics() { super::registry::scalar_metrics(crate::task::Task::Binary, s) }",
            &modules,
        ),
    );
    graph.insert(m("metrics::regression"), file_edges(&m("metrics::regression"), false, "use crate::metrics::registry::Scored;", &modules));
    assert_eq!(graph[&m("metrics::classification")], [m("metrics::registry"), m("task")].into_iter().collect());
    let found = circles(&graph);
    assert!(found.contains(&vec!["metrics::classification".to_string(), "metrics::registry".to_string()]), "{found:?}");
    assert!(found.contains(&vec!["metrics::registry".to_string(), "metrics::regression".to_string()]), "{found:?}");
    // Without the calls back, no circle.
    graph.insert(m("metrics::classification"), file_edges(&m("metrics::classification"), false, "use crate::task::Task;", &modules));
    graph.insert(m("metrics::regression"), BTreeSet::new());
    assert!(circles(&graph).is_empty());
}

#[test]
fn commands_read_results_only_through_the_results_reader() {
    // What reads a results file or checks a folder against its list: `results/` wraps each.
    const FORBIDDEN: &[&str] = &[
        "read_json",
        "check_sealed",
        "integrity::",
        "read_run",
        "timing::read",
        "check_format",
        "fs::read_to_string(layout",
        "fs::read(layout",
    ];
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("pipeline/commands");
    let mut files = Vec::new();
    rust_files(&dir, &mut files);
    files.sort();
    let mut problems = Vec::new();
    for file in &files {
        let text = std::fs::read_to_string(file).unwrap();
        let code = without_comments(text.split("#[cfg(test)]").next().unwrap_or(""));
        for (n, line) in code.lines().enumerate() {
            if let Some(token) = FORBIDDEN.iter().find(|t| line.contains(*t)) {
                problems.push(format!("{}:{}: `{token}` outside the results reader", file.file_name().unwrap().to_string_lossy(), n + 1));
            }
        }
    }
    assert!(problems.is_empty(), "{}", problems.join("\n"));
    // The check sees what it looks for.
    assert!(FORBIDDEN.iter().any(|t| "let s: Selection = read_json(&layout.selection())?;".contains(t)));
}
