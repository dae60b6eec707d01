//! Persistence through sqlx's Any driver, so one code path serves SQLite and PostgreSQL.
//!
//! This is the only module that writes SQL. Functions are small, per aggregate, and take an
//! executor or a transaction; they store and load, and compute nothing.

pub mod accounts;
pub mod audit;
pub mod backup;
pub mod cameras;
pub mod copy;
pub mod demos;
pub mod frames;
pub mod goal_sets;
pub mod goals;
pub mod operations;
pub mod outcomes;
pub mod reward_fits;
pub mod secrets;
pub mod teams;
pub mod tracks;

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

/// A storage failure, in the store's own words: nothing above the store sees sqlx.
#[derive(Debug, thiserror::Error)]
pub enum StoreError {
    /// A unique key refused the write (a name or hash that is already taken); the constraint
    /// or column named by the database.
    #[error("{0} is already taken")]
    Unique(String),
    /// A foreign key refused the write: the row refers to something that does not exist.
    #[error("a referenced row does not exist ({0})")]
    MissingReference(String),
    /// Another constraint (a check) refused the write.
    #[error("constraint {0} refused the write")]
    Check(String),
    /// The database cannot be reached or the pool is exhausted or closed.
    #[error("the database is unavailable: {0}")]
    Unavailable(String),
    /// The URL or settings are unusable.
    #[error("database configuration: {0}")]
    Config(String),
    /// Anything else the database said.
    #[error("database error: {0}")]
    Database(String),
    /// A row that should parse did not (corruption or a bug).
    #[error("stored data is unreadable: {0}")]
    Corrupt(String),
}

/// Shorthand for store results.
pub type Result<T, E = StoreError> = std::result::Result<T, E>;

impl From<sqlx::Error> for StoreError {
    fn from(e: sqlx::Error) -> Self {
        classify(e)
    }
}

impl From<sqlx::migrate::MigrateError> for StoreError {
    fn from(e: sqlx::migrate::MigrateError) -> Self {
        StoreError::Database(format!("migration: {e}"))
    }
}

/// Sorts a driver error into a [`StoreError`], so callers can map constraint violations to
/// fields and an unreachable database to 503.
pub(crate) fn classify(e: sqlx::Error) -> StoreError {
    match &e {
        sqlx::Error::Database(db) => {
            let name = db
                .constraint()
                .map(str::to_string)
                .unwrap_or_else(|| db.message().to_string());
            let lower = name.to_ascii_lowercase();
            if db.is_unique_violation() {
                StoreError::Unique(name)
            } else if db.is_foreign_key_violation()
                || lower.contains("fkey")
                || lower.contains("foreign")
            {
                StoreError::MissingReference(name)
            } else if db.is_check_violation() {
                StoreError::Check(name)
            } else {
                StoreError::Database(e.to_string())
            }
        }
        sqlx::Error::PoolTimedOut | sqlx::Error::PoolClosed | sqlx::Error::Io(_) => {
            StoreError::Unavailable(e.to_string())
        }
        sqlx::Error::Configuration(m) => StoreError::Config(m.to_string()),
        _ => StoreError::Database(e.to_string()),
    }
}

/// A member's or a token's role in a team, ordered by what it may do. Stored by name.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum Role {
    /// Reads everything of the team.
    Viewer,
    /// Also writes cameras, frames, goals and outcomes.
    Editor,
    /// Also manages members and tokens.
    Owner,
}

impl std::fmt::Display for Role {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.as_str())
    }
}

impl Default for Role {
    /// The least a role may do.
    fn default() -> Self {
        Role::Viewer
    }
}

impl Role {
    /// Parses `viewer`, `editor` or `owner`.
    pub fn parse(s: &str) -> Option<Self> {
        match s {
            "viewer" => Some(Role::Viewer),
            "editor" => Some(Role::Editor),
            "owner" => Some(Role::Owner),
            _ => None,
        }
    }

    /// The stored name.
    pub fn as_str(&self) -> &'static str {
        match self {
            Role::Viewer => "viewer",
            Role::Editor => "editor",
            Role::Owner => "owner",
        }
    }

    /// Reads a stored role column; anything else is corrupt data.
    pub(crate) fn column(s: String) -> Result<Self> {
        Role::parse(&s).ok_or_else(|| StoreError::Corrupt(format!("unknown role {s:?}")))
    }
}

/// Connections of the pool, for `/metrics`.
#[derive(Debug, Clone, Copy)]
pub struct PoolUse {
    /// Lent out to a query now.
    pub in_use: u32,
    /// Open and waiting.
    pub idle: u32,
    /// The most the pool opens.
    pub max: u32,
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
        let prepared;
        let url = if url.starts_with("sqlite:") {
            prepared = sqlite_url(url)?;
            prepared.as_str()
        } else {
            url
        };
        let backend = if url.starts_with("sqlite:") {
            Backend::Sqlite
        } else if url.starts_with("postgres:") || url.starts_with("postgresql:") {
            Backend::Postgres
        } else {
            return Err(StoreError::Config(format!(
                "unsupported database URL scheme in {url:?}: use sqlite:// or postgres://"
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
            .map_err(StoreError::from)?;
        Ok(Self { pool, backend })
    }

    /// The connection pool.
    fn pool(&self) -> &AnyPool {
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

    /// How many of this process's connections are in use, idle, and the bound.
    pub fn pool_use(&self) -> PoolUse {
        let size = self.pool.size();
        let idle = u32::try_from(self.pool.num_idle())
            .unwrap_or(u32::MAX)
            .min(size);
        PoolUse {
            in_use: size - idle,
            idle,
            max: self.pool.options().get_max_connections(),
        }
    }

    /// Closes the pool, waiting for connections to be returned.
    pub async fn close(&self) {
        self.pool.close().await;
    }
}

/// Turns every SQLite URL form a person types into one the driver opens and creates:
/// `sqlite://PATH` and `sqlite:PATH`, with PATH relative (to the working directory) or absolute
/// (`sqlite:///srv/goalsmith.db`). The driver alone opens only existing files unless the URL
/// carries `mode=rwc`, and reads `sqlite://dir/x.db` with `dir` as a URL host, so the path is
/// made absolute, percent-encoded, given `mode=rwc` unless the caller chose a mode, and its
/// folder is created. `sqlite::memory:` is kept as it is.
pub fn sqlite_url(url: &str) -> Result<String> {
    let rest = url
        .strip_prefix("sqlite://")
        .or_else(|| url.strip_prefix("sqlite:"))
        .unwrap_or(url);
    let (path, query) = match rest.split_once('?') {
        Some((p, q)) => (p, q),
        None => (rest, ""),
    };
    if path.is_empty() || path == ":memory:" {
        return Ok(url.to_string());
    }
    let config = StoreError::Config;
    let decoded = percent_encoding::percent_decode_str(path)
        .decode_utf8()
        .map_err(|e| config(format!("the database path in {url:?} is not UTF-8: {e}")))?;
    let mut file = std::path::PathBuf::from(decoded.as_ref());
    if file.is_relative() {
        let cwd = std::env::current_dir()
            .map_err(|e| config(format!("cannot resolve the relative path {path:?}: {e}")))?;
        file = cwd.join(file);
    }
    if let Some(dir) = file.parent()
        && !dir.as_os_str().is_empty()
    {
        std::fs::create_dir_all(dir).map_err(|e| {
            config(format!(
                "cannot create the folder {} for the database: {e}",
                dir.display()
            ))
        })?;
    }
    let file = file
        .to_str()
        .ok_or_else(|| config(format!("the database path {} is not UTF-8", file.display())))?;
    // Only the characters the driver's URL reading would take for syntax are encoded.
    const SYNTAX: &percent_encoding::AsciiSet = &percent_encoding::CONTROLS
        .add(b' ')
        .add(b'%')
        .add(b'?')
        .add(b'#');
    let mut out = format!(
        "sqlite://{}",
        percent_encoding::utf8_percent_encode(file, SYNTAX)
    );
    let has_mode = query
        .split('&')
        .any(|kv| kv.split('=').next() == Some("mode"));
    let mut params: Vec<&str> = query.split('&').filter(|kv| !kv.is_empty()).collect();
    if !has_mode {
        params.insert(0, "mode=rwc");
    }
    if !params.is_empty() {
        out.push('?');
        out.push_str(&params.join("&"));
    }
    Ok(out)
}

/// Milliseconds since the Unix epoch, the storage form of every time.
pub fn now_ms() -> i64 {
    let now = std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .unwrap_or_default();
    i64::try_from(now.as_millis()).unwrap_or(i64::MAX)
}

#[cfg(test)]
mod tests {
    use super::sqlite_url;

    #[test]
    fn sqlite_urls_become_absolute_and_creating() {
        let cwd = std::env::current_dir().expect("cwd");
        let tmp = std::env::temp_dir().join("gs url test");
        let abs = tmp.join("a.db");
        let abs_s = abs.to_str().expect("utf8");
        let enc = abs_s.replace(' ', "%20");
        assert_eq!(
            sqlite_url(&format!("sqlite://{abs_s}")).expect("abs"),
            format!("sqlite://{enc}?mode=rwc")
        );
        assert_eq!(
            sqlite_url(&format!("sqlite:{abs_s}?mode=ro")).expect("abs, own mode"),
            format!("sqlite://{enc}?mode=ro")
        );
        let rel = sqlite_url("sqlite://target/gs-url-test/x.db").expect("relative");
        let want = cwd.join("target/gs-url-test/x.db");
        assert_eq!(
            rel,
            format!("sqlite://{}?mode=rwc", want.display()).replace(' ', "%20")
        );
        assert!(want.parent().is_some_and(|d| d.is_dir()), "folder created");
        assert_eq!(
            sqlite_url("sqlite:target/gs-url-test/y.db?busy_timeout=5").expect("bare form"),
            format!(
                "sqlite://{}?mode=rwc&busy_timeout=5",
                cwd.join("target/gs-url-test/y.db").display()
            )
            .replace(' ', "%20")
        );
        assert_eq!(
            sqlite_url("sqlite::memory:").expect("memory"),
            "sqlite::memory:"
        );
        std::fs::remove_dir_all(&tmp).ok();
    }
}
