//! People and their sessions: passwords, signing in, joining a team by invitation, changing
//! one's password, switching teams, and the first owner's start-up link.
//!
//! A session is a random secret held by the browser (the cookie's value); only its SHA-256 is
//! stored, as for tokens. Every sign-in starts a new session with a new secret.

use super::AppState;
use super::auth::{hash_token, random_secret};
use super::error::{ServiceError, ServiceResult};
use crate::security::ClientAddr;
use crate::store::{self, Role, StoreError, accounts::InviteRow, accounts::SessionInfo};
use argon2::password_hash::{PasswordHash, PasswordHasher, PasswordVerifier, SaltString};
use goalsmith_core::names::{self, NameKind};
use std::net::SocketAddr;

/// Name of the session cookie.
pub const SESSION_COOKIE: &str = "gs_session";
/// How long a sign-in lasts: a working week, so an operator signs in on Monday, not every shift.
pub const SESSION_DAYS: i64 = 7;
/// Shortest password accepted.
pub const MIN_PASSWORD_CHARS: usize = 10;
/// Longest password accepted, in bytes.
pub const MAX_PASSWORD_BYTES: usize = 1024;
/// How long the start-up sign-in link stays valid.
pub const STARTUP_LINK_HOURS: i64 = 24;

/// Hashes a password with argon2id (the crate's defaults follow the OWASP minimum). CPU-bound
/// and ~19 MB each: runs on the blocking pool, in one of the few hashing slots (503 when none
/// frees up soon). The slot moves into the task, so it stays taken until the hash is done even
/// when the client gives up.
pub async fn hash_password(state: &AppState, password: String) -> ServiceResult<String> {
    let slot = state.security.hash_slot().await?;
    tokio::task::spawn_blocking(move || {
        let _slot = slot;
        let mut salt = [0u8; 16];
        getrandom::fill(&mut salt)
            .map_err(|e| ServiceError::Internal(format!("no randomness: {e}")))?;
        let salt = SaltString::encode_b64(&salt)
            .map_err(|e| ServiceError::Internal(format!("salt: {e}")))?;
        argon2::Argon2::default()
            .hash_password(password.as_bytes(), &salt)
            .map(|h| h.to_string())
            .map_err(|e| ServiceError::Internal(format!("argon2: {e}")))
    })
    .await
    .map_err(|e| ServiceError::Internal(format!("hash task: {e}")))?
}

/// A fixed hash to verify against when the login is unknown, so an unknown login takes as long
/// to refuse as a wrong password and logins cannot be probed by timing.
const DUMMY_HASH: &str = "$argon2id$v=19$m=19456,t=2,p=1$c29tZXNhbHRzb21lc2FsdA$2pZmnrZ3zcVQ5Jlj9CVNSu0s1vGBj0Fo1T5kFfMMpEM";

/// Checks a password against a stored hash (or the dummy hash when `hash` is `None`).
/// Runs like [`hash_password`], in a hashing slot.
pub async fn verify_password(
    state: &AppState,
    password: String,
    hash: Option<String>,
) -> ServiceResult<bool> {
    let slot = state.security.hash_slot().await?;
    tokio::task::spawn_blocking(move || {
        let _slot = slot;
        let known = hash.is_some();
        let stored = hash.unwrap_or_else(|| DUMMY_HASH.to_string());
        let parsed = PasswordHash::new(&stored)
            .map_err(|e| ServiceError::Internal(format!("stored hash unreadable: {e}")))?;
        let ok = argon2::Argon2::default()
            .verify_password(password.as_bytes(), &parsed)
            .is_ok();
        Ok(ok && known)
    })
    .await
    .map_err(|e| ServiceError::Internal(format!("verify task: {e}")))?
}

/// A session just started.
pub struct NewSession {
    /// The secret the browser keeps (the cookie's value).
    pub secret: String,
    /// The session's id, to keep it when ending the person's others.
    pub id: String,
    /// How long it lasts, seconds.
    pub max_age_s: i64,
}

/// Starts a session for a person in a team, always with a new random secret (so a cookie planted
/// before sign-in is never the one in use after it).
pub async fn start_session(
    state: &AppState,
    person_id: &str,
    team_id: &str,
) -> ServiceResult<NewSession> {
    let secret = random_secret()?;
    let csrf = random_secret()?;
    let max_age_s = SESSION_DAYS * 24 * 3600;
    let id = store::accounts::create_session(
        &state.store,
        &store::accounts::NewSession {
            token_hash: &hash_token(&secret),
            person_id,
            team_id,
            csrf_token: &csrf,
            expires_at: store::now_ms() + max_age_s * 1000,
        },
    )
    .await?;
    Ok(NewSession {
        secret,
        id,
        max_age_s,
    })
}

/// Ends the session of `secret` (the browser's cookie), if it is live.
pub async fn end_session(state: &AppState, secret: Option<&str>) -> ServiceResult<()> {
    if let Some(secret) = secret
        && let Some(old) = super::auth::session_for_secret(state, secret).await?
    {
        store::accounts::delete_session(&state.store, &old.id).await?;
    }
    Ok(())
}

/// Signs out the session.
pub async fn sign_out(state: &AppState, session: &SessionInfo) -> ServiceResult<()> {
    Ok(store::accounts::delete_session(&state.store, &session.id).await?)
}

/// Login names: 1–64 of lowercase letters, digits and `. _ - @`, so they are easy to type and
/// never confusable by case.
pub fn check_login(raw: &str) -> Result<String, &'static str> {
    let login = raw.trim().to_lowercase();
    if login.is_empty() || login.chars().count() > 64 {
        return Err("a login needs 1 to 64 characters");
    }
    if !login
        .chars()
        .all(|c| c.is_ascii_alphanumeric() || matches!(c, '.' | '_' | '-' | '@'))
    {
        return Err("a login may hold letters, digits and . _ - @ only");
    }
    Ok(login)
}

/// Display names, by the one rule for people's names.
pub fn check_display_name(raw: &str) -> Result<String, String> {
    names::check(NameKind::Person, raw).map_err(|e| e.to_string())
}

/// A new password: long enough, typed the same twice.
pub fn check_new_password(password: &str, again: &str) -> Result<(), String> {
    if password.chars().count() < MIN_PASSWORD_CHARS {
        return Err(format!(
            "a password needs at least {MIN_PASSWORD_CHARS} characters"
        ));
    }
    if password.len() > MAX_PASSWORD_BYTES {
        return Err(format!(
            "a password may have at most {MAX_PASSWORD_BYTES} bytes"
        ));
    }
    if password != again {
        return Err("the two passwords differ".into());
    }
    Ok(())
}

/// How a sign-in ended.
pub enum SignIn {
    /// The login and password do not match an account.
    Refused,
    /// The account belongs to no team any more.
    NoTeam,
    /// Signed in: the new session (the browser's previous one, if any, has ended).
    Started(NewSession),
}

/// Signs a person in, throttled per login and per client address (429 before any hashing).
/// `current` is the browser's session secret, if it has one: it ends, so a sign-in always
/// starts a new session.
pub async fn sign_in(
    state: &AppState,
    login: &str,
    password: String,
    client: &ClientAddr,
    current: Option<&str>,
) -> ServiceResult<SignIn> {
    let login = login.trim().to_lowercase();
    state.security.sign_in_attempt(&login, client)?;
    let person = store::accounts::find_person_by_login(&state.store, &login).await?;
    let hash = person.as_ref().map(|p| p.password_hash.clone());
    let ok = match verify_password(state, password, hash).await {
        Ok(ok) => ok,
        Err(busy @ ServiceError::HashingBusy { .. }) => {
            state.security.attempt_not_run(&login, client);
            return Err(busy);
        }
        Err(e) => return Err(e),
    };
    let Some(person) = person.filter(|_| ok) else {
        tracing::info!(login = %login, "sign-in refused");
        return Ok(SignIn::Refused);
    };
    state.security.signed_in(&login);
    let teams = store::accounts::memberships_of(&state.store, &person.id).await?;
    let Some(team) = teams.first() else {
        return Ok(SignIn::NoTeam);
    };
    end_session(state, current).await?;
    Ok(SignIn::Started(
        start_session(state, &person.id, &team.team_id).await?,
    ))
}

/// The live invitation of a link's secret, or 404.
pub async fn live_invite(state: &AppState, secret: &str) -> ServiceResult<InviteRow> {
    store::accounts::find_invite(&state.store, &hash_token(secret))
        .await?
        .ok_or_else(|| {
            ServiceError::NotFound(
                "This invitation link was already used, was withdrawn, or has expired. Ask an \
                 owner of the team for a new one."
                    .into(),
            )
        })
}

/// Who accepts an invitation.
pub enum Joiner<'a> {
    /// The person signed in with this session secret.
    Signed(&'a str),
    /// A new account.
    New {
        /// Display name (the person-name rule).
        display_name: &'a str,
        /// Login (see [`check_login`]).
        login: &'a str,
        /// Password, typed twice.
        password: String,
        /// The second typing.
        password_again: &'a str,
    },
}

/// A joined team: the new session, and the invitation that was used.
pub struct Joined {
    /// The session, in the invitation's team.
    pub session: NewSession,
    /// The invitation.
    pub invite: InviteRow,
}

/// Accepts an invitation: creates the account (or uses the signed-in one), joins the team with
/// the invitation's role, and starts a new session there. Refusals a person can fix are 422s
/// with a message for them.
pub async fn accept_invite(
    state: &AppState,
    secret: &str,
    joiner: Joiner<'_>,
    current: Option<&str>,
) -> ServiceResult<Joined> {
    let invite = live_invite(state, secret).await?;
    let refuse = |field: &str, m: &str| ServiceError::invalid("bad_account", field, m.to_string());
    let person_id = match joiner {
        Joiner::Signed(session_secret) => {
            let Some(current) = super::auth::session_for_secret(state, session_secret).await?
            else {
                return Err(refuse(
                    "join_existing",
                    "Sign in first to join with an existing account.",
                ));
            };
            store::accounts::accept_invite(&state.store, &invite.id, Some(&current.person_id), None)
                .await?
        }
        Joiner::New {
            display_name,
            login,
            password,
            password_again,
        } => {
            let display_name =
                check_display_name(display_name).map_err(|m| refuse("display_name", &m))?;
            let login = check_login(login).map_err(|m| refuse("login", m))?;
            check_new_password(&password, password_again).map_err(|m| refuse("password", &m))?;
            let taken = "That login is taken. If it is yours, sign in first and open this link \
                         again to join with your account.";
            if store::accounts::find_person_by_login(&state.store, &login)
                .await?
                .is_some()
            {
                return Err(refuse("login", taken));
            }
            let hash = hash_password(state, password).await?;
            match store::accounts::accept_invite(
                &state.store,
                &invite.id,
                None,
                Some((&login, &display_name, &hash)),
            )
            .await
            {
                Ok(p) => p,
                Err(StoreError::Unique(_)) => {
                    return Err(refuse(
                        "login",
                        "That login was taken a moment ago; choose another.",
                    ));
                }
                Err(e) => return Err(e.into()),
            }
        }
    };
    let Some(person_id) = person_id else {
        return Err(ServiceError::NotFound(
            "This invitation link was used a moment ago by someone else.".into(),
        ));
    };
    end_session(state, current).await?;
    let session = start_session(state, &person_id, &invite.team_id).await?;
    Ok(Joined { session, invite })
}

/// Changes the signed-in person's password. Needs the current one (throttled like sign-in, so
/// a borrowed session cannot guess it); ends all the person's sessions, this one included, and
/// returns a new one.
pub async fn change_password(
    state: &AppState,
    session: &SessionInfo,
    client: &ClientAddr,
    current: String,
    password: String,
    again: &str,
) -> ServiceResult<NewSession> {
    let person = store::accounts::get_person(&state.store, &session.person_id)
        .await?
        .ok_or_else(|| ServiceError::Internal("signed-in person vanished".into()))?;
    state.security.sign_in_attempt(&person.login, client)?;
    let right = match verify_password(state, current, Some(person.password_hash)).await {
        Ok(right) => right,
        Err(busy @ ServiceError::HashingBusy { .. }) => {
            state.security.attempt_not_run(&person.login, client);
            return Err(busy);
        }
        Err(e) => return Err(e),
    };
    if !right {
        return Err(ServiceError::invalid(
            "wrong_password",
            "current",
            "The current password is not right.",
        ));
    }
    state.security.signed_in(&person.login);
    check_new_password(&password, again)
        .map_err(|m| ServiceError::invalid("bad_password", "password", m))?;
    let hash = hash_password(state, password).await?;
    store::accounts::set_password(&state.store, &person.id, &hash).await?;
    let new = start_session(state, &person.id, &session.team_id).await?;
    store::accounts::delete_other_sessions(&state.store, &person.id, &new.id).await?;
    Ok(new)
}

/// Moves the session to another team the person belongs to; returns that team's name.
pub async fn switch_team(
    state: &AppState,
    session: &SessionInfo,
    team_id: &str,
) -> ServiceResult<String> {
    let teams = store::accounts::memberships_of(&state.store, &session.person_id).await?;
    let Some(team) = teams.iter().find(|t| t.team_id == team_id) else {
        return Err(ServiceError::Forbidden(
            "you are not a member of that team".into(),
        ));
    };
    store::accounts::switch_team(&state.store, &session.id, &team.team_id).await?;
    Ok(team.team_name.clone())
}

/// The teams a person belongs to.
pub async fn teams_of(
    state: &AppState,
    person_id: &str,
) -> ServiceResult<Vec<store::accounts::TeamMembership>> {
    Ok(store::accounts::memberships_of(&state.store, person_id).await?)
}

/// What to print at start-up for a person to sign in: a one-time link for the first owner of an
/// empty database, or of the demo team (`demo_team`) after `--demo`. `None` when people already
/// have accounts.
///
/// While nobody has an account, every start replaces the previous link (only the newest works),
/// so a lost terminal is fixed by restarting.
pub async fn startup_link(
    state: &AppState,
    addr: SocketAddr,
    demo_team: Option<&str>,
) -> ServiceResult<Option<String>> {
    let store = &state.store;
    if store::accounts::count_people(store).await? > 0 {
        return Ok(None);
    }
    let team = match demo_team {
        Some(name) => {
            let t = store::teams::get_or_create_team(store, name).await?;
            (t.id, t.name)
        }
        None => match store::accounts::first_team(store).await? {
            Some(t) => t,
            None => {
                let t = store::teams::get_or_create_team(store, "my team").await?;
                (t.id, t.name)
            }
        },
    };
    store::accounts::delete_startup_invites(store).await?;
    let secret = random_secret()?;
    store::accounts::create_invite(
        store,
        &store::accounts::NewInvite {
            team_id: &team.0,
            token_hash: &hash_token(&secret),
            role: Role::Owner,
            kind: "startup",
            note: "first owner",
            created_by: "start-up",
            expires_at: store::now_ms() + STARTUP_LINK_HOURS * 3600 * 1000,
        },
    )
    .await?;
    // The public URL when configured, else an address a browser on this machine can open.
    state.security.set_bound(addr);
    let base = state.security.link_base(None);
    Ok(Some(format!(
        "sign in as the first owner of team {:?}: {base}/welcome/{secret}\n\
         (one-time link, valid {STARTUP_LINK_HOURS} h; a restart prints a new one while no account exists)",
        team.1
    )))
}
