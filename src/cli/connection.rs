//! How a command reaches the service: its address, the token it shows and
//! the certificate it trusts, and the time limits a CI job puts on the
//! whole wait.

use std::path::PathBuf;
use std::time::Duration;

/// The service to talk to, shared by every command that does.
#[derive(Debug, Clone, clap::Args)]
pub struct ServerArgs {
    /// The Proctor service's address, http:// or https://.
    #[arg(long, env = "PROCTOR_SERVER", default_value = "http://127.0.0.1:8080")]
    pub server: String,
    /// The access token (`proctor token create`), sent as a bearer token.
    /// Prefer the environment variable: a flag shows in process listings.
    #[arg(long, env = "PROCTOR_TOKEN", hide_env_values = true)]
    pub token: Option<String>,
    /// A PEM certificate to trust besides the system's, for a service
    /// whose HTTPS certificate a private authority signed.
    #[arg(long, env = "PROCTOR_CA_CERT", value_name = "FILE")]
    pub ca_cert: Option<PathBuf>,
}

impl ServerArgs {
    pub fn base(&self) -> &str {
        self.server.trim_end_matches('/')
    }
}

/// How long a command may wait in all, e.g. `--timeout 45m`.
#[derive(Debug, Clone, clap::Args)]
pub struct WaitArgs {
    /// Give up waiting after this long (e.g. 90s, 30m, 2h) and exit 3,
    /// printing the evaluation's id; the evaluation itself goes on.
    #[arg(long, value_name = "DURATION", value_parser = humantime::parse_duration)]
    pub timeout: Option<Duration>,
}
