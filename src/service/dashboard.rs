//! What the dashboard pages read: the same data the API serves, gathered
//! per page. Pages only render what these functions assemble.

use uuid::Uuid;

use super::{App, ListQuery};
use crate::error::AppError;
use crate::report::Report;
use crate::store::{
    DatasetRecord, EvaluationRecord, EvaluationRow, ModelRecord, Page, Project, TrendPoint,
};

pub struct EvaluationView {
    pub record: EvaluationRecord,
    pub teacher: ModelRecord,
    /// The students as requested, in request order (for pages shown before
    /// a report exists).
    pub students: Vec<ModelRecord>,
    pub baseline: Option<ModelRecord>,
    /// None when the set's record is gone.
    pub dataset: Option<DatasetRecord>,
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

impl ReportView {
    pub fn shown(&self) -> Option<&Report> {
        match self {
            ReportView::Shown(r) => Some(r),
            _ => None,
        }
    }
}

pub struct TeacherView {
    pub teacher: ModelRecord,
    pub rows: Page<EvaluationRow>,
    /// Ordered by project, then evaluation set, then time: one trend per
    /// (project, set), never one line across them.
    pub trend: Vec<TrendPoint>,
}

pub struct ListView {
    pub rows: Page<EvaluationRow>,
    pub projects: Vec<String>,
    pub teachers: Vec<(Uuid, String)>,
    /// The project the list is narrowed to, with its baselines (the
    /// project page); None on the page of all evaluations.
    pub project: Option<Project>,
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
            project: None,
        })
    }

    /// One project: its baseline now and before, and its evaluations.
    pub async fn project_view(&self, name: &str, q: &ListQuery) -> Result<ListView, AppError> {
        let project = self.project(name).await?;
        let mut q = ListQuery {
            filter: q.filter.clone(),
            limit: q.limit,
            cursor: q.cursor,
        };
        q.filter.project = Some(name.to_string());
        let mut view = self.list_view(&q).await?;
        view.project = Some(project);
        Ok(view)
    }

    pub async fn evaluation_view(&self, id: Uuid) -> Result<EvaluationView, AppError> {
        let record = self.evaluation(id).await?;
        let teacher = self.model(record.teacher).await?;
        let mut students = Vec::with_capacity(record.request.students.len());
        for s in &record.request.students {
            students.extend(self.store.model(*s).await?);
        }
        let baseline = match record.request.baseline {
            Some(b) => self.store.model(b).await?,
            None => None,
        };
        let dataset = self.store.dataset(record.dataset).await?;
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
            students,
            baseline,
            dataset,
            report,
        })
    }

    /// Two evaluations of one project, for the page that sets them side by
    /// side; evaluations of two projects are refused (their gates and
    /// baselines need not have anything in common).
    pub async fn compare_view(&self, a: Uuid, b: Uuid) -> Result<[EvaluationView; 2], AppError> {
        let (a, b) = (
            self.evaluation_view(a).await?,
            self.evaluation_view(b).await?,
        );
        if a.record.project != b.record.project {
            return Err(AppError::unprocessable(
                format!(
                    "evaluation {} belongs to project '{}' and evaluation {} to project '{}'; \
                     only evaluations of one project are compared",
                    a.record.id, a.record.project, b.record.id, b.record.project
                ),
                Some("b"),
            ));
        }
        Ok([a, b])
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
