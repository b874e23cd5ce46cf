//! The machine-wide lease between evaluations, as an advisory lock on one
//! file in the data dir: shared while an offline pass runs, exclusive for
//! latency rounds. The kernel drops the lock when the child exits, however
//! it exits, so a crashed evaluation never leaves the machine locked.

use std::fs::File;
use std::os::fd::AsRawFd;
use std::path::Path;

use crate::engine::{CpuLease, EngineError, EngineResult};

pub struct FileLease {
    file: File,
}

impl FileLease {
    pub fn open(path: &Path) -> EngineResult<FileLease> {
        let file = std::fs::OpenOptions::new()
            .create(true)
            .truncate(false)
            .write(true)
            .open(path)
            .map_err(EngineError::io("opening the CPU lock"))?;
        Ok(FileLease { file })
    }

    fn lock(&self, how: libc::c_int) -> EngineResult<()> {
        // SAFETY: flock on a descriptor this struct owns for its whole life.
        let rc = unsafe { libc::flock(self.file.as_raw_fd(), how) };
        if rc == 0 {
            Ok(())
        } else {
            Err(EngineError::Io {
                context: "taking the CPU lock".into(),
                source: std::io::Error::last_os_error(),
            })
        }
    }
}

impl CpuLease for FileLease {
    fn shared(&self) -> EngineResult<()> {
        self.lock(libc::LOCK_SH)
    }

    fn exclusive(&self) -> EngineResult<()> {
        self.lock(libc::LOCK_EX)
    }
}
