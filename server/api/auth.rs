//! Who is asking: API tokens (robots, planners) and, from the pages, session cookies.
//!
//! Tokens are 32 random bytes shown once; only their SHA-256 is stored, so a leaked database does
//! not leak credentials.

use super::AppState;
use super::error::ApiError;
use crate::store;
use axum::extract::FromRequestParts;
use axum::http::{header, request::Parts};
use sha2::{Digest, Sha256};

/// A role, ordered by what it may do.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum Role {
    /// Reads everything of the team.
    Viewer,
    /// Also writes cameras, frames, goals and outcomes.
    Editor,
    /// Also manages members and tokens.
    Owner,
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
}

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
    pub fn require(&self, needed: Role) -> Result<(), ApiError> {
        if self.role >= needed {
            Ok(())
        } else {
            Err(ApiError::Forbidden(format!(
                "this needs the {} role; you are a {}",
                needed.as_str(),
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

/// Creates the team if missing and a token for it; returns the token (shown once).
pub async fn create_token(
    store: &store::Store,
    team: &str,
    role: Role,
    label: &str,
) -> Result<String, ApiError> {
    let team = store::teams::get_or_create_team(store.pool(), team).await?;
    let token = new_token().map_err(|e| ApiError::Internal(format!("no randomness: {e}")))?;
    store::teams::insert_token(
        store.pool(),
        &team.id,
        &hash_token(&token),
        role.as_str(),
        label,
    )
    .await?;
    Ok(token)
}

impl FromRequestParts<AppState> for Principal {
    type Rejection = ApiError;

    async fn from_request_parts(
        parts: &mut Parts,
        state: &AppState,
    ) -> Result<Self, Self::Rejection> {
        if let Some(p) = parts.extensions.get::<Principal>() {
            return Ok(p.clone());
        }
        let Some(value) = parts.headers.get(header::AUTHORIZATION) else {
            return Err(ApiError::Unauthorized);
        };
        let value = value.to_str().map_err(|_| ApiError::Unauthorized)?;
        let token = value
            .strip_prefix("Bearer ")
            .or_else(|| value.strip_prefix("bearer "))
            .ok_or(ApiError::Unauthorized)?
            .trim();
        let row = store::teams::find_token(state.store.pool(), &hash_token(token))
            .await?
            .ok_or(ApiError::Unauthorized)?;
        let role = Role::parse(&row.role).ok_or_else(|| {
            ApiError::Internal(format!("token {} has role {:?}", row.id, row.role))
        })?;
        let principal = Principal {
            team_id: row.team_id,
            role,
            author: row.label,
        };
        parts.extensions.insert(principal.clone());
        Ok(principal)
    }
}
