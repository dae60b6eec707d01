//! The HTTP API of API.md: routes, extractors, auth and error mapping.
//!
//! Handlers parse into domain types at the boundary, authorise, call core and store, and shape
//! the response. They hold no SQL and compute no geometry themselves.

pub mod auth;
pub mod cameras;
pub mod error;
pub mod export;
pub mod extract;
pub mod frames;
pub mod goal_sets;
pub mod goals;
pub mod openapi;

use crate::config::Limits;
use crate::store::Store;
use axum::extract::{DefaultBodyLimit, State};
use axum::http::StatusCode;
use axum::response::{IntoResponse, Response};
use axum::routing::{get, post};
use axum::{Json, Router};
use std::sync::Arc;
use tower_http::limit::RequestBodyLimitLayer;

/// Shared by every handler.
#[derive(Clone)]
pub struct AppState {
    /// The database.
    pub store: Store,
    /// Body and image limits.
    pub limits: Arc<Limits>,
    /// Checked goals and cost models of recently scored revisions (revisions never change).
    pub models: Arc<export::ModelCache>,
}

/// Every API route with its methods, for the OpenAPI document and the authorisation tests.
pub const ROUTES: &[(&str, &str)] = &[
    ("GET", "/healthz"),
    ("GET", "/api/openapi.json"),
    ("GET", "/api/schema/goal.json"),
    ("POST", "/api/cameras"),
    ("GET", "/api/cameras"),
    ("GET", "/api/cameras/{id}"),
    ("GET", "/api/cameras/{id}/intrinsics"),
    ("POST", "/api/cameras/{id}/frames"),
    ("GET", "/api/cameras/{id}/frames"),
    ("GET", "/api/frames/{id}"),
    ("GET", "/api/frames/{id}/image"),
    ("POST", "/api/goals"),
    ("GET", "/api/goals"),
    ("GET", "/api/goals/{id}"),
    ("PUT", "/api/goals/{id}"),
    ("GET", "/api/goals/{id}/revisions"),
    ("GET", "/api/goals/{id}/revisions/{n}"),
    ("GET", "/api/goals/{id}/revisions/{n}/cost-maps.npy"),
    ("POST", "/api/goals/{id}/revisions/{n}/cost"),
    ("GET", "/api/goals/{id}/revisions/{n}/overlay.png"),
    ("GET", "/api/goals/{id}/revisions/{n}/bundle.zip"),
    ("POST", "/api/goals/{id}/revisions/{n}/outcomes"),
    ("GET", "/api/goals/{id}/outcomes"),
    ("POST", "/api/goal-sets"),
    ("GET", "/api/goal-sets"),
    ("GET", "/api/goal-sets/{id}"),
    ("PUT", "/api/goal-sets/{id}"),
    ("GET", "/api/goal-sets/{id}/bundle.zip"),
    ("POST", "/api/preview/cost-map.png"),
];

/// The API router; `app` adds pages, static files and the layers around everything.
pub fn router(state: AppState) -> Router<AppState> {
    let limits = state.limits.clone();
    let json_limit = limits.json_body_bytes;
    let frame_limit = limits.frame_upload_bytes;

    let uploads = Router::new()
        .route(
            "/api/cameras/{id}/frames",
            post(frames::upload).get(frames::list_for_camera),
        )
        .layer(DefaultBodyLimit::max(frame_limit))
        .layer(RequestBodyLimitLayer::new(frame_limit));

    let cost_limit = limits.cost_body_bytes;
    let scoring = Router::new()
        .route("/api/goals/{id}/revisions/{n}/cost", post(export::cost))
        .layer(DefaultBodyLimit::max(cost_limit))
        .layer(RequestBodyLimitLayer::new(cost_limit));

    let json_routes = Router::new()
        .route("/api/cameras", post(cameras::create).get(cameras::list))
        .route("/api/cameras/{id}", get(cameras::get_one))
        .route("/api/cameras/{id}/intrinsics", get(cameras::intrinsics))
        .route("/api/frames/{id}", get(frames::get_one))
        .route("/api/frames/{id}/image", get(frames::image))
        .route("/api/goals", post(goals::create).get(goals::list))
        .route("/api/goals/{id}", get(goals::latest).put(goals::update))
        .route("/api/goals/{id}/revisions", get(goals::revisions))
        .route("/api/goals/{id}/revisions/{n}", get(goals::revision))
        .route(
            "/api/goals/{id}/revisions/{n}/cost-maps.npy",
            get(export::cost_maps),
        )
        .route(
            "/api/goals/{id}/revisions/{n}/overlay.png",
            get(export::overlay),
        )
        .route(
            "/api/goals/{id}/revisions/{n}/bundle.zip",
            get(export::bundle),
        )
        .route(
            "/api/goals/{id}/revisions/{n}/outcomes",
            post(export::report_outcome),
        )
        .route("/api/goals/{id}/outcomes", get(export::outcomes))
        .route(
            "/api/goal-sets",
            post(goal_sets::create).get(goal_sets::list),
        )
        .route(
            "/api/goal-sets/{id}",
            get(goal_sets::get_one).put(goal_sets::update),
        )
        .route("/api/goal-sets/{id}/bundle.zip", get(goal_sets::bundle))
        .layer(DefaultBodyLimit::max(json_limit))
        .layer(RequestBodyLimitLayer::new(json_limit));

    Router::new()
        .route("/healthz", get(healthz))
        .route("/api/openapi.json", get(openapi::document))
        .route("/api/schema/goal.json", get(openapi::goal_schema))
        .merge(uploads)
        .merge(scoring)
        .merge(json_routes)
        .fallback(api_not_found)
        .layer(axum::middleware::map_response(contract_errors))
        .layer(axum::middleware::from_fn(caution_header))
}

/// Response header that carries [`crate::SAFETY_CAUTION`] with every goal export.
pub const CAUTION_HEADER: &str = "x-goalsmith-caution";

/// Puts the caution on every successful response about goals and goal sets (revision
/// documents, cost results, outcomes, maps, overlays, bundles), so whatever a planner or a
/// script pulls carries it, not only the bundle.
async fn caution_header(req: axum::extract::Request, next: axum::middleware::Next) -> Response {
    let path = req.uri().path();
    let applies = ["/api/goals", "/api/goal-sets", "/api/preview"]
        .iter()
        .any(|p| path.starts_with(p));
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
async fn contract_errors(resp: Response) -> Response {
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
    let mut out = (
        status,
        Json(serde_json::json!({"error": {"code": code, "message": message}})),
    )
        .into_response();
    for (k, v) in resp.headers() {
        if k != axum::http::header::CONTENT_TYPE && k != axum::http::header::CONTENT_LENGTH {
            out.headers_mut().insert(k.clone(), v.clone());
        }
    }
    out
}

async fn healthz(State(state): State<AppState>) -> Response {
    match state.store.ping().await {
        Ok(()) => (StatusCode::OK, Json(serde_json::json!({"status": "ok"}))).into_response(),
        Err(e) => {
            tracing::warn!(error = %e, "health check cannot reach the database");
            error::ApiError::Unavailable.into_response()
        }
    }
}

async fn api_not_found(uri: axum::http::Uri) -> Response {
    // Paths outside /api belong to people: they get a readable page, not JSON.
    if !uri.path().starts_with("/api/") && uri.path() != "/healthz" {
        return crate::pages::not_found_page();
    }
    error::ApiError::NotFound("no such route".into()).into_response()
}

/// Lists are always `{"items": [...]}`.
pub fn items<T: serde::Serialize>(items: Vec<T>) -> Json<serde_json::Value> {
    Json(serde_json::json!({ "items": items }))
}

/// RFC 3339 UTC with milliseconds, from unix milliseconds.
pub fn rfc3339(ms: i64) -> String {
    let t = time::OffsetDateTime::from_unix_timestamp_nanos(i128::from(ms) * 1_000_000)
        .unwrap_or(time::OffsetDateTime::UNIX_EPOCH);
    let format = time::macros::format_description!(
        "[year]-[month]-[day]T[hour]:[minute]:[second].[subsecond digits:3]Z"
    );
    t.format(&format).unwrap_or_default()
}

/// Parses a UUID path id, so malformed ids are a plain 404 rather than a database round trip.
pub fn parse_id(raw: &str, what: &str) -> Result<String, error::ApiError> {
    uuid::Uuid::parse_str(raw)
        .map(|u| u.to_string())
        .map_err(|_| error::ApiError::NotFound(format!("no {what} with id {raw:?}")))
}
