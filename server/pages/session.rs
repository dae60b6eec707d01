//! Sessions at the pages' edge: the session and form cookies, the signed-in extractor and
//! CSRF-checked forms. Passwords and sessions themselves are the service's.

use super::error::PageError;
use crate::cookies;
use crate::service::AppState;
use crate::service::accounts::{NewSession, SESSION_COOKIE};
use crate::service::audit::AuditSlot;
use crate::service::auth::{self, Principal, Role, same_secret};
use crate::store::accounts::SessionInfo;
use axum::extract::{FromRequest, FromRequestParts, Request};
use axum::http::{HeaderMap, header, request::Parts};
use serde::de::DeserializeOwned;

/// The short-lived cookie that ties the sign-in and welcome forms to the browser that loaded them
/// (double-submit), since those forms come before any session exists.
pub const FORM_COOKIE: &str = "gs_form";

/// The `Set-Cookie` value that hands a new session to the browser.
pub fn session_cookie(session: &NewSession, headers: &HeaderMap) -> String {
    cookies::set(SESSION_COOKIE, &session.secret, session.max_age_s, headers)
}

/// The browser's session secret (its session cookie), if it sent one.
pub fn session_secret(headers: &HeaderMap) -> Option<String> {
    cookies::get(headers, SESSION_COOKIE)
}

/// A signed-in person. Pages that need one take this extractor; without a live session the
/// request is sent to the sign-in page (a redirect, not an error: that is what a person expects).
#[derive(Debug, Clone)]
pub struct Signed {
    /// The session and membership.
    pub info: SessionInfo,
    /// The principal the session acts as, for calling the service.
    pub who: Principal,
}

impl Signed {
    /// Refuses with a 403 page unless the role is at least `needed`.
    pub fn require(&self, needed: Role) -> Result<(), PageError> {
        self.who.require(needed).map_err(PageError::from)
    }
    /// Whether this person may change goals, cameras and frames.
    pub fn can_edit(&self) -> bool {
        self.who.role >= Role::Editor
    }
    /// Whether this person manages members and tokens.
    pub fn is_owner(&self) -> bool {
        self.who.role >= Role::Owner
    }
}

impl FromRequestParts<AppState> for Signed {
    type Rejection = PageError;

    async fn from_request_parts(
        parts: &mut Parts,
        state: &AppState,
    ) -> Result<Self, Self::Rejection> {
        let next = parts
            .uri
            .path_and_query()
            .map(|p| p.as_str().to_string())
            .unwrap_or_else(|| "/".into());
        let Some(secret) = session_secret(&parts.headers) else {
            return Err(PageError::SignIn { next });
        };
        let info = auth::session_for_secret(state, &secret)
            .await?
            .ok_or(PageError::SignIn { next })?;
        let who = auth::session_principal(&info);
        if let Some(slot) = parts.extensions.get::<AuditSlot>() {
            slot.fill(&who, "session", &auth::session_actor(&info));
        }
        Ok(Signed { info, who })
    }
}

/// The field every form of ours carries.
#[derive(serde::Deserialize)]
struct CsrfField {
    #[serde(default)]
    csrf: String,
}

/// An `application/x-www-form-urlencoded` body from a signed-in person whose `csrf` field matches
/// the session's token: every state-changing page form goes through this.
pub struct CsrfForm<T> {
    /// Who sent it.
    pub signed: Signed,
    /// The form fields.
    pub form: T,
}

impl<T: DeserializeOwned> FromRequest<AppState> for CsrfForm<T> {
    type Rejection = PageError;

    async fn from_request(req: Request, state: &AppState) -> Result<Self, Self::Rejection> {
        let (mut parts, body) = req.into_parts();
        let signed = Signed::from_request_parts(&mut parts, state).await?;
        let bytes = read_form(Request::from_parts(parts, body), state).await?;
        let field: CsrfField = serde_urlencoded::from_bytes(&bytes)
            .map_err(|e| PageError::BadRequest(format!("the form could not be read: {e}")))?;
        if !same_secret(&field.csrf, &signed.info.csrf_token) {
            return Err(PageError::Forbidden(
                "this form did not carry the page's security token; reload the page and send it \
                 again"
                    .into(),
            ));
        }
        let form = serde_urlencoded::from_bytes(&bytes)
            .map_err(|e| PageError::BadRequest(format!("the form could not be read: {e}")))?;
        Ok(CsrfForm { signed, form })
    }
}

/// A form posted before sign-in (sign-in, welcome): its `csrf` field must equal the form cookie
/// (double-submit) and be a token this server issued and that has not expired, so a client
/// cannot pass the check with a cookie and field it made up.
pub struct PreForm<T>(pub T);

impl<T: DeserializeOwned> FromRequest<AppState> for PreForm<T> {
    type Rejection = PageError;

    async fn from_request(req: Request, state: &AppState) -> Result<Self, Self::Rejection> {
        let expected = cookies::get(req.headers(), FORM_COOKIE)
            .filter(|v| state.security.form_token_age(v).is_some())
            .unwrap_or_default();
        let bytes = read_form(req, state).await?;
        let field: CsrfField = serde_urlencoded::from_bytes(&bytes)
            .map_err(|e| PageError::BadRequest(format!("the form could not be read: {e}")))?;
        if expected.is_empty() || !same_secret(&field.csrf, &expected) {
            return Err(PageError::Forbidden(
                "this form did not come from a page this browser loaded (or cookies are off); \
                 reload the page and send it again"
                    .into(),
            ));
        }
        let form = serde_urlencoded::from_bytes(&bytes)
            .map_err(|e| PageError::BadRequest(format!("the form could not be read: {e}")))?;
        Ok(PreForm(form))
    }
}

async fn read_form(req: Request, state: &AppState) -> Result<axum::body::Bytes, PageError> {
    let media = req
        .headers()
        .get(header::CONTENT_TYPE)
        .and_then(|v| v.to_str().ok())
        .and_then(|v| v.split(';').next())
        .map(|v| v.trim().to_ascii_lowercase());
    if media.as_deref() != Some("application/x-www-form-urlencoded") {
        return Err(PageError::UnsupportedMediaType(
            "this page takes an HTML form (application/x-www-form-urlencoded)".into(),
        ));
    }
    axum::body::Bytes::from_request(req, state)
        .await
        .map_err(|_| PageError::TooLarge("What you sent is larger than this page accepts.".into()))
}

/// The form cookie and its value for a page that shows a pre-session form: the browser's own
/// while it is one we issued recently (so two open sign-in tabs both work), else a new one.
pub fn form_cookie(state: &AppState, headers: &HeaderMap) -> Result<(String, String), PageError> {
    let current = cookies::get(headers, FORM_COOKIE);
    let (value, max_age) = state.security.form_token_for(current.as_deref())?;
    let max_age = i64::try_from(max_age).unwrap_or(3600);
    Ok((cookies::set(FORM_COOKIE, &value, max_age, headers), value))
}

/// `Set-Cookie` that removes the session cookie.
pub fn clear_session_cookie(headers: &HeaderMap) -> String {
    cookies::set(SESSION_COOKIE, "", 0, headers)
}

/// The `Set-Cookie` header name, for handlers that set one.
pub const SET_COOKIE: header::HeaderName = header::SET_COOKIE;
