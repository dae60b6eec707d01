//! Frames: still images of a camera, stored once by SHA-256.

use super::auth::{Principal, Role};
use super::error::{ServiceError, ServiceResult};
use super::{AppState, cameras, parse_id, rfc3339};
use crate::images::{self, ImageRejection};
use crate::store::{self, frames::FrameRow};
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
) -> ServiceResult<(FrameRow, bool)> {
    let format = match content_type {
        "image/png" => image::ImageFormat::Png,
        "image/jpeg" | "image/jpg" => image::ImageFormat::Jpeg,
        other => {
            return Err(ServiceError::UnsupportedMediaType(format!(
                "frames are image/png or image/jpeg, not {other}"
            )));
        }
    };
    let limits = state.limits.clone();
    let permit = state.heavy_permits.acquire().await?;
    // Decoding is CPU work: keep it off the async workers.
    let (bytes, decoded) = super::heavy::spawn(move || {
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
    .map_err(|e| ServiceError::Internal(format!("decoder task failed: {e}")))?;
    let (w, h) = decoded.map_err(|e| match e {
        ImageRejection::TooLarge { .. } | ImageRejection::OverMemoryLimit => {
            ServiceError::TooLarge(e.to_string())
        }
        ImageRejection::Corrupt(_) => ServiceError::invalid_body("bad_image", e.to_string()),
    })?;
    if i64::from(w) != camera.width || i64::from(h) != camera.height {
        return Err(ServiceError::invalid_body(
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
        &state.store,
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

/// A team's frame or 404.
pub async fn load(state: &AppState, who: &Principal, id: &str) -> ServiceResult<FrameRow> {
    let id = parse_id(id, "frame")?;
    store::frames::get(&state.store, &who.team_id, &id)
        .await?
        .ok_or_else(|| ServiceError::NotFound(format!("no frame with id {id}")))
}

/// The media type of a frame image from what the client declared, or from the bytes' signature
/// when it declared nothing useful (a browser form may send `application/octet-stream`).
pub fn frame_media_type(declared: Option<&str>, bytes: &[u8]) -> Option<&'static str> {
    match declared {
        Some("image/png") => Some("image/png"),
        Some("image/jpeg" | "image/jpg") => Some("image/jpeg"),
        _ if bytes.starts_with(b"\x89PNG") => Some("image/png"),
        _ if bytes.starts_with(&[0xFF, 0xD8]) => Some("image/jpeg"),
        _ => None,
    }
}

/// Uploads a frame to a camera of the team: the image is checked against the camera's size
/// and stored once by SHA-256. Returns the frame and whether it was new.
pub async fn upload(
    state: &AppState,
    who: &Principal,
    camera_id: &str,
    content_type: &str,
    bytes: Vec<u8>,
) -> ServiceResult<(FrameRow, bool)> {
    who.require(Role::Editor)?;
    let camera = cameras::load(state, who, camera_id).await?;
    if !matches!(content_type, "image/png" | "image/jpeg" | "image/jpg") {
        return Err(ServiceError::UnsupportedMediaType(format!(
            "frames are image/png or image/jpeg, not {content_type:?}"
        )));
    }
    if bytes.is_empty() {
        return Err(ServiceError::invalid_body("bad_image", "the body is empty"));
    }
    store_frame(state, &who.team_id, &camera, content_type, bytes).await
}

/// The frames of a camera of the team.
pub async fn list_for_camera(
    state: &AppState,
    who: &Principal,
    camera_id: &str,
) -> ServiceResult<Vec<FrameView>> {
    let camera = cameras::load(state, who, camera_id).await?;
    let rows = store::frames::list(&state.store, &who.team_id, Some(&camera.id)).await?;
    Ok(rows.iter().map(frame_view).collect())
}

/// A frame's stored image: (content type, bytes), and the frame (its SHA-256 is the ETag).
pub async fn image(
    state: &AppState,
    who: &Principal,
    id: &str,
) -> ServiceResult<(FrameRow, String, Vec<u8>)> {
    let frame = load(state, who, id).await?;
    let (content_type, bytes) = store::frames::image_bytes(&state.store, &frame.sha256)
        .await?
        .ok_or_else(|| {
            ServiceError::Internal(format!(
                "image {} of frame {} missing",
                frame.sha256, frame.id
            ))
        })?;
    Ok((frame, content_type, bytes))
}

/// The team's frames as stored, newest first (for lists).
pub async fn rows(state: &AppState, who: &Principal) -> ServiceResult<Vec<FrameRow>> {
    Ok(store::frames::list(&state.store, &who.team_id, None).await?)
}
