//! All SQL and all stored files. The schema lives in `migrations/` and is
//! applied at start. SQL is kept portable (no SQLite-only functions) so that
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

mod blobs;
mod catalog;
mod dashboard;
mod error;
mod evaluations;
mod records;

use std::path::Path;
use std::str::FromStr;
use std::time::Duration;

use sqlx::sqlite::{
    SqliteConnectOptions, SqliteJournalMode, SqlitePool, SqlitePoolOptions, SqliteSynchronous,
};
use time::OffsetDateTime;
use time::format_description::well_known::Rfc3339;

pub use blobs::{BlobKind, Blobs, Incoming, Received};
pub use dashboard::{EvaluationRow, TrendPoint};
pub use error::StoreError;
pub use records::{
    CancelOutcome, DatasetRecord, EvaluationFilter, EvaluationRecord, ModelRecord, NewEvaluation,
    Page, Progress, Status,
};

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
        blobs.sweep_incoming().await?;
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

fn fmt_time(t: OffsetDateTime) -> String {
    t.format(&Rfc3339)
        .expect("UTC times always format as RFC 3339")
}

fn parse_time(s: &str) -> Result<OffsetDateTime, StoreError> {
    Ok(OffsetDateTime::parse(s, &Rfc3339)?)
}

/// Page sizes: the default when none is asked for, and the most one page holds.
pub const DEFAULT_PAGE: u32 = 50;
pub const MAX_PAGE: u32 = 500;

/// Cuts a result fetched with one extra row into a page and its cursor.
fn page<T>(mut rows: Vec<T>, limit: u32, id: impl Fn(&T) -> String) -> Page<T> {
    let next_cursor = if rows.len() > limit as usize {
        rows.truncate(limit as usize);
        rows.last().map(id)
    } else {
        None
    };
    Page {
        items: rows,
        next_cursor,
    }
}

type SqliteQuery<'q> = sqlx::query::Query<'q, sqlx::Sqlite, sqlx::sqlite::SqliteArguments>;

/// Binds `evaluation_filter!`'s parameters, fetching one row past `limit`.
fn bind_filter<'q>(
    q: SqliteQuery<'q>,
    f: &EvaluationFilter,
    limit: u32,
    cursor: Option<uuid::Uuid>,
) -> SqliteQuery<'q> {
    let (tag_key, tag_value) = f.tag.clone().unzip();
    q.bind(f.project.clone())
        .bind(f.teacher.map(|t| t.to_string()))
        .bind(f.status.map(Status::as_str))
        .bind(f.verdict.map(crate::report::Verdict::as_str))
        .bind(tag_key)
        .bind(tag_value)
        .bind(cursor.map(|c| c.to_string()))
        .bind(limit as i64 + 1)
}
