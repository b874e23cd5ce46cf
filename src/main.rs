//! The `proctor` binary: parses arguments and starts the chosen command.

use clap::{Parser, Subcommand};
use tracing_subscriber::EnvFilter;

#[derive(Parser)]
#[command(
    name = "proctor",
    version,
    about = "Scores distilled students against their teacher and gates their release"
)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Run the HTTP service and its evaluation workers.
    Serve(proctor::config::ServeArgs),
    /// Run one engine task read from stdin (started by the service).
    #[command(hide = true, name = "child")]
    Child,
}

fn main() -> anyhow::Result<()> {
    tracing_subscriber::fmt()
        .with_env_filter(
            EnvFilter::try_from_default_env().unwrap_or_else(|_| EnvFilter::new("info")),
        )
        .with_writer(std::io::stderr)
        .init();
    match Cli::parse().command {
        Command::Serve(args) => {
            let runtime = tokio::runtime::Runtime::new()?;
            runtime.block_on(proctor::server::serve(args))
        }
        Command::Child => std::process::exit(proctor::queue::task::run_from_stdin()),
    }
}
