//! The HTTP edge (api.md): routes, layers, error rendering. Handlers only
//! translate between HTTP and the service layer.

pub mod access;
mod catalog;
pub mod edge;
mod evaluations;
pub(crate) use evaluations::list_query;
pub mod errors;
pub(crate) mod extract;
mod health;
mod negotiate;
mod projects;
mod telemetry;
mod workers;

use std::time::Duration;

use axum::Router;
use axum::http::{HeaderName, Request, StatusCode, header};
use axum::response::IntoResponse;
use axum::routing::{MethodRouter, delete, get, post, put};
use tower::ServiceBuilder;
use tower_http::compression::CompressionLayer;
use tower_http::request_id::PropagateRequestIdLayer;
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
            "delete",
            "/v1/models/{id}",
            Bounded,
            delete(catalog::delete_model),
        ),
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
            "delete",
            "/v1/datasets/{id}",
            Bounded,
            delete(catalog::delete_dataset),
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
        ("get", "/v1/workers", Bounded, get(workers::list)),
        ("get", "/healthz", Bounded, get(health::healthz)),
        ("get", "/readyz", Bounded, get(health::readyz)),
        ("get", "/openapi.yaml", Bounded, get(openapi)),
        ("get", "/metrics", Bounded, get(telemetry::metrics)),
        ("get", "/", Bounded, get(crate::web::evaluations)),
        (
            "get",
            "/evaluations/{id}",
            Bounded,
            get(crate::web::evaluation),
        ),
        (
            "post",
            "/evaluations/{id}/cancel",
            Bounded,
            post(crate::web::cancel),
        ),
        ("get", "/teachers/{id}", Bounded, get(crate::web::teacher)),
        ("get", "/projects/{name}", Bounded, get(crate::web::project)),
        ("get", "/compare", Bounded, get(crate::web::compare)),
        ("get", "/assets/style.css", Bounded, get(crate::web::style)),
        ("get", "/signin", Bounded, get(crate::web::signin)),
        ("post", "/signin", Bounded, post(crate::web::sign_in)),
        ("post", "/signout", Bounded, post(crate::web::sign_out)),
    ]
}

/// (method, path) of every served route.
pub fn routes() -> Vec<(&'static str, &'static str)> {
    table().into_iter().map(|(m, p, _, _)| (m, p)).collect()
}

pub fn router(app: App, access: access::AccessConfig) -> Router {
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
    let header = |req: &Request<_>, name: &HeaderName| {
        req.headers()
            .get(name)
            .and_then(|v| v.to_str().ok())
            .unwrap_or("-")
            .to_string()
    };
    checked.merge(bounded).with_state(app.clone()).layer(
        ServiceBuilder::new()
            .map_request(edge::request_id)
            .layer(
                TraceLayer::new_for_http().make_span_with(move |req: &Request<_>| {
                    tracing::info_span!(
                        "request",
                        request_id = %header(req, &edge::REQUEST_ID),
                        client_request_id = %header(req, &edge::CLIENT_REQUEST_ID),
                        method = %req.method(),
                        path = %req.uri().path()
                    )
                }),
            )
            .layer(PropagateRequestIdLayer::new(edge::REQUEST_ID))
            .layer(axum::middleware::from_fn(edge::security_headers))
            .layer(axum::middleware::from_fn(errors::ensure_problem_json))
            .layer(axum::middleware::from_fn_with_state(
                app.clone(),
                telemetry::count,
            ))
            .layer(axum::middleware::from_fn_with_state(
                (app, access),
                access::identify,
            ))
            .layer(axum::Extension(access)),
    )
}
