//! The shared dashboard: server-rendered pages under `/` reading the same
//! data the API serves. No script and no external asset: it works without a network
//! and reads without colour (verdicts and failed gates are said in words).

mod charts;
mod evaluation;
mod format;
mod layout;
mod list;
mod teacher;

use axum::extract::{Path, State};
use axum::http::header;
use axum::response::{Html, IntoResponse, Response};

use crate::error::AppError;
use crate::http::extract::{QueryMap, path_id};
use crate::http::list_query;
use crate::service::App;

const STYLE: &str = include_str!("style.css");

pub(crate) async fn style() -> Response {
    ([(header::CONTENT_TYPE, "text/css; charset=utf-8")], STYLE).into_response()
}

pub(crate) async fn evaluations(State(app): State<App>, q: QueryMap) -> Result<Response, AppError> {
    let view = app.list_view(&list_query(&q)?).await?;
    let filters = list::Filters {
        project: q.text("project"),
        teacher: q.text("teacher"),
        verdict: q.text("verdict"),
        tag: q.text("tag"),
    };
    Ok(Html(list::render(&view, &filters).into_string()).into_response())
}

pub(crate) async fn evaluation(
    State(app): State<App>,
    Path(id): Path<String>,
) -> Result<Response, AppError> {
    let view = app.evaluation_view(path_id(&id, "evaluation")?).await?;
    Ok(Html(evaluation::render(&view).into_string()).into_response())
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
