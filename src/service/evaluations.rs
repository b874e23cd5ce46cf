//! Creating, reading, listing and canceling evaluations. Creation checks
//! everything that can be checked before running, so that a queued
//! evaluation fails only for reasons that running reveals.

use serde::Deserialize;
use serde_json::{Map, Value, json};
use time::OffsetDateTime;
use uuid::Uuid;

use super::App;
use crate::engine::settings::{Gates, LatencySettings, OutputKinds, RankBy, Settings};
use crate::error::AppError;
use crate::queue::child::Ended;
use crate::queue::protocol::{Message, Task};
use crate::queue::{JobParts, build_job};
use crate::store::{CancelOutcome, EvaluationFilter, EvaluationRecord, NewEvaluation, Page};

fn default_project() -> String {
    "default".into()
}

/// The body of `POST /v1/evaluations`; omitted settings take their defaults.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct EvaluationRequest {
    #[serde(default = "default_project")]
    pub project: String,
    pub teacher: Uuid,
    pub students: Vec<Uuid>,
    pub dataset: Uuid,
    pub temperature: Option<f64>,
    pub alpha: Option<f64>,
    #[serde(default)]
    pub output: Option<String>,
    #[serde(default)]
    pub output_kind: OutputKinds,
    pub batch_size: Option<u32>,
    #[serde(default)]
    pub latency: LatencySettings,
    #[serde(default)]
    pub rank_by: RankBy,
    #[serde(default)]
    pub gates: Map<String, Value>,
    #[serde(default)]
    pub tags: Map<String, Value>,
}

impl EvaluationRequest {
    fn settings(&self) -> Result<Settings, AppError> {
        let d = Settings::default();
        let gates = Gates::parse(&self.gates)
            .map_err(|e| AppError::unprocessable(e.message, Some(&e.field)))?;
        Ok(Settings {
            temperature: self.temperature.unwrap_or(d.temperature),
            alpha: self.alpha.unwrap_or(d.alpha),
            output: self.output.clone(),
            output_kind: self.output_kind,
            batch_size: self.batch_size.unwrap_or(d.batch_size),
            latency: self.latency,
            rank_by: self.rank_by,
            gates,
        })
    }
}

/// Query of `GET /v1/evaluations`.
#[derive(Debug, Default)]
pub struct ListQuery {
    pub filter: EvaluationFilter,
    pub limit: u32,
    pub cursor: Option<Uuid>,
}

impl App {
    pub async fn create_evaluation(
        &self,
        req: EvaluationRequest,
    ) -> Result<EvaluationRecord, AppError> {
        if req.project.trim().is_empty() {
            return Err(AppError::unprocessable(
                "project must not be empty",
                Some("project"),
            ));
        }
        if req.students.is_empty() {
            return Err(AppError::unprocessable(
                "give at least one student",
                Some("students"),
            ));
        }
        for (key, value) in &req.tags {
            if !value.is_string() {
                let field = format!("tags.{key}");
                return Err(AppError::unprocessable(
                    "tag values must be strings",
                    Some(&field),
                ));
            }
        }
        let settings = req.settings()?;
        let teacher = self.store.model(req.teacher).await?.ok_or_else(|| {
            AppError::unprocessable(format!("no model has id {}", req.teacher), Some("teacher"))
        })?;
        let mut students = Vec::with_capacity(req.students.len());
        for (i, sid) in req.students.iter().enumerate() {
            let field = format!("students[{i}]");
            students.push(self.store.model(*sid).await?.ok_or_else(|| {
                AppError::unprocessable(format!("no model has id {sid}"), Some(&field))
            })?);
        }
        let dataset = self.store.dataset(req.dataset).await?.ok_or_else(|| {
            AppError::unprocessable(
                format!("no evaluation set has id {}", req.dataset),
                Some("dataset"),
            )
        })?;
        settings
            .check(dataset.has_labels)
            .map_err(|e| AppError::unprocessable(e.message, Some(&e.field)))?;

        let id = Uuid::now_v7();
        let created_at = OffsetDateTime::now_utc();
        let mut applied =
            serde_json::to_value(&settings).map_err(|e| AppError::Internal(e.to_string()))?;
        applied["project"] = json!(req.project);
        applied["teacher"] = json!(teacher.id);
        applied["students"] = json!(req.students);
        applied["dataset"] = json!(dataset.id);
        applied["tags"] = Value::Object(req.tags.clone());
        let new = NewEvaluation {
            id,
            project: req.project.clone(),
            teacher: teacher.id,
            students: req.students.clone(),
            dataset: dataset.id,
            request: applied,
            tags: req.tags,
            created_at,
        };
        self.check_fit(&new).await?;
        let record = self.store.create_evaluation(&new).await?;
        self.queue.wake();
        Ok(record)
    }

    /// Runs the engine's pre-run checks (fit, class counts, labels) in a child.
    async fn check_fit(&self, new: &NewEvaluation) -> Result<(), AppError> {
        let parts = JobParts {
            id: new.id,
            project: &new.project,
            created_at: new.created_at,
            teacher: new.teacher,
            students: &new.students,
            dataset: new.dataset,
            request: &new.request,
        };
        let job = build_job(&self.store, parts).await?;
        let ended = self
            .queue
            .check(&Task::Check { job: Box::new(job) })
            .await
            .map_err(|e| AppError::Internal(format!("starting the engine process failed: {e}")))?;
        match ended {
            Ended::Answer(Message::Checked) => Ok(()),
            Ended::Answer(Message::Failed(f)) => {
                Err(AppError::unprocessable(f.message, f.field.as_deref()))
            }
            Ended::Answer(other) => Err(AppError::Internal(format!(
                "unexpected check answer {other:?}"
            ))),
            Ended::TimedOut => Err(AppError::unprocessable(
                "checking the models took longer than the limit",
                None,
            )),
            Ended::Crashed(how) => Err(AppError::unprocessable(how, None)),
            Ended::Canceled => Err(AppError::Unavailable("the service is shutting down".into())),
        }
    }

    pub async fn evaluation(&self, id: Uuid) -> Result<EvaluationRecord, AppError> {
        self.store
            .evaluation(id)
            .await?
            .ok_or_else(|| AppError::NotFound(format!("no evaluation has id {id}")))
    }

    pub async fn evaluations(&self, q: &ListQuery) -> Result<Page<EvaluationRecord>, AppError> {
        Ok(self
            .store
            .list_evaluations(&q.filter, q.limit, q.cursor)
            .await?)
    }

    /// The stored report, as the JSON text the engine produced.
    pub async fn report(&self, id: Uuid) -> Result<String, AppError> {
        let record = self.evaluation(id).await?;
        match self.store.report(id).await? {
            Some(body) => Ok(body),
            None => Err(AppError::Conflict(format!(
                "evaluation {id} is {}; its report exists once it has succeeded",
                record.status.as_str()
            ))),
        }
    }

    pub async fn cancel_evaluation(&self, id: Uuid) -> Result<EvaluationRecord, AppError> {
        match self.store.cancel(id).await? {
            CancelOutcome::Canceled(record) => {
                self.queue.stop(id);
                Ok(record)
            }
            CancelOutcome::AlreadyFinished(r) => Err(AppError::Conflict(format!(
                "evaluation {id} already finished ({}); only queued or running ones can be canceled",
                r.status.as_str()
            ))),
            CancelOutcome::NotFound => {
                Err(AppError::NotFound(format!("no evaluation has id {id}")))
            }
        }
    }
}
