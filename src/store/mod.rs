//! All SQL and all stored files. The schema lives in `migrations/` and is
//! applied at start. Rows decode into typed structs (`rows`); SQL is kept
//! portable (no SQLite-only functions outside the migrations) so that
//! another database can be added here without touching the layers above.

/// The filters of evaluation lists as SQL, on alias `e`; parameters ?1 to
/// ?8 are bound by `bind_filter`.
macro_rules! evaluation_filter {
    () => {
        concat!(
            " WHERE (?1 IS NULL OR e.project = ?1)",
            " AND (?2 IS NULL OR e.teacher_id = ?2) AND (?3 IS NULL OR e.status = ?3)",
            " AND (?4 IS NULL OR e.verdict = ?4)",
            " AND (?5 IS NULL OR EXISTS (SELECT 1 FROM evaluation_tags g",
            "      WHERE g.evaluation_id = e.id AND g.key = ?5 AND g.value = ?6))",
            " AND (?7 IS NULL OR e.id < ?7) ORDER BY e.id DESC LIMIT ?8"
        )
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
         verdict, recommended_id, created_by, canceled_by"
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
mod rows;
mod tokens;

use std::path::Path;
use std::str::FromStr;
use std::time::Duration;

use sqlx::sqlite::{
    SqliteConnectOptions, SqliteJournalMode, SqlitePool, SqlitePoolOptions, SqliteSynchronous,
};
use uuid::Uuid;

pub use blobs::{BlobKind, Blobs, Incoming, Received, STALE_AFTER as BLOBS_STALE_AFTER, Scratch};
pub use dashboard::{EvaluationRow, TrendPoint};
pub use error::StoreError;
pub use projects::{BaselineRecord, NewBaseline, Project, ProjectSummary};
pub use records::{
    AppliedRequest, CancelOutcome, DatasetRecord, EvaluationFilter, EvaluationRecord, ModelRecord,
    NewEvaluation, Page, Progress, Status,
};
pub use tokens::{EVERY_PROJECT, Role, TokenRecord, secret_hash};

/// Attempts an evaluation gets before a crash-looping one is failed for good.
pub const MAX_ATTEMPTS: u32 = 3;

#[derive(Debug, Clone)]
pub struct Store {
    pool: SqlitePool,
    pub blobs: Blobs,
}

impl Store {
    /// Opens (creating if needed) the database and the blob folders, and
    /// applies the migrations.
    pub async fn open(database_url: &str, data_dir: &Path) -> Result<Store, StoreError> {
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
        sqlx::migrate!("./migrations").run(&pool).await?;
        let blobs = Blobs::open(data_dir).await?;
        blobs.sweep_incoming(None).await?;
        Ok(Store { pool, blobs })
    }

    /// Whether the database answers (for `/readyz`).
    pub async fn ping(&self) -> bool {
        sqlx::query("SELECT 1").execute(&self.pool).await.is_ok()
    }

    pub async fn close(&self) {
        self.pool.close().await;
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

type SqliteQueryAs<'q, T> =
    sqlx::query::QueryAs<'q, sqlx::Sqlite, T, sqlx::sqlite::SqliteArguments>;

/// Binds `evaluation_filter!`'s parameters, fetching one row past `limit`.
fn bind_filter<'q, T>(
    q: SqliteQueryAs<'q, T>,
    f: &EvaluationFilter,
    limit: u32,
    cursor: Option<Uuid>,
) -> SqliteQueryAs<'q, T> {
    let (tag_key, tag_value) = f.tag.clone().unzip();
    q.bind(f.project.clone())
        .bind(f.teacher)
        .bind(f.status)
        .bind(f.verdict.map(crate::report::Verdict::as_str))
        .bind(tag_key)
        .bind(tag_value)
        .bind(cursor)
        .bind(limit as i64 + 1)
}
