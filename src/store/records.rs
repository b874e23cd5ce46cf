//! What the store keeps, in the shapes the API serves (api.md).

use serde::{Deserialize, Serialize};
use serde_json::{Map, Value};
use time::OffsetDateTime;
use uuid::Uuid;

use crate::engine::dataset::ArrayInfo;
use crate::engine::model::ModelInfo;
use crate::report::Verdict;

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ModelRecord {
    pub id: Uuid,
    pub name: String,
    pub sha256: String,
    pub bytes: u64,
    #[serde(flatten)]
    pub info: ModelInfo,
    #[serde(with = "time::serde::rfc3339")]
    pub created_at: OffsetDateTime,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct DatasetRecord {
    pub id: Uuid,
    pub name: String,
    pub sha256: String,
    pub bytes: u64,
    pub samples: u64,
    pub arrays: Vec<ArrayInfo>,
    pub has_labels: bool,
    #[serde(with = "time::serde::rfc3339")]
    pub created_at: OffsetDateTime,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Status {
    Queued,
    Running,
    Succeeded,
    Failed,
    Canceled,
}

impl Status {
    pub fn as_str(self) -> &'static str {
        match self {
            Status::Queued => "queued",
            Status::Running => "running",
            Status::Succeeded => "succeeded",
            Status::Failed => "failed",
            Status::Canceled => "canceled",
        }
    }

    pub fn parse(s: &str) -> Option<Status> {
        [
            Status::Queued,
            Status::Running,
            Status::Succeeded,
            Status::Failed,
            Status::Canceled,
        ]
        .into_iter()
        .find(|st| st.as_str() == s)
    }

    pub fn is_finished(self) -> bool {
        matches!(self, Status::Succeeded | Status::Failed | Status::Canceled)
    }
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Progress {
    pub stage: Option<String>,
    pub done: u64,
    pub total: u64,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct EvaluationRecord {
    pub id: Uuid,
    pub project: String,
    pub status: Status,
    pub progress: Progress,
    /// A problem object (RFC 9457) when failed.
    pub error: Option<Value>,
    /// The request as applied, defaults filled in.
    pub request: Value,
    pub tags: Map<String, Value>,
    #[serde(with = "time::serde::rfc3339")]
    pub created_at: OffsetDateTime,
    #[serde(with = "time::serde::rfc3339::option")]
    pub started_at: Option<OffsetDateTime>,
    #[serde(with = "time::serde::rfc3339::option")]
    pub finished_at: Option<OffsetDateTime>,
    pub verdict: Option<Verdict>,
    /// The recommended candidate once succeeded with a go verdict.
    pub recommended: Option<Uuid>,
    pub teacher: Uuid,
    pub dataset: Uuid,
    #[serde(skip)]
    pub attempts: u32,
}

/// A new evaluation as the service validated it.
#[derive(Debug, Clone)]
pub struct NewEvaluation {
    pub id: Uuid,
    pub project: String,
    pub teacher: Uuid,
    pub students: Vec<Uuid>,
    pub dataset: Uuid,
    pub request: Value,
    pub tags: Map<String, Value>,
    pub created_at: OffsetDateTime,
}

/// Filters of `GET /v1/evaluations`; `None` matches everything.
#[derive(Debug, Clone, Default)]
pub struct EvaluationFilter {
    pub project: Option<String>,
    pub teacher: Option<Uuid>,
    pub status: Option<Status>,
    pub verdict: Option<Verdict>,
    /// One tag, as (key, value); the query gives it as `key:value`.
    pub tag: Option<(String, String)>,
}

/// One page of a list, newest first, and the cursor of the next page.
#[derive(Debug, Clone, Serialize)]
pub struct Page<T> {
    pub items: Vec<T>,
    pub next_cursor: Option<String>,
}

/// What `DELETE /v1/evaluations/{id}` found.
#[derive(Debug, Clone)]
pub enum CancelOutcome {
    Canceled(EvaluationRecord),
    AlreadyFinished(EvaluationRecord),
    NotFound,
}
