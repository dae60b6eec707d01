//! The goal editor, a goal's revision history, the comparison of two revisions, and restoring an
//! old revision as a new one.

use super::compare::{Change, diff};
use super::error::{PageError, PageQuery};
use super::render::{Chrome, ok, page, redirect_flash, when};
use super::session::{CsrfForm, Signed};
use crate::service::auth::Role;
use crate::service::goals::{
    self, Expected, OVERRIDE_UNCONFIRMED, etag_of, load_revision, parse_revision,
};
use crate::service::{AppState, ServiceError, cameras, frames};
use crate::store;
use askama::Template;
use axum::extract::{Path, State};
use axum::http::HeaderMap;
use axum::response::Response;
use serde::Deserialize;
use serde_json::{Value, json};

#[derive(Template)]
#[template(path = "editor.html")]
struct EditorPage {
    chrome: Chrome,
    title: String,
    goal_id: String,
    /// Revision shown (0 for a new goal).
    revision: i64,
    latest: i64,
    can_edit: bool,
    /// JSON for the editor module: the document, frame, camera, ETag.
    data: String,
    caution: &'static str,
    camera_name: String,
}

struct RevisionLine {
    revision: i64,
    author: String,
    when: String,
    note: String,
    sha: String,
    terms: usize,
    override_safety: bool,
    is_latest: bool,
    /// For a revision made from a demo: the demo's id and "frames a to b, n tracks".
    from_demo: Option<(String, String)>,
}

#[derive(Template)]
#[template(path = "history.html")]
struct HistoryPage {
    chrome: Chrome,
    goal_id: String,
    name: String,
    revisions: Vec<RevisionLine>,
    latest_etag: String,
    latest: i64,
    can_edit: bool,
    caution: &'static str,
    default_a: i64,
    default_b: i64,
}

#[derive(Template)]
#[template(path = "compare.html")]
struct ComparePage {
    chrome: Chrome,
    goal_id: String,
    name: String,
    a: i64,
    b: i64,
    a_line: String,
    b_line: String,
    changes: Vec<Change>,
    revisions: Vec<i64>,
    data: String,
}

page!(EditorPage, HistoryPage, ComparePage);

#[derive(Deserialize)]
pub(super) struct NewQuery {
    frame: String,
}

async fn frame_and_camera(
    state: &AppState,
    signed: &Signed,
    frame_id: &str,
) -> Result<(Value, Value, String), PageError> {
    let frame = frames::load(state, &signed.who, frame_id).await?;
    let camera = cameras::load(state, &signed.who, &frame.camera_id).await?;
    let name = camera.name.clone();
    Ok((
        frames::frame_json(&frame),
        cameras::camera_json(&camera)?,
        name,
    ))
}

/// `GET /goals/new?frame=ID`: an empty editor on a frame.
pub(super) async fn new_goal(
    State(state): State<AppState>,
    headers: HeaderMap,
    signed: Signed,
    PageQuery(q): PageQuery<NewQuery>,
) -> Result<Response, PageError> {
    signed.require(Role::Editor)?;
    let (frame, camera, camera_name) = frame_and_camera(&state, &signed, &q.frame).await?;
    let data = json!({
        "mode": "new",
        "goal_id": null,
        "etag": null,
        "revision": 0,
        "latest": 0,
        "document": null,
        "frame": frame,
        "camera": camera,
        "can_edit": true,
        "author": signed.info.display_name,
    });
    let page = EditorPage {
        chrome: Chrome::signed(&state, &signed, &headers, "home").await,
        title: "New goal".into(),
        goal_id: String::new(),
        revision: 0,
        latest: 0,
        can_edit: true,
        data: data.to_string(),
        caution: crate::SAFETY_CAUTION,

        camera_name,
    };
    Ok(ok(&page))
}

#[derive(Deserialize)]
pub(super) struct RevisionQuery {
    #[serde(default)]
    revision: Option<String>,
}

/// `GET /goals/{id}[?revision=n]`: the editor on the latest revision (read-only for viewers and
/// for older revisions).
pub(super) async fn editor(
    State(state): State<AppState>,
    headers: HeaderMap,
    signed: Signed,
    Path(id): Path<String>,
    PageQuery(q): PageQuery<RevisionQuery>,
) -> Result<Response, PageError> {
    let latest = load_revision(&state, &signed.who, &id, None).await?;
    let shown = match q.revision.as_deref().filter(|s| !s.is_empty()) {
        Some(n) => load_revision(&state, &signed.who, &id, Some(parse_revision(n)?)).await?,
        None => latest.clone(),
    };
    let (frame, camera, camera_name) = frame_and_camera(&state, &signed, &shown.frame_id).await?;
    let document: Value = serde_json::from_str(&shown.document)
        .map_err(|e| PageError::internal(format!("revision unreadable: {e}")))?;
    let can_edit = signed.can_edit() && shown.revision == latest.revision;
    let data = json!({
        "mode": if can_edit { "edit" } else { "view" },
        "goal_id": latest.goal_id,
        "etag": etag_of(&latest.document),
        "revision": shown.revision,
        "latest": latest.revision,
        "document": document,
        "frame": frame,
        "camera": camera,
        "can_edit": can_edit,
        "author": signed.info.display_name,
    });
    let page = EditorPage {
        chrome: Chrome::signed(&state, &signed, &headers, "home").await,
        title: shown.name.clone(),
        goal_id: latest.goal_id.clone(),
        revision: shown.revision,
        latest: latest.revision,
        can_edit,
        data: data.to_string(),
        caution: crate::SAFETY_CAUTION,

        camera_name,
    };
    Ok(ok(&page))
}

/// `GET /goals/{id}/history`.
pub(super) async fn history(
    State(state): State<AppState>,
    headers: HeaderMap,
    signed: Signed,
    Path(id): Path<String>,
) -> Result<Response, PageError> {
    let latest = load_revision(&state, &signed.who, &id, None).await?;
    let rows = goals::revision_rows(&state, &signed.who, &latest.goal_id).await?;
    let revisions = rows
        .iter()
        .rev()
        .map(|r| {
            // The stored document, typed: a revision that does not parse is shown without the
            // parts read from it rather than failing the whole page.
            let doc = serde_json::from_str::<goals::RevisionDocument>(&r.document).ok();
            let terms = doc.as_ref().map_or(0, |d| d.terms.len());
            let from_demo = doc.and_then(|d| d.from_demo).map(|f| {
                let words = format!(
                    "frames {} to {}, {} track{}",
                    f.start_frame,
                    f.end_frame,
                    f.tracks.len(),
                    if f.tracks.len() == 1 { "" } else { "s" }
                );
                (f.demo_id, words)
            });
            RevisionLine {
                from_demo,
                revision: r.revision,
                author: r.author.clone(),
                when: when(r.created_at),
                note: r.note.clone(),
                sha: r.sha256.chars().take(12).collect(),
                terms,
                override_safety: r.override_safety,
                is_latest: r.revision == latest.revision,
            }
        })
        .collect();
    let page = HistoryPage {
        chrome: Chrome::signed(&state, &signed, &headers, "home").await,
        goal_id: latest.goal_id.clone(),
        name: latest.name.clone(),
        revisions,
        latest_etag: etag_of(&latest.document),
        latest: latest.revision,
        can_edit: signed.can_edit(),
        caution: crate::SAFETY_CAUTION,
        default_a: (latest.revision - 1).max(1),
        default_b: latest.revision,
    };
    Ok(ok(&page))
}

#[derive(Deserialize)]
pub(super) struct CompareQuery {
    a: String,
    b: String,
}

/// `GET /goals/{id}/compare?a=&b=`: what changed between two revisions.
pub(super) async fn compare(
    State(state): State<AppState>,
    headers: HeaderMap,
    signed: Signed,
    Path(id): Path<String>,
    PageQuery(q): PageQuery<CompareQuery>,
) -> Result<Response, PageError> {
    let latest = load_revision(&state, &signed.who, &id, None).await?;
    let a = load_revision(&state, &signed.who, &id, Some(parse_revision(&q.a)?)).await?;
    let b = load_revision(&state, &signed.who, &id, Some(parse_revision(&q.b)?)).await?;
    let da: Value = serde_json::from_str(&a.document)
        .map_err(|e| PageError::internal(format!("revision unreadable: {e}")))?;
    let db: Value = serde_json::from_str(&b.document)
        .map_err(|e| PageError::internal(format!("revision unreadable: {e}")))?;
    let changes = diff(&da, &db);
    let line = |r: &store::goals::RevisionRow| {
        format!(
            "revision {} by {}, {}{}",
            r.revision,
            r.author,
            when(r.created_at),
            if r.note.is_empty() {
                String::new()
            } else {
                format!(": “{}”", r.note)
            }
        )
    };
    let (frame_a, camera, _) = frame_and_camera(&state, &signed, &a.frame_id).await?;
    let data = json!({"a": da, "b": db, "frame": frame_a, "camera": camera});
    let page = ComparePage {
        chrome: Chrome::signed(&state, &signed, &headers, "home").await,
        goal_id: latest.goal_id.clone(),
        name: latest.name.clone(),
        a: a.revision,
        b: b.revision,
        a_line: line(&a),
        b_line: line(&b),
        changes,
        revisions: (1..=latest.revision).collect(),
        data: data.to_string(),
    };
    Ok(ok(&page))
}

#[derive(Deserialize)]
pub(super) struct RestoreForm {
    revision: String,
    etag: String,
    #[serde(default)]
    note: String,
    /// Present when the person ticked the box that takes a safety override on again.
    #[serde(default)]
    confirm_override: Option<String>,
}

/// `POST /goals/{id}/restore`: revision n becomes the content of a new revision, through the same
/// checked, ETag-guarded service call as the API's `PUT`.
pub(super) async fn restore(
    State(state): State<AppState>,
    headers: HeaderMap,
    Path(id): Path<String>,
    CsrfForm { signed, form }: CsrfForm<RestoreForm>,
) -> Result<Response, PageError> {
    signed.require(Role::Editor)?;
    let n = parse_revision(&form.revision)?;
    let history = format!("/goals/{id}/history");
    let restored = goals::restore(
        &state,
        &signed.who,
        &id,
        n,
        &Expected::Etags(vec![form.etag.clone()]),
        &form.note,
        form.confirm_override.as_deref() == Some("yes"),
    )
    .await;
    let (text, error) = match restored {
        Ok(rev) => (
            format!("Revision {n} restored as revision {}.", rev.revision),
            false,
        ),
        Err(ServiceError::Invalid { code, .. }) if code == OVERRIDE_UNCONFIRMED => (
            format!(
                "Revision {n} overrides the camera's safety zones. Nothing was restored: tick the \
                 box beside its Restore button to take the override on under your name."
            ),
            true,
        ),
        Err(e @ ServiceError::PreconditionFailed(_)) => {
            (format!("Nothing was restored: {e}"), true)
        }
        Err(e @ ServiceError::Invalid { .. }) => (
            format!(
                "Revision {n} cannot be restored as it stands (the camera's zones may have \
                 changed): {e}"
            ),
            true,
        ),
        Err(e) => return Err(e.into()),
    };
    Ok(redirect_flash(&history, &text, error, &headers))
}
