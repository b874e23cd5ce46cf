//! How the engine's process can fail, and the one table that turns each
//! failure into what a client sees: faults of the input are 422, faults of
//! the service are 500 with a generic detail and their cause logged.

use std::time::Duration;

use crate::error::AppError;

#[derive(Debug, thiserror::Error)]
pub enum SandboxError {
    /// The input cannot be used: a model, a set, a request field, or a
    /// model that runs past the limits an evaluation may use.
    #[error("{detail}")]
    Refused {
        detail: String,
        field: Option<String>,
    },
    /// Too many checks are waiting for a slot.
    #[error("too many checks are waiting; try again in {} s", retry_after.as_secs())]
    Busy { retry_after: Duration },
    /// The caller canceled the work (an evaluation being canceled or the
    /// service stopping).
    #[error("canceled")]
    Canceled,
    /// Our fault: the child could not be started or spoken to, died without
    /// an answer, or answered something that does not parse.
    #[error("the engine process failed: {0}")]
    Fault(String),
}

impl SandboxError {
    pub(super) fn refused(detail: impl Into<String>) -> Self {
        SandboxError::Refused {
            detail: detail.into(),
            field: None,
        }
    }
}

impl From<SandboxError> for AppError {
    fn from(e: SandboxError) -> Self {
        match e {
            SandboxError::Refused { detail, field } => AppError::Unprocessable { detail, field },
            SandboxError::Busy { retry_after } => AppError::Unavailable {
                detail: format!(
                    "the service is busy checking other uploads; try again in {} s",
                    retry_after.as_secs()
                ),
                retry_after: Some(retry_after),
            },
            SandboxError::Canceled => AppError::Unavailable {
                detail: "the service is stopping; try again shortly".into(),
                retry_after: Some(Duration::from_secs(5)),
            },
            fault @ SandboxError::Fault(_) => AppError::internal(fault),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn input_faults_are_422_and_service_faults_500() {
        let table = [
            (SandboxError::refused("not an ONNX model"), 422),
            (
                SandboxError::Busy {
                    retry_after: Duration::from_secs(5),
                },
                503,
            ),
            (SandboxError::Canceled, 503),
            (SandboxError::Fault("exited with status 0".into()), 500),
        ];
        for (e, status) in table {
            let text = e.to_string();
            let app = AppError::from(e);
            assert_eq!(app.status_code(), status, "{text}");
            if status == 500 {
                assert!(
                    !app.problem().detail.contains("status 0"),
                    "5xx detail leaks"
                );
            }
        }
        let busy = AppError::from(SandboxError::Busy {
            retry_after: Duration::from_secs(5),
        });
        assert_eq!(busy.retry_after(), Some(Duration::from_secs(5)));
    }
}
