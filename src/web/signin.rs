//! Signing in to the dashboard with a token: a form, and the cookie that
//! carries the token afterwards (api.md, "Access"). The token is checked
//! by the service; this module only renders and sets the cookie.

use axum::Form;
use axum::extract::{Extension, Query, State};
use axum::http::header;
use axum::response::{Html, IntoResponse, Redirect, Response};
use maud::{Markup, html};
use serde::Deserialize;

use super::layout::page;
use crate::error::AppError;
use crate::http::access::{AccessConfig, cleared_cookie, local_target, session_cookie};
use crate::service::App;

#[derive(Debug, Deserialize)]
pub(crate) struct Next {
    next: Option<String>,
}

#[derive(Debug, Deserialize)]
pub(crate) struct SignIn {
    token: String,
    next: Option<String>,
}

fn form(next: &str, refusal: Option<&str>) -> Markup {
    page(
        "Sign in",
        false,
        html! {
            h1 { "Sign in" }
            p { "This service needs a token to show its evaluations. Ask its operator for one \
                 (they make it with " code { "proctor token create" } ")." }
            @if let Some(why) = refusal {
                p.problem-detail role="alert" { (why) }
            }
            form.signin method="post" action="/signin" {
                input type="hidden" name="next" value=(next);
                label for="token" { "Token" }
                input #token type="password" name="token" autocomplete="off" required autofocus;
                button type="submit" { "Sign in" }
            }
        },
    )
}

pub(crate) async fn show(Query(q): Query<Next>) -> Response {
    let next = local_target(q.next.as_deref());
    Html(form(&next, None).into_string()).into_response()
}

/// Checks the token and sets the cookie; an unknown token is a 401, which
/// a browser sees as this form again with the reason (`form_page`).
pub(crate) async fn submit(
    State(app): State<App>,
    Extension(access): Extension<AccessConfig>,
    Form(f): Form<SignIn>,
) -> Result<Response, AppError> {
    let next = local_target(f.next.as_deref());
    app.sign_in(&f.token).await?;
    Ok((
        [(
            header::SET_COOKIE,
            session_cookie(f.token.trim(), access.tls),
        )],
        Redirect::to(&next),
    )
        .into_response())
}

/// A 401 as a page: the sign-in form, saying why.
pub(crate) fn form_page(p: &crate::problem::Problem, next: &str) -> String {
    form(&local_target(Some(next)), Some(&p.detail)).into_string()
}

pub(crate) async fn sign_out(Extension(access): Extension<AccessConfig>) -> Response {
    (
        [(header::SET_COOKIE, cleared_cookie(access.tls))],
        Redirect::to("/signin"),
    )
        .into_response()
}
