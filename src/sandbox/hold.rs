//! A test-only hook: hold an evaluation at a chosen stage until a release
//! file appears, so that tests can cancel, kill or stop the service at a
//! known point instead of guessing with huge iteration counts and sleeps.
//! Only debug builds read `PROCTOR_TEST_HOLD_AT`; a release build never
//! holds.

use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, Ordering};
use std::time::Duration;

use serde::{Deserialize, Serialize};

use crate::engine::Stage;

/// The environment variable naming the stage to hold at (debug builds).
pub const HOLD_AT_VARIABLE: &str = "PROCTOR_TEST_HOLD_AT";

/// The file, in the data dir, whose creation releases held evaluations.
pub const RELEASE_FILE: &str = "test-hold.release";

#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct Hold {
    pub stage: Stage,
    pub release: PathBuf,
}

impl Hold {
    /// The hold that this process's environment asks for, in debug builds.
    pub fn from_env(data_dir: &Path) -> Option<Hold> {
        if !cfg!(debug_assertions) {
            return None;
        }
        let stage = std::env::var(HOLD_AT_VARIABLE).ok()?;
        Some(Hold {
            stage: Stage::parse(&stage)?,
            release: data_dir.join(RELEASE_FILE),
        })
    }
}

/// The parent's side, for the one point outside the child: with the hold
/// at `waiting`, a worker that has claimed an evaluation waits here before
/// anything else, so that a test can cancel in that gap.
pub(super) async fn before_start(hold: Option<&Hold>) {
    let Some(hold) = hold.filter(|h| cfg!(debug_assertions) && h.stage == Stage::Waiting) else {
        return;
    };
    while !tokio::fs::try_exists(&hold.release).await.unwrap_or(true) {
        tokio::time::sleep(Duration::from_millis(20)).await;
    }
}

/// The child's side: blocks the first progress report of the held stage
/// until the release file exists.
pub(super) struct Holding {
    hold: Option<Hold>,
    released: AtomicBool,
}

impl Holding {
    pub(super) fn new(hold: Option<Hold>) -> Self {
        Holding {
            hold: hold.filter(|_| cfg!(debug_assertions)),
            released: AtomicBool::new(false),
        }
    }

    pub(super) fn at(&self, stage: Stage) {
        let Some(hold) = &self.hold else { return };
        if stage != hold.stage || self.released.load(Ordering::Relaxed) {
            return;
        }
        while !hold.release.exists() {
            std::thread::sleep(Duration::from_millis(20));
        }
        self.released.store(true, Ordering::Relaxed);
    }
}
