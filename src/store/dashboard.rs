//! Read-only queries for the dashboard: evaluation rows with the names a
//! reader needs, and a teacher's history. They read the headline columns of
//! `candidates`, never the report bodies.

use serde::Serialize;
use time::OffsetDateTime;
use uuid::Uuid;

use super::rows::{stage, verdict};
use super::{EvaluationFilter, Page, Status, Store, StoreError, page};
use crate::engine::Stage;
use crate::report::Verdict;

/// The most entries a filter menu of the dashboard lists.
const MENU_LIMIT: i64 = 200;

/// One line of the evaluations page.
#[derive(Debug, Clone, Serialize)]
pub struct EvaluationRow {
    pub id: Uuid,
    pub project: String,
    pub status: Status,
    pub stage: Stage,
    pub done: u64,
    pub total: u64,
    pub created_at: OffsetDateTime,
    pub verdict: Option<Verdict>,
    pub teacher: Uuid,
    pub teacher_name: String,
    pub dataset: Uuid,
    /// None when the set's row is gone.
    pub dataset_name: Option<String>,
    /// The `commit` and `branch` tags, which CI sets on most evaluations.
    pub commit: Option<String>,
    pub branch: Option<String>,
    pub candidates: u64,
    pub recommended: Option<(Uuid, String)>,
}

/// The first-ranked candidate of one succeeded evaluation, for trends: the
/// recommended one when the verdict is go, the best of the failing ones
/// when it is no-go.
#[derive(Debug, Clone, Serialize)]
pub struct TrendPoint {
    pub evaluation: Uuid,
    pub created_at: OffsetDateTime,
    pub project: String,
    pub dataset: Uuid,
    pub dataset_name: Option<String>,
    pub commit: Option<String>,
    pub verdict: Verdict,
    pub model: String,
    pub agreement: f64,
    pub p90_ms: f64,
}

/// One tag of `e` as a column named `KEY_tag` (NULL when absent).
macro_rules! tag_column {
    ($key:literal) => {
        concat!(
            " (SELECT g.value FROM evaluation_tags g WHERE g.evaluation_id = e.id AND g.key = '",
            $key,
            "') AS ",
            $key,
            "_tag"
        )
    };
}

#[derive(sqlx::FromRow)]
struct ListRow {
    id: Uuid,
    project: String,
    status: Status,
    progress_stage: Option<String>,
    progress_done: i64,
    progress_total: i64,
    created_at: OffsetDateTime,
    verdict: Option<String>,
    teacher_id: Uuid,
    teacher_name: String,
    dataset_id: Uuid,
    dataset_name: Option<String>,
    commit_tag: Option<String>,
    branch_tag: Option<String>,
    recommended_id: Option<Uuid>,
    recommended_name: Option<String>,
    candidates: i64,
}

impl TryFrom<ListRow> for EvaluationRow {
    type Error = StoreError;

    fn try_from(r: ListRow) -> Result<Self, StoreError> {
        Ok(EvaluationRow {
            id: r.id,
            project: r.project,
            status: r.status,
            stage: stage(r.progress_stage.as_deref())?,
            done: r.progress_done as u64,
            total: r.progress_total as u64,
            created_at: r.created_at,
            verdict: verdict(r.verdict.as_deref())?,
            teacher: r.teacher_id,
            teacher_name: r.teacher_name,
            dataset: r.dataset_id,
            dataset_name: r.dataset_name,
            commit: r.commit_tag,
            branch: r.branch_tag,
            candidates: r.candidates as u64,
            recommended: r.recommended_id.zip(r.recommended_name),
        })
    }
}

#[derive(sqlx::FromRow)]
struct TrendRow {
    evaluation: Uuid,
    created_at: OffsetDateTime,
    project: String,
    dataset_id: Uuid,
    dataset_name: Option<String>,
    commit_tag: Option<String>,
    verdict: Option<String>,
    model: String,
    agreement: f64,
    p90_ms: f64,
}

impl TryFrom<TrendRow> for TrendPoint {
    type Error = StoreError;

    fn try_from(r: TrendRow) -> Result<Self, StoreError> {
        let verdict = verdict(r.verdict.as_deref())?.ok_or_else(|| {
            StoreError::Corrupt(format!(
                "succeeded evaluation {} has no verdict",
                r.evaluation
            ))
        })?;
        Ok(TrendPoint {
            evaluation: r.evaluation,
            created_at: r.created_at,
            project: r.project,
            dataset: r.dataset_id,
            dataset_name: r.dataset_name,
            commit: r.commit_tag,
            verdict,
            model: r.model,
            agreement: r.agreement,
            p90_ms: r.p90_ms,
        })
    }
}

impl Store {
    pub async fn evaluation_rows(
        &self,
        f: &EvaluationFilter,
        limit: u32,
        cursor: Option<Uuid>,
    ) -> Result<Page<EvaluationRow>, StoreError> {
        on_pool!(self, |pool| {
            let q = sqlx::query_as(concat!(
                "SELECT e.id, e.project, e.status, e.progress_stage, e.progress_done, e.progress_total,",
                " e.created_at, e.verdict, e.teacher_id, t.name AS teacher_name, e.recommended_id,",
                " e.dataset_id, d.name AS dataset_name, r.name AS recommended_name,",
                tag_column!("commit"),
                ",",
                tag_column!("branch"),
                ", (SELECT COUNT(*) FROM evaluation_students s WHERE s.evaluation_id = e.id) AS candidates",
                " FROM evaluations e JOIN models t ON t.id = e.teacher_id",
                " LEFT JOIN datasets d ON d.id = e.dataset_id",
                " LEFT JOIN models r ON r.id = e.recommended_id",
                evaluation_filter!()
            ));
            let rows: Vec<ListRow> = bind_filter!(q, f, limit, cursor).fetch_all(pool).await?;
            let items = rows
                .into_iter()
                .map(EvaluationRow::try_from)
                .collect::<Result<Vec<_>, _>>()?;
            Ok(page(items, limit, |r| r.id))
        })
    }

    /// The first-ranked candidate of each succeeded evaluation of a
    /// teacher, grouped by project and evaluation set (figures on two sets
    /// do not belong on one line), oldest first inside each group.
    pub async fn teacher_trend(&self, teacher: Uuid) -> Result<Vec<TrendPoint>, StoreError> {
        on_pool!(self, |pool| {
            let rows: Vec<TrendRow> = sqlx::query_as(concat!(
                "SELECT e.id AS evaluation, e.created_at, e.project, e.dataset_id,",
                " d.name AS dataset_name, e.verdict, m.name AS model, c.agreement, c.p90_ms,",
                tag_column!("commit"),
                " FROM evaluations e",
                " JOIN candidates c ON c.evaluation_id = e.id AND c.rank = 1",
                " JOIN models m ON m.id = c.model_id",
                " LEFT JOIN datasets d ON d.id = e.dataset_id",
                " WHERE e.teacher_id = $1 AND e.status = 'succeeded'",
                " ORDER BY e.project, d.name, e.dataset_id, e.id"
            ))
            .bind(teacher)
            .fetch_all(pool)
            .await?;
            rows.into_iter().map(TrendPoint::try_from).collect()
        })
    }

    /// Projects and teachers that have evaluations, for the filter menus:
    /// the `MENU_LIMIT` most recently evaluated of each, by name, so that a
    /// service with thousands of projects still sends a small page.
    pub async fn filter_choices(&self) -> Result<(Vec<String>, Vec<(Uuid, String)>), StoreError> {
        on_pool!(self, |pool| {
            let projects: Vec<(String,)> = sqlx::query_as(
                "SELECT project FROM (SELECT project, MAX(created_at) AS last FROM evaluations \
             GROUP BY project ORDER BY last DESC LIMIT $1) AS recent ORDER BY project",
            )
            .bind(MENU_LIMIT)
            .fetch_all(pool)
            .await?;
            let teachers: Vec<(Uuid, String)> = sqlx::query_as(
            "SELECT m.id, m.name FROM models m JOIN (SELECT teacher_id, MAX(created_at) AS last \
             FROM evaluations GROUP BY teacher_id ORDER BY last DESC LIMIT $1) t \
             ON m.id = t.teacher_id ORDER BY m.name, m.id",
        )
        .bind(MENU_LIMIT)
        .fetch_all(pool)
        .await?;
            Ok((projects.into_iter().map(|(p,)| p).collect(), teachers))
        })
    }
}
