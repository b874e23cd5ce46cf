//! Workers as the queue knows them: each process that runs evaluations
//! reports itself here and renews its heartbeat; a claim is a lease that
//! its holder renews, and one that lapses goes back to the queue
//! (`Store::reclaim_lapsed`). Lease ends and heartbeats are Unix
//! milliseconds on the database's clock (`db_now_ms`): integers compare
//! exactly on both databases, and one clock serves every machine.

use std::time::Duration;

use serde::Serialize;
use sqlx::types::Json;
use time::OffsetDateTime;
use uuid::Uuid;

use super::{Store, StoreError, db_now_ms};
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

    pub(super) fn term_ms(&self) -> i64 {
        self.term.as_millis() as i64
    }
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
    /// Its last heartbeat, on the database's clock.
    #[serde(with = "time::serde::rfc3339")]
    pub heartbeat_at: OffsetDateTime,
    /// The evaluation it runs now.
    pub evaluation: Option<Uuid>,
}

/// Who a worker is on its machine: the process id, and the machine and
/// process namespace it is valid in (boot id and pid namespace: two
/// containers may share a hostname, never both of these).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Process {
    pub host_key: String,
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
        }
    }
}

impl Store {
    /// Records a worker that starts, its heartbeat now.
    pub async fn register_worker(
        &self,
        w: &WorkerRecord,
        process: &Process,
    ) -> Result<(), StoreError> {
        on_pool!(self, |pool, postgres| {
            sqlx::query(sqlx::AssertSqlSafe(format!(
                "INSERT INTO workers (id, hostname, cpu, labels, started_at, heartbeat_ms, \
                 evaluation_id, pid, host_key) VALUES ($1, $2, $3, $4, $5, {}, NULL, $6, $7)",
                db_now_ms(postgres)
            )))
            .bind(w.id)
            .bind(&w.hostname)
            .bind(&w.cpu)
            .bind(Json(&w.labels))
            .bind(w.started_at)
            .bind(i64::from(process.pid))
            .bind(&process.host_key)
            .execute(pool)
            .await?;
            Ok(())
        })
    }

    /// A worker's heartbeat: alive now, running `evaluation`.
    pub async fn worker_heartbeat(
        &self,
        id: Uuid,
        evaluation: Option<Uuid>,
    ) -> Result<(), StoreError> {
        on_pool!(self, |pool, postgres| {
            sqlx::query(sqlx::AssertSqlSafe(format!(
                "UPDATE workers SET heartbeat_ms = {}, evaluation_id = $1 WHERE id = $2",
                db_now_ms(postgres)
            )))
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

    /// Workers heard from within `window`, oldest first.
    pub async fn workers_seen_within(
        &self,
        window: Duration,
    ) -> Result<Vec<WorkerRecord>, StoreError> {
        on_pool!(self, |pool, postgres| {
            let rows: Vec<WorkerRow> = sqlx::query_as(sqlx::AssertSqlSafe(format!(
                "SELECT id, hostname, cpu, labels, started_at, heartbeat_ms, evaluation_id \
                 FROM workers WHERE heartbeat_ms >= {} - $1 ORDER BY id",
                db_now_ms(postgres)
            )))
            .bind(window.as_millis() as i64)
            .fetch_all(pool)
            .await?;
            Ok(rows.into_iter().map(WorkerRecord::from).collect())
        })
    }

    /// Forgets workers not heard from within `window` (killed ones leave
    /// no goodbye); returns how many.
    pub async fn forget_workers_silent_for(&self, window: Duration) -> Result<u64, StoreError> {
        on_pool!(self, |pool, postgres| {
            Ok(sqlx::query(sqlx::AssertSqlSafe(format!(
                "DELETE FROM workers WHERE heartbeat_ms < {} - $1",
                db_now_ms(postgres)
            )))
            .bind(window.as_millis() as i64)
            .execute(pool)
            .await?
            .rows_affected())
        })
    }

    /// Ends at once the leases of workers of this machine and process
    /// namespace whose process is gone (`gone(pid)`): a dead process renews
    /// nothing, so its claims need not wait out their term. Their rows are
    /// forgotten. Returns how many workers were found gone.
    pub async fn end_leases_of_gone_workers(
        &self,
        host_key: &str,
        gone: impl Fn(u32) -> bool,
    ) -> Result<u64, StoreError> {
        on_pool!(self, |pool| {
            let rows: Vec<(Uuid, i64)> =
                sqlx::query_as("SELECT id, pid FROM workers WHERE host_key = $1")
                    .bind(host_key)
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

    /// Signals that another process queued work, on PostgreSQL (`None` on
    /// SQLite, where only this process queues: its own wake suffices).
    /// Idle workers elsewhere then claim at once instead of at their next poll.
    pub async fn work_signals(&self) -> Result<Option<WorkSignals>, StoreError> {
        match &self.pool {
            super::Pool::Postgres(pool) => {
                let mut listener = sqlx::postgres::PgListener::connect_with(pool).await?;
                listener.listen(QUEUE_CHANNEL).await?;
                Ok(Some(WorkSignals(listener)))
            }
            super::Pool::Sqlite(_) => Ok(None),
        }
    }
}

/// The PostgreSQL channel a newly queued evaluation is announced on.
pub(super) const QUEUE_CHANNEL: &str = "proctor_queue";

/// A PostgreSQL listener on `QUEUE_CHANNEL`.
pub struct WorkSignals(sqlx::postgres::PgListener);

impl WorkSignals {
    /// Waits for the next announcement (reconnecting if the connection drops).
    pub async fn next(&mut self) -> Result<(), StoreError> {
        self.0.recv().await?;
        Ok(())
    }
}
