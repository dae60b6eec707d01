//! Goal sets: create one from selected goals pinned at their current revisions, reorder, update
//! pins, download the set's bundle. Writes go through the API's own handlers (same checks,
//! same `If-Match`).

use super::error::PageError;
use super::home::SetRow;
use super::render::{Chrome, ok, page, redirect_flash, when};
use super::session::{CsrfForm, Signed};
use crate::api::auth::Role;
use crate::api::error::ApiError;
use crate::api::extract::JsonBody;
use crate::api::goals::etag_of;
use crate::api::{AppState, goal_sets};
use crate::store;
use askama::Template;
use axum::extract::{Path, State};
use axum::http::{HeaderMap, HeaderValue, header};
use axum::response::{IntoResponse, Response};
use serde_json::{Value, json};
use std::collections::HashMap;

struct GoalChoice {
    id: String,
    name: String,
    revision: i64,
}

struct ItemLine {
    position: usize,
    goal_id: String,
    name: String,
    revision: i64,
    latest: i64,
}

#[derive(Template)]
#[template(path = "sets.html")]
struct SetsPage {
    chrome: Chrome,
    sets: Vec<SetRow>,
    goals: Vec<GoalChoice>,
    can_edit: bool,
}

#[derive(Template)]
#[template(path = "set.html")]
struct SetPage {
    chrome: Chrome,
    id: String,
    name: String,
    version: i64,
    etag: String,
    items: Vec<ItemLine>,
    goals: Vec<GoalChoice>,
    can_edit: bool,
    caution: &'static str,
    outdated: usize,
}

page!(SetsPage, SetPage);

/// The team's goal sets for lists.
pub(super) async fn summaries(state: &AppState, team: &str) -> Result<Vec<SetRow>, PageError> {
    let rows = store::goal_sets::list(state.store.pool(), team).await?;
    Ok(rows
        .iter()
        .map(|r| {
            let items = serde_json::from_str::<Value>(&r.document)
                .ok()
                .and_then(|d| d["items"].as_array().map(Vec::len))
                .unwrap_or(0);
            SetRow {
                id: r.id.clone(),
                name: r.name.clone(),
                items,
                when: when(r.updated_at),
            }
        })
        .collect())
}

async fn goal_choices(state: &AppState, team: &str) -> Result<Vec<GoalChoice>, PageError> {
    Ok(store::goals::list(state.store.pool(), team)
        .await?
        .into_iter()
        .map(|g| GoalChoice {
            id: g.id,
            name: g.name,
            revision: g.revision,
        })
        .collect())
}

/// `GET /goal-sets`.
pub(super) async fn list(
    State(state): State<AppState>,
    headers: HeaderMap,
    signed: Signed,
) -> Result<Response, PageError> {
    let page = SetsPage {
        chrome: Chrome::signed(&state, &signed, &headers, "sets").await,
        sets: summaries(&state, &signed.who.team_id).await?,
        goals: goal_choices(&state, &signed.who.team_id).await?,
        can_edit: signed.can_edit(),
    };
    Ok(ok(&page))
}

fn flash_api_error(location: &str, what: &str, e: ApiError, headers: &HeaderMap) -> Response {
    match e {
        ApiError::Invalid { .. } | ApiError::PreconditionFailed(_) => {
            redirect_flash(location, &format!("{what}: {e}"), true, headers)
        }
        other => PageError::from(other).into_response(),
    }
}

/// `POST /goal-sets`: fields `name` and `goal` (repeated), each pinned at its latest revision.
pub(super) async fn create(
    State(state): State<AppState>,
    headers: HeaderMap,
    CsrfForm { signed, form }: CsrfForm<Vec<(String, String)>>,
) -> Result<Response, PageError> {
    signed.require(Role::Editor)?;
    let name = form
        .iter()
        .find(|(k, _)| k == "name")
        .map(|(_, v)| v.clone())
        .unwrap_or_default();
    let latest: HashMap<String, i64> = goal_choices(&state, &signed.who.team_id)
        .await?
        .into_iter()
        .map(|g| (g.id, g.revision))
        .collect();
    let items: Vec<Value> = form
        .iter()
        .filter(|(k, _)| k == "goal")
        .filter_map(|(_, id)| {
            latest
                .get(id)
                .map(|n| json!({"goal_id": id, "revision": n}))
        })
        .collect();
    if items.is_empty() {
        return Ok(redirect_flash(
            "/goal-sets",
            "Tick at least one goal to put in the set.",
            true,
            &headers,
        ));
    }
    let input: goal_sets::GoalSetInput =
        serde_json::from_value(json!({"name": name, "items": items}))
            .map_err(|e| PageError::internal(e.to_string()))?;
    match goal_sets::create(State(state.clone()), signed.who.clone(), JsonBody(input)).await {
        Ok(resp) => {
            let id = created_id(resp).await.unwrap_or_default();
            Ok(redirect_flash(
                &format!("/goal-sets/{id}"),
                "Goal set made; each goal is pinned at its current revision.",
                false,
                &headers,
            ))
        }
        Err(e) => Ok(flash_api_error(
            "/goal-sets",
            "The set was not made",
            e,
            &headers,
        )),
    }
}

async fn created_id(resp: Response) -> Option<String> {
    let bytes = axum::body::to_bytes(resp.into_body(), 16 << 20)
        .await
        .ok()?;
    let v: Value = serde_json::from_slice(&bytes).ok()?;
    v["id"].as_str().map(str::to_string)
}

async fn load(
    state: &AppState,
    signed: &Signed,
    id: &str,
) -> Result<store::goal_sets::GoalSetRow, PageError> {
    let id = crate::api::parse_id(id, "goal set")?;
    store::goal_sets::get(state.store.pool(), &signed.who.team_id, &id)
        .await?
        .ok_or_else(|| PageError::NotFound(format!("There is no goal set {id} in this team.")))
}

/// `GET /goal-sets/{id}`.
pub(super) async fn show(
    State(state): State<AppState>,
    headers: HeaderMap,
    signed: Signed,
    Path(id): Path<String>,
) -> Result<Response, PageError> {
    let row = load(&state, &signed, &id).await?;
    let doc: Value = serde_json::from_str(&row.document)
        .map_err(|e| PageError::internal(format!("goal set unreadable: {e}")))?;
    let goals = goal_choices(&state, &signed.who.team_id).await?;
    let latest: HashMap<&str, (&str, i64)> = goals
        .iter()
        .map(|g| (g.id.as_str(), (g.name.as_str(), g.revision)))
        .collect();
    let items: Vec<ItemLine> = doc["items"]
        .as_array()
        .into_iter()
        .flatten()
        .enumerate()
        .map(|(k, it)| {
            let gid = it["goal_id"].as_str().unwrap_or_default().to_string();
            let (cur_name, latest_rev) = latest.get(gid.as_str()).copied().unwrap_or(("", 0));
            ItemLine {
                position: k + 1,
                name: it["name"].as_str().unwrap_or(cur_name).to_string(),
                revision: it["revision"].as_i64().unwrap_or(0),
                latest: latest_rev,
                goal_id: gid,
            }
        })
        .collect();
    let outdated = items.iter().filter(|i| i.latest > i.revision).count();
    let page = SetPage {
        chrome: Chrome::signed(&state, &signed, &headers, "sets").await,
        id: row.id.clone(),
        name: row.name.clone(),
        version: row.version,
        etag: etag_of(&row.document),
        items,
        goals,
        can_edit: signed.can_edit(),
        caution: crate::SAFETY_CAUTION,
        outdated,
    };
    Ok(ok(&page))
}

/// `POST /goal-sets/{id}`: one edit per submit, named by the button pressed (`action`):
/// `up:K`, `down:K`, `remove:K`, `pin:K` (to the latest revision), `pin-all`, `add` (with
/// `goal`), `rename` (with `name`). The form's `etag` guards against a concurrent edit.
pub(super) async fn update(
    State(state): State<AppState>,
    headers: HeaderMap,
    Path(id): Path<String>,
    CsrfForm { signed, form }: CsrfForm<Vec<(String, String)>>,
) -> Result<Response, PageError> {
    signed.require(Role::Editor)?;
    let row = load(&state, &signed, &id).await?;
    let here = format!("/goal-sets/{}", row.id);
    let field = |name: &str| {
        form.iter()
            .find(|(k, _)| k == name)
            .map(|(_, v)| v.as_str())
            .unwrap_or("")
    };
    let doc: Value = serde_json::from_str(&row.document)
        .map_err(|e| PageError::internal(format!("goal set unreadable: {e}")))?;
    let mut items: Vec<(String, i64)> = doc["items"]
        .as_array()
        .into_iter()
        .flatten()
        .map(|it| {
            (
                it["goal_id"].as_str().unwrap_or_default().to_string(),
                it["revision"].as_i64().unwrap_or(1),
            )
        })
        .collect();
    let mut name = row.name.clone();
    let latest: HashMap<String, i64> = goal_choices(&state, &signed.who.team_id)
        .await?
        .into_iter()
        .map(|g| (g.id, g.revision))
        .collect();
    let action = field("action");
    let (verb, arg) = action.split_once(':').unwrap_or((action, ""));
    let k = arg.parse::<usize>().ok().filter(|k| *k < items.len());
    let done = match (verb, k) {
        ("up", Some(k)) if k > 0 => {
            items.swap(k, k - 1);
            "Moved up."
        }
        ("down", Some(k)) if k + 1 < items.len() => {
            items.swap(k, k + 1);
            "Moved down."
        }
        ("remove", Some(k)) => {
            items.remove(k);
            "Removed from the set."
        }
        ("pin", Some(k)) => {
            if let Some(n) = latest.get(&items[k].0) {
                items[k].1 = *n;
            }
            "Pinned at the latest revision."
        }
        ("pin-all", _) => {
            for it in &mut items {
                if let Some(n) = latest.get(&it.0) {
                    it.1 = *n;
                }
            }
            "Every goal pinned at its latest revision."
        }
        ("add", _) => match latest.get(field("goal")) {
            Some(n) => {
                items.push((field("goal").to_string(), *n));
                "Goal added at its latest revision."
            }
            None => {
                return Ok(redirect_flash(
                    &here,
                    "Choose a goal to add.",
                    true,
                    &headers,
                ));
            }
        },
        ("rename", _) => {
            name = field("name").to_string();
            "Renamed."
        }
        _ => return Ok(redirect_flash(&here, "Nothing to do.", true, &headers)),
    };
    let body = json!({
        "name": name,
        "items": items.iter().map(|(g, n)| json!({"goal_id": g, "revision": n})).collect::<Vec<_>>(),
    });
    let input: goal_sets::GoalSetInput =
        serde_json::from_value(body).map_err(|e| PageError::internal(e.to_string()))?;
    let mut put_headers = HeaderMap::new();
    let Ok(tag) = HeaderValue::from_str(field("etag")) else {
        return Ok(redirect_flash(
            &here,
            "The form was damaged; reload the page.",
            true,
            &headers,
        ));
    };
    put_headers.insert(header::IF_MATCH, tag);
    match goal_sets::update(
        State(state.clone()),
        signed.who.clone(),
        Path(row.id.clone()),
        put_headers,
        JsonBody(input),
    )
    .await
    {
        Ok(_) => Ok(redirect_flash(&here, done, false, &headers)),
        Err(e) => Ok(flash_api_error(
            &here,
            "The set was not changed",
            e,
            &headers,
        )),
    }
}
