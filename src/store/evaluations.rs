//! Evaluations and their queue. A worker claims a job in one short
//! statement (`UPDATE … RETURNING`) that counts the attempt; it never holds a
//! transaction while the job runs. A job's results are written in one
//! transaction that succeeds only while the job is still running under that
//! worker, so a cancel that raced the finish wins.

use sqlx::types::Json;
use time::OffsetDateTime;
use uuid::Uuid;

use super::rows::EvaluationRow;
use super::{
    CancelOutcome, EvaluationFilter, EvaluationRecord, MAX_ATTEMPTS, NewEvaluation, Page, Progress,
    Status, Store, StoreError, bind_filter, page,
};
use crate::problem::Problem;
use crate::report::Report;

fn record(row: Option<EvaluationRow>) -> Result<Option<EvaluationRecord>, StoreError> {
    row.map(EvaluationRecord::try_from).transpose()
}

impl Store {
    /// Stores a new queued evaluation with its students and tags in one
    /// transaction, so a worker never sees half of it; `Err(id)` inside when one of the models or
    /// the set it names was deleted meanwhile, in which case nothing is
    /// stored. The check runs inside the insert's write transaction, and a
    /// delete checks for users inside its own, so one of the two always
    /// sees the other.
    pub async fn create_evaluation(
        &self,
        e: &NewEvaluation,
    ) -> Result<Result<EvaluationRecord, Uuid>, StoreError> {
        let r = &e.request;
        let mut tx = self.pool.begin().await?;
        sqlx::query(
            "INSERT INTO evaluations (id, project, teacher_id, dataset_id, status, request, tags, \
             created_at, created_by, baseline_id) \
             VALUES (?1, ?2, ?3, ?4, 'queued', ?5, ?6, ?7, ?8, ?9)",
        )
        .bind(e.id)
        .bind(&r.project)
        .bind(r.teacher)
        .bind(r.dataset)
        .bind(Json(r))
        .bind(Json(&r.tags))
        .bind(e.created_at)
        .bind(&e.created_by)
        .bind(r.baseline)
        .execute(&mut *tx)
        .await?;
        for (position, student) in r.students.iter().enumerate() {
            sqlx::query(
                "INSERT INTO evaluation_students (evaluation_id, position, model_id) VALUES (?1, ?2, ?3)",
            )
            .bind(e.id)
            .bind(position as i64)
            .bind(student)
            .execute(&mut *tx)
            .await?;
        }
        for (key, value) in &r.tags {
            sqlx::query(
                "INSERT INTO evaluation_tags (evaluation_id, key, value) VALUES (?1, ?2, ?3)",
            )
            .bind(e.id)
            .bind(key)
            .bind(value)
            .execute(&mut *tx)
            .await?;
        }
        // The students are read back from the rows just written.
        let deleted: Option<(Uuid,)> = sqlx::query_as(
            "SELECT id FROM models WHERE deleted_at IS NOT NULL AND (id IN (?1, ?2) OR id IN \
             (SELECT model_id FROM evaluation_students WHERE evaluation_id = ?3)) \
             UNION ALL SELECT id FROM datasets WHERE deleted_at IS NOT NULL AND id = ?4 LIMIT 1",
        )
        .bind(r.teacher)
        .bind(r.baseline)
        .bind(e.id)
        .bind(r.dataset)
        .fetch_optional(&mut *tx)
        .await?;
        if let Some((gone,)) = deleted {
            return Ok(Err(gone));
        }
        tx.commit().await?;
        let record = self.evaluation(e.id).await?.ok_or_else(|| {
            StoreError::Corrupt(format!("evaluation {} vanished after insert", e.id))
        })?;
        Ok(Ok(record))
    }

    pub async fn evaluation(&self, id: Uuid) -> Result<Option<EvaluationRecord>, StoreError> {
        let row = sqlx::query_as(concat!(
            "SELECT ",
            evaluation_columns!(),
            " FROM evaluations WHERE id = ?1"
        ))
        .bind(id)
        .fetch_optional(&self.pool)
        .await?;
        record(row)
    }

    /// Evaluations newest first.
    pub async fn list_evaluations(
        &self,
        f: &EvaluationFilter,
        limit: u32,
        cursor: Option<Uuid>,
    ) -> Result<Page<EvaluationRecord>, StoreError> {
        let q = sqlx::query_as(concat!(
            "SELECT ",
            evaluation_columns!(),
            " FROM evaluations e",
            evaluation_filter!()
        ));
        let rows: Vec<EvaluationRow> = bind_filter(q, f, limit, cursor)
            .fetch_all(&self.pool)
            .await?;
        let items = rows
            .into_iter()
            .map(EvaluationRecord::try_from)
            .collect::<Result<Vec<_>, _>>()?;
        Ok(page(items, limit, |e| e.id))
    }

    /// Claims the oldest queued evaluation for `worker`, counting an attempt.
    pub async fn claim_next(&self, worker: &str) -> Result<Option<EvaluationRecord>, StoreError> {
        let row = sqlx::query_as(concat!(
            "UPDATE evaluations SET status = 'running', attempts = attempts + 1, claimed_by = ?1,",
            " started_at = COALESCE(started_at, ?2), progress_stage = NULL, progress_done = 0,",
            " progress_total = 0",
            " WHERE id = (SELECT id FROM evaluations WHERE status = 'queued' ORDER BY id LIMIT 1)",
            " AND status = 'queued' RETURNING ",
            evaluation_columns!()
        ))
        .bind(worker)
        .bind(OffsetDateTime::now_utc())
        .fetch_optional(&self.pool)
        .await?;
        record(row)
    }

    pub async fn set_progress(
        &self,
        id: Uuid,
        worker: &str,
        progress: &Progress,
    ) -> Result<(), StoreError> {
        sqlx::query(
            "UPDATE evaluations SET progress_stage = ?1, progress_done = ?2, progress_total = ?3 \
             WHERE id = ?4 AND status = 'running' AND claimed_by = ?5",
        )
        .bind(progress.stage.as_str())
        .bind(progress.done as i64)
        .bind(progress.total as i64)
        .bind(id)
        .bind(worker)
        .execute(&self.pool)
        .await?;
        Ok(())
    }

    /// Writes the report, its timed rounds, its candidate rows and the final
    /// status at once. Returns false (and writes nothing) when the
    /// evaluation is no longer running under `worker`, e.g. because it was
    /// canceled meanwhile.
    pub async fn finish_succeeded(
        &self,
        id: Uuid,
        worker: &str,
        report: &Report,
        rounds: &[Vec<f64>],
    ) -> Result<bool, StoreError> {
        let mut tx = self.pool.begin().await?;
        let updated = sqlx::query(
            "UPDATE evaluations SET status = 'succeeded', finished_at = ?1, verdict = ?2, \
             recommended_id = ?3, claimed_by = NULL WHERE id = ?4 AND status = 'running' \
             AND claimed_by = ?5",
        )
        .bind(report.finished_at)
        .bind(report.verdict.as_str())
        .bind(report.recommended)
        .bind(id)
        .bind(worker)
        .execute(&mut *tx)
        .await?
        .rows_affected();
        if updated != 1 {
            tx.rollback().await?;
            return Ok(false);
        }
        sqlx::query("INSERT INTO reports (evaluation_id, body) VALUES (?1, ?2)")
            .bind(id)
            .bind(Json(report))
            .execute(&mut *tx)
            .await?;
        sqlx::query("INSERT INTO timings (evaluation_id, rounds) VALUES (?1, ?2)")
            .bind(id)
            .bind(Json(rounds))
            .execute(&mut *tx)
            .await?;
        for c in &report.candidates {
            sqlx::query(
                "INSERT INTO candidates (evaluation_id, model_id, rank, agreement, kl, top1, \
                 top1_delta, p50_ms, p90_ms, speedup, bytes, size_ratio, passed, pareto_optimal) \
                 VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13, ?14)",
            )
            .bind(id)
            .bind(c.model.id)
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
            .bind(c.gates.passed)
            .bind(c.pareto_optimal)
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
        worker: &str,
        problem: &Problem,
    ) -> Result<bool, StoreError> {
        let done = sqlx::query(
            "UPDATE evaluations SET status = 'failed', finished_at = ?1, error = ?2, \
             claimed_by = NULL WHERE id = ?3 AND status = 'running' AND claimed_by = ?4",
        )
        .bind(OffsetDateTime::now_utc())
        .bind(Json(problem))
        .bind(id)
        .bind(worker)
        .execute(&self.pool)
        .await?
        .rows_affected();
        Ok(done == 1)
    }

    /// Puts a running evaluation back in the queue without counting the
    /// attempt (a graceful shutdown interrupted it, not a crash).
    pub async fn requeue(&self, id: Uuid, worker: &str) -> Result<(), StoreError> {
        sqlx::query(
            "UPDATE evaluations SET status = 'queued', attempts = attempts - 1, claimed_by = NULL, \
             progress_stage = NULL, progress_done = 0, progress_total = 0 \
             WHERE id = ?1 AND status = 'running' AND claimed_by = ?2",
        )
        .bind(id)
        .bind(worker)
        .execute(&self.pool)
        .await?;
        Ok(())
    }

    /// At start: evaluations a dead process left running go back to the
    /// queue, except those that have used every attempt, which fail saying so.
    /// Returns (requeued, failed).
    pub async fn recover_interrupted(&self) -> Result<(u64, u64), StoreError> {
        let mut tx = self.pool.begin().await?;
        let problem = Problem::new(
            500,
            format!(
                "the service stopped during this evaluation {MAX_ATTEMPTS} times; it is not retried again"
            ),
            None,
        );
        let failed = sqlx::query(
            "UPDATE evaluations SET status = 'failed', finished_at = ?1, error = ?2, claimed_by = NULL \
             WHERE status = 'running' AND attempts >= ?3",
        )
        .bind(OffsetDateTime::now_utc())
        .bind(Json(&problem))
        .bind(MAX_ATTEMPTS as i64)
        .execute(&mut *tx)
        .await?
        .rows_affected();
        let requeued = sqlx::query(
            "UPDATE evaluations SET status = 'queued', claimed_by = NULL, progress_stage = NULL, \
             progress_done = 0, progress_total = 0 WHERE status = 'running'",
        )
        .execute(&mut *tx)
        .await?
        .rows_affected();
        tx.commit().await?;
        Ok((requeued, failed))
    }

    /// Cancels a queued or running evaluation, recording by whom.
    pub async fn cancel(&self, id: Uuid, by: Option<&str>) -> Result<CancelOutcome, StoreError> {
        let row = sqlx::query_as(concat!(
            "UPDATE evaluations SET status = 'canceled', finished_at = ?1, claimed_by = NULL,",
            " canceled_by = ?3 WHERE id = ?2 AND status IN ('queued', 'running') RETURNING ",
            evaluation_columns!()
        ))
        .bind(OffsetDateTime::now_utc())
        .bind(id)
        .bind(by)
        .fetch_optional(&self.pool)
        .await?;
        if let Some(record) = record(row)? {
            return Ok(CancelOutcome::Canceled(record));
        }
        Ok(match self.evaluation(id).await? {
            Some(record) => CancelOutcome::AlreadyFinished(record),
            None => CancelOutcome::NotFound,
        })
    }

    /// The stored report, as the JSON text the engine produced.
    pub async fn report(&self, id: Uuid) -> Result<Option<String>, StoreError> {
        let body: Option<(String,)> =
            sqlx::query_as("SELECT body FROM reports WHERE evaluation_id = ?1")
                .bind(id)
                .fetch_optional(&self.pool)
                .await?;
        Ok(body.map(|(b,)| b))
    }

    /// The timed rounds of a succeeded evaluation.
    pub async fn rounds(&self, id: Uuid) -> Result<Option<Vec<Vec<f64>>>, StoreError> {
        let rounds: Option<(Json<Vec<Vec<f64>>>,)> =
            sqlx::query_as("SELECT rounds FROM timings WHERE evaluation_id = ?1")
                .bind(id)
                .fetch_optional(&self.pool)
                .await?;
        Ok(rounds.map(|(r,)| r.0))
    }

    /// Evaluations in each status, every status listed (for `/metrics`).
    pub async fn status_counts(&self) -> Result<Vec<(Status, u64)>, StoreError> {
        let rows: Vec<(Status, i64)> =
            sqlx::query_as("SELECT status, COUNT(*) FROM evaluations GROUP BY status")
                .fetch_all(&self.pool)
                .await?;
        Ok(Status::ALL
            .into_iter()
            .map(|st| {
                let n = rows.iter().find(|(s, _)| *s == st).map_or(0, |(_, n)| *n);
                (st, n as u64)
            })
            .collect())
    }

    /// Counts evaluations in a status (for readiness and tests).
    pub async fn count_status(&self, status: Status) -> Result<u64, StoreError> {
        let (n,): (i64,) = sqlx::query_as("SELECT COUNT(*) FROM evaluations WHERE status = ?1")
            .bind(status)
            .fetch_one(&self.pool)
            .await?;
        Ok(n as u64)
    }
}

impl Store {
    /// Deletes finished evaluations created before `cutoff` (with their
    /// reports, timings and rows), except those a baseline history names.
    pub async fn delete_finished_before(&self, cutoff: OffsetDateTime) -> Result<u64, StoreError> {
        // Ids are UUID v7: those made before `cutoff` sort below this one.
        let bound = Uuid::new_v7(uuid::Timestamp::from_unix(
            uuid::NoContext,
            cutoff.unix_timestamp().max(0) as u64,
            cutoff.nanosecond(),
        ));
        Ok(sqlx::query(
            "DELETE FROM evaluations WHERE id < ?1 \
             AND status IN ('succeeded', 'failed', 'canceled') \
             AND id NOT IN (SELECT evaluation_id FROM baselines WHERE evaluation_id IS NOT NULL)",
        )
        .bind(bound)
        .execute(&self.pool)
        .await?
        .rows_affected())
    }
}
