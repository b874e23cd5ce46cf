//! The `proctor` binary: parses arguments and starts the chosen command.

use clap::{Parser, Subcommand};
use proctor::cli::exit;
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
    /// Run evaluations from a shared queue (PostgreSQL), without HTTP.
    Worker(proctor::config::WorkerArgs),
    /// Submit a teacher, students and an evaluation set; exit with the verdict.
    Submit(Box<proctor::cli::submit::SubmitArgs>),
    /// Follow an evaluation created earlier to its verdict (exit as submit).
    Wait(proctor::cli::follow::WaitCommand),
    /// Print the report of an evaluation that has ended (exit as submit).
    Report(proctor::cli::follow::ReportCommand),
    /// Make a candidate that passed every gate its project's baseline.
    Adopt(proctor::cli::adopt::AdoptArgs),
    /// Make, list or revoke access tokens in the service's database.
    Token(proctor::cli::token::TokenCommand),
    /// Run the bundled turbine-acoustics demo on a local service.
    Demo(proctor::cli::demo::DemoArgs),
    /// Run one engine task read from stdin (started by the service).
    #[command(hide = true, name = "child")]
    Child,
}

fn main() -> anyhow::Result<()> {
    let cli = Cli::parse();
    // One TLS crypto provider for every client in the process (object
    // storage's among them), as the service's own TLS uses.
    let _ = rustls::crypto::ring::default_provider().install_default();
    let default_level = match cli.command {
        Command::Serve(_) | Command::Worker(_) => "info",
        _ => "warn",
    };
    tracing_subscriber::fmt()
        .with_env_filter(
            EnvFilter::try_from_default_env().unwrap_or_else(|_| EnvFilter::new(default_level)),
        )
        .with_writer(std::io::stderr)
        .with_ansi(std::io::IsTerminal::is_terminal(&std::io::stderr()))
        .init();
    let runtime = || tokio::runtime::Runtime::new();
    match cli.command {
        Command::Serve(args) => runtime()?.block_on(proctor::server::serve(args)),
        Command::Worker(args) => runtime()?.block_on(proctor::server::work(args)),
        Command::Submit(args) => {
            let outcome = runtime()?.block_on(proctor::cli::submit::run(&args));
            std::process::exit(exit::code("submit", outcome))
        }
        Command::Wait(args) => {
            let outcome = runtime()?.block_on(proctor::cli::follow::run_wait(&args));
            std::process::exit(exit::code("wait", outcome))
        }
        Command::Report(args) => {
            let outcome = runtime()?.block_on(proctor::cli::follow::run_report(&args));
            std::process::exit(exit::code("report", outcome))
        }
        Command::Adopt(args) => {
            let outcome = runtime()?.block_on(proctor::cli::adopt::run(&args));
            std::process::exit(exit::code("adopt", outcome))
        }
        Command::Token(args) => {
            let outcome = runtime()?.block_on(proctor::cli::token::run(&args));
            std::process::exit(exit::code("token", outcome))
        }
        Command::Demo(args) => {
            std::process::exit(runtime()?.block_on(proctor::cli::demo::run(&args))?)
        }
        Command::Child => std::process::exit(proctor::sandbox::entry::run_from_stdin()),
    }
}
