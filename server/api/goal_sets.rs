//! Goal sets: named, ordered lists of goals pinned at revisions, exported as one bundle.

use super::auth::{Principal, Role};
use super::error::{ApiError, ApiResult};
use super::export;
use super::extract::JsonBody;
use super::goals::{canonical_json, etag_of, if_match, if_none_match, load_revision};
use super::{AppState, Items, items, parse_id, rfc3339};
use crate::scoring;
use crate::store::{self, goal_sets::GoalSetRow};
use axum::extract::{Path, State};
use axum::http::{HeaderMap, HeaderValue, StatusCode, header};
use axum::response::{IntoResponse, Response};
use goalsmith_core::names::{self, NameKind};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};
use serde_json::Value;

/// Most items in one set.
pub const MAX_ITEMS: usize = 500;

/// Body of `POST /api/goal-sets` and `PUT /api/goal-sets/{id}`.
#[derive(Debug, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct GoalSetInput {
    /// Name, 1 to 200 characters.
    name: String,
    /// 1 to 500 pinned revisions, in the set's order.
    items: Vec<ItemInput>,
}

/// One pinned revision of a [`GoalSetInput`].
#[derive(Debug, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
struct ItemInput {
    /// A goal of the team.
    goal_id: String,
    /// One of its revisions, from 1.
    revision: i64,
}

/// A goal set as stored and served. Stored as its canonical bytes (sorted keys, see
/// [`canonical_json`]), which are served as they are and hashed into the ETag; this struct is
/// what those bytes are made from and parsed back into for the list.
#[derive(Debug, Clone, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct GoalSetDocument {
    /// Who saved this version.
    pub author: String,
    /// When version 1 was saved, RFC 3339 UTC.
    pub created_at: String,
    /// The set's id.
    pub id: String,
    /// The pinned revisions, in order.
    pub items: Vec<GoalSetItem>,
    /// Name.
    pub name: String,
    /// When this version was saved, RFC 3339 UTC.
    pub updated_at: String,
    /// Version, from 1; every save adds one.
    pub version: i64,
}

/// One pinned revision of a [`GoalSetDocument`].
#[derive(Debug, Clone, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct GoalSetItem {
    /// The goal.
    pub goal_id: String,
    /// The goal's name at that revision.
    pub name: String,
    /// The pinned revision.
    pub revision: i64,
    /// That revision's `sha256`.
    pub sha256: String,
}

/// Checks the body: a name, 1..=500 items, each an existing revision of a team goal.
async fn check(
    state: &AppState,
    who: &Principal,
    input: GoalSetInput,
) -> ApiResult<(String, Vec<GoalSetItem>)> {
    let name = names::check(NameKind::GoalSet, &input.name)
        .map_err(|e| ApiError::invalid(e.code(), "name", e.to_string()))?;
    if input.items.is_empty() || input.items.len() > MAX_ITEMS {
        return Err(ApiError::invalid(
            "bad_items",
            "items",
            format!("a goal set holds 1 to {MAX_ITEMS} items"),
        ));
    }
    let mut out = Vec::with_capacity(input.items.len());
    for (k, item) in input.items.iter().enumerate() {
        if item.revision < 1 {
            return Err(ApiError::invalid(
                "bad_revision",
                format!("items[{k}].revision"),
                "revisions start at 1",
            ));
        }
        let rev = match load_revision(state, who, &item.goal_id, Some(item.revision)).await {
            Ok(r) => r,
            Err(ApiError::NotFound(m)) => {
                let field = if load_revision(state, who, &item.goal_id, None).await.is_ok() {
                    format!("items[{k}].revision")
                } else {
                    format!("items[{k}].goal_id")
                };
                return Err(ApiError::invalid("unknown_revision", field, m));
            }
            Err(e) => return Err(e),
        };
        out.push(GoalSetItem {
            goal_id: rev.goal_id,
            name: rev.name,
            revision: rev.revision,
            sha256: rev.sha256,
        });
    }
    Ok((name, out))
}

fn document(
    id: &str,
    name: &str,
    version: i64,
    items: Vec<GoalSetItem>,
    author: &str,
    created: i64,
    updated: i64,
) -> ApiResult<String> {
    let doc = GoalSetDocument {
        author: author.to_string(),
        created_at: rfc3339(created),
        id: id.to_string(),
        items,
        name: name.to_string(),
        updated_at: rfc3339(updated),
        version,
    };
    let value = serde_json::to_value(&doc).map_err(|e| ApiError::Internal(e.to_string()))?;
    Ok(canonical_json(&value))
}

fn respond(status: StatusCode, row: &GoalSetRow) -> Response {
    let mut resp = (
        status,
        [(
            header::CONTENT_TYPE,
            HeaderValue::from_static("application/json"),
        )],
        row.document.clone(),
    )
        .into_response();
    if let Ok(v) = HeaderValue::from_str(&etag_of(&row.document)) {
        resp.headers_mut().insert(header::ETAG, v);
    }
    resp
}

async fn load(state: &AppState, who: &Principal, id: &str) -> ApiResult<GoalSetRow> {
    let id = parse_id(id, "goal set")?;
    store::goal_sets::get(state.store.pool(), &who.team_id, &id)
        .await?
        .ok_or_else(|| ApiError::NotFound(format!("no goal set with id {id}")))
}

/// `POST /api/goal-sets`.
pub async fn create(
    State(state): State<AppState>,
    who: Principal,
    JsonBody(input): JsonBody<GoalSetInput>,
) -> ApiResult<Response> {
    who.require(Role::Editor)?;
    let (name, items) = check(&state, &who, input).await?;
    let id = uuid::Uuid::new_v4().to_string();
    let now = store::now_ms();
    let row = GoalSetRow {
        document: document(&id, &name, 1, items, &who.author, now, now)?,
        id,
        name,
        version: 1,
        created_at: now,
        updated_at: now,
    };
    store::goal_sets::insert(state.store.pool(), &who.team_id, &row).await?;
    Ok(respond(StatusCode::CREATED, &row))
}

/// `GET /api/goal-sets`.
pub async fn list(
    State(state): State<AppState>,
    who: Principal,
) -> ApiResult<axum::Json<Items<GoalSetDocument>>> {
    let rows = store::goal_sets::list(state.store.pool(), &who.team_id).await?;
    let docs = rows
        .iter()
        .map(|r| {
            serde_json::from_str::<GoalSetDocument>(&r.document)
                .map_err(|e| ApiError::Internal(format!("goal set {} unreadable: {e}", r.id)))
        })
        .collect::<ApiResult<Vec<_>>>()?;
    Ok(items(docs))
}

/// `GET /api/goal-sets/{id}`.
pub async fn get_one(
    State(state): State<AppState>,
    who: Principal,
    Path(id): Path<String>,
    headers: HeaderMap,
) -> ApiResult<Response> {
    let row = load(&state, &who, &id).await?;
    let etag = etag_of(&row.document);
    if if_none_match(&headers, &etag) {
        return Ok((StatusCode::NOT_MODIFIED, [(header::ETAG, etag)]).into_response());
    }
    Ok(respond(StatusCode::OK, &row))
}

/// `PUT /api/goal-sets/{id}` with `If-Match` (428 without, 412 when stale).
pub async fn update(
    State(state): State<AppState>,
    who: Principal,
    Path(id): Path<String>,
    headers: HeaderMap,
    JsonBody(input): JsonBody<GoalSetInput>,
) -> ApiResult<Response> {
    who.require(Role::Editor)?;
    let current = load(&state, &who, &id).await?;
    if !if_match(&headers, &etag_of(&current.document))? {
        return Err(ApiError::PreconditionFailed(format!(
            "the goal set changed since you loaded it (it is at version {}); reload it and apply your change again",
            current.version
        )));
    }
    let (name, items) = check(&state, &who, input).await?;
    let now = store::now_ms();
    let row = GoalSetRow {
        id: current.id.clone(),
        document: document(
            &current.id,
            &name,
            current.version + 1,
            items,
            &who.author,
            current.created_at,
            now,
        )?,
        name,
        version: current.version + 1,
        created_at: current.created_at,
        updated_at: now,
    };
    if !store::goal_sets::update(state.store.pool(), &who.team_id, current.version, &row).await? {
        return Err(ApiError::PreconditionFailed(
            "someone saved the goal set at the same moment; reload it and apply your change again"
                .into(),
        ));
    }
    Ok(respond(StatusCode::OK, &row))
}

/// `GET /api/goal-sets/{id}/bundle.zip`: every pinned revision's bundle in one ZIP, in order.
pub async fn bundle(
    State(state): State<AppState>,
    who: Principal,
    Path(id): Path<String>,
    headers: HeaderMap,
) -> ApiResult<Response> {
    let row = load(&state, &who, &id).await?;
    // The set document pins every item at a revision, so it names the bundle exactly.
    let etag = export::bundle_etag("goal set", &row.document);
    if if_none_match(&headers, &etag) {
        return Ok(export::not_modified(&etag));
    }
    let set: Value =
        serde_json::from_str(&row.document).map_err(|e| ApiError::Internal(e.to_string()))?;
    let mut loaded = Vec::new();
    // The set's ZIP holds every item's maps at once, so the limit is on their sum, as for one
    // heavy request.
    let mut values = 0usize;
    for item in set["items"].as_array().into_iter().flatten() {
        let goal = item["goal_id"].as_str().unwrap_or_default();
        let n = item["revision"].to_string();
        let l = export::load(&state, &who, goal, &n).await?;
        l.check_full_size_maps(&state.limits)?;
        let (w, h) = l.spec().frame_size();
        values = values.saturating_add(l.model().len() * w as usize * h as usize);
        let max = state.limits.max_map_values;
        if values > max {
            return Err(ApiError::invalid(
                "map_too_large",
                "items",
                format!(
                    "the full-size cost maps of this set's items are {values} values or more, \
                     over the limit of {max} values (sum of P · H · W) per bundle; split the set"
                ),
            ));
        }
        let (content_type, frame) = l.frame_image(&state).await?;
        loaded.push((l, content_type, frame));
    }
    let permit = state.heavy_permits.acquire().await?;
    let cancel = super::heavy::Cancel::new();
    let stop = cancel.flag();
    let zip = tokio::task::spawn_blocking(move || {
        let _permit = permit;
        let maps = loaded
            .iter()
            .map(|(l, _, _)| l.full_size_maps(&stop))
            .collect::<Result<Vec<_>, _>>()?;
        let parts: Vec<scoring::BundleParts<'_>> = loaded
            .iter()
            .zip(&maps)
            .map(|((l, ct, frame), m)| l.bundle_parts(ct, frame, m))
            .collect();
        scoring::goal_set_zip(&set, &parts)
    })
    .await
    .map_err(|e| ApiError::Internal(e.to_string()))??;
    drop(cancel);
    Ok(export::binary_with_etag(
        "application/zip",
        format!("goal-set-{id}-v{}.zip", row.version),
        zip,
        &headers,
        etag,
    ))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The stored bytes are the set's identity (its ETag): built from the struct they must be
    /// the bytes the hand-built value gave before the struct existed.
    #[test]
    fn stored_bytes_do_not_change() {
        let items = vec![GoalSetItem {
            goal_id: "g1".into(),
            name: "pot \"one\"".into(),
            revision: 2,
            sha256: "ab".into(),
        }];
        let doc = document(
            "s1",
            "morning",
            3,
            items,
            "editor token",
            0,
            1_700_000_000_123,
        )
        .expect("document");
        assert_eq!(
            doc,
            r#"{"author":"editor token","created_at":"1970-01-01T00:00:00.000Z","id":"s1","items":[{"goal_id":"g1","name":"pot \"one\"","revision":2,"sha256":"ab"}],"name":"morning","updated_at":"2023-11-14T22:13:20.123Z","version":3}"#
        );
        let back: GoalSetDocument = serde_json::from_str(&doc).expect("parses back");
        assert_eq!(back.version, 3);
    }
}
