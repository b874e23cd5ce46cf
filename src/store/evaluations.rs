//! Evaluations and their queue. A worker claims a job in one short
//! statement (`UPDATE … RETURNING`) that counts the attempt; it never holds a
//! transaction while the job runs. A job's results are written in one
//! transaction that succeeds only while the job is still running under that
//! worker, so a cancel that raced the finish wins.

use serde_json::{Map, Value};
use sqlx::Row;
use sqlx::sqlite::SqliteRow;
use time::OffsetDateTime;
use uuid::Uuid;

use super::{
    CancelOutcome, EvaluationFilter, EvaluationRecord, MAX_ATTEMPTS, NewEvaluation, Page, Progress,
    Status, Store, StoreError, bind_filter, fmt_time, page, parse_time,
};
use crate::report::{Report, Verdict};

macro_rules! evaluation_columns {
    () => {
        "id, project, teacher_id, dataset_id, status, request, tags, progress_stage, \
         progress_done, progress_total, error, attempts, created_at, started_at, finished_at, \
         verdict, recommended_id"
    };
}

fn evaluation_from_row(row: &SqliteRow) -> Result<EvaluationRecord, StoreError> {
    let opt_time = |col: &str| -> Result<Option<OffsetDateTime>, StoreError> {
        row.try_get::<Option<String>, _>(col)?
            .as_deref()
            .map(parse_time)
            .transpose()
    };
    let status: String = row.try_get("status")?;
    let verdict = row
        .try_get::<Option<String>, _>("verdict")?
        .as_deref()
        .and_then(Verdict::parse);
    Ok(EvaluationRecord {
        id: Uuid::parse_str(row.try_get("id")?)?,
        project: row.try_get("project")?,
        status: Status::parse(&status)
            .ok_or_else(|| StoreError::Corrupt(format!("unknown status {status}")))?,
        progress: Progress {
            stage: row.try_get("progress_stage")?,
            done: row.try_get::<i64, _>("progress_done")? as u64,
            total: row.try_get::<i64, _>("progress_total")? as u64,
        },
        error: row
            .try_get::<Option<String>, _>("error")?
            .map(|e| serde_json::from_str(&e))
            .transpose()?,
        request: serde_json::from_str(row.try_get("request")?)?,
        tags: serde_json::from_str(row.try_get("tags")?)?,
        created_at: parse_time(row.try_get("created_at")?)?,
        started_at: opt_time("started_at")?,
        finished_at: opt_time("finished_at")?,
        verdict,
        recommended: row
            .try_get::<Option<String>, _>("recommended_id")?
            .map(|s| Uuid::parse_str(&s))
            .transpose()?,
        teacher: Uuid::parse_str(row.try_get("teacher_id")?)?,
        dataset: Uuid::parse_str(row.try_get("dataset_id")?)?,
        attempts: row.try_get::<i64, _>("attempts")? as u32,
    })
}

/// Tags as (key, text) pairs; a non-string value is stored as its JSON text.
fn tag_pairs(tags: &Map<String, Value>) -> impl Iterator<Item = (&str, String)> {
    tags.iter().map(|(k, v)| {
        (
            k.as_str(),
            v.as_str().map_or_else(|| v.to_string(), str::to_string),
        )
    })
}

impl Store {
    /// Stores a new queued evaluation with its students and tags in one
    /// transaction, so a worker never sees half of it.
    pub async fn create_evaluation(
        &self,
        e: &NewEvaluation,
    ) -> Result<EvaluationRecord, StoreError> {
        let mut tx = self.pool.begin().await?;
        let id = e.id.to_string();
        sqlx::query(
            "INSERT INTO evaluations (id, project, teacher_id, dataset_id, status, request, tags, \
             created_at) VALUES (?1, ?2, ?3, ?4, 'queued', ?5, ?6, ?7)",
        )
        .bind(&id)
        .bind(&e.project)
        .bind(e.teacher.to_string())
        .bind(e.dataset.to_string())
        .bind(serde_json::to_string(&e.request)?)
        .bind(serde_json::to_string(&e.tags)?)
        .bind(fmt_time(e.created_at))
        .execute(&mut *tx)
        .await?;
        for (position, student) in e.students.iter().enumerate() {
            sqlx::query(
                "INSERT INTO evaluation_students (evaluation_id, position, model_id) VALUES (?1, ?2, ?3)",
            )
            .bind(&id)
            .bind(position as i64)
            .bind(student.to_string())
            .execute(&mut *tx)
            .await?;
        }
        for (key, value) in tag_pairs(&e.tags) {
            sqlx::query(
                "INSERT INTO evaluation_tags (evaluation_id, key, value) VALUES (?1, ?2, ?3)",
            )
            .bind(&id)
            .bind(key)
            .bind(value)
            .execute(&mut *tx)
            .await?;
        }
        tx.commit().await?;
        self.evaluation(e.id)
            .await?
            .ok_or_else(|| StoreError::Corrupt(format!("evaluation {id} vanished after insert")))
    }

    pub async fn evaluation(&self, id: Uuid) -> Result<Option<EvaluationRecord>, StoreError> {
        let row = sqlx::query(concat!(
            "SELECT ",
            evaluation_columns!(),
            " FROM evaluations WHERE id = ?1"
        ))
        .bind(id.to_string())
        .fetch_optional(&self.pool)
        .await?;
        row.as_ref().map(evaluation_from_row).transpose()
    }

    /// The student model ids of an evaluation, in request order.
    pub async fn students_of(&self, id: Uuid) -> Result<Vec<Uuid>, StoreError> {
        let rows = sqlx::query(
            "SELECT model_id FROM evaluation_students WHERE evaluation_id = ?1 ORDER BY position",
        )
        .bind(id.to_string())
        .fetch_all(&self.pool)
        .await?;
        rows.iter()
            .map(|r| Ok(Uuid::parse_str(r.try_get("model_id")?)?))
            .collect()
    }

    /// Evaluations newest first.
    pub async fn list_evaluations(
        &self,
        f: &EvaluationFilter,
        limit: u32,
        cursor: Option<Uuid>,
    ) -> Result<Page<EvaluationRecord>, StoreError> {
        let q = sqlx::query(concat!(
            "SELECT ",
            evaluation_columns!(),
            " FROM evaluations e",
            evaluation_filter!()
        ));
        let rows = bind_filter(q, f, limit, cursor)
            .fetch_all(&self.pool)
            .await?;
        let items = rows
            .iter()
            .map(evaluation_from_row)
            .collect::<Result<Vec<_>, _>>()?;
        Ok(page(items, limit, |e| e.id.to_string()))
    }

    /// Claims the oldest queued evaluation for `owner`, counting an attempt.
    pub async fn claim_next(&self, owner: &str) -> Result<Option<EvaluationRecord>, StoreError> {
        let row = sqlx::query(concat!(
            "UPDATE evaluations SET status = 'running', attempts = attempts + 1, lease_owner = ?1,",
            " started_at = COALESCE(started_at, ?2), progress_stage = NULL, progress_done = 0,",
            " progress_total = 0",
            " WHERE id = (SELECT id FROM evaluations WHERE status = 'queued' ORDER BY id LIMIT 1)",
            " AND status = 'queued' RETURNING ",
            evaluation_columns!()
        ))
        .bind(owner)
        .bind(fmt_time(OffsetDateTime::now_utc()))
        .fetch_optional(&self.pool)
        .await?;
        row.as_ref().map(evaluation_from_row).transpose()
    }

    pub async fn set_progress(
        &self,
        id: Uuid,
        owner: &str,
        progress: &Progress,
    ) -> Result<(), StoreError> {
        sqlx::query(
            "UPDATE evaluations SET progress_stage = ?1, progress_done = ?2, progress_total = ?3 \
             WHERE id = ?4 AND status = 'running' AND lease_owner = ?5",
        )
        .bind(&progress.stage)
        .bind(progress.done as i64)
        .bind(progress.total as i64)
        .bind(id.to_string())
        .bind(owner)
        .execute(&self.pool)
        .await?;
        Ok(())
    }

    /// Writes the report, its candidate rows and the final status at once.
    /// Returns false (and writes nothing) when the evaluation is no longer
    /// running under `owner`, e.g. because it was canceled meanwhile.
    pub async fn finish_succeeded(
        &self,
        id: Uuid,
        owner: &str,
        report: &Report,
    ) -> Result<bool, StoreError> {
        let mut tx = self.pool.begin().await?;
        let key = id.to_string();
        let updated = sqlx::query(
            "UPDATE evaluations SET status = 'succeeded', finished_at = ?1, verdict = ?2, \
             recommended_id = ?3, lease_owner = NULL WHERE id = ?4 AND status = 'running' \
             AND lease_owner = ?5",
        )
        .bind(fmt_time(report.finished_at))
        .bind(report.verdict.as_str())
        .bind(report.recommended.map(|r| r.to_string()))
        .bind(&key)
        .bind(owner)
        .execute(&mut *tx)
        .await?
        .rows_affected();
        if updated != 1 {
            tx.rollback().await?;
            return Ok(false);
        }
        sqlx::query("INSERT INTO reports (evaluation_id, body) VALUES (?1, ?2)")
            .bind(&key)
            .bind(serde_json::to_string(report)?)
            .execute(&mut *tx)
            .await?;
        for c in &report.candidates {
            sqlx::query(
                "INSERT INTO candidates (evaluation_id, model_id, rank, agreement, kl, top1, \
                 top1_delta, p50_ms, p90_ms, speedup, bytes, size_ratio, passed, pareto_optimal) \
                 VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13, ?14)",
            )
            .bind(&key)
            .bind(c.model.id.to_string())
            .bind(c.rank as i64)
            .bind(c.fidelity.agreement)
            .bind(c.fidelity.kl)
            .bind(c.accuracy.as_ref().map(|a| a.own.top1))
            .bind(c.accuracy.as_ref().map(|a| a.delta))
            .bind(c.latency.own.p50_ms)
            .bind(c.latency.own.p90_ms)
            .bind(c.latency.speedup)
            .bind(c.size.bytes as i64)
            .bind(c.size.size_ratio)
            .bind(c.gates.passed as i64)
            .bind(c.pareto_optimal as i64)
            .execute(&mut *tx)
            .await?;
        }
        tx.commit().await?;
        Ok(true)
    }

    /// Marks a running evaluation failed with a problem object.
    pub async fn finish_failed(
        &self,
        id: Uuid,
        owner: &str,
        problem: &Value,
    ) -> Result<bool, StoreError> {
        let done = sqlx::query(
            "UPDATE evaluations SET status = 'failed', finished_at = ?1, error = ?2, \
             lease_owner = NULL WHERE id = ?3 AND status = 'running' AND lease_owner = ?4",
        )
        .bind(fmt_time(OffsetDateTime::now_utc()))
        .bind(serde_json::to_string(problem)?)
        .bind(id.to_string())
        .bind(owner)
        .execute(&self.pool)
        .await?
        .rows_affected();
        Ok(done == 1)
    }

    /// Puts a running evaluation back in the queue without counting the
    /// attempt (a graceful shutdown interrupted it, not a crash).
    pub async fn requeue(&self, id: Uuid, owner: &str) -> Result<(), StoreError> {
        sqlx::query(
            "UPDATE evaluations SET status = 'queued', attempts = attempts - 1, lease_owner = NULL, \
             progress_stage = NULL, progress_done = 0, progress_total = 0 \
             WHERE id = ?1 AND status = 'running' AND lease_owner = ?2",
        )
        .bind(id.to_string())
        .bind(owner)
        .execute(&self.pool)
        .await?;
        Ok(())
    }

    /// At start: evaluations a dead process left running go back to the
    /// queue, except those that have used every attempt, which fail saying so.
    /// Returns (requeued, failed).
    pub async fn recover_interrupted(&self) -> Result<(u64, u64), StoreError> {
        let mut tx = self.pool.begin().await?;
        let problem = crate::problem::problem(
            500,
            &format!(
                "the service stopped during this evaluation {MAX_ATTEMPTS} times; it is not retried again"
            ),
            None,
        );
        let failed = sqlx::query(
            "UPDATE evaluations SET status = 'failed', finished_at = ?1, error = ?2, lease_owner = NULL \
             WHERE status = 'running' AND attempts >= ?3",
        )
        .bind(fmt_time(OffsetDateTime::now_utc()))
        .bind(problem.to_string())
        .bind(MAX_ATTEMPTS as i64)
        .execute(&mut *tx)
        .await?
        .rows_affected();
        let requeued = sqlx::query(
            "UPDATE evaluations SET status = 'queued', lease_owner = NULL, progress_stage = NULL, \
             progress_done = 0, progress_total = 0 WHERE status = 'running'",
        )
        .execute(&mut *tx)
        .await?
        .rows_affected();
        tx.commit().await?;
        Ok((requeued, failed))
    }

    /// Cancels a queued or running evaluation.
    pub async fn cancel(&self, id: Uuid) -> Result<CancelOutcome, StoreError> {
        let row = sqlx::query(concat!(
            "UPDATE evaluations SET status = 'canceled', finished_at = ?1, lease_owner = NULL",
            " WHERE id = ?2 AND status IN ('queued', 'running') RETURNING ",
            evaluation_columns!()
        ))
        .bind(fmt_time(OffsetDateTime::now_utc()))
        .bind(id.to_string())
        .fetch_optional(&self.pool)
        .await?;
        if let Some(row) = row {
            return Ok(CancelOutcome::Canceled(evaluation_from_row(&row)?));
        }
        Ok(match self.evaluation(id).await? {
            Some(record) => CancelOutcome::AlreadyFinished(record),
            None => CancelOutcome::NotFound,
        })
    }

    pub async fn report(&self, id: Uuid) -> Result<Option<String>, StoreError> {
        let row = sqlx::query("SELECT body FROM reports WHERE evaluation_id = ?1")
            .bind(id.to_string())
            .fetch_optional(&self.pool)
            .await?;
        Ok(row.map(|r| r.try_get("body")).transpose()?)
    }

    /// Counts evaluations in a status (for readiness and tests).
    pub async fn count_status(&self, status: Status) -> Result<u64, StoreError> {
        let row = sqlx::query("SELECT COUNT(*) AS n FROM evaluations WHERE status = ?1")
            .bind(status.as_str())
            .fetch_one(&self.pool)
            .await?;
        Ok(row.try_get::<i64, _>("n")? as u64)
    }
}
