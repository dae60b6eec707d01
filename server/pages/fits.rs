//! The reward-fit pages: setting up a fit on a camera's frame (demonstrations from its demos'
//! tracks or drawn by hand, features placed on the frame) and following one, its log-likelihood
//! plotted per iteration, its reward map and held-out figures, and a goal term made from it.
//! Both are shells; `web/static/fit.js` draws them and talks to the JSON API.

use super::error::{PageError, PageQuery};
use super::render::{Chrome, ok, page};
use super::session::Signed;
use crate::service::auth::Role;
use crate::service::{AppState, cameras, demos, frames, reward_fits, tracks};
use askama::Template;
use axum::extract::{Path, State};
use axum::http::HeaderMap;
use axum::response::Response;
use serde::Deserialize;
use serde_json::{Value, json};

/// A fit in the home page's list.
pub(super) struct FitCard {
    pub id: String,
    pub features: String,
    pub demos: usize,
    pub author: String,
    pub when: String,
    pub figure: String,
}

/// The team's fits, newest first, as the home page lists them (at most `limit`).
pub(super) async fn cards(
    state: &AppState,
    signed: &Signed,
    limit: usize,
) -> Result<Vec<FitCard>, PageError> {
    let all = reward_fits::list(state, &signed.who, limit).await?;
    Ok(all
        .into_iter()
        .map(|f| FitCard {
            figure: match (f.finished, f.log_likelihood_per_step) {
                (true, Some(ll)) => format!("log-likelihood {ll:.3} per move"),
                _ => "not run yet".into(),
            },
            features: f.feature_names.join(", "),
            demos: f.demos,
            author: f.author,
            when: f
                .created_at
                .replace('T', " ")
                .trim_end_matches('Z')
                .to_string(),
            id: f.id,
        })
        .collect())
}

#[derive(Template)]
#[template(path = "fit.html")]
struct FitPage {
    chrome: Chrome,
    title: String,
    mode: &'static str,
    camera_name: String,
    subtitle: String,
    can_edit: bool,
    data: String,
    caution: &'static str,
}

page!(FitPage);

#[derive(Deserialize)]
pub(super) struct NewQuery {
    camera: String,
    #[serde(default)]
    demo: Option<String>,
}

/// A track as the fit page draws and offers it: its samples as `[x, y, lost]`.
fn track_json(t: &tracks::TrackView) -> Value {
    json!({
        "id": t.id,
        "label": t.label,
        "samples": t.samples.iter().map(|s| json!([s.x, s.y, s.lost])).collect::<Vec<_>>(),
    })
}

/// `GET /fits/new?camera=ID[&demo=ID]`: set up a fit on one of the camera's frames.
pub(super) async fn new_fit(
    State(state): State<AppState>,
    headers: HeaderMap,
    signed: Signed,
    PageQuery(q): PageQuery<NewQuery>,
) -> Result<Response, PageError> {
    signed.require(Role::Editor)?;
    let who = &signed.who;
    let camera = cameras::load(&state, who, &q.camera).await?;
    let frame_list = frames::list_for_camera(&state, who, &camera.id).await?;
    let mut demo_list = Vec::new();
    for d in demos::list_for_camera(&state, who, &camera.id).await? {
        let ts = tracks::all(&state, who, &d.id).await?;
        demo_list.push(json!({
            "id": d.id,
            "name": d.name,
            "tracks": ts.iter().map(track_json).collect::<Vec<_>>(),
        }));
    }
    let data = json!({
        "mode": "new",
        "camera": cameras::camera_json(&camera)?,
        "frames": frame_list,
        "demos": demo_list,
        "preselect_demo": q.demo,
        "limits": {
            "max_cells": goalsmith_core::irl::MAX_CELLS,
            "max_features": reward_fits::MAX_FEATURES,
            "max_demos": reward_fits::MAX_DEMOS,
            "max_path_points": reward_fits::MAX_PATH_POINTS,
        },
    });
    let page = FitPage {
        chrome: Chrome::signed(&state, &signed, &headers, "home").await,
        title: "Fit a reward".into(),
        mode: "new",
        camera_name: camera.name.clone(),
        subtitle: format!(
            "on {}: {} frames, {} demos",
            camera.name,
            frame_list.len(),
            demo_list.len()
        ),
        can_edit: true,
        data: data.to_string(),
        caution: crate::SAFETY_CAUTION,
    };
    Ok(ok(&page))
}

/// `GET /fits/{id}`: a fit, its progress while it runs and its result once done.
pub(super) async fn show(
    State(state): State<AppState>,
    headers: HeaderMap,
    signed: Signed,
    Path(id): Path<String>,
) -> Result<Response, PageError> {
    let who = &signed.who;
    let fit = reward_fits::view(&state, who, &id).await?;
    let frame = frames::load(&state, who, &fit.frame_id).await?;
    let camera = cameras::load(&state, who, &frame.camera_id).await?;
    let data = json!({
        "mode": "view",
        "fit": fit,
        "frame": frames::frame_json(&frame),
        "camera": cameras::camera_json(&camera)?,
        "can_edit": signed.can_edit(),
    });
    let page = FitPage {
        chrome: Chrome::signed(&state, &signed, &headers, "home").await,
        title: "Reward fit".into(),
        mode: "view",
        camera_name: camera.name.clone(),
        subtitle: format!(
            "on {}: {} demos, {} features, cells of {} px · started by {}, {}",
            camera.name,
            fit.demos,
            fit.feature_names.len(),
            fit.cell_px,
            fit.author,
            fit.created_at.replace('T', " ").trim_end_matches('Z'),
        ),
        can_edit: signed.can_edit(),
        data: data.to_string(),
        caution: crate::SAFETY_CAUTION,
    };
    Ok(ok(&page))
}
