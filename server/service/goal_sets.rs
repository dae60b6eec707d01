//! Goal sets: named, ordered lists of goals pinned at revisions, exported as one bundle.

use super::auth::{Principal, Role};
use super::error::{ServiceError, ServiceResult};
use super::export::{self, Download, Fetched};
use super::goals::{Expected, load_revision};
use super::{AppState, parse_id, rfc3339};
use crate::scoring;
use crate::store::{self, goal_sets::GoalSetRow};
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
    pub name: String,
    /// 1 to 500 pinned revisions, in the set's order.
    pub items: Vec<ItemInput>,
}

/// One pinned revision of a [`GoalSetInput`].
#[derive(Debug, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct ItemInput {
    /// A goal of the team.
    pub goal_id: String,
    /// One of its revisions, from 1.
    pub revision: i64,
}

/// A goal set as stored and served. Stored as its canonical bytes (sorted keys, see
/// [`goalsmith_core::canonical`]), which are served as they are and hashed into the ETag; this struct is
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
) -> ServiceResult<(String, Vec<GoalSetItem>)> {
    let name = names::check(NameKind::GoalSet, &input.name)
        .map_err(|e| ServiceError::invalid(e.code(), "name", e.to_string()))?;
    if input.items.is_empty() || input.items.len() > MAX_ITEMS {
        return Err(ServiceError::invalid(
            "bad_items",
            "items",
            format!("a goal set holds 1 to {MAX_ITEMS} items"),
        ));
    }
    let mut out = Vec::with_capacity(input.items.len());
    for (k, item) in input.items.iter().enumerate() {
        if item.revision < 1 {
            return Err(ServiceError::invalid(
                "bad_revision",
                format!("items[{k}].revision"),
                "revisions start at 1",
            ));
        }
        let rev = match load_revision(state, who, &item.goal_id, Some(item.revision)).await {
            Ok(r) => r,
            Err(ServiceError::NotFound(m)) => {
                let field = if load_revision(state, who, &item.goal_id, None).await.is_ok() {
                    format!("items[{k}].revision")
                } else {
                    format!("items[{k}].goal_id")
                };
                return Err(ServiceError::invalid("unknown_revision", field, m));
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
) -> ServiceResult<String> {
    let doc = GoalSetDocument {
        author: author.to_string(),
        created_at: rfc3339(created),
        id: id.to_string(),
        items,
        name: name.to_string(),
        updated_at: rfc3339(updated),
        version,
    };
    let value = serde_json::to_value(&doc).map_err(|e| ServiceError::Internal(e.to_string()))?;
    Ok(goalsmith_core::canonical::to_string(&value))
}

/// A team's goal set or 404.
pub async fn load(state: &AppState, who: &Principal, id: &str) -> ServiceResult<GoalSetRow> {
    let id = parse_id(id, "goal set")?;
    store::goal_sets::get(&state.store, &who.team_id, &id)
        .await?
        .ok_or_else(|| ServiceError::NotFound(format!("no goal set with id {id}")))
}

/// Creates a goal set at version 1.
pub async fn create(
    state: &AppState,
    who: &Principal,
    input: GoalSetInput,
) -> ServiceResult<GoalSetRow> {
    who.require(Role::Editor)?;
    let (name, items) = check(state, who, input).await?;
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
    store::goal_sets::insert(&state.store, &who.team_id, &row).await?;
    Ok(row)
}

/// The team's goal sets as documents.
pub async fn list(state: &AppState, who: &Principal) -> ServiceResult<Vec<GoalSetDocument>> {
    let rows = store::goal_sets::list(&state.store, &who.team_id).await?;
    rows.iter().map(parse).collect()
}

/// The document of a stored set.
pub fn parse(row: &GoalSetRow) -> ServiceResult<GoalSetDocument> {
    serde_json::from_str::<GoalSetDocument>(&row.document)
        .map_err(|e| ServiceError::Internal(format!("goal set {} unreadable: {e}", row.id)))
}

/// A new version of a goal set, written only while `expected` holds (428 / 412 otherwise).
pub async fn update(
    state: &AppState,
    who: &Principal,
    id: &str,
    expected: &Expected,
    input: GoalSetInput,
) -> ServiceResult<GoalSetRow> {
    who.require(Role::Editor)?;
    let current = load(state, who, id).await?;
    if !expected.holds_for_document(&current.document)? {
        return Err(ServiceError::PreconditionFailed(format!(
            "the goal set changed since you loaded it (it is at version {}); reload it and apply your change again",
            current.version
        )));
    }
    let (name, items) = check(state, who, input).await?;
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
    if !store::goal_sets::update(&state.store, &who.team_id, current.version, &row).await? {
        return Err(ServiceError::PreconditionFailed(
            "someone saved the goal set at the same moment; reload it and apply your change again"
                .into(),
        ));
    }
    Ok(row)
}

/// Every pinned revision's bundle in one ZIP, in the set's order, or [`Fetched::Current`] when
/// `is_current` says the client holds its ETag.
pub async fn bundle(
    state: &AppState,
    who: &Principal,
    id: &str,
    is_current: impl Fn(&str) -> bool,
) -> ServiceResult<Fetched> {
    let row = load(state, who, id).await?;
    // The set document pins every item at a revision, so it names the bundle exactly.
    let etag = export::bundle_etag("goal set", &row.document);
    if is_current(&etag) {
        return Ok(Fetched::Current(etag));
    }
    let set: Value =
        serde_json::from_str(&row.document).map_err(|e| ServiceError::Internal(e.to_string()))?;
    let doc = parse(&row)?;
    let mut loaded = Vec::new();
    // The set's ZIP holds every item's maps at once, so the limit is on their sum, as for one
    // heavy request.
    let mut values = 0usize;
    for item in &doc.items {
        let mut l = export::load(state, who, &item.goal_id, &item.revision.to_string()).await?;
        // One permit for the whole set below: an item's build permit is given back at once, or
        // a set of more items than permits would wait for itself.
        l.permit = None;
        l.check_full_size_maps(&state.limits)?;
        let (w, h) = l.spec().frame_size();
        values = values.saturating_add(l.model().len() * w as usize * h as usize);
        let max = state.limits.max_map_values;
        if values > max {
            return Err(ServiceError::invalid(
                "map_too_large",
                "items",
                format!(
                    "the full-size cost maps of this set's items are {values} values or more, \
                     over the limit of {max} values (sum of P · H · W) per bundle; split the set"
                ),
            ));
        }
        let (content_type, frame) = l.frame_image(state).await?;
        let fits = l.bundled_reward_fits(state, who).await?;
        loaded.push((l, content_type, frame, fits));
    }
    let permit = state.heavy_permits.acquire().await?;
    let cancel = super::heavy::Cancel::new();
    let stop = cancel.flag();
    let zip = super::heavy::spawn(move || {
        let _permit = permit;
        let maps = loaded
            .iter()
            .map(|(l, _, _, _)| l.full_size_maps(&stop))
            .collect::<Result<Vec<_>, _>>()?;
        let parts: Vec<scoring::BundleParts<'_>> = loaded
            .iter()
            .zip(&maps)
            .map(|((l, ct, frame, fits), m)| l.bundle_parts(ct, frame, m, fits))
            .collect();
        scoring::goal_set_zip(&set, &parts)
    })
    .await
    .map_err(|e| ServiceError::Internal(e.to_string()))??;
    drop(cancel);
    Ok(Fetched::File(Download {
        content_type: "application/zip",
        filename: format!("goal-set-{}-v{}.zip", row.id, row.version),
        bytes: zip,
        etag,
    }))
}

/// The team's goal sets as stored (for lists).
pub async fn rows(state: &AppState, who: &Principal) -> ServiceResult<Vec<GoalSetRow>> {
    Ok(store::goal_sets::list(&state.store, &who.team_id).await?)
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
