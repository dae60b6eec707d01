//! Demonstrations and their frames.

use super::{Result, Store, classify, now_ms};
use sqlx::{Row, any::AnyRow};

/// A stored demonstration.
#[derive(Debug, Clone)]
pub struct DemoRow {
    /// Demo id.
    pub id: String,
    /// Its team.
    pub team_id: String,
    /// The camera whose frames it holds.
    pub camera_id: String,
    /// Number of frames.
    pub frame_count: i64,
    /// Frame width (the camera's).
    pub width: i64,
    /// Frame height (the camera's).
    pub height: i64,
    /// Who uploaded it.
    pub author: String,
    /// Upload time, unix ms.
    pub created_at: i64,
    /// What it shows, as its uploader named it (empty for demos stored before names).
    pub name: String,
}

/// One frame to store with a demo.
pub struct NewDemoFrame<'a> {
    /// SHA-256 of the bytes, lowercase hex.
    pub sha256: &'a str,
    /// `image/png` or `image/jpeg`.
    pub content_type: &'a str,
    /// The encoded image.
    pub bytes: &'a [u8],
    /// Seconds from the first frame, if known.
    pub time_s: Option<f64>,
}

/// One frame of a stored demo.
#[derive(Debug, Clone)]
pub struct DemoFrameRow {
    /// Index from 0.
    pub index: i64,
    /// Its image.
    pub sha256: String,
    /// Seconds from the first frame, if known.
    pub time_s: Option<f64>,
}

const COLUMNS: &str =
    "id, team_id, camera_id, frame_count, width, height, author, created_at, name";

fn from_row(r: &AnyRow) -> DemoRow {
    DemoRow {
        id: r.get(0),
        team_id: r.get(1),
        camera_id: r.get(2),
        frame_count: r.get(3),
        width: r.get(4),
        height: r.get(5),
        author: r.get(6),
        created_at: r.get(7),
        name: r.get(8),
    }
}

/// Stores a demo, its frames and their images in one transaction: a demo is either all there
/// or not at all.
pub async fn insert(store: &Store, row: &DemoRow, frames: &[NewDemoFrame<'_>]) -> Result<()> {
    let mut tx = store.pool().begin().await?;
    let now = now_ms();
    for f in frames {
        sqlx::query(
            "INSERT INTO images (sha256, content_type, width, height, bytes, created_at) \
             VALUES ($1, $2, $3, $4, $5, $6) ON CONFLICT (sha256) DO NOTHING",
        )
        .bind(f.sha256)
        .bind(f.content_type)
        .bind(row.width)
        .bind(row.height)
        .bind(f.bytes)
        .bind(now)
        .execute(&mut *tx)
        .await
        .map_err(classify)?;
    }
    sqlx::query(
        "INSERT INTO demos (id, team_id, camera_id, frame_count, width, height, author, \
         created_at, name) VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9)",
    )
    .bind(&row.id)
    .bind(&row.team_id)
    .bind(&row.camera_id)
    .bind(row.frame_count)
    .bind(row.width)
    .bind(row.height)
    .bind(&row.author)
    .bind(row.created_at)
    .bind(&row.name)
    .execute(&mut *tx)
    .await
    .map_err(classify)?;
    for (k, f) in frames.iter().enumerate() {
        // A frame without a time is written with a literal NULL, never by binding `None`:
        // sqlx 0.9's Any driver sends a missing f64 as a 4-byte float's NULL, and PostgreSQL's
        // cached statement then refuses the next 8-byte time of the same statement ("incorrect
        // binary data format").
        let q = match f.time_s {
            Some(t) => sqlx::query(
                "INSERT INTO demo_frames (demo_id, idx, sha256, time_s) VALUES ($1, $2, $3, $4)",
            )
            .bind(&row.id)
            .bind(k as i64)
            .bind(f.sha256)
            .bind(t),
            None => sqlx::query(
                "INSERT INTO demo_frames (demo_id, idx, sha256, time_s) VALUES ($1, $2, $3, NULL)",
            )
            .bind(&row.id)
            .bind(k as i64)
            .bind(f.sha256),
        };
        q.execute(&mut *tx).await.map_err(classify)?;
    }
    tx.commit().await?;
    Ok(())
}

/// A team's demo.
pub async fn get(store: &Store, team_id: &str, id: &str) -> Result<Option<DemoRow>> {
    let sql = format!("SELECT {COLUMNS} FROM demos WHERE team_id = $1 AND id = $2");
    let row = sqlx::query(sqlx::AssertSqlSafe(sql))
        .bind(team_id)
        .bind(id)
        .fetch_optional(store.pool())
        .await?;
    Ok(row.as_ref().map(from_row))
}

/// A team's demos, newest first.
pub async fn list(store: &Store, team_id: &str) -> Result<Vec<DemoRow>> {
    let sql =
        format!("SELECT {COLUMNS} FROM demos WHERE team_id = $1 ORDER BY created_at DESC, id");
    let rows = sqlx::query(sqlx::AssertSqlSafe(sql))
        .bind(team_id)
        .fetch_all(store.pool())
        .await?;
    Ok(rows.iter().map(from_row).collect())
}

/// The frames of a demo, in order.
pub async fn frames(store: &Store, demo_id: &str) -> Result<Vec<DemoFrameRow>> {
    let rows =
        sqlx::query("SELECT idx, sha256, time_s FROM demo_frames WHERE demo_id = $1 ORDER BY idx")
            .bind(demo_id)
            .fetch_all(store.pool())
            .await?;
    Ok(rows
        .iter()
        .map(|r| DemoFrameRow {
            index: r.get(0),
            sha256: r.get(1),
            time_s: r.get(2),
        })
        .collect())
}

/// One frame of a demo.
pub async fn frame(store: &Store, demo_id: &str, index: i64) -> Result<Option<DemoFrameRow>> {
    let row =
        sqlx::query("SELECT idx, sha256, time_s FROM demo_frames WHERE demo_id = $1 AND idx = $2")
            .bind(demo_id)
            .bind(index)
            .fetch_optional(store.pool())
            .await?;
    Ok(row.map(|r| DemoFrameRow {
        index: r.get(0),
        sha256: r.get(1),
        time_s: r.get(2),
    }))
}
