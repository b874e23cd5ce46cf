//! What the service tidies on its own, once a minute: temporary upload
//! files no upload holds, evaluations whose lease lapsed, workers silent
//! for ten minutes, finished evaluations past `--keep-days`, and the
//! teacher-score cache beyond `--cache-max-bytes`.

use std::time::Duration;

use time::OffsetDateTime;
use tokio_util::sync::CancellationToken;

use super::App;
use crate::store::BLOBS_STALE_AFTER;

#[derive(Debug, Clone, Default)]
pub struct Housekeeping {
    /// Finished evaluations are kept this long (all of them when `None`).
    pub keep: Option<Duration>,
    /// The teacher-score cache is kept under this size (no bound when `None`).
    pub cache_max_bytes: Option<u64>,
}

const EVERY: Duration = Duration::from_secs(60);

impl App {
    /// One round of tidying; errors are logged, never fatal.
    pub async fn tidy(&self, h: &Housekeeping) {
        match self
            .store
            .blobs
            .sweep_incoming(Some(BLOBS_STALE_AFTER))
            .await
        {
            Ok(0) => {}
            Ok(n) => tracing::info!(
                removed = n,
                "removed temporary upload files no upload holds"
            ),
            Err(e) => tracing::warn!(error = %e, "sweeping temporary upload files failed"),
        }
        // Workers killed without a goodbye leave rows, and with no worker
        // here nobody else may take back what they held.
        let now = OffsetDateTime::now_utc();
        match self.store.reclaim_lapsed(now).await {
            Ok((0, 0)) => {}
            Ok((requeued, failed)) => {
                tracing::info!(requeued, failed, "took back evaluations whose lease lapsed")
            }
            Err(e) => tracing::warn!(error = %e, "taking back lapsed evaluations failed"),
        }
        if let Err(e) = self
            .store
            .forget_workers_silent_for(super::workers::LISTED_FOR)
            .await
        {
            tracing::warn!(error = %e, "forgetting silent workers failed");
        }
        if let Some(keep) = h.keep {
            let cutoff = OffsetDateTime::now_utc() - keep;
            match self.store.delete_finished_before(cutoff).await {
                Ok(0) => {}
                Ok(n) => tracing::info!(
                    deleted = n,
                    "deleted finished evaluations past their keep time"
                ),
                Err(e) => tracing::warn!(error = %e, "deleting old evaluations failed"),
            }
        }
        if let Some(max) = h.cache_max_bytes {
            let dir = self.store.blobs.teacher_scores_dir();
            match tokio::task::spawn_blocking(move || crate::engine::cache::evict(&dir, max)).await
            {
                Ok(Ok(0)) => {}
                Ok(Ok(freed)) => {
                    tracing::info!(freed, "evicted teacher scores past the cache's size")
                }
                Ok(Err(e)) => tracing::warn!(error = %e, "evicting teacher scores failed"),
                Err(e) => tracing::warn!(error = %e, "the eviction task failed"),
            }
        }
    }

    /// Tidies every minute until `stop`.
    pub async fn keep_tidy(self, h: Housekeeping, stop: CancellationToken) {
        loop {
            self.tidy(&h).await;
            tokio::select! {
                _ = tokio::time::sleep(EVERY) => {}
                _ = stop.cancelled() => return,
            }
        }
    }
}
