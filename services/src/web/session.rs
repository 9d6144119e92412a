//! Who the browser is: the token it presents, turned into a [`Caller`] by the same access
//! policy that guards every gRPC call ([`crate::auth::AccessPolicy::authenticate`]).
//!
//! A planner signs in once with a token; the page keeps it in a cookie that scripts cannot read
//! (`HttpOnly`), that other sites' pages never send (`SameSite=Strict`, which also stands in for a
//! CSRF token: every form on the page only reads or signs out) and that the browser drops when
//! it closes (no expiry). A script or dashboard may send `Authorization: Bearer <token>`
//! instead. The token is checked at every request, so a revoked token stops working at once.
//! The cookie has no `Secure` flag because the listener serves plain HTTP: put the page behind
//! a TLS proxy (or keep it on loopback) when it leaves the machine.

use axum::extract::State;
use axum::response::{IntoResponse, Redirect, Response};
use http::{header, HeaderMap, StatusCode};
use serde::Deserialize;

use super::html::{escape, page};
use crate::auth::Caller;
use crate::error::{ServiceError, WebError};
use crate::state::AppState;

/// Name of the cookie holding the token.
pub const TOKEN_COOKIE: &str = "brakeledger_token";

/// Longest token accepted from a browser, characters (ours are 48).
const MAX_TOKEN_CHARS: usize = 512;

/// The token the request presents: `Authorization: Bearer`, else the cookie.
pub fn presented_token(headers: &HeaderMap) -> Option<String> {
    let bearer = headers
        .get(header::AUTHORIZATION)
        .and_then(|v| v.to_str().ok())
        .and_then(|v| v.strip_prefix("Bearer "))
        .map(|t| t.trim().to_owned());
    bearer.or_else(|| {
        headers
            .get_all(header::COOKIE)
            .iter()
            .filter_map(|v| v.to_str().ok())
            .flat_map(|v| v.split(';'))
            .filter_map(|pair| pair.trim().split_once('='))
            .find(|(name, _)| *name == TOKEN_COOKIE)
            .map(|(_, value)| value.to_owned())
    })
    .filter(|token| !token.is_empty())
}

/// Whether `token` can travel in a cookie and a header as it is.
fn token_is_plain(token: &str) -> bool {
    !token.is_empty() && token.len() <= MAX_TOKEN_CHARS && token.bytes().all(|b| b.is_ascii_graphic() && !matches!(b, b';' | b',' | b'"' | b'\\'))
}

/// The caller presenting `token` (none: what the policy makes of a call without one).
pub fn authenticate(state: &AppState, token: Option<&str>) -> Result<Caller, WebError> {
    let mut request = tonic::Request::new(());
    if let Some(token) = token {
        let value = format!("Bearer {token}").parse().map_err(|_| WebError::from(ServiceError::Unauthenticated("the token holds characters a token never has".into())))?;
        request.metadata_mut().insert("authorization", value);
    }
    Ok(state.access.authenticate(&request)?)
}

/// The caller of a page request.
pub fn caller(state: &AppState, headers: &HeaderMap) -> Result<Caller, WebError> {
    authenticate(state, presented_token(headers).as_deref())
}

/// The sign-in form, with a message above it (HTML-escaped here).
pub fn sign_in_box(message: &str) -> String {
    let message = if message.is_empty() { String::new() } else { format!("<p class=\"error\" id=\"sign-in-error\">{}</p>", escape(message)) };
    format!(
        "<section class=\"sign-in\">{message}<form method=\"post\" action=\"/sign-in\" id=\"sign-in\">\
<label for=\"token\">Access token (a planner's, or any token that may read the fleet)</label>\
<input type=\"password\" id=\"token\" name=\"token\" autocomplete=\"off\" required>\
<button type=\"submit\">Sign in</button></form>\
<p class=\"muted\">Ask your fleet administrator for a token (<code>brakeledger token create --fleet FLEET --role planner</code>). \
The page keeps it in a cookie that scripts cannot read and that the browser drops when it closes.</p></section>"
    )
}

/// `GET /sign-in`.
pub async fn sign_in_form(State(state): State<AppState>) -> Response {
    let note = if state.access.requires_token() { "" } else { "This server runs without tokens: no sign-in is needed." };
    page_response(StatusCode::OK, &page("Sign in", None, &format!("{}<p><a href=\"/\">Fleets</a></p>", sign_in_box(note))))
}

/// The sign-in form's fields.
#[derive(Debug, Deserialize)]
pub struct SignIn {
    /// The token typed in.
    pub token: String,
}

/// `POST /sign-in`: checks the token now and keeps it in the cookie.
pub async fn sign_in(State(state): State<AppState>, axum::Form(form): axum::Form<SignIn>) -> Response {
    let token = form.token.trim();
    let refused = |message: &str| page_response(StatusCode::UNAUTHORIZED, &page("Sign in", None, &sign_in_box(message)));
    if !token_is_plain(token) {
        return refused("That is not a token: tokens are one word of letters, digits and punctuation.");
    }
    match authenticate(&state, Some(token)) {
        Ok(_) => {
            let cookie = format!("{TOKEN_COOKIE}={token}; Path=/; HttpOnly; SameSite=Strict");
            ([(header::SET_COOKIE, cookie)], Redirect::to("/")).into_response()
        }
        Err(error) => refused(&error.to_string()),
    }
}

/// `POST /sign-out`: forgets the cookie.
pub async fn sign_out() -> Response {
    let cookie = format!("{TOKEN_COOKIE}=; Path=/; HttpOnly; SameSite=Strict; Max-Age=0");
    ([(header::SET_COOKIE, cookie)], Redirect::to("/sign-in")).into_response()
}

/// An HTML page with a status.
pub fn page_response(status: StatusCode, html: &str) -> Response {
    (status, [(header::CONTENT_TYPE, "text/html; charset=utf-8")], html.to_owned()).into_response()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_header_wins_over_the_cookie_and_odd_tokens_are_refused() {
        let mut headers = HeaderMap::new();
        headers.insert(header::COOKIE, "a=b; brakeledger_token=blt1_cookie; c=d".parse().unwrap());
        assert_eq!(presented_token(&headers).as_deref(), Some("blt1_cookie"));
        headers.insert(header::AUTHORIZATION, "Bearer blt1_header".parse().unwrap());
        assert_eq!(presented_token(&headers).as_deref(), Some("blt1_header"));
        assert!(token_is_plain("blt1_abc-DEF"));
        for bad in ["", "a;b", "a b", "a\"b", "é"] {
            assert!(!token_is_plain(bad), "{bad:?}");
        }
    }
}
