//! Goal-set routes: named, ordered lists of pinned revisions, exported as one bundle.

use super::error::ServiceResult;
use super::export::fetched;
use super::extract::JsonBody;
use super::goals::{if_match, if_none_match};
use super::{Items, items};
use crate::service::AppState;
use crate::service::auth::Principal;
use crate::service::goal_sets::{self, GoalSetDocument, GoalSetInput};
use crate::service::goals::etag_of;
use crate::store::goal_sets::GoalSetRow;
use axum::extract::{Path, State};
use axum::http::{HeaderMap, HeaderValue, StatusCode, header};
use axum::response::{IntoResponse, Response};

fn respond(status: StatusCode, row: &GoalSetRow) -> Response {
    let mut resp = (
        status,
        [(
            header::CONTENT_TYPE,
            HeaderValue::from_static("application/json"),
        )],
        row.document.clone(),
    )
        .into_response();
    if let Ok(v) = HeaderValue::from_str(&etag_of(&row.document)) {
        resp.headers_mut().insert(header::ETAG, v);
    }
    resp
}

/// `POST /api/goal-sets`.
pub async fn create(
    State(state): State<AppState>,
    who: Principal,
    JsonBody(input): JsonBody<GoalSetInput>,
) -> ServiceResult<Response> {
    let row = goal_sets::create(&state, &who, input).await?;
    Ok(respond(StatusCode::CREATED, &row))
}

/// `GET /api/goal-sets`.
pub async fn list(
    State(state): State<AppState>,
    who: Principal,
) -> ServiceResult<axum::Json<Items<GoalSetDocument>>> {
    Ok(items(goal_sets::list(&state, &who).await?))
}

/// `GET /api/goal-sets/{id}`.
pub async fn get_one(
    State(state): State<AppState>,
    who: Principal,
    Path(id): Path<String>,
    headers: HeaderMap,
) -> ServiceResult<Response> {
    let row = goal_sets::load(&state, &who, &id).await?;
    let etag = etag_of(&row.document);
    if if_none_match(&headers, &etag) {
        return Ok((StatusCode::NOT_MODIFIED, [(header::ETAG, etag)]).into_response());
    }
    Ok(respond(StatusCode::OK, &row))
}

/// `PUT /api/goal-sets/{id}` with `If-Match` (428 without, 412 when stale).
pub async fn update(
    State(state): State<AppState>,
    who: Principal,
    Path(id): Path<String>,
    headers: HeaderMap,
    JsonBody(input): JsonBody<GoalSetInput>,
) -> ServiceResult<Response> {
    let row = goal_sets::update(&state, &who, &id, &if_match(&headers), input).await?;
    Ok(respond(StatusCode::OK, &row))
}

/// `GET /api/goal-sets/{id}/bundle.zip`: every pinned revision's bundle in one ZIP, in order.
pub async fn bundle(
    State(state): State<AppState>,
    who: Principal,
    Path(id): Path<String>,
    headers: HeaderMap,
) -> ServiceResult<Response> {
    let f = goal_sets::bundle(&state, &who, &id, |etag| if_none_match(&headers, etag)).await?;
    Ok(fetched(f, &headers))
}
