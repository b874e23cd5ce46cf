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
    CancelOutcome, EvaluationFilter, EvaluationRecord, Lease, MAX_ATTEMPTS, NewEvaluation, Page,
    Progress, Status, Store, StoreError, db_now_ms, page,
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
        on_pool!(self, |pool, postgres| {
            let r = &e.request;
            let mut tx = pool.begin().await?;
            lock_catalog!(tx, postgres);
            sqlx::query(
            "INSERT INTO evaluations (id, project, teacher_id, dataset_id, status, request, tags, \
             created_at, created_by, baseline_id) \
             VALUES ($1, $2, $3, $4, 'queued', $5, $6, $7, $8, $9)",
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
                "INSERT INTO evaluation_students (evaluation_id, position, model_id) VALUES ($1, $2, $3)",
            )
            .bind(e.id)
            .bind(position as i64)
            .bind(student)
            .execute(&mut *tx)
            .await?;
            }
            for (key, value) in &r.tags {
                sqlx::query(
                    "INSERT INTO evaluation_tags (evaluation_id, key, value) VALUES ($1, $2, $3)",
                )
                .bind(e.id)
                .bind(key)
                .bind(value)
                .execute(&mut *tx)
                .await?;
            }
            for label in crate::labels::as_pairs(&r.settings.runs_on) {
                sqlx::query("INSERT INTO evaluation_labels (evaluation_id, label) VALUES ($1, $2)")
                    .bind(e.id)
                    .bind(label)
                    .execute(&mut *tx)
                    .await?;
            }
            // The students are read back from the rows just written.
            let deleted: Option<(Uuid,)> = sqlx::query_as(
                "SELECT id FROM models WHERE deleted_at IS NOT NULL AND (id IN ($1, $2) OR id IN \
             (SELECT model_id FROM evaluation_students WHERE evaluation_id = $3)) \
             UNION ALL SELECT id FROM datasets WHERE deleted_at IS NOT NULL AND id = $4 LIMIT 1",
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
            if postgres {
                // Delivered at commit, to idle workers of every process.
                sqlx::query("SELECT pg_notify($1, '')")
                    .bind(super::workers::QUEUE_CHANNEL)
                    .execute(&mut *tx)
                    .await?;
            }
            tx.commit().await?;
            let record = self.evaluation(e.id).await?.ok_or_else(|| {
                StoreError::Corrupt(format!("evaluation {} vanished after insert", e.id))
            })?;
            Ok(Ok(record))
        })
    }

    pub async fn evaluation(&self, id: Uuid) -> Result<Option<EvaluationRecord>, StoreError> {
        on_pool!(self, |pool| {
            let row = sqlx::query_as(concat!(
                "SELECT ",
                evaluation_columns!(),
                " FROM evaluations WHERE id = $1"
            ))
            .bind(id)
            .fetch_optional(pool)
            .await?;
            record(row)
        })
    }

    /// Evaluations newest first.
    pub async fn list_evaluations(
        &self,
        f: &EvaluationFilter,
        limit: u32,
        cursor: Option<Uuid>,
    ) -> Result<Page<EvaluationRecord>, StoreError> {
        on_pool!(self, |pool| {
            let q = sqlx::query_as(concat!(
                "SELECT ",
                evaluation_columns!(),
                " FROM evaluations e",
                evaluation_filter!()
            ));
            let rows: Vec<EvaluationRow> =
                bind_filter!(q, f, limit, cursor).fetch_all(pool).await?;
            let items = rows
                .into_iter()
                .map(EvaluationRecord::try_from)
                .collect::<Result<Vec<_>, _>>()?;
            Ok(page(items, limit, |e| e.id))
        })
    }

    /// Claims the oldest queued evaluation whose `runs_on` labels the
    /// lease's worker carries, counting an attempt. The claim holds until
    /// the lease's term ends unless `renew` extends it. On PostgreSQL,
    /// claimers skip rows another claim has locked instead of waiting on them.
    pub async fn claim_next(&self, lease: &Lease) -> Result<Option<EvaluationRecord>, StoreError> {
        let carried = crate::labels::as_pairs(&lease.labels);
        // Labels the evaluation needs that are not among the worker's: none.
        let foreign = if carried.is_empty() {
            String::new()
        } else {
            let list: Vec<String> = (0..carried.len()).map(|i| format!("${}", i + 5)).collect();
            format!(" AND l.label NOT IN ({})", list.join(", "))
        };
        on_pool!(self, |pool, postgres| {
            let sql = format!(
                "UPDATE evaluations SET status = 'running', attempts = attempts + 1, claimed_by = $1, \
             worker_id = $2, lease_expires_ms = {} + $3, started_at = COALESCE(started_at, $4), \
             progress_stage = NULL, progress_done = 0, progress_total = 0 \
             WHERE id = (SELECT e.id FROM evaluations e WHERE e.status = 'queued' \
             AND NOT EXISTS (SELECT 1 FROM evaluation_labels l WHERE l.evaluation_id = e.id{foreign}) \
             ORDER BY e.id LIMIT 1{}) AND status = 'queued' RETURNING {}",
                db_now_ms(postgres),
                if postgres {
                    " FOR UPDATE SKIP LOCKED"
                } else {
                    ""
                },
                evaluation_columns!()
            );
            let now = OffsetDateTime::now_utc();
            // Built only from constants and `$N` placeholders: the labels are bound.
            let mut q = sqlx::query_as(sqlx::AssertSqlSafe(sql))
                .bind(lease.holder())
                .bind(lease.worker)
                .bind(lease.term_ms())
                .bind(now);
            for label in &carried {
                q = q.bind(label);
            }
            let row = q.fetch_optional(pool).await?;
            record(row)
        })
    }

    /// Extends a running evaluation's lease; false when `worker` no longer
    /// holds it (it was canceled, or the lease lapsed and went back).
    pub async fn renew(&self, id: Uuid, lease: &Lease) -> Result<bool, StoreError> {
        on_pool!(self, |pool, postgres| {
            let renewed = sqlx::query(sqlx::AssertSqlSafe(format!(
                "UPDATE evaluations SET lease_expires_ms = {} + $1 \
                 WHERE id = $2 AND status = 'running' AND claimed_by = $3",
                db_now_ms(postgres)
            )))
            .bind(lease.term_ms())
            .bind(id)
            .bind(lease.holder())
            .execute(pool)
            .await?
            .rows_affected();
            Ok(renewed == 1)
        })
    }

    pub async fn set_progress(
        &self,
        id: Uuid,
        worker: &str,
        progress: &Progress,
    ) -> Result<(), StoreError> {
        on_pool!(self, |pool| {
            sqlx::query(
            "UPDATE evaluations SET progress_stage = $1, progress_done = $2, progress_total = $3 \
             WHERE id = $4 AND status = 'running' AND claimed_by = $5",
        )
        .bind(progress.stage.as_str())
        .bind(progress.done as i64)
        .bind(progress.total as i64)
        .bind(id)
        .bind(worker)
        .execute(pool)
        .await?;
            Ok(())
        })
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
        on_pool!(self, |pool| {
            let mut tx = pool.begin().await?;
            let updated = sqlx::query(
            "UPDATE evaluations SET status = 'succeeded', finished_at = $1, verdict = $2, \
             recommended_id = $3, claimed_by = NULL, lease_expires_ms = NULL WHERE id = $4 AND status = 'running' \
             AND claimed_by = $5",
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
            // As text on both databases: the body is served as written.
            let body = serde_json::to_string(report)
                .map_err(|e| StoreError::Corrupt(format!("the report does not serialize: {e}")))?;
            sqlx::query("INSERT INTO reports (evaluation_id, body) VALUES ($1, $2)")
                .bind(id)
                .bind(body)
                .execute(&mut *tx)
                .await?;
            sqlx::query("INSERT INTO timings (evaluation_id, rounds) VALUES ($1, $2)")
                .bind(id)
                .bind(Json(rounds))
                .execute(&mut *tx)
                .await?;
            for c in &report.candidates {
                sqlx::query(
                    "INSERT INTO candidates (evaluation_id, model_id, rank, agreement, kl, top1, \
                 top1_delta, p50_ms, p90_ms, speedup, bytes, size_ratio, passed, pareto_optimal) \
                 VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13, $14)",
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
        })
    }

    /// Marks a running evaluation failed with a problem object.
    pub async fn finish_failed(
        &self,
        id: Uuid,
        worker: &str,
        problem: &Problem,
    ) -> Result<bool, StoreError> {
        on_pool!(self, |pool| {
            let done = sqlx::query(
            "UPDATE evaluations SET status = 'failed', finished_at = $1, error = $2, \
             claimed_by = NULL, lease_expires_ms = NULL WHERE id = $3 AND status = 'running' AND claimed_by = $4",
        )
        .bind(OffsetDateTime::now_utc())
        .bind(Json(problem))
        .bind(id)
        .bind(worker)
        .execute(pool)
        .await?
        .rows_affected();
            Ok(done == 1)
        })
    }

    /// Puts a running evaluation back in the queue: its attempt given back
    /// when a graceful shutdown interrupted it (not a crash), counted when
    /// the attempt itself went wrong.
    pub async fn requeue(
        &self,
        id: Uuid,
        worker: &str,
        give_attempt_back: bool,
    ) -> Result<(), StoreError> {
        on_pool!(self, |pool| {
            sqlx::query(
                "UPDATE evaluations SET status = 'queued', attempts = attempts - $3, \
                 claimed_by = NULL, lease_expires_ms = NULL, progress_stage = NULL, \
                 progress_done = 0, progress_total = 0 \
                 WHERE id = $1 AND status = 'running' AND claimed_by = $2",
            )
            .bind(id)
            .bind(worker)
            .bind(i64::from(give_attempt_back))
            .execute(pool)
            .await?;
            Ok(())
        })
    }

    /// Evaluations whose lease lapsed (their worker died or lost the
    /// database) go back to the queue, their attempt counted, except those
    /// that have used every attempt, which fail saying so. A running row
    /// with no lease comes from before leases and counts as lapsed.
    /// Returns (requeued, failed).
    pub async fn reclaim_lapsed(&self, now: OffsetDateTime) -> Result<(u64, u64), StoreError> {
        let problem = Problem::new(
            500,
            format!(
                "the evaluation was interrupted {MAX_ATTEMPTS} times (its worker stopped \
                 or lost its lease); it is not retried again"
            ),
            None,
        );
        on_pool!(self, |pool, postgres| {
            let mut tx = pool.begin().await?;
            let failed = sqlx::query(sqlx::AssertSqlSafe(format!(
                "UPDATE evaluations SET status = 'failed', finished_at = $1, error = $2, \
                 claimed_by = NULL, lease_expires_ms = NULL WHERE status = 'running' \
                 AND (lease_expires_ms IS NULL OR lease_expires_ms < {}) AND attempts >= $3",
                db_now_ms(postgres)
            )))
            .bind(now)
            .bind(Json(&problem))
            .bind(MAX_ATTEMPTS as i64)
            .execute(&mut *tx)
            .await?
            .rows_affected();
            let requeued = sqlx::query(sqlx::AssertSqlSafe(format!(
                "UPDATE evaluations SET status = 'queued', claimed_by = NULL, \
                 lease_expires_ms = NULL, progress_stage = NULL, progress_done = 0, \
                 progress_total = 0 WHERE status = 'running' \
                 AND (lease_expires_ms IS NULL OR lease_expires_ms < {})",
                db_now_ms(postgres)
            )))
            .execute(&mut *tx)
            .await?
            .rows_affected();
            tx.commit().await?;
            Ok((requeued, failed))
        })
    }

    /// Cancels a queued or running evaluation, recording by whom.
    pub async fn cancel(&self, id: Uuid, by: Option<&str>) -> Result<CancelOutcome, StoreError> {
        on_pool!(self, |pool| {
            let row = sqlx::query_as(concat!(
                "UPDATE evaluations SET status = 'canceled', finished_at = $1, claimed_by = NULL,",
                " lease_expires_ms = NULL,",
                " canceled_by = $3 WHERE id = $2 AND status IN ('queued', 'running') RETURNING ",
                evaluation_columns!()
            ))
            .bind(OffsetDateTime::now_utc())
            .bind(id)
            .bind(by)
            .fetch_optional(pool)
            .await?;
            if let Some(record) = record(row)? {
                return Ok(CancelOutcome::Canceled(record));
            }
            Ok(match self.evaluation(id).await? {
                Some(record) => CancelOutcome::AlreadyFinished(record),
                None => CancelOutcome::NotFound,
            })
        })
    }

    /// The stored report, as the JSON text the engine produced.
    pub async fn report(&self, id: Uuid) -> Result<Option<String>, StoreError> {
        on_pool!(self, |pool| {
            let body: Option<(String,)> =
                sqlx::query_as("SELECT CAST(body AS TEXT) FROM reports WHERE evaluation_id = $1")
                    .bind(id)
                    .fetch_optional(pool)
                    .await?;
            Ok(body.map(|(b,)| b))
        })
    }

    /// The timed rounds of a succeeded evaluation.
    pub async fn rounds(&self, id: Uuid) -> Result<Option<Vec<Vec<f64>>>, StoreError> {
        on_pool!(self, |pool| {
            let rounds: Option<(Json<Vec<Vec<f64>>>,)> =
                sqlx::query_as("SELECT rounds FROM timings WHERE evaluation_id = $1")
                    .bind(id)
                    .fetch_optional(pool)
                    .await?;
            Ok(rounds.map(|(r,)| r.0))
        })
    }

    /// Evaluations in each status, every status listed (for `/metrics`).
    pub async fn status_counts(&self) -> Result<Vec<(Status, u64)>, StoreError> {
        on_pool!(self, |pool| {
            let rows: Vec<(Status, i64)> =
                sqlx::query_as("SELECT status, COUNT(*) FROM evaluations GROUP BY status")
                    .fetch_all(pool)
                    .await?;
            Ok(Status::ALL
                .into_iter()
                .map(|st| {
                    let n = rows.iter().find(|(s, _)| *s == st).map_or(0, |(_, n)| *n);
                    (st, n as u64)
                })
                .collect())
        })
    }

    /// Counts evaluations in a status (for readiness and tests).
    pub async fn count_status(&self, status: Status) -> Result<u64, StoreError> {
        on_pool!(self, |pool| {
            let (n,): (i64,) = sqlx::query_as("SELECT COUNT(*) FROM evaluations WHERE status = $1")
                .bind(status)
                .fetch_one(pool)
                .await?;
            Ok(n as u64)
        })
    }
}

impl Store {
    /// Deletes finished evaluations created before `cutoff` (with their
    /// reports, timings and rows), except those a baseline history names.
    pub async fn delete_finished_before(&self, cutoff: OffsetDateTime) -> Result<u64, StoreError> {
        on_pool!(self, |pool| {
            // Ids are UUID v7: those made before `cutoff` sort below this one.
            let bound = Uuid::new_v7(uuid::Timestamp::from_unix(
                uuid::NoContext,
                cutoff.unix_timestamp().max(0) as u64,
                cutoff.nanosecond(),
            ));
            Ok(sqlx::query(
                "DELETE FROM evaluations WHERE id < $1 \
             AND status IN ('succeeded', 'failed', 'canceled') \
             AND id NOT IN (SELECT evaluation_id FROM baselines WHERE evaluation_id IS NOT NULL)",
            )
            .bind(bound)
            .execute(pool)
            .await?
            .rows_affected())
        })
    }
}
