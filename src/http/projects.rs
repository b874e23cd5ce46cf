//! Handlers for projects and their baselines.

use axum::Json;
use axum::extract::{Path, State};
use axum::response::{IntoResponse, Response};

use super::access::Who;
use super::extract::{JsonBody, QueryMap};
use crate::error::AppError;
use crate::service::{App, SetBaseline};

pub(super) async fn list(State(app): State<App>, q: QueryMap) -> Result<Response, AppError> {
    let cursor = q.text("cursor");
    Ok(Json(app.projects(q.limit()?, cursor.as_deref()).await?).into_response())
}

pub(super) async fn get(
    State(app): State<App>,
    Path(name): Path<String>,
) -> Result<Response, AppError> {
    Ok(Json(app.project(&name).await?).into_response())
}

pub(super) async fn set_baseline(
    State(app): State<App>,
    Who(caller): Who,
    Path(name): Path<String>,
    JsonBody(body): JsonBody<SetBaseline>,
) -> Result<Response, AppError> {
    Ok(Json(app.set_baseline(&name, body, &caller).await?).into_response())
}
