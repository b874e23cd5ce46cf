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
    if !app.store.ping().await {
        return Err(AppError::Unavailable("the database does not answer".into()));
    }
    if !app.queue.workers_alive() {
        return Err(AppError::Unavailable(
            "no evaluation worker is running".into(),
        ));
    }
    Ok(Json(json!({"status": "ready"})).into_response())
}
