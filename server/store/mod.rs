//! Persistence through sqlx's Any driver, so one code path serves SQLite and PostgreSQL.
//!
//! This is the only module that writes SQL. Functions are small, per aggregate, and take an
//! executor or a transaction; they store and load, and compute nothing.

pub mod accounts;
pub mod cameras;
pub mod frames;
pub mod goal_sets;
pub mod goals;
pub mod outcomes;
pub mod teams;

use sqlx::any::{AnyPoolOptions, install_default_drivers};
use sqlx::{AnyPool, Executor};
use std::time::Duration;

/// Which database sits behind the pool.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Backend {
    /// Embedded SQLite file.
    Sqlite,
    /// PostgreSQL server.
    Postgres,
}

/// A storage failure.
#[derive(Debug, thiserror::Error)]
pub enum StoreError {
    /// A named constraint refused the write (unique keys, foreign keys, checks).
    #[error("constraint {0} refused the write")]
    Constraint(String),
    /// Anything else the database said.
    #[error(transparent)]
    Database(#[from] sqlx::Error),
    /// A row that should parse did not (corruption or a bug).
    #[error("stored data is unreadable: {0}")]
    Corrupt(String),
}

/// Shorthand for store results.
pub type Result<T, E = StoreError> = std::result::Result<T, E>;

/// Turns constraint violations into [`StoreError::Constraint`] so callers can map them to fields.
pub(crate) fn classify(e: sqlx::Error) -> StoreError {
    if let sqlx::Error::Database(db) = &e {
        if let Some(c) = db.constraint() {
            return StoreError::Constraint(c.to_string());
        }
        // SQLite reports "UNIQUE constraint failed: table.col" without a constraint name.
        if db.is_unique_violation() {
            return StoreError::Constraint(format!("unique: {}", db.message()));
        }
    }
    StoreError::Database(e)
}

/// The pool and what it talks to.
#[derive(Clone, Debug)]
pub struct Store {
    pool: AnyPool,
    backend: Backend,
}

impl Store {
    /// Connects, applies the SQLite pragmas on every connection, and runs the migrations.
    pub async fn connect(url: &str) -> Result<Self> {
        install_default_drivers();
        let backend = if url.starts_with("sqlite:") {
            Backend::Sqlite
        } else if url.starts_with("postgres:") || url.starts_with("postgresql:") {
            Backend::Postgres
        } else {
            return Err(StoreError::Database(sqlx::Error::Configuration(
                format!("unsupported database URL scheme in {url:?}: use sqlite:// or postgres://")
                    .into(),
            )));
        };
        let mut options = AnyPoolOptions::new()
            .max_connections(if backend == Backend::Sqlite { 8 } else { 16 })
            .acquire_timeout(Duration::from_secs(10));
        if backend == Backend::Sqlite {
            options = options.after_connect(|conn, _meta| {
                Box::pin(async move {
                    // WAL lets readers run beside the single writer; FULL syncs every commit so an
                    // acknowledged revision survives power loss; foreign keys are off by default.
                    conn.execute("PRAGMA journal_mode = WAL").await?;
                    conn.execute("PRAGMA synchronous = FULL").await?;
                    conn.execute("PRAGMA foreign_keys = ON").await?;
                    conn.execute("PRAGMA busy_timeout = 10000").await?;
                    Ok(())
                })
            });
        }
        let pool = options.connect(url).await?;
        sqlx::migrate!("./migrations")
            .run(&pool)
            .await
            .map_err(|e| StoreError::Database(e.into()))?;
        Ok(Self { pool, backend })
    }

    /// The connection pool.
    pub fn pool(&self) -> &AnyPool {
        &self.pool
    }

    /// Which database this is.
    pub fn backend(&self) -> Backend {
        self.backend
    }

    /// A cheap round trip, for health checks.
    pub async fn ping(&self) -> Result<()> {
        sqlx::query("SELECT 1").execute(&self.pool).await?;
        Ok(())
    }

    /// Closes the pool, waiting for connections to be returned.
    pub async fn close(&self) {
        self.pool.close().await;
    }
}

/// Milliseconds since the Unix epoch, the storage form of every time.
pub fn now_ms() -> i64 {
    let now = std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .unwrap_or_default();
    i64::try_from(now.as_millis()).unwrap_or(i64::MAX)
}
