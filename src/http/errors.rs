//! Rendering every failure, in one place: problem+json for API clients, and
//! the same problem as an HTML page for a browser (a request whose `Accept`
//! prefers `text/html`). A 5xx answers generically and logs its real cause
//! inside the request's span, which carries the request id.

use axum::body::Body;
use axum::http::{HeaderMap, HeaderValue, Request, StatusCode, header};
use axum::middleware::Next;
use axum::response::{IntoResponse, Response};

use crate::error::AppError;
use crate::problem::{Problem, reason_phrase};

pub const PROBLEM_JSON: &str = "application/problem+json";

/// The problem+json answer. The problem also rides in the response's
/// extensions, so that `ensure_problem_json` can render it as a page
/// without reading back a body that a layer may have compressed.
fn respond(problem: &Problem) -> Response {
    let code = StatusCode::from_u16(problem.status).unwrap_or(StatusCode::INTERNAL_SERVER_ERROR);
    let body = serde_json::to_string(problem).expect("problems serialize");
    let mut res = (code, body).into_response();
    res.headers_mut()
        .insert(header::CONTENT_TYPE, HeaderValue::from_static(PROBLEM_JSON));
    res.extensions_mut().insert(problem.clone());
    res
}

impl IntoResponse for AppError {
    fn into_response(self) -> Response {
        if let AppError::Internal(cause) = &self {
            tracing::error!(cause = %cause, "request failed");
        }
        let mut res = respond(&self.problem());
        if let Some(wait) = self.retry_after() {
            res.headers_mut().insert(
                header::RETRY_AFTER,
                HeaderValue::from(wait.as_secs().max(1)),
            );
        }
        if matches!(self, AppError::Unauthorized(_)) {
            // RFC 6750 §3: a 401 names the scheme it wants.
            res.headers_mut()
                .insert(header::WWW_AUTHENTICATE, HeaderValue::from_static("Bearer"));
        }
        res
    }
}

pub use super::negotiate::prefers_html;

/// Turns every error answer into one format: the problem+json of an error
/// that has one, a problem made from the status for those that have none
/// (an unknown route, a wrong method, a timeout from a layer), and for a
/// browser either one as an HTML page.
pub async fn ensure_problem_json(req: Request<Body>, next: Next) -> Response {
    let html = prefers_html(req.headers());
    let here = match *req.method() {
        axum::http::Method::GET => req
            .uri()
            .path_and_query()
            .map_or("/", |p| p.as_str())
            .to_string(),
        _ => "/".to_string(),
    };
    let mut res = next.run(req).await;
    let status = res.status();
    if status.as_u16() < 400 {
        return res;
    }
    let problem = match res.extensions().get::<Problem>().cloned() {
        // Already problem+json: an API client takes it as it is.
        Some(_) if !html => return with_vary(res),
        Some(p) => p,
        // A problem+json answer made elsewhere is passed on as it is.
        None if is_problem_json(&res) => return res,
        None => {
            let (parts, body) = res.into_parts();
            let detail = match plain_text(&parts.headers, status) {
                true => layer_detail(body).await,
                false => None,
            };
            res = Response::from_parts(parts, Body::empty());
            let detail = detail.unwrap_or_else(|| status_detail(status.as_u16()));
            Problem::new(status.as_u16(), detail, None)
        }
    };
    let mut out = if html {
        let page = if problem.status == 401 {
            crate::web::signin_page(&problem, &here)
        } else {
            crate::web::error_page(&problem)
        };
        (
            status,
            [(header::CONTENT_TYPE, "text/html; charset=utf-8")],
            page,
        )
            .into_response()
    } else {
        respond(&problem)
    };
    for (name, value) in res.headers() {
        if ![
            header::CONTENT_TYPE,
            header::CONTENT_LENGTH,
            header::CONTENT_ENCODING,
        ]
        .contains(name)
        {
            out.headers_mut().insert(name.clone(), value.clone());
        }
    }
    with_vary(out)
}

/// Whether an answer is a client error in plain text: the rejection of an
/// extractor (a path segment that is not UTF-8, a query that does not
/// parse), whose text says what was wrong.
fn plain_text(headers: &HeaderMap, status: StatusCode) -> bool {
    status.is_client_error()
        && headers
            .get(header::CONTENT_TYPE)
            .is_some_and(|v| v.as_bytes().starts_with(b"text/plain"))
}

/// The text of a layer's or extractor's rejection, if short and readable.
async fn layer_detail(body: Body) -> Option<String> {
    let bytes = axum::body::to_bytes(body, 4096).await.ok()?;
    let text = String::from_utf8(bytes.to_vec()).ok()?;
    let text = text.trim();
    (!text.is_empty()).then(|| text.to_string())
}

fn is_problem_json(res: &Response) -> bool {
    res.headers()
        .get(header::CONTENT_TYPE)
        .is_some_and(|v| v.as_bytes().starts_with(PROBLEM_JSON.as_bytes()))
}

/// Error answers differ by `Accept`; caches must know.
fn with_vary(mut res: Response) -> Response {
    res.headers_mut()
        .append(header::VARY, HeaderValue::from_static("accept"));
    res
}

fn status_detail(status: u16) -> String {
    match status {
        404 => "no such path; see /openapi.yaml for the routes".to_string(),
        405 => "this path does not take that method; see /openapi.yaml".to_string(),
        408 => "the request took too long and was stopped".to_string(),
        413 => "the request body is too large".to_string(),
        s => reason_phrase(s).to_string(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn accept(value: &str) -> HeaderMap {
        let mut h = HeaderMap::new();
        h.insert(header::ACCEPT, HeaderValue::from_str(value).unwrap());
        h
    }

    #[test]
    fn browsers_get_pages_and_api_clients_get_problem_json() {
        let chromium = "text/html,application/xhtml+xml,application/xml;q=0.9,image/avif,\
                        image/webp,image/apng,*/*;q=0.8,application/signed-exchange;v=b3;q=0.7";
        assert!(prefers_html(&accept(chromium)));
        assert!(prefers_html(&accept("text/html")));
        assert!(!prefers_html(&HeaderMap::new()), "no Accept");
        assert!(!prefers_html(&accept("*/*")), "curl");
        assert!(!prefers_html(&accept("application/json")));
        assert!(!prefers_html(&accept("application/json, text/html;q=0.5")));
        assert!(!prefers_html(&accept("text/html;q=0, */*")));
    }
}
