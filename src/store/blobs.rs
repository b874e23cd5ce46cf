//! Content-addressed files under the data dir: uploads stream into a
//! temporary file while being hashed, then are renamed to a path derived
//! from their SHA-256 alone — never from anything a user gave.

use std::path::{Path, PathBuf};

use sha2::{Digest, Sha256};
use tokio::fs;
use tokio::io::AsyncWriteExt;

use super::error::StoreError;

/// What kind of file a blob holds; each kind has its own folder.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum BlobKind {
    Model,
    Dataset,
}

impl BlobKind {
    fn folder(self) -> &'static str {
        match self {
            BlobKind::Model => "models",
            BlobKind::Dataset => "datasets",
        }
    }
}

#[derive(Debug, Clone)]
pub struct Blobs {
    root: PathBuf,
}

/// An upload being written: bytes so far and their running hash.
pub struct Incoming {
    /// Buffered: each write to a tokio file is a trip to the blocking pool.
    file: tokio::io::BufWriter<fs::File>,
    path: PathBuf,
    hasher: Sha256,
    bytes: u64,
}

/// A fully written upload, not yet in the store.
pub struct Received {
    pub path: PathBuf,
    pub sha256: String,
    pub bytes: u64,
}

impl Blobs {
    pub async fn open(root: &Path) -> Result<Blobs, StoreError> {
        for sub in ["models", "datasets", "incoming", "teacher-scores"] {
            fs::create_dir_all(root.join(sub)).await?;
        }
        Ok(Blobs {
            root: root.to_owned(),
        })
    }

    pub fn path_of(&self, kind: BlobKind, sha256: &str) -> PathBuf {
        self.root.join(kind.folder()).join(sha256)
    }

    /// Where the engine keeps teacher scores between evaluations.
    pub fn teacher_scores_dir(&self) -> PathBuf {
        self.root.join("teacher-scores")
    }

    /// The file evaluations lock to share the CPU (see `queue::cpu_lock`).
    pub fn cpu_lock_path(&self) -> PathBuf {
        self.root.join("cpu.lock")
    }

    pub async fn begin(&self) -> Result<Incoming, StoreError> {
        let path = self
            .root
            .join("incoming")
            .join(uuid::Uuid::now_v7().to_string());
        let file = tokio::io::BufWriter::with_capacity(1 << 20, fs::File::create(&path).await?);
        Ok(Incoming {
            file,
            path,
            hasher: Sha256::new(),
            bytes: 0,
        })
    }

    /// Moves a received file to its content address; a file already there is
    /// the same bytes, so the new copy is simply dropped.
    pub async fn commit(&self, kind: BlobKind, received: &Received) -> Result<PathBuf, StoreError> {
        let target = self.path_of(kind, &received.sha256);
        if fs::try_exists(&target).await? {
            fs::remove_file(&received.path).await?;
        } else {
            fs::rename(&received.path, &target).await?;
        }
        Ok(target)
    }

    /// Removes what a failed or refused upload left behind.
    pub async fn discard(&self, received: &Received) {
        let _ = fs::remove_file(&received.path).await;
    }

    /// Clears uploads that a crash interrupted mid-stream.
    pub async fn sweep_incoming(&self) -> Result<(), StoreError> {
        let mut dir = fs::read_dir(self.root.join("incoming")).await?;
        while let Some(entry) = dir.next_entry().await? {
            let _ = fs::remove_file(entry.path()).await;
        }
        Ok(())
    }
}

impl Incoming {
    pub fn bytes(&self) -> u64 {
        self.bytes
    }

    pub async fn write(&mut self, chunk: &[u8]) -> Result<(), StoreError> {
        self.hasher.update(chunk);
        self.bytes += chunk.len() as u64;
        self.file.write_all(chunk).await?;
        Ok(())
    }

    pub async fn finish(mut self) -> Result<Received, StoreError> {
        self.file.flush().await?;
        // Durable before it is recorded: a crash must not leave a row whose
        // file is incomplete.
        self.file.get_ref().sync_all().await?;
        Ok(Received {
            path: self.path,
            sha256: hex::encode(self.hasher.finalize()),
            bytes: self.bytes,
        })
    }

    pub async fn abandon(self) {
        drop(self.file);
        let _ = fs::remove_file(&self.path).await;
    }
}
