//! Reward fits: what each fit used, and once it has run, its result and reward map.

use super::{Result, Store, classify};
use sqlx::{Row, any::AnyRow};

/// A stored reward fit.
#[derive(Debug, Clone)]
pub struct RewardFitRow {
    /// Fit id.
    pub id: String,
    /// Its team.
    pub team_id: String,
    /// The frame it was fitted on.
    pub frame_id: String,
    /// The operation that runs it.
    pub operation_id: String,
    /// Everything the fit uses, as canonical JSON.
    pub settings: String,
    /// The result as JSON, once the fit has run.
    pub result: Option<String>,
    /// The reward map, float32 little-endian, rows × cols, once the fit has run.
    pub reward_map: Option<Vec<u8>>,
    /// Who started it.
    pub author: String,
    /// Created, unix ms.
    pub created_at: i64,
}

const COLUMNS: &str =
    "id, team_id, frame_id, operation_id, settings, result, reward_map, author, created_at";

fn from_row(r: &AnyRow) -> RewardFitRow {
    RewardFitRow {
        id: r.get(0),
        team_id: r.get(1),
        frame_id: r.get(2),
        operation_id: r.get(3),
        settings: r.get(4),
        result: r.get(5),
        reward_map: r.get(6),
        author: r.get(7),
        created_at: r.get(8),
    }
}

/// Stores a fit that has not run yet (no result, no map) together with the queued operation
/// (`row.operation_id`, of `kind`, with `input`) that will run it, in one transaction: a worker
/// never claims an operation whose fit is not there.
pub async fn insert(store: &Store, row: &RewardFitRow, kind: &str, input: &str) -> Result<()> {
    let mut tx = store.pool().begin().await?;
    // NULLs written in the SQL, not bound: see `demos::insert`.
    sqlx::query(
        "INSERT INTO reward_fits (id, team_id, frame_id, operation_id, settings, result, \
         reward_map, author, created_at) VALUES ($1, $2, $3, $4, $5, NULL, NULL, $6, $7)",
    )
    .bind(&row.id)
    .bind(&row.team_id)
    .bind(&row.frame_id)
    .bind(&row.operation_id)
    .bind(&row.settings)
    .bind(&row.author)
    .bind(row.created_at)
    .execute(&mut *tx)
    .await
    .map_err(classify)?;
    super::operations::insert_queued(&mut tx, &row.operation_id, &row.team_id, kind, input).await?;
    tx.commit().await?;
    Ok(())
}

/// A team's fit.
pub async fn get(store: &Store, team_id: &str, id: &str) -> Result<Option<RewardFitRow>> {
    let sql = format!("SELECT {COLUMNS} FROM reward_fits WHERE team_id = $1 AND id = $2");
    let row = sqlx::query(sqlx::AssertSqlSafe(sql))
        .bind(team_id)
        .bind(id)
        .fetch_optional(store.pool())
        .await?;
    Ok(row.as_ref().map(from_row))
}

/// A fit by id, whatever its team (for the operation that runs it).
pub async fn by_id(store: &Store, id: &str) -> Result<Option<RewardFitRow>> {
    let sql = format!("SELECT {COLUMNS} FROM reward_fits WHERE id = $1");
    let row = sqlx::query(sqlx::AssertSqlSafe(sql))
        .bind(id)
        .fetch_optional(store.pool())
        .await?;
    Ok(row.as_ref().map(from_row))
}

/// Records the result and the reward map of a fit (the same values when run again).
pub async fn put_result(store: &Store, id: &str, result: &str, reward_map: &[u8]) -> Result<()> {
    sqlx::query("UPDATE reward_fits SET result = $1, reward_map = $2 WHERE id = $3")
        .bind(result)
        .bind(reward_map)
        .bind(id)
        .execute(store.pool())
        .await
        .map_err(classify)?;
    Ok(())
}

/// A team's fits, newest first, at most `limit`, without their reward maps (`reward_map` is
/// `None` in every row; `get` has it).
pub async fn list(store: &Store, team_id: &str, limit: i64) -> Result<Vec<RewardFitRow>> {
    let rows = sqlx::query(
        "SELECT id, team_id, frame_id, operation_id, settings, result, author, created_at \
         FROM reward_fits WHERE team_id = $1 ORDER BY created_at DESC, id LIMIT $2",
    )
    .bind(team_id)
    .bind(limit)
    .fetch_all(store.pool())
    .await?;
    Ok(rows
        .iter()
        .map(|r| RewardFitRow {
            id: r.get(0),
            team_id: r.get(1),
            frame_id: r.get(2),
            operation_id: r.get(3),
            settings: r.get(4),
            result: r.get(5),
            reward_map: None,
            author: r.get(6),
            created_at: r.get(7),
        })
        .collect())
}
