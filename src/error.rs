//! The application's one error type. The service layer returns it, and
//! `http::errors` renders it once as problem+json (RFC 9457).
//!
//! Policy: the engine, the store and the sandbox have typed errors of their
//! own (thiserror); each converts into this type in one place (`From` here
//! for the store, `sandbox::error` for the engine's process), which decides
//! the status. `anyhow` is only for process start-up and glue in `main`.

use std::time::Duration;

use crate::problem::Problem;
use crate::store::StoreError;

/// A source error kept for the log.
pub type Cause = Box<dyn std::error::Error + Send + Sync + 'static>;

#[derive(Debug, thiserror::Error)]
pub enum AppError {
    /// A malformed request: bad JSON, a query parameter that does not parse.
    #[error("{detail}")]
    BadRequest {
        detail: String,
        field: Option<String>,
    },
    /// No token, or one the service does not know (answered with
    /// `WWW-Authenticate: Bearer`).
    #[error("{0}")]
    Unauthorized(String),
    /// A token whose role or project does not allow this request.
    #[error("{0}")]
    Forbidden(String),
    /// An unknown id in the path.
    #[error("{0}")]
    NotFound(String),
    /// The resource is not in a state that allows this (a report before it exists).
    #[error("{0}")]
    Conflict(String),
    #[error("{0}")]
    TooLarge(String),
    /// A JSON body sent without saying `content-type: application/json`.
    #[error("{0}")]
    UnsupportedMediaType(String),
    /// A client too slow to finish its request (a stalled upload).
    #[error("{0}")]
    TooSlow(String),
    /// Storing this would take the data past its limit or fill the disk.
    #[error("{0}")]
    InsufficientStorage(String),
    /// Well-formed but unusable input: not ONNX, a set that does not fit.
    #[error("{detail}")]
    Unprocessable {
        detail: String,
        field: Option<String>,
    },
    /// Busy or stopping: try again after a while.
    #[error("{detail}")]
    Unavailable {
        detail: String,
        retry_after: Option<Duration>,
    },
    /// Anything that is our fault. Answered generically; the cause is logged.
    #[error("internal error: {0}")]
    Internal(#[source] Cause),
}

/// The detail of every 5xx answer that is our fault.
pub const GENERIC_DETAIL: &str =
    "something went wrong on our side; the cause is logged with this request's id";

impl AppError {
    pub fn bad_request(detail: impl Into<String>, field: Option<&str>) -> Self {
        AppError::BadRequest {
            detail: detail.into(),
            field: field.map(str::to_string),
        }
    }

    pub fn unprocessable(detail: impl Into<String>, field: Option<&str>) -> Self {
        AppError::Unprocessable {
            detail: detail.into(),
            field: field.map(str::to_string),
        }
    }

    pub fn internal(cause: impl Into<Cause>) -> Self {
        AppError::Internal(cause.into())
    }

    pub fn status_code(&self) -> u16 {
        match self {
            AppError::BadRequest { .. } => 400,
            AppError::Unauthorized(_) => 401,
            AppError::Forbidden(_) => 403,
            AppError::NotFound(_) => 404,
            AppError::Conflict(_) => 409,
            AppError::TooLarge(_) => 413,
            AppError::UnsupportedMediaType(_) => 415,
            AppError::TooSlow(_) => 408,
            AppError::InsufficientStorage(_) => 507,
            AppError::Unprocessable { .. } => 422,
            AppError::Unavailable { .. } => 503,
            AppError::Internal(_) => 500,
        }
    }

    /// How long a client should wait before trying again, when it should.
    pub fn retry_after(&self) -> Option<Duration> {
        match self {
            AppError::Unavailable { retry_after, .. } => *retry_after,
            _ => None,
        }
    }

    /// The problem object a client sees: our faults say nothing of their cause.
    pub fn problem(&self) -> Problem {
        let status = self.status_code();
        match self {
            AppError::Internal(_) => Problem::new(status, GENERIC_DETAIL, None),
            AppError::BadRequest { detail, field } | AppError::Unprocessable { detail, field } => {
                Problem::new(status, detail.clone(), field.as_deref())
            }
            other => Problem::new(status, other.to_string(), None),
        }
    }
}

impl From<StoreError> for AppError {
    fn from(e: StoreError) -> Self {
        AppError::Internal(Box::new(e))
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::problem::ABOUT_BLANK;

    /// Every variant, its status and its problem type (api.md, "Errors").
    #[test]
    fn every_error_maps_to_its_status_and_problem_type() {
        let table: Vec<(AppError, u16)> = vec![
            (AppError::bad_request("b", Some("limit")), 400),
            (AppError::Unauthorized("who".into()), 401),
            (AppError::Forbidden("no".into()), 403),
            (AppError::NotFound("n".into()), 404),
            (AppError::Conflict("c".into()), 409),
            (AppError::TooLarge("t".into()), 413),
            (AppError::UnsupportedMediaType("m".into()), 415),
            (AppError::TooSlow("s".into()), 408),
            (AppError::InsufficientStorage("full".into()), 507),
            (AppError::unprocessable("u", Some("gates.x")), 422),
            (
                AppError::Unavailable {
                    detail: "busy".into(),
                    retry_after: Some(Duration::from_secs(5)),
                },
                503,
            ),
            (AppError::internal("disk on fire"), 500),
        ];
        for (e, status) in table {
            let p = e.problem();
            assert_eq!((e.status_code(), p.status), (status, status), "{e:?}");
            assert_eq!(p.kind, ABOUT_BLANK, "{e:?}");
            assert_eq!(p.title, crate::problem::reason_phrase(status));
        }
    }

    #[test]
    fn a_5xx_detail_is_generic_and_names_no_cause() {
        let e = AppError::internal("/var/lib/proctor/models/abc: Permission denied");
        let p = e.problem();
        assert_eq!(p.detail, GENERIC_DETAIL);
        assert!(p.field.is_none());
        let source = std::error::Error::source(&e).expect("the cause is kept");
        assert!(source.to_string().contains("Permission denied"));
    }

    #[test]
    fn input_errors_keep_their_detail_and_field() {
        let p = AppError::unprocessable("gate 'x' is unknown", Some("gates.x")).problem();
        assert_eq!(p.detail, "gate 'x' is unknown");
        assert_eq!(p.field.as_deref(), Some("gates.x"));
    }
}
