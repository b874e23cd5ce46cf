//! Projects: the names evaluations give, and each project's baselines. A
//! project exists once an evaluation names it or its baseline is set; its
//! current baseline is the last one set.

use serde::{Deserialize, Serialize};
use time::OffsetDateTime;
use uuid::Uuid;

use super::{Page, Store, StoreError};
use crate::report::ModelSummary;

/// One baseline a project was given.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct BaselineRecord {
    pub model: ModelSummary,
    #[serde(with = "time::serde::rfc3339")]
    pub set_at: OffsetDateTime,
    /// The token's name that set it; null with access off.
    pub set_by: Option<String>,
    /// The evaluation in which the model passed every gate, when given.
    pub evaluation: Option<Uuid>,
}

/// A project as lists show it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ProjectSummary {
    pub name: String,
    pub evaluations: u64,
    #[serde(with = "time::serde::rfc3339::option")]
    pub last_evaluation_at: Option<OffsetDateTime>,
    pub baseline: Option<BaselineRecord>,
}

/// A project with the history of its baselines, newest first.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Project {
    #[serde(flatten)]
    pub summary: ProjectSummary,
    pub baseline_history: Vec<BaselineRecord>,
}

/// A baseline about to be set.
#[derive(Debug, Clone)]
pub struct NewBaseline {
    pub project: String,
    pub model: Uuid,
    pub set_at: OffsetDateTime,
    pub set_by: Option<String>,
    pub evaluation: Option<Uuid>,
}

#[derive(sqlx::FromRow)]
struct BaselineRow {
    model_id: Uuid,
    name: String,
    sha256: String,
    set_at: OffsetDateTime,
    set_by: Option<String>,
    evaluation_id: Option<Uuid>,
}

impl From<BaselineRow> for BaselineRecord {
    fn from(r: BaselineRow) -> Self {
        BaselineRecord {
            model: ModelSummary {
                id: r.model_id,
                name: r.name,
                sha256: r.sha256,
                notes: Vec::new(),
            },
            set_at: r.set_at,
            set_by: r.set_by,
            evaluation: r.evaluation_id,
        }
    }
}

/// A project's counts, from its evaluations.
#[derive(sqlx::FromRow)]
struct CountRow {
    evaluations: i64,
    last_evaluation_at: Option<OffsetDateTime>,
}

impl Store {
    /// Project names in order, from `after` on.
    pub async fn list_projects(
        &self,
        limit: u32,
        after: Option<&str>,
    ) -> Result<Page<ProjectSummary>, StoreError> {
        on_pool!(self, |pool| {
            let names: Vec<(String,)> = sqlx::query_as(
                "SELECT name FROM (SELECT project AS name FROM evaluations \
             UNION SELECT project AS name FROM baselines) AS names \
             WHERE ($1 IS NULL OR name > $1) ORDER BY name LIMIT $2",
            )
            .bind(after)
            .bind(limit as i64 + 1)
            .fetch_all(pool)
            .await?;
            let mut items = Vec::with_capacity(names.len());
            for (name,) in names {
                items.push(self.project_summary(&name).await?);
            }
            let more = items.len() > limit as usize;
            items.truncate(limit as usize);
            let next_cursor = more.then(|| items.last().map(|p| p.name.clone())).flatten();
            Ok(Page { items, next_cursor })
        })
    }

    async fn project_summary(&self, name: &str) -> Result<ProjectSummary, StoreError> {
        on_pool!(self, |pool| {
            let counts: CountRow = sqlx::query_as(
                // The newest by id (UUID v7), not MAX over RFC 3339 text, whose
                // fractional digits vary in length.
                "SELECT COUNT(*) AS evaluations, (SELECT created_at FROM evaluations \
             WHERE project = $1 ORDER BY id DESC LIMIT 1) AS last_evaluation_at \
             FROM evaluations WHERE project = $1",
            )
            .bind(name)
            .fetch_one(pool)
            .await?;
            Ok(ProjectSummary {
                name: name.to_string(),
                evaluations: counts.evaluations as u64,
                last_evaluation_at: counts.last_evaluation_at,
                baseline: self.current_baseline(name).await?,
            })
        })
    }

    /// A project and its baseline history; `None` when no evaluation names
    /// it and it never had a baseline.
    pub async fn project(&self, name: &str) -> Result<Option<Project>, StoreError> {
        let summary = self.project_summary(name).await?;
        let history = self.baseline_history(name).await?;
        if summary.evaluations == 0 && history.is_empty() {
            return Ok(None);
        }
        Ok(Some(Project {
            summary,
            baseline_history: history,
        }))
    }

    /// Every baseline of a project, newest first.
    pub async fn baseline_history(&self, project: &str) -> Result<Vec<BaselineRecord>, StoreError> {
        on_pool!(self, |pool| {
            let rows: Vec<BaselineRow> = sqlx::query_as(
                "SELECT b.model_id, m.name, m.sha256, b.set_at, b.set_by, b.evaluation_id \
             FROM baselines b JOIN models m ON m.id = b.model_id \
             WHERE b.project = $1 ORDER BY b.position DESC",
            )
            .bind(project)
            .fetch_all(pool)
            .await?;
            Ok(rows.into_iter().map(BaselineRecord::from).collect())
        })
    }

    pub async fn current_baseline(
        &self,
        project: &str,
    ) -> Result<Option<BaselineRecord>, StoreError> {
        on_pool!(self, |pool| {
            let row: Option<BaselineRow> = sqlx::query_as(
                "SELECT b.model_id, m.name, m.sha256, b.set_at, b.set_by, b.evaluation_id \
             FROM baselines b JOIN models m ON m.id = b.model_id \
             WHERE b.project = $1 ORDER BY b.position DESC LIMIT 1",
            )
            .bind(project)
            .fetch_optional(pool)
            .await?;
            Ok(row.map(BaselineRecord::from))
        })
    }

    /// Appends a baseline to its project's history, making it current;
    /// `Err(model)` inside, and nothing stored, when the model was deleted
    /// meanwhile. The catalog lock orders it with deletions, and on
    /// PostgreSQL keeps two baselines set at once from taking one position.
    pub async fn set_baseline(&self, b: &NewBaseline) -> Result<Result<(), Uuid>, StoreError> {
        on_pool!(self, |pool, postgres| {
            let mut tx = pool.begin().await?;
            lock_catalog!(tx, postgres);
            let inserted = sqlx::query(
                "INSERT INTO baselines (project, position, model_id, set_at, set_by, evaluation_id) \
                 SELECT $1, (SELECT COALESCE(MAX(position), 0) + 1 FROM baselines WHERE project = $1), \
                 $2, $3, $4, $5 WHERE EXISTS (SELECT 1 FROM models WHERE id = $2 AND deleted_at IS NULL)",
            )
            .bind(&b.project)
            .bind(b.model)
            .bind(b.set_at)
            .bind(&b.set_by)
            .bind(b.evaluation)
            .execute(&mut *tx)
            .await?
            .rows_affected();
            if inserted == 0 {
                return Ok(Err(b.model));
            }
            tx.commit().await?;
            Ok(Ok(()))
        })
    }

    /// Whether `model` was a candidate of `evaluation` that passed every gate.
    pub async fn passed_every_gate(
        &self,
        evaluation: Uuid,
        model: Uuid,
    ) -> Result<bool, StoreError> {
        on_pool!(self, |pool| {
            let row: Option<(bool,)> = sqlx::query_as(
                "SELECT passed FROM candidates WHERE evaluation_id = $1 AND model_id = $2 \
             ORDER BY passed DESC LIMIT 1",
            )
            .bind(evaluation)
            .bind(model)
            .fetch_optional(pool)
            .await?;
            Ok(row.is_some_and(|(p,)| p))
        })
    }
}
