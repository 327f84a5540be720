//! One module per subcommand: orchestration only, the maths lives in the layers below. Each
//! returns the text to print, so commands are testable without a terminal.

pub mod card;
pub mod check;
pub mod compare;
pub mod demo;
pub mod history;
pub mod predict;
pub mod slurm;
pub mod train;
pub mod verify;
