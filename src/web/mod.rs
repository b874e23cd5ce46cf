//! The shared dashboard: server-rendered pages under `/` reading the same
//! data the API serves. No script and no external asset: it works without a network
//! and reads without colour (verdicts and failed gates are said in words).
//! Handlers here only read the request, call the service and render.

mod charts;
mod compare;
mod evaluation;
mod format;
mod layout;
mod list;
mod problem_page;
mod project;
mod signin;
mod teacher;

pub(crate) use problem_page::error_page;
pub(crate) use signin::{form_page as signin_page, show as signin, sign_out, submit as sign_in};

use axum::extract::{Path, State};
use axum::http::header;
use axum::response::{Html, IntoResponse, Redirect, Response};

use crate::error::AppError;
use crate::http::extract::{QueryMap, path_id};
use crate::http::list_query;
use crate::service::App;

const STYLE: &str = include_str!("style.css");

pub(crate) async fn style() -> Response {
    ([(header::CONTENT_TYPE, "text/css; charset=utf-8")], STYLE).into_response()
}

fn filters(q: &QueryMap) -> list::Filters {
    list::Filters {
        project: q.text("project"),
        teacher: q.text("teacher"),
        status: q.text("status"),
        verdict: q.text("verdict"),
        tag: q.text("tag"),
    }
}

pub(crate) async fn evaluations(State(app): State<App>, q: QueryMap) -> Result<Response, AppError> {
    let view = app.list_view(&list_query(&q)?).await?;
    Ok(Html(list::render(&view, &filters(&q)).into_string()).into_response())
}

pub(crate) async fn evaluation(
    State(app): State<App>,
    Path(id): Path<String>,
    q: QueryMap,
) -> Result<Response, AppError> {
    let view = app.evaluation_view(path_id(&id, "evaluation")?).await?;
    let classes = q.uuid("classes")?;
    Ok(Html(evaluation::render(&view, classes).into_string()).into_response())
}

/// The cancel form's target: cancels as `DELETE /v1/evaluations/{id}`
/// does, and sends the browser back to the evaluation's page. A form
/// posted from a page of another origin never gets here: the access layer
/// (`http::access::same_origin`) refuses every such change with 403.
pub(crate) async fn cancel(
    State(app): State<App>,
    crate::http::access::Who(caller): crate::http::access::Who,
    Path(id): Path<String>,
) -> Result<Response, AppError> {
    let id = path_id(&id, "evaluation")?;
    app.cancel_evaluation(id, &caller).await?;
    Ok(Redirect::to(&format!("/evaluations/{id}")).into_response())
}

pub(crate) async fn project(
    State(app): State<App>,
    Path(name): Path<String>,
    q: QueryMap,
) -> Result<Response, AppError> {
    let view = app.project_view(&name, &list_query(&q)?).await?;
    Ok(Html(project::render(&view).into_string()).into_response())
}

pub(crate) async fn compare(State(app): State<App>, q: QueryMap) -> Result<Response, AppError> {
    let pick = |key: &str| {
        q.uuid(key)?.ok_or_else(|| {
            AppError::bad_request(
                format!("{key} must name an evaluation: /compare?a=ID&b=ID"),
                Some(key),
            )
        })
    };
    let view = app.compare_view(pick("a")?, pick("b")?).await?;
    Ok(Html(compare::render(&view).into_string()).into_response())
}

pub(crate) async fn teacher(
    State(app): State<App>,
    Path(id): Path<String>,
    q: QueryMap,
) -> Result<Response, AppError> {
    let view = app
        .teacher_view(path_id(&id, "teacher")?, &list_query(&q)?)
        .await?;
    Ok(Html(teacher::render(&view).into_string()).into_response())
}
