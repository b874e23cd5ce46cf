//! Readiness (api.md, "Service"): the database answers, the blob store
//! takes writes with at least 1 GiB free, and a worker is alive. And the
//! figures `/metrics` serves.

use crate::error::AppError;
use crate::service::App;
use crate::service::uploads::MIN_FREE;
use crate::store::Status;
use crate::telemetry::StoredFigures;

fn not_ready(detail: String) -> AppError {
    AppError::Unavailable {
        detail,
        retry_after: None,
    }
}

impl App {
    /// Ok when the service can take and run evaluations; the reason otherwise.
    pub async fn readiness(&self) -> Result<(), AppError> {
        if !self.store.ping().await {
            return Err(not_ready("the database does not answer".into()));
        }
        if let Err(e) = self.store.blobs.probe_writable().await {
            return Err(not_ready(format!(
                "the blob store takes no writes ({})",
                e.kind()
            )));
        }
        match self.store.blobs.free_bytes() {
            Ok(free) if free >= MIN_FREE => {}
            Ok(free) => {
                return Err(not_ready(format!(
                    "the disk holding the data has {} MiB free, under the {} MiB uploads need",
                    free >> 20,
                    MIN_FREE >> 20
                )));
            }
            Err(e) => {
                return Err(not_ready(format!(
                    "the disk's free space is unknown ({})",
                    e.kind()
                )));
            }
        }
        // A worker of this process, or one elsewhere on the shared queue.
        if self.workers.alive() == 0 && self.live_workers().await?.is_empty() {
            return Err(not_ready("no evaluation worker is running".into()));
        }
        Ok(())
    }

    /// The Prometheus text of `GET /metrics`.
    pub async fn metrics_text(&self) -> Result<String, AppError> {
        let counts = self.store.status_counts().await?;
        let queued = counts
            .iter()
            .find(|(s, _)| *s == Status::Queued)
            .map_or(0, |(_, n)| *n);
        let stored = StoredFigures {
            evaluations: counts.iter().map(|(s, n)| (s.as_str(), *n)).collect(),
            queued,
            stored_bytes: self.store.stored_bytes().await?,
        };
        Ok(self.telemetry.render(&stored))
    }
}
