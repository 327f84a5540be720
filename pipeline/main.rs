//! The `tabcard` command line: parse arguments, run one command, print its report, map errors to
//! exit codes. The only place that talks to the terminal.

use clap::{Parser, Subcommand};
use std::path::PathBuf;
use std::process::ExitCode;

use tabcard::commands;

#[derive(Parser)]
#[command(name = "tabcard", version, about = "Seeded MLP experiments on tabular data, with model cards an auditor can rerun bit-for-bit")]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Validate a manifest and its data; print fingerprints, data summary and run plan.
    Check { manifest: PathBuf },
    /// Write the invented demo tables (lease defaults, greenhouse yield) as Parquet.
    DemoData {
        #[arg(default_value = "data-demo")]
        folder: PathBuf,
        #[arg(long, default_value_t = 20261202)]
        seed: u64,
    },
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    let result = match cli.command {
        Command::Check { manifest } => commands::check::run(&manifest),
        Command::DemoData { folder, seed } => commands::demo::run(&folder, seed),
    };
    match result {
        Ok(report) => {
            print!("{report}");
            ExitCode::SUCCESS
        }
        Err(e) => {
            eprintln!("error: {}", tabcard::text::terminal_safe(&e.to_string()));
            ExitCode::from(e.exit_code() as u8)
        }
    }
}
