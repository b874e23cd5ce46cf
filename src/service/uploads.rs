//! Uploads of models and evaluation sets: streamed to disk while hashed,
//! inspected by the engine in the sandbox, then stored by content.

use std::path::Path;
use std::time::{Duration, Instant};

use bytes::Bytes;
use futures_util::{Stream, StreamExt};
use time::OffsetDateTime;
use tokio::sync::OwnedSemaphorePermit;
use uuid::Uuid;

use super::{App, Caller};
use crate::engine::dataset::DatasetInfo;
use crate::engine::model::ModelInfo;
use crate::error::AppError;
use crate::sandbox::{Sandbox, SandboxError};
use crate::store::{BlobKind, DatasetRecord, ModelRecord, Received, Role, Store, StoreError};

/// A stored record and whether this upload created it.
pub struct Uploaded<T> {
    pub record: T,
    pub created: bool,
}

/// After this long, an upload must average at least `MIN_RATE`.
const RATE_GRACE: Duration = Duration::from_secs(20);
/// Bytes per second below which an upload is a stalled client, not a slow link.
const MIN_RATE: u64 = 16 * 1024;
/// The disk must keep this much free after an upload (api.md, "Limits").
pub(crate) const MIN_FREE: u64 = 1 << 30;
/// Free space is checked again after every this many bytes received.
const RECHECK_EVERY: u64 = 64 << 20;

/// The most of a refused request's body read before the refusal goes out.
const DRAIN_BYTES: u64 = 8 << 20;
const DRAIN_TIME: Duration = Duration::from_secs(2);

/// Reads and drops a little more of a refused request's body before the
/// refusal goes out: an HTTP/1 client still sending would otherwise have
/// its connection reset, and with it the answer that says why, when the
/// rest arrives unread.
pub(crate) async fn drain<S, E>(body: &mut S)
where
    S: Stream<Item = Result<Bytes, E>> + Unpin,
{
    let read = async {
        let mut seen = 0u64;
        while let Some(Ok(chunk)) = body.next().await {
            seen += chunk.len() as u64;
            if seen >= DRAIN_BYTES {
                break;
            }
        }
    };
    let _ = tokio::time::timeout(DRAIN_TIME, read).await;
}

/// `refusal`, once the body is drained.
async fn drained<S, E>(body: &mut S, refusal: AppError) -> AppError
where
    S: Stream<Item = Result<Bytes, E>> + Unpin,
{
    drain(body).await;
    refusal
}

impl App {
    /// Refuses an upload that would take the stored data past
    /// `--max-stored-bytes` or leave less than 1 GiB free on the disk.
    async fn room_for(&self, bytes: u64) -> Result<(), AppError> {
        let free = self.store.blobs.free_bytes().map_err(AppError::internal)?;
        if free < bytes.saturating_add(MIN_FREE) {
            return Err(AppError::InsufficientStorage(format!(
                "the disk holding the service's data would have less than {} MiB free; \
                 delete models or sets, or ask the operator for room",
                MIN_FREE >> 20
            )));
        }
        if let Some(limit) = self.config.max_stored_bytes {
            let stored = self.store.stored_bytes().await?;
            if stored.saturating_add(bytes) > limit {
                return Err(AppError::InsufficientStorage(format!(
                    "the service keeps at most {limit} bytes of models and sets and holds \
                     {stored}; delete some first"
                )));
            }
        }
        Ok(())
    }

    /// Streams a body to a temporary blob, refusing it past the size limit,
    /// when the disk runs short, or when the client stalls. Whatever ends
    /// it early, the temporary file goes with it.
    async fn receive<S, E>(&self, body: S, declared_len: Option<u64>) -> Result<Received, AppError>
    where
        S: Stream<Item = Result<Bytes, E>> + Unpin,
        E: std::fmt::Display,
    {
        let limit = self.config.max_upload_bytes;
        let too_large = || AppError::TooLarge(format!("uploads are limited to {limit} bytes"));
        let mut body = body;
        if declared_len.is_some_and(|n| n > limit) {
            return Err(drained(&mut body, too_large()).await);
        }
        if let Err(e) = self.room_for(declared_len.unwrap_or(0)).await {
            return Err(drained(&mut body, e).await);
        }
        let mut incoming = self.store.blobs.begin().await?;
        let started = Instant::now();
        let mut next_check = RECHECK_EVERY;
        let idle = self.config.upload_idle;
        loop {
            let chunk = match tokio::time::timeout(idle, body.next()).await {
                Err(_) => {
                    return Err(AppError::TooSlow(format!(
                        "the upload sent nothing for {} s and was dropped",
                        idle.as_secs()
                    )));
                }
                Ok(None) => break,
                Ok(Some(Err(e))) => {
                    return Err(AppError::bad_request(
                        format!("the upload broke off: {e}"),
                        None,
                    ));
                }
                Ok(Some(Ok(c))) => c,
            };
            if incoming.bytes() + chunk.len() as u64 > limit {
                drop(incoming);
                return Err(drained(&mut body, too_large()).await);
            }
            incoming.write(chunk).await?;
            let elapsed = started.elapsed();
            if elapsed > RATE_GRACE && incoming.bytes() < MIN_RATE * elapsed.as_secs() {
                return Err(AppError::TooSlow(format!(
                    "the upload averaged under {} KiB/s and was dropped",
                    MIN_RATE >> 10
                )));
            }
            if incoming.bytes() >= next_check {
                self.room_for(RECHECK_EVERY).await?;
                next_check += RECHECK_EVERY;
            }
        }
        if incoming.bytes() == 0 {
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
        caller: &Caller,
    ) -> Result<Uploaded<K>, AppError>
    where
        S: Stream<Item = Result<Bytes, E>> + Unpin,
        E: std::fmt::Display,
    {
        let (_slot, received) = self.admit::<K, _, _>(body, declared_len, caller).await?;
        self.keep(name, received, None).await
    }

    /// Stores a model sent as a zip bundle: the engine inlines the data its
    /// tensors name and inspects the result, and the self-contained model
    /// is what is stored and hashed, so the same weights exported twice
    /// are one model.
    pub async fn upload_bundle<S, E>(
        &self,
        name: String,
        body: S,
        declared_len: Option<u64>,
        caller: &Caller,
    ) -> Result<Uploaded<ModelRecord>, AppError>
    where
        S: Stream<Item = Result<Bytes, E>> + Unpin,
        E: std::fmt::Display,
    {
        let (_slot, bundle) = self
            .admit::<ModelRecord, _, _>(body, declared_len, caller)
            .await?;
        // The inlined model takes about as much room again as the bundle.
        self.room_for(bundle.bytes).await?;
        let scratch = self.store.blobs.scratch();
        let info = self
            .sandbox
            .inspect_bundle(bundle.path(), scratch.path())
            .await?;
        drop(bundle);
        let model = self.store.blobs.seal(scratch).await?;
        // A small deflated bundle can inline to far more than it was sent
        // as: the upload and storage limits hold for what is kept.
        let limit = self.config.max_upload_bytes;
        if model.bytes > limit {
            return Err(AppError::TooLarge(format!(
                "the model holds {} bytes once its data is inlined; uploads are limited to \
                 {limit} bytes",
                model.bytes
            )));
        }
        self.room_for(model.bytes).await?;
        self.keep(name, model, Some(info)).await
    }

    /// Checks the caller's role, takes one of `--max-uploads` slots and
    /// streams the body in; the slot is held until the upload is kept.
    async fn admit<K: Upload, S, E>(
        &self,
        body: S,
        declared_len: Option<u64>,
        caller: &Caller,
    ) -> Result<(OwnedSemaphorePermit, Received), AppError>
    where
        S: Stream<Item = Result<Bytes, E>> + Unpin,
        E: std::fmt::Display,
    {
        let mut body = body;
        if let Err(e) = caller.may(Role::Submitter, None, "uploading") {
            return Err(drained(&mut body, e).await);
        }
        let Ok(slot) = self.uploads.clone().try_acquire_owned() else {
            let busy = AppError::Unavailable {
                detail: "the service is receiving as many uploads as it takes at once; try again \
                         shortly"
                    .into(),
                retry_after: Some(Duration::from_secs(5)),
            };
            return Err(drained(&mut body, busy).await);
        };
        let received = self.receive(body, declared_len).await?;
        self.telemetry.upload(K::BLOB.folder(), received.bytes);
        Ok((slot, received))
    }

    /// Answers from the store when the same bytes are already there
    /// (restoring the file if it had gone missing from disk), else records
    /// the upload, inspecting it first unless that was done.
    async fn keep<K: Upload>(
        &self,
        name: String,
        received: Received,
        inspected: Option<K::Info>,
    ) -> Result<Uploaded<K>, AppError> {
        if let Some(existing) = K::stored(&self.store, &received.sha256).await? {
            if !self.store.blobs.exists(K::BLOB, &received.sha256).await? {
                tracing::warn!(sha256 = %received.sha256, "a stored file was missing; restored from this upload");
                self.store.blobs.commit(K::BLOB, received).await?;
            }
            return Ok(Uploaded {
                record: existing,
                created: false,
            });
        }
        let info = match inspected {
            Some(info) => info,
            None => K::inspect(&self.sandbox, received.path()).await?,
        };
        let record = K::record(name, &received, info);
        self.store.blobs.commit(K::BLOB, received).await?;
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

impl App {
    /// Deletes a model's file; its record stays for the finished
    /// evaluations that name it. Refused while an unfinished evaluation or
    /// a project's current baseline uses it.
    pub async fn delete_model(&self, id: Uuid, caller: &Caller) -> Result<(), AppError> {
        caller.may(Role::Maintainer, None, "deleting a model")?;
        let model = self
            .store
            .model(id)
            .await?
            .ok_or_else(|| AppError::NotFound(format!("no model has id {id}")))?;
        if let Err(why) = self.store.delete_model(id).await? {
            return Err(AppError::Conflict(format!(
                "model {id} cannot be deleted: {why}"
            )));
        }
        self.store
            .blobs
            .remove(BlobKind::Model, &model.sha256)
            .await?;
        Ok(())
    }

    pub async fn delete_dataset(&self, id: Uuid, caller: &Caller) -> Result<(), AppError> {
        caller.may(Role::Maintainer, None, "deleting an evaluation set")?;
        let set = self
            .store
            .dataset(id)
            .await?
            .ok_or_else(|| AppError::NotFound(format!("no evaluation set has id {id}")))?;
        if let Err(why) = self.store.delete_dataset(id).await? {
            return Err(AppError::Conflict(format!(
                "evaluation set {id} cannot be deleted: {why}"
            )));
        }
        self.store
            .blobs
            .remove(BlobKind::Dataset, &set.sha256)
            .await?;
        Ok(())
    }
}
