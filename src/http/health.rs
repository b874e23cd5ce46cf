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
        return Err(AppError::Unavailable {
            detail: "the database does not answer".into(),
            retry_after: None,
        });
    }
    if app.workers.alive() == 0 {
        return Err(AppError::Unavailable {
            detail: "no evaluation worker is running".into(),
            retry_after: None,
        });
    }
    Ok(Json(json!({"status": "ready"})).into_response())
}
