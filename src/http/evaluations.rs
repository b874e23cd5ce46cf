//! Handlers for evaluations and their reports.

use axum::Json;
use axum::extract::{Path, State};
use axum::http::{HeaderMap, StatusCode, header};
use axum::response::{IntoResponse, Response};

use super::access::Who;
use super::extract::{JsonBody, QueryMap, path_id};
use crate::error::AppError;
use crate::report::Verdict;
use crate::service::{App, EvaluationRequest, ListQuery};
use crate::store::{EvaluationFilter, Status};

pub(super) async fn create(
    State(app): State<App>,
    Who(caller): Who,
    JsonBody(req): JsonBody<EvaluationRequest>,
) -> Result<Response, AppError> {
    let record = app.create_evaluation(req, &caller).await?;
    let location = format!("/v1/evaluations/{}", record.id);
    Ok((
        StatusCode::ACCEPTED,
        [(header::LOCATION, location)],
        Json(record),
    )
        .into_response())
}

pub(super) async fn get(
    State(app): State<App>,
    Path(id): Path<String>,
) -> Result<Response, AppError> {
    Ok(Json(app.evaluation(path_id(&id, "evaluation")?).await?).into_response())
}

/// The report as stored (JSON), or its ranked candidates as CSV for
/// clients that ask for `text/csv`.
pub(super) async fn report(
    State(app): State<App>,
    Path(id): Path<String>,
    headers: HeaderMap,
) -> Result<Response, AppError> {
    let id = path_id(&id, "evaluation")?;
    let wants_csv = super::negotiate::prefers_csv(&headers);
    if wants_csv {
        let csv = app.report_csv(id).await?;
        return Ok(([(header::CONTENT_TYPE, "text/csv; charset=utf-8")], csv).into_response());
    }
    let body = app.report(id).await?;
    Ok(([(header::CONTENT_TYPE, "application/json")], body).into_response())
}

pub(super) async fn timings(
    State(app): State<App>,
    Path(id): Path<String>,
) -> Result<Response, AppError> {
    Ok(Json(app.timings(path_id(&id, "evaluation")?).await?).into_response())
}

pub(super) async fn cancel(
    State(app): State<App>,
    Who(caller): Who,
    Path(id): Path<String>,
) -> Result<Response, AppError> {
    let record = app
        .cancel_evaluation(path_id(&id, "evaluation")?, &caller)
        .await?;
    Ok(Json(record).into_response())
}

/// Reads the list filters; `verdict` and `tag=key:value` serve the dashboard.
pub(crate) fn list_query(q: &QueryMap) -> Result<ListQuery, AppError> {
    let status = q
        .text("status")
        .map(|s| {
            Status::parse(&s).ok_or_else(|| {
                AppError::bad_request(
                    "status must be queued, running, succeeded, failed or canceled",
                    Some("status"),
                )
            })
        })
        .transpose()?;
    let verdict = q
        .text("verdict")
        .map(|v| {
            Verdict::parse(&v).ok_or_else(|| {
                AppError::bad_request("verdict must be go or no-go", Some("verdict"))
            })
        })
        .transpose()?;
    let tag = q
        .text("tag")
        .map(|t| {
            t.split_once(':')
                .map(|(k, v)| (k.to_string(), v.to_string()))
                .ok_or_else(|| AppError::bad_request("tag must be given as key:value", Some("tag")))
        })
        .transpose()?;
    Ok(ListQuery {
        filter: EvaluationFilter {
            project: q.text("project"),
            teacher: q.uuid("teacher")?,
            status,
            verdict,
            tag,
        },
        limit: q.limit()?,
        cursor: q.uuid("cursor")?,
    })
}

pub(super) async fn list(State(app): State<App>, q: QueryMap) -> Result<Response, AppError> {
    Ok(Json(app.evaluations(&list_query(&q)?).await?).into_response())
}
