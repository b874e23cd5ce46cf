//! All SQL and all stored files. The same store runs on SQLite (the
//! default: one file in the data dir) or PostgreSQL (many processes on one
//! queue). Each has its schema under `migrations/`, applied at start. Rows
//! decode into typed structs (`rows`). SQL is written once for both: `$N`
//! parameters, which SQLite reads too, and no function only one of them
//! has; the few statements that must differ ask `on_pool!` which it is.

/// Runs `body` with `pool` bound to the store's pool, written once and
/// compiled for each database. `|pool, postgres|` also binds whether it is
/// PostgreSQL, for the few statements that differ.
macro_rules! on_pool {
    ($store:expr, |$pool:ident| $body:expr) => {
        on_pool!($store, |$pool, _postgres| $body)
    };
    ($store:expr, |$pool:ident, $postgres:ident| $body:expr) => {
        match &$store.pool {
            $crate::store::Pool::Sqlite($pool) => {
                #[allow(unused_variables)]
                let $postgres = false;
                $body
            }
            $crate::store::Pool::Postgres($pool) => {
                #[allow(unused_variables)]
                let $postgres = true;
                $body
            }
        }
    };
}

/// Takes, on PostgreSQL, the lock that creating an evaluation, setting a
/// baseline and deleting a model or set hold while each checks for the
/// other. SQLite needs none:
/// it runs one writing transaction at a time, and PostgreSQL's default
/// isolation would let the two pass each other unseen.
macro_rules! lock_catalog {
    ($tx:expr, $postgres:expr) => {
        if $postgres {
            sqlx::query("SELECT pg_advisory_xact_lock(4051)")
                .execute(&mut *$tx)
                .await?;
        }
    };
}

/// The filters of evaluation lists as SQL, on alias `e`; parameters $1 to
/// $8 are bound by `bind_filter!`.
macro_rules! evaluation_filter {
    () => {
        concat!(
            " WHERE ($1 IS NULL OR e.project = $1)",
            " AND ($2 IS NULL OR e.teacher_id = $2) AND ($3 IS NULL OR e.status = $3)",
            " AND ($4 IS NULL OR e.verdict = $4)",
            " AND ($5 IS NULL OR EXISTS (SELECT 1 FROM evaluation_tags g",
            "      WHERE g.evaluation_id = e.id AND g.key = $5 AND g.value = $6))",
            " AND ($7 IS NULL OR e.id < $7) ORDER BY e.id DESC LIMIT $8"
        )
    };
}

/// Binds `evaluation_filter!`'s parameters to query `q`, fetching one row
/// past `limit`.
macro_rules! bind_filter {
    ($q:expr, $f:expr, $limit:expr, $cursor:expr) => {{
        let f: &$crate::store::EvaluationFilter = $f;
        let (tag_key, tag_value) = f.tag.clone().unzip();
        $q.bind(f.project.clone())
            .bind(f.teacher)
            .bind(f.status)
            .bind(f.verdict.map($crate::report::Verdict::as_str))
            .bind(tag_key)
            .bind(tag_value)
            .bind($cursor)
            .bind($limit as i64 + 1)
    }};
}

/// Stores an enum as its lowercase name in a TEXT column, on either database.
macro_rules! text_enum {
    ($t:ty) => {
        impl<DB: sqlx::Database> sqlx::Type<DB> for $t
        where
            str: sqlx::Type<DB>,
        {
            fn type_info() -> DB::TypeInfo {
                <str as sqlx::Type<DB>>::type_info()
            }
            fn compatible(ty: &DB::TypeInfo) -> bool {
                <str as sqlx::Type<DB>>::compatible(ty)
            }
        }
        impl<'q, DB: sqlx::Database> sqlx::Encode<'q, DB> for $t
        where
            String: sqlx::Encode<'q, DB>,
        {
            fn encode_by_ref(
                &self,
                buf: &mut <DB as sqlx::Database>::ArgumentBuffer,
            ) -> Result<sqlx::encode::IsNull, sqlx::error::BoxDynError> {
                <String as sqlx::Encode<'q, DB>>::encode(self.as_str().to_string(), buf)
            }
        }
        impl<'r, DB: sqlx::Database> sqlx::Decode<'r, DB> for $t
        where
            &'r str: sqlx::Decode<'r, DB>,
        {
            fn decode(
                value: <DB as sqlx::Database>::ValueRef<'r>,
            ) -> Result<Self, sqlx::error::BoxDynError> {
                let s = <&'r str as sqlx::Decode<'r, DB>>::decode(value)?;
                <$t>::parse(s).ok_or_else(|| format!("unknown {}: {s}", stringify!($t)).into())
            }
        }
    };
}

/// The columns of each row type (`rows`), for SELECT and RETURNING.
macro_rules! model_columns {
    () => {
        "id, name, sha256, bytes, info, created_at"
    };
}

macro_rules! dataset_columns {
    () => {
        "id, name, sha256, bytes, samples, has_labels, arrays, largest_label, class_names, \
         slice_count, created_at"
    };
}

macro_rules! evaluation_columns {
    () => {
        "id, project, teacher_id, dataset_id, status, request, tags, progress_stage, \
         progress_done, progress_total, error, attempts, created_at, started_at, finished_at, \
         verdict, recommended_id, created_by, canceled_by, worker_id"
    };
}

mod blobs;
mod catalog;
mod dashboard;
mod error;
mod evaluations;
mod jobs;
mod projects;
mod records;
mod remote;
mod rows;
mod tokens;
mod workers;

use std::path::Path;
use std::str::FromStr;
use std::time::Duration;

use sqlx::postgres::{PgConnectOptions, PgPool, PgPoolOptions};
use sqlx::sqlite::{
    SqliteConnectOptions, SqliteJournalMode, SqlitePool, SqlitePoolOptions, SqliteSynchronous,
};
use uuid::Uuid;

use blobs::STALE_AFTER;
pub use blobs::{BlobKind, Blobs, Incoming, Received, STALE_AFTER as BLOBS_STALE_AFTER, Scratch};
pub use dashboard::{EvaluationRow, TrendPoint};
pub use error::StoreError;
pub use projects::{BaselineRecord, NewBaseline, Project, ProjectSummary};
pub use records::{
    AppliedRequest, CancelOutcome, DatasetRecord, EvaluationFilter, EvaluationRecord, ModelRecord,
    NewEvaluation, Page, Progress, Status,
};
pub use tokens::{EVERY_PROJECT, Role, TokenRecord, secret_hash};
pub use workers::{Lease, Process, WorkSignals, WorkerRecord};

/// Attempts an evaluation gets before a crash-looping one is failed for good.
pub const MAX_ATTEMPTS: u32 = 3;

#[derive(Debug, Clone)]
pub(crate) enum Pool {
    Sqlite(SqlitePool),
    Postgres(PgPool),
}

#[derive(Debug, Clone)]
pub struct Store {
    pool: Pool,
    pub blobs: Blobs,
}

/// Whether a database URL names PostgreSQL (anything else is SQLite).
pub fn is_postgres(database_url: &str) -> bool {
    database_url.starts_with("postgres://") || database_url.starts_with("postgresql://")
}

impl Store {
    /// Opens (creating if needed) the database and the blob folders, and
    /// applies the migrations. `blobs` is a folder, or `s3://bucket/prefix`
    /// with local copies kept under `data_dir`.
    pub async fn open(
        database_url: &str,
        blobs: &str,
        data_dir: &Path,
    ) -> Result<Store, StoreError> {
        let pool = if is_postgres(database_url) {
            let pool = PgPoolOptions::new()
                .max_connections(8)
                .acquire_timeout(Duration::from_secs(10))
                .connect_with(PgConnectOptions::from_str(database_url)?)
                .await?;
            sqlx::migrate!("./migrations/postgres").run(&pool).await?;
            Pool::Postgres(pool)
        } else {
            let options = SqliteConnectOptions::from_str(database_url)?
                .create_if_missing(true)
                .journal_mode(SqliteJournalMode::Wal)
                .synchronous(SqliteSynchronous::Normal)
                .busy_timeout(Duration::from_secs(10))
                .foreign_keys(true);
            let pool = SqlitePoolOptions::new()
                .max_connections(8)
                .connect_with(options)
                .await?;
            sqlx::migrate!("./migrations/sqlite").run(&pool).await?;
            Pool::Sqlite(pool)
        };
        let (blobs, own_folder) = if blobs.starts_with("s3://") {
            let remote = remote::Remote::open(blobs)?;
            (Blobs::open(data_dir, Some(remote)).await?, true)
        } else {
            let folder = Path::new(blobs);
            (Blobs::open(folder, None).await?, folder == data_dir)
        };
        // A starting process owns every upload in progress in its own
        // (locked) data dir; in a folder it shares, another service may be
        // receiving, so only files older than any upload go.
        let sweep = (!own_folder).then_some(STALE_AFTER);
        blobs.sweep_incoming(sweep).await?;
        Ok(Store { pool, blobs })
    }

    /// Whether the database answers (for `/readyz`).
    pub async fn ping(&self) -> bool {
        on_pool!(self, |pool| sqlx::query("SELECT 1")
            .execute(pool)
            .await
            .is_ok())
    }

    pub async fn close(&self) {
        on_pool!(self, |pool| pool.close().await)
    }
}

/// The database's clock in Unix milliseconds, as SQL. Leases and
/// heartbeats are set and compared on this one clock, so that a machine
/// whose own clock runs ahead cannot take back a healthy worker's claim.
pub(crate) fn db_now_ms(postgres: bool) -> &'static str {
    if postgres {
        "CAST(EXTRACT(EPOCH FROM clock_timestamp()) * 1000 AS BIGINT)"
    } else {
        "CAST(unixepoch('subsec') * 1000 AS INTEGER)"
    }
}

/// Page sizes: the default when none is asked for, and the most one page holds.
pub const DEFAULT_PAGE: u32 = 50;
pub const MAX_PAGE: u32 = 200;

/// Cuts a result fetched with one extra row into a page and its cursor.
fn page<T>(mut rows: Vec<T>, limit: u32, id: impl Fn(&T) -> Uuid) -> Page<T> {
    let next_cursor = if rows.len() > limit as usize {
        rows.truncate(limit as usize);
        rows.last().map(|r| id(r).to_string())
    } else {
        None
    };
    Page {
        items: rows,
        next_cursor,
    }
}

text_enum!(Status);
text_enum!(Role);
