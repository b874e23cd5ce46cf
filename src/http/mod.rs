//! The HTTP edge (api.md): routes, layers, error rendering. Handlers only
//! translate between HTTP and the service layer.

mod catalog;
mod evaluations;
mod extract;
mod health;
pub mod problem;

use std::time::Duration;

use axum::Router;
use axum::http::{HeaderName, Request, StatusCode, header};
use axum::response::IntoResponse;
use axum::routing::{get, post};
use tower::ServiceBuilder;
use tower_http::compression::CompressionLayer;
use tower_http::request_id::{MakeRequestUuid, PropagateRequestIdLayer, SetRequestIdLayer};
use tower_http::timeout::TimeoutLayer;
use tower_http::trace::TraceLayer;

use crate::service::App;

/// How long a non-upload request may take (creation runs the engine's
/// checks, which load every model).
const REQUEST_TIMEOUT: Duration = Duration::from_secs(300);

/// The OpenAPI description of this contract, served as is.
pub const OPENAPI: &str = include_str!("../../openapi.yaml");

async fn openapi() -> impl IntoResponse {
    ([(header::CONTENT_TYPE, "application/yaml")], OPENAPI)
}

/// Every route with the method it answers, for the check against openapi.yaml.
pub const ROUTES: &[(&str, &str)] = &[
    ("post", "/v1/models"),
    ("get", "/v1/models"),
    ("get", "/v1/models/{id}"),
    ("post", "/v1/datasets"),
    ("get", "/v1/datasets"),
    ("get", "/v1/datasets/{id}"),
    ("post", "/v1/evaluations"),
    ("get", "/v1/evaluations"),
    ("get", "/v1/evaluations/{id}"),
    ("delete", "/v1/evaluations/{id}"),
    ("get", "/v1/evaluations/{id}/report"),
    ("get", "/healthz"),
    ("get", "/readyz"),
    ("get", "/openapi.yaml"),
];

pub fn router(app: App) -> Router {
    // Uploads stream for as long as they need; everything else is bounded.
    let uploads = Router::new()
        .route("/v1/models", post(catalog::upload_model))
        .route("/v1/datasets", post(catalog::upload_dataset));
    let bounded = Router::new()
        .route("/v1/models", get(catalog::list_models))
        .route("/v1/models/{id}", get(catalog::get_model))
        .route("/v1/datasets", get(catalog::list_datasets))
        .route("/v1/datasets/{id}", get(catalog::get_dataset))
        .route("/v1/evaluations", post(evaluations::create).get(evaluations::list))
        .route("/v1/evaluations/{id}", get(evaluations::get).delete(evaluations::cancel))
        .route("/v1/evaluations/{id}/report", get(evaluations::report))
        .route("/healthz", get(health::healthz))
        .route("/readyz", get(health::readyz))
        .route("/openapi.yaml", get(openapi))
        .layer(TimeoutLayer::with_status_code(StatusCode::REQUEST_TIMEOUT, REQUEST_TIMEOUT))
        .layer(CompressionLayer::new());
    let request_id = HeaderName::from_static("x-request-id");
    uploads.merge(bounded).with_state(app).layer(
        ServiceBuilder::new()
            .layer(SetRequestIdLayer::new(request_id.clone(), MakeRequestUuid))
            .layer(TraceLayer::new_for_http().make_span_with(|req: &Request<_>| {
                let id = req
                    .headers()
                    .get("x-request-id")
                    .and_then(|v| v.to_str().ok())
                    .unwrap_or("-");
                tracing::info_span!("request", request_id = %id, method = %req.method(), path = %req.uri().path())
            }))
            .layer(PropagateRequestIdLayer::new(request_id))
            .layer(axum::middleware::from_fn(problem::ensure_problem_json)),
    )
}
