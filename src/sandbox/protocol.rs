//! What the service and its engine process say to each other: one task as
//! JSON on the child's stdin, then JSON lines on its stdout (progress, then
//! one final answer). Only this module's parent and child sides read it.

use std::path::PathBuf;

use serde::{Deserialize, Serialize};

use crate::engine::dataset::DatasetInfo;
use crate::engine::model::ModelInfo;
use crate::engine::{EngineError, Job, Options, Stage};
use crate::report::Report;

#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(tag = "task", rename_all = "snake_case")]
pub(super) enum Task {
    InspectModel {
        path: PathBuf,
    },
    /// Inlines a zip bundle's external data into `out` and inspects it.
    InspectBundle {
        bundle: PathBuf,
        out: PathBuf,
    },
    InspectDataset {
        path: PathBuf,
    },
    /// Loads the models to decide what their records could not.
    Preflight {
        job: Box<Job>,
    },
    Evaluate {
        job: Box<Job>,
        options: Options,
        /// The file that evaluations lock: shared for the bulk pass,
        /// exclusive for the timed rounds.
        cpu_lock: PathBuf,
        /// Test builds only: a stage at which the child waits.
        #[serde(default, skip_serializing_if = "Option::is_none")]
        hold: Option<super::hold::Hold>,
    },
}

/// Which kind of engine error ended the task, so the parent can map it.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub(super) enum FailureKind {
    /// The input cannot be used: a model, a set, or a request field.
    Input,
    /// The engine's own fault: a file it owns could not be read or
    /// written, or a figure came out non-finite.
    Io,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(super) struct Failure {
    pub(super) kind: FailureKind,
    pub(super) message: String,
    pub(super) field: Option<String>,
}

impl From<&EngineError> for Failure {
    fn from(e: &EngineError) -> Self {
        let kind = match e {
            EngineError::Io { .. } | EngineError::NonFinite(_) => FailureKind::Io,
            EngineError::InvalidModel(_)
            | EngineError::InvalidDataset(_)
            | EngineError::Mismatch(_)
            | EngineError::BadOutput(_)
            | EngineError::Settings(_) => FailureKind::Input,
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

/// An evaluation's result as it crosses the pipe.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct Evaluated {
    pub report: Report,
    /// Milliseconds of every timed run, one row per round.
    pub rounds: Vec<Vec<f64>>,
}

#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub(super) enum Message {
    Progress { stage: Stage, done: u64, total: u64 },
    Model(Box<ModelInfo>),
    Dataset(DatasetInfo),
    Preflighted,
    Evaluated(Box<Evaluated>),
    Failed(Failure),
}
