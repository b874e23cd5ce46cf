//! What the dashboard pages read: the same data the API serves.

use uuid::Uuid;

use super::{App, ListQuery};
use crate::error::AppError;
use crate::report::Report;
use crate::store::{EvaluationRecord, EvaluationRow, ModelRecord, Page, TrendPoint};

pub struct EvaluationView {
    pub record: EvaluationRecord,
    pub teacher: ModelRecord,
    pub report: ReportView,
}

/// An evaluation's report as the page can show it.
pub enum ReportView {
    /// Not there yet (or never: failed, canceled).
    Missing,
    Shown(Box<Report>),
    /// Written by an earlier version whose shape this one does not read;
    /// the JSON report still serves it as stored.
    Unreadable,
}

pub struct TeacherView {
    pub teacher: ModelRecord,
    pub rows: Page<EvaluationRow>,
    pub trend: Vec<TrendPoint>,
}

pub struct ListView {
    pub rows: Page<EvaluationRow>,
    pub projects: Vec<String>,
    pub teachers: Vec<(Uuid, String)>,
}

impl App {
    pub async fn list_view(&self, q: &ListQuery) -> Result<ListView, AppError> {
        let rows = self
            .store
            .evaluation_rows(&q.filter, q.limit, q.cursor)
            .await?;
        let (projects, teachers) = self.store.filter_choices().await?;
        Ok(ListView {
            rows,
            projects,
            teachers,
        })
    }

    pub async fn evaluation_view(&self, id: Uuid) -> Result<EvaluationView, AppError> {
        let record = self.evaluation(id).await?;
        let teacher = self.model(record.teacher).await?;
        let report = match self.store.report(id).await? {
            None => ReportView::Missing,
            Some(body) => match serde_json::from_str(&body) {
                Ok(report) => ReportView::Shown(Box::new(report)),
                Err(e) => {
                    tracing::info!(%id, error = %e, "a stored report does not read as this version's");
                    ReportView::Unreadable
                }
            },
        };
        Ok(EvaluationView {
            record,
            teacher,
            report,
        })
    }

    pub async fn teacher_view(&self, id: Uuid, q: &ListQuery) -> Result<TeacherView, AppError> {
        let teacher = self.model(id).await?;
        let mut filter = q.filter.clone();
        filter.teacher = Some(id);
        let rows = self
            .store
            .evaluation_rows(&filter, q.limit, q.cursor)
            .await?;
        let trend = self.store.teacher_trend(id).await?;
        Ok(TeacherView {
            teacher,
            rows,
            trend,
        })
    }

    pub async fn model(&self, id: Uuid) -> Result<ModelRecord, AppError> {
        self.store
            .model(id)
            .await?
            .ok_or_else(|| AppError::NotFound(format!("no model has id {id}")))
    }
}
