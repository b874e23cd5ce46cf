//! Uploads of models and evaluation sets: streamed to disk while hashed,
//! checked by the engine in a child process, then stored by content.

use bytes::Bytes;
use futures_util::{Stream, StreamExt};
use time::OffsetDateTime;
use uuid::Uuid;

use super::App;
use crate::error::AppError;
use crate::queue::child::Ended;
use crate::queue::protocol::{Message, Task};
use std::path::PathBuf;

use crate::store::{BlobKind, DatasetRecord, ModelRecord, Received, Store, StoreError};

/// A stored record and whether this upload created it.
pub struct Uploaded<T> {
    pub record: T,
    pub created: bool,
}

impl App {
    /// Streams a body to a temporary blob, refusing it past the size limit.
    async fn receive<S, E>(&self, body: S, declared_len: Option<u64>) -> Result<Received, AppError>
    where
        S: Stream<Item = Result<Bytes, E>> + Unpin,
        E: std::fmt::Display,
    {
        let limit = self.config.max_upload_bytes;
        let too_large = || AppError::TooLarge(format!("uploads are limited to {limit} bytes"));
        if declared_len.is_some_and(|n| n > limit) {
            return Err(too_large());
        }
        let mut body = body;
        let mut incoming = self.store.blobs.begin().await?;
        while let Some(chunk) = body.next().await {
            let chunk = match chunk {
                Ok(c) => c,
                Err(e) => {
                    incoming.abandon().await;
                    return Err(AppError::bad_request(
                        format!("the upload broke off: {e}"),
                        None,
                    ));
                }
            };
            if incoming.bytes() + chunk.len() as u64 > limit {
                incoming.abandon().await;
                return Err(too_large());
            }
            incoming.write(chunk).await?;
        }
        if incoming.bytes() == 0 {
            incoming.abandon().await;
            return Err(AppError::unprocessable("the upload is empty", None));
        }
        Ok(incoming.finish().await?)
    }

    /// Runs an upload check in a child; any refusal becomes a 422.
    async fn inspect(&self, task: Task, received: &Received) -> Result<Message, AppError> {
        let ended =
            self.queue.check(&task).await.map_err(|e| {
                AppError::Internal(format!("starting the engine process failed: {e}"))
            });
        let refuse = |detail: String| AppError::unprocessable(detail, None);
        let outcome = match ended? {
            Ended::Answer(Message::Failed(f)) => Err(refuse(f.message)),
            Ended::Answer(m) => Ok(m),
            Ended::TimedOut => Err(refuse(
                "checking the upload took longer than the limit".into(),
            )),
            Ended::Crashed(how) => Err(refuse(format!(
                "the engine could not load the upload: {how}"
            ))),
            Ended::Canceled => Err(AppError::Unavailable("the service is shutting down".into())),
        };
        if outcome.is_err() {
            self.store.blobs.discard(received).await;
        }
        outcome
    }

    /// Stores an upload of kind `K`: streamed and hashed, answered from the
    /// store when the same bytes are already there, else checked by the
    /// engine in a child and recorded.
    pub async fn upload<K: Upload, S, E>(
        &self,
        name: String,
        body: S,
        declared_len: Option<u64>,
    ) -> Result<Uploaded<K>, AppError>
    where
        S: Stream<Item = Result<Bytes, E>> + Unpin,
        E: std::fmt::Display,
    {
        let received = self.receive(body, declared_len).await?;
        if let Some(existing) = K::stored(&self.store, &received.sha256).await? {
            self.store.blobs.discard(&received).await;
            return Ok(Uploaded {
                record: existing,
                created: false,
            });
        }
        let answer = self
            .inspect(K::check(received.path.clone()), &received)
            .await?;
        let record = K::record(name, &received, answer)?;
        self.store.blobs.commit(K::BLOB, &received).await?;
        let (record, created) = K::insert(&self.store, &record).await?;
        Ok(Uploaded { record, created })
    }
}

/// What differs between model and evaluation-set uploads.
pub trait Upload: Sized {
    const BLOB: BlobKind;
    /// The engine task that checks an upload of this kind.
    fn check(path: PathBuf) -> Task;
    /// The record of a checked upload, from the engine's answer.
    fn record(name: String, received: &Received, answer: Message) -> Result<Self, AppError>;
    fn stored(
        store: &Store,
        sha256: &str,
    ) -> impl Future<Output = Result<Option<Self>, StoreError>> + Send;
    fn insert(
        store: &Store,
        record: &Self,
    ) -> impl Future<Output = Result<(Self, bool), StoreError>> + Send;
}

fn unexpected(answer: Message) -> AppError {
    AppError::Internal(format!("unexpected check answer {answer:?}"))
}

impl Upload for ModelRecord {
    const BLOB: BlobKind = BlobKind::Model;

    fn check(path: PathBuf) -> Task {
        Task::InspectModel { path }
    }

    fn record(name: String, received: &Received, answer: Message) -> Result<Self, AppError> {
        let Message::Model(info) = answer else {
            return Err(unexpected(answer));
        };
        Ok(ModelRecord {
            id: Uuid::now_v7(),
            name,
            sha256: received.sha256.clone(),
            bytes: received.bytes,
            info: *info,
            created_at: OffsetDateTime::now_utc(),
        })
    }

    fn stored(
        store: &Store,
        sha256: &str,
    ) -> impl Future<Output = Result<Option<Self>, StoreError>> + Send {
        store.model_by_sha(sha256)
    }

    fn insert(
        store: &Store,
        record: &Self,
    ) -> impl Future<Output = Result<(Self, bool), StoreError>> + Send {
        store.insert_model(record)
    }
}

impl Upload for DatasetRecord {
    const BLOB: BlobKind = BlobKind::Dataset;

    fn check(path: PathBuf) -> Task {
        Task::InspectDataset { path }
    }

    fn record(name: String, received: &Received, answer: Message) -> Result<Self, AppError> {
        let Message::Dataset(info) = answer else {
            return Err(unexpected(answer));
        };
        Ok(DatasetRecord {
            id: Uuid::now_v7(),
            name,
            sha256: received.sha256.clone(),
            bytes: received.bytes,
            samples: info.samples as u64,
            arrays: info.arrays,
            has_labels: info.has_labels,
            created_at: OffsetDateTime::now_utc(),
        })
    }

    fn stored(
        store: &Store,
        sha256: &str,
    ) -> impl Future<Output = Result<Option<Self>, StoreError>> + Send {
        store.dataset_by_sha(sha256)
    }

    fn insert(
        store: &Store,
        record: &Self,
    ) -> impl Future<Output = Result<(Self, bool), StoreError>> + Send {
        store.insert_dataset(record)
    }
}
