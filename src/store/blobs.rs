//! Content-addressed files under the data dir: uploads stream into a
//! temporary file while being hashed, then are renamed to a path derived
//! from their SHA-256 alone — never from anything a user gave.

use std::path::{Path, PathBuf};

use sha2::{Digest, Sha256};
use tokio::fs;

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

/// An upload being written. Chunks go to one blocking thread that hashes
/// and writes them with plain file I/O, so the async side only forwards
/// buffers and the hashing overlaps the network.
pub struct Incoming {
    path: PathBuf,
    bytes: u64,
    chunks: tokio::sync::mpsc::Sender<bytes::Bytes>,
    writer: tokio::task::JoinHandle<std::io::Result<String>>,
}

/// Chunks in flight between the request and the writer thread.
const IN_FLIGHT: usize = 16;

fn write_and_hash(
    path: &Path,
    mut chunks: tokio::sync::mpsc::Receiver<bytes::Bytes>,
) -> std::io::Result<String> {
    use std::io::Write;
    let file = std::fs::File::create(path)?;
    let mut out = std::io::BufWriter::with_capacity(1 << 20, file);
    let mut hasher = Sha256::new();
    while let Some(chunk) = chunks.blocking_recv() {
        hasher.update(&chunk);
        out.write_all(&chunk)?;
    }
    let file = out.into_inner().map_err(|e| e.into_error())?;
    // Durable before it is recorded: a crash must not leave a row whose
    // file is incomplete.
    file.sync_all()?;
    Ok(hex::encode(hasher.finalize()))
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

    /// The file evaluations lock to share the CPU (see `sandbox::cpu_lock`).
    pub fn cpu_lock_path(&self) -> PathBuf {
        self.root.join("cpu.lock")
    }

    pub async fn begin(&self) -> Result<Incoming, StoreError> {
        let path = self
            .root
            .join("incoming")
            .join(uuid::Uuid::now_v7().to_string());
        let (chunks, rx) = tokio::sync::mpsc::channel(IN_FLIGHT);
        let target = path.clone();
        let writer = tokio::task::spawn_blocking(move || write_and_hash(&target, rx));
        Ok(Incoming {
            path,
            bytes: 0,
            chunks,
            writer,
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

    pub async fn write(&mut self, chunk: bytes::Bytes) -> Result<(), StoreError> {
        self.bytes += chunk.len() as u64;
        if self.chunks.send(chunk).await.is_err() {
            // The writer stopped: its error says why.
            return Err(self.stopped_writer().await);
        }
        Ok(())
    }

    async fn stopped_writer(&mut self) -> StoreError {
        match (&mut self.writer).await {
            Ok(Err(e)) => StoreError::Io(e),
            Ok(Ok(_)) => StoreError::Io(std::io::Error::other("the blob writer ended early")),
            Err(e) => StoreError::Writer(e),
        }
    }

    pub async fn finish(self) -> Result<Received, StoreError> {
        let Incoming {
            path,
            bytes,
            chunks,
            writer,
        } = self;
        drop(chunks);
        let sha256 = writer.await??;
        Ok(Received {
            path,
            sha256,
            bytes,
        })
    }

    pub async fn abandon(self) {
        let Incoming {
            path,
            chunks,
            writer,
            ..
        } = self;
        drop(chunks);
        let _ = writer.await;
        let _ = fs::remove_file(&path).await;
    }
}
