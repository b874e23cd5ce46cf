//! Problem details objects (RFC 9457), the body of every 4xx/5xx answer and
//! the `error` of a failed evaluation. `type` is "about:blank", so `title`
//! is the status's reason phrase; `detail` says what to do.

use serde_json::{Value, json};

pub fn reason_phrase(status: u16) -> &'static str {
    match status {
        400 => "Bad Request",
        404 => "Not Found",
        405 => "Method Not Allowed",
        408 => "Request Timeout",
        409 => "Conflict",
        413 => "Content Too Large",
        415 => "Unsupported Media Type",
        422 => "Unprocessable Content",
        500 => "Internal Server Error",
        503 => "Service Unavailable",
        _ => "Error",
    }
}

pub fn problem(status: u16, detail: &str, field: Option<&str>) -> Value {
    let mut p = json!({
        "type": "about:blank",
        "title": reason_phrase(status),
        "status": status,
        "detail": detail,
    });
    if let Some(f) = field {
        p["field"] = json!(f);
    }
    p
}
