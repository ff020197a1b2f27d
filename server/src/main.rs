//! `kinema`: command-line entry point.
//!
//! Exit codes: 0 success; 2 bad input or usage; 1 other failures.
#![forbid(unsafe_code)]

use std::process::ExitCode;

use clap::{Parser, Subcommand};
use kinema_server::cli::analyze::{self, AnalyzeArgs};
use kinema_server::cli::service::{self, DbArgs, KeysCommand, ServeArgs, ServiceError};

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
    /// Run the HTTP API (migrations are applied at start-up).
    Serve(Box<ServeArgs>),
    /// Apply pending database migrations and exit.
    Migrate(DbArgs),
    /// Create, list and revoke API keys.
    #[command(subcommand)]
    Keys(KeysCommand),
    /// Print the OpenAPI 3.1 document of this build to stdout.
    Openapi,
}

fn run_async<F: Future<Output = Result<(), ServiceError>>>(f: F) -> Result<(), ServiceError> {
    tokio::runtime::Builder::new_multi_thread()
        .enable_all()
        .build()?
        .block_on(f)
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    let (name, result): (&str, Result<(), (String, u8)>) = match &cli.command {
        Command::Analyze(args) => (
            "analyze",
            analyze::run(args).map_err(|e| (e.to_string(), e.exit_code())),
        ),
        Command::Serve(args) => (
            "serve",
            run_async(service::serve(args)).map_err(|e| (e.to_string(), e.exit_code())),
        ),
        Command::Migrate(db) => (
            "migrate",
            run_async(service::migrate(db)).map_err(|e| (e.to_string(), e.exit_code())),
        ),
        Command::Keys(cmd) => (
            "keys",
            run_async(service::keys(cmd)).map_err(|e| (e.to_string(), e.exit_code())),
        ),
        Command::Openapi => {
            print!("{}", kinema_server::api::openapi_json());
            ("openapi", Ok(()))
        }
    };
    match result {
        Ok(()) => ExitCode::SUCCESS,
        Err((msg, code)) => {
            eprintln!("kinema {name}: error: {msg}");
            ExitCode::from(code)
        }
    }
}
