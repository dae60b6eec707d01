//! Cameras: size plus a JSON document of intrinsics, work plane, pose and zones.

use super::{Result, Store, classify};
use sqlx::{Row, any::AnyRow};

/// A stored camera.
#[derive(Debug, Clone)]
pub struct CameraRow {
    /// Camera id.
    pub id: String,
    /// Owning team.
    pub team_id: String,
    /// Display name.
    pub name: String,
    /// Frame width in pixels.
    pub width: i64,
    /// Frame height in pixels.
    pub height: i64,
    /// The camera document (JSON text).
    pub document: String,
    /// Creation time (unix ms).
    pub created_at: i64,
}

fn from_row(r: &AnyRow) -> CameraRow {
    CameraRow {
        id: r.get(0),
        team_id: r.get(1),
        name: r.get(2),
        width: r.get(3),
        height: r.get(4),
        document: r.get(5),
        created_at: r.get(6),
    }
}

/// Inserts a camera.
pub async fn insert(store: &Store, c: &CameraRow) -> Result<()> {
    sqlx::query(
        "INSERT INTO cameras (id, team_id, name, width, height, document, created_at) \
         VALUES ($1, $2, $3, $4, $5, $6, $7)",
    )
    .bind(&c.id)
    .bind(&c.team_id)
    .bind(&c.name)
    .bind(c.width)
    .bind(c.height)
    .bind(&c.document)
    .bind(c.created_at)
    .execute(store.pool())
    .await
    .map_err(classify)?;
    Ok(())
}

/// One camera of a team.
pub async fn get(store: &Store, team_id: &str, id: &str) -> Result<Option<CameraRow>> {
    let row = sqlx::query(
        "SELECT id, team_id, name, width, height, document, created_at FROM cameras \
         WHERE team_id = $1 AND id = $2",
    )
    .bind(team_id)
    .bind(id)
    .fetch_optional(store.pool())
    .await?;
    Ok(row.as_ref().map(from_row))
}

/// All cameras of a team, newest first.
pub async fn list(store: &Store, team_id: &str) -> Result<Vec<CameraRow>> {
    let rows = sqlx::query(
        "SELECT id, team_id, name, width, height, document, created_at FROM cameras \
         WHERE team_id = $1 ORDER BY created_at DESC, id",
    )
    .bind(team_id)
    .fetch_all(store.pool())
    .await?;
    Ok(rows.iter().map(from_row).collect())
}
