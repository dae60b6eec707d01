//! Who is asking: API tokens (robots, planners) and, from the pages, session cookies.
//!
//! Tokens are 32 random bytes shown once; only their SHA-256 is stored, so a leaked database does
//! not leak credentials. Session cookies follow the same rule (see `store::accounts`).

use super::AppState;
use super::error::ApiError;
use crate::store;
use axum::extract::FromRequestParts;
use axum::http::{header, request::Parts};
use goalsmith_core::names::{self, NameKind};
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
    let team = names::check(NameKind::Team, team)
        .map_err(|e| ApiError::invalid(e.code(), "team", e.to_string()))?;
    // Check the label before the team is created, so a refused token leaves nothing behind.
    let label = names::check(NameKind::TokenLabel, label)
        .map_err(|e| ApiError::invalid(e.code(), "label", e.to_string()))?;
    let team = store::teams::get_or_create_team(store.pool(), &team).await?;
    create_team_token(store, &team.id, role, &label).await
}

/// A new API token of an existing team; the label follows the token-label name rule.
/// Returns the token (only its hash is stored).
pub async fn create_team_token(
    store: &store::Store,
    team_id: &str,
    role: Role,
    label: &str,
) -> Result<String, ApiError> {
    let label = names::check(NameKind::TokenLabel, label)
        .map_err(|e| ApiError::invalid(e.code(), "label", e.to_string()))?;
    let token = new_token().map_err(|e| ApiError::Internal(format!("no randomness: {e}")))?;
    store::teams::insert_token(
        store.pool(),
        team_id,
        &hash_token(&token),
        role.as_str(),
        &label,
    )
    .await?;
    Ok(token)
}

/// Name of the session cookie set by the sign-in page.
pub const SESSION_COOKIE: &str = "gs_session";
/// Header carrying the session's CSRF token on cookie-authenticated `fetch` writes.
pub const CSRF_HEADER: &str = "x-csrf-token";

/// The browser session behind a cookie-authenticated request, left in the request extensions by
/// [`Principal`] extraction so pages can show who is signed in.
#[derive(Debug, Clone)]
pub struct SessionAuth(pub store::accounts::SessionInfo);

/// The value of cookie `name` in the request's `Cookie` headers.
pub fn cookie<'a>(headers: &'a axum::http::HeaderMap, name: &str) -> Option<&'a str> {
    headers
        .get_all(header::COOKIE)
        .iter()
        .filter_map(|v| v.to_str().ok())
        .flat_map(|v| v.split(';'))
        .filter_map(|pair| pair.trim().split_once('='))
        .find(|(k, _)| *k == name)
        .map(|(_, v)| v.trim())
}

/// Compares two secrets in time independent of where they differ.
pub fn same_secret(a: &str, b: &str) -> bool {
    let (a, b) = (a.as_bytes(), b.as_bytes());
    if a.len() != b.len() {
        return false;
    }
    a.iter().zip(b).fold(0u8, |acc, (x, y)| acc | (x ^ y)) == 0
}

/// Methods that change nothing and so need no CSRF token.
pub fn is_safe_method(m: &axum::http::Method) -> bool {
    matches!(
        *m,
        axum::http::Method::GET | axum::http::Method::HEAD | axum::http::Method::OPTIONS
    )
}

/// Looks up the session of a request's cookie, if it has a live one.
pub async fn session_of(
    headers: &axum::http::HeaderMap,
    state: &AppState,
) -> Result<Option<store::accounts::SessionInfo>, ApiError> {
    let Some(value) = cookie(headers, SESSION_COOKIE) else {
        return Ok(None);
    };
    Ok(store::accounts::find_session(state.store.pool(), &hash_token(value)).await?)
}

/// The principal a session acts as.
pub fn session_principal(info: &store::accounts::SessionInfo) -> Result<Principal, ApiError> {
    let role = Role::parse(&info.role).ok_or_else(|| {
        ApiError::Internal(format!(
            "membership of {} has role {:?}",
            info.person_id, info.role
        ))
    })?;
    Ok(Principal {
        team_id: info.team_id.clone(),
        role,
        author: info.display_name.clone(),
    })
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
            return from_session(parts, state).await;
        };
        let value = value.to_str().map_err(|_| ApiError::Unauthorized)?;
        // The scheme name is case-insensitive (RFC 9110, 11.1): `Bearer`, `bearer`, `BEARER`.
        let token = value
            .split_once(' ')
            .filter(|(scheme, _)| scheme.eq_ignore_ascii_case("bearer"))
            .map(|(_, t)| t.trim())
            .filter(|t| !t.is_empty())
            .ok_or(ApiError::Unauthorized)?;
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

/// The browser's way in: the session cookie. A cookie is sent by the browser on its own, so any
/// state-changing request made with it must also prove it came from our own page by echoing the
/// session's CSRF token in `X-CSRF-Token` (SameSite=Strict is the first fence, this the second).
/// Bearer tokens are never sent implicitly and need no such proof.
async fn from_session(parts: &mut Parts, state: &AppState) -> Result<Principal, ApiError> {
    let info = session_of(&parts.headers, state)
        .await?
        .ok_or(ApiError::Unauthorized)?;
    if !is_safe_method(&parts.method) {
        let sent = parts
            .headers
            .get(CSRF_HEADER)
            .and_then(|v| v.to_str().ok())
            .unwrap_or("");
        if !same_secret(sent, &info.csrf_token) {
            return Err(ApiError::Forbidden(
                "this request carries the browser's session cookie but not its CSRF token \
                 (X-CSRF-Token); reload the page and try again"
                    .into(),
            ));
        }
    }
    let principal = session_principal(&info)?;
    parts.extensions.insert(principal.clone());
    parts.extensions.insert(SessionAuth(info));
    Ok(principal)
}
