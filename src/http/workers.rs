//! Handlers for the workers list.

use axum::Json;
use axum::extract::State;
use axum::response::{IntoResponse, Response};

use super::extract::QueryMap;
use crate::error::AppError;
use crate::service::App;

pub(super) async fn list(State(app): State<App>, q: QueryMap) -> Result<Response, AppError> {
    Ok(Json(app.workers_page(q.limit()?, q.uuid("cursor")?).await?).into_response())
}
