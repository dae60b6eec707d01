//! The demo page: a demonstration's frames with a scrubber, its tracks drawn as paths, the
//! frames that need review, the progress of tracking, and making a goal from the demo. The page
//! is a shell; `web/static/demo.js` draws it and talks to the JSON API.

use super::error::PageError;
use super::render::{Chrome, ok, page, when};
use super::session::Signed;
use crate::service::{AppState, cameras, demos, tracks};
use askama::Template;
use axum::extract::{Path, State};
use axum::http::HeaderMap;
use axum::response::Response;
use serde_json::json;

/// A demo in the home page's list.
pub(super) struct DemoCard {
    pub id: String,
    pub name: String,
    pub camera: String,
    pub frames: i64,
    pub author: String,
    pub when: String,
}

/// The team's demos, newest first, as the home page lists them.
pub(super) async fn cards(
    state: &AppState,
    signed: &Signed,
    camera_names: &std::collections::HashMap<&str, &str>,
) -> Result<Vec<DemoCard>, PageError> {
    Ok(demos::rows(state, &signed.who)
        .await?
        .into_iter()
        .map(|d| DemoCard {
            camera: camera_names
                .get(d.camera_id.as_str())
                .copied()
                .unwrap_or("?")
                .to_string(),
            id: d.id,
            name: d.name,
            frames: d.frame_count,
            author: d.author,
            when: when(d.created_at),
        })
        .collect())
}

#[derive(Template)]
#[template(path = "demo.html")]
struct DemoPage {
    chrome: Chrome,
    demo_id: String,
    name: String,
    camera_name: String,
    camera_id: String,
    frame_count: i64,
    width: i64,
    height: i64,
    author: String,
    when: String,
    can_edit: bool,
    data: String,
    caution: &'static str,
}

page!(DemoPage);

/// `GET /demos/{id}`.
pub(super) async fn show(
    State(state): State<AppState>,
    headers: HeaderMap,
    signed: Signed,
    Path(id): Path<String>,
) -> Result<Response, PageError> {
    let who = &signed.who;
    let row = demos::load(&state, who, &id).await?;
    let demo = demos::view_of(&state, row.clone()).await?;
    let camera = cameras::load(&state, who, &row.camera_id).await?;
    let all = tracks::all(&state, who, &row.id).await?;
    let running = tracks::running(&state, who, &row.id).await?;
    let data = json!({
        "demo": demo,
        "camera": cameras::camera_json(&camera)?,
        "tracks": all,
        "running": running,
        "can_edit": signed.can_edit(),
    });
    let page = DemoPage {
        chrome: Chrome::signed(&state, &signed, &headers, "home").await,
        demo_id: row.id.clone(),
        name: row.name.clone(),
        camera_name: camera.name.clone(),
        camera_id: camera.id.clone(),
        frame_count: row.frame_count,
        width: row.width,
        height: row.height,
        author: row.author.clone(),
        when: when(row.created_at),
        can_edit: signed.can_edit(),
        data: data.to_string(),
        caution: crate::SAFETY_CAUTION,
    };
    Ok(ok(&page))
}
