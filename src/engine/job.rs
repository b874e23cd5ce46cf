//! What an evaluation is given: the stored files and settings (`Job`), how
//! it may use the machine (`Options`, `CpuLock`), and where it reports
//! progress (`Hooks`). All of it crosses into the engine's child process as
//! JSON, so it holds paths and values, never open handles.

use std::path::PathBuf;

use serde::{Deserialize, Serialize};
use time::OffsetDateTime;
use uuid::Uuid;

use super::environment::WorkerName;
use super::error::EngineResult;
use super::settings::Settings;

/// A stored model file, as the service hands it to the engine.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct ModelRef {
    pub id: Uuid,
    pub name: String,
    pub sha256: String,
    pub bytes: u64,
    pub path: PathBuf,
}

/// A stored evaluation set.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct DatasetRef {
    pub id: Uuid,
    pub name: String,
    pub sha256: String,
    pub path: PathBuf,
}

/// Everything an evaluation needs.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct Job {
    pub evaluation: Uuid,
    pub project: String,
    #[serde(with = "time::serde::rfc3339")]
    pub created_at: OffsetDateTime,
    pub teacher: ModelRef,
    /// The student in production that every candidate is compared with.
    #[serde(default)]
    pub baseline: Option<ModelRef>,
    pub students: Vec<ModelRef>,
    pub dataset: DatasetRef,
    pub settings: Settings,
    /// When a worker claimed this attempt (for the report's queued time).
    #[serde(default, with = "time::serde::rfc3339::option")]
    pub claimed_at: Option<OffsetDateTime>,
    /// The worker running it, when that is a `proctor worker` process
    /// rather than the service itself (the report names it).
    #[serde(default)]
    pub worker: Option<WorkerName>,
}

impl Job {
    /// The output the request names for a model, if any.
    pub fn output_of(&self, model: &ModelRef) -> Option<&str> {
        self.settings
            .output
            .as_ref()
            .and_then(|o| o.for_model(model.id))
    }
}

/// How the engine may use the machine.
#[derive(Debug, Clone, Default, Serialize, Deserialize)]
pub struct Options {
    /// Where the teacher's scores are kept between evaluations.
    pub teacher_cache: Option<PathBuf>,
    /// Models run at once in the bulk pass; 0 means one per logical core.
    pub bulk_threads: usize,
}

/// The stages an evaluation goes through (api.md, "Progress stages").
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Stage {
    /// Queued, not yet claimed by a worker.
    Waiting,
    Loading,
    /// The bulk pass: every model over the whole set at the batch size.
    Bulk,
    /// The timed rounds: one sample at a time, one model at a time.
    Timing,
    Scoring,
}

impl Stage {
    pub const ALL: [Stage; 5] = [
        Stage::Waiting,
        Stage::Loading,
        Stage::Bulk,
        Stage::Timing,
        Stage::Scoring,
    ];

    pub fn as_str(self) -> &'static str {
        match self {
            Stage::Waiting => "waiting",
            Stage::Loading => "loading",
            Stage::Bulk => "bulk",
            Stage::Timing => "timing",
            Stage::Scoring => "scoring",
        }
    }

    pub fn parse(s: &str) -> Option<Stage> {
        Stage::ALL.into_iter().find(|st| st.as_str() == s)
    }
}

/// How an evaluation shares the machine with others: bulk passes may run
/// side by side, but timed rounds must not share the CPU with anyone's
/// inference. Each call holds until the lock is granted.
pub trait CpuLock: Sync {
    fn shared(&self) -> EngineResult<()>;
    fn exclusive(&self) -> EngineResult<()>;
    /// Lets others in again (scoring needs no lock).
    fn release(&self) -> EngineResult<()>;
}

/// The lock of an evaluation that is alone on the machine.
pub struct Alone;

impl CpuLock for Alone {
    fn shared(&self) -> EngineResult<()> {
        Ok(())
    }
    fn exclusive(&self) -> EngineResult<()> {
        Ok(())
    }
    fn release(&self) -> EngineResult<()> {
        Ok(())
    }
}

/// Progress reports, and the machine's CPU lock.
pub struct Hooks<'a> {
    pub progress: &'a (dyn Fn(Stage, u64, u64) + Sync),
    pub cpu: &'a dyn CpuLock,
}
