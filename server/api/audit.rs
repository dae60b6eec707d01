//! The audit log over HTTP, for owners.

use crate::service::audit::{self, AuditEntry};
use crate::service::auth::Principal;
use crate::service::{AppState, ServiceError, ServiceResult};
use axum::Json;
use axum::extract::State;
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

/// Query of `GET /api/audit-log`.
#[derive(Debug, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct AuditQuery {
    /// Entries per page (default 50).
    #[schemars(range(min = 1, max = 200))]
    pub limit: Option<i64>,
    /// The `next` of the previous page: entries older than it.
    pub before: Option<String>,
}

/// A page of the log.
#[derive(Debug, Serialize, JsonSchema)]
pub struct AuditPage {
    /// The entries, newest first.
    pub items: Vec<AuditEntry>,
    /// Pass as `before` for the next (older) page; absent on the last page.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub next: Option<String>,
}

/// `GET /api/audit-log[?limit=&before=]`.
pub async fn list(
    State(state): State<AppState>,
    who: Principal,
    query: Result<axum::extract::Query<AuditQuery>, axum::extract::rejection::QueryRejection>,
) -> ServiceResult<Json<AuditPage>> {
    let axum::extract::Query(q) =
        query.map_err(|e| ServiceError::invalid_body("bad_query", e.body_text()))?;
    let (items, next) = audit::list(&state, &who, q.before.as_deref(), q.limit).await?;
    Ok(Json(AuditPage { items, next }))
}
