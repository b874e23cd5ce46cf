//! What the service does, between the HTTP edge and the store: uploads,
//! evaluations, reports. Handlers call these functions and hold no logic.

pub mod access;
mod dashboard;
mod evaluations;
mod health;
mod housekeeping;
pub mod limits;
mod projects;
mod uploads;
mod workers;

pub use access::Caller;
pub use dashboard::{EvaluationView, ListView, ReportView, TeacherView};
pub use evaluations::{BaselineChoice, EvaluationRequest, ListQuery};
pub use housekeeping::Housekeeping;
pub use projects::SetBaseline;
pub(crate) use uploads::drain;
pub use uploads::{Upload, Uploaded};

use std::sync::Arc;

use tokio::sync::Semaphore;

use crate::queue::Workers;
use crate::sandbox::Sandbox;
use crate::store::Store;
use crate::telemetry::Telemetry;

#[derive(Debug, Clone)]
pub struct ServiceConfig {
    pub max_upload_bytes: u64,
    /// The most bytes of models and sets the service keeps, if bounded.
    pub max_stored_bytes: Option<u64>,
    /// How long an upload may send nothing before it is dropped (408).
    pub upload_idle: std::time::Duration,
}

/// Shared state of the running service, cheap to clone into handlers.
#[derive(Clone)]
pub struct App {
    pub store: Store,
    pub sandbox: Sandbox,
    pub workers: Workers,
    pub config: ServiceConfig,
    /// Uploads that may stream at once; each also holds a writer thread.
    pub uploads: Arc<Semaphore>,
    /// Counters and histograms served at `/metrics`.
    pub telemetry: Arc<Telemetry>,
}
