//! Extractors that refuse bad input in our error format: JSON bodies (with
//! the failing field's path), query strings and ids in paths.

use std::collections::HashMap;

use axum::body::Body;
use axum::extract::{FromRequest, FromRequestParts, Request};
use axum::http::request::Parts;
use serde::de::DeserializeOwned;
use uuid::Uuid;

use crate::error::AppError;
use crate::store::{DEFAULT_PAGE, MAX_PAGE};

/// Largest JSON body accepted.
pub(super) const MAX_JSON_BYTES: usize = 1 << 20;

/// A JSON body: syntax errors are 400, well-formed but wrong values 422
/// with `field` naming where.
pub(super) struct JsonBody<T>(pub T);

/// A request's `Content-Type`: its type and subtype without parameters,
/// and the whole header ("" when absent), for messages.
pub(super) fn media_type(headers: &axum::http::HeaderMap) -> (&str, &str) {
    let whole = headers
        .get(axum::http::header::CONTENT_TYPE)
        .and_then(|v| v.to_str().ok())
        .unwrap_or("");
    (whole.split(';').next().unwrap_or("").trim(), whole)
}

impl<S: Send + Sync, T: DeserializeOwned> FromRequest<S> for JsonBody<T> {
    type Rejection = AppError;

    async fn from_request(req: Request<Body>, _: &S) -> Result<Self, AppError> {
        // A form's text/plain body is what a page elsewhere can send
        // without asking first; JSON must say it is JSON.
        let (essence, kind) = media_type(req.headers());
        if !essence.eq_ignore_ascii_case("application/json") {
            return Err(AppError::UnsupportedMediaType(format!(
                "send the body as content-type application/json, not '{kind}'"
            )));
        }
        let bytes = axum::body::to_bytes(req.into_body(), MAX_JSON_BYTES)
            .await
            .map_err(|_| {
                AppError::TooLarge(format!("JSON bodies are limited to {MAX_JSON_BYTES} bytes"))
            })?;
        let mut de = serde_json::Deserializer::from_slice(&bytes);
        match serde_path_to_error::deserialize(&mut de) {
            Ok(v) => Ok(JsonBody(v)),
            Err(e) => {
                let path = e.path().to_string();
                let inner = e.into_inner();
                let field = (path != ".").then_some(path);
                if inner.is_data() {
                    Err(AppError::unprocessable(inner.to_string(), field.as_deref()))
                } else {
                    Err(AppError::bad_request(
                        format!("the body is not valid JSON: {inner}"),
                        None,
                    ))
                }
            }
        }
    }
}

/// Query parameters, read by name with typed errors.
pub(crate) struct QueryMap(pub(crate) HashMap<String, String>);

impl<S: Send + Sync> FromRequestParts<S> for QueryMap {
    type Rejection = AppError;

    async fn from_request_parts(parts: &mut Parts, _: &S) -> Result<Self, AppError> {
        let query = parts.uri.query().unwrap_or("");
        serde_urlencoded::from_str(query)
            .map(QueryMap)
            .map_err(|e| AppError::bad_request(format!("the query string is malformed: {e}"), None))
    }
}

impl QueryMap {
    pub(crate) fn text(&self, key: &str) -> Option<String> {
        self.0.get(key).filter(|v| !v.is_empty()).cloned()
    }

    pub(crate) fn uuid(&self, key: &str) -> Result<Option<Uuid>, AppError> {
        self.text(key)
            .map(|v| {
                Uuid::parse_str(&v)
                    .map_err(|_| AppError::bad_request(format!("{key} must be a UUID"), Some(key)))
            })
            .transpose()
    }

    pub(crate) fn limit(&self) -> Result<u32, AppError> {
        match self.text("limit") {
            None => Ok(DEFAULT_PAGE),
            Some(v) => v
                .parse::<u32>()
                .ok()
                .filter(|n| (1..=MAX_PAGE).contains(n))
                .ok_or_else(|| {
                    AppError::bad_request(
                        format!("limit must be a whole number from 1 to {MAX_PAGE}"),
                        Some("limit"),
                    )
                }),
        }
    }

    pub(super) fn sha256(&self) -> Result<Option<String>, AppError> {
        match self.text("sha256") {
            Some(h) if h.len() == 64 && h.bytes().all(|b| b.is_ascii_hexdigit()) => {
                Ok(Some(h.to_ascii_lowercase()))
            }
            Some(_) => Err(AppError::bad_request(
                "sha256 must be 64 hexadecimal digits",
                Some("sha256"),
            )),
            None => Ok(None),
        }
    }
}

/// An id in a path; one that is not a UUID names nothing, so it is a 404.
pub(crate) fn path_id(raw: &str, what: &str) -> Result<Uuid, AppError> {
    Uuid::parse_str(raw).map_err(|_| AppError::NotFound(format!("no {what} has id {raw}")))
}
