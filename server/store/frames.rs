//! Frames and their image bytes (stored once per SHA-256).

use super::{Result, Store, classify, now_ms};
use sqlx::{Row, any::AnyRow};

/// A stored frame (without its bytes).
#[derive(Debug, Clone)]
pub struct FrameRow {
    /// Frame id.
    pub id: String,
    /// Owning team.
    pub team_id: String,
    /// Camera it belongs to.
    pub camera_id: String,
    /// SHA-256 of the image bytes, lowercase hex.
    pub sha256: String,
    /// Width in pixels.
    pub width: i64,
    /// Height in pixels.
    pub height: i64,
    /// Upload time (unix ms).
    pub created_at: i64,
}

fn from_row(r: &AnyRow) -> FrameRow {
    FrameRow {
        id: r.get(0),
        team_id: r.get(1),
        camera_id: r.get(2),
        sha256: r.get(3),
        width: r.get(4),
        height: r.get(5),
        created_at: r.get(6),
    }
}

/// A decoded, checked image about to become a frame.
pub struct NewImage<'a> {
    /// SHA-256 of `bytes`, lowercase hex.
    pub sha256: &'a str,
    /// `image/png` or `image/jpeg`.
    pub content_type: &'a str,
    /// Width in pixels.
    pub width: i64,
    /// Height in pixels.
    pub height: i64,
    /// The encoded image as uploaded.
    pub bytes: &'a [u8],
}

/// Stores the image (if new) and a frame for it on the camera; returns the frame and whether it
/// was new. Uploading the same bytes to the same camera again returns the existing frame.
pub async fn insert(
    store: &Store,
    team_id: &str,
    camera_id: &str,
    image: &NewImage<'_>,
) -> Result<(FrameRow, bool)> {
    let NewImage {
        sha256,
        content_type,
        width,
        height,
        bytes,
    } = *image;
    let mut tx = store.pool().begin().await?;
    let now = now_ms();
    sqlx::query(
        "INSERT INTO images (sha256, content_type, width, height, bytes, created_at) \
         VALUES ($1, $2, $3, $4, $5, $6) ON CONFLICT (sha256) DO NOTHING",
    )
    .bind(sha256)
    .bind(content_type)
    .bind(width)
    .bind(height)
    .bind(bytes)
    .bind(now)
    .execute(&mut *tx)
    .await
    .map_err(classify)?;
    let id = uuid::Uuid::new_v4().to_string();
    let inserted = sqlx::query(
        "INSERT INTO frames (id, team_id, camera_id, sha256, width, height, created_at) \
         VALUES ($1, $2, $3, $4, $5, $6, $7) ON CONFLICT (camera_id, sha256) DO NOTHING",
    )
    .bind(&id)
    .bind(team_id)
    .bind(camera_id)
    .bind(sha256)
    .bind(width)
    .bind(height)
    .bind(now)
    .execute(&mut *tx)
    .await
    .map_err(classify)?
    .rows_affected()
        == 1;
    let row = sqlx::query(
        "SELECT id, team_id, camera_id, sha256, width, height, created_at FROM frames \
         WHERE camera_id = $1 AND sha256 = $2",
    )
    .bind(camera_id)
    .bind(sha256)
    .fetch_one(&mut *tx)
    .await?;
    tx.commit().await?;
    Ok((from_row(&row), inserted))
}

/// One frame of a team.
pub async fn get(store: &Store, team_id: &str, id: &str) -> Result<Option<FrameRow>> {
    let row = sqlx::query(
        "SELECT id, team_id, camera_id, sha256, width, height, created_at FROM frames \
         WHERE team_id = $1 AND id = $2",
    )
    .bind(team_id)
    .bind(id)
    .fetch_optional(store.pool())
    .await?;
    Ok(row.as_ref().map(from_row))
}

/// Frames of a team, newest first, optionally of one camera.
pub async fn list(store: &Store, team_id: &str, camera_id: Option<&str>) -> Result<Vec<FrameRow>> {
    let rows = match camera_id {
        Some(c) => {
            sqlx::query(
                "SELECT id, team_id, camera_id, sha256, width, height, created_at FROM frames \
                 WHERE team_id = $1 AND camera_id = $2 ORDER BY created_at DESC, id",
            )
            .bind(team_id)
            .bind(c)
            .fetch_all(store.pool())
            .await?
        }
        None => {
            sqlx::query(
                "SELECT id, team_id, camera_id, sha256, width, height, created_at FROM frames \
                 WHERE team_id = $1 ORDER BY created_at DESC, id",
            )
            .bind(team_id)
            .fetch_all(store.pool())
            .await?
        }
    };
    Ok(rows.iter().map(from_row).collect())
}

/// The stored bytes and content type of an image.
pub async fn image_bytes(store: &Store, sha256: &str) -> Result<Option<(String, Vec<u8>)>> {
    let row = sqlx::query("SELECT content_type, bytes FROM images WHERE sha256 = $1")
        .bind(sha256)
        .fetch_optional(store.pool())
        .await?;
    Ok(row.map(|r| (r.get(0), r.get(1))))
}
