//! Server-rendered pages for people: sign-in, team home, the goal editor, history, goal sets,
//! members and tokens.
//!
//! Every page is one askama struct rendered through [`render::render`]; forms post and redirect
//! (post/redirect/get) with a one-shot flash message; state-changing forms carry the session's
//! CSRF token, checked by [`session::CsrfForm`]. The editor and other widgets are small ES modules
//! under `web/static/` that talk to the JSON API with the session cookie and `X-CSRF-Token`.

pub mod account;
pub mod compare;
pub mod demos;
pub mod error;
pub mod fits;
pub mod goals;
pub mod home;

pub mod render;

pub mod session;
pub mod sets;
pub mod team;

use crate::service::AppState;
use axum::Router;
use axum::extract::DefaultBodyLimit;
use axum::http::{StatusCode, header};
use axum::response::{IntoResponse, Response};
use axum::routing::{get, post};
use tower_http::limit::RequestBodyLimitLayer;

/// The page routes (merged beside the API by `app`).
pub fn router() -> Router<AppState> {
    // Frame uploads from the no-script form take the same limit as the API's upload route; the
    // limit is read per request from the state, so it is applied in the handler's extractor.
    let uploads = Router::new()
        .route("/cameras/{id}/frames", post(home::upload_frame))
        .layer(DefaultBodyLimit::disable());
    let forms = Router::new()
        .route("/signin", get(account::signin_form).post(account::signin))
        .route("/signout", post(account::signout))
        .route(
            "/welcome/{token}",
            get(account::welcome_form).post(account::welcome),
        )
        .route("/account", get(account::account))
        .route("/account/password", post(account::change_password))
        .route("/account/team", post(account::switch_team))
        .route("/", get(home::home))
        .route("/cameras", post(home::create_camera))
        .route("/demos/{id}", get(demos::show))
        .route("/fits/new", get(fits::new_fit))
        .route("/fits/{id}", get(fits::show))
        .route("/goals/new", get(goals::new_goal))
        .route("/goals/{id}", get(goals::editor))
        .route("/goals/{id}/history", get(goals::history))
        .route("/goals/{id}/compare", get(goals::compare))
        .route("/goals/{id}/restore", post(goals::restore))
        .route("/goal-sets", get(sets::list).post(sets::create))
        .route("/goal-sets/{id}", get(sets::show).post(sets::update))
        .route("/team", get(team::team))
        .route("/team/changes", get(team::changes))
        .route("/team/name", post(team::rename))
        .route("/team/invites", post(team::invite))
        .route("/team/invites/{id}/withdraw", post(team::withdraw_invite))
        .route("/team/members/{id}/role", post(team::set_role))
        .route("/team/members/{id}/remove", post(team::remove_member))
        .route("/team/tokens", post(team::create_token))
        .route("/team/tokens/{id}/revoke", post(team::revoke_token))
        .layer(DefaultBodyLimit::max(1 << 20))
        .layer(RequestBodyLimitLayer::new(1 << 20));
    // The editor's preview (`/api/preview/cost-map.png`) is an API route: it is mounted and
    // documented with the others from `api::routes`.
    Router::new()
        .merge(uploads)
        .merge(forms)
        .layer(axum::middleware::map_response(readable_errors))
}

/// The readable page for a service error (for layers outside the pages, such as the panic
/// catcher).
pub fn error_response(e: crate::service::ServiceError) -> Response {
    error::PageError::from(e).into_response()
}

/// The HTML 404 for paths that are not pages; the application's fallback answers with it for
/// every path outside the API.
pub fn not_found_page() -> Response {
    error::PageError::NotFound("There is no page at this address.".into()).into_response()
}

/// Layers and the router answer some errors with an empty or plain-text body (405, a body over
/// the limit, a malformed path). A person should see a page instead.
async fn readable_errors(resp: Response) -> Response {
    let status = resp.status();
    if !(status.is_client_error() || status.is_server_error()) {
        return resp;
    }
    let is_html = resp
        .headers()
        .get(header::CONTENT_TYPE)
        .and_then(|v| v.to_str().ok())
        .is_some_and(|v| v.starts_with("text/html"));
    if is_html {
        return resp;
    }
    let message = match status {
        StatusCode::PAYLOAD_TOO_LARGE => {
            "What you sent is larger than this page accepts.".to_string()
        }
        StatusCode::METHOD_NOT_ALLOWED => "This address does not take that kind of request: \
                                            pages open from links and forms send from their \
                                            buttons. Go back and use the page's links and buttons."
            .into(),
        StatusCode::NOT_FOUND => "There is no page at this address.".into(),
        _ => "The request could not be handled.".into(),
    };
    let err = match status {
        StatusCode::PAYLOAD_TOO_LARGE => error::PageError::TooLarge(message),
        StatusCode::NOT_FOUND => error::PageError::NotFound(message),
        StatusCode::FORBIDDEN => error::PageError::Forbidden(message),
        s => error::PageError::Refused(s, message),
    };
    let mut out = err.into_response();
    if let Some(allow) = resp.headers().get(header::ALLOW) {
        out.headers_mut().insert(header::ALLOW, allow.clone());
    }
    out
}
