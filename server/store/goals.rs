//! Goals and their immutable revisions.
//!
//! A new revision is a compare-and-set on `goals.latest_revision` followed by an insert, in one
//! transaction: of any number of writers holding the same `If-Match`, exactly one wins.

use super::{Result, Store, classify};
use sqlx::{Row, any::AnyRow};

/// One revision as stored: the served document bytes plus indexed metadata.
#[derive(Debug, Clone)]
pub struct RevisionRow {
    /// Goal id.
    pub goal_id: String,
    /// Revision number, from 1.
    pub revision: i64,
    /// Frame the revision is drawn on.
    pub frame_id: String,
    /// Goal name at this revision.
    pub name: String,
    /// SHA-256 of the canonical goal specification.
    pub sha256: String,
    /// Who made it.
    pub author: String,
    /// Why it was made.
    pub note: String,
    /// Whether a safety override was given.
    pub override_safety: bool,
    /// The exact JSON document served for this revision.
    pub document: String,
    /// Creation time (unix ms).
    pub created_at: i64,
}

/// A goal with its latest revision's metadata, for lists.
#[derive(Debug, Clone)]
pub struct GoalSummary {
    /// Goal id.
    pub id: String,
    /// Latest name.
    pub name: String,
    /// Frame of the latest revision.
    pub frame_id: String,
    /// Latest revision number.
    pub revision: i64,
    /// Author of the latest revision.
    pub author: String,
    /// SHA-256 of the latest specification.
    pub sha256: String,
    /// First revision time (unix ms).
    pub created_at: i64,
    /// Latest revision time (unix ms).
    pub updated_at: i64,
}

fn revision_from_row(r: &AnyRow) -> RevisionRow {
    RevisionRow {
        goal_id: r.get(0),
        revision: r.get(1),
        frame_id: r.get(2),
        name: r.get(3),
        sha256: r.get(4),
        author: r.get(5),
        note: r.get(6),
        override_safety: r.get::<i64, _>(7) != 0,
        document: r.get(8),
        created_at: r.get(9),
    }
}

async fn insert_revision<'c, E>(exec: E, rev: &RevisionRow) -> Result<()>
where
    E: sqlx::Executor<'c, Database = sqlx::Any>,
{
    sqlx::query(
        "INSERT INTO goal_revisions (goal_id, revision, frame_id, name, sha256, author, note, \
         override_safety, document, created_at) VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10)",
    )
    .bind(&rev.goal_id)
    .bind(rev.revision)
    .bind(&rev.frame_id)
    .bind(&rev.name)
    .bind(&rev.sha256)
    .bind(&rev.author)
    .bind(&rev.note)
    .bind(i64::from(rev.override_safety))
    .bind(&rev.document)
    .bind(rev.created_at)
    .execute(exec)
    .await
    .map_err(classify)?;
    Ok(())
}

/// Creates a goal whose first revision is `rev` (which must have revision 1).
pub async fn create(store: &Store, team_id: &str, rev: &RevisionRow) -> Result<()> {
    let mut tx = store.pool().begin().await?;
    sqlx::query(
        "INSERT INTO goals (id, team_id, frame_id, name, latest_revision, created_at, updated_at) \
         VALUES ($1, $2, $3, $4, $5, $6, $6)",
    )
    .bind(&rev.goal_id)
    .bind(team_id)
    .bind(&rev.frame_id)
    .bind(&rev.name)
    .bind(rev.revision)
    .bind(rev.created_at)
    .execute(&mut *tx)
    .await
    .map_err(classify)?;
    insert_revision(&mut *tx, rev).await?;
    tx.commit().await?;
    Ok(())
}

/// Appends `rev` (revision = expected_latest + 1) if the goal's latest revision is still
/// `expected_latest`. Returns false, having written nothing, when someone else got there first.
pub async fn append(
    store: &Store,
    team_id: &str,
    expected_latest: i64,
    rev: &RevisionRow,
) -> Result<bool> {
    let mut tx = store.pool().begin().await?;
    // The UPDATE comes first so SQLite takes its write lock at once (a read-then-write
    // transaction could fail to upgrade instead of waiting).
    let updated = sqlx::query(
        "UPDATE goals SET latest_revision = $1, name = $2, frame_id = $3, updated_at = $4 \
         WHERE id = $5 AND team_id = $6 AND latest_revision = $7",
    )
    .bind(rev.revision)
    .bind(&rev.name)
    .bind(&rev.frame_id)
    .bind(rev.created_at)
    .bind(&rev.goal_id)
    .bind(team_id)
    .bind(expected_latest)
    .execute(&mut *tx)
    .await
    .map_err(classify)?
    .rows_affected();
    if updated != 1 {
        tx.rollback().await?;
        return Ok(false);
    }
    insert_revision(&mut *tx, rev).await?;
    tx.commit().await?;
    Ok(true)
}

/// One revision of a team's goal; `None` revision means the latest.
pub async fn get_revision(
    store: &Store,
    team_id: &str,
    goal_id: &str,
    revision: Option<i64>,
) -> Result<Option<RevisionRow>> {
    let row = match revision {
        Some(n) => {
            sqlx::query(
                "SELECT r.goal_id, r.revision, r.frame_id, r.name, r.sha256, r.author, r.note, \
                 r.override_safety, r.document, r.created_at FROM goal_revisions r \
                 JOIN goals g ON g.id = r.goal_id \
                 WHERE g.team_id = $1 AND r.goal_id = $2 AND r.revision = $3",
            )
            .bind(team_id)
            .bind(goal_id)
            .bind(n)
            .fetch_optional(store.pool())
            .await?
        }
        None => {
            sqlx::query(
                "SELECT r.goal_id, r.revision, r.frame_id, r.name, r.sha256, r.author, r.note, \
                 r.override_safety, r.document, r.created_at FROM goal_revisions r \
                 JOIN goals g ON g.id = r.goal_id AND r.revision = g.latest_revision \
                 WHERE g.team_id = $1 AND r.goal_id = $2",
            )
            .bind(team_id)
            .bind(goal_id)
            .fetch_optional(store.pool())
            .await?
        }
    };
    Ok(row.as_ref().map(revision_from_row))
}

/// Every revision of a goal, oldest first (documents included).
pub async fn list_revisions(
    store: &Store,
    team_id: &str,
    goal_id: &str,
) -> Result<Vec<RevisionRow>> {
    let rows = sqlx::query(
        "SELECT r.goal_id, r.revision, r.frame_id, r.name, r.sha256, r.author, r.note, \
         r.override_safety, r.document, r.created_at FROM goal_revisions r \
         JOIN goals g ON g.id = r.goal_id \
         WHERE g.team_id = $1 AND r.goal_id = $2 ORDER BY r.revision",
    )
    .bind(team_id)
    .bind(goal_id)
    .fetch_all(store.pool())
    .await?;
    Ok(rows.iter().map(revision_from_row).collect())
}

/// A team's goals with their latest revision, most recently changed first.
pub async fn list(store: &Store, team_id: &str) -> Result<Vec<GoalSummary>> {
    let rows = sqlx::query(
        "SELECT g.id, g.name, g.frame_id, g.latest_revision, r.author, r.sha256, g.created_at, \
         g.updated_at FROM goals g \
         JOIN goal_revisions r ON r.goal_id = g.id AND r.revision = g.latest_revision \
         WHERE g.team_id = $1 ORDER BY g.updated_at DESC, g.id",
    )
    .bind(team_id)
    .fetch_all(store.pool())
    .await?;
    Ok(rows
        .iter()
        .map(|r| GoalSummary {
            id: r.get(0),
            name: r.get(1),
            frame_id: r.get(2),
            revision: r.get(3),
            author: r.get(4),
            sha256: r.get(5),
            created_at: r.get(6),
            updated_at: r.get(7),
        })
        .collect())
}
