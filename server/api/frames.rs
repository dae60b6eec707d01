//! Frames: still images of a camera, stored once by SHA-256.

use super::auth::{Principal, Role};
use super::error::{ApiError, ApiResult};
use super::extract::{media_type, read_body};
use super::{AppState, Items, cameras, items, parse_id, rfc3339};
use crate::images::{self, ImageRejection};
use crate::store::{self, frames::FrameRow};
use axum::Json;
use axum::extract::{Path, Request, State};
use axum::http::{HeaderMap, StatusCode, header};
use axum::response::{IntoResponse, Response};
use schemars::JsonSchema;
use serde::Serialize;
use serde_json::Value;
use sha2::{Digest, Sha256};

/// A frame's metadata as served.
// Fields in alphabetical order: the key order of these bodies when they were built as a
// `serde_json::Value` (a sorted map in release builds), so the served bytes did not change.
#[derive(Debug, Clone, Serialize, JsonSchema)]
pub struct FrameView {
    /// The camera it was taken by.
    pub camera_id: String,
    /// Upload time, RFC 3339 UTC.
    pub created_at: String,
    /// Height in pixels (the camera's).
    pub height: i64,
    /// Frame id.
    pub id: String,
    /// SHA-256 of the image bytes, lowercase hex.
    pub sha256: String,
    /// Width in pixels (the camera's).
    pub width: i64,
}

/// The frame as served.
pub fn frame_view(f: &FrameRow) -> FrameView {
    FrameView {
        camera_id: f.camera_id.clone(),
        created_at: rfc3339(f.created_at),
        height: f.height,
        id: f.id.clone(),
        sha256: f.sha256.clone(),
        width: f.width,
    }
}

/// The frame as served, as a value (for pages).
pub fn frame_json(f: &FrameRow) -> Value {
    serde_json::to_value(frame_view(f)).unwrap_or(Value::Null)
}

/// Checks an uploaded image against a camera's size and stores it; returns the frame and
/// whether it was new.
pub async fn store_frame(
    state: &AppState,
    team_id: &str,
    camera: &store::cameras::CameraRow,
    content_type: &str,
    bytes: Vec<u8>,
) -> ApiResult<(FrameRow, bool)> {
    let format = match content_type {
        "image/png" => image::ImageFormat::Png,
        "image/jpeg" | "image/jpg" => image::ImageFormat::Jpeg,
        other => {
            return Err(ApiError::UnsupportedMediaType(format!(
                "frames are image/png or image/jpeg, not {other}"
            )));
        }
    };
    let limits = state.limits.clone();
    let permit = state.heavy_permits.acquire().await?;
    // Decoding is CPU work: keep it off the async workers.
    let (bytes, decoded) = tokio::task::spawn_blocking(move || {
        let _permit = permit;
        let r = images::decode(
            &bytes,
            format,
            limits.max_image_side,
            limits.max_decode_bytes,
        )
        .map(|img| (img.width(), img.height()));
        (bytes, r)
    })
    .await
    .map_err(|e| ApiError::Internal(format!("decoder task failed: {e}")))?;
    let (w, h) = decoded.map_err(|e| match e {
        ImageRejection::TooLarge { .. } | ImageRejection::OverMemoryLimit => {
            ApiError::TooLarge(e.to_string())
        }
        ImageRejection::Corrupt(_) => ApiError::invalid_body("bad_image", e.to_string()),
    })?;
    if i64::from(w) != camera.width || i64::from(h) != camera.height {
        return Err(ApiError::invalid_body(
            "wrong_size",
            format!(
                "the image is {w}×{h} but camera {:?} takes {}×{} frames",
                camera.name, camera.width, camera.height
            ),
        ));
    }
    let sha = hex::encode(Sha256::digest(&bytes));
    let stored_type = if format == image::ImageFormat::Png {
        "image/png"
    } else {
        "image/jpeg"
    };
    Ok(store::frames::insert(
        state.store.pool(),
        team_id,
        &camera.id,
        &store::frames::NewImage {
            sha256: &sha,
            content_type: stored_type,
            width: i64::from(w),
            height: i64::from(h),
            bytes: &bytes,
        },
    )
    .await?)
}

/// `POST /api/cameras/{id}/frames` with a raw PNG or JPEG body. A repeated upload of the same
/// bytes to the same camera returns the existing frame with 200.
pub async fn upload(
    State(state): State<AppState>,
    who: Principal,
    Path(id): Path<String>,
    req: Request,
) -> ApiResult<(StatusCode, Json<FrameView>)> {
    who.require(Role::Editor)?;
    let camera = cameras::load(&state, &who, &id).await?;
    let content_type = media_type(&req).unwrap_or_default();
    if !matches!(
        content_type.as_str(),
        "image/png" | "image/jpeg" | "image/jpg"
    ) {
        return Err(ApiError::UnsupportedMediaType(format!(
            "frames are image/png or image/jpeg, not {:?}",
            content_type
        )));
    }
    let bytes = read_body(req, &state).await?;
    if bytes.is_empty() {
        return Err(ApiError::invalid_body("bad_image", "the body is empty"));
    }
    let (frame, new) =
        store_frame(&state, &who.team_id, &camera, &content_type, bytes.to_vec()).await?;
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
) -> ApiResult<Json<Items<FrameView>>> {
    let camera = cameras::load(&state, &who, &id).await?;
    let rows = store::frames::list(state.store.pool(), &who.team_id, Some(&camera.id)).await?;
    Ok(items(rows.iter().map(frame_view).collect()))
}

/// A team's frame or 404.
pub async fn load(state: &AppState, who: &Principal, id: &str) -> ApiResult<FrameRow> {
    let id = parse_id(id, "frame")?;
    store::frames::get(state.store.pool(), &who.team_id, &id)
        .await?
        .ok_or_else(|| ApiError::NotFound(format!("no frame with id {id}")))
}

/// `GET /api/frames/{id}`.
pub async fn get_one(
    State(state): State<AppState>,
    who: Principal,
    Path(id): Path<String>,
) -> ApiResult<Json<FrameView>> {
    Ok(Json(frame_view(&load(&state, &who, &id).await?)))
}

/// `GET /api/frames/{id}/image`: the stored bytes, immutable, with the SHA-256 as strong ETag.
pub async fn image(
    State(state): State<AppState>,
    who: Principal,
    Path(id): Path<String>,
    headers: HeaderMap,
) -> ApiResult<Response> {
    let frame = load(&state, &who, &id).await?;
    let etag = format!("\"{}\"", frame.sha256);
    if super::goals::if_none_match(&headers, &etag) {
        return Ok((StatusCode::NOT_MODIFIED, [(header::ETAG, etag)]).into_response());
    }
    let (content_type, bytes) = store::frames::image_bytes(state.store.pool(), &frame.sha256)
        .await?
        .ok_or_else(|| {
            ApiError::Internal(format!(
                "image {} of frame {} missing",
                frame.sha256, frame.id
            ))
        })?;
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
