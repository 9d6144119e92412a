//! The planners' web page, served on its own listener (`[web] listen`, `serve --web-listen`;
//! off by default, on in the demo).
//!
//! Server-rendered HTML with a CSS file and a little dependency-free JavaScript of our own, no
//! build step. Every view reads through the gRPC handlers themselves ([`reads`]), with the caller
//! the same access policy makes of the browser's token ([`session`]), so the page answers
//! exactly what a gRPC client with that token would get and is refused exactly where it would
//! be. Every value from the store is HTML-escaped ([`html`]).
//!
//! # Layout
//! - [`session`]: sign-in and sign-out; the token in an HttpOnly, SameSite=Strict cookie (or an
//!   `Authorization: Bearer` header), authenticated by [`crate::auth`] on every request.
//! - [`reads`]: the questions the page asks, as calls of the gRPC handlers.
//! - [`html`]: escaping, links, the page frame with the safety caution.
//! - [`views`]: the fleet at a glance, the due list with filters, one vehicle with its wear
//!   charts, the visit plan.
//! - [`downloads`]: the CSV and iCalendar exports and the chart images.
//! - `assets/`: `style.css` and `page.js`, compiled into the binary.

pub mod downloads;
pub mod html;
pub mod reads;
pub mod session;
pub mod views;

use std::future::Future;

use axum::response::{IntoResponse, Response};
use axum::routing::{get, post};
use http::header;

use crate::error::WebError;
use crate::state::AppState;

/// The page's style sheet.
const STYLE_CSS: &str = include_str!("assets/style.css");
/// The page's script: filter forms that apply on change, and the vehicle search box.
const PAGE_JS: &str = include_str!("assets/page.js");

/// Serves the web page on `listener` until `shutdown` resolves.
pub async fn serve(listener: tokio::net::TcpListener, state: AppState, shutdown: impl Future<Output = ()> + Send + 'static) -> std::io::Result<()> {
    axum::serve(listener, router(state)).with_graceful_shutdown(shutdown).await
}

/// Every route of the page.
pub fn router(state: AppState) -> axum::Router {
    axum::Router::new()
        .route("/", get(views::fleets))
        .route("/sign-in", get(session::sign_in_form).post(session::sign_in))
        .route("/sign-out", post(session::sign_out))
        .route("/fleets/{fleet}", get(views::fleet_at_a_glance))
        .route("/fleets/{fleet}/due", get(views::due_list))
        .route("/fleets/{fleet}/due.csv", get(downloads::due_csv))
        .route("/fleets/{fleet}/plan", get(views::visit_plan))
        .route("/fleets/{fleet}/plan.csv", get(downloads::plan_csv))
        .route("/fleets/{fleet}/plan.ics", get(downloads::plan_ics))
        .route("/fleets/{fleet}/vehicles/{vehicle}", get(views::vehicle))
        .route("/fleets/{fleet}/vehicles/{vehicle}/charts/{axle}/{part}", get(downloads::wear_chart))
        .route("/assets/style.css", get(|| async { ([(header::CONTENT_TYPE, "text/css; charset=utf-8")], STYLE_CSS) }))
        .route("/assets/page.js", get(|| async { ([(header::CONTENT_TYPE, "text/javascript; charset=utf-8")], PAGE_JS) }))
        .layer(axum::middleware::map_response(with_safe_headers))
        .with_state(state)
}

/// Headers on every response: only our own scripts, styles, images and fetches run or load; the page is
/// never framed; content types are not guessed; nothing is cached (the page shows live data
/// read with the caller's token).
async fn with_safe_headers(mut response: Response) -> Response {
    let headers = response.headers_mut();
    let fixed = [
        (header::CONTENT_SECURITY_POLICY, "default-src 'none'; script-src 'self'; style-src 'self'; img-src 'self'; connect-src 'self'; form-action 'self'; frame-ancestors 'none'; base-uri 'none'"),
        (header::X_CONTENT_TYPE_OPTIONS, "nosniff"),
        (header::X_FRAME_OPTIONS, "DENY"),
        (header::REFERRER_POLICY, "no-referrer"),
        (header::CACHE_CONTROL, "no-store"),
    ];
    for (name, value) in fixed {
        headers.insert(name, http::HeaderValue::from_static(value));
    }
    response
}

impl IntoResponse for WebError {
    fn into_response(self) -> Response {
        let status = self.http_status();
        let body = html::error_page(status, &self);
        (status, [(header::CONTENT_TYPE, "text/html; charset=utf-8")], body).into_response()
    }
}
