//! Projects and their baselines: the student in production that new
//! candidates are judged against, and who set it when, from which
//! evaluation.

use serde::{Deserialize, Serialize};
use time::OffsetDateTime;
use uuid::Uuid;

use super::{App, Caller, limits};
use crate::error::AppError;
use crate::store::{NewBaseline, Page, Project, ProjectSummary, Role, Status};

/// The body of `PUT /v1/projects/{name}/baseline`.
#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SetBaseline {
    pub model: Uuid,
    /// A succeeded evaluation of the project in which the model was a
    /// candidate that passed every gate.
    #[serde(default)]
    pub evaluation: Option<Uuid>,
}

impl App {
    pub async fn projects(
        &self,
        limit: u32,
        after: Option<&str>,
    ) -> Result<Page<ProjectSummary>, AppError> {
        Ok(self.store.list_projects(limit, after).await?)
    }

    pub async fn project(&self, name: &str) -> Result<Project, AppError> {
        self.store.project(name).await?.ok_or_else(|| {
            AppError::NotFound(format!("no evaluation or baseline names project '{name}'"))
        })
    }

    /// Makes `req.model` the project's baseline, recording who and from
    /// which evaluation.
    pub async fn set_baseline(
        &self,
        project: &str,
        req: SetBaseline,
        caller: &Caller,
    ) -> Result<Project, AppError> {
        limits::project(project)?;
        caller.may(
            Role::Maintainer,
            Some(project),
            "setting a project's baseline",
        )?;
        self.store.model(req.model).await?.ok_or_else(|| {
            AppError::unprocessable(format!("no model has id {}", req.model), Some("model"))
        })?;
        if let Some(e) = req.evaluation {
            let record = self.store.evaluation(e).await?.ok_or_else(|| {
                AppError::unprocessable(format!("no evaluation has id {e}"), Some("evaluation"))
            })?;
            if record.project != project || record.status != Status::Succeeded {
                return Err(AppError::unprocessable(
                    format!(
                        "evaluation {e} is a {} evaluation of project '{}'; a baseline comes from \\
                         a succeeded evaluation of project '{project}'",
                        record.status.as_str(),
                        record.project
                    ),
                    Some("evaluation"),
                ));
            }
            if !self.store.passed_every_gate(e, req.model).await? {
                return Err(AppError::unprocessable(
                    format!(
                        "model {} was not a candidate of evaluation {e} that passed every gate",
                        req.model
                    ),
                    Some("model"),
                ));
            }
        }
        self.store
            .set_baseline(&NewBaseline {
                project: project.to_string(),
                model: req.model,
                set_at: OffsetDateTime::now_utc(),
                set_by: caller.name(),
                evaluation: req.evaluation,
            })
            .await?
            .map_err(|gone| {
                AppError::unprocessable(
                    format!("model {gone} was deleted while the request was checked"),
                    Some("model"),
                )
            })?;
        self.project(project).await
    }
}
