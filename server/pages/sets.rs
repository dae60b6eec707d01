//! Goal sets: create one from selected goals pinned at their current revisions, reorder, update
//! pins, download the set's bundle. Writes go through the service's goal-set calls (the same
//! checks and the same ETag guard as the API's).

use super::error::PageError;
use super::home::SetRow;
use super::render::{Chrome, ok, page, redirect_flash, when};
use super::session::{CsrfForm, Signed};
use crate::service::auth::Principal;
use crate::service::auth::Role;
use crate::service::goal_sets::{self, GoalSetInput, ItemInput};
use crate::service::goals::{self, Expected, etag_of};
use crate::service::{AppState, ServiceError};
use crate::store;
use askama::Template;
use axum::extract::{Path, State};
use axum::http::HeaderMap;
use axum::response::{IntoResponse, Response};
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
pub(super) async fn summaries(state: &AppState, who: &Principal) -> Result<Vec<SetRow>, PageError> {
    let rows = goal_sets::rows(state, who).await?;
    rows.iter()
        .map(|r| {
            Ok(SetRow {
                id: r.id.clone(),
                name: r.name.clone(),
                items: goal_sets::parse(r)?.items.len(),
                when: when(r.updated_at),
            })
        })
        .collect()
}

async fn goal_choices(state: &AppState, who: &Principal) -> Result<Vec<GoalChoice>, PageError> {
    Ok(goals::summaries(state, who)
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
        sets: summaries(&state, &signed.who).await?,
        goals: goal_choices(&state, &signed.who).await?,
        can_edit: signed.can_edit(),
    };
    Ok(ok(&page))
}

fn flash_refusal(location: &str, what: &str, e: ServiceError, headers: &HeaderMap) -> Response {
    match e {
        ServiceError::Invalid { .. } | ServiceError::PreconditionFailed(_) => {
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
    let latest: HashMap<String, i64> = goal_choices(&state, &signed.who)
        .await?
        .into_iter()
        .map(|g| (g.id, g.revision))
        .collect();
    let items: Vec<ItemInput> = form
        .iter()
        .filter(|(k, _)| k == "goal")
        .filter_map(|(_, id)| {
            latest.get(id).map(|n| ItemInput {
                goal_id: id.clone(),
                revision: *n,
            })
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
    let input = GoalSetInput { name, items };
    match goal_sets::create(&state, &signed.who, input).await {
        Ok(row) => Ok(redirect_flash(
            &format!("/goal-sets/{}", row.id),
            "Goal set made; each goal is pinned at its current revision.",
            false,
            &headers,
        )),
        Err(e) => Ok(flash_refusal(
            "/goal-sets",
            "The set was not made",
            e,
            &headers,
        )),
    }
}

async fn load(
    state: &AppState,
    signed: &Signed,
    id: &str,
) -> Result<store::goal_sets::GoalSetRow, PageError> {
    match goal_sets::load(state, &signed.who, id).await {
        Ok(row) => Ok(row),
        Err(ServiceError::NotFound(_)) => Err(PageError::NotFound(format!(
            "There is no goal set {id} in this team."
        ))),
        Err(e) => Err(e.into()),
    }
}

/// `GET /goal-sets/{id}`.
pub(super) async fn show(
    State(state): State<AppState>,
    headers: HeaderMap,
    signed: Signed,
    Path(id): Path<String>,
) -> Result<Response, PageError> {
    let row = load(&state, &signed, &id).await?;
    let doc = goal_sets::parse(&row)?;
    let goals = goal_choices(&state, &signed.who).await?;
    let latest: HashMap<&str, (&str, i64)> = goals
        .iter()
        .map(|g| (g.id.as_str(), (g.name.as_str(), g.revision)))
        .collect();
    let items: Vec<ItemLine> = doc
        .items
        .into_iter()
        .enumerate()
        .map(|(k, it)| {
            let latest_rev = latest.get(it.goal_id.as_str()).map_or(0, |l| l.1);
            ItemLine {
                position: k + 1,
                name: it.name,
                revision: it.revision,
                latest: latest_rev,
                goal_id: it.goal_id,
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
    let mut items: Vec<(String, i64)> = goal_sets::parse(&row)?
        .items
        .into_iter()
        .map(|it| (it.goal_id, it.revision))
        .collect();
    let mut name = row.name.clone();
    let latest: HashMap<String, i64> = goal_choices(&state, &signed.who)
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
    let input = GoalSetInput {
        name,
        items: items
            .into_iter()
            .map(|(goal_id, revision)| ItemInput { goal_id, revision })
            .collect(),
    };
    let expected = Expected::Etags(vec![field("etag").to_string()]);
    match goal_sets::update(&state, &signed.who, &row.id, &expected, input).await {
        Ok(_) => Ok(redirect_flash(&here, done, false, &headers)),
        Err(e) => Ok(flash_refusal(&here, "The set was not changed", e, &headers)),
    }
}
