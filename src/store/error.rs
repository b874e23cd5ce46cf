//! The store's error type: the database, the blob files (on disk or in
//! object storage), or a stored value
//! that no longer parses. None of these is the user's fault, so the HTTP
//! layer answers every one with a generic 500 and logs the cause.

#[derive(Debug, thiserror::Error)]
pub enum StoreError {
    #[error("database: {0}")]
    Database(#[from] sqlx::Error),
    #[error("migrations: {0}")]
    Migrate(#[from] sqlx::migrate::MigrateError),
    #[error("blob files: {0}")]
    Io(#[from] std::io::Error),
    #[error("object storage: {0}")]
    Objects(#[from] object_store::Error),
    /// A `--blob-store` that names no folder or bucket we can use.
    #[error("blob store: {0}")]
    Config(String),
    /// The thread that writes an upload's blob panicked or was cancelled.
    #[error("the blob writer stopped: {0}")]
    Writer(#[from] tokio::task::JoinError),
    #[error("stored value is corrupt: {0}")]
    Corrupt(String),
}
