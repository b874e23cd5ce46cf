//! Blobs in S3-compatible object storage (`--blob-store s3://bucket/prefix`),
//! through the `object_store` crate. The object key is the blob's kind and
//! SHA-256 under the prefix, as on disk, so uploads stay content-addressed
//! and idempotent: a second upload of the same bytes finds the object there.
//! The engine reads files, so each process keeps a local copy of what it
//! uses in its data dir (`Blobs`), fetched on first use and checked against
//! its hash.
//!
//! The endpoint and credentials come from the usual variables:
//! `AWS_ACCESS_KEY_ID`, `AWS_SECRET_ACCESS_KEY`, `AWS_REGION` (or
//! `AWS_DEFAULT_REGION`), `AWS_ENDPOINT` for an S3-compatible server, and
//! `AWS_ALLOW_HTTP=true` for one without TLS.

use std::path::Path;
use std::sync::Arc;

use futures_util::StreamExt;
use object_store::aws::AmazonS3Builder;
use object_store::path::Path as Key;
use object_store::{ObjectStore, ObjectStoreExt, PutPayload};
use tokio::io::AsyncWriteExt;

use super::blobs::BlobKind;
use super::error::StoreError;

#[derive(Debug, Clone)]
pub struct Remote {
    objects: Arc<dyn ObjectStore>,
    prefix: Key,
}

impl Remote {
    /// Connects to `s3://bucket/prefix` (nothing is sent until first use).
    pub fn open(url: &str) -> Result<Remote, StoreError> {
        let rest = url
            .strip_prefix("s3://")
            .ok_or_else(|| StoreError::Config(format!("{url} is not an s3:// URL")))?;
        let (bucket, prefix) = rest.split_once('/').unwrap_or((rest, ""));
        if bucket.is_empty() {
            return Err(StoreError::Config(format!("{url} names no bucket")));
        }
        let mut builder = AmazonS3Builder::from_env().with_bucket_name(bucket);
        if std::env::var_os("AWS_REGION").is_none()
            && std::env::var_os("AWS_DEFAULT_REGION").is_none()
        {
            // S3-compatible servers ignore the region, but requests are
            // signed for one.
            builder = builder.with_region("us-east-1");
        }
        Ok(Remote {
            objects: Arc::new(builder.build()?),
            prefix: Key::from(prefix.trim_matches('/')),
        })
    }

    fn key(&self, kind: BlobKind, sha256: &str) -> Key {
        self.prefix.clone().join(kind.folder()).join(sha256)
    }

    pub async fn has(&self, kind: BlobKind, sha256: &str) -> Result<bool, StoreError> {
        match self.objects.head(&self.key(kind, sha256)).await {
            Ok(_) => Ok(true),
            Err(object_store::Error::NotFound { .. }) => Ok(false),
            Err(e) => Err(e.into()),
        }
    }

    /// Stores a local file under its hash unless an object is already there
    /// (the same key holds the same bytes). Large files go up in parts.
    pub async fn upload(
        &self,
        kind: BlobKind,
        sha256: &str,
        file: &Path,
    ) -> Result<(), StoreError> {
        if self.has(kind, sha256).await? {
            return Ok(());
        }
        let mut source = tokio::fs::File::open(file).await?;
        let mut sink =
            object_store::buffered::BufWriter::new(self.objects.clone(), self.key(kind, sha256));
        let copied = async {
            tokio::io::copy(&mut source, &mut sink).await?;
            sink.shutdown().await
        }
        .await;
        if let Err(e) = copied {
            // No half-written parts left behind in the bucket.
            let _ = sink.abort().await;
            return Err(e.into());
        }
        Ok(())
    }

    /// Writes the object of a blob to `to`; false when there is none.
    pub async fn download(
        &self,
        kind: BlobKind,
        sha256: &str,
        to: &Path,
    ) -> Result<bool, StoreError> {
        let got = match self.objects.get(&self.key(kind, sha256)).await {
            Ok(got) => got,
            Err(object_store::Error::NotFound { .. }) => return Ok(false),
            Err(e) => return Err(e.into()),
        };
        let mut out = tokio::fs::File::create(to).await?;
        let mut chunks = got.into_stream();
        while let Some(chunk) = chunks.next().await {
            out.write_all(&chunk?).await?;
        }
        out.sync_all().await?;
        Ok(true)
    }

    /// Deletes a blob's object; one already gone is fine.
    pub async fn delete(&self, kind: BlobKind, sha256: &str) -> Result<(), StoreError> {
        match self.objects.delete(&self.key(kind, sha256)).await {
            Ok(()) | Err(object_store::Error::NotFound { .. }) => Ok(()),
            Err(e) => Err(e.into()),
        }
    }

    /// Writes and deletes a small object, to learn that the bucket takes writes.
    pub async fn probe(&self) -> Result<(), StoreError> {
        let key = self
            .prefix
            .clone()
            .join("probes")
            .join(uuid::Uuid::now_v7().to_string());
        self.objects
            .put(&key, PutPayload::from_static(b"proctor"))
            .await?;
        self.objects.delete(&key).await?;
        Ok(())
    }
}
