//! The audit log: one row per change that was answered with success.

use super::{Result, Store};
use sqlx::Row;

/// One change.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct AuditRow {
    /// Entry id.
    pub id: String,
    /// The team whose data changed.
    pub team_id: String,
    /// When it was answered (unix ms).
    pub at_ms: i64,
    /// Who: the token's label or the person's display name and login.
    pub actor: String,
    /// `token` or `session`.
    pub credential: String,
    /// Their role at the time.
    pub role: String,
    /// HTTP method.
    pub method: String,
    /// The route's pattern (`/api/goals/{id}`).
    pub route: String,
    /// The concrete path, without the query.
    pub path: String,
    /// The answer's status.
    pub status: i64,
    /// The client's address as the server's socket saw it.
    pub address: String,
}

/// Stores an entry.
pub async fn insert(store: &Store, row: &AuditRow) -> Result<()> {
    sqlx::query(
        "INSERT INTO audit_log (id, team_id, at_ms, actor, credential, role, method, route, path, \
         status, address) VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11)",
    )
    .bind(&row.id)
    .bind(&row.team_id)
    .bind(row.at_ms)
    .bind(&row.actor)
    .bind(&row.credential)
    .bind(&row.role)
    .bind(&row.method)
    .bind(&row.route)
    .bind(&row.path)
    .bind(row.status)
    .bind(&row.address)
    .execute(store.pool())
    .await?;
    Ok(())
}

/// A team's entries, newest first, at most `limit`, older than `before` (`(at_ms, id)`) when
/// given, so pages of the log follow one another without gaps or repeats.
pub async fn list(
    store: &Store,
    team_id: &str,
    before: Option<(i64, &str)>,
    limit: i64,
) -> Result<Vec<AuditRow>> {
    const COLUMNS: &str =
        "id, team_id, at_ms, actor, credential, role, method, route, path, status, address";
    let rows = match before {
        None => {
            let sql = format!(
                "SELECT {COLUMNS} FROM audit_log WHERE team_id = $1 \
                 ORDER BY at_ms DESC, id DESC LIMIT $2"
            );
            sqlx::query(sqlx::AssertSqlSafe(sql))
                .bind(team_id)
                .bind(limit)
                .fetch_all(store.pool())
                .await?
        }
        Some((at, id)) => {
            let sql = format!(
                "SELECT {COLUMNS} FROM audit_log WHERE team_id = $1 \
                 AND (at_ms < $2 OR (at_ms = $2 AND id < $3)) \
                 ORDER BY at_ms DESC, id DESC LIMIT $4"
            );
            sqlx::query(sqlx::AssertSqlSafe(sql))
                .bind(team_id)
                .bind(at)
                .bind(id)
                .bind(limit)
                .fetch_all(store.pool())
                .await?
        }
    };
    rows.iter()
        .map(|r| {
            Ok(AuditRow {
                id: r.try_get(0)?,
                team_id: r.try_get(1)?,
                at_ms: r.try_get(2)?,
                actor: r.try_get(3)?,
                credential: r.try_get(4)?,
                role: r.try_get(5)?,
                method: r.try_get(6)?,
                route: r.try_get(7)?,
                path: r.try_get(8)?,
                status: r.try_get(9)?,
                address: r.try_get(10)?,
            })
        })
        .collect()
}
