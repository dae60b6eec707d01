//! The HTTP API: routes, extractors, auth and error mapping.
//!
//! Handlers parse into domain types at the boundary, authorise, call core and store, and shape
//! the response. They hold no SQL and compute no geometry themselves.

pub mod audit;
pub mod auth;
pub mod cameras;
pub mod demos;
pub mod error;
pub mod export;
pub mod extract;
pub mod frames;
pub mod goal_sets;
pub mod goals;
pub mod metrics;
pub mod openapi;
pub mod operations;
pub mod preview;
pub mod reward_fits;
pub mod routes;
pub mod tracks;

use crate::service::AppState;
use axum::extract::{DefaultBodyLimit, State};
use axum::http::StatusCode;
use axum::response::{IntoResponse, Response};
use axum::{Json, Router};
use schemars::JsonSchema;
use serde::Serialize;
use std::convert::Infallible;
use tower_http::limit::RequestBodyLimitLayer;

/// The API router, built from [`routes::table`]; `app` adds pages, static files and the layers
/// around everything.
pub fn router(state: AppState) -> Router<AppState> {
    let limits = state.limits.clone();
    let mut api = Router::new();
    for route in routes::table() {
        let bytes = match route.limit {
            routes::BodyLimit::Default => None,
            routes::BodyLimit::Json => Some(limits.json_body_bytes),
            routes::BodyLimit::Frame => Some(limits.frame_upload_bytes),
            routes::BodyLimit::Cost => Some(limits.cost_body_bytes),
            routes::BodyLimit::Preview => Some(routes::PREVIEW_BODY_BYTES),
            routes::BodyLimit::Demo => Some(limits.demo.max_archive_bytes),
        };
        // Both layers: `DefaultBodyLimit` sets what the body extractors accept, and
        // `RequestBodyLimitLayer` refuses an oversized body before it is read at all.
        let handler = match bytes {
            Some(n) => route
                .handler
                .layer::<_, Infallible>(DefaultBodyLimit::max(n))
                .layer::<_, Infallible>(RequestBodyLimitLayer::new(n)),
            None => route.handler,
        };
        api = api.route(route.path, handler);
    }
    api.layer(axum::middleware::map_response(contract_errors))
        .layer(axum::middleware::from_fn(caution_header))
}

/// Whether successful responses on `path` carry the caution header: everything about goals and
/// goal sets, and the editor's preview of a goal's cost.
pub fn carries_caution(path: &str) -> bool {
    ["/api/goals", "/api/goal-sets", "/api/preview"]
        .iter()
        .any(|p| path.starts_with(p))
}

/// Response header that carries [`crate::SAFETY_CAUTION`] with every goal export.
pub const CAUTION_HEADER: &str = "x-goalsmith-caution";

/// Puts the caution on every successful response about goals and goal sets (revision
/// documents, cost results, outcomes, maps, overlays, bundles), so whatever a planner or a
/// script pulls carries it, not only the bundle.
async fn caution_header(req: axum::extract::Request, next: axum::middleware::Next) -> Response {
    let applies = carries_caution(req.uri().path());
    let mut resp = next.run(req).await;
    if applies
        && resp.status().is_success()
        && let Ok(v) = axum::http::HeaderValue::from_str(crate::SAFETY_CAUTION)
    {
        resp.headers_mut().insert(CAUTION_HEADER, v);
    }
    resp
}

/// Layers and the router itself answer some errors in plain text (405, a body over the
/// `RequestBodyLimitLayer`, …). Rewrite those into the contract's JSON error body.
pub async fn contract_errors(resp: Response) -> Response {
    let status = resp.status();
    let plain = resp
        .headers()
        .get(axum::http::header::CONTENT_TYPE)
        .and_then(|v| v.to_str().ok())
        .is_none_or(|v| v.starts_with("text/plain"));
    if !(status.is_client_error() || status.is_server_error()) || !plain {
        return resp;
    }
    if status == StatusCode::NOT_MODIFIED {
        return resp;
    }
    let (code, message) = match status {
        StatusCode::PAYLOAD_TOO_LARGE => (
            "too_large",
            "the request body is larger than this route accepts",
        ),
        StatusCode::METHOD_NOT_ALLOWED => {
            ("method_not_allowed", "this route does not take that method")
        }
        StatusCode::UNSUPPORTED_MEDIA_TYPE => (
            "unsupported_media_type",
            "this route does not take that content type",
        ),
        StatusCode::NOT_FOUND => ("not_found", "no such route"),
        s if s.is_client_error() => ("bad_request", "the request could not be understood"),
        _ => (
            "internal",
            "something went wrong on the server; it has been logged",
        ),
    };
    let mut out = (status, Json(error::ErrorBody::new(code, message))).into_response();
    for (k, v) in resp.headers() {
        if k != axum::http::header::CONTENT_TYPE && k != axum::http::header::CONTENT_LENGTH {
            out.headers_mut().insert(k.clone(), v.clone());
        }
    }
    out
}

/// The body of a healthy `GET /healthz`.
#[derive(Debug, Serialize, JsonSchema)]
pub struct Health {
    /// `ok`.
    pub status: &'static str,
}

async fn healthz(State(state): State<AppState>) -> Response {
    match state.store.ping().await {
        Ok(()) => (StatusCode::OK, Json(Health { status: "ok" })).into_response(),
        Err(e) => {
            tracing::warn!(error = %e, "health check cannot reach the database");
            error::ServiceError::Unavailable.into_response()
        }
    }
}

/// The answer for an API path that matches no route (`app` routes unknown paths here or to
/// the pages' 404, by prefix).
pub fn not_found() -> Response {
    error::ServiceError::NotFound("no such route".into()).into_response()
}

/// Whether an unmatched path is the API's (JSON 404) rather than the pages' (HTML 404).
pub fn owns_path(path: &str) -> bool {
    path.starts_with("/api/") || path == "/healthz"
}

/// A list. Lists are always `{"items": [...]}`, never a bare array, so that fields can join
/// `items` later without breaking clients.
#[derive(Debug, Serialize, JsonSchema)]
#[schemars(rename = "{T}List")]
pub struct Items<T> {
    /// The entries, in the order the route documents.
    pub items: Vec<T>,
}

/// Wraps a list as `{"items": [...]}`.
pub fn items<T: Serialize>(items: Vec<T>) -> Json<Items<T>> {
    Json(Items { items })
}
