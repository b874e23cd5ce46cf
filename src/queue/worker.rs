//! Workers: claim, run in a child, record progress, write the outcome.

use std::collections::HashMap;
use std::path::PathBuf;
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::{Arc, Mutex};
use std::time::Duration;

use tokio::sync::{Notify, watch};
use tokio::task::JoinHandle;
use tokio_util::sync::CancellationToken;
use tracing::Instrument;
use uuid::Uuid;

use super::child::{self, Ended, Limits};
use super::protocol::{FailureKind, Message, Task};
use crate::engine::settings::Settings;
use crate::engine::{DatasetRef, Job, ModelRef};
use crate::problem::problem;
use crate::store::{BlobKind, EvaluationRecord, Progress, Store, StoreError};

#[derive(Debug, Clone)]
pub struct QueueConfig {
    /// The binary to start children from (this one).
    pub exe: PathBuf,
    pub limits: Limits,
    pub workers: usize,
    pub offline_threads: usize,
}

struct Inner {
    store: Store,
    config: QueueConfig,
    instance: Uuid,
    wake: Notify,
    running: Mutex<HashMap<Uuid, CancellationToken>>,
    shutdown: CancellationToken,
    alive: AtomicUsize,
    handles: Mutex<Vec<JoinHandle<()>>>,
}

/// A handle on the queue, cheap to clone into every request.
#[derive(Clone)]
pub struct Queue {
    inner: Arc<Inner>,
}

impl Queue {
    /// Starts the workers. Evaluations a dead process left running are
    /// recovered first.
    pub async fn start(store: Store, config: QueueConfig) -> Result<Queue, StoreError> {
        let (requeued, failed) = store.recover_interrupted().await?;
        if requeued + failed > 0 {
            tracing::info!(
                requeued,
                failed,
                "recovered evaluations interrupted by a restart"
            );
        }
        let inner = Arc::new(Inner {
            store,
            config,
            instance: Uuid::now_v7(),
            wake: Notify::new(),
            running: Mutex::new(HashMap::new()),
            shutdown: CancellationToken::new(),
            alive: AtomicUsize::new(0),
            handles: Mutex::new(Vec::new()),
        });
        let handles = (0..inner.config.workers.max(1))
            .map(|n| tokio::spawn(worker(inner.clone(), n)))
            .collect();
        *inner.handles.lock().unwrap_or_else(|p| p.into_inner()) = handles;
        Ok(Queue { inner })
    }

    /// Tells an idle worker that a new evaluation is queued.
    pub fn wake(&self) {
        self.inner.wake.notify_one();
    }

    /// Stops a running evaluation's child, if this process runs it.
    pub fn stop(&self, id: Uuid) {
        if let Some(token) = self.inner.running().get(&id) {
            token.cancel();
        }
    }

    pub fn workers_alive(&self) -> bool {
        self.inner.alive.load(Ordering::Relaxed) > 0
    }

    /// Runs an engine check (an upload or an evaluation about to be queued)
    /// in a child under the evaluation limits.
    pub async fn check(&self, task: &Task) -> std::io::Result<Ended> {
        let never = CancellationToken::new();
        child::run(
            &self.inner.config.exe,
            task,
            &self.inner.config.limits,
            &never,
            |_, _, _| {},
        )
        .await
    }

    /// Stops the workers: running evaluations are put back in the queue.
    pub async fn shutdown(&self) {
        self.inner.shutdown.cancel();
        let handles =
            std::mem::take(&mut *self.inner.handles.lock().unwrap_or_else(|p| p.into_inner()));
        for h in handles {
            let _ = h.await;
        }
    }
}

impl Inner {
    /// Tokens of the evaluations this process runs now; a poisoned lock
    /// still holds a usable map.
    fn running(&self) -> std::sync::MutexGuard<'_, HashMap<Uuid, CancellationToken>> {
        self.running.lock().unwrap_or_else(|p| p.into_inner())
    }
}

async fn worker(inner: Arc<Inner>, n: usize) {
    inner.alive.fetch_add(1, Ordering::Relaxed);
    let owner = format!("{}/{n}", inner.instance);
    while !inner.shutdown.is_cancelled() {
        match inner.store.claim_next(&owner).await {
            Ok(Some(record)) => run_one(&inner, &owner, record).await,
            Ok(None) => {
                tokio::select! {
                    _ = inner.wake.notified() => {}
                    _ = tokio::time::sleep(Duration::from_millis(500)) => {}
                    _ = inner.shutdown.cancelled() => {}
                }
            }
            Err(e) => {
                tracing::error!(error = %e, "claiming an evaluation failed");
                tokio::time::sleep(Duration::from_secs(1)).await;
            }
        }
    }
    inner.alive.fetch_sub(1, Ordering::Relaxed);
}

async fn run_one(inner: &Arc<Inner>, owner: &str, record: EvaluationRecord) {
    let id = record.id;
    let span = tracing::info_span!("evaluation", %id, attempt = record.attempts);
    let token = inner.shutdown.child_token();
    inner.running().insert(id, token.clone());
    let outcome = execute(inner, owner, &record, &token)
        .instrument(span)
        .await;
    inner.running().remove(&id);
    if let Err(e) = outcome {
        tracing::error!(error = %e, "recording an evaluation's outcome failed");
    }
}

async fn execute(
    inner: &Arc<Inner>,
    owner: &str,
    record: &EvaluationRecord,
    token: &CancellationToken,
) -> Result<(), StoreError> {
    let store = &inner.store;
    let id = record.id;
    let students = store.students_of(id).await?;
    let parts = JobParts {
        id,
        project: &record.project,
        created_at: record.created_at,
        teacher: record.teacher,
        students: &students,
        dataset: record.dataset,
        request: &record.request,
    };
    let job = match build_job(store, parts).await {
        Ok(job) => job,
        Err(e) => {
            tracing::error!(error = %e, "preparing the evaluation failed");
            let p = problem(
                500,
                "the evaluation could not be prepared; see the service log",
                None,
            );
            store.finish_failed(id, owner, &p).await?;
            return Ok(());
        }
    };
    let task = Task::Evaluate {
        job: Box::new(job),
        teacher_cache: Some(store.blobs.teacher_scores_dir()),
        offline_threads: inner.config.offline_threads,
        cpu_lock: Some(store.blobs.cpu_lock_path()),
    };
    let (tx, mut rx) = watch::channel(None::<Progress>);
    let writer = {
        let store = store.clone();
        let owner = owner.to_string();
        tokio::spawn(async move {
            while rx.changed().await.is_ok() {
                let p = rx.borrow_and_update().clone();
                if let Some(p) = p
                    && let Err(e) = store.set_progress(id, &owner, &p).await
                {
                    tracing::warn!(error = %e, "recording progress failed");
                }
            }
        })
    };
    let ended = child::run(
        &inner.config.exe,
        &task,
        &inner.config.limits,
        token,
        |stage, done, total| {
            let stage = serde_json::to_value(stage)
                .ok()
                .and_then(|v| v.as_str().map(str::to_string));
            let _ = tx.send(Some(Progress { stage, done, total }));
        },
    )
    .await;
    drop(tx);
    let _ = writer.await;
    let limit_s = inner.config.limits.wall_time.as_secs();
    match ended {
        Ok(Ended::Answer(Message::Report(report))) => {
            if !store.finish_succeeded(id, owner, &report).await? {
                tracing::info!("finished after being canceled; the report is dropped");
            }
        }
        Ok(Ended::Answer(Message::Failed(f))) => {
            let status = match f.kind {
                FailureKind::Io => 500,
                _ => 422,
            };
            store
                .finish_failed(id, owner, &problem(status, &f.message, f.field.as_deref()))
                .await?;
        }
        Ok(Ended::Answer(other)) => {
            tracing::error!(
                ?other,
                "the engine process answered an evaluation with something else"
            );
            store
                .finish_failed(id, owner, &problem(500, "the engine gave no report", None))
                .await?;
        }
        Ok(Ended::Canceled) if inner.shutdown.is_cancelled() => {
            tracing::info!("shutting down: the evaluation goes back to the queue");
            store.requeue(id, owner).await?;
        }
        Ok(Ended::Canceled) => tracing::info!("canceled"),
        Ok(Ended::TimedOut) => {
            let detail = format!("the evaluation took longer than its limit of {limit_s} s");
            store
                .finish_failed(id, owner, &problem(422, &detail, None))
                .await?;
        }
        Ok(Ended::Crashed(how)) => {
            store
                .finish_failed(id, owner, &problem(422, &how, None))
                .await?;
        }
        Err(e) => {
            tracing::error!(error = %e, "starting the engine process failed");
            let p = problem(500, "the engine process could not be started", None);
            store.finish_failed(id, owner, &p).await?;
        }
    }
    Ok(())
}

/// What identifies an evaluation's inputs, stored or about to be.
pub struct JobParts<'a> {
    pub id: Uuid,
    pub project: &'a str,
    pub created_at: time::OffsetDateTime,
    pub teacher: Uuid,
    pub students: &'a [Uuid],
    pub dataset: Uuid,
    /// The request as applied; its settings fields are read.
    pub request: &'a serde_json::Value,
}

/// Everything the engine needs, from the stored records.
pub async fn build_job(store: &Store, parts: JobParts<'_>) -> Result<Job, StoreError> {
    let missing =
        |what: String| StoreError::Corrupt(format!("{what} is referenced but not stored"));
    let model = |id: Uuid| async move {
        let m = store
            .model(id)
            .await?
            .ok_or_else(|| missing(format!("model {id}")))?;
        Ok::<_, StoreError>(ModelRef {
            path: store.blobs.path_of(BlobKind::Model, &m.sha256),
            id: m.id,
            name: m.name,
            sha256: m.sha256,
            bytes: m.bytes,
        })
    };
    let teacher = model(parts.teacher).await?;
    let mut students = Vec::with_capacity(parts.students.len());
    for &sid in parts.students {
        students.push(model(sid).await?);
    }
    let d = store
        .dataset(parts.dataset)
        .await?
        .ok_or_else(|| missing(format!("dataset {}", parts.dataset)))?;
    Ok(Job {
        evaluation: parts.id,
        project: parts.project.to_string(),
        created_at: parts.created_at,
        teacher,
        students,
        dataset: DatasetRef {
            path: store.blobs.path_of(BlobKind::Dataset, &d.sha256),
            id: d.id,
            name: d.name,
            sha256: d.sha256,
        },
        settings: serde_json::from_value::<Settings>(parts.request.clone())?,
    })
}
