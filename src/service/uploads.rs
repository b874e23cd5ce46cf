//! Uploads of models and evaluation sets: streamed to disk while hashed,
//! inspected by the engine in the sandbox, then stored by content.

use std::path::Path;

use bytes::Bytes;
use futures_util::{Stream, StreamExt};
use time::OffsetDateTime;
use uuid::Uuid;

use super::App;
use crate::engine::dataset::DatasetInfo;
use crate::engine::model::ModelInfo;
use crate::error::AppError;
use crate::sandbox::{Sandbox, SandboxError};
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

    /// Stores an upload of kind `K`: streamed and hashed, answered from the
    /// store when the same bytes are already there, else inspected by the
    /// engine and recorded.
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
        let info = match K::inspect(&self.sandbox, &received.path).await {
            Ok(info) => info,
            Err(e) => {
                self.store.blobs.discard(&received).await;
                return Err(e.into());
            }
        };
        let record = K::record(name, &received, info);
        self.store.blobs.commit(K::BLOB, &received).await?;
        let (record, created) = K::insert(&self.store, &record).await?;
        Ok(Uploaded { record, created })
    }
}

/// What differs between model and evaluation-set uploads.
pub trait Upload: Sized {
    const BLOB: BlobKind;
    /// What the engine learns of an upload of this kind.
    type Info;
    fn inspect(
        sandbox: &Sandbox,
        path: &Path,
    ) -> impl Future<Output = Result<Self::Info, SandboxError>> + Send;
    /// The record of an inspected upload.
    fn record(name: String, received: &Received, info: Self::Info) -> Self;
    fn stored(
        store: &Store,
        sha256: &str,
    ) -> impl Future<Output = Result<Option<Self>, StoreError>> + Send;
    fn insert(
        store: &Store,
        record: &Self,
    ) -> impl Future<Output = Result<(Self, bool), StoreError>> + Send;
}

impl Upload for ModelRecord {
    const BLOB: BlobKind = BlobKind::Model;
    type Info = ModelInfo;

    fn inspect(
        sandbox: &Sandbox,
        path: &Path,
    ) -> impl Future<Output = Result<ModelInfo, SandboxError>> + Send {
        sandbox.inspect_model(path)
    }

    fn record(name: String, received: &Received, info: ModelInfo) -> Self {
        ModelRecord {
            id: Uuid::now_v7(),
            name,
            sha256: received.sha256.clone(),
            bytes: received.bytes,
            info,
            created_at: OffsetDateTime::now_utc(),
        }
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
    type Info = DatasetInfo;

    fn inspect(
        sandbox: &Sandbox,
        path: &Path,
    ) -> impl Future<Output = Result<DatasetInfo, SandboxError>> + Send {
        sandbox.inspect_dataset(path)
    }

    fn record(name: String, received: &Received, info: DatasetInfo) -> Self {
        DatasetRecord {
            id: Uuid::now_v7(),
            name,
            sha256: received.sha256.clone(),
            bytes: received.bytes,
            samples: info.samples as u64,
            arrays: info.arrays,
            has_labels: info.has_labels,
            class_names: info.class_names,
            slice_count: info.slice_count.map(|n| n as u64),
            largest_label: info.largest_label,
            created_at: OffsetDateTime::now_utc(),
        }
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
