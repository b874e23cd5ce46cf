//! The one seam between the service and the engine's child process. Every
//! engine task runs in a child of this same binary (`proctor child`) under
//! limits, so that a model that panics, aborts or exhausts memory ends that
//! child only. Callers get typed results; how a child's ending becomes an
//! error is decided here alone (`answer`), and how an error becomes a status
//! in `error`.
//!
//! Checks (upload inspections, preflights) wait for one of a few slots and
//! hold the CPU lock shared while they run, so they never overlap an
//! evaluation's timed rounds; when too many wait, they are refused as busy.

pub mod cpu_lock;
pub mod entry;
pub mod error;
pub mod hold;
mod process;
mod protocol;

use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::sync::atomic::{AtomicUsize, Ordering};
use std::time::Duration;

use tokio::sync::Semaphore;
use tokio_util::sync::CancellationToken;

use crate::engine::dataset::DatasetInfo;
use crate::engine::model::ModelInfo;
use crate::engine::{Job, Options, Stage};
pub use error::SandboxError;
pub use hold::Hold;
pub use process::{CHILD_COMMAND, Limits};
use process::{Death, Ended};
pub use protocol::Evaluated;
use protocol::{FailureKind, Message, Task};

/// How long a client refused as busy is told to wait.
const BUSY_RETRY: Duration = Duration::from_secs(5);

#[derive(Debug, Clone)]
pub struct SandboxConfig {
    /// The binary to start children from (this one).
    pub exe: PathBuf,
    /// Limits of an evaluation's child.
    pub limits: Limits,
    /// Limits of a check's child.
    pub check_limits: Limits,
    /// Check children that may run at once.
    pub check_slots: usize,
    /// Checks that may wait for a slot before new ones are refused.
    pub check_waiting: usize,
    /// The file whose lock keeps timed rounds alone on the CPU.
    pub cpu_lock: PathBuf,
    /// How evaluations may use the machine.
    pub options: Options,
    /// Test builds only: the stage at which evaluations wait.
    pub hold: Option<Hold>,
}

struct Inner {
    config: SandboxConfig,
    slots: Semaphore,
    waiting: AtomicUsize,
}

/// A handle on the engine's child processes, cheap to clone.
#[derive(Clone)]
pub struct Sandbox {
    inner: Arc<Inner>,
}

/// Counts a check as waiting until it is dropped.
struct Waiting<'a>(&'a AtomicUsize);

impl Drop for Waiting<'_> {
    fn drop(&mut self) {
        self.0.fetch_sub(1, Ordering::Relaxed);
    }
}

impl Sandbox {
    pub fn new(config: SandboxConfig) -> Sandbox {
        Sandbox {
            inner: Arc::new(Inner {
                slots: Semaphore::new(config.check_slots.max(1)),
                waiting: AtomicUsize::new(0),
                config,
            }),
        }
    }

    /// Loads, types and plans an uploaded model.
    pub async fn inspect_model(&self, path: &Path) -> Result<ModelInfo, SandboxError> {
        let task = Task::InspectModel {
            path: path.to_owned(),
        };
        match self.check(&task).await? {
            Message::Model(info) => Ok(*info),
            other => Err(unexpected(&other)),
        }
    }

    /// Inlines an uploaded zip bundle's data into a self-contained model at
    /// `out` and inspects it as `inspect_model` would.
    pub async fn inspect_bundle(
        &self,
        bundle: &Path,
        out: &Path,
    ) -> Result<ModelInfo, SandboxError> {
        let task = Task::InspectBundle {
            bundle: bundle.to_owned(),
            out: out.to_owned(),
        };
        match self.check(&task).await? {
            Message::Model(info) => Ok(*info),
            other => Err(unexpected(&other)),
        }
    }

    /// Reads an uploaded evaluation set's headers, lengths and labels.
    pub async fn inspect_dataset(&self, path: &Path) -> Result<DatasetInfo, SandboxError> {
        let task = Task::InspectDataset {
            path: path.to_owned(),
        };
        match self.check(&task).await? {
            Message::Dataset(info) => Ok(info),
            other => Err(unexpected(&other)),
        }
    }

    /// Loads a new evaluation's models to decide what their records left
    /// open (see `engine::fit`).
    pub async fn preflight(&self, job: &Job) -> Result<(), SandboxError> {
        let task = Task::Preflight {
            job: Box::new(job.clone()),
        };
        match self.check(&task).await? {
            Message::Preflighted => Ok(()),
            other => Err(unexpected(&other)),
        }
    }

    /// Runs an evaluation to its report. `cancel` kills the child.
    pub async fn run_evaluation(
        &self,
        job: &Job,
        cancel: &CancellationToken,
        on_progress: impl FnMut(Stage, u64, u64),
    ) -> Result<Evaluated, SandboxError> {
        let c = &self.inner.config;
        let task = Task::Evaluate {
            job: Box::new(job.clone()),
            options: c.options.clone(),
            cpu_lock: c.cpu_lock.clone(),
            hold: c.hold.clone(),
        };
        let ended = process::run(&c.exe, &task, &c.limits, Some(cancel), on_progress).await;
        match answer(ended, &c.limits, "the evaluation")? {
            Message::Evaluated(done) => Ok(*done),
            other => Err(unexpected(&other)),
        }
    }

    /// Test builds only: holds a claimed evaluation before its child starts
    /// when asked to hold at `waiting` (see `hold`).
    pub async fn hold_before_start(&self) {
        hold::before_start(self.inner.config.hold.as_ref()).await;
    }

    /// Checks waiting for a slot now (for readiness and tests).
    pub fn checks_waiting(&self) -> usize {
        self.inner.waiting.load(Ordering::Relaxed)
    }

    /// Runs a check: waits for a slot and the shared CPU lock, then runs the
    /// child under the check limits.
    async fn check(&self, task: &Task) -> Result<Message, SandboxError> {
        let inner = &self.inner;
        let c = &inner.config;
        let waiting = Waiting(&inner.waiting);
        if inner.waiting.fetch_add(1, Ordering::Relaxed) >= c.check_waiting {
            return Err(SandboxError::Busy {
                retry_after: BUSY_RETRY,
            });
        }
        let _slot = inner
            .slots
            .acquire()
            .await
            .map_err(|_| SandboxError::Canceled)?;
        let _cpu = cpu_lock::hold_shared(&c.cpu_lock)
            .await
            .map_err(|e| SandboxError::Fault(format!("taking the CPU lock: {e}")))?;
        drop(waiting);
        let ended = process::run(&c.exe, task, &c.check_limits, None, |_, _, _| {}).await;
        answer(ended, &c.check_limits, "checking the upload")
    }
}

fn unexpected(message: &Message) -> SandboxError {
    SandboxError::Fault(format!(
        "the engine answered with the wrong message: {message:?}"
    ))
}

/// The one place where a child's ending becomes a result or an error.
fn answer(
    ended: std::io::Result<Ended>,
    limits: &Limits,
    what: &str,
) -> Result<Message, SandboxError> {
    let ended = ended.map_err(|e| SandboxError::Fault(format!("running the child: {e}")))?;
    match ended {
        Ended::Answer(Message::Failed(f)) => match f.kind {
            FailureKind::Input => Err(SandboxError::Refused {
                detail: f.message,
                field: f.field,
            }),
            FailureKind::Io => Err(SandboxError::Fault(f.message)),
        },
        Ended::Answer(m) => Ok(m),
        Ended::Canceled => Err(SandboxError::Canceled),
        Ended::TimedOut => Err(SandboxError::refused(format!(
            "{what} took longer than its limit of {} s",
            limits.wall_time.as_secs()
        ))),
        Ended::Died(death) if death.out_of_memory() => {
            let limit = limits
                .memory_bytes
                .map_or("the machine's memory".to_string(), |b| {
                    format!("{} MiB", b >> 20)
                });
            Err(SandboxError::refused(format!(
                "the engine ran out of memory on this input (the limit is {limit})"
            )))
        }
        Ended::Died(death) if death.out_of_cpu_time() => Err(SandboxError::refused(format!(
            "{what} used more CPU time than its limit of {} s on every core",
            limits.wall_time.as_secs()
        ))),
        Ended::Died(death) => Err(SandboxError::Fault(describe(&death))),
    }
}

fn describe(d: &Death) -> String {
    use std::os::unix::process::ExitStatusExt;
    let how = match (d.status.code(), d.status.signal()) {
        (_, Some(sig)) => format!("was killed by signal {sig}"),
        (Some(code), _) => format!("exited with status {code}"),
        _ => "ended".to_string(),
    };
    let unreadable = d
        .unreadable
        .as_deref()
        .map(|u| format!("; its answer did not parse: {u}"))
        .unwrap_or_default();
    format!(
        "the engine process {how} without an answer{unreadable}; its stderr ends: {}",
        d.stderr_tail.trim()
    )
}
