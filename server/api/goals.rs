//! Goal routes: revisions as immutable documents with strong ETags, new revisions only through
//! `If-Match`.

use super::error::ServiceResult;
use super::extract::JsonBody;
use super::{Items, items};
use crate::service::AppState;
use crate::service::auth::Principal;
use crate::service::goals::{
    self, Expected, GoalListItem, RevisionSummary, etag_of, load_revision, parse_revision,
};
use crate::store::goals::RevisionRow;
use axum::extract::{Path, State};
use axum::http::{HeaderMap, HeaderValue, StatusCode, header};
use axum::response::{IntoResponse, Response};
use goalsmith_core::goal::GoalDocument;

/// The ETags of `If-Match`; [`Expected::Missing`] (so 428) when the header is missing or is `*`.
pub fn if_match(headers: &HeaderMap) -> Expected {
    let Some(value) = headers.get(header::IF_MATCH) else {
        return Expected::Missing;
    };
    let tags: Vec<String> = value
        .to_str()
        .unwrap_or("")
        .split(',')
        .map(|t| t.trim().to_string())
        .collect();
    // `*` would let any number of writers through at once, each believing it saved on top of
    // what it saw: a goal must be changed at a named revision, by that revision's ETag.
    if tags.iter().any(|t| t == "*") {
        return Expected::Missing;
    }
    Expected::Etags(tags)
}

/// Whether `If-None-Match` matches `etag` (so a 304 can be sent).
pub fn if_none_match(headers: &HeaderMap, etag: &str) -> bool {
    headers
        .get_all(header::IF_NONE_MATCH)
        .iter()
        .filter_map(|v| v.to_str().ok())
        .flat_map(|v| v.split(','))
        .map(str::trim)
        .any(|t| t == "*" || t == etag || t.strip_prefix("W/") == Some(etag))
}

pub(super) fn revision_response(status: StatusCode, rev: &RevisionRow) -> Response {
    let mut resp = (
        status,
        [(
            header::CONTENT_TYPE,
            HeaderValue::from_static("application/json"),
        )],
        rev.document.clone(),
    )
        .into_response();
    if let Ok(v) = HeaderValue::from_str(&etag_of(&rev.document)) {
        resp.headers_mut().insert(header::ETAG, v);
    }
    resp
}

/// `POST /api/goals`.
pub async fn create(
    State(state): State<AppState>,
    who: Principal,
    JsonBody(doc): JsonBody<GoalDocument>,
) -> ServiceResult<Response> {
    let rev = goals::create(&state, &who, doc).await?;
    let mut resp = revision_response(StatusCode::CREATED, &rev);
    let location = format!("/api/goals/{}/revisions/1", rev.goal_id);
    if let Ok(v) = HeaderValue::from_str(&location) {
        resp.headers_mut().insert(header::LOCATION, v);
    }
    Ok(resp)
}

/// `PUT /api/goals/{id}` with `If-Match`: a new revision, or 412 with nothing written.
pub async fn update(
    State(state): State<AppState>,
    who: Principal,
    Path(id): Path<String>,
    headers: HeaderMap,
    JsonBody(doc): JsonBody<GoalDocument>,
) -> ServiceResult<Response> {
    let rev = goals::update(&state, &who, &id, &if_match(&headers), doc).await?;
    Ok(revision_response(StatusCode::OK, &rev))
}

/// `GET /api/goals/{id}`: the latest revision.
pub async fn latest(
    State(state): State<AppState>,
    who: Principal,
    Path(id): Path<String>,
    headers: HeaderMap,
) -> ServiceResult<Response> {
    let rev = load_revision(&state, &who, &id, None).await?;
    Ok(conditional(&headers, &rev))
}

/// `GET /api/goals/{id}/revisions/{n}`: immutable, strong ETag, 304 on a match.
pub async fn revision(
    State(state): State<AppState>,
    who: Principal,
    Path((id, n)): Path<(String, String)>,
    headers: HeaderMap,
) -> ServiceResult<Response> {
    let rev = load_revision(&state, &who, &id, Some(parse_revision(&n)?)).await?;
    let mut resp = conditional(&headers, &rev);
    resp.headers_mut().insert(
        header::CACHE_CONTROL,
        HeaderValue::from_static("private, max-age=31536000, immutable"),
    );
    Ok(resp)
}

fn conditional(headers: &HeaderMap, rev: &RevisionRow) -> Response {
    let etag = etag_of(&rev.document);
    if if_none_match(headers, &etag) {
        return (StatusCode::NOT_MODIFIED, [(header::ETAG, etag)]).into_response();
    }
    revision_response(StatusCode::OK, rev)
}

/// `GET /api/goals/{id}/revisions`: metadata of every revision, oldest first.
pub async fn revisions(
    State(state): State<AppState>,
    who: Principal,
    Path(id): Path<String>,
) -> ServiceResult<axum::Json<Items<RevisionSummary>>> {
    Ok(items(goals::revisions(&state, &who, &id).await?))
}

/// `GET /api/goals`: the team's goals, most recently changed first.
pub async fn list(
    State(state): State<AppState>,
    who: Principal,
) -> ServiceResult<axum::Json<Items<GoalListItem>>> {
    Ok(items(goals::list(&state, &who).await?))
}
