//! Who a request comes from (api.md, "Access"), decided once per request:
//! a bearer token, or the dashboard's sign-in cookie, or nobody. Reads need
//! a token unless reads are public; what else each operation needs is the
//! service's to decide, from the `Caller` this leaves in the request.
//!
//! Also the browser-facing guards: a request that changes state on the
//! strength of a cookie must come from our own origin, and with access off
//! only loopback host names are served, so that a page elsewhere cannot
//! reach a developer's local service through DNS rebinding.

use axum::body::Body;
use axum::extract::{FromRequestParts, State};
use axum::http::request::Parts;
use axum::http::{HeaderMap, Method, Request, header};
use axum::middleware::Next;
use axum::response::{IntoResponse, Response};

use crate::error::AppError;
use crate::service::{App, Caller};

/// The dashboard's sign-in cookie.
pub const SESSION_COOKIE: &str = "proctor_session";

/// Whether requests need a token.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum AuthMode {
    Required,
    Off,
}

/// Whether reads (GETs of the API and the dashboard) need a token.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum ReadAccess {
    Token,
    Public,
}

#[derive(Debug, Clone, Copy)]
pub struct AccessConfig {
    pub auth: AuthMode,
    pub reads: ReadAccess,
    /// The service speaks HTTPS, so cookies are `Secure`.
    pub tls: bool,
}

/// Paths anyone may fetch: liveness, readiness, the contract, the style
/// sheet and the sign-in page itself.
fn open_path(path: &str) -> bool {
    matches!(
        path,
        "/healthz" | "/readyz" | "/openapi.yaml" | "/assets/style.css" | "/signin" | "/signout"
    )
}

/// The credential a request carries, and whether it came in a cookie.
fn credential(headers: &HeaderMap) -> Option<(String, bool)> {
    if let Some(v) = headers
        .get(header::AUTHORIZATION)
        .and_then(|v| v.to_str().ok())
    {
        let token = v.strip_prefix("Bearer ").unwrap_or(v).trim();
        return Some((token.to_string(), false));
    }
    headers
        .get_all(header::COOKIE)
        .iter()
        .filter_map(|v| v.to_str().ok())
        .flat_map(|v| v.split(';'))
        .find_map(|c| c.trim().strip_prefix(SESSION_COOKIE)?.strip_prefix('='))
        .map(|t| (t.to_string(), true))
}

/// Whether a request comes from a page of this service: `Sec-Fetch-Site`
/// says same-origin, or `Origin` names our own host. A request with
/// neither (a script or CI client) is no browser's cross-site request.
pub fn same_origin(headers: &HeaderMap) -> bool {
    if let Some(site) = headers.get("sec-fetch-site").and_then(|v| v.to_str().ok()) {
        return matches!(site, "same-origin" | "none");
    }
    let Some(origin) = headers.get(header::ORIGIN).and_then(|v| v.to_str().ok()) else {
        return true;
    };
    let host = headers.get(header::HOST).and_then(|v| v.to_str().ok());
    let origin_host = origin.split_once("://").map(|(_, h)| h);
    host.is_some() && origin_host == host
}

/// Whether a `Host` header names this machine.
fn loopback_host(headers: &HeaderMap) -> bool {
    let Some(host) = headers.get(header::HOST).and_then(|v| v.to_str().ok()) else {
        // HTTP/1.0 clients may send none; they cannot be a rebinding page.
        return true;
    };
    let name = match host.rsplit_once(':') {
        Some((name, port)) if port.chars().all(|c| c.is_ascii_digit()) => name,
        _ => host,
    };
    matches!(name, "localhost" | "127.0.0.1" | "[::1]") || name.ends_with(".localhost")
}

fn changes_state(method: &Method) -> bool {
    !matches!(*method, Method::GET | Method::HEAD | Method::OPTIONS)
}

/// Decides the caller and leaves it in the request's extensions.
pub async fn identify(
    State((app, access)): State<(App, AccessConfig)>,
    mut req: Request<Body>,
    next: Next,
) -> Response {
    // Owned parts: the body is not Sync, so a borrow of the request may not
    // live across the token lookup.
    let (headers, method, path) = (
        req.headers().clone(),
        req.method().clone(),
        req.uri().path().to_string(),
    );
    match caller(&app, access, &headers, &method, &path).await {
        Ok(caller) => {
            req.extensions_mut().insert(caller);
            next.run(req).await
        }
        Err(AppError::Unauthorized(_))
            if method == Method::GET
                && !path.starts_with("/v1/")
                && crate::http::errors::prefers_html(&headers) =>
        {
            // A person opening a page is asked to sign in, then sent back.
            let back = req.uri().path_and_query().map_or("/", |p| p.as_str());
            let next: String = url_encoded(back);
            axum::response::Redirect::to(&format!("/signin?next={next}")).into_response()
        }
        Err(e) => {
            crate::service::drain(&mut req.into_body().into_data_stream()).await;
            e.into_response()
        }
    }
}

/// A query value, percent-encoded (RFC 3986 unreserved characters kept).
fn url_encoded(v: &str) -> String {
    v.bytes()
        .map(|b| match b {
            b'A'..=b'Z' | b'a'..=b'z' | b'0'..=b'9' | b'-' | b'.' | b'_' | b'~' | b'/' => {
                (b as char).to_string()
            }
            _ => format!("%{b:02X}"),
        })
        .collect()
}

async fn caller(
    app: &App,
    access: AccessConfig,
    headers: &HeaderMap,
    method: &Method,
    path: &str,
) -> Result<Caller, AppError> {
    let found = credential(headers);
    // A browser sends no Authorization header across sites without asking
    // first; every other state change must come from our own pages.
    let bearer = found.as_ref().is_some_and(|(_, cookie)| !cookie);
    if changes_state(method) && !bearer && !same_origin(headers) {
        return Err(AppError::Forbidden(
            "a request that changes anything must come from this service's own pages".into(),
        ));
    }
    if access.auth == AuthMode::Off {
        if !loopback_host(headers) {
            return Err(AppError::Forbidden(
                "with access control off this service answers only to localhost; \
                 run it with --auth required to serve other hosts"
                    .into(),
            ));
        }
        return Ok(Caller::Open);
    }
    let read = !changes_state(method);
    let Some((secret, _)) = found else {
        return if open_path(path) || (read && access.reads == ReadAccess::Public) {
            Ok(Caller::Public)
        } else {
            Err(AppError::Unauthorized(
                "this service needs a token: send Authorization: Bearer TOKEN, or sign in on \
                 the dashboard"
                    .into(),
            ))
        };
    };
    match app.store.token_for_secret(&secret).await? {
        Some(t) => Ok(Caller::Token(t)),
        None if open_path(path) => Ok(Caller::Public),
        None => Err(AppError::Unauthorized(
            "the token is unknown or revoked".into(),
        )),
    }
}

/// The `Set-Cookie` value that signs a browser in: the token itself,
/// unreadable by scripts, sent back only to this site (and only over
/// HTTPS when the service speaks it).
pub fn session_cookie(secret: &str, tls: bool) -> String {
    let secure = if tls { "; Secure" } else { "" };
    format!("{SESSION_COOKIE}={secret}; Path=/; HttpOnly; SameSite=Strict{secure}")
}

/// The `Set-Cookie` value that signs a browser out.
pub fn cleared_cookie(tls: bool) -> String {
    let secure = if tls { "; Secure" } else { "" };
    format!("{SESSION_COOKIE}=; Path=/; Max-Age=0; HttpOnly; SameSite=Strict{secure}")
}

/// Where a browser goes after signing in: a path of this site only, so the
/// form cannot be used to send people elsewhere.
pub fn local_target(next: Option<&str>) -> String {
    match next {
        Some(n) if n.starts_with('/') && !n.starts_with("//") && !n.contains('\\') => n.to_string(),
        _ => "/".to_string(),
    }
}

/// The caller, in a handler's arguments.
pub struct Who(pub Caller);

impl<S: Send + Sync> FromRequestParts<S> for Who {
    type Rejection = AppError;

    async fn from_request_parts(parts: &mut Parts, _: &S) -> Result<Self, AppError> {
        parts
            .extensions
            .get::<Caller>()
            .cloned()
            .map(Who)
            .ok_or_else(|| AppError::internal("the access layer did not run"))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn headers(pairs: &[(&'static str, &str)]) -> HeaderMap {
        let mut h = HeaderMap::new();
        for (k, v) in pairs {
            h.insert(*k, v.parse().unwrap());
        }
        h
    }

    #[test]
    fn only_our_own_origin_counts_as_same_origin() {
        assert!(same_origin(&headers(&[("sec-fetch-site", "same-origin")])));
        assert!(!same_origin(&headers(&[("sec-fetch-site", "cross-site")])));
        assert!(!same_origin(&headers(&[("sec-fetch-site", "same-site")])));
        let ours = [
            ("host", "proctor.example:8443"),
            ("origin", "https://proctor.example:8443"),
        ];
        assert!(same_origin(&headers(&ours)));
        let theirs = [
            ("host", "proctor.example"),
            ("origin", "https://elsewhere.example"),
        ];
        assert!(!same_origin(&headers(&theirs)));
        assert!(same_origin(&headers(&[])), "scripts send neither");
    }

    #[test]
    fn loopback_hosts_are_localhost_names_and_addresses() {
        for host in [
            "localhost:8080",
            "127.0.0.1:9",
            "[::1]:80",
            "app.localhost",
            "localhost",
        ] {
            assert!(loopback_host(&headers(&[("host", host)])), "{host}");
        }
        for host in [
            "proctor.example",
            "evil.example:8080",
            "127.0.0.1.evil.example",
        ] {
            assert!(!loopback_host(&headers(&[("host", host)])), "{host}");
        }
    }

    #[test]
    fn after_sign_in_only_a_path_of_this_site_is_a_target() {
        assert_eq!(
            local_target(Some("/evaluations/x?y=1")),
            "/evaluations/x?y=1"
        );
        for elsewhere in [
            "//evil.example/",
            "https://evil.example/",
            "/\\evil.example",
            "x",
        ] {
            assert_eq!(local_target(Some(elsewhere)), "/", "{elsewhere}");
        }
        assert_eq!(local_target(None), "/");
    }

    #[test]
    fn the_session_cookie_is_http_only_strict_and_secure_under_tls() {
        assert_eq!(
            session_cookie("s3", false),
            "proctor_session=s3; Path=/; HttpOnly; SameSite=Strict"
        );
        assert!(session_cookie("s3", true).ends_with("; Secure"));
        assert!(cleared_cookie(false).contains("Max-Age=0"));
        assert_eq!(url_encoded("/a b?c=d&e"), "/a%20b%3Fc%3Dd%26e");
    }

    #[test]
    fn a_bearer_header_wins_over_a_cookie() {
        let h = headers(&[
            ("authorization", "Bearer abc"),
            ("cookie", "proctor_session=def"),
        ]);
        assert_eq!(credential(&h), Some(("abc".into(), false)));
        let c = headers(&[("cookie", "theme=dark; proctor_session=def")]);
        assert_eq!(credential(&c), Some(("def".into(), true)));
    }
}
