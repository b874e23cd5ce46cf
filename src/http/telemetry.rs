//! `GET /metrics`, and the count of every request by route and status.

use axum::body::Body;
use axum::extract::State;
use axum::http::{Request, header};
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

/// The route pattern a path belongs to (`/v1/models/{id}`), so that
/// counts do not grow a series per id; `other` for paths no route serves.
fn route_of(path: &str) -> &'static str {
    let parts: Vec<&str> = path.trim_end_matches('/').split('/').collect();
    super::routes()
        .into_iter()
        .map(|(_, pattern)| pattern)
        .find(|pattern| {
            let want: Vec<&str> = pattern.trim_end_matches('/').split('/').collect();
            want.len() == parts.len()
                && want
                    .iter()
                    .zip(&parts)
                    .all(|(w, p)| w.starts_with('{') || w == p)
        })
        .unwrap_or("other")
}

pub(super) async fn count(State(app): State<App>, req: Request<Body>, next: Next) -> Response {
    let method = req.method().clone();
    let route = route_of(req.uri().path());
    let res = next.run(req).await;
    app.telemetry
        .request(method.as_str(), route, res.status().as_u16());
    res
}

#[cfg(test)]
mod tests {
    use super::route_of;

    #[test]
    fn paths_count_under_their_route_pattern() {
        assert_eq!(route_of("/v1/models/0190aa"), "/v1/models/{id}");
        assert_eq!(
            route_of("/v1/evaluations/x/report"),
            "/v1/evaluations/{id}/report"
        );
        assert_eq!(route_of("/"), "/");
        assert_eq!(route_of("/v1/nothing/here/at/all"), "other");
    }
}
