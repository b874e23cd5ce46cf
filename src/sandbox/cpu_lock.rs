//! The machine-wide CPU lock between evaluations and checks: an advisory
//! lock on one file that every Proctor process of the machine opens
//! (`--cpu-lock`), shared while bulk passes and upload or
//! creation checks run, exclusive for timed rounds. The kernel drops it when
//! its holder exits, however it exits, so a crashed process never leaves
//! the machine locked.

use std::fs::{File, TryLockError};
use std::path::Path;
use std::time::Duration;

use crate::engine::{CpuLock, EngineError, EngineResult};

pub struct FileCpuLock {
    file: File,
}

fn open(path: &Path) -> std::io::Result<File> {
    std::fs::OpenOptions::new()
        .create(true)
        .truncate(false)
        .write(true)
        .open(path)
}

impl FileCpuLock {
    pub fn open(path: &Path) -> EngineResult<FileCpuLock> {
        let file = open(path).map_err(EngineError::io("opening the CPU lock"))?;
        Ok(FileCpuLock { file })
    }
}

fn locking(e: std::io::Error) -> EngineError {
    EngineError::Io {
        context: "taking the CPU lock".into(),
        source: e,
    }
}

impl CpuLock for FileCpuLock {
    fn shared(&self) -> EngineResult<()> {
        self.file.lock_shared().map_err(locking)
    }

    fn exclusive(&self) -> EngineResult<()> {
        // Changing a held lock's mode is platform-dependent; letting go
        // first is what the kernel would do anyway.
        self.file.unlock().map_err(locking)?;
        self.file.lock().map_err(locking)
    }

    fn release(&self) -> EngineResult<()> {
        self.file.unlock().map_err(locking)
    }
}

/// The parent's shared hold for a check child, waited for without blocking
/// a runtime thread. Dropping it lets go.
pub(super) struct SharedHold {
    _file: File,
}

pub(super) async fn hold_shared(path: &Path) -> std::io::Result<SharedHold> {
    let file = open(path)?;
    loop {
        match file.try_lock_shared() {
            Ok(()) => return Ok(SharedHold { _file: file }),
            Err(TryLockError::WouldBlock) => tokio::time::sleep(Duration::from_millis(25)).await,
            Err(TryLockError::Error(e)) => return Err(e),
        }
    }
}
