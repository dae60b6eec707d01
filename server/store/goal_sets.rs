//! Goal sets: ordered lists of pinned goal revisions, saved with a version counter.

use super::{Result, Store, classify};
use sqlx::{Row, any::AnyRow};

/// A stored goal set.
#[derive(Debug, Clone)]
pub struct GoalSetRow {
    /// Set id.
    pub id: String,
    /// Name.
    pub name: String,
    /// Save counter, from 1.
    pub version: i64,
    /// The JSON document served.
    pub document: String,
    /// Creation time (unix ms).
    pub created_at: i64,
    /// Last save (unix ms).
    pub updated_at: i64,
}

fn from_row(r: &AnyRow) -> GoalSetRow {
    GoalSetRow {
        id: r.get(0),
        name: r.get(1),
        version: r.get(2),
        document: r.get(3),
        created_at: r.get(4),
        updated_at: r.get(5),
    }
}

/// Inserts a new set (version 1).
pub async fn insert(store: &Store, team_id: &str, row: &GoalSetRow) -> Result<()> {
    sqlx::query(
        "INSERT INTO goal_sets (id, team_id, name, version, document, created_at, updated_at) \
         VALUES ($1, $2, $3, $4, $5, $6, $7)",
    )
    .bind(&row.id)
    .bind(team_id)
    .bind(&row.name)
    .bind(row.version)
    .bind(&row.document)
    .bind(row.created_at)
    .bind(row.updated_at)
    .execute(store.pool())
    .await
    .map_err(classify)?;
    Ok(())
}

/// Replaces a set if its version is still `expected`; false (nothing written) otherwise.
pub async fn update(store: &Store, team_id: &str, expected: i64, row: &GoalSetRow) -> Result<bool> {
    let n = sqlx::query(
        "UPDATE goal_sets SET name = $1, version = $2, document = $3, updated_at = $4 \
         WHERE id = $5 AND team_id = $6 AND version = $7",
    )
    .bind(&row.name)
    .bind(row.version)
    .bind(&row.document)
    .bind(row.updated_at)
    .bind(&row.id)
    .bind(team_id)
    .bind(expected)
    .execute(store.pool())
    .await
    .map_err(classify)?
    .rows_affected();
    Ok(n == 1)
}

/// One set of a team.
pub async fn get(store: &Store, team_id: &str, id: &str) -> Result<Option<GoalSetRow>> {
    let row = sqlx::query(
        "SELECT id, name, version, document, created_at, updated_at FROM goal_sets \
         WHERE team_id = $1 AND id = $2",
    )
    .bind(team_id)
    .bind(id)
    .fetch_optional(store.pool())
    .await?;
    Ok(row.as_ref().map(from_row))
}

/// A team's sets, most recently saved first.
pub async fn list(store: &Store, team_id: &str) -> Result<Vec<GoalSetRow>> {
    let rows = sqlx::query(
        "SELECT id, name, version, document, created_at, updated_at FROM goal_sets \
         WHERE team_id = $1 ORDER BY updated_at DESC, id",
    )
    .bind(team_id)
    .fetch_all(store.pool())
    .await?;
    Ok(rows.iter().map(from_row).collect())
}
