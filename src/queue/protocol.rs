//! What the service and its child process say to each other: one task as
//! JSON on the child's stdin, then JSON lines on its stdout — progress, and
//! one final answer.

use std::path::PathBuf;

use serde::{Deserialize, Serialize};

use crate::engine::dataset::DatasetInfo;
use crate::engine::model::ModelInfo;
use crate::engine::{EngineError, Job, Stage};
use crate::report::Report;

#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(tag = "task", rename_all = "snake_case")]
pub enum Task {
    InspectModel {
        path: PathBuf,
    },
    InspectDataset {
        path: PathBuf,
    },
    /// Every check that can be made before running.
    Check {
        job: Box<Job>,
    },
    Evaluate {
        job: Box<Job>,
        teacher_cache: Option<PathBuf>,
        offline_threads: usize,
        /// A file that every evaluation locks: shared for the offline pass,
        /// exclusive for the latency stage.
        cpu_lock: Option<PathBuf>,
    },
}

/// Which kind of engine error ended the task, so the service can map it.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum FailureKind {
    InvalidModel,
    InvalidDataset,
    Mismatch,
    BadOutput,
    Settings,
    Canceled,
    Io,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Failure {
    pub kind: FailureKind,
    pub message: String,
    pub field: Option<String>,
}

impl From<&EngineError> for Failure {
    fn from(e: &EngineError) -> Self {
        let kind = match e {
            EngineError::InvalidModel(_) => FailureKind::InvalidModel,
            EngineError::InvalidDataset(_) => FailureKind::InvalidDataset,
            EngineError::Mismatch(_) => FailureKind::Mismatch,
            EngineError::BadOutput(_) => FailureKind::BadOutput,
            EngineError::Settings(_) => FailureKind::Settings,
            EngineError::Canceled => FailureKind::Canceled,
            EngineError::Io { .. } => FailureKind::Io,
        };
        let field = match e {
            EngineError::Settings(s) => Some(s.field.clone()),
            _ => None,
        };
        Failure {
            kind,
            message: e.to_string(),
            field,
        }
    }
}

#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Message {
    Progress { stage: Stage, done: u64, total: u64 },
    Model(Box<ModelInfo>),
    Dataset(DatasetInfo),
    Checked,
    Report(Box<Report>),
    Failed(Failure),
}
