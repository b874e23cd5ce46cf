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

use time::OffsetDateTime;

use crate::engine::Job;
use crate::engine::environment::WorkerName;
use crate::error::AppError;
use crate::labels::Labels;
use crate::problem::Problem;
use crate::sandbox::{Sandbox, SandboxError};
use crate::store::{
    EvaluationRecord, Lease, Process, Progress, Status, Store, StoreError, WorkSignals,
    WorkerRecord,
};
use crate::telemetry::Telemetry;

/// How this process's workers take work.
#[derive(Debug, Clone)]
pub struct WorkerSetup {
    /// Evaluations run at once: one worker each (0: this process only serves).
    pub slots: usize,
    /// The labels each worker carries (`runs_on` matches them).
    pub labels: Labels,
    /// How long a claim holds without renewal.
    pub lease: Duration,
    /// Whether the workers run apart from the service (`proctor worker`):
    /// reports then name the worker.
    pub apart: bool,
}

impl WorkerSetup {
    /// How often a worker renews its lease and its heartbeat: often enough
    /// that a lease outlives a few missed renewals, and that a cancel made
    /// in another process stops the run within a couple of seconds.
    pub fn beat(&self) -> Duration {
        (self.lease / 5).clamp(Duration::from_millis(100), Duration::from_secs(2))
    }
}

struct Inner {
    store: Store,
    sandbox: Sandbox,
    telemetry: Arc<Telemetry>,
    setup: WorkerSetup,
    host: Host,
    wake: Notify,
    running: Mutex<HashMap<Uuid, CancellationToken>>,
    shutdown: CancellationToken,
    alive: AtomicUsize,
    handles: Mutex<Vec<JoinHandle<()>>>,
}

/// The machine and process the workers run in, as the workers list shows them.
#[derive(Debug, Clone)]
struct Host {
    hostname: String,
    cpu: String,
    process: Process,
}

impl Host {
    fn this_one() -> Host {
        let namespace = std::fs::read_link("/proc/self/ns/pid")
            .map_or_else(|_| "unknown".into(), |p| p.display().to_string());
        Host {
            hostname: proc_text("/proc/sys/kernel/hostname"),
            cpu: crate::engine::environment::cpu_model(),
            process: Process {
                host_key: format!(
                    "{} {namespace}",
                    proc_text("/proc/sys/kernel/random/boot_id")
                ),
                pid: std::process::id(),
            },
        }
    }
}

/// A one-line file of /proc, or "unknown".
fn proc_text(path: &str) -> String {
    std::fs::read_to_string(path)
        .map(|t| t.trim().to_string())
        .ok()
        .filter(|t| !t.is_empty())
        .unwrap_or_else(|| "unknown".into())
}

/// Whether no process has this id here (signal 0 checks without sending).
/// Our own id is gone too: this process registers its workers only after
/// looking, so a row with its id is an earlier process's.
fn process_gone(pid: u32) -> bool {
    let Ok(pid) = i32::try_from(pid) else {
        return true;
    };
    if pid as u32 == std::process::id() {
        return true;
    }
    // SAFETY: kill with signal 0 only checks that the process exists.
    let r = unsafe { libc::kill(pid, 0) };
    r != 0 && std::io::Error::last_os_error().raw_os_error() == Some(libc::ESRCH)
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
    /// Starts `setup.slots` workers. Claims held by processes of this
    /// machine that are gone end first, and lapsed claims go back to the
    /// queue, so a restart picks up what a crash left.
    pub async fn start(
        store: Store,
        sandbox: Sandbox,
        telemetry: Arc<Telemetry>,
        setup: WorkerSetup,
    ) -> Result<Workers, StoreError> {
        let host = Host::this_one();
        if setup.slots > 0 {
            store
                .end_leases_of_gone_workers(&host.process.host_key, process_gone)
                .await?;
            let (requeued, failed) = store.reclaim_lapsed(OffsetDateTime::now_utc()).await?;
            if requeued + failed > 0 {
                tracing::info!(
                    requeued,
                    failed,
                    "recovered evaluations whose worker stopped"
                );
            }
        }
        let inner = Arc::new(Inner {
            store,
            sandbox,
            telemetry,
            host,
            wake: Notify::new(),
            running: Mutex::new(HashMap::new()),
            shutdown: CancellationToken::new(),
            alive: AtomicUsize::new(0),
            handles: Mutex::new(Vec::new()),
            setup,
        });
        if inner.setup.slots > 0
            && let Some(signals) = inner.store.work_signals().await?
        {
            handles_of(&inner).push(tokio::spawn(relay_signals(inner.clone(), signals)));
        }
        // Registered before they start, so that a caller who sees this
        // return sees the workers listed.
        let mut handles = Vec::with_capacity(inner.setup.slots);
        for _ in 0..inner.setup.slots {
            let now = OffsetDateTime::now_utc();
            let lease = Lease {
                worker: Uuid::now_v7(),
                labels: inner.setup.labels.clone(),
                term: inner.setup.lease,
            };
            let me = WorkerRecord {
                id: lease.worker,
                hostname: inner.host.hostname.clone(),
                cpu: inner.host.cpu.clone(),
                labels: lease.labels.clone(),
                started_at: now,
                heartbeat_at: now,
                evaluation: None,
            };
            inner
                .store
                .register_worker(&me, &inner.host.process)
                .await?;
            handles.push(tokio::spawn(worker(inner.clone(), lease)));
        }
        handles_of(&inner).extend(handles);
        Ok(Workers { inner })
    }

    /// Tells an idle worker that a new evaluation is queued.
    pub fn wake(&self) {
        self.inner.wake.notify_one();
    }

    /// Stops a running evaluation's child, if this process runs it (one
    /// run elsewhere stops at its worker's next renewal).
    pub fn stop(&self, id: Uuid) {
        if let Some(token) = self.inner.running().get(&id) {
            token.cancel();
        }
    }

    /// Workers of this process whose task is running.
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

fn handles_of(inner: &Inner) -> std::sync::MutexGuard<'_, Vec<JoinHandle<()>>> {
    inner.handles.lock().unwrap_or_else(|p| p.into_inner())
}

/// Wakes an idle worker of this process whenever another process queues
/// an evaluation; the poll remains for whatever a signal misses.
async fn relay_signals(inner: Arc<Inner>, mut signals: WorkSignals) {
    loop {
        tokio::select! {
            got = signals.next() => match got {
                Ok(()) => inner.wake.notify_one(),
                Err(e) => {
                    tracing::warn!(error = %e, "listening for queued work failed");
                    tokio::time::sleep(Duration::from_secs(1)).await;
                }
            },
            _ = inner.shutdown.cancelled() => return,
        }
    }
}

async fn worker(inner: Arc<Inner>, lease: Lease) {
    let _alive = Alive::count(&inner.alive);
    let mut last_beat = std::time::Instant::now();
    while !inner.shutdown.is_cancelled() {
        if last_beat.elapsed() >= inner.setup.beat() {
            last_beat = std::time::Instant::now();
            idle_beat(&inner, &lease).await;
        }
        match inner.store.claim_next(&lease).await {
            Ok(Some(record)) => {
                run_one(&inner, &lease, record).await;
                last_beat = std::time::Instant::now();
                idle_beat(&inner, &lease).await;
            }
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
    if let Err(e) = inner.store.remove_worker(lease.worker).await {
        tracing::warn!(error = %e, "removing the worker from the list failed");
    }
}

/// An idle worker's beat: it is alive, and claims that lapsed anywhere go
/// back to the queue.
async fn idle_beat(inner: &Inner, lease: &Lease) {
    if let Err(e) = inner.store.worker_heartbeat(lease.worker, None).await {
        tracing::warn!(error = %e, "the worker's heartbeat failed");
    }
    match inner.store.reclaim_lapsed(OffsetDateTime::now_utc()).await {
        Ok((requeued, failed)) if requeued + failed > 0 => {
            tracing::info!(requeued, failed, "took back evaluations whose lease lapsed");
        }
        Ok(_) => {}
        Err(e) => tracing::warn!(error = %e, "taking back lapsed evaluations failed"),
    }
}

/// Renews the lease until the run has ended (`done`, which comes after
/// a shutdown's requeue, so the claim holds until it is given back); stops
/// the run once the lease is no longer this worker's (canceled elsewhere,
/// or lapsed), or when renewals have failed for a whole term, after which
/// another worker may hold it.
async fn keep_lease(
    store: Store,
    lease: Lease,
    id: Uuid,
    beat: Duration,
    run: CancellationToken,
    done: CancellationToken,
) {
    let mut renewed = std::time::Instant::now();
    loop {
        tokio::select! {
            _ = tokio::time::sleep(beat) => {}
            _ = done.cancelled() => return,
        }
        match store.renew(id, &lease).await {
            Ok(true) => renewed = std::time::Instant::now(),
            Ok(false) => {
                tracing::info!("the lease is no longer ours (canceled, or it lapsed): stopping");
                run.cancel();
                return;
            }
            Err(e) if renewed.elapsed() >= lease.term => {
                tracing::error!(error = %e, "the lease could not be renewed for its whole term: stopping");
                run.cancel();
                return;
            }
            Err(e) => tracing::warn!(error = %e, "renewing the lease failed"),
        }
        if let Err(e) = store.worker_heartbeat(lease.worker, Some(id)).await {
            tracing::warn!(error = %e, "the worker's heartbeat failed");
        }
    }
}

async fn run_one(inner: &Arc<Inner>, lease: &Lease, record: EvaluationRecord) {
    let id = record.id;
    let span = tracing::info_span!("evaluation", %id, attempt = record.attempts);
    tracing::info!(%id, attempt = record.attempts, "claimed");
    if let Err(e) = inner.store.worker_heartbeat(lease.worker, Some(id)).await {
        tracing::warn!(error = %e, "the worker's heartbeat failed");
    }
    let token = inner.shutdown.child_token();
    inner.running().insert(id, token.clone());
    // The lease is kept from the claim on, through the test hold too.
    let done = CancellationToken::new();
    let keeper = tokio::spawn(keep_lease(
        inner.store.clone(),
        lease.clone(),
        id,
        inner.setup.beat(),
        token.clone(),
        done.clone(),
    ));
    inner.sandbox.hold_before_start().await;
    let outcome = execute(inner, lease, &record, &token)
        .instrument(span)
        .await;
    done.cancel();
    let _ = keeper.await;
    inner.running().remove(&id);
    if let Err(e) = outcome {
        tracing::error!(error = %e, "recording an evaluation's outcome failed");
    }
}

async fn execute(
    inner: &Arc<Inner>,
    lease: &Lease,
    record: &EvaluationRecord,
    token: &CancellationToken,
) -> Result<(), StoreError> {
    let store = &inner.store;
    let owner = &lease.holder();
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
            claimed_at: Some(OffsetDateTime::now_utc()),
            worker: inner.setup.apart.then(|| WorkerName {
                id: lease.worker,
                hostname: inner.host.hostname.clone(),
                labels: lease.labels.clone(),
            }),
            ..job
        },
        // A record that names what is not stored will not heal; object
        // storage or the database out of reach may: the evaluation goes
        // back with its attempt counted.
        Err(e @ StoreError::Corrupt(_)) => {
            tracing::error!(error = %e, "preparing the evaluation failed");
            let p = AppError::from(e).problem();
            store.finish_failed(id, owner, &p).await?;
            return Ok(());
        }
        Err(e) if record.attempts < crate::store::MAX_ATTEMPTS => {
            tracing::error!(error = %e, "preparing the evaluation failed; it goes back to the queue");
            store.requeue(id, owner, false).await?;
            return Ok(());
        }
        Err(e) => {
            tracing::error!(error = %e, "preparing the evaluation failed on its last attempt");
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
            let _ = tx.send(Some(Progress {
                stage,
                done,
                total,
                waiting_for: None,
            }));
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
            store.requeue(id, owner, true).await?;
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
