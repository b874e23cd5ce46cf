//! Liveness and readiness.

use axum::Json;
use axum::extract::State;
use axum::response::{IntoResponse, Response};
use serde_json::json;

use crate::error::AppError;
use crate::service::App;

pub(super) async fn healthz() -> Response {
    Json(json!({"status": "up"})).into_response()
}

pub(super) async fn readyz(State(app): State<App>) -> Result<Response, AppError> {
    app.readiness().await?;
    Ok(Json(json!({"status": "ready"})).into_response())
}
