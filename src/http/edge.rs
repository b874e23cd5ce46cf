//! What every answer carries and every request is given at the edge: our
//! own request id (a client's is kept beside it, never trusted as ours),
//! and the headers that keep pages from being framed, sniffed or made to
//! load anything from elsewhere.

use axum::body::Body;
use axum::http::{HeaderName, HeaderValue, Request};
use axum::middleware::Next;
use axum::response::Response;

pub const REQUEST_ID: HeaderName = HeaderName::from_static("x-request-id");
/// A request id the client sent, kept under this name for the log.
pub const CLIENT_REQUEST_ID: HeaderName = HeaderName::from_static("x-client-request-id");

/// Pages load nothing from elsewhere: no script at all, styles and images
/// from this service only, forms post back to it, nobody frames it.
const CONTENT_SECURITY_POLICY: &str = "default-src 'none'; style-src 'self'; \
     img-src 'self' data:; form-action 'self'; frame-ancestors 'none'; base-uri 'none'";

/// Replaces any client-sent request id with ours, keeping the client's
/// under `x-client-request-id` for the log; ours goes back in the answer.
pub fn request_id<B>(mut req: Request<B>) -> Request<B> {
    let ours =
        HeaderValue::from_str(&uuid::Uuid::now_v7().to_string()).expect("a UUID is a header value");
    if let Some(theirs) = req.headers_mut().insert(REQUEST_ID, ours) {
        req.headers_mut().insert(CLIENT_REQUEST_ID, theirs);
    }
    req
}

pub async fn security_headers(req: Request<Body>, next: Next) -> Response {
    let mut res = next.run(req).await;
    let h = res.headers_mut();
    h.insert(
        "content-security-policy",
        HeaderValue::from_static(CONTENT_SECURITY_POLICY),
    );
    h.insert(
        "x-content-type-options",
        HeaderValue::from_static("nosniff"),
    );
    h.insert("x-frame-options", HeaderValue::from_static("DENY"));
    h.insert("referrer-policy", HeaderValue::from_static("no-referrer"));
    res
}
