//! Content-addressed files under the data dir: uploads stream into a
//! temporary file while being hashed, then are renamed to a path derived
//! from their SHA-256 alone — never from anything a user gave. A temporary
//! file is removed however its upload ends (refused, failed, or the client
//! gone), by a guard that only a commit disarms. With object storage
//! (`remote`), a committed file is also stored there under the same
//! address, and a process that lacks a file fetches it before use.

use std::path::{Path, PathBuf};
use std::time::{Duration, SystemTime};

use sha2::{Digest, Sha256};
use tokio::fs;

use super::error::StoreError;
use super::remote::Remote;

/// What kind of file a blob holds; each kind has its own folder.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum BlobKind {
    Model,
    Dataset,
}

impl BlobKind {
    pub fn folder(self) -> &'static str {
        match self {
            BlobKind::Model => "models",
            BlobKind::Dataset => "datasets",
        }
    }
}

#[derive(Debug, Clone)]
pub struct Blobs {
    root: PathBuf,
    /// Where every process finds the blobs, when they are not on one disk.
    remote: Option<Remote>,
}

/// A temporary file that is removed when dropped, unless kept.
#[derive(Debug)]
struct TempFile {
    path: PathBuf,
    keep: bool,
}

impl Drop for TempFile {
    fn drop(&mut self) {
        if !self.keep {
            // A writer still holding the file writes to an unlinked inode,
            // which the kernel frees when it closes.
            let _ = std::fs::remove_file(&self.path);
        }
    }
}

/// An upload being written. Chunks go to one blocking thread that hashes
/// and writes them with plain file I/O, so the async side only forwards
/// buffers and the hashing overlaps the network.
pub struct Incoming {
    file: TempFile,
    bytes: u64,
    chunks: tokio::sync::mpsc::Sender<bytes::Bytes>,
    writer: tokio::task::JoinHandle<std::io::Result<String>>,
}

/// Chunks in flight between the request and the writer thread.
const IN_FLIGHT: usize = 16;

/// Temporary files untouched for this long belong to no live upload (an
/// upload writes as it streams; a check runs for minutes at most).
pub const STALE_AFTER: Duration = Duration::from_secs(3600);

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

/// A fully written upload, not yet in the store; its file goes when it is
/// dropped, unless committed.
pub struct Received {
    file: TempFile,
    pub sha256: String,
    pub bytes: u64,
}

impl Received {
    pub fn path(&self) -> &Path {
        &self.file.path
    }
}

/// A path where uploads land, for a file that another process writes (a
/// bundle's self-contained model); removed when dropped, unless sealed.
pub struct Scratch {
    file: TempFile,
}

impl Scratch {
    pub fn path(&self) -> &Path {
        &self.file.path
    }
}

/// Hashes a finished file and makes it durable, as `write_and_hash` does
/// for a streamed one.
fn hash_file(path: &Path) -> std::io::Result<(String, u64)> {
    let mut file = std::fs::File::open(path)?;
    let mut hasher = Sha256::new();
    let bytes = std::io::copy(&mut file, &mut hasher)?;
    file.sync_all()?;
    Ok((hex::encode(hasher.finalize()), bytes))
}

/// Makes a rename in `dir` durable.
async fn sync_dir(dir: &Path) -> std::io::Result<()> {
    let dir = dir.to_owned();
    tokio::task::spawn_blocking(move || std::fs::File::open(dir)?.sync_all())
        .await
        .map_err(std::io::Error::other)?
}

impl Blobs {
    pub async fn open(root: &Path, remote: Option<Remote>) -> Result<Blobs, StoreError> {
        for sub in ["models", "datasets", "incoming", "teacher-scores"] {
            fs::create_dir_all(root.join(sub)).await?;
        }
        Ok(Blobs {
            root: root.to_owned(),
            remote,
        })
    }

    /// The local path of a stored blob, fetched from object storage first
    /// when this process has no copy yet. The copy is checked against its
    /// address before it is kept.
    pub async fn fetch(&self, kind: BlobKind, sha256: &str) -> Result<PathBuf, StoreError> {
        let target = self.path_of(kind, sha256);
        let Some(remote) = &self.remote else {
            return Ok(target);
        };
        if fs::try_exists(&target).await? {
            return Ok(target);
        }
        let scratch = self.scratch();
        if !remote.download(kind, sha256, &scratch.file.path).await? {
            return Err(StoreError::Corrupt(format!(
                "{} {sha256} is recorded but not in object storage",
                kind.folder()
            )));
        }
        let received = self.seal(scratch).await?;
        if received.sha256 != sha256 {
            return Err(StoreError::Corrupt(format!(
                "the object of {} {sha256} holds other bytes (SHA-256 {})",
                kind.folder(),
                received.sha256
            )));
        }
        self.place(kind, received).await
    }

    pub fn root(&self) -> &Path {
        &self.root
    }

    pub fn path_of(&self, kind: BlobKind, sha256: &str) -> PathBuf {
        self.root.join(kind.folder()).join(sha256)
    }

    /// Where the engine keeps teacher scores between evaluations.
    pub fn teacher_scores_dir(&self) -> PathBuf {
        self.root.join("teacher-scores")
    }

    fn incoming_dir(&self) -> PathBuf {
        self.root.join("incoming")
    }

    pub async fn begin(&self) -> Result<Incoming, StoreError> {
        let path = self.incoming_dir().join(uuid::Uuid::now_v7().to_string());
        let (chunks, rx) = tokio::sync::mpsc::channel(IN_FLIGHT);
        let target = path.clone();
        let writer = tokio::task::spawn_blocking(move || write_and_hash(&target, rx));
        Ok(Incoming {
            file: TempFile { path, keep: false },
            bytes: 0,
            chunks,
            writer,
        })
    }

    pub fn scratch(&self) -> Scratch {
        Scratch {
            file: TempFile {
                path: self.incoming_dir().join(uuid::Uuid::now_v7().to_string()),
                keep: false,
            },
        }
    }

    /// A scratch file, once written, as a received upload.
    pub async fn seal(&self, scratch: Scratch) -> Result<Received, StoreError> {
        let path = scratch.file.path.clone();
        let (sha256, bytes) = tokio::task::spawn_blocking(move || hash_file(&path))
            .await
            .map_err(StoreError::Writer)??;
        Ok(Received {
            file: scratch.file,
            sha256,
            bytes,
        })
    }

    /// Moves a received file to its content address. A file already there
    /// holds the same bytes, so the new copy is dropped; a blob that had
    /// gone missing from disk is restored by it.
    pub async fn commit(&self, kind: BlobKind, received: Received) -> Result<PathBuf, StoreError> {
        let sha256 = received.sha256.clone();
        let target = self.place(kind, received).await?;
        if let Some(remote) = &self.remote {
            remote.upload(kind, &sha256, &target).await?;
        }
        Ok(target)
    }

    /// Moves a received file to its local address, unless one is there.
    async fn place(&self, kind: BlobKind, mut received: Received) -> Result<PathBuf, StoreError> {
        let target = self.path_of(kind, &received.sha256);
        if !fs::try_exists(&target).await? {
            fs::rename(received.path(), &target).await?;
            received.file.keep = true;
            sync_dir(target.parent().expect("blobs live in a folder")).await?;
        }
        Ok(target)
    }

    /// Bytes free for us on the disk that holds the data dir.
    pub fn free_bytes(&self) -> std::io::Result<u64> {
        let s = rustix::fs::statvfs(&self.root)?;
        Ok(s.f_bavail.saturating_mul(s.f_frsize))
    }

    /// Writes, syncs and removes a small file where uploads land, to learn
    /// that the store takes writes (a full or read-only disk does not).
    pub async fn probe_writable(&self) -> std::io::Result<()> {
        let path = self
            .incoming_dir()
            .join(format!("probe-{}", uuid::Uuid::now_v7()));
        let file = TempFile { path, keep: false };
        let target = file.path.clone();
        tokio::task::spawn_blocking(move || {
            use std::io::Write;
            let mut f = std::fs::File::create(&target)?;
            f.write_all(b"proctor")?;
            f.sync_all()
        })
        .await
        .map_err(std::io::Error::other)??;
        drop(file);
        if let Some(remote) = &self.remote {
            remote.probe().await.map_err(std::io::Error::other)?;
        }
        Ok(())
    }

    /// Whether the blob of a stored record is stored: on disk, or in object
    /// storage when the blobs live there (a process fetches its copy on use).
    pub async fn exists(&self, kind: BlobKind, sha256: &str) -> Result<bool, StoreError> {
        match &self.remote {
            Some(remote) => remote.has(kind, sha256).await,
            None => Ok(fs::try_exists(self.path_of(kind, sha256)).await?),
        }
    }

    /// Clears temporary files no upload holds: all of them at start (a
    /// crash interrupted them), and later those untouched for `older_than`.
    pub async fn sweep_incoming(&self, older_than: Option<Duration>) -> Result<u64, StoreError> {
        let mut dir = fs::read_dir(self.incoming_dir()).await?;
        let now = SystemTime::now();
        let mut removed = 0;
        while let Some(entry) = dir.next_entry().await? {
            let stale = match older_than {
                None => true,
                Some(age) => entry
                    .metadata()
                    .await
                    .and_then(|m| m.modified())
                    .is_ok_and(|t| now.duration_since(t).unwrap_or_default() >= age),
            };
            if stale && fs::remove_file(entry.path()).await.is_ok() {
                removed += 1;
            }
        }
        Ok(removed)
    }

    /// Removes a stored blob (its record is gone); a file already gone is fine.
    /// Copies other processes fetched stay until their data dir goes; no
    /// record names them any more.
    pub async fn remove(&self, kind: BlobKind, sha256: &str) -> Result<(), StoreError> {
        if let Some(remote) = &self.remote {
            remote.delete(kind, sha256).await?;
        }
        match fs::remove_file(self.path_of(kind, sha256)).await {
            Err(e) if e.kind() != std::io::ErrorKind::NotFound => Err(e.into()),
            _ => Ok(()),
        }
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
            file,
            bytes,
            chunks,
            writer,
        } = self;
        drop(chunks);
        let sha256 = writer.await??;
        Ok(Received {
            file,
            sha256,
            bytes,
        })
    }
}
