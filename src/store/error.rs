//! The store's error type: the database, the blob files, or a stored value
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
    #[error("stored value is corrupt: {0}")]
    Corrupt(String),
}

impl From<serde_json::Error> for StoreError {
    fn from(e: serde_json::Error) -> Self {
        StoreError::Corrupt(e.to_string())
    }
}

impl From<uuid::Error> for StoreError {
    fn from(e: uuid::Error) -> Self {
        StoreError::Corrupt(e.to_string())
    }
}

impl From<time::error::Parse> for StoreError {
    fn from(e: time::error::Parse) -> Self {
        StoreError::Corrupt(e.to_string())
    }
}
