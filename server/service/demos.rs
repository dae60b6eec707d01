//! Demonstrations: uploads of short clips of one camera (a ZIP of frames or an animated GIF),
//! stored as ordered frames whose images are kept once by SHA-256.

use super::auth::{Principal, Role};
use super::error::{ServiceError, ServiceResult};
use super::export::Permit;
use super::{AppState, cameras, parse_frame_index, parse_id, rfc3339};
use crate::demo_archive::{self, DemoRejection, FrameRules};
use crate::store::{self, cameras::CameraRow, demos::DemoRow};
use goalsmith_core::names::{self, NameKind};
use schemars::JsonSchema;
use serde::Serialize;
use sha2::{Digest, Sha256};

/// A demo as served.
// Fields in alphabetical order, as every typed view of the API.
#[derive(Debug, Clone, Serialize, JsonSchema)]
pub struct DemoView {
    /// Who uploaded it.
    pub author: String,
    /// The camera whose frames it holds.
    pub camera_id: String,
    /// Upload time, RFC 3339 UTC.
    pub created_at: String,
    /// Number of frames.
    pub frame_count: i64,
    /// The frames, in order.
    pub frames: Vec<DemoFrameView>,
    /// Frame height (the camera's).
    pub height: i64,
    /// Demo id.
    pub id: String,
    /// What it shows, as its uploader named it (by default its upload time).
    pub name: String,
    /// Frame width (the camera's).
    pub width: i64,
}

/// One frame of a [`DemoView`].
#[derive(Debug, Clone, Serialize, JsonSchema)]
pub struct DemoFrameView {
    /// Index from 0.
    pub index: i64,
    /// SHA-256 of its image.
    pub sha256: String,
    /// Seconds from the first frame, when the upload said (`timestamps.csv`, GIF delays).
    pub time_s: Option<f64>,
}

/// A demo in a list: as [`DemoView`] without its frames.
// Fields in alphabetical order, as every typed view of the API.
#[derive(Debug, Clone, Serialize, JsonSchema)]
pub struct DemoSummary {
    /// Who uploaded it.
    pub author: String,
    /// The camera whose frames it holds.
    pub camera_id: String,
    /// Upload time, RFC 3339 UTC.
    pub created_at: String,
    /// Number of frames.
    pub frame_count: i64,
    /// Frame height (the camera's).
    pub height: i64,
    /// Demo id.
    pub id: String,
    /// What it shows, as its uploader named it (by default its upload time).
    pub name: String,
    /// Frame width (the camera's).
    pub width: i64,
}

/// The kinds of upload a demo is made from.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum DemoFormat {
    /// `application/zip`: PNG or JPEG frames in name order, optional `timestamps.csv`.
    Zip,
    /// `image/gif`: an animated GIF.
    Gif,
}

/// An upload the service has agreed to take: the caller may read the body now. It holds the
/// camera and a heavy-work permit, so the checks that need no body (role, camera, type, a
/// free permit) come before a large body is read at all.
pub struct UploadTicket {
    camera: CameraRow,
    name: Option<String>,
    format: DemoFormat,
    author: String,
    team_id: String,
    permit: Permit,
}

/// Checks everything about a demo upload but its body, and takes the permit its decoding
/// needs (503 `busy` when the server is full), so a refusal never costs the body's memory.
pub async fn begin_upload(
    state: &AppState,
    who: &Principal,
    camera_id: &str,
    content_type: &str,
    name: Option<&str>,
) -> ServiceResult<UploadTicket> {
    who.require(Role::Editor)?;
    let camera = cameras::load(state, who, camera_id).await?;
    let name = name
        .map(|n| {
            names::check(NameKind::Demo, n)
                .map_err(|e| ServiceError::invalid(e.code(), "name", e.to_string()))
        })
        .transpose()?;
    let format = match content_type {
        "application/zip" | "application/x-zip-compressed" => DemoFormat::Zip,
        "image/gif" => DemoFormat::Gif,
        other => {
            return Err(ServiceError::UnsupportedMediaType(format!(
                "a demo is application/zip (PNG or JPEG frames, optional timestamps.csv) or \
                 image/gif (animated), not {other:?}"
            )));
        }
    };
    let permit = state.heavy_permits.acquire().await?;
    Ok(UploadTicket {
        camera,
        name,
        format,
        author: who.author.clone(),
        team_id: who.team_id.clone(),
        permit,
    })
}

impl UploadTicket {
    /// Reads the upload (off the async workers), checks every frame against the camera, and
    /// stores the demo in one transaction.
    pub async fn finish(self, state: &AppState, bytes: Vec<u8>) -> ServiceResult<DemoRow> {
        let limits = state.limits.clone();
        let rules = FrameRules {
            width: u32::try_from(self.camera.width).unwrap_or(0),
            height: u32::try_from(self.camera.height).unwrap_or(0),
            max_side: limits.max_image_side,
            max_alloc: limits.max_decode_bytes,
        };
        let format = self.format;
        let permit = self.permit;
        let demo = super::heavy::spawn(move || {
            let _permit = permit;
            let read = match format {
                DemoFormat::Zip => demo_archive::read_zip(&bytes, rules, &limits.demo),
                DemoFormat::Gif => demo_archive::read_gif(&bytes, rules, &limits.demo),
            };
            read.map(|d| {
                let hashes: Vec<String> = d
                    .frames
                    .iter()
                    .map(|f| hex::encode(Sha256::digest(&f.bytes)))
                    .collect();
                (d, hashes)
            })
        })
        .await
        .map_err(|e| ServiceError::Internal(format!("demo reader failed: {e}")))?
        .map_err(|e| match e {
            DemoRejection::TooLarge(m) => ServiceError::TooLarge(m),
            DemoRejection::Invalid { code, message } => ServiceError::invalid_body(code, message),
        })?;
        let (demo, hashes) = demo;
        let now = store::now_ms();
        let row = DemoRow {
            id: uuid::Uuid::new_v4().to_string(),
            team_id: self.team_id,
            camera_id: self.camera.id.clone(),
            frame_count: demo.frames.len() as i64,
            width: self.camera.width,
            height: self.camera.height,
            author: self.author,
            created_at: now,
            // Without a name, the upload time names it ("demo 2026-12-02 07:05:12").
            name: self.name.unwrap_or_else(|| {
                let t = rfc3339(now);
                let (day, time) = (t.get(..10).unwrap_or(""), t.get(11..19).unwrap_or(""));
                format!("demo {day} {time}")
            }),
        };
        let frames: Vec<store::demos::NewDemoFrame<'_>> = demo
            .frames
            .iter()
            .zip(&hashes)
            .map(|(f, sha)| store::demos::NewDemoFrame {
                sha256: sha,
                content_type: f.content_type,
                bytes: &f.bytes,
                time_s: f.time_s,
            })
            .collect();
        store::demos::insert(&state.store, &row, &frames).await?;
        Ok(row)
    }
}

/// The team's demos, newest first (any member).
pub async fn rows(state: &AppState, who: &Principal) -> ServiceResult<Vec<DemoRow>> {
    Ok(store::demos::list(&state.store, &who.team_id).await?)
}

/// A camera's demos, newest first.
pub async fn list_for_camera(
    state: &AppState,
    who: &Principal,
    camera_id: &str,
) -> ServiceResult<Vec<DemoSummary>> {
    let camera = cameras::load(state, who, camera_id).await?;
    Ok(store::demos::list(&state.store, &who.team_id)
        .await?
        .into_iter()
        .filter(|d| d.camera_id == camera.id)
        .map(|d| DemoSummary {
            author: d.author,
            camera_id: d.camera_id,
            created_at: rfc3339(d.created_at),
            frame_count: d.frame_count,
            height: d.height,
            id: d.id,
            name: d.name,
            width: d.width,
        })
        .collect())
}

/// A team's demo or 404.
pub async fn load(state: &AppState, who: &Principal, id: &str) -> ServiceResult<DemoRow> {
    let id = parse_id(id, "demo")?;
    store::demos::get(&state.store, &who.team_id, &id)
        .await?
        .ok_or_else(|| ServiceError::NotFound(format!("no demo with id {id}")))
}

/// A demo with its frames, as served.
pub async fn view(state: &AppState, who: &Principal, id: &str) -> ServiceResult<DemoView> {
    view_of(state, load(state, who, id).await?).await
}

/// [`view`] of a demo already loaded (and authorised by its team).
pub async fn view_of(state: &AppState, d: DemoRow) -> ServiceResult<DemoView> {
    let frames = store::demos::frames(&state.store, &d.id).await?;
    Ok(DemoView {
        author: d.author,
        camera_id: d.camera_id,
        created_at: rfc3339(d.created_at),
        frame_count: d.frame_count,
        frames: frames
            .into_iter()
            .map(|f| DemoFrameView {
                index: f.index,
                sha256: f.sha256,
                time_s: f.time_s,
            })
            .collect(),
        height: d.height,
        id: d.id,
        name: d.name,
        width: d.width,
    })
}

/// Frame `index` of a demo: (SHA-256, content type, bytes).
pub async fn frame_image(
    state: &AppState,
    who: &Principal,
    id: &str,
    index: &str,
) -> ServiceResult<(String, String, Vec<u8>)> {
    let d = load(state, who, id).await?;
    let i = parse_frame_index(index)?;
    let f = store::demos::frame(&state.store, &d.id, i)
        .await?
        .ok_or_else(|| {
            ServiceError::NotFound(format!("demo {} has {} frames", d.id, d.frame_count))
        })?;
    let (content_type, bytes) = store::frames::image_bytes(&state.store, &f.sha256)
        .await?
        .ok_or_else(|| ServiceError::Internal(format!("image {} missing", f.sha256)))?;
    Ok((f.sha256, content_type, bytes))
}
