//! Rendering every failure as problem+json, in one place. A 5xx answers
//! generically and logs its real cause inside the request's span, which
//! carries the request id.

use axum::body::Body;
use axum::http::{HeaderValue, Request, StatusCode, header};
use axum::middleware::Next;
use axum::response::{IntoResponse, Response};

use crate::error::AppError;
use crate::problem::{Problem, reason_phrase};

pub const PROBLEM_JSON: &str = "application/problem+json";

fn respond(problem: &Problem) -> Response {
    let code = StatusCode::from_u16(problem.status).unwrap_or(StatusCode::INTERNAL_SERVER_ERROR);
    let body = serde_json::to_string(problem).expect("problems serialize");
    let mut res = (code, body).into_response();
    res.headers_mut()
        .insert(header::CONTENT_TYPE, HeaderValue::from_static(PROBLEM_JSON));
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
        res
    }
}

/// Turns any error answer that is not yet problem+json (an unknown route, a
/// wrong method, a timeout from a layer) into one, so clients see one format.
pub async fn ensure_problem_json(req: Request<Body>, next: Next) -> Response {
    let res = next.run(req).await;
    let status = res.status();
    let is_problem = res
        .headers()
        .get(header::CONTENT_TYPE)
        .is_some_and(|v| v.as_bytes().starts_with(PROBLEM_JSON.as_bytes()));
    if status.as_u16() < 400 || is_problem {
        return res;
    }
    let detail = match status.as_u16() {
        404 => "no such path; see /openapi.yaml for the routes".to_string(),
        405 => "this path does not take that method; see /openapi.yaml".to_string(),
        408 => "the request took too long and was stopped".to_string(),
        413 => "the request body is too large".to_string(),
        s => reason_phrase(s).to_string(),
    };
    let mut out = respond(&Problem::new(status.as_u16(), detail, None));
    for (name, value) in res.headers() {
        if name != header::CONTENT_TYPE && name != header::CONTENT_LENGTH {
            out.headers_mut().insert(name.clone(), value.clone());
        }
    }
    out
}
