//! Frame routes: still images of a camera, stored once by SHA-256.

use super::error::ServiceResult;
use super::extract::{media_type, read_body};
use super::goals::if_none_match;
use super::{Items, items};
use crate::service::AppState;
use crate::service::auth::Principal;
use crate::service::frames::{self, FrameView, frame_view};
use axum::Json;
use axum::extract::{Path, Request, State};
use axum::http::{HeaderMap, StatusCode, header};
use axum::response::{IntoResponse, Response};

/// `POST /api/cameras/{id}/frames` with a raw PNG or JPEG body. A repeated upload of the same
/// bytes to the same camera returns the existing frame with 200.
pub async fn upload(
    State(state): State<AppState>,
    who: Principal,
    Path(id): Path<String>,
    req: Request,
) -> ServiceResult<(StatusCode, Json<FrameView>)> {
    who.require(crate::service::auth::Role::Editor)?;
    let content_type = media_type(&req).unwrap_or_default();
    let bytes = if matches!(
        content_type.as_str(),
        "image/png" | "image/jpeg" | "image/jpg"
    ) {
        read_body(req, &state).await?.to_vec()
    } else {
        // Refused by the service without reading a body it would not take.
        Vec::new()
    };
    let (frame, new) = frames::upload(&state, &who, &id, &content_type, bytes).await?;
    let status = if new {
        StatusCode::CREATED
    } else {
        StatusCode::OK
    };
    Ok((status, Json(frame_view(&frame))))
}

/// `GET /api/cameras/{id}/frames`.
pub async fn list_for_camera(
    State(state): State<AppState>,
    who: Principal,
    Path(id): Path<String>,
) -> ServiceResult<Json<Items<FrameView>>> {
    Ok(items(frames::list_for_camera(&state, &who, &id).await?))
}

/// `GET /api/frames/{id}`.
pub async fn get_one(
    State(state): State<AppState>,
    who: Principal,
    Path(id): Path<String>,
) -> ServiceResult<Json<FrameView>> {
    Ok(Json(frame_view(&frames::load(&state, &who, &id).await?)))
}

/// `GET /api/frames/{id}/image`: the stored bytes, immutable, with the SHA-256 as strong ETag.
pub async fn image(
    State(state): State<AppState>,
    who: Principal,
    Path(id): Path<String>,
    headers: HeaderMap,
) -> ServiceResult<Response> {
    let frame = frames::load(&state, &who, &id).await?;
    let etag = format!("\"{}\"", frame.sha256);
    if if_none_match(&headers, &etag) {
        return Ok((StatusCode::NOT_MODIFIED, [(header::ETAG, etag)]).into_response());
    }
    let (_, content_type, bytes) = frames::image(&state, &who, &id).await?;
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
