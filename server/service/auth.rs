//! Who is asking and what they may do: roles, the principal, API tokens and sessions.
//!
//! Tokens are 32 random bytes shown once; only their SHA-256 is stored, so a leaked database does
//! not leak credentials. Session cookies follow the same rule (see `store::accounts`).

use super::AppState;
use super::error::{ServiceError, ServiceResult};
use crate::store;
use goalsmith_core::names::{self, NameKind};
use sha2::{Digest, Sha256};

pub use crate::store::Role;

/// The authenticated caller.
#[derive(Debug, Clone)]
pub struct Principal {
    /// The team every object it touches must belong to.
    pub team_id: String,
    /// What it may do.
    pub role: Role,
    /// Recorded as the author of what it writes.
    pub author: String,
}

impl Principal {
    /// Refuses with 403 unless the role is at least `needed`.
    pub fn require(&self, needed: Role) -> Result<(), ServiceError> {
        if self.role >= needed {
            Ok(())
        } else {
            Err(ServiceError::Forbidden(format!(
                "this needs the {} role; you are {} {}",
                needed.as_str(),
                if self.role == Role::Viewer { "a" } else { "an" },
                self.role.as_str()
            )))
        }
    }
}

/// A new random token: `gs_` and 64 hex digits.
pub fn new_token() -> Result<String, getrandom::Error> {
    let mut bytes = [0u8; 32];
    getrandom::fill(&mut bytes)?;
    Ok(format!("gs_{}", hex::encode(bytes)))
}

/// The stored form of a token.
pub fn hash_token(token: &str) -> String {
    hex::encode(Sha256::digest(token.as_bytes()))
}

/// Creates the team if missing and a token for it (the command line's way in, before anyone
/// has an account); returns the token, shown once.
pub async fn bootstrap_token(
    store: &store::Store,
    team: &str,
    role: Role,
    label: &str,
) -> Result<NewToken, ServiceError> {
    let team = names::check(NameKind::Team, team)
        .map_err(|e| ServiceError::invalid(e.code(), "team", e.to_string()))?;
    // Check the label before the team is created, so a refused token leaves nothing behind.
    let label = checked_label(label)?;
    let team = store::teams::get_or_create_team(store, &team).await?;
    create_team_token(store, &team.id, role, &label).await
}

fn checked_label(label: &str) -> ServiceResult<String> {
    names::check(NameKind::TokenLabel, label)
        .map_err(|e| ServiceError::invalid(e.code(), "label", e.to_string()))
}

/// A new API token of an existing team; the label follows the token-label name rule.
/// Returns the token (only its hash is stored).
pub async fn create_team_token(
    store: &store::Store,
    team_id: &str,
    role: Role,
    label: &str,
) -> Result<NewToken, ServiceError> {
    let label = checked_label(label)?;
    let token = new_token().map_err(|e| ServiceError::Internal(format!("no randomness: {e}")))?;
    store::teams::insert_token(store, team_id, &hash_token(&token), role, &label).await?;
    Ok(NewToken { token, label })
}

/// A token just made: the secret (shown once) and its label as kept.
pub struct NewToken {
    /// `gs_` and 64 hex digits.
    pub token: String,
    /// The label, by the token-label rule.
    pub label: String,
}

/// A new random secret, 32 bytes as hex (sessions, invitations, CSRF tokens).
pub fn random_secret() -> ServiceResult<String> {
    let mut bytes = [0u8; 32];
    getrandom::fill(&mut bytes)
        .map_err(|e| ServiceError::Internal(format!("no randomness: {e}")))?;
    Ok(hex::encode(bytes))
}

pub use crate::security::same_secret;

/// The principal an API token acts as, or 401.
pub async fn principal_for_token(state: &AppState, token: &str) -> ServiceResult<Principal> {
    let row = store::teams::find_token(&state.store, &hash_token(token))
        .await?
        .ok_or(ServiceError::Unauthorized)?;
    Ok(Principal {
        team_id: row.team_id,
        role: row.role,
        author: row.label,
    })
}

/// The live session of a session secret (the cookie's value), if any.
pub async fn session_for_secret(
    state: &AppState,
    secret: &str,
) -> ServiceResult<Option<store::accounts::SessionInfo>> {
    Ok(store::accounts::find_session(&state.store, &hash_token(secret)).await?)
}

/// How the audit log names a signed-in person: display name and login.
pub fn session_actor(info: &store::accounts::SessionInfo) -> String {
    format!("{} ({})", info.display_name, info.login)
}

/// The principal a session acts as.
pub fn session_principal(info: &store::accounts::SessionInfo) -> Principal {
    Principal {
        team_id: info.team_id.clone(),
        role: info.role,
        author: info.display_name.clone(),
    }
}
