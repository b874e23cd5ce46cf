//! How the command line ends: its exit codes, and a failure carrying the
//! code it maps to, so that a CI step can tell a verdict from a fault.

use super::client::ClientError;

/// Exit codes, documented in `--help` and the README.
pub const EXIT_GO: i32 = 0;
pub const EXIT_NO_GO: i32 = 1;
pub const EXIT_INPUT: i32 = 2;
pub const EXIT_SERVER: i32 = 3;

/// A failure with the exit code it maps to.
#[derive(Debug)]
pub struct Exit {
    pub code: i32,
    pub message: String,
}

impl Exit {
    /// A usage or input error: a missing file, a gate the server refuses.
    pub fn input(message: impl Into<String>) -> Exit {
        Exit {
            code: EXIT_INPUT,
            message: message.into(),
        }
    }

    /// A server or network error.
    pub fn server(message: impl Into<String>) -> Exit {
        Exit {
            code: EXIT_SERVER,
            message: message.into(),
        }
    }
}

impl From<ClientError> for Exit {
    fn from(e: ClientError) -> Self {
        let code = match e {
            ClientError::Input(_) => EXIT_INPUT,
            ClientError::Server(_) => EXIT_SERVER,
        };
        Exit {
            code,
            message: e.to_string(),
        }
    }
}

/// The process's exit code for a command's outcome, saying why on stderr.
pub fn code(command: &str, outcome: Result<i32, Exit>) -> i32 {
    match outcome {
        Ok(code) => code,
        Err(e) => {
            eprintln!("proctor {command}: {}", e.message);
            e.code
        }
    }
}
