//! The card's comparison with the model this one replaces (`[experiment] replaces`): when the
//! replaced experiment's results folder was under the results root at training, `train` recorded
//! `tabcard compare`'s report against it as the attached record `comparisons/replaces-<fp16>/`;
//! this section shows its figures. The record is read as JSON with only the fields shown here.

use serde::{Deserialize, Serialize};

use crate::error::Result;
use crate::format::{fixed, mean_sd};
use crate::store::Layout;
use crate::text::markdown_cell_text as cell;

/// The attached-record kind and file `train` writes the comparison to.
pub(crate) const KIND: &str = "comparisons";
pub(crate) const FILE: &str = "compare.json";

/// The record's name for the replaced experiment `fingerprint` (16 to 64 hex digits).
pub(crate) fn record_name(fingerprint: &str) -> String {
    format!("replaces-{}", &fingerprint[..16.min(fingerprint.len())].to_ascii_lowercase())
}

#[derive(Deserialize)]
struct MeanSdJson {
    mean: f64,
    sd: f64,
}

#[derive(Deserialize)]
struct ValidationJson {
    metric: String,
    a: MeanSdJson,
    b: MeanSdJson,
    delta: f64,
    within_noise: Option<bool>,
    better: Option<String>,
}

#[derive(Deserialize)]
struct IntervalJson {
    lower: f64,
    upper: f64,
}

#[derive(Deserialize)]
struct TestJson {
    metric: String,
    a: f64,
    b: f64,
    a_interval: Option<IntervalJson>,
    b_interval: Option<IntervalJson>,
}

#[derive(Deserialize)]
struct SelectedJson {
    a: String,
    b: String,
}

#[derive(Deserialize)]
struct CompareJson {
    selected: Option<SelectedJson>,
    #[serde(default)]
    validation: Vec<ValidationJson>,
    test: Option<TestJson>,
    not_judged: Option<String>,
    metrics_not_compared: Option<String>,
}

#[derive(Serialize, Default)]
pub(crate) struct Replaced {
    /// Empty when the manifest names no replaced model.
    pub(crate) intro: String,
    /// metric, replaced, this model, difference, judgement.
    pub(crate) rows: Vec<[String; 5]>,
    pub(crate) test: String,
}

pub(crate) fn replaced(layout: &Layout, replaces: &str) -> Result<Replaced> {
    if replaces.is_empty() {
        return Ok(Replaced::default());
    }
    let dir = layout.root.join(KIND).join(record_name(replaces));
    let checked = crate::store::attached::check_each(&layout.root, KIND)?.into_iter().find(|(n, _)| *n == record_name(replaces));
    let Some((_, record)) = checked else {
        return Ok(Replaced {
            intro: format!(
                "The replaced experiment's results folder was not under the results root when this model was trained, so no \
                 comparison was recorded; `tabcard compare <its folder> {}` makes one.",
                layout.root.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default()
            ),
            ..Replaced::default()
        });
    };
    record?;
    let json: CompareJson = crate::store::read_json(&dir.join(FILE))?;
    if let Some(why) = json.metrics_not_compared {
        return Ok(Replaced {
            intro: format!("Recorded at training (`{KIND}/`): metrics not compared: {}.", cell(&why)),
            ..Replaced::default()
        });
    }
    let selected = json
        .selected
        .map(|s| format!(" The replaced model's selected configuration was {}; this one's is {}.", cell(&s.a), cell(&s.b)))
        .unwrap_or_default();
    let judged = match &json.not_judged {
        Some(why) => format!(" Shown, not judged: {}.", cell(why)),
        None => " A difference counts when it exceeds twice the combined seed standard deviation.".into(),
    };
    let rows = json
        .validation
        .iter()
        .map(|v| {
            let judgement = match (v.within_noise, v.better.as_deref()) {
                (None, _) => "not judged".to_string(),
                (Some(true), _) => "within seed noise".to_string(),
                (Some(false), Some("B")) => "this model better".to_string(),
                (Some(false), Some("A")) => "**the replaced model better**".to_string(),
                (Some(false), _) => "beyond seed noise".to_string(),
            };
            [cell(&v.metric), mean_sd(v.a.mean, v.a.sd), mean_sd(v.b.mean, v.b.sd), fixed(v.delta, 4), judgement]
        })
        .collect();
    let interval = |i: &Option<IntervalJson>| {
        i.as_ref().map(|i| format!(" (95% interval {} to {})", fixed(i.lower, 4), fixed(i.upper, 4))).unwrap_or_default()
    };
    let test = json
        .test
        .map(|t| {
            format!(
                "On each model's test split, {}: the replaced model {}{}, this model {}{}.",
                cell(&t.metric),
                fixed(t.a, 4),
                interval(&t.a_interval),
                fixed(t.b, 4),
                interval(&t.b_interval)
            )
        })
        .unwrap_or_default();
    Ok(Replaced {
        intro: format!(
            "Recorded at training by `tabcard compare` (`{KIND}/{}/`), validation mean ± sd across seeds.{selected}{judged}",
            record_name(replaces)
        ),
        rows,
        test,
    })
}
