//! Creating, reading, listing and canceling evaluations. Creation checks
//! everything that can be checked before running, from the records the
//! uploads left, so that a queued evaluation fails only for reasons that
//! running reveals.

use std::collections::BTreeMap;

use serde::{Deserialize, Serialize};
use time::OffsetDateTime;
use uuid::Uuid;

use super::{App, Caller, limits};
use crate::engine::fit::{Entrant, Fit, fit};
use crate::engine::gates::Gates;
use crate::engine::settings::{
    Context, LatencySettings, OutputChoice, OutputKinds, RankBy, Settings,
};
use crate::engine::{EngineError, Job};
use crate::error::AppError;
use crate::report::RoundTimings;
use crate::sandbox::SandboxError;
use crate::store::{
    AppliedRequest, CancelOutcome, DatasetRecord, EvaluationFilter, EvaluationRecord, ModelRecord,
    NewEvaluation, Page, Role,
};

fn default_project() -> String {
    "default".into()
}

/// The body of `POST /v1/evaluations`; omitted settings take their
/// defaults. The command-line client sends the same type.
#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct EvaluationRequest {
    #[serde(default = "default_project")]
    pub project: String,
    pub teacher: Uuid,
    pub students: Vec<Uuid>,
    pub dataset: Uuid,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub temperature: Option<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub alpha: Option<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub output: Option<OutputChoice>,
    #[serde(default)]
    pub output_kind: OutputKinds,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub batch_size: Option<u32>,
    #[serde(default)]
    pub latency: LatencySettings,
    #[serde(default)]
    pub rank_by: RankBy,
    #[serde(default)]
    pub gates: Gates,
    #[serde(default)]
    pub tags: BTreeMap<String, String>,
    /// The student in production to compare every candidate with.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub baseline: Option<BaselineChoice>,
    /// Labels of the workers that may run it.
    #[serde(default)]
    pub runs_on: BTreeMap<String, String>,
}

/// `baseline` in a request: a model id, or "current", the project's
/// baseline at the time of creation.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum BaselineChoice {
    Current,
    Model(Uuid),
}

impl Serialize for BaselineChoice {
    fn serialize<S: serde::Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        match self {
            BaselineChoice::Current => s.serialize_str("current"),
            BaselineChoice::Model(id) => id.serialize(s),
        }
    }
}

impl<'de> Deserialize<'de> for BaselineChoice {
    fn deserialize<D: serde::Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        let text = String::deserialize(d)?;
        if text == "current" {
            return Ok(BaselineChoice::Current);
        }
        Uuid::parse_str(&text)
            .map(BaselineChoice::Model)
            .map_err(|_| {
                serde::de::Error::custom(format!(
                    "baseline must be a model id or \"current\", not {text:?}"
                ))
            })
    }
}

impl EvaluationRequest {
    /// A request with every setting at its default.
    pub fn new(teacher: Uuid, students: Vec<Uuid>, dataset: Uuid) -> Self {
        EvaluationRequest {
            project: default_project(),
            teacher,
            students,
            dataset,
            temperature: None,
            alpha: None,
            output: None,
            output_kind: OutputKinds::default(),
            batch_size: None,
            latency: LatencySettings::default(),
            rank_by: RankBy::default(),
            gates: Gates::default(),
            tags: BTreeMap::new(),
            baseline: None,
            runs_on: BTreeMap::new(),
        }
    }
}

impl EvaluationRequest {
    fn settings(&self) -> Settings {
        let d = Settings::default();
        Settings {
            temperature: self.temperature.unwrap_or(d.temperature),
            alpha: self.alpha.unwrap_or(d.alpha),
            output: self.output.clone(),
            output_kind: self.output_kind,
            batch_size: self.batch_size.unwrap_or(d.batch_size),
            latency: self.latency,
            rank_by: self.rank_by,
            gates: self.gates.clone(),
            runs_on: self.runs_on.clone(),
        }
    }
}

/// Query of `GET /v1/evaluations`.
#[derive(Debug, Default)]
pub struct ListQuery {
    pub filter: EvaluationFilter,
    pub limit: u32,
    pub cursor: Option<Uuid>,
}

/// An engine refusal, as the answer to a request.
fn refused(e: EngineError) -> AppError {
    match e {
        EngineError::Settings(s) => AppError::unprocessable(s.message, Some(&s.field)),
        EngineError::Io { .. } => AppError::internal(e),
        other => AppError::unprocessable(other.to_string(), None),
    }
}

impl App {
    pub async fn create_evaluation(
        &self,
        req: EvaluationRequest,
        caller: &Caller,
    ) -> Result<EvaluationRecord, AppError> {
        limits::project(&req.project)?;
        caller.may(
            Role::Submitter,
            Some(&req.project),
            "creating an evaluation",
        )?;
        limits::students(&req.students)?;
        limits::tags(&req.tags)?;
        limits::labels("runs_on", &req.runs_on)?;
        let settings = req.settings();
        let teacher = self.named_model(req.teacher, "teacher").await?;
        let mut students = Vec::with_capacity(req.students.len());
        for (i, sid) in req.students.iter().enumerate() {
            students.push(self.named_model(*sid, &format!("students[{i}]")).await?);
        }
        let dataset = self.store.dataset(req.dataset).await?.ok_or_else(|| {
            AppError::unprocessable(
                format!("no evaluation set has id {}", req.dataset),
                Some("dataset"),
            )
        })?;
        let baseline = self.resolve_baseline(&req).await?;
        settings
            .validate(Context {
                labels: dataset.has_labels,
                slices: dataset.slice_count.is_some(),
                baseline: baseline.is_some(),
            })
            .map_err(|e| AppError::unprocessable(e.message, Some(&e.field)))?;
        let new = NewEvaluation {
            id: Uuid::now_v7(),
            created_at: OffsetDateTime::now_utc(),
            created_by: caller.name(),
            request: AppliedRequest {
                project: req.project,
                teacher: teacher.id,
                students: req.students,
                dataset: dataset.id,
                baseline: baseline.as_ref().map(|b| b.id),
                settings,
                tags: req.tags,
            },
        };
        self.check_fit(&new, &teacher, baseline.as_ref(), &students, &dataset)
            .await?;
        let record = self.store.create_evaluation(&new).await?.map_err(|gone| {
            AppError::unprocessable(
                format!("{gone} was deleted while the request was checked"),
                None,
            )
        })?;
        self.workers.wake();
        Ok(record)
    }

    /// The request's baseline as a stored model: "current" is the project's
    /// baseline now; the baseline may not also be a student.
    async fn resolve_baseline(
        &self,
        req: &EvaluationRequest,
    ) -> Result<Option<ModelRecord>, AppError> {
        let id = match req.baseline {
            None => return Ok(None),
            Some(BaselineChoice::Model(id)) => id,
            Some(BaselineChoice::Current) => {
                let current = self.store.current_baseline(&req.project).await?;
                current.map(|b| b.model.id).ok_or_else(|| {
                    AppError::unprocessable(
                        format!(
                            "project '{}' has no baseline yet: set one with PUT \
                             /v1/projects/{}/baseline, or name a model id",
                            req.project, req.project
                        ),
                        Some("baseline"),
                    )
                })?
            }
        };
        if req.students.contains(&id) {
            return Err(AppError::unprocessable(
                format!("model {id} is the baseline and cannot also be a student"),
                Some("baseline"),
            ));
        }
        self.named_model(id, "baseline").await.map(Some)
    }

    async fn named_model(&self, id: Uuid, field: &str) -> Result<ModelRecord, AppError> {
        self.store
            .model(id)
            .await?
            .ok_or_else(|| AppError::unprocessable(format!("no model has id {id}"), Some(field)))
    }

    /// Checks from the upload records that the set fits every model and
    /// that they agree on the classes. Only when the records leave that
    /// open (a class axis sized by the set, a set recorded before its
    /// largest label was) do the models have to be loaded, in the sandbox.
    async fn check_fit(
        &self,
        new: &NewEvaluation,
        teacher: &ModelRecord,
        baseline: Option<&ModelRecord>,
        students: &[ModelRecord],
        dataset: &DatasetRecord,
    ) -> Result<(), AppError> {
        let output = new.request.settings.output.as_ref();
        let models: Vec<Entrant<'_>> = std::iter::once(teacher)
            .chain(baseline)
            .chain(students)
            .map(|m| Entrant {
                name: &m.name,
                info: &m.info,
                output: output.and_then(|o| o.for_model(m.id)),
            })
            .collect();
        let why = match fit(&models, &dataset.info()).map_err(refused)? {
            Fit::Fits { .. } if !dataset.has_labels || dataset.largest_label.is_some() => {
                return Ok(());
            }
            Fit::Fits { .. } => "the set was uploaded before its largest label was recorded".into(),
            Fit::Undecided(why) => why,
        };
        tracing::debug!(%why, "loading the models to check a new evaluation");
        let job: Job = self
            .store
            .job_for(new.id, new.created_at, &new.request)
            .await?;
        self.sandbox
            .preflight(&job)
            .await
            .map_err(|e: SandboxError| e.into())
    }

    pub async fn evaluation(&self, id: Uuid) -> Result<EvaluationRecord, AppError> {
        let mut record = self
            .store
            .evaluation(id)
            .await?
            .ok_or_else(|| AppError::NotFound(format!("no evaluation has id {id}")))?;
        self.note_waiting(std::slice::from_mut(&mut record)).await?;
        Ok(record)
    }

    pub async fn evaluations(&self, q: &ListQuery) -> Result<Page<EvaluationRecord>, AppError> {
        let mut page = self
            .store
            .list_evaluations(&q.filter, q.limit, q.cursor)
            .await?;
        self.note_waiting(&mut page.items).await?;
        Ok(page)
    }

    /// The stored report, as the JSON text the engine produced.
    pub async fn report(&self, id: Uuid) -> Result<String, AppError> {
        let record = self.evaluation(id).await?;
        match self.store.report(id).await? {
            Some(body) => Ok(body),
            None => Err(not_yet(&record)),
        }
    }

    /// The report's ranked candidates as CSV.
    pub async fn report_csv(&self, id: Uuid) -> Result<String, AppError> {
        let body = self.report(id).await?;
        let report: crate::report::Report = serde_json::from_str(&body).map_err(|_| {
            AppError::Conflict(format!(
                "the report of evaluation {id} was written by an earlier version; it is served \
                 as JSON only"
            ))
        })?;
        Ok(crate::report::csv::candidates_csv(&report))
    }

    /// Every timed run of a succeeded evaluation.
    pub async fn timings(&self, id: Uuid) -> Result<RoundTimings, AppError> {
        let record = self.evaluation(id).await?;
        let rounds = self
            .store
            .rounds(id)
            .await?
            .ok_or_else(|| not_yet(&record))?;
        let r = &record.request;
        Ok(RoundTimings {
            models: std::iter::once(r.teacher)
                .chain(r.baseline)
                .chain(r.students.iter().copied())
                .collect(),
            rounds,
        })
    }

    pub async fn cancel_evaluation(
        &self,
        id: Uuid,
        caller: &Caller,
    ) -> Result<EvaluationRecord, AppError> {
        let record = self.evaluation(id).await?;
        caller.may(
            Role::Submitter,
            Some(&record.project),
            "canceling an evaluation",
        )?;
        match self.store.cancel(id, caller.name().as_deref()).await? {
            CancelOutcome::Canceled(record) => {
                self.workers.stop(id);
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

/// The 409 of a report or timings asked for before the evaluation succeeded.
fn not_yet(record: &EvaluationRecord) -> AppError {
    AppError::Conflict(format!(
        "evaluation {} is {}; its report and timings exist once it has succeeded",
        record.id,
        record.status.as_str()
    ))
}
