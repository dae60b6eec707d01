//! People, memberships, browser sessions, invites, and the owner's view of API tokens.
//!
//! Secrets (session cookies, invite links) are stored as SHA-256 only; passwords as argon2id PHC
//! strings made by the caller. Nothing here hashes or checks: it stores and loads.

use super::{Result, Role, Store, StoreError, classify, now_ms};
use sqlx::Row;

/// A person who can sign in.
#[derive(Debug, Clone)]
pub struct PersonRow {
    /// Person id.
    pub id: String,
    /// Unique login name.
    pub login: String,
    /// Shown to others and recorded as the author of revisions.
    pub display_name: String,
    /// argon2id PHC string.
    pub password_hash: String,
}

/// A member of a team.
#[derive(Debug, Clone)]
pub struct MemberRow {
    /// Person id.
    pub person_id: String,
    /// Login name.
    pub login: String,
    /// Display name.
    pub display_name: String,
    /// `viewer`, `editor` or `owner`.
    pub role: Role,
    /// When they joined (unix ms).
    pub joined_at: i64,
}

/// A team a person belongs to.
#[derive(Debug, Clone)]
pub struct TeamMembership {
    /// Team id.
    pub team_id: String,
    /// Team name.
    pub team_name: String,
    /// Role in that team.
    pub role: Role,
}

/// A live session with the person and the membership it acts through, looked up on every
/// request so a changed role or a removal takes effect at once.
#[derive(Debug, Clone)]
pub struct SessionInfo {
    /// Session id (not the cookie).
    pub id: String,
    /// Person id.
    pub person_id: String,
    /// Login name.
    pub login: String,
    /// Display name.
    pub display_name: String,
    /// The team the session works in.
    pub team_id: String,
    /// Its name.
    pub team_name: String,
    /// The person's current role in it.
    pub role: Role,
    /// The per-session CSRF token.
    pub csrf_token: String,
}

/// A new session to store.
#[derive(Debug, Clone)]
pub struct NewSession<'a> {
    /// SHA-256 of the cookie value.
    pub token_hash: &'a str,
    /// Who signed in.
    pub person_id: &'a str,
    /// The team to work in.
    pub team_id: &'a str,
    /// The per-session CSRF token.
    pub csrf_token: &'a str,
    /// Expiry (unix ms).
    pub expires_at: i64,
}

/// An invite, pending or used.
#[derive(Debug, Clone)]
pub struct InviteRow {
    /// Invite id.
    pub id: String,
    /// Team joined through it.
    pub team_id: String,
    /// Team name.
    pub team_name: String,
    /// Role granted.
    pub role: Role,
    /// `startup` or `invite`.
    pub kind: String,
    /// Who it is for, in the owner's words.
    pub note: String,
    /// Who made it.
    pub created_by: String,
    /// Creation time (unix ms).
    pub created_at: i64,
    /// Expiry (unix ms).
    pub expires_at: i64,
}

/// A new invite to store.
#[derive(Debug, Clone)]
pub struct NewInvite<'a> {
    /// Team to join.
    pub team_id: &'a str,
    /// SHA-256 of the link's secret.
    pub token_hash: &'a str,
    /// Role granted.
    pub role: Role,
    /// `startup` or `invite`.
    pub kind: &'a str,
    /// Who it is for.
    pub note: &'a str,
    /// Who made it.
    pub created_by: &'a str,
    /// Expiry (unix ms).
    pub expires_at: i64,
}

/// An API token as an owner sees it (never the secret).
#[derive(Debug, Clone)]
pub struct TokenListRow {
    /// Token id.
    pub id: String,
    /// Role granted.
    pub role: Role,
    /// Who or what holds it.
    pub label: String,
    /// Creation time (unix ms).
    pub created_at: i64,
    /// Revocation time, if revoked.
    pub revoked_at: Option<i64>,
}

/// How many people have accounts (0 until the first owner signs up).
pub async fn count_people(store: &Store) -> Result<i64> {
    let row = sqlx::query("SELECT COUNT(*) FROM people")
        .fetch_one(store.pool())
        .await?;
    Ok(row.get::<i64, _>(0))
}

/// The oldest team, if any.
pub async fn first_team(store: &Store) -> Result<Option<(String, String)>> {
    let row = sqlx::query("SELECT id, name FROM teams ORDER BY created_at, id LIMIT 1")
        .fetch_optional(store.pool())
        .await?;
    Ok(row.map(|r| (r.get(0), r.get(1))))
}

/// Renames a team; a taken name is `StoreError::Constraint`.
pub async fn rename_team(store: &Store, team_id: &str, name: &str) -> Result<()> {
    sqlx::query("UPDATE teams SET name = $1 WHERE id = $2")
        .bind(name)
        .bind(team_id)
        .execute(store.pool())
        .await
        .map_err(classify)?;
    Ok(())
}

fn person_from(r: &sqlx::any::AnyRow) -> PersonRow {
    PersonRow {
        id: r.get(0),
        login: r.get(1),
        display_name: r.get(2),
        password_hash: r.get(3),
    }
}

/// A person by login name.
pub async fn find_person_by_login(store: &Store, login: &str) -> Result<Option<PersonRow>> {
    let row =
        sqlx::query("SELECT id, login, display_name, password_hash FROM people WHERE login = $1")
            .bind(login)
            .fetch_optional(store.pool())
            .await?;
    Ok(row.as_ref().map(person_from))
}

/// A person by id.
pub async fn get_person(store: &Store, id: &str) -> Result<Option<PersonRow>> {
    let row =
        sqlx::query("SELECT id, login, display_name, password_hash FROM people WHERE id = $1")
            .bind(id)
            .fetch_optional(store.pool())
            .await?;
    Ok(row.as_ref().map(person_from))
}

/// Replaces a person's password hash.
pub async fn set_password(store: &Store, person_id: &str, password_hash: &str) -> Result<()> {
    sqlx::query("UPDATE people SET password_hash = $1 WHERE id = $2")
        .bind(password_hash)
        .bind(person_id)
        .execute(store.pool())
        .await
        .map_err(classify)?;
    Ok(())
}

/// Uses an invite: marks it used (exactly once, whoever races), creates the person when
/// `new_person` is given, and adds the membership, all in one transaction. Returns the person id,
/// or `None` when the invite was already used or has expired.
pub async fn accept_invite(
    store: &Store,
    invite_id: &str,
    existing_person: Option<&str>,
    new_person: Option<(&str, &str, &str)>,
) -> Result<Option<String>> {
    let mut tx = store.pool().begin().await?;
    let now = now_ms();
    // The UPDATE first: it takes SQLite's write lock at once and is the compare-and-set that lets
    // only one of two simultaneous acceptances through.
    let used = sqlx::query(
        "UPDATE invites SET used_at = $1 WHERE id = $2 AND used_at IS NULL AND expires_at > $1",
    )
    .bind(now)
    .bind(invite_id)
    .execute(&mut *tx)
    .await
    .map_err(classify)?
    .rows_affected();
    if used != 1 {
        tx.rollback().await?;
        return Ok(None);
    }
    let row = sqlx::query("SELECT team_id, role FROM invites WHERE id = $1")
        .bind(invite_id)
        .fetch_one(&mut *tx)
        .await?;
    let (team_id, role): (String, String) = (row.get(0), row.get(1));
    let person_id = match (existing_person, new_person) {
        (Some(id), _) => id.to_string(),
        (None, Some((login, display_name, hash))) => {
            let id = uuid::Uuid::new_v4().to_string();
            sqlx::query(
                "INSERT INTO people (id, login, display_name, password_hash, created_at) \
                 VALUES ($1, $2, $3, $4, $5)",
            )
            .bind(&id)
            .bind(login)
            .bind(display_name)
            .bind(hash)
            .bind(now)
            .execute(&mut *tx)
            .await
            .map_err(classify)?;
            id
        }
        (None, None) => {
            return Err(StoreError::Corrupt(
                "accept_invite needs a person".to_string(),
            ));
        }
    };
    // Accepting an invite to a team one already belongs to adopts the invite's role: the owner
    // who made it chose that role on purpose. The last owner keeps the owner role, though (a
    // team must stay manageable), under the same team lock as role changes.
    lock_team(&mut tx, &team_id).await?;
    sqlx::query(
        "INSERT INTO memberships (team_id, person_id, role, created_at) VALUES ($1, $2, $3, $4) \
         ON CONFLICT (team_id, person_id) DO UPDATE SET role = excluded.role \
         WHERE memberships.role <> 'owner' OR excluded.role = 'owner' OR \
               (SELECT COUNT(*) FROM memberships o WHERE o.team_id = $1 AND o.role = 'owner') > 1",
    )
    .bind(&team_id)
    .bind(&person_id)
    .bind(&role)
    .bind(now)
    .execute(&mut *tx)
    .await
    .map_err(classify)?;
    tx.commit().await?;
    Ok(Some(person_id))
}

/// The teams a person belongs to, by name.
pub async fn memberships_of(store: &Store, person_id: &str) -> Result<Vec<TeamMembership>> {
    let rows = sqlx::query(
        "SELECT m.team_id, t.name, m.role FROM memberships m JOIN teams t ON t.id = m.team_id \
         WHERE m.person_id = $1 ORDER BY t.name",
    )
    .bind(person_id)
    .fetch_all(store.pool())
    .await?;
    rows.iter()
        .map(|r| {
            Ok(TeamMembership {
                team_id: r.get(0),
                team_name: r.get(1),
                role: Role::column(r.get(2))?,
            })
        })
        .collect()
}

/// A team's members, owners first.
pub async fn list_members(store: &Store, team_id: &str) -> Result<Vec<MemberRow>> {
    let rows = sqlx::query(
        "SELECT p.id, p.login, p.display_name, m.role, m.created_at FROM memberships m \
         JOIN people p ON p.id = m.person_id WHERE m.team_id = $1 \
         ORDER BY CASE m.role WHEN 'owner' THEN 0 WHEN 'editor' THEN 1 ELSE 2 END, p.login",
    )
    .bind(team_id)
    .fetch_all(store.pool())
    .await?;
    rows.iter()
        .map(|r| {
            Ok(MemberRow {
                person_id: r.get(0),
                login: r.get(1),
                display_name: r.get(2),
                role: Role::column(r.get(3))?,
                joined_at: r.get(4),
            })
        })
        .collect()
}

/// Takes the team's row lock for the rest of the transaction, so that changes which must keep
/// at least one owner run one after another. Without it, two owners demoting each other at once
/// on PostgreSQL (READ COMMITTED) would each count two owners and both succeed. The dummy
/// UPDATE is portable: a row lock on PostgreSQL, the database write lock on SQLite. The
/// statement after it gets a fresh snapshot, so it sees what the previous holder committed.
async fn lock_team(tx: &mut sqlx::Transaction<'_, sqlx::Any>, team_id: &str) -> Result<()> {
    sqlx::query("UPDATE teams SET name = name WHERE id = $1")
        .bind(team_id)
        .execute(&mut **tx)
        .await
        .map_err(classify)?;
    Ok(())
}

/// Changes a member's role. Refuses (returns false) to take the owner role from the last owner,
/// so a team can always be managed; also false when the person is not a member.
pub async fn set_role(store: &Store, team_id: &str, person_id: &str, role: Role) -> Result<bool> {
    let mut tx = store.pool().begin().await?;
    lock_team(&mut tx, team_id).await?;
    let n = sqlx::query(
        "UPDATE memberships SET role = $1 WHERE team_id = $2 AND person_id = $3 \
         AND (role <> 'owner' OR $1 = 'owner' OR \
              (SELECT COUNT(*) FROM memberships o WHERE o.team_id = $2 AND o.role = 'owner') > 1)",
    )
    .bind(role.as_str())
    .bind(team_id)
    .bind(person_id)
    .execute(&mut *tx)
    .await
    .map_err(classify)?
    .rows_affected();
    tx.commit().await?;
    Ok(n == 1)
}

/// Removes a member and ends their sessions in this team. Refuses (false) for the last owner.
pub async fn remove_member(store: &Store, team_id: &str, person_id: &str) -> Result<bool> {
    let mut tx = store.pool().begin().await?;
    lock_team(&mut tx, team_id).await?;
    let n = sqlx::query(
        "DELETE FROM memberships WHERE team_id = $1 AND person_id = $2 \
         AND (role <> 'owner' OR \
              (SELECT COUNT(*) FROM memberships o WHERE o.team_id = $1 AND o.role = 'owner') > 1)",
    )
    .bind(team_id)
    .bind(person_id)
    .execute(&mut *tx)
    .await
    .map_err(classify)?
    .rows_affected();
    if n != 1 {
        tx.rollback().await?;
        return Ok(false);
    }
    sqlx::query("DELETE FROM sessions WHERE team_id = $1 AND person_id = $2")
        .bind(team_id)
        .bind(person_id)
        .execute(&mut *tx)
        .await
        .map_err(classify)?;
    tx.commit().await?;
    Ok(true)
}

/// Stores a new session; returns its id.
pub async fn create_session(store: &Store, s: &NewSession<'_>) -> Result<String> {
    let id = uuid::Uuid::new_v4().to_string();
    sqlx::query(
        "INSERT INTO sessions (id, token_hash, person_id, team_id, csrf_token, created_at, \
         expires_at) VALUES ($1, $2, $3, $4, $5, $6, $7)",
    )
    .bind(&id)
    .bind(s.token_hash)
    .bind(s.person_id)
    .bind(s.team_id)
    .bind(s.csrf_token)
    .bind(now_ms())
    .bind(s.expires_at)
    .execute(store.pool())
    .await
    .map_err(classify)?;
    Ok(id)
}

/// The live session with this cookie hash, with the person's current role in the session's team;
/// `None` when unknown, expired, or the person is no longer a member.
pub async fn find_session(store: &Store, token_hash: &str) -> Result<Option<SessionInfo>> {
    let row = sqlx::query(
        "SELECT s.id, p.id, p.login, p.display_name, t.id, t.name, m.role, s.csrf_token \
         FROM sessions s JOIN people p ON p.id = s.person_id \
         JOIN teams t ON t.id = s.team_id \
         JOIN memberships m ON m.team_id = s.team_id AND m.person_id = s.person_id \
         WHERE s.token_hash = $1 AND s.expires_at > $2",
    )
    .bind(token_hash)
    .bind(now_ms())
    .fetch_optional(store.pool())
    .await?;
    row.map(|r| {
        Ok(SessionInfo {
            id: r.get(0),
            person_id: r.get(1),
            login: r.get(2),
            display_name: r.get(3),
            team_id: r.get(4),
            team_name: r.get(5),
            role: Role::column(r.get(6))?,
            csrf_token: r.get(7),
        })
    })
    .transpose()
}

/// Ends one session.
pub async fn delete_session(store: &Store, session_id: &str) -> Result<()> {
    sqlx::query("DELETE FROM sessions WHERE id = $1")
        .bind(session_id)
        .execute(store.pool())
        .await
        .map_err(classify)?;
    Ok(())
}

/// Ends every session of a person except `keep` (after a password change).
pub async fn delete_other_sessions(store: &Store, person_id: &str, keep: &str) -> Result<()> {
    sqlx::query("DELETE FROM sessions WHERE person_id = $1 AND id <> $2")
        .bind(person_id)
        .bind(keep)
        .execute(store.pool())
        .await
        .map_err(classify)?;
    Ok(())
}

/// Moves a session to another team the person belongs to.
pub async fn switch_team(store: &Store, session_id: &str, team_id: &str) -> Result<()> {
    sqlx::query("UPDATE sessions SET team_id = $1 WHERE id = $2")
        .bind(team_id)
        .bind(session_id)
        .execute(store.pool())
        .await
        .map_err(classify)?;
    Ok(())
}

/// Stores an invite; returns its id.
pub async fn create_invite(store: &Store, i: &NewInvite<'_>) -> Result<String> {
    let id = uuid::Uuid::new_v4().to_string();
    sqlx::query(
        "INSERT INTO invites (id, team_id, token_hash, role, kind, note, created_by, created_at, \
         expires_at) VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9)",
    )
    .bind(&id)
    .bind(i.team_id)
    .bind(i.token_hash)
    .bind(i.role.as_str())
    .bind(i.kind)
    .bind(i.note)
    .bind(i.created_by)
    .bind(now_ms())
    .bind(i.expires_at)
    .execute(store.pool())
    .await
    .map_err(classify)?;
    Ok(id)
}

const INVITE_COLUMNS: &str = "i.id, i.team_id, t.name, i.role, i.kind, i.note, i.created_by, \
                              i.created_at, i.expires_at";

fn invite_from(r: &sqlx::any::AnyRow) -> Result<InviteRow> {
    Ok(InviteRow {
        id: r.get(0),
        team_id: r.get(1),
        team_name: r.get(2),
        role: Role::column(r.get(3))?,
        kind: r.get(4),
        note: r.get(5),
        created_by: r.get(6),
        created_at: r.get(7),
        expires_at: r.get(8),
    })
}

/// The unused, unexpired invite with this link hash.
pub async fn find_invite(store: &Store, token_hash: &str) -> Result<Option<InviteRow>> {
    let sql = format!(
        "SELECT {INVITE_COLUMNS} FROM invites i JOIN teams t ON t.id = i.team_id \
         WHERE i.token_hash = $1 AND i.used_at IS NULL AND i.expires_at > $2"
    );
    let row = sqlx::query(sqlx::AssertSqlSafe(sql))
        .bind(token_hash)
        .bind(now_ms())
        .fetch_optional(store.pool())
        .await?;
    row.as_ref().map(invite_from).transpose()
}

/// A team's pending invites, newest first.
pub async fn pending_invites(store: &Store, team_id: &str) -> Result<Vec<InviteRow>> {
    let sql = format!(
        "SELECT {INVITE_COLUMNS} FROM invites i JOIN teams t ON t.id = i.team_id \
         WHERE i.team_id = $1 AND i.used_at IS NULL AND i.expires_at > $2 \
         ORDER BY i.created_at DESC, i.id"
    );
    let rows = sqlx::query(sqlx::AssertSqlSafe(sql))
        .bind(team_id)
        .bind(now_ms())
        .fetch_all(store.pool())
        .await?;
    rows.iter().map(invite_from).collect()
}

/// Withdraws a pending invite of a team; false when there was none.
pub async fn revoke_invite(store: &Store, team_id: &str, id: &str) -> Result<bool> {
    let n = sqlx::query("DELETE FROM invites WHERE team_id = $1 AND id = $2 AND used_at IS NULL")
        .bind(team_id)
        .bind(id)
        .execute(store.pool())
        .await
        .map_err(classify)?
        .rows_affected();
    Ok(n == 1)
}

/// Drops the unused start-up links, so only the one printed last works.
pub async fn delete_startup_invites(store: &Store) -> Result<()> {
    sqlx::query("DELETE FROM invites WHERE kind = 'startup' AND used_at IS NULL")
        .execute(store.pool())
        .await
        .map_err(classify)?;
    Ok(())
}

/// A team's API tokens, live ones first.
pub async fn list_tokens(store: &Store, team_id: &str) -> Result<Vec<TokenListRow>> {
    let rows = sqlx::query(
        "SELECT id, role, label, created_at, revoked_at FROM tokens WHERE team_id = $1 \
         ORDER BY CASE WHEN revoked_at IS NULL THEN 0 ELSE 1 END, created_at DESC, id",
    )
    .bind(team_id)
    .fetch_all(store.pool())
    .await?;
    rows.iter()
        .map(|r| {
            Ok(TokenListRow {
                id: r.get(0),
                role: Role::column(r.get(1))?,
                label: r.get(2),
                created_at: r.get(3),
                revoked_at: r.get(4),
            })
        })
        .collect()
}

/// Revokes a live token of a team; false when there was none.
pub async fn revoke_token(store: &Store, team_id: &str, id: &str) -> Result<bool> {
    let n = sqlx::query(
        "UPDATE tokens SET revoked_at = $1 WHERE team_id = $2 AND id = $3 AND revoked_at IS NULL",
    )
    .bind(now_ms())
    .bind(team_id)
    .bind(id)
    .execute(store.pool())
    .await
    .map_err(classify)?
    .rows_affected();
    Ok(n == 1)
}
