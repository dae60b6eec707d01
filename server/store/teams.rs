//! Teams and API tokens. Only the SHA-256 of a token is stored.

use super::{Result, Role, Store, classify, now_ms};
use sqlx::Row;

/// A team row.
#[derive(Debug, Clone)]
pub struct TeamRow {
    /// Team id.
    pub id: String,
    /// Unique team name.
    pub name: String,
}

/// What a token grants.
#[derive(Debug, Clone)]
pub struct TokenRow {
    /// Token id (not the secret).
    pub id: String,
    /// Team the token acts for.
    pub team_id: String,
    /// `viewer`, `editor` or `owner`.
    pub role: Role,
    /// Who or what holds it; becomes the author of revisions.
    pub label: String,
    /// Creation time (unix ms).
    pub created_at: i64,
}

/// Finds a team by name, creating it when missing.
pub async fn get_or_create_team(store: &Store, name: &str) -> Result<TeamRow> {
    if let Some(t) = find_team_by_name(store, name).await? {
        return Ok(t);
    }
    let id = uuid::Uuid::new_v4().to_string();
    let inserted = sqlx::query(
        "INSERT INTO teams (id, name, created_at) VALUES ($1, $2, $3) ON CONFLICT (name) DO NOTHING",
    )
    .bind(&id)
    .bind(name)
    .bind(now_ms())
    .execute(store.pool())
    .await
    .map_err(classify)?;
    if inserted.rows_affected() == 0 {
        // Another process created it between our read and write.
        if let Some(t) = find_team_by_name(store, name).await? {
            return Ok(t);
        }
    }
    Ok(TeamRow {
        id,
        name: name.to_string(),
    })
}

/// A team by name.
pub async fn find_team_by_name(store: &Store, name: &str) -> Result<Option<TeamRow>> {
    let row = sqlx::query("SELECT id, name FROM teams WHERE name = $1")
        .bind(name)
        .fetch_optional(store.pool())
        .await?;
    Ok(row.map(|r| TeamRow {
        id: r.get(0),
        name: r.get(1),
    }))
}

/// How many teams exist (0 means an empty database).
pub async fn count_teams(store: &Store) -> Result<i64> {
    let row = sqlx::query("SELECT COUNT(*) FROM teams")
        .fetch_one(store.pool())
        .await?;
    Ok(row.get::<i64, _>(0))
}

/// Stores a new token by its hash.
pub async fn insert_token(
    store: &Store,
    team_id: &str,
    token_hash: &str,
    role: Role,
    label: &str,
) -> Result<TokenRow> {
    let id = uuid::Uuid::new_v4().to_string();
    let created_at = now_ms();
    sqlx::query(
        "INSERT INTO tokens (id, team_id, token_hash, role, label, created_at) \
         VALUES ($1, $2, $3, $4, $5, $6)",
    )
    .bind(&id)
    .bind(team_id)
    .bind(token_hash)
    .bind(role.as_str())
    .bind(label)
    .bind(created_at)
    .execute(store.pool())
    .await
    .map_err(classify)?;
    Ok(TokenRow {
        id,
        team_id: team_id.to_string(),
        role,
        label: label.to_string(),
        created_at,
    })
}

/// The live (not revoked) token with this hash.
pub async fn find_token(store: &Store, token_hash: &str) -> Result<Option<TokenRow>> {
    let row = sqlx::query(
        "SELECT id, team_id, role, label, created_at FROM tokens \
         WHERE token_hash = $1 AND revoked_at IS NULL",
    )
    .bind(token_hash)
    .fetch_optional(store.pool())
    .await?;
    row.map(|r| {
        Ok(TokenRow {
            id: r.get(0),
            team_id: r.get(1),
            role: Role::column(r.get(2))?,
            label: r.get(3),
            created_at: r.get(4),
        })
    })
    .transpose()
}
