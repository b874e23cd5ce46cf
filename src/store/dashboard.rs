//! Read-only queries for the dashboard: evaluation rows with the names a
//! reader needs, and a teacher's history. They read the headline columns of
//! `candidates`, never the report bodies.

use serde::Serialize;
use sqlx::Row;
use sqlx::sqlite::SqliteRow;
use time::OffsetDateTime;
use uuid::Uuid;

use super::{EvaluationFilter, Page, Status, Store, StoreError, bind_filter, page, parse_time};
use crate::report::Verdict;

/// One line of the evaluations page.
#[derive(Debug, Clone, Serialize)]
pub struct EvaluationRow {
    pub id: Uuid,
    pub project: String,
    pub status: Status,
    pub stage: Option<String>,
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
#[derive(Debug, Clone, Serialize)]
pub struct TrendPoint {
    pub evaluation: Uuid,
    pub created_at: OffsetDateTime,
    pub model: String,
    pub agreement: f64,
    pub p90_ms: f64,
}

fn row_from(row: &SqliteRow) -> Result<EvaluationRow, StoreError> {
    let status: String = row.try_get("status")?;
    let recommended = match (
        row.try_get::<Option<String>, _>("recommended_id")?,
        row.try_get::<Option<String>, _>("recommended_name")?,
    ) {
        (Some(id), Some(name)) => Some((Uuid::parse_str(&id)?, name)),
        _ => None,
    };
    Ok(EvaluationRow {
        id: Uuid::parse_str(row.try_get("id")?)?,
        project: row.try_get("project")?,
        status: Status::parse(&status)
            .ok_or_else(|| StoreError::Corrupt(format!("status {status}")))?,
        stage: row.try_get("progress_stage")?,
        done: row.try_get::<i64, _>("progress_done")? as u64,
        total: row.try_get::<i64, _>("progress_total")? as u64,
        created_at: parse_time(row.try_get("created_at")?)?,
        verdict: row
            .try_get::<Option<String>, _>("verdict")?
            .as_deref()
            .and_then(Verdict::parse),
        teacher: Uuid::parse_str(row.try_get("teacher_id")?)?,
        teacher_name: row.try_get("teacher_name")?,
        candidates: row.try_get::<i64, _>("candidates")? as u64,
        recommended,
    })
}

impl Store {
    pub async fn evaluation_rows(
        &self,
        f: &EvaluationFilter,
        limit: u32,
        cursor: Option<Uuid>,
    ) -> Result<Page<EvaluationRow>, StoreError> {
        let q = sqlx::query(concat!(
            "SELECT e.id, e.project, e.status, e.progress_stage, e.progress_done, e.progress_total,",
            " e.created_at, e.verdict, e.teacher_id, t.name AS teacher_name, e.recommended_id,",
            " r.name AS recommended_name,",
            " (SELECT COUNT(*) FROM evaluation_students s WHERE s.evaluation_id = e.id) AS candidates",
            " FROM evaluations e JOIN models t ON t.id = e.teacher_id",
            " LEFT JOIN models r ON r.id = e.recommended_id",
            evaluation_filter!()
        ));
        let rows = bind_filter(q, f, limit, cursor)
            .fetch_all(&self.pool)
            .await?;
        let items = rows.iter().map(row_from).collect::<Result<Vec<_>, _>>()?;
        Ok(page(items, limit, |r| r.id.to_string()))
    }

    /// The recommended candidate of each succeeded, go evaluation of a
    /// teacher, oldest first.
    pub async fn teacher_trend(&self, teacher: Uuid) -> Result<Vec<TrendPoint>, StoreError> {
        let rows = sqlx::query(concat!(
            "SELECT e.id, e.created_at, m.name, c.agreement, c.p90_ms FROM evaluations e",
            " JOIN candidates c ON c.evaluation_id = e.id AND c.rank = 1 AND c.passed = 1",
            " JOIN models m ON m.id = c.model_id",
            " WHERE e.teacher_id = ?1 AND e.status = 'succeeded' ORDER BY e.id"
        ))
        .bind(teacher.to_string())
        .fetch_all(&self.pool)
        .await?;
        rows.iter()
            .map(|r| {
                Ok(TrendPoint {
                    evaluation: Uuid::parse_str(r.try_get("id")?)?,
                    created_at: parse_time(r.try_get("created_at")?)?,
                    model: r.try_get("name")?,
                    agreement: r.try_get("agreement")?,
                    p90_ms: r.try_get("p90_ms")?,
                })
            })
            .collect()
    }

    /// Projects and teachers that have evaluations, for the filter menus.
    pub async fn filter_choices(&self) -> Result<(Vec<String>, Vec<(Uuid, String)>), StoreError> {
        let projects = sqlx::query("SELECT DISTINCT project FROM evaluations ORDER BY project")
            .fetch_all(&self.pool)
            .await?
            .iter()
            .map(|r| r.try_get("project"))
            .collect::<Result<Vec<String>, _>>()?;
        let teachers = sqlx::query(
            "SELECT DISTINCT m.id, m.name FROM evaluations e JOIN models m ON m.id = e.teacher_id \
             ORDER BY m.name",
        )
        .fetch_all(&self.pool)
        .await?
        .iter()
        .map(|r| Ok((Uuid::parse_str(r.try_get("id")?)?, r.try_get("name")?)))
        .collect::<Result<Vec<_>, StoreError>>()?;
        Ok((projects, teachers))
    }
}
