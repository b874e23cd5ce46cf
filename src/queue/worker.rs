//! Workers: claim, run in the sandbox, record progress, write the outcome.

use std::collections::HashMap;
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::{Arc, Mutex};
use std::time::Duration;

use tokio::sync::{Notify, watch};
use tokio::task::JoinHandle;
use tokio_util::sync::CancellationToken;
use tracing::Instrument;
use uuid::Uuid;

use crate::engine::Job;
use crate::error::AppError;
use crate::problem::Problem;
use crate::sandbox::{Sandbox, SandboxError};
use crate::store::{EvaluationRecord, Progress, Status, Store, StoreError};
use crate::telemetry::Telemetry;

struct Inner {
    store: Store,
    sandbox: Sandbox,
    telemetry: Arc<Telemetry>,
    /// Who claims, as written in `claimed_by`: this process and the worker.
    instance: Uuid,
    wake: Notify,
    running: Mutex<HashMap<Uuid, CancellationToken>>,
    shutdown: CancellationToken,
    alive: AtomicUsize,
    handles: Mutex<Vec<JoinHandle<()>>>,
}

/// A handle on this process's workers, cheap to clone into every request.
#[derive(Clone)]
pub struct Workers {
    inner: Arc<Inner>,
}

/// Counts a worker as alive for as long as it is held: dropped however the
/// worker task ends, a panic included, so that readiness stays true.
struct Alive<'a>(&'a AtomicUsize);

impl<'a> Alive<'a> {
    fn count(alive: &'a AtomicUsize) -> Alive<'a> {
        alive.fetch_add(1, Ordering::Relaxed);
        Alive(alive)
    }
}

impl Drop for Alive<'_> {
    fn drop(&mut self) {
        self.0.fetch_sub(1, Ordering::Relaxed);
    }
}

impl Workers {
    /// Starts `count` workers. Evaluations a dead process left running are
    /// recovered first.
    pub async fn start(
        store: Store,
        sandbox: Sandbox,
        telemetry: Arc<Telemetry>,
        count: usize,
    ) -> Result<Workers, StoreError> {
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
            sandbox,
            telemetry,
            instance: Uuid::now_v7(),
            wake: Notify::new(),
            running: Mutex::new(HashMap::new()),
            shutdown: CancellationToken::new(),
            alive: AtomicUsize::new(0),
            handles: Mutex::new(Vec::new()),
        });
        let handles = (0..count.max(1))
            .map(|n| tokio::spawn(worker(inner.clone(), n)))
            .collect();
        *inner.handles.lock().unwrap_or_else(|p| p.into_inner()) = handles;
        Ok(Workers { inner })
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

    pub fn alive(&self) -> usize {
        self.inner.alive.load(Ordering::Relaxed)
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
    let _alive = Alive::count(&inner.alive);
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
}

async fn run_one(inner: &Arc<Inner>, owner: &str, record: EvaluationRecord) {
    let id = record.id;
    let span = tracing::info_span!("evaluation", %id, attempt = record.attempts);
    inner.sandbox.hold_before_start().await;
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
    // A cancel that landed between the claim and the registration of this
    // evaluation's token found nothing to stop: look again now.
    if store
        .evaluation(id)
        .await?
        .is_none_or(|e| e.status != Status::Running)
    {
        tracing::info!("canceled before it started");
        return Ok(());
    }
    let job = match store.job(record).await {
        Ok(job) => Job {
            claimed_at: Some(time::OffsetDateTime::now_utc()),
            ..job
        },
        Err(e) => {
            tracing::error!(error = %e, "preparing the evaluation failed");
            let p = AppError::from(e).problem();
            store.finish_failed(id, owner, &p).await?;
            return Ok(());
        }
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
    let started = std::time::Instant::now();
    let ran = inner
        .sandbox
        .run_evaluation(&job, token, |stage, done, total| {
            let _ = tx.send(Some(Progress { stage, done, total }));
        })
        .await;
    drop(tx);
    let _ = writer.await;
    let seconds = started.elapsed().as_secs_f64();
    match ran {
        Ok(done) => {
            inner
                .telemetry
                .evaluation("succeeded", seconds, Some(&done.report.timings));
            if !store
                .finish_succeeded(id, owner, &done.report, &done.rounds)
                .await?
            {
                tracing::info!("finished after being canceled; the report is dropped");
            }
        }
        Err(SandboxError::Canceled) if inner.shutdown.is_cancelled() => {
            tracing::info!("shutting down: the evaluation goes back to the queue");
            store.requeue(id, owner).await?;
        }
        Err(SandboxError::Canceled) => {
            inner.telemetry.evaluation("canceled", seconds, None);
            tracing::info!("canceled");
        }
        Err(e) => {
            inner.telemetry.evaluation("failed", seconds, None);
            let error = AppError::from(e);
            if error.status_code() >= 500 {
                tracing::error!(cause = %error, "the evaluation failed on our side");
            }
            let problem: Problem = error.problem();
            store.finish_failed(id, owner, &problem).await?;
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[tokio::test]
    async fn a_worker_task_that_panics_is_no_longer_counted_alive() {
        let alive = Arc::new(AtomicUsize::new(0));
        let counted = alive.clone();
        let (started, ready) = tokio::sync::oneshot::channel();
        let task = tokio::spawn(async move {
            let _alive = Alive::count(&counted);
            started.send(()).unwrap();
            panic!("a worker's bug");
        });
        ready.await.unwrap();
        assert!(task.await.unwrap_err().is_panic());
        assert_eq!(alive.load(Ordering::Relaxed), 0);
    }
}
