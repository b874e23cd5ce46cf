//! `GET /metrics`, and the count of every request by route and status.

use std::sync::LazyLock;

use axum::body::Body;
use axum::extract::State;
use axum::http::{Method, Request, header};
use axum::middleware::Next;
use axum::response::{IntoResponse, Response};

use crate::error::AppError;
use crate::service::App;

pub(super) async fn metrics(State(app): State<App>) -> Result<Response, AppError> {
    let text = app.metrics_text().await?;
    Ok((
        [(
            header::CONTENT_TYPE,
            "text/plain; version=0.0.4; charset=utf-8",
        )],
        text,
    )
        .into_response())
}

/// Every route pattern, split into its segments once for the process.
fn patterns() -> &'static [(&'static str, Vec<&'static str>)] {
    static PATTERNS: LazyLock<Vec<(&'static str, Vec<&'static str>)>> = LazyLock::new(|| {
        super::routes()
            .into_iter()
            .map(|(_, p)| (p, p.trim_end_matches('/').split('/').collect()))
            .collect()
    });
    &PATTERNS
}

/// The route pattern a path belongs to (`/v1/models/{id}`), so that
/// counts do not grow a series per id; `other` for paths no route serves.
fn route_of(path: &str) -> &'static str {
    let parts: Vec<&str> = path.trim_end_matches('/').split('/').collect();
    patterns()
        .iter()
        .find(|(_, want)| {
            want.len() == parts.len()
                && want
                    .iter()
                    .zip(&parts)
                    .all(|(w, p)| w.starts_with('{') || w == p)
        })
        .map_or("other", |(pattern, _)| pattern)
}

/// A method as a label: the ones the routes serve, and `other`, so that a
/// client inventing methods cannot grow the series.
fn method_label(m: &Method) -> &'static str {
    [
        Method::GET,
        Method::HEAD,
        Method::POST,
        Method::PUT,
        Method::DELETE,
    ]
    .iter()
    .find(|k| *k == m)
    .map_or("other", |k| k.as_str())
}

pub(super) async fn count(State(app): State<App>, req: Request<Body>, next: Next) -> Response {
    let method = method_label(req.method());
    let route = route_of(req.uri().path());
    let res = next.run(req).await;
    app.telemetry.request(method, route, res.status().as_u16());
    res
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn paths_count_under_their_route_pattern() {
        assert_eq!(route_of("/v1/models/0190aa"), "/v1/models/{id}");
        assert_eq!(
            route_of("/v1/evaluations/x/report"),
            "/v1/evaluations/{id}/report"
        );
        assert_eq!(route_of("/"), "/");
        assert_eq!(route_of("/v1/nothing/here/at/all"), "other");
        assert_eq!(method_label(&Method::DELETE), "DELETE");
        assert_eq!(method_label(&Method::from_bytes(b"BREW").unwrap()), "other");
    }
}
