//! `goalsmith backup` and `goalsmith restore`, for SQLite databases.
//!
//! A backup is `VACUUM INTO` a new file: one consistent snapshot, taken through a read-only
//! connection while the server goes on reading and writing (in WAL mode a reader does not stop
//! writers). It is written under a temporary name in the target folder, checked (`PRAGMA
//! integrity_check`, the migrations table) and only then given its name, never over an existing
//! file. Every revision acknowledged before the backup started is in it.
//!
//! A restore checks the backup the same way (and that its migrations are this binary's or
//! older; a newer one is refused), copies it under a temporary name beside the database,
//! removes the old database's stale `-wal`, `-shm` and `-journal` files and renames the copy
//! into place, so the database is either the old one or the whole backup. It replaces an
//! existing database only with `force`, and never one another process has open (a running
//! server keeps its connections open, which [`super::copy`]'s in-use check sees). A server that
//! starts while the restore runs is not detected: stop the server first.
//!
//! PostgreSQL keeps its own tools: `pg_dump`, `pg_basebackup` and WAL archiving, streaming
//! replication. A SQLite backup goes into PostgreSQL with `goalsmith copy`.

use super::Backend;
use super::copy::{
    Endpoint, MIGRATIONS_TABLE, TABLES, TransferError, check_migrations, connect, db, file_url,
    not_a_database, same_file, sqlite_in_use, table_names,
};
use sha2::{Digest, Sha256};
use sqlx::{Connection, Row};
use std::io::Read;
use std::path::{Path, PathBuf};

type Result<T, E = TransferError> = std::result::Result<T, E>;

/// What a checked SQLite file holds.
#[derive(Debug, Clone)]
pub struct Snapshot {
    /// The file.
    pub path: PathBuf,
    /// Its size.
    pub bytes: u64,
    /// The newest migration applied to it.
    pub migration: i64,
    /// The newest this binary has (the server applies the rest at its next start).
    pub known_migration: i64,
    /// Rows per table, in copy order (tables its migrations have not made yet are left out).
    pub tables: Vec<(String, i64)>,
}

impl std::fmt::Display for Snapshot {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        writeln!(
            f,
            "{}: {} bytes, integrity_check ok, migration {}{}",
            self.path.display(),
            self.bytes,
            self.migration,
            if self.migration < self.known_migration {
                format!(
                    " (this goalsmith's server applies up to {} at its next start)",
                    self.known_migration
                )
            } else {
                String::new()
            }
        )?;
        for (i, (table, rows)) in self.tables.iter().enumerate() {
            if i > 0 {
                writeln!(f)?;
            }
            write!(f, "  {table:<16} {rows:>9} rows")?;
        }
        Ok(())
    }
}

const POSTGRES_BACKUP: &str = "backup takes snapshots of SQLite databases; for PostgreSQL use its \
own tools: pg_dump (for example pg_dump -Fc -f goalsmith.dump URL, restored with pg_restore), or \
pg_basebackup with WAL archiving, or a streaming replica";

const POSTGRES_RESTORE: &str = "restore writes SQLite databases; to load a SQLite backup into \
PostgreSQL run: goalsmith copy --from sqlite://BACKUP --to postgres://…";

/// The SQLite file a URL names; PostgreSQL refused with `postgres`.
fn sqlite_file(url: &str, postgres: &str) -> Result<PathBuf> {
    match Endpoint::parse(url)? {
        Endpoint::Sqlite(p) => Ok(p),
        Endpoint::Postgres(_) => Err(TransferError::Refused(postgres.to_string())),
    }
}

fn io(what: impl std::fmt::Display) -> impl FnOnce(std::io::Error) -> TransferError {
    move |e| TransferError::Io(format!("{what}: {e}"))
}

/// The folder of `path` and a hidden temporary name in it.
fn temporary_beside(path: &Path, purpose: &str) -> Result<(PathBuf, PathBuf)> {
    let name = path
        .file_name()
        .and_then(|n| n.to_str())
        .ok_or_else(|| TransferError::Refused(format!("{} names no file", path.display())))?;
    let dir = match path.parent() {
        Some(d) if !d.as_os_str().is_empty() => d.to_path_buf(),
        _ => PathBuf::from("."),
    };
    if !dir.is_dir() {
        return Err(TransferError::Refused(format!(
            "the folder {} does not exist",
            dir.display()
        )));
    }
    let tmp = dir.join(format!(
        ".{name}.{purpose}-{}",
        uuid::Uuid::new_v4().simple()
    ));
    Ok((dir, tmp))
}

/// Flushes a file, or a folder's entries, to the disk.
fn sync(path: &Path) -> Result<()> {
    std::fs::File::open(path)
        .and_then(|f| f.sync_all())
        .map_err(io(format!("cannot sync {}", path.display())))
}

/// SHA-256 of a file's bytes.
fn file_sha256(path: &Path) -> Result<[u8; 32]> {
    let mut f = std::fs::File::open(path).map_err(io(format!("cannot read {}", path.display())))?;
    let mut h = Sha256::new();
    let mut buf = vec![0u8; 1 << 20];
    loop {
        let n = f
            .read(&mut buf)
            .map_err(io(format!("cannot read {}", path.display())))?;
        if n == 0 {
            break;
        }
        h.update(&buf[..n]);
    }
    Ok(h.finalize().into())
}

/// Whether a file exists and is not empty.
fn non_empty(path: &Path) -> bool {
    std::fs::metadata(path).is_ok_and(|m| m.len() > 0)
}

fn sidecar(path: &Path, suffix: &str) -> PathBuf {
    let mut s = path.as_os_str().to_os_string();
    s.push(suffix);
    PathBuf::from(s)
}

/// Checks a SQLite file read-only: `PRAGMA integrity_check` says ok, it has this binary's
/// migrations or older ones, and how many rows each table has.
pub async fn inspect(path: &Path) -> Result<Snapshot> {
    let what = format!("{}", path.display());
    if !path.is_file() {
        return Err(TransferError::Refused(format!("there is no file {what}")));
    }
    let mut conn = connect(&file_url(path, "ro")?, Backend::Sqlite, &what)
        .await
        .map_err(|e| match e {
            TransferError::Database { .. } => TransferError::Refused(format!(
                "{what} cannot be opened as an SQLite database ({e})"
            )),
            other => other,
        })?;
    let result = inspect_open(&mut conn, path).await;
    conn.close().await.ok();
    result
}

async fn inspect_open(conn: &mut sqlx::AnyConnection, path: &Path) -> Result<Snapshot> {
    let what = format!("{}", path.display());
    let rows = sqlx::query("PRAGMA integrity_check")
        .fetch_all(&mut *conn)
        .await
        .map_err(|e| not_a_database(path, e))?;
    let said: Vec<String> = rows
        .iter()
        .filter_map(|r| r.try_get::<String, _>(0).ok())
        .collect();
    if said != ["ok"] {
        return Err(TransferError::Refused(format!(
            "{what} fails PRAGMA integrity_check: {}",
            said.iter().take(5).cloned().collect::<Vec<_>>().join("; ")
        )));
    }
    let state = check_migrations(conn, Backend::Sqlite, &what).await?;
    let names = table_names(&mut *conn, Backend::Sqlite).await?;
    if !names.contains("teams") {
        return Err(TransferError::Refused(format!(
            "{what} is not a goalsmith database: it has a {MIGRATIONS_TABLE} table but no teams"
        )));
    }
    let mut tables = Vec::new();
    for t in TABLES.iter().filter(|t| names.contains(t.name)) {
        let row = sqlx::query(sqlx::AssertSqlSafe(format!(
            "SELECT count(*) FROM {}",
            t.name
        )))
        .fetch_one(&mut *conn)
        .await
        .map_err(db(format!("cannot count the rows of {} in {what}", t.name)))?;
        let n: i64 = row
            .try_get(0)
            .map_err(db(format!("cannot count the rows of {} in {what}", t.name)))?;
        tables.push((t.name.to_string(), n));
    }
    let bytes = std::fs::metadata(path)
        .map_err(io(format!("cannot read {what}")))?
        .len();
    Ok(Snapshot {
        path: path.to_path_buf(),
        bytes,
        migration: state.applied,
        known_migration: state.known,
        tables,
    })
}

/// Writes a consistent snapshot of the SQLite database at `database_url` to `out`, which must
/// not exist; returns what the checked backup holds.
pub async fn backup(database_url: &str, out: &Path) -> Result<Snapshot> {
    let db_path = sqlite_file(database_url, POSTGRES_BACKUP)?;
    if !db_path.is_file() {
        return Err(TransferError::Refused(format!(
            "there is no SQLite database at {}",
            db_path.display()
        )));
    }
    if std::fs::symlink_metadata(out).is_ok() {
        return Err(TransferError::Refused(format!(
            "{} already exists; backup never overwrites a file: choose a new name",
            out.display()
        )));
    }
    let (dir, tmp) = temporary_beside(out, "partial")?;
    let result = write_backup(&db_path, &tmp, out, &dir).await;
    if tmp.exists() {
        std::fs::remove_file(&tmp).ok();
    }
    result
}

async fn write_backup(db_path: &Path, tmp: &Path, out: &Path, dir: &Path) -> Result<Snapshot> {
    let what = format!("{}", db_path.display());
    let mut conn = connect(&file_url(db_path, "ro")?, Backend::Sqlite, &what).await?;
    let tmp_name = tmp.to_str().ok_or_else(|| {
        TransferError::Refused(format!("the path {} is not UTF-8", tmp.display()))
    })?;
    let vacuum = sqlx::query("VACUUM INTO $1")
        .bind(tmp_name)
        .execute(&mut conn)
        .await
        .map_err(|e| not_a_database(db_path, e));
    conn.close().await.ok();
    vacuum?;
    sync(tmp)?;
    let mut snapshot = inspect(tmp).await?;
    // Named only now, never over a file that appeared meanwhile: a hard link fails if the name
    // is taken (a rename would replace it).
    match std::fs::hard_link(tmp, out) {
        Ok(()) => {}
        Err(e) if e.kind() == std::io::ErrorKind::AlreadyExists => {
            return Err(TransferError::Refused(format!(
                "{} appeared while the backup was written; it was not overwritten",
                out.display()
            )));
        }
        Err(_) if std::fs::symlink_metadata(out).is_err() => {
            // A file system without hard links.
            std::fs::rename(tmp, out).map_err(io(format!("cannot name {}", out.display())))?;
        }
        Err(e) => return Err(io(format!("cannot name {}", out.display()))(e)),
    }
    sync(dir)?;
    snapshot.path = out.to_path_buf();
    Ok(snapshot)
}

/// Puts the backup `from` in place as the SQLite database at `database_url` (see the module
/// docs); returns what the restored database holds.
pub async fn restore(from: &Path, database_url: &str, force: bool) -> Result<Snapshot> {
    let db_path = sqlite_file(database_url, POSTGRES_RESTORE)?;
    if !from.is_file() {
        return Err(TransferError::Refused(format!(
            "there is no backup file {}",
            from.display()
        )));
    }
    if non_empty(&sidecar(from, "-wal")) {
        return Err(TransferError::Refused(format!(
            "{} has a write-ahead log beside it: it is a live database, not a backup; make one \
             with goalsmith backup",
            from.display()
        )));
    }
    if same_file(from, &db_path) {
        return Err(TransferError::Refused(format!(
            "{} is the database itself",
            from.display()
        )));
    }
    inspect(from).await?;
    if db_path.exists() {
        if !force {
            return Err(TransferError::Refused(format!(
                "{} already holds a database; restore replaces one only with --force, and only \
                 while no server uses it",
                db_path.display()
            )));
        }
        if sqlite_in_use(&db_path).await? {
            return Err(TransferError::Refused(format!(
                "{} is open in another process (a running server?): stop it first",
                db_path.display()
            )));
        }
    }
    let (dir, tmp) = temporary_beside(&db_path, "restore")?;
    let result = put_in_place(from, &tmp, &db_path, &dir).await;
    if tmp.exists() {
        std::fs::remove_file(&tmp).ok();
    }
    result?;
    inspect(&db_path).await
}

async fn put_in_place(from: &Path, tmp: &Path, db_path: &Path, dir: &Path) -> Result<()> {
    std::fs::copy(from, tmp).map_err(io(format!(
        "cannot copy {} to {}",
        from.display(),
        tmp.display()
    )))?;
    sync(tmp)?;
    if file_sha256(tmp)? != file_sha256(from)? {
        return Err(TransferError::Io(format!(
            "the copy of {} at {} does not read back the same",
            from.display(),
            tmp.display()
        )));
    }
    // The old database's logs must go before the new file takes its name: SQLite would apply
    // them to it.
    for suffix in ["-wal", "-shm", "-journal"] {
        let p = sidecar(db_path, suffix);
        if std::fs::symlink_metadata(&p).is_ok() {
            std::fs::remove_file(&p).map_err(io(format!("cannot remove {}", p.display())))?;
        }
    }
    std::fs::rename(tmp, db_path).map_err(io(format!(
        "cannot move {} to {}",
        tmp.display(),
        db_path.display()
    )))?;
    sync(dir)
}
