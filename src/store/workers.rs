//! Workers as the queue knows them: each process that runs evaluations
//! reports itself here and renews its heartbeat; a claim is a lease that
//! its holder renews, and one that lapses goes back to the queue
//! (`Store::reclaim_lapsed`). Times compared in SQL are Unix milliseconds:
//! both databases compare integers exactly.

use std::time::Duration;

use serde::Serialize;
use sqlx::types::Json;
use time::OffsetDateTime;
use uuid::Uuid;

use super::{Store, StoreError};
use crate::labels::Labels;

/// What a worker claims with: who it is, the labels it carries, and how
/// long a claim holds unless renewed.
#[derive(Debug, Clone)]
pub struct Lease {
    pub worker: Uuid,
    pub labels: Labels,
    pub term: Duration,
}

impl Lease {
    /// How `claimed_by` names the holder.
    pub fn holder(&self) -> String {
        self.worker.to_string()
    }

    /// The lease's end if taken or renewed at `now`.
    pub fn until_ms(&self, now: OffsetDateTime) -> i64 {
        unix_ms(now) + self.term.as_millis() as i64
    }
}

pub(super) fn unix_ms(t: OffsetDateTime) -> i64 {
    (t.unix_timestamp_nanos() / 1_000_000) as i64
}

fn from_unix_ms(ms: i64) -> OffsetDateTime {
    OffsetDateTime::from_unix_timestamp_nanos(ms as i128 * 1_000_000)
        .unwrap_or(OffsetDateTime::UNIX_EPOCH)
}

/// A worker as `GET /v1/workers` lists it.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct WorkerRecord {
    pub id: Uuid,
    pub hostname: String,
    pub cpu: String,
    pub labels: Labels,
    #[serde(with = "time::serde::rfc3339")]
    pub started_at: OffsetDateTime,
    #[serde(with = "time::serde::rfc3339")]
    pub heartbeat_at: OffsetDateTime,
    /// The evaluation it runs now.
    pub evaluation: Option<Uuid>,
    /// Its process id on `hostname`.
    #[serde(skip)]
    pub pid: u32,
}

#[derive(sqlx::FromRow)]
struct WorkerRow {
    id: Uuid,
    hostname: String,
    cpu: String,
    labels: Json<Labels>,
    started_at: OffsetDateTime,
    heartbeat_ms: i64,
    evaluation_id: Option<Uuid>,
    pid: i64,
}

impl From<WorkerRow> for WorkerRecord {
    fn from(r: WorkerRow) -> Self {
        WorkerRecord {
            id: r.id,
            hostname: r.hostname,
            cpu: r.cpu,
            labels: r.labels.0,
            started_at: r.started_at,
            heartbeat_at: from_unix_ms(r.heartbeat_ms),
            evaluation: r.evaluation_id,
            pid: r.pid as u32,
        }
    }
}

impl Store {
    /// Records a worker that starts, its heartbeat set to its start.
    pub async fn register_worker(&self, w: &WorkerRecord) -> Result<(), StoreError> {
        on_pool!(self, |pool| {
            sqlx::query(
                "INSERT INTO workers (id, hostname, cpu, labels, started_at, heartbeat_ms, \
                 evaluation_id, pid) VALUES ($1, $2, $3, $4, $5, $6, NULL, $7)",
            )
            .bind(w.id)
            .bind(&w.hostname)
            .bind(&w.cpu)
            .bind(Json(&w.labels))
            .bind(w.started_at)
            .bind(unix_ms(w.heartbeat_at))
            .bind(i64::from(w.pid))
            .execute(pool)
            .await?;
            Ok(())
        })
    }

    /// A worker's heartbeat: alive at `at`, running `evaluation`.
    pub async fn worker_heartbeat(
        &self,
        id: Uuid,
        at: OffsetDateTime,
        evaluation: Option<Uuid>,
    ) -> Result<(), StoreError> {
        on_pool!(self, |pool| {
            sqlx::query("UPDATE workers SET heartbeat_ms = $1, evaluation_id = $2 WHERE id = $3")
                .bind(unix_ms(at))
                .bind(evaluation)
                .bind(id)
                .execute(pool)
                .await?;
            Ok(())
        })
    }

    /// A worker that stops cleanly leaves the list at once.
    pub async fn remove_worker(&self, id: Uuid) -> Result<(), StoreError> {
        on_pool!(self, |pool| {
            sqlx::query("DELETE FROM workers WHERE id = $1")
                .bind(id)
                .execute(pool)
                .await?;
            Ok(())
        })
    }

    /// Workers whose last heartbeat is at or after `since`, oldest first.
    pub async fn workers_seen_since(
        &self,
        since: OffsetDateTime,
    ) -> Result<Vec<WorkerRecord>, StoreError> {
        on_pool!(self, |pool| {
            let rows: Vec<WorkerRow> = sqlx::query_as(
                "SELECT id, hostname, cpu, labels, started_at, heartbeat_ms, evaluation_id, pid \
                 FROM workers WHERE heartbeat_ms >= $1 ORDER BY id",
            )
            .bind(unix_ms(since))
            .fetch_all(pool)
            .await?;
            Ok(rows.into_iter().map(WorkerRecord::from).collect())
        })
    }

    /// Forgets workers not heard from since `before` (killed ones leave no
    /// goodbye); returns how many.
    pub async fn forget_workers_before(&self, before: OffsetDateTime) -> Result<u64, StoreError> {
        on_pool!(self, |pool| {
            Ok(sqlx::query("DELETE FROM workers WHERE heartbeat_ms < $1")
                .bind(unix_ms(before))
                .execute(pool)
                .await?
                .rows_affected())
        })
    }

    /// Ends at once the leases of workers on `hostname` whose process is
    /// gone (`gone(pid)`): a dead process renews nothing, so its claims
    /// need not wait out their term. Their rows are forgotten. Returns how
    /// many workers were found gone.
    pub async fn end_leases_of_gone_workers(
        &self,
        hostname: &str,
        gone: impl Fn(u32) -> bool,
    ) -> Result<u64, StoreError> {
        on_pool!(self, |pool| {
            let rows: Vec<(Uuid, i64)> =
                sqlx::query_as("SELECT id, pid FROM workers WHERE hostname = $1")
                    .bind(hostname)
                    .fetch_all(pool)
                    .await?;
            let mut ended = 0;
            for (id, pid) in rows {
                if !gone(pid as u32) {
                    continue;
                }
                let mut tx = pool.begin().await?;
                sqlx::query(
                    "UPDATE evaluations SET lease_expires_ms = 0 \
                     WHERE status = 'running' AND claimed_by = $1",
                )
                .bind(id.to_string())
                .execute(&mut *tx)
                .await?;
                sqlx::query("DELETE FROM workers WHERE id = $1")
                    .bind(id)
                    .execute(&mut *tx)
                    .await?;
                tx.commit().await?;
                ended += 1;
            }
            Ok(ended)
        })
    }
}
