//! One module per subcommand: orchestration only, the maths lives in the layers below. Each
//! returns the text to print (and, where scripts need it, the same report as JSON), so commands
//! are testable without a terminal.

pub mod card;
pub mod check;
pub mod compare;
pub mod demo;
pub mod history;
pub mod list;
pub mod log_check;
pub mod monitor;
pub mod predict;
pub mod review;
pub mod scaffold;
pub mod slurm;
pub mod train;
pub mod verify;

/// A command's report: text for people, JSON for scripts (fields in README, "Machine-readable
/// output").
pub struct Report {
    pub text: String,
    pub json: serde_json::Value,
}
