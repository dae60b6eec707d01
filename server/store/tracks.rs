//! Tracks of demos and their samples.

use super::{Result, Store, StoreError, classify};
use sqlx::{Row, any::AnyRow};

/// A stored track.
#[derive(Debug, Clone)]
pub struct TrackRow {
    /// Track id.
    pub id: String,
    /// Its team.
    pub team_id: String,
    /// Its demo.
    pub demo_id: String,
    /// What the point is.
    pub label: String,
    /// Who started it.
    pub author: String,
    /// Created, unix ms.
    pub created_at: i64,
}

/// Who placed a sample.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Origin {
    /// The tracker.
    Tracked,
    /// A person (the seed or a correction); tracking never overwrites it.
    Manual,
}

impl Origin {
    /// The stored name.
    pub fn as_str(self) -> &'static str {
        match self {
            Origin::Tracked => "tracked",
            Origin::Manual => "manual",
        }
    }
}

/// One sample of a track.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SampleRow {
    /// Frame index from 0.
    pub frame: i64,
    /// x, pixels.
    pub x: f64,
    /// y, pixels.
    pub y: f64,
    /// Who placed it.
    pub origin: Origin,
    /// In [0, 1].
    pub confidence: f64,
    /// Whether the point was lost there.
    pub lost: bool,
}

fn track_from(r: &AnyRow) -> TrackRow {
    TrackRow {
        id: r.get(0),
        team_id: r.get(1),
        demo_id: r.get(2),
        label: r.get(3),
        author: r.get(4),
        created_at: r.get(5),
    }
}

fn sample_from(r: &AnyRow) -> Result<SampleRow> {
    let origin: String = r.get(3);
    Ok(SampleRow {
        frame: r.get(0),
        x: r.get(1),
        y: r.get(2),
        origin: match origin.as_str() {
            "tracked" => Origin::Tracked,
            "manual" => Origin::Manual,
            other => return Err(StoreError::Corrupt(format!("sample origin {other:?}"))),
        },
        confidence: r.get(4),
        lost: r.get::<i64, _>(5) != 0,
    })
}

/// Stores a new track with its seed sample, in one transaction.
pub async fn insert(store: &Store, row: &TrackRow, seed: &SampleRow) -> Result<()> {
    let mut tx = store.pool().begin().await?;
    sqlx::query(
        "INSERT INTO tracks (id, team_id, demo_id, label, author, created_at) \
         VALUES ($1, $2, $3, $4, $5, $6)",
    )
    .bind(&row.id)
    .bind(&row.team_id)
    .bind(&row.demo_id)
    .bind(&row.label)
    .bind(&row.author)
    .bind(row.created_at)
    .execute(&mut *tx)
    .await
    .map_err(classify)?;
    put_sample(&mut tx, &row.id, seed).await?;
    tx.commit().await?;
    Ok(())
}

async fn put_sample(
    tx: &mut sqlx::Transaction<'_, sqlx::Any>,
    track_id: &str,
    s: &SampleRow,
) -> Result<()> {
    sqlx::query(
        "INSERT INTO track_samples (track_id, frame, x, y, origin, confidence, lost) \
         VALUES ($1, $2, $3, $4, $5, $6, $7) ON CONFLICT (track_id, frame) DO UPDATE SET \
         x = excluded.x, y = excluded.y, origin = excluded.origin, \
         confidence = excluded.confidence, lost = excluded.lost",
    )
    .bind(track_id)
    .bind(s.frame)
    .bind(s.x)
    .bind(s.y)
    .bind(s.origin.as_str())
    .bind(s.confidence)
    .bind(i64::from(s.lost))
    .execute(&mut **tx)
    .await
    .map_err(classify)?;
    Ok(())
}

/// Sets a manual sample (a correction), replacing whatever was at that frame.
pub async fn put_manual(store: &Store, track_id: &str, s: &SampleRow) -> Result<()> {
    let mut tx = store.pool().begin().await?;
    put_sample(&mut tx, track_id, s).await?;
    tx.commit().await?;
    Ok(())
}

/// Writes tracked samples, in one transaction, never over a manual one (a correction made
/// while the tracker ran wins).
pub async fn put_tracked(store: &Store, track_id: &str, samples: &[SampleRow]) -> Result<()> {
    let mut tx = store.pool().begin().await?;
    for s in samples {
        sqlx::query(
            "INSERT INTO track_samples (track_id, frame, x, y, origin, confidence, lost) \
             VALUES ($1, $2, $3, $4, 'tracked', $5, $6) ON CONFLICT (track_id, frame) DO UPDATE \
             SET x = excluded.x, y = excluded.y, origin = 'tracked', \
             confidence = excluded.confidence, lost = excluded.lost \
             WHERE track_samples.origin = 'tracked'",
        )
        .bind(track_id)
        .bind(s.frame)
        .bind(s.x)
        .bind(s.y)
        .bind(s.confidence)
        .bind(i64::from(s.lost))
        .execute(&mut *tx)
        .await
        .map_err(classify)?;
    }
    tx.commit().await?;
    Ok(())
}

/// A team's track.
pub async fn get(store: &Store, team_id: &str, id: &str) -> Result<Option<TrackRow>> {
    let row = sqlx::query(
        "SELECT id, team_id, demo_id, label, author, created_at FROM tracks \
         WHERE team_id = $1 AND id = $2",
    )
    .bind(team_id)
    .bind(id)
    .fetch_optional(store.pool())
    .await?;
    Ok(row.as_ref().map(track_from))
}

/// The tracks of a demo, oldest first.
pub async fn of_demo(store: &Store, demo_id: &str) -> Result<Vec<TrackRow>> {
    let rows = sqlx::query(
        "SELECT id, team_id, demo_id, label, author, created_at FROM tracks \
         WHERE demo_id = $1 ORDER BY created_at, id",
    )
    .bind(demo_id)
    .fetch_all(store.pool())
    .await?;
    Ok(rows.iter().map(track_from).collect())
}

/// A track's samples by frame.
pub async fn samples(store: &Store, track_id: &str) -> Result<Vec<SampleRow>> {
    let rows = sqlx::query(
        "SELECT frame, x, y, origin, confidence, lost FROM track_samples WHERE track_id = $1 \
         ORDER BY frame",
    )
    .bind(track_id)
    .fetch_all(store.pool())
    .await?;
    rows.iter().map(sample_from).collect()
}
