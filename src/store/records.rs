//! What the store keeps, in the shapes the API serves (api.md). The client
//! reads the same types back.

use std::collections::BTreeMap;

use serde::{Deserialize, Serialize};
use time::OffsetDateTime;
use uuid::Uuid;

use crate::engine::Stage;
use crate::engine::dataset::{ArrayInfo, DatasetInfo};
use crate::engine::fit::LargestLabel;
use crate::engine::model::ModelInfo;
use crate::engine::settings::Settings;
use crate::problem::Problem;
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
    pub class_names: Option<Vec<String>>,
    /// Distinct values of the set's `slices` array, if it has one.
    pub slice_count: Option<u64>,
    /// Kept for checks, not served; `None` for sets without labels and for
    /// sets uploaded before it was recorded.
    #[serde(skip)]
    pub largest_label: Option<LargestLabel>,
    #[serde(with = "time::serde::rfc3339")]
    pub created_at: OffsetDateTime,
}

impl DatasetRecord {
    /// What the upload learned, as the engine's checks read it.
    pub fn info(&self) -> DatasetInfo {
        DatasetInfo {
            samples: self.samples as usize,
            arrays: self.arrays.clone(),
            has_labels: self.has_labels,
            largest_label: self.largest_label,
            class_names: self.class_names.clone(),
            slice_count: self.slice_count.map(|n| n as usize),
        }
    }
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
    pub const ALL: [Status; 5] = [
        Status::Queued,
        Status::Running,
        Status::Succeeded,
        Status::Failed,
        Status::Canceled,
    ];

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
        Status::ALL.into_iter().find(|st| st.as_str() == s)
    }

    pub fn is_finished(self) -> bool {
        matches!(self, Status::Succeeded | Status::Failed | Status::Canceled)
    }
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Progress {
    pub stage: Stage,
    pub done: u64,
    pub total: u64,
    /// While queued: the `runs_on` labels that no live worker carries.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub waiting_for: Option<crate::labels::Labels>,
}

/// An evaluation's request as applied: the ids it names, defaults filled in.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct AppliedRequest {
    pub project: String,
    pub teacher: Uuid,
    pub students: Vec<Uuid>,
    pub dataset: Uuid,
    /// The baseline's model id, resolved at creation ("current" is stored
    /// as the id it named then).
    #[serde(default)]
    pub baseline: Option<Uuid>,
    #[serde(flatten)]
    pub settings: Settings,
    pub tags: BTreeMap<String, String>,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct EvaluationRecord {
    pub id: Uuid,
    pub project: String,
    pub status: Status,
    pub progress: Progress,
    /// Why it failed, when it did.
    pub error: Option<Problem>,
    pub request: AppliedRequest,
    pub tags: BTreeMap<String, String>,
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
    /// Times a worker claimed it; a graceful stop gives its attempt back.
    pub attempts: u32,
    /// The token that created it; null with access off.
    pub created_by: Option<String>,
    /// The token that canceled it, if one did.
    pub canceled_by: Option<String>,
    /// The worker that runs or ran it (the last to claim it).
    pub worker: Option<Uuid>,
}

/// A new evaluation as the service validated it.
#[derive(Debug, Clone)]
pub struct NewEvaluation {
    pub id: Uuid,
    pub request: AppliedRequest,
    pub created_at: OffsetDateTime,
    pub created_by: Option<String>,
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
#[derive(Debug, Clone, Serialize, Deserialize)]
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
