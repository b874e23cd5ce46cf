//! What the service does, between the HTTP edge and the store: uploads,
//! evaluations, reports. Handlers call these functions and hold no logic.

mod dashboard;
mod evaluations;
pub mod limits;
mod projects;
mod uploads;

pub use dashboard::{EvaluationView, ListView, ReportView, TeacherView};
pub use evaluations::{BaselineChoice, EvaluationRequest, ListQuery};
pub use projects::SetBaseline;
pub use uploads::{Upload, Uploaded};

use crate::queue::Workers;
use crate::sandbox::Sandbox;
use crate::store::Store;

#[derive(Debug, Clone)]
pub struct ServiceConfig {
    pub max_upload_bytes: u64,
}

/// Shared state of the running service, cheap to clone into handlers.
#[derive(Clone)]
pub struct App {
    pub store: Store,
    pub sandbox: Sandbox,
    pub workers: Workers,
    pub config: ServiceConfig,
}
