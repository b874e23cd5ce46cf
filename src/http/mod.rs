//! The HTTP edge (api.md): routes, layers, error rendering. Handlers only
//! translate between HTTP and the service layer.

mod catalog;
mod evaluations;
pub(crate) use evaluations::list_query;
pub mod errors;
pub(crate) mod extract;
mod health;
mod projects;

use std::time::Duration;

use axum::Router;
use axum::http::{HeaderName, Request, StatusCode, header};
use axum::response::IntoResponse;
use axum::routing::{MethodRouter, delete, get, post, put};
use tower::ServiceBuilder;
use tower_http::compression::CompressionLayer;
use tower_http::request_id::{MakeRequestUuid, PropagateRequestIdLayer, SetRequestIdLayer};
use tower_http::timeout::TimeoutLayer;
use tower_http::trace::TraceLayer;

use crate::service::App;

/// How long a read or a cancel may take. Uploads stream for as long as
/// they need, and creation may wait for a check slot; both are bounded by
/// the sandbox's own limits instead.
const REQUEST_TIMEOUT: Duration = Duration::from_secs(30);

/// The OpenAPI description of this contract, served as is.
pub const OPENAPI: &str = include_str!("../../openapi.yaml");

async fn openapi() -> impl IntoResponse {
    ([(header::CONTENT_TYPE, "application/yaml")], OPENAPI)
}

/// Whether a route may wait on the sandbox (uploads, creation) or is
/// bounded in time.
#[derive(Clone, Copy, PartialEq, Eq)]
enum Kind {
    Checked,
    Bounded,
}

/// Every route the router serves: the one table both the router and the
/// check against openapi.yaml are built from.
fn table() -> Vec<(&'static str, &'static str, Kind, MethodRouter<App>)> {
    use Kind::*;
    vec![
        ("post", "/v1/models", Checked, post(catalog::upload_model)),
        ("get", "/v1/models", Bounded, get(catalog::list_models)),
        ("get", "/v1/models/{id}", Bounded, get(catalog::get_model)),
        (
            "post",
            "/v1/datasets",
            Checked,
            post(catalog::upload_dataset),
        ),
        ("get", "/v1/datasets", Bounded, get(catalog::list_datasets)),
        (
            "get",
            "/v1/datasets/{id}",
            Bounded,
            get(catalog::get_dataset),
        ),
        (
            "post",
            "/v1/evaluations",
            Checked,
            post(evaluations::create),
        ),
        ("get", "/v1/evaluations", Bounded, get(evaluations::list)),
        (
            "get",
            "/v1/evaluations/{id}",
            Bounded,
            get(evaluations::get),
        ),
        (
            "delete",
            "/v1/evaluations/{id}",
            Bounded,
            delete(evaluations::cancel),
        ),
        (
            "get",
            "/v1/evaluations/{id}/report",
            Bounded,
            get(evaluations::report),
        ),
        (
            "get",
            "/v1/evaluations/{id}/timings",
            Bounded,
            get(evaluations::timings),
        ),
        ("get", "/v1/projects", Bounded, get(projects::list)),
        ("get", "/v1/projects/{name}", Bounded, get(projects::get)),
        (
            "put",
            "/v1/projects/{name}/baseline",
            Bounded,
            put(projects::set_baseline),
        ),
        ("get", "/healthz", Bounded, get(health::healthz)),
        ("get", "/readyz", Bounded, get(health::readyz)),
        ("get", "/openapi.yaml", Bounded, get(openapi)),
        ("get", "/", Bounded, get(crate::web::evaluations)),
        (
            "get",
            "/evaluations/{id}",
            Bounded,
            get(crate::web::evaluation),
        ),
        ("get", "/teachers/{id}", Bounded, get(crate::web::teacher)),
        ("get", "/assets/style.css", Bounded, get(crate::web::style)),
    ]
}

/// (method, path) of every served route.
pub fn routes() -> Vec<(&'static str, &'static str)> {
    table().into_iter().map(|(m, p, _, _)| (m, p)).collect()
}

pub fn router(app: App) -> Router {
    let (mut checked, mut bounded) = (Router::new(), Router::new());
    for (_, path, kind, handler) in table() {
        match kind {
            Kind::Checked => checked = checked.route(path, handler),
            Kind::Bounded => bounded = bounded.route(path, handler),
        }
    }
    let bounded = bounded
        .layer(TimeoutLayer::with_status_code(
            StatusCode::REQUEST_TIMEOUT,
            REQUEST_TIMEOUT,
        ))
        .layer(CompressionLayer::new());
    let request_id = HeaderName::from_static("x-request-id");
    checked.merge(bounded).with_state(app).layer(
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
            .layer(axum::middleware::from_fn(errors::ensure_problem_json)),
    )
}
