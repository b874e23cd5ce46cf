//! The engine's one error type. Every variant carries a message a user can act
//! on; the HTTP layer maps the variant (never the text) to a status code.
//!
//! Policy: the engine and the store use typed errors (thiserror); `anyhow` is
//! only for process start-up and glue in `main`.

use thiserror::Error;

#[derive(Debug, Error)]
pub enum EngineError {
    /// The bytes are not an ONNX model, or the graph is one the engine cannot
    /// load, type or plan.
    #[error("{0}")]
    InvalidModel(String),

    /// The file is not a readable NPY/NPZ evaluation set.
    #[error("{0}")]
    InvalidDataset(String),

    /// Model and set (or teacher and students, or settings) are each valid but
    /// do not fit together.
    #[error("{0}")]
    Mismatch(String),

    /// A model produced something unusable while running (NaN, wrong shape).
    #[error("{0}")]
    BadOutput(String),

    /// A request field that cannot be used: a setting out of its limits, an
    /// output a model lacks. It names the field.
    #[error(transparent)]
    Settings(#[from] super::settings::SettingsError),

    /// A figure came out NaN or infinite from finite outputs: the engine's
    /// fault, never shown as a number.
    #[error("the report's {0} is not a finite number")]
    NonFinite(String),

    /// Reading or writing a file the engine owns failed.
    #[error("{context}: {source}")]
    Io {
        context: String,
        #[source]
        source: std::io::Error,
    },
}

impl EngineError {
    pub(crate) fn io(context: impl Into<String>) -> impl FnOnce(std::io::Error) -> Self {
        let context = context.into();
        move |source| EngineError::Io { context, source }
    }
}

pub type EngineResult<T> = Result<T, EngineError>;
