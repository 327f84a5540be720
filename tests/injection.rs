//! Data-derived and manifest text can never change what a written file means. The card is
//! rendered as a git host renders it (comrak, a CommonMark parser with GitHub's extensions:
//! tables and autolinks, the GFM spec's "extended autolinks" of bare `http://`, `www.` and
//! e-mail addresses) and must hold no link, no raw HTML, no heading and no table row that the
//! tool did not write; scaffolded manifests keep data-derived text inside their comments; CSV
//! output can guard spreadsheet formulas.

mod common;

use arrow::array::{ArrayRef, BooleanArray, Float64Array, StringArray};
use common::*;
use std::path::Path;
use std::sync::Arc;

/// The card as HTML, rendered with GitHub's extensions (tables, autolinks, strikethrough).
fn gfm_html(markdown: &str) -> String {
    let mut options = comrak::Options::default();
    options.extension.autolink = true;
    options.extension.table = true;
    options.extension.strikethrough = true;
    comrak::markdown_to_html(markdown, &options)
}

fn count(haystack: &str, needle: &str) -> usize {
    haystack.matches(needle).count()
}

/// A table whose names and levels carry links, HTML, autolink bait, long look-alike names.
fn hostile_table(rows: usize) -> Vec<(&'static str, ArrayRef)> {
    let level = |r: usize| match r % 4 {
        0 => "[approved](http://evil.example/a)",
        1 => "<img src=x onerror=alert(1)>",
        2 => "see www.evil.example now",
        _ => "mail boss@evil.example",
    };
    let x: Vec<f64> = (0..rows).map(|r| ((r * 37) % 101) as f64 / 10.0).collect();
    let y: Vec<bool> = (0..rows).map(|r| (r * 37) % 101 > 50 || r % 7 == 0).collect();
    let long_a: &'static str = Box::leak(format!("{}a", "n".repeat(240)).into_boxed_str());
    let long_b: &'static str = Box::leak(format!("{}b", "n".repeat(240)).into_boxed_str());
    vec![
        ("http://evil.example/column", Arc::new(Float64Array::from(x.clone())) as ArrayRef),
        ("www.evil.example", Arc::new(Float64Array::from(x.iter().map(|v| v * 2.0).collect::<Vec<_>>()))),
        (long_a, Arc::new(Float64Array::from(x.iter().map(|v| v + 1.0).collect::<Vec<_>>()))),
        (long_b, Arc::new(Float64Array::from(x.iter().map(|v| v - 1.0).collect::<Vec<_>>()))),
        ("category", Arc::new(StringArray::from((0..rows).map(level).collect::<Vec<_>>()))),
        ("y", Arc::new(BooleanArray::from(y))),
    ]
}

fn train_hostile(dir: &Path, experiment: &str) -> std::path::PathBuf {
    write_parquet(&dir.join("data.parquet"), hostile_table(400));
    let manifest = format!(
        "[experiment]\nname = \"hostile\"\n{experiment}\n\n[data]\npath = {:?}\ntarget = \"y\"\ntask = \"binary\"\n\n[model]\nhidden = [4]\n\n[training]\nepochs = 2\n\n[selection]\nbootstrap = 20\n\n[sweep]\nseeds = [1]\n",
        dir.join("data.parquet").to_str().unwrap()
    );
    std::fs::write(dir.join("m.toml"), manifest).unwrap();
    trained(dir, &dir.join("m.toml"))
}

#[test]
fn hostile_names_levels_and_prose_render_as_text_under_gfm() {
    let dir = tempfile::tempdir().unwrap();
    let folder = train_hostile(
        dir.path(),
        "owner = \"Risk team\\n\\n## Sign-off: approved\\n[click](http://evil.example/owner)\"\ntrained_by = \"Ann\\n| forged | row |\\nwww.evil.example\"",
    );
    let card = std::fs::read_to_string(folder.join("card.md")).unwrap();
    let html = gfm_html(&card);
    assert_eq!(
        count(&html, "<a "),
        0,
        "no link of any kind: {}",
        html.lines().filter(|l| l.contains("<a ")).collect::<Vec<_>>().join("\n")
    );
    for raw in ["<img src=x", "<script", "onerror=alert"] {
        assert!(!html.contains(raw) || html.contains(&raw.replace('<', "&lt;")), "raw HTML {raw}");
    }
    assert!(!html.contains("<img src=\"x\""), "no image from a level");
    // Only the template's headings: the forged "Sign-off: approved" is text.
    assert!(!html.contains("<h2>Sign-off: approved"), "forged heading");
    assert!(card.contains("Sign\\-off") || card.contains("Sign-off: approved"), "the owner's text is kept");
    // Owner and trained-by each stay one table row.
    let about_rows: Vec<&str> = card.lines().filter(|l| l.starts_with("| Owner |") || l.starts_with("| Trained by |")).collect();
    assert_eq!(about_rows.len(), 2, "{about_rows:?}");
    assert!(about_rows[1].contains("/ &#124; forged &#124; row &#124;"), "{about_rows:?}");
    // The two long names are told apart, and an absolute data path is called absolute.
    let long_a = format!("{}a", "n".repeat(240));
    let long_b = format!("{}b", "n".repeat(240));
    let cut = |name: &str| {
        let digest = tabcard::fingerprint::sha256_hex(name.as_bytes());
        format!("(cut; SHA-256 {})", &digest[..12])
    };
    assert!(card.contains(&cut(&long_a)) && card.contains(&cut(&long_b)), "long names carry their digest");
    assert!(card.contains("an absolute path"), "absolute data.path");
    assert!(!card.contains("relative to the manifest; "), "not called relative");
}

#[test]
fn the_escaping_keeps_every_autolink_form_inert() {
    // Each form the GFM spec's autolink extension recognises, as a cell, a line and prose.
    for bait in [
        "http://evil.example",
        "https://evil.example/x?y=1",
        "ftp://evil.example",
        "www.evil.example",
        "WWW.evil.example",
        "boss@evil.example",
        "<http://evil.example>",
    ] {
        for rendered in [tabcard::text::markdown_safe(bait), tabcard::text::markdown_line(bait), tabcard::text::markdown_text(bait)] {
            let html = gfm_html(&format!("| a |\n| --- |\n| {rendered} |\n\n{rendered}\n"));
            assert_eq!(count(&html, "<a "), 0, "{bait} -> {rendered} -> {html}");
            assert!(html.contains(&bait.replace('<', "&lt;").replace('>', "&gt;")), "{bait} reads as itself: {html}");
        }
    }
}

#[test]
fn scaffold_keeps_column_names_inside_their_comments() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let rows = 60;
    let x: Vec<f64> = (0..rows).map(|r| (r % 13) as f64).collect();
    write_parquet(
        &d.join("data.parquet"),
        vec![
            ("x\npositive_label = \"evil\"", Arc::new(Float64Array::from(x.clone())) as ArrayRef),
            ("nu\u{0}l", Arc::new(Float64Array::from(x.iter().map(|v| v * 3.0 + 1.0).collect::<Vec<_>>()))),
            ("y", Arc::new(BooleanArray::from((0..rows).map(|r| r % 3 == 0).collect::<Vec<_>>()))),
        ],
    );
    let out = run_in(d, &["scaffold", "data.parquet", "--out", "m.toml"]);
    assert!(out.status.success(), "{}", stderr(&out));
    let text = std::fs::read_to_string(d.join("m.toml")).unwrap();
    assert!(!text.lines().any(|l| l.trim_start().starts_with("positive_label")), "a name became a key:\n{text}");
    assert!(!text.contains('\u{0}'), "NUL written raw");
    let parsed: toml::Table = toml::from_str(&text).expect("valid TOML");
    assert!(parsed["data"].get("positive_label").is_none());
    let check = run_in(d, &["check", "m.toml"]);
    assert!(check.status.success(), "{}{}", stdout(&check), stderr(&check));

    // --force never replaces the input table, nor a file inside a results store.
    let before = std::fs::read(d.join("data.parquet")).unwrap();
    let out = run_in(d, &["scaffold", "data.parquet", "--out", "data.parquet", "--force"]);
    assert_eq!(out.status.code(), Some(2), "{}", stderr(&out));
    assert!(stderr(&out).contains("is the input table"), "{}", stderr(&out));
    assert_eq!(std::fs::read(d.join("data.parquet")).unwrap(), before);
    std::fs::create_dir_all(d.join("results")).unwrap();
    std::fs::write(d.join("results/ledger.jsonl"), "").unwrap();
    let out = run_in(d, &["scaffold", "data.parquet", "--out", "results/m.toml", "--force"]);
    assert_eq!(out.status.code(), Some(2), "{}", stderr(&out));
    assert!(stderr(&out).contains("inside the results store"), "{}", stderr(&out));
}

#[test]
fn predict_guards_spreadsheet_formulas_in_csv_on_request() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let manifest = small_lease_experiment(d, 300, "");
    let folder = trained(d, &manifest);
    // The scored rows, with a text column that a spreadsheet would run.
    let mut columns = tabcard::demo::lease_defaults(5, 7);
    columns.push(("note".into(), Arc::new(StringArray::from(vec!["=HYPERLINK(\"http://x\",\"y\")", "+1", "-2", "@SUM(A1)", "ok"]))));
    std::fs::write(d.join("new.parquet"), tabcard::data::parquet::encode(columns, Default::default()).unwrap()).unwrap();
    let folder = folder.to_str().unwrap();
    let raw = run_in(d, &["predict", folder, "new.parquet", "--out", "raw.csv", "--keep-extra"]);
    assert!(raw.status.success(), "{}", stderr(&raw));
    let guarded = run_in(d, &["predict", folder, "new.parquet", "--out", "guarded.csv", "--keep-extra", "--guard-formulas"]);
    assert!(guarded.status.success(), "{}", stderr(&guarded));
    let raw = std::fs::read_to_string(d.join("raw.csv")).unwrap();
    let guarded = std::fs::read_to_string(d.join("guarded.csv")).unwrap();
    assert!(raw.contains(",+1") && raw.contains(",@SUM(A1)"), "off by default:\n{raw}");
    for cell in ["'+1", "'-2", "'@SUM(A1)", "\"'=HYPERLINK("] {
        assert!(guarded.contains(cell), "{cell} in\n{guarded}");
    }
    // Numbers keep their sign, and only text cells change.
    let differing: usize = raw.lines().zip(guarded.lines()).filter(|(a, b)| a != b).count();
    assert_eq!(differing, 4, "four rows hold a formula start");
    let parquet = run_in(d, &["predict", folder, "new.parquet", "--out", "x.parquet", "--guard-formulas"]);
    assert_eq!(parquet.status.code(), Some(2), "CSV only");
}
