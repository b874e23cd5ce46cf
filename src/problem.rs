//! Problem details (RFC 9457): the body of every 4xx/5xx answer and the
//! `error` of a failed evaluation. `type` is "about:blank", so `title` is
//! the status's reason phrase and `detail` says what to do.

use serde::{Deserialize, Serialize};

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Problem {
    #[serde(rename = "type")]
    pub kind: String,
    pub title: String,
    pub status: u16,
    pub detail: String,
    /// The input that was wrong, where one was.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub field: Option<String>,
}

/// The problem type of every answer: the status code says it all.
pub const ABOUT_BLANK: &str = "about:blank";

impl Problem {
    pub fn new(status: u16, detail: impl Into<String>, field: Option<&str>) -> Problem {
        Problem {
            kind: ABOUT_BLANK.into(),
            title: reason_phrase(status).into(),
            status,
            detail: detail.into(),
            field: field.map(str::to_string),
        }
    }
}

pub fn reason_phrase(status: u16) -> &'static str {
    match status {
        400 => "Bad Request",
        401 => "Unauthorized",
        403 => "Forbidden",
        404 => "Not Found",
        405 => "Method Not Allowed",
        408 => "Request Timeout",
        409 => "Conflict",
        413 => "Content Too Large",
        415 => "Unsupported Media Type",
        422 => "Unprocessable Content",
        500 => "Internal Server Error",
        503 => "Service Unavailable",
        507 => "Insufficient Storage",
        _ => "Error",
    }
}
