//! Durable operations: queued, claimed by one worker of one process, with heartbeats.

use super::{Backend, Result, Store, classify, now_ms};
use sqlx::{Row, any::AnyRow};

/// Where an operation is in its life.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum OpState {
    /// Waiting for a worker.
    Queued,
    /// A worker has it.
    Running,
    /// Done, with a result.
    Succeeded,
    /// Done, with an error.
    Failed,
    /// Stopped on request.
    Cancelled,
}

impl OpState {
    /// The stored name.
    pub fn as_str(self) -> &'static str {
        match self {
            OpState::Queued => "queued",
            OpState::Running => "running",
            OpState::Succeeded => "succeeded",
            OpState::Failed => "failed",
            OpState::Cancelled => "cancelled",
        }
    }

    fn column(s: String) -> Result<Self> {
        Ok(match s.as_str() {
            "queued" => OpState::Queued,
            "running" => OpState::Running,
            "succeeded" => OpState::Succeeded,
            "failed" => OpState::Failed,
            "cancelled" => OpState::Cancelled,
            _ => return Err(super::StoreError::Corrupt(format!("operation state {s:?}"))),
        })
    }

    /// Whether the operation has ended (succeeded, failed or cancelled).
    pub fn is_done(self) -> bool {
        matches!(
            self,
            OpState::Succeeded | OpState::Failed | OpState::Cancelled
        )
    }
}

/// A stored operation.
#[derive(Debug, Clone)]
pub struct OperationRow {
    /// Operation id.
    pub id: String,
    /// Its team.
    pub team_id: String,
    /// What kind of work (`track`, …).
    pub kind: String,
    /// Where it is.
    pub state: OpState,
    /// What to do, JSON.
    pub input: String,
    /// 0..1.
    pub progress: f64,
    /// The result, JSON, once succeeded.
    pub result: Option<String>,
    /// Why it failed.
    pub error: Option<String>,
    /// Times it was claimed.
    pub attempts: i64,
    /// Whether someone asked to cancel it.
    pub cancel_requested: bool,
    /// Created, unix ms.
    pub created_at: i64,
    /// What the work says about itself beyond its progress, JSON (see migration 0010).
    pub detail: Option<String>,
}

const COLUMNS: &str = "id, team_id, kind, state, input, progress, result, error, attempts, \
                       cancel_requested, created_at, detail";

fn from_row(r: &AnyRow) -> Result<OperationRow> {
    Ok(OperationRow {
        id: r.get(0),
        team_id: r.get(1),
        kind: r.get(2),
        state: OpState::column(r.get(3))?,
        input: r.get(4),
        progress: r.get(5),
        result: r.get(6),
        error: r.get(7),
        attempts: r.get(8),
        cancel_requested: r.get::<i64, _>(9) != 0,
        created_at: r.get(10),
        detail: r.get(11),
    })
}

/// Queues an operation; returns its id.
pub async fn create(store: &Store, team_id: &str, kind: &str, input: &str) -> Result<String> {
    let id = uuid::Uuid::new_v4().to_string();
    let mut conn = store.pool().acquire().await?;
    insert_queued(&mut conn, &id, team_id, kind, input).await?;
    Ok(id)
}

/// Writes a queued operation on `conn`, which may be inside another record's transaction, so
/// the operation and what it works on are stored together or not at all.
pub(super) async fn insert_queued(
    conn: &mut sqlx::AnyConnection,
    id: &str,
    team_id: &str,
    kind: &str,
    input: &str,
) -> Result<()> {
    sqlx::query(
        "INSERT INTO operations (id, team_id, kind, state, input, progress, attempts, \
         cancel_requested, created_at) VALUES ($1, $2, $3, 'queued', $4, 0, 0, 0, $5)",
    )
    .bind(id)
    .bind(team_id)
    .bind(kind)
    .bind(input)
    .bind(now_ms())
    .execute(&mut *conn)
    .await
    .map_err(classify)?;
    Ok(())
}

/// A team's operation.
pub async fn get(store: &Store, team_id: &str, id: &str) -> Result<Option<OperationRow>> {
    let sql = format!("SELECT {COLUMNS} FROM operations WHERE team_id = $1 AND id = $2");
    let row = sqlx::query(sqlx::AssertSqlSafe(sql))
        .bind(team_id)
        .bind(id)
        .fetch_optional(store.pool())
        .await?;
    row.as_ref().map(from_row).transpose()
}

/// A team's operations of `kind` that have not ended (queued or running), oldest first.
pub async fn unfinished(store: &Store, team_id: &str, kind: &str) -> Result<Vec<OperationRow>> {
    let sql = format!(
        "SELECT {COLUMNS} FROM operations WHERE team_id = $1 AND kind = $2 \
         AND state IN ('queued', 'running') ORDER BY created_at, id"
    );
    let rows = sqlx::query(sqlx::AssertSqlSafe(sql))
        .bind(team_id)
        .bind(kind)
        .fetch_all(store.pool())
        .await?;
    rows.iter().map(from_row).collect()
}

/// Claims the oldest queued operation for `worker`, if any. On PostgreSQL the row is locked
/// with `FOR UPDATE SKIP LOCKED`, so workers of several processes never claim the same one; on
/// SQLite the one statement runs under the database's single writer.
pub async fn claim(store: &Store, worker: &str) -> Result<Option<OperationRow>> {
    let lock = match store.backend() {
        Backend::Postgres => " FOR UPDATE SKIP LOCKED",
        Backend::Sqlite => "",
    };
    let now = now_ms();
    let sql = format!(
        "UPDATE operations SET state = 'running', worker = $1, heartbeat_at = $2, \
         started_at = COALESCE(started_at, $2), attempts = attempts + 1 \
         WHERE id = (SELECT id FROM operations WHERE state = 'queued' \
                     ORDER BY created_at, id LIMIT 1{lock}) \
         AND state = 'queued' RETURNING {COLUMNS}"
    );
    // Run to its end (see `heartbeat`): at most one row.
    let rows = sqlx::query(sqlx::AssertSqlSafe(sql))
        .bind(worker)
        .bind(now)
        .fetch_all(store.pool())
        .await
        .map_err(classify)?;
    rows.first().map(from_row).transpose()
}

/// Records progress and that `worker` is alive; returns whether a cancel was asked for, or
/// `None` when the operation is no longer this worker's (it was given up as stale).
pub async fn heartbeat(
    store: &Store,
    id: &str,
    worker: &str,
    progress: f64,
    detail: Option<&str>,
) -> Result<Option<bool>> {
    // Two statements rather than a NULL parameter: the Any driver's NULLs carry a type of
    // their own (see DEVELOPERS.md), and a heartbeat without news leaves the detail as it was.
    let query = match detail {
        Some(d) => sqlx::query(
            "UPDATE operations SET heartbeat_at = $1, progress = $2, detail = $5 \
             WHERE id = $3 AND worker = $4 AND state = 'running' RETURNING cancel_requested",
        )
        .bind(now_ms())
        .bind(progress)
        .bind(id)
        .bind(worker)
        .bind(d.to_string()),
        None => sqlx::query(
            "UPDATE operations SET heartbeat_at = $1, progress = $2 \
             WHERE id = $3 AND worker = $4 AND state = 'running' RETURNING cancel_requested",
        )
        .bind(now_ms())
        .bind(progress)
        .bind(id)
        .bind(worker),
    };
    // `fetch_all`: SQLite commits an UPDATE … RETURNING only when the statement has run to its
    // end, so it is always stepped to the end here rather than left to the driver after the
    // first row (the test below checks no write lock is left behind).
    let rows = query.fetch_all(store.pool()).await.map_err(classify)?;
    Ok(rows.first().map(|r| r.get::<i64, _>(0) != 0))
}

/// Ends an operation `worker` holds: `Succeeded` with a result, `Failed` with an error, or
/// `Cancelled`. Returns false when it was not this worker's any more.
pub async fn finish(
    store: &Store,
    id: &str,
    worker: &str,
    state: OpState,
    result: Option<&str>,
    error: Option<&str>,
) -> Result<bool> {
    let progress = if state == OpState::Succeeded {
        1.0
    } else {
        -1.0
    };
    let n = sqlx::query(
        "UPDATE operations SET state = $1, result = $2, error = $3, finished_at = $4, \
         progress = CASE WHEN $5 >= 0 THEN $5 ELSE progress END \
         WHERE id = $6 AND worker = $7 AND state = 'running'",
    )
    .bind(state.as_str())
    .bind(result)
    .bind(error)
    .bind(now_ms())
    .bind(progress)
    .bind(id)
    .bind(worker)
    .execute(store.pool())
    .await
    .map_err(classify)?
    .rows_affected();
    Ok(n == 1)
}

/// Asks for an operation to stop: a queued one is cancelled at once, a running one when its
/// worker next sends a heartbeat. Returns false when there is no such operation of the team.
pub async fn request_cancel(store: &Store, team_id: &str, id: &str) -> Result<bool> {
    let now = now_ms();
    let n = sqlx::query(
        "UPDATE operations SET state = 'cancelled', finished_at = $1, cancel_requested = 1 \
         WHERE team_id = $2 AND id = $3 AND state = 'queued'",
    )
    .bind(now)
    .bind(team_id)
    .bind(id)
    .execute(store.pool())
    .await
    .map_err(classify)?
    .rows_affected();
    if n == 1 {
        return Ok(true);
    }
    let n =
        sqlx::query("UPDATE operations SET cancel_requested = 1 WHERE team_id = $1 AND id = $2")
            .bind(team_id)
            .bind(id)
            .execute(store.pool())
            .await
            .map_err(classify)?
            .rows_affected();
    Ok(n == 1)
}

/// Gives up operations whose worker stopped sending heartbeats before `stale_before` (unix
/// ms): each is queued again while it has had fewer than `max_attempts` claims, else failed
/// with a reason. Returns how many were queued again and how many failed.
pub async fn recover_stale(
    store: &Store,
    stale_before: i64,
    max_attempts: i64,
) -> Result<(u64, u64)> {
    let requeued = sqlx::query(
        "UPDATE operations SET state = 'queued', worker = NULL \
         WHERE state = 'running' AND heartbeat_at < $1 AND attempts < $2 \
         AND cancel_requested = 0",
    )
    .bind(stale_before)
    .bind(max_attempts)
    .execute(store.pool())
    .await
    .map_err(classify)?
    .rows_affected();
    let failed = sqlx::query(
        "UPDATE operations SET state = CASE WHEN cancel_requested = 1 THEN 'cancelled' \
         ELSE 'failed' END, \
         error = CASE WHEN cancel_requested = 1 THEN NULL ELSE $1 END, finished_at = $2 \
         WHERE state = 'running' AND heartbeat_at < $3",
    )
    .bind(format!(
        "the server running it stopped, {max_attempts} times; the input may be too large \
         for this server"
    ))
    .bind(now_ms())
    .bind(stale_before)
    .execute(store.pool())
    .await
    .map_err(classify)?
    .rows_affected();
    Ok((requeued, failed))
}

/// How many operations there are of each kind in each state, for `/metrics`.
pub async fn counts(store: &Store) -> Result<Vec<(String, String, i64)>> {
    let rows = sqlx::query(
        "SELECT kind, state, COUNT(*) AS n FROM operations GROUP BY kind, state ORDER BY kind, state",
    )
    .fetch_all(store.pool())
    .await?;
    rows.iter()
        .map(|r| Ok((r.try_get("kind")?, r.try_get("state")?, r.try_get("n")?)))
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A claim and a heartbeat leave no write lock behind: writes from the pool's other
    /// connections go straight through (with a held lock they would wait out the busy timeout
    /// and fail with `database is locked`).
    #[tokio::test]
    async fn claims_and_heartbeats_release_the_write_lock() {
        let dir = tempfile::tempdir().expect("temp dir");
        let url = format!("sqlite://{}?mode=rwc", dir.path().join("t.db").display());
        let store = Store::connect(&url).await.expect("store");
        let team = super::super::teams::get_or_create_team(&store, "bench")
            .await
            .expect("team");
        for round in 0..4 {
            let id = create(&store, &team.id, "track", "{}")
                .await
                .expect("create");
            let claimed = claim(&store, "w1")
                .await
                .expect("claim")
                .expect("one queued");
            assert_eq!(claimed.id, id);
            assert_eq!(
                heartbeat(&store, &id, "w1", 0.5, Some("{}"))
                    .await
                    .expect("beat"),
                Some(false)
            );
            // Writes on other connections, held at once so the pool must use several.
            let mut conns = Vec::new();
            for _ in 0..4 {
                conns.push(store.pool().acquire().await.expect("connection"));
            }
            for conn in &mut conns {
                sqlx::query("PRAGMA busy_timeout = 200")
                    .execute(&mut **conn)
                    .await
                    .expect("pragma");
                sqlx::query("UPDATE teams SET name = name WHERE id = $1")
                    .bind(&team.id)
                    .execute(&mut **conn)
                    .await
                    .unwrap_or_else(|e| panic!("round {round}: a write was locked out: {e}"));
                sqlx::query("PRAGMA busy_timeout = 10000")
                    .execute(&mut **conn)
                    .await
                    .expect("pragma");
            }
        }
    }
}
