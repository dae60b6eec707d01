//! The audit log: who changed what, when, from where.
//!
//! One layer around both edges writes the entries, so no route or form can forget to: for each
//! request that may change something (every method but GET, HEAD and OPTIONS, except the
//! scoring and preview routes, which only compute) it puts an empty
//! [`AuditSlot`] in the request; whichever credential check lets the request in (a bearer
//! token, or a session at either edge) fills it with the [`Principal`]; and when the answer is a
//! success (2xx, or the pages' 303 after a form), the layer stores the entry. Requests refused
//! before anyone was identified (401) leave nothing. The entry is written after the change
//! itself has committed, in its own statement: a process killed between the two keeps the
//! change and loses its entry.

use super::auth::{Principal, Role};
use super::{AppState, ServiceError, ServiceResult};
use crate::store::{self, audit::AuditRow};
use std::sync::{Arc, Mutex};

/// Entries returned at most per page of the log.
pub const PAGE_LIMIT: i64 = 200;

/// Who a request turned out to be, filled in by the credential check.
#[derive(Debug, Clone, Default)]
pub struct AuditSlot(Arc<Mutex<Option<Actor>>>);

/// The identified caller.
#[derive(Debug, Clone)]
pub struct Actor {
    team_id: String,
    name: String,
    credential: &'static str,
    role: Role,
}

impl AuditSlot {
    /// Records the principal a bearer token (`"token"`) or a session (`"session"`) acts as.
    pub fn fill(&self, who: &Principal, credential: &'static str, name: &str) {
        if let Ok(mut slot) = self.0.lock() {
            *slot = Some(Actor {
                team_id: who.team_id.clone(),
                name: name.to_string(),
                credential,
                role: who.role,
            });
        }
    }

    fn take(&self) -> Option<Actor> {
        self.0.lock().ok().and_then(|mut s| s.take())
    }
}

/// What the edge saw of a change.
#[derive(Debug, Clone)]
pub struct Change {
    /// HTTP method.
    pub method: String,
    /// The route's pattern.
    pub route: String,
    /// The concrete path.
    pub path: String,
    /// The answer's status.
    pub status: u16,
    /// The client's address.
    pub address: String,
}

/// Routes that take a POST body but change nothing: scoring candidates and the editor's
/// preview. A planner scores many times a second; its calls are not changes to log.
pub const READ_ONLY_POSTS: &[&str] = &[
    "/api/goals/{id}/revisions/{n}/cost",
    "/api/preview/cost-map.png",
];

/// Whether a request with this method on this route pattern may change something (and so
/// gets a slot).
pub fn may_change(method: &str, route: &str) -> bool {
    !matches!(method, "GET" | "HEAD" | "OPTIONS") && !READ_ONLY_POSTS.contains(&route)
}

/// Stores the entry for a request that was answered, if someone was identified and the answer
/// was a success. A failure to store is logged, not turned into an error: the change has
/// happened and the client must hear so.
pub async fn record(state: &AppState, slot: &AuditSlot, change: Change) {
    if !(200..400).contains(&change.status) {
        return;
    }
    let Some(actor) = slot.take() else {
        return;
    };
    let row = AuditRow {
        id: uuid::Uuid::new_v4().to_string(),
        team_id: actor.team_id,
        at_ms: store::now_ms(),
        actor: actor.name,
        credential: actor.credential.to_string(),
        role: actor.role.as_str().to_string(),
        method: change.method,
        route: change.route,
        path: change.path,
        status: i64::from(change.status),
        address: change.address,
    };
    if let Err(e) = store::audit::insert(&state.store, &row).await {
        tracing::error!(error = %e, route = %row.route, "audit entry not stored");
    }
}

/// One entry as the log shows it.
#[derive(Debug, Clone, serde::Serialize, schemars::JsonSchema)]
pub struct AuditEntry {
    /// Entry id.
    pub id: String,
    /// When the change was answered (RFC 3339, UTC).
    pub at: String,
    /// Unix milliseconds of `at`.
    pub at_ms: i64,
    /// Who: a token's label, or a person's display name and login.
    pub actor: String,
    /// `token` or `session`.
    pub credential: String,
    /// Their role then.
    pub role: String,
    /// HTTP method.
    pub method: String,
    /// The route's pattern (`/api/goals/{id}`).
    pub route: String,
    /// The concrete path.
    pub path: String,
    /// The answer's status.
    pub status: i64,
    /// The client's address as the server saw it (a proxy's, behind one).
    pub address: String,
}

/// A page of the team's log, newest first, for owners: `before` is the `next` cursor of the
/// previous page (`<at_ms>.<id>`). Returns the entries and the cursor of the next page, if
/// there may be one.
pub async fn list(
    state: &AppState,
    who: &Principal,
    before: Option<&str>,
    limit: Option<i64>,
) -> ServiceResult<(Vec<AuditEntry>, Option<String>)> {
    who.require(Role::Owner)?;
    let limit = limit.unwrap_or(50);
    if !(1..=PAGE_LIMIT).contains(&limit) {
        return Err(ServiceError::invalid(
            "out_of_range",
            "limit",
            format!("limit must be 1 to {PAGE_LIMIT}"),
        ));
    }
    let before = before
        .map(|c| {
            c.split_once('.')
                .and_then(|(at, id)| Some((at.parse::<i64>().ok()?, id)))
                .filter(|(at, id)| *at >= 0 && uuid::Uuid::parse_str(id).is_ok())
                .ok_or_else(|| {
                    ServiceError::invalid(
                        "invalid_cursor",
                        "before",
                        "before must be the `next` value of an earlier page",
                    )
                })
        })
        .transpose()?;
    let rows = store::audit::list(&state.store, &who.team_id, before, limit).await?;
    let next = (rows.len() as i64 == limit)
        .then(|| rows.last().map(|r| format!("{}.{}", r.at_ms, r.id)))
        .flatten();
    let entries = rows
        .into_iter()
        .map(|r| AuditEntry {
            id: r.id,
            at: super::rfc3339(r.at_ms),
            at_ms: r.at_ms,
            actor: r.actor,
            credential: r.credential,
            role: r.role,
            method: r.method,
            route: r.route,
            path: r.path,
            status: r.status,
            address: r.address,
        })
        .collect();
    Ok((entries, next))
}

#[cfg(test)]
mod tests {
    /// The read-only list names routes that exist, spelled as the route table spells them.
    #[test]
    fn read_only_posts_are_routes_of_the_table() {
        let table = crate::api::routes::table();
        for path in super::READ_ONLY_POSTS {
            assert!(
                table
                    .iter()
                    .any(|r| r.path == *path && r.verb.as_str() == "POST"),
                "{path} is not a POST route"
            );
        }
        assert!(super::may_change("POST", "/api/goals"));
        assert!(!super::may_change("POST", super::READ_ONLY_POSTS[0]));
        assert!(!super::may_change("GET", "/api/goals"));
    }
}
