//! One module per subcommand: orchestration only, the maths lives in the layers below. Each
//! returns the text to print, so commands are testable without a terminal.

pub mod card;
pub mod check;
pub mod demo;
pub mod train;
