//! The application's one error type. The service layer returns it, and
//! `http::problem` renders it once as problem+json (RFC 9457).
//!
//! Policy: the engine and the store have typed errors of their own
//! (thiserror); they convert into this type with `From`, which decides the
//! status. `anyhow` is only for process start-up and glue in `main`.

use crate::engine::EngineError;
use crate::store::StoreError;

#[derive(Debug, thiserror::Error)]
pub enum AppError {
    /// A malformed request: bad JSON, a query parameter that does not parse.
    #[error("{detail}")]
    BadRequest {
        detail: String,
        field: Option<String>,
    },
    /// An unknown id in the path.
    #[error("{0}")]
    NotFound(String),
    /// The resource is not in a state that allows this (a report before it exists).
    #[error("{0}")]
    Conflict(String),
    #[error("{0}")]
    TooLarge(String),
    /// Well-formed but unusable input: not ONNX, a set that does not fit.
    #[error("{detail}")]
    Unprocessable {
        detail: String,
        field: Option<String>,
    },
    /// Busy: the queue or a child could not be started; try again.
    #[error("{0}")]
    Unavailable(String),
    /// Anything that is our fault. Rendered generically; the cause is logged.
    #[error("{0}")]
    Internal(String),
}

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

    pub fn status_code(&self) -> u16 {
        match self {
            AppError::BadRequest { .. } => 400,
            AppError::NotFound(_) => 404,
            AppError::Conflict(_) => 409,
            AppError::TooLarge(_) => 413,
            AppError::Unprocessable { .. } => 422,
            AppError::Unavailable(_) => 503,
            AppError::Internal(_) => 500,
        }
    }

    pub fn field(&self) -> Option<&str> {
        match self {
            AppError::BadRequest { field, .. } | AppError::Unprocessable { field, .. } => {
                field.as_deref()
            }
            _ => None,
        }
    }
}

impl From<StoreError> for AppError {
    fn from(e: StoreError) -> Self {
        AppError::Internal(e.to_string())
    }
}

impl From<EngineError> for AppError {
    fn from(e: EngineError) -> Self {
        match e {
            EngineError::Settings(s) => AppError::unprocessable(s.message, Some(&s.field)),
            EngineError::InvalidModel(m)
            | EngineError::InvalidDataset(m)
            | EngineError::Mismatch(m)
            | EngineError::BadOutput(m) => AppError::unprocessable(m, None),
            EngineError::Canceled => AppError::Conflict("the evaluation was canceled".into()),
            EngineError::Io { .. } => AppError::Internal(e.to_string()),
        }
    }
}
