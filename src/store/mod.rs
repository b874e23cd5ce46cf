//! All SQL and all stored files. The schema lives in `migrations/` and is
//! applied at start. SQL is kept portable (no SQLite-only functions) so that
//! another database can be added here without touching the layers above.

mod blobs;
mod catalog;
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
