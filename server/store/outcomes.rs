//! Outcomes reported by robots and planners.

use super::{Result, Store, classify};
use sqlx::Row;

/// A stored outcome.
#[derive(Debug, Clone)]
pub struct OutcomeRow {
    /// Outcome id.
    pub id: String,
    /// Goal tried.
    pub goal_id: String,
    /// Revision tried.
    pub revision: i64,
    /// `[[x, y], …]` as JSON text.
    pub final_points: String,
    /// Per-point results as JSON text.
    pub per_point: String,
    /// Every point within its tolerance.
    pub success: bool,
    /// The goal's cost of the final points.
    pub cost: f64,
    /// Mean residual over the points, pixels.
    pub mean_residual_px: f64,
    /// Free text.
    pub note: String,
    /// Who reported it.
    pub author: String,
    /// Report time (unix ms).
    pub created_at: i64,
}

/// Inserts an outcome of a team's goal.
pub async fn insert(store: &Store, team_id: &str, o: &OutcomeRow) -> Result<()> {
    sqlx::query(
        "INSERT INTO outcomes (id, team_id, goal_id, revision, final_points, per_point, success, \
         cost, mean_residual_px, note, author, created_at) \
         VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12)",
    )
    .bind(&o.id)
    .bind(team_id)
    .bind(&o.goal_id)
    .bind(o.revision)
    .bind(&o.final_points)
    .bind(&o.per_point)
    .bind(i64::from(o.success))
    .bind(o.cost)
    .bind(o.mean_residual_px)
    .bind(&o.note)
    .bind(&o.author)
    .bind(o.created_at)
    .execute(store.pool())
    .await
    .map_err(classify)?;
    Ok(())
}

/// A goal's outcomes over all revisions, oldest first.
pub async fn list(store: &Store, team_id: &str, goal_id: &str) -> Result<Vec<OutcomeRow>> {
    let rows = sqlx::query(
        "SELECT id, goal_id, revision, final_points, per_point, success, cost, mean_residual_px, \
         note, author, created_at FROM outcomes WHERE team_id = $1 AND goal_id = $2 \
         ORDER BY created_at, id",
    )
    .bind(team_id)
    .bind(goal_id)
    .fetch_all(store.pool())
    .await?;
    Ok(rows
        .iter()
        .map(|r| OutcomeRow {
            id: r.get(0),
            goal_id: r.get(1),
            revision: r.get(2),
            final_points: r.get(3),
            per_point: r.get(4),
            success: r.get::<i64, _>(5) != 0,
            cost: r.get(6),
            mean_residual_px: r.get(7),
            note: r.get(8),
            author: r.get(9),
            created_at: r.get(10),
        })
        .collect())
}
