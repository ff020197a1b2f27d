//! `kinema`: command-line entry point.
//!
//! Exit codes: 0 success; 2 bad input or usage; 1 other failures.
#![forbid(unsafe_code)]

use std::process::ExitCode;

use clap::{Parser, Subcommand};
use kinema_server::cli::analyze::{self, AnalyzeArgs};

/// Kinema: strain states from measured displacements of monitored structures.
///
/// Results are kinematic estimates from measured displacements, not a structural
/// assessment; defer to local codes and licensed practice.
#[derive(Debug, Parser)]
#[command(name = "kinema", version, propagate_version = true)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Debug, Subcommand)]
enum Command {
    /// Estimate displacement gradients and strains from a points file, offline.
    Analyze(Box<AnalyzeArgs>),
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    let (name, result) = match &cli.command {
        Command::Analyze(args) => ("analyze", analyze::run(args)),
    };
    match result {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("kinema {name}: error: {e}");
            ExitCode::from(e.exit_code())
        }
    }
}
