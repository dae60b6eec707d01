//! Demo routes: upload a demonstration, read it back, and its frames' images.

use super::error::ServiceResult;
use super::export::refuse;
use super::extract::{media_type, read_body};
use super::goals::if_none_match;
use crate::service::AppState;
use crate::service::ServiceError;
use crate::service::auth::Principal;
use crate::service::demos::{self, DemoView};
use axum::Json;
use axum::extract::rejection::QueryRejection;
use axum::extract::{Path, Query, Request, State};
use axum::http::{HeaderMap, StatusCode, header};
use axum::response::{IntoResponse, Response};
use schemars::JsonSchema;
use serde::Deserialize;

/// `POST /api/cameras/{id}/demos` with an `application/zip` or `image/gif` body → 201.
pub async fn upload(
    State(state): State<AppState>,
    who: Principal,
    Path(id): Path<String>,
    query: Result<Query<UploadQuery>, QueryRejection>,
    req: Request,
) -> ServiceResult<(StatusCode, Json<DemoView>)> {
    let content_type = media_type(&req).unwrap_or_default();
    let name = match query {
        Ok(Query(q)) => q.name,
        Err(e) => {
            let e = ServiceError::invalid_body("bad_query", e.body_text());
            return Err(refuse(req, e).await);
        }
    };
    // Role, camera, type and a heavy-work permit before the body (up to the demo limit) is
    // read; a refusal still reads and drops the body, so the uploader gets the error.
    let ticket = match demos::begin_upload(&state, &who, &id, &content_type, name.as_deref()).await
    {
        Ok(t) => t,
        Err(e) => return Err(refuse(req, e).await),
    };
    let bytes = read_body(req, &state).await?;
    let row = ticket.finish(&state, bytes.to_vec()).await?;
    Ok((
        StatusCode::CREATED,
        Json(demos::view(&state, &who, &row.id).await?),
    ))
}

/// `GET /api/demos/{id}`.
pub async fn get_one(
    State(state): State<AppState>,
    who: Principal,
    Path(id): Path<String>,
) -> ServiceResult<Json<DemoView>> {
    Ok(Json(demos::view(&state, &who, &id).await?))
}

/// The query of `POST /api/cameras/{id}/demos`.
#[derive(Debug, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct UploadQuery {
    /// What the demo shows, up to 200 characters (default: "demo" and its upload time).
    #[schemars(length(min = 1, max = 200))]
    pub name: Option<String>,
}

/// `GET /api/cameras/{id}/demos`.
pub async fn list_for_camera(
    State(state): State<AppState>,
    who: Principal,
    Path(id): Path<String>,
) -> ServiceResult<Json<super::Items<demos::DemoSummary>>> {
    Ok(super::items(
        demos::list_for_camera(&state, &who, &id).await?,
    ))
}

/// `GET /api/demos/{id}/frames/{i}/image`: the frame's image, immutable, SHA-256 as ETag.
pub async fn frame_image(
    State(state): State<AppState>,
    who: Principal,
    Path((id, i)): Path<(String, String)>,
    headers: HeaderMap,
) -> ServiceResult<Response> {
    let (sha, content_type, bytes) = demos::frame_image(&state, &who, &id, &i).await?;
    let etag = format!("\"{sha}\"");
    if if_none_match(&headers, &etag) {
        return Ok((StatusCode::NOT_MODIFIED, [(header::ETAG, etag)]).into_response());
    }
    Ok((
        [
            (header::CONTENT_TYPE, content_type),
            (header::ETAG, etag),
            (
                header::CACHE_CONTROL,
                "private, max-age=31536000, immutable".into(),
            ),
        ],
        bytes,
    )
        .into_response())
}

/// `POST /api/demos/{id}/goal` → 201 with revision 1 of a goal made from the demo's tracks.
pub async fn make_goal(
    State(state): State<AppState>,
    who: Principal,
    Path(id): Path<String>,
    super::extract::JsonBody(input): super::extract::JsonBody<crate::service::tracks::DemoGoal>,
) -> ServiceResult<Response> {
    let rev = crate::service::tracks::make_goal(&state, &who, &id, input).await?;
    let mut resp = super::goals::revision_response(StatusCode::CREATED, &rev);
    let location = format!("/api/goals/{}/revisions/1", rev.goal_id);
    if let Ok(v) = axum::http::HeaderValue::from_str(&location) {
        resp.headers_mut().insert(header::LOCATION, v);
    }
    Ok(resp)
}
