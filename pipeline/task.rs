//! The kinds of prediction task: basic vocabulary shared by the manifest, the metrics and the
//! engine, kept below all of them so none has to import another for it.

use serde::{Deserialize, Serialize};

#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Task {
    Binary,
    Multiclass,
    Regression,
}

impl Task {
    pub fn as_str(self) -> &'static str {
        match self {
            Task::Binary => "binary",
            Task::Multiclass => "multiclass",
            Task::Regression => "regression",
        }
    }
}
