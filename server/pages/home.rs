//! The team home: cameras, recent frames, goals with their status, goal sets; search by name;
//! new cameras and frame uploads.

use super::error::{PageError, PageQuery};
use super::render::{Chrome, ok, page, redirect_flash, when};
use super::session::{CsrfForm, Signed};
use crate::service::auth::{Role, same_secret};
use crate::service::{AppState, ServiceError, cameras, frames, goals, outcomes};
use crate::store;
use askama::Template;
use axum::extract::{FromRequest, Multipart, Path, Request, State};
use axum::http::{HeaderMap, header};
use axum::response::Response;
use serde::Deserialize;
use serde_json::{Value, json};
use std::collections::HashMap;

pub(super) struct CameraCard {
    pub id: String,
    pub name: String,
    pub size: String,
    pub frames: usize,
    pub zones: String,
}

pub(super) struct FrameCard {
    pub id: String,
    pub camera: String,
    pub when: String,
    pub goals: usize,
    pub fresh: bool,
}

pub(super) struct GoalRow {
    pub id: String,
    pub name: String,
    pub revision: i64,
    pub author: String,
    pub when: String,
    pub status: String,
    pub status_class: &'static str,
}

pub(super) struct SetRow {
    pub id: String,
    pub name: String,
    pub items: usize,
    pub when: String,
}

/// Reward fits listed on the home page (the newest).
const HOME_FITS: usize = 12;

#[derive(Template)]
#[template(path = "home.html")]
struct HomePage {
    chrome: Chrome,
    q: String,
    cameras: Vec<CameraCard>,
    frames: Vec<FrameCard>,
    goals: Vec<GoalRow>,
    sets: Vec<SetRow>,
    demos: Vec<super::demos::DemoCard>,
    fits: Vec<super::fits::FitCard>,
    can_edit: bool,
    uploaded: bool,
    frame_limit_mb: usize,
    demo_limit_mb: usize,
    demo_max_frames: usize,
}

page!(HomePage);

#[derive(Deserialize)]
pub(super) struct HomeQuery {
    #[serde(default)]
    q: Option<String>,
    #[serde(default)]
    uploaded: Option<String>,
}

fn matches(q: &str, name: &str) -> bool {
    q.is_empty() || name.to_lowercase().contains(q)
}

/// The status of a goal from its reported outcomes, in words.
pub(super) fn outcome_status(rows: &[store::outcomes::OutcomeRow]) -> (String, &'static str) {
    if rows.is_empty() {
        return ("not tried yet".into(), "untried");
    }
    let reached = rows.iter().filter(|o| o.success).count();
    let class = if reached == rows.len() {
        "reached"
    } else if reached == 0 {
        "missed"
    } else {
        "mixed"
    };
    (format!("reached {reached} of {} tries", rows.len()), class)
}

/// `GET /`.
pub(super) async fn home(
    State(state): State<AppState>,
    headers: HeaderMap,
    signed: Signed,
    PageQuery(query): PageQuery<HomeQuery>,
) -> Result<Response, PageError> {
    let who = &signed.who;
    let q = query.q.unwrap_or_default().trim().to_lowercase();
    let camera_rows = cameras::rows(&state, who).await?;
    let frame_rows = frames::rows(&state, who).await?;
    let goal_rows = goals::summaries(&state, who).await?;
    let mut frames_per_camera: HashMap<&str, usize> = HashMap::new();
    for f in &frame_rows {
        *frames_per_camera.entry(f.camera_id.as_str()).or_default() += 1;
    }
    let mut goals_per_frame: HashMap<&str, usize> = HashMap::new();
    for g in &goal_rows {
        *goals_per_frame.entry(g.frame_id.as_str()).or_default() += 1;
    }
    let camera_names: HashMap<&str, &str> = camera_rows
        .iter()
        .map(|c| (c.id.as_str(), c.name.as_str()))
        .collect();
    let cameras = camera_rows
        .iter()
        .filter(|c| matches(&q, &c.name))
        .map(|c| {
            let doc = cameras::parse_doc(c).ok();
            let zones = match &doc {
                Some(d) => {
                    let mut parts = Vec::new();
                    if d.safe_zone.is_some() {
                        parts.push("safe zone".to_string());
                    }
                    if !d.no_go_zones.is_empty() {
                        parts.push(format!("{} no-go zone(s)", d.no_go_zones.len()));
                    }
                    if d.intrinsics.is_some() {
                        parts.push("calibrated".into());
                    }
                    parts.join(", ")
                }
                None => String::new(),
            };
            CameraCard {
                id: c.id.clone(),
                name: c.name.clone(),
                size: format!("{}×{}", c.width, c.height),
                frames: frames_per_camera.get(c.id.as_str()).copied().unwrap_or(0),
                zones,
            }
        })
        .collect();
    let fresh = query.uploaded.unwrap_or_default();
    let frames = frame_rows
        .iter()
        .filter(|f| {
            matches(
                &q,
                camera_names
                    .get(f.camera_id.as_str())
                    .copied()
                    .unwrap_or(""),
            )
        })
        .take(12)
        .map(|f| FrameCard {
            id: f.id.clone(),
            camera: camera_names
                .get(f.camera_id.as_str())
                .copied()
                .unwrap_or("?")
                .to_string(),
            when: when(f.created_at),
            goals: goals_per_frame.get(f.id.as_str()).copied().unwrap_or(0),
            fresh: f.id == fresh,
        })
        .collect();
    let mut goals = Vec::new();
    for g in goal_rows.iter().filter(|g| matches(&q, &g.name)) {
        let outcomes = outcomes::rows(&state, who, &g.id).await?;
        let (status, status_class) = outcome_status(&outcomes);
        goals.push(GoalRow {
            id: g.id.clone(),
            name: g.name.clone(),
            revision: g.revision,
            author: g.author.clone(),
            when: when(g.updated_at),
            status,
            status_class,
        });
    }
    let sets = super::sets::summaries(&state, who)
        .await?
        .into_iter()
        .filter(|s| matches(&q, &s.name))
        .collect();
    let demos = super::demos::cards(&state, &signed, &camera_names)
        .await?
        .into_iter()
        .filter(|d| matches(&q, &d.camera) || matches(&q, &d.name))
        .collect();
    let fits = super::fits::cards(&state, &signed, HOME_FITS).await?;
    let page = HomePage {
        chrome: Chrome::signed(&state, &signed, &headers, "home").await,
        q,
        cameras,
        frames,
        goals,
        sets,
        demos,
        fits,
        can_edit: signed.can_edit(),
        uploaded: !fresh.is_empty(),
        frame_limit_mb: state.limits.frame_upload_bytes >> 20,
        demo_limit_mb: state.limits.demo.max_archive_bytes >> 20,
        demo_max_frames: state.limits.demo.max_frames,
    };
    Ok(ok(&page))
}

#[derive(Deserialize)]
pub(super) struct CameraForm {
    name: String,
    width: String,
    height: String,
    #[serde(default)]
    safe_zone: String,
    #[serde(default)]
    no_go_zones: String,
}

/// `POST /cameras`: a camera from the home page's small form; zones as JSON point lists.
pub(super) async fn create_camera(
    State(state): State<AppState>,
    headers: HeaderMap,
    CsrfForm { signed, form }: CsrfForm<CameraForm>,
) -> Result<Response, PageError> {
    signed.require(Role::Editor)?;
    let fail = |m: String| Ok(redirect_flash("/#new-camera", &m, true, &headers));
    let (Ok(width), Ok(height)) = (
        form.width.trim().parse::<u32>(),
        form.height.trim().parse::<u32>(),
    ) else {
        return fail("Width and height must be whole numbers of pixels.".into());
    };
    let mut body = json!({"name": form.name, "width": width, "height": height});
    for (key, text) in [
        ("safe_zone", &form.safe_zone),
        ("no_go_zones", &form.no_go_zones),
    ] {
        if text.trim().is_empty() {
            continue;
        }
        match serde_json::from_str::<Value>(text) {
            Ok(v) => body[key] = v,
            Err(e) => {
                return fail(format!(
                    "The {} is not a JSON list of [x, y] points: {e}",
                    key.replace('_', " ")
                ));
            }
        }
    }
    let input: cameras::CameraInput = match serde_json::from_value(body) {
        Ok(i) => i,
        Err(e) => return fail(format!("The camera could not be read: {e}")),
    };
    let row = match cameras::create(&state, &signed.who, input).await {
        Ok(row) => row,
        Err(e @ ServiceError::Invalid { .. }) => {
            let field = e.field().map(|f| format!(" ({f})")).unwrap_or_default();
            return fail(format!("The camera was not added{field}: {e}"));
        }
        Err(e) => return Err(e.into()),
    };
    Ok(redirect_flash(
        "/",
        &format!(
            "Camera {} added. Upload a frame to it to start a goal.",
            row.name
        ),
        false,
        &headers,
    ))
}

/// `POST /cameras/{id}/frames` from the no-script form (`multipart/form-data` with fields `csrf`
/// and `frame`). Scripted pages upload straight to the API instead.
pub(super) async fn upload_frame(
    State(state): State<AppState>,
    headers: HeaderMap,
    signed: Signed,
    Path(id): Path<String>,
    req: Request,
) -> Result<Response, PageError> {
    let limit = state.limits.frame_upload_bytes;
    // Refuse by the declared length before reading anything.
    let declared = headers
        .get(header::CONTENT_LENGTH)
        .and_then(|v| v.to_str().ok())
        .and_then(|v| v.parse::<usize>().ok());
    let too_large = || {
        PageError::TooLarge(format!(
            "The file is larger than the {} MiB a frame may have.",
            limit >> 20
        ))
    };
    if declared.is_some_and(|n| n > limit + 64 * 1024) {
        return Err(too_large());
    }
    let mut form = Multipart::from_request(req, &state).await.map_err(|_| {
        PageError::UnsupportedMediaType("send the upload form (multipart/form-data)".into())
    })?;
    let unreadable = || PageError::BadRequest("the upload form could not be read".into());
    let mut csrf = String::new();
    let mut file: Option<(Option<String>, Vec<u8>)> = None;
    while let Some(mut field) = form.next_field().await.map_err(|_| unreadable())? {
        let name = field.name().unwrap_or_default().to_string();
        let content_type = field.content_type().map(str::to_ascii_lowercase);
        // Read piece by piece, so the whole form never holds more than the frame limit.
        let mut data = Vec::new();
        while let Some(chunk) = field.chunk().await.map_err(|_| unreadable())? {
            if data.len() + chunk.len() > limit {
                return Err(too_large());
            }
            data.extend_from_slice(&chunk);
        }
        match name.as_str() {
            "csrf" => csrf = String::from_utf8_lossy(&data).into_owned(),
            "frame" if !data.is_empty() => file = Some((content_type, data)),
            _ => {}
        }
    }
    if !same_secret(&csrf, &signed.info.csrf_token) {
        return Err(PageError::Forbidden(
            "this form did not carry the page's security token; reload the page and send it again"
                .into(),
        ));
    }
    signed.require(Role::Editor)?;
    let (declared_type, data) =
        file.ok_or_else(|| PageError::BadRequest("choose an image file to upload".into()))?;
    let Some(content_type) = frames::frame_media_type(declared_type.as_deref(), &data) else {
        return Err(PageError::UnsupportedMediaType(
            "frames are PNG or JPEG images".into(),
        ));
    };
    match frames::upload(&state, &signed.who, &id, content_type, data).await {
        Ok((frame, _)) => {
            let camera = cameras::load(&state, &signed.who, &frame.camera_id).await?;
            Ok(redirect_flash(
                &format!("/?uploaded={}", frame.id),
                &format!("Frame uploaded to {}.", camera.name),
                false,
                &headers,
            ))
        }
        // A person at the page is told to retry, not shown an error page, when the server is
        // busy with other heavy work.
        Err(e @ (ServiceError::Invalid { .. } | ServiceError::Busy)) => Ok(redirect_flash(
            "/",
            &format!("The frame was not stored: {e}"),
            true,
            &headers,
        )),
        Err(e) => Err(e.into()),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn status_words() {
        assert_eq!(outcome_status(&[]).1, "untried");
    }
}
