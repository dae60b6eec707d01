//! How an API request says who it is: `Authorization: Bearer TOKEN` (robots, planners), or the
//! browser's session cookie with its CSRF token (the editor's scripts).

use super::error::ServiceError;
use crate::service::AppState;
use crate::service::accounts::SESSION_COOKIE;
use crate::service::audit::AuditSlot;
use crate::service::auth::{self, Principal, same_secret};
use crate::store;
use axum::extract::FromRequestParts;
use axum::http::{header, request::Parts};

/// Header carrying the session's CSRF token on cookie-authenticated `fetch` writes.
pub const CSRF_HEADER: &str = "x-csrf-token";

/// The browser session behind a cookie-authenticated request, left in the request extensions by
/// [`Principal`] extraction.
#[derive(Debug, Clone)]
pub struct SessionAuth(pub store::accounts::SessionInfo);

/// Methods that change nothing and so need no CSRF token.
pub fn is_safe_method(m: &axum::http::Method) -> bool {
    matches!(
        *m,
        axum::http::Method::GET | axum::http::Method::HEAD | axum::http::Method::OPTIONS
    )
}

impl FromRequestParts<AppState> for Principal {
    type Rejection = ServiceError;

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
        let value = value.to_str().map_err(|_| ServiceError::Unauthorized)?;
        // The scheme name is case-insensitive (RFC 9110, 11.1): `Bearer`, `bearer`, `BEARER`.
        let token = value
            .split_once(' ')
            .filter(|(scheme, _)| scheme.eq_ignore_ascii_case("bearer"))
            .map(|(_, t)| t.trim())
            .filter(|t| !t.is_empty())
            .ok_or(ServiceError::Unauthorized)?;
        let principal = auth::principal_for_token(state, token).await?;
        if let Some(slot) = parts.extensions.get::<AuditSlot>() {
            slot.fill(&principal, "token", &principal.author);
        }
        parts.extensions.insert(principal.clone());
        Ok(principal)
    }
}

/// The browser's way in: the session cookie. A cookie is sent by the browser on its own, so any
/// state-changing request made with it must also prove it came from our own page by echoing the
/// session's CSRF token in `X-CSRF-Token` (SameSite=Strict is the first fence, this the second).
/// Bearer tokens are never sent implicitly and need no such proof.
async fn from_session(parts: &mut Parts, state: &AppState) -> Result<Principal, ServiceError> {
    let secret =
        crate::cookies::get(&parts.headers, SESSION_COOKIE).ok_or(ServiceError::Unauthorized)?;
    let info = auth::session_for_secret(state, &secret)
        .await?
        .ok_or(ServiceError::Unauthorized)?;
    if !is_safe_method(&parts.method) {
        let sent = parts
            .headers
            .get(CSRF_HEADER)
            .and_then(|v| v.to_str().ok())
            .unwrap_or("");
        if !same_secret(sent, &info.csrf_token) {
            return Err(ServiceError::Forbidden(
                "this request carries the browser's session cookie but not its CSRF token \
                 (X-CSRF-Token); reload the page and try again"
                    .into(),
            ));
        }
    }
    let principal = auth::session_principal(&info);
    if let Some(slot) = parts.extensions.get::<AuditSlot>() {
        slot.fill(&principal, "session", &auth::session_actor(&info));
    }
    parts.extensions.insert(principal.clone());
    parts.extensions.insert(SessionAuth(info));
    Ok(principal)
}
