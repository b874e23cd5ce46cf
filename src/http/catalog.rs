//! Handlers for models and evaluation sets.

use axum::Json;
use axum::body::Body;
use axum::extract::{Path, State};
use axum::http::{HeaderMap, StatusCode, header};
use axum::response::{IntoResponse, Response};

use super::access::Who;
use super::extract::{QueryMap, media_type, path_id};
use crate::error::AppError;
use crate::service::{App, Uploaded};
use crate::store::{DatasetRecord, ModelRecord};

fn declared_length(headers: &HeaderMap) -> Option<u64> {
    headers
        .get(header::CONTENT_LENGTH)?
        .to_str()
        .ok()?
        .parse()
        .ok()
}

fn upload_name(q: &QueryMap) -> Result<String, AppError> {
    let name = q
        .text("name")
        .ok_or_else(|| AppError::bad_request("give the upload a name: ?name=NAME", Some("name")))?;
    crate::service::limits::name(&name)?;
    Ok(name)
}

/// How an upload's bytes are sent.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Sent {
    /// One file as it is.
    Raw,
    /// A zip archive: for a model, a bundle of the `.onnx` file and its
    /// external data (an `.npz` set is a zip archive itself).
    Zip,
}

/// Uploads are raw bytes; a form's text/plain or urlencoded body is not one
/// (and is what a page elsewhere could send without asking first).
fn raw_upload(headers: &HeaderMap) -> Result<Sent, AppError> {
    let (essence, kind) = media_type(headers);
    if essence.eq_ignore_ascii_case("application/octet-stream") {
        Ok(Sent::Raw)
    } else if essence.eq_ignore_ascii_case("application/zip") {
        Ok(Sent::Zip)
    } else {
        Err(AppError::UnsupportedMediaType(format!(
            "send the file as content-type application/octet-stream (or application/zip for \
             a model bundle), not '{kind}'"
        )))
    }
}

/// 201 with a Location for a new record, 200 for a file already stored.
fn uploaded<T: serde::Serialize>(up: Uploaded<T>, location: String) -> Response {
    let status = if up.created {
        StatusCode::CREATED
    } else {
        StatusCode::OK
    };
    (status, [(header::LOCATION, location)], Json(up.record)).into_response()
}

pub(super) async fn upload_model(
    State(app): State<App>,
    Who(caller): Who,
    q: QueryMap,
    headers: HeaderMap,
    body: Body,
) -> Result<Response, AppError> {
    let sent = raw_upload(&headers)?;
    let (name, body, len) = (
        upload_name(&q)?,
        body.into_data_stream(),
        declared_length(&headers),
    );
    let up = match sent {
        Sent::Raw => {
            app.upload::<ModelRecord, _, _>(name, body, len, &caller)
                .await?
        }
        Sent::Zip => app.upload_bundle(name, body, len, &caller).await?,
    };
    let location = format!("/v1/models/{}", up.record.id);
    Ok(uploaded(up, location))
}

pub(super) async fn get_model(
    State(app): State<App>,
    Path(id): Path<String>,
) -> Result<Response, AppError> {
    let id = path_id(&id, "model")?;
    let m = app
        .store
        .model(id)
        .await?
        .ok_or_else(|| AppError::NotFound(format!("no model has id {id}")))?;
    Ok(Json(m).into_response())
}

pub(super) async fn list_models(State(app): State<App>, q: QueryMap) -> Result<Response, AppError> {
    let page = app
        .store
        .list_models(q.sha256()?.as_deref(), q.limit()?, q.uuid("cursor")?)
        .await?;
    Ok(Json(page).into_response())
}

pub(super) async fn upload_dataset(
    State(app): State<App>,
    Who(caller): Who,
    q: QueryMap,
    headers: HeaderMap,
    body: Body,
) -> Result<Response, AppError> {
    // An .npz set is itself a zip archive, so either media type reads it.
    raw_upload(&headers)?;
    let up = app
        .upload::<DatasetRecord, _, _>(
            upload_name(&q)?,
            body.into_data_stream(),
            declared_length(&headers),
            &caller,
        )
        .await?;
    let location = format!("/v1/datasets/{}", up.record.id);
    Ok(uploaded(up, location))
}

pub(super) async fn get_dataset(
    State(app): State<App>,
    Path(id): Path<String>,
) -> Result<Response, AppError> {
    let id = path_id(&id, "evaluation set")?;
    let d = app
        .store
        .dataset(id)
        .await?
        .ok_or_else(|| AppError::NotFound(format!("no evaluation set has id {id}")))?;
    Ok(Json(d).into_response())
}

pub(super) async fn list_datasets(
    State(app): State<App>,
    q: QueryMap,
) -> Result<Response, AppError> {
    let page = app
        .store
        .list_datasets(q.sha256()?.as_deref(), q.limit()?, q.uuid("cursor")?)
        .await?;
    Ok(Json(page).into_response())
}

pub(super) async fn delete_model(
    State(app): State<App>,
    Who(caller): Who,
    Path(id): Path<String>,
) -> Result<Response, AppError> {
    app.delete_model(path_id(&id, "model")?, &caller).await?;
    Ok(StatusCode::NO_CONTENT.into_response())
}

pub(super) async fn delete_dataset(
    State(app): State<App>,
    Who(caller): Who,
    Path(id): Path<String>,
) -> Result<Response, AppError> {
    app.delete_dataset(path_id(&id, "evaluation set")?, &caller)
        .await?;
    Ok(StatusCode::NO_CONTENT.into_response())
}
