//! Workers as the API shows them (api.md, "Workers"), and what queued
//! evaluations wait for.

use std::time::Duration;

use uuid::Uuid;

use super::App;
use crate::error::AppError;
use crate::labels;
use crate::store::{EvaluationRecord, Page, Status, WorkerRecord};

/// `GET /v1/workers` lists the workers heard from this recently.
pub(super) const LISTED_FOR: Duration = Duration::from_secs(600);

/// A worker heard from this recently is alive: workers beat every 2 s at
/// most, so this allows a few missed beats.
const LIVE_WITHIN: Duration = Duration::from_secs(10);

impl App {
    /// Workers seen in the last ten minutes, oldest first, one page.
    pub async fn workers_page(
        &self,
        limit: u32,
        cursor: Option<Uuid>,
    ) -> Result<Page<WorkerRecord>, AppError> {
        let seen = self.store.workers_seen_within(LISTED_FOR).await?;
        let mut items: Vec<WorkerRecord> = seen
            .into_iter()
            .filter(|w| cursor.is_none_or(|c| w.id > c))
            .take(limit as usize + 1)
            .collect();
        let next_cursor = (items.len() > limit as usize).then(|| {
            items.truncate(limit as usize);
            items.last().map(|w| w.id.to_string())
        });
        Ok(Page {
            items,
            next_cursor: next_cursor.flatten(),
        })
    }

    /// Workers alive now.
    pub async fn live_workers(&self) -> Result<Vec<WorkerRecord>, AppError> {
        Ok(self.store.workers_seen_within(LIVE_WITHIN).await?)
    }

    /// Marks queued evaluations whose `runs_on` no live worker carries
    /// with the labels they wait for.
    pub async fn note_waiting(&self, records: &mut [EvaluationRecord]) -> Result<(), AppError> {
        let waiting = |r: &EvaluationRecord| {
            r.status == Status::Queued && !r.request.settings.runs_on.is_empty()
        };
        if !records.iter().any(waiting) {
            return Ok(());
        }
        let live = self.live_workers().await?;
        for r in records.iter_mut().filter(|r| waiting(r)) {
            let needs = &r.request.settings.runs_on;
            if !live.iter().any(|w| labels::satisfies(&w.labels, needs)) {
                r.progress.waiting_for = Some(needs.clone());
            }
        }
        Ok(())
    }
}
