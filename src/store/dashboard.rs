//! Read-only queries for the dashboard: evaluation rows with the names a
//! reader needs, and a teacher's history. They read the headline columns of
//! `candidates`, never the report bodies.

use serde::Serialize;
use time::OffsetDateTime;
use uuid::Uuid;

use super::rows::{stage, verdict};
use super::{EvaluationFilter, Page, Status, Store, StoreError, bind_filter, page};
use crate::engine::Stage;
use crate::report::Verdict;

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
    pub candidates: u64,
    pub recommended: Option<(Uuid, String)>,
}

/// The recommended candidate of one succeeded evaluation, for trends.
#[derive(Debug, Clone, Serialize, sqlx::FromRow)]
pub struct TrendPoint {
    pub evaluation: Uuid,
    pub created_at: OffsetDateTime,
    pub model: String,
    pub agreement: f64,
    pub p90_ms: f64,
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
            candidates: r.candidates as u64,
            recommended: r.recommended_id.zip(r.recommended_name),
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
        let q = sqlx::query_as(concat!(
            "SELECT e.id, e.project, e.status, e.progress_stage, e.progress_done, e.progress_total,",
            " e.created_at, e.verdict, e.teacher_id, t.name AS teacher_name, e.recommended_id,",
            " r.name AS recommended_name,",
            " (SELECT COUNT(*) FROM evaluation_students s WHERE s.evaluation_id = e.id) AS candidates",
            " FROM evaluations e JOIN models t ON t.id = e.teacher_id",
            " LEFT JOIN models r ON r.id = e.recommended_id",
            evaluation_filter!()
        ));
        let rows: Vec<ListRow> = bind_filter(q, f, limit, cursor)
            .fetch_all(&self.pool)
            .await?;
        let items = rows
            .into_iter()
            .map(EvaluationRow::try_from)
            .collect::<Result<Vec<_>, _>>()?;
        Ok(page(items, limit, |r| r.id))
    }

    /// The recommended candidate of each succeeded, go evaluation of a
    /// teacher, oldest first.
    pub async fn teacher_trend(&self, teacher: Uuid) -> Result<Vec<TrendPoint>, StoreError> {
        Ok(sqlx::query_as(concat!(
            "SELECT e.id AS evaluation, e.created_at, m.name AS model, c.agreement, c.p90_ms",
            " FROM evaluations e",
            " JOIN candidates c ON c.evaluation_id = e.id AND c.rank = 1 AND c.passed = 1",
            " JOIN models m ON m.id = c.model_id",
            " WHERE e.teacher_id = ?1 AND e.status = 'succeeded' ORDER BY e.id"
        ))
        .bind(teacher)
        .fetch_all(&self.pool)
        .await?)
    }

    /// Projects and teachers that have evaluations, for the filter menus.
    pub async fn filter_choices(&self) -> Result<(Vec<String>, Vec<(Uuid, String)>), StoreError> {
        let projects: Vec<(String,)> =
            sqlx::query_as("SELECT DISTINCT project FROM evaluations ORDER BY project")
                .fetch_all(&self.pool)
                .await?;
        let teachers: Vec<(Uuid, String)> = sqlx::query_as(
            "SELECT DISTINCT m.id, m.name FROM evaluations e JOIN models m ON m.id = e.teacher_id \
             ORDER BY m.name",
        )
        .fetch_all(&self.pool)
        .await?;
        Ok((projects.into_iter().map(|(p,)| p).collect(), teachers))
    }
}
