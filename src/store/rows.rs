//! Rows as the database holds them, decoded by sqlx (ids as UUIDs, times
//! as RFC 3339 text, JSON columns as their types), and turned into the
//! records the API serves.

use std::collections::BTreeMap;

use sqlx::types::Json;
use time::OffsetDateTime;
use uuid::Uuid;

use super::{
    AppliedRequest, DatasetRecord, EvaluationRecord, ModelRecord, Progress, Status, StoreError,
};
use crate::engine::Stage;
use crate::engine::dataset::ArrayInfo;
use crate::engine::fit::LargestLabel;
use crate::engine::model::ModelInfo;
use crate::problem::Problem;
use crate::report::Verdict;

#[derive(sqlx::FromRow)]
pub(super) struct ModelRow {
    id: Uuid,
    name: String,
    sha256: String,
    bytes: i64,
    info: Json<ModelInfo>,
    created_at: OffsetDateTime,
}

impl From<ModelRow> for ModelRecord {
    fn from(r: ModelRow) -> Self {
        ModelRecord {
            id: r.id,
            name: r.name,
            sha256: r.sha256,
            bytes: r.bytes as u64,
            info: r.info.0,
            created_at: r.created_at,
        }
    }
}

#[derive(sqlx::FromRow)]
pub(super) struct DatasetRow {
    id: Uuid,
    name: String,
    sha256: String,
    bytes: i64,
    samples: i64,
    has_labels: bool,
    arrays: Json<Vec<ArrayInfo>>,
    largest_label: Option<Json<LargestLabel>>,
    class_names: Option<Json<Vec<String>>>,
    slice_count: Option<i64>,
    created_at: OffsetDateTime,
}

impl From<DatasetRow> for DatasetRecord {
    fn from(r: DatasetRow) -> Self {
        DatasetRecord {
            id: r.id,
            name: r.name,
            sha256: r.sha256,
            bytes: r.bytes as u64,
            samples: r.samples as u64,
            arrays: r.arrays.0,
            has_labels: r.has_labels,
            class_names: r.class_names.map(|c| c.0),
            slice_count: r.slice_count.map(|n| n as u64),
            largest_label: r.largest_label.map(|l| l.0),
            created_at: r.created_at,
        }
    }
}

#[derive(sqlx::FromRow)]
pub(super) struct EvaluationRow {
    id: Uuid,
    project: String,
    teacher_id: Uuid,
    dataset_id: Uuid,
    status: Status,
    request: Json<AppliedRequest>,
    tags: Json<BTreeMap<String, String>>,
    progress_stage: Option<String>,
    progress_done: i64,
    progress_total: i64,
    error: Option<Json<Problem>>,
    attempts: i64,
    created_at: OffsetDateTime,
    started_at: Option<OffsetDateTime>,
    finished_at: Option<OffsetDateTime>,
    verdict: Option<String>,
    recommended_id: Option<Uuid>,
    created_by: Option<String>,
    canceled_by: Option<String>,
    worker_id: Option<Uuid>,
}

/// A stage as stored; NULL is an evaluation no worker has started.
pub(super) fn stage(stored: Option<&str>) -> Result<Stage, StoreError> {
    match stored {
        None => Ok(Stage::Waiting),
        Some(s) => Stage::parse(s).ok_or_else(|| StoreError::Corrupt(format!("stage {s}"))),
    }
}

pub(super) fn verdict(stored: Option<&str>) -> Result<Option<Verdict>, StoreError> {
    stored
        .map(|v| Verdict::parse(v).ok_or_else(|| StoreError::Corrupt(format!("verdict {v}"))))
        .transpose()
}

impl TryFrom<EvaluationRow> for EvaluationRecord {
    type Error = StoreError;

    fn try_from(r: EvaluationRow) -> Result<Self, StoreError> {
        Ok(EvaluationRecord {
            id: r.id,
            project: r.project,
            status: r.status,
            progress: Progress {
                stage: stage(r.progress_stage.as_deref())?,
                done: r.progress_done as u64,
                total: r.progress_total as u64,
                waiting_for: None,
            },
            error: r.error.map(|e| e.0),
            request: r.request.0,
            tags: r.tags.0,
            created_at: r.created_at,
            started_at: r.started_at,
            finished_at: r.finished_at,
            verdict: verdict(r.verdict.as_deref())?,
            recommended: r.recommended_id,
            teacher: r.teacher_id,
            dataset: r.dataset_id,
            attempts: r.attempts as u32,
            created_by: r.created_by,
            canceled_by: r.canceled_by,
            worker: r.worker_id,
        })
    }
}
