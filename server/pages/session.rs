//! Sessions for people: password hashing, cookies, the signed-in extractor and CSRF-checked forms.

use super::error::PageError;
use crate::api::AppState;
use crate::api::auth::{self, Principal, SESSION_COOKIE, same_secret};
use crate::store::{self, accounts::SessionInfo};
use argon2::password_hash::{PasswordHash, PasswordHasher, PasswordVerifier, SaltString};
use axum::extract::{FromRequest, FromRequestParts, Request};
use axum::http::{HeaderMap, header, request::Parts};
use serde::de::DeserializeOwned;

/// How long a sign-in lasts: a working week, so an operator signs in on Monday, not every shift.
pub const SESSION_DAYS: i64 = 7;
/// The short-lived cookie that ties the sign-in and welcome forms to the browser that loaded them
/// (double-submit), since those forms come before any session exists.
pub const FORM_COOKIE: &str = "gs_form";
/// Shortest password accepted.
pub const MIN_PASSWORD_CHARS: usize = 10;

/// Hashes a password with argon2id (the crate's defaults follow the OWASP minimum). CPU-bound
/// and ~19 MB each: runs on the blocking pool, in one of the few hashing slots (503 when none
/// frees up soon). The slot moves into the task, so it stays taken until the hash is done even
/// when the client gives up.
pub async fn hash_password(state: &AppState, password: String) -> Result<String, PageError> {
    let slot = state.security.hash_slot().await?;
    tokio::task::spawn_blocking(move || {
        let _slot = slot;
        let mut salt = [0u8; 16];
        getrandom::fill(&mut salt)
            .map_err(|e| PageError::internal(format!("no randomness: {e}")))?;
        let salt =
            SaltString::encode_b64(&salt).map_err(|e| PageError::internal(format!("salt: {e}")))?;
        argon2::Argon2::default()
            .hash_password(password.as_bytes(), &salt)
            .map(|h| h.to_string())
            .map_err(|e| PageError::internal(format!("argon2: {e}")))
    })
    .await
    .map_err(|e| PageError::internal(format!("hash task: {e}")))?
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
) -> Result<bool, PageError> {
    let slot = state.security.hash_slot().await?;
    tokio::task::spawn_blocking(move || {
        let _slot = slot;
        let known = hash.is_some();
        let stored = hash.unwrap_or_else(|| DUMMY_HASH.to_string());
        let parsed = PasswordHash::new(&stored)
            .map_err(|e| PageError::internal(format!("stored hash unreadable: {e}")))?;
        let ok = argon2::Argon2::default()
            .verify_password(password.as_bytes(), &parsed)
            .is_ok();
        Ok(ok && known)
    })
    .await
    .map_err(|e| PageError::internal(format!("verify task: {e}")))?
}

/// A new random secret, 32 bytes as hex.
pub fn random_secret() -> Result<String, PageError> {
    let mut bytes = [0u8; 32];
    getrandom::fill(&mut bytes).map_err(|e| PageError::internal(format!("no randomness: {e}")))?;
    Ok(hex::encode(bytes))
}

/// Whether the browser reached us over TLS: directly (an `https` URI) or through a proxy that
/// says so. Trusting the header can only make the cookie stricter, never looser.
pub fn over_tls(headers: &HeaderMap) -> bool {
    headers
        .get("x-forwarded-proto")
        .and_then(|v| v.to_str().ok())
        .is_some_and(|v| v.split(',').next().is_some_and(|p| p.trim() == "https"))
        || headers
            .get("forwarded")
            .and_then(|v| v.to_str().ok())
            .is_some_and(|v| v.to_ascii_lowercase().contains("proto=https"))
}

/// A `Set-Cookie` value: HttpOnly and SameSite=Strict always, Secure over TLS.
pub fn set_cookie(name: &str, value: &str, max_age_s: i64, headers: &HeaderMap) -> String {
    let secure = if over_tls(headers) { "; Secure" } else { "" };
    format!("{name}={value}; Path=/; Max-Age={max_age_s}; HttpOnly; SameSite=Strict{secure}")
}

/// A session just started: its `Set-Cookie` value and its id.
pub struct NewSession {
    /// The `Set-Cookie` header value.
    pub cookie: String,
    /// The session's id, to keep it when ending the person's others.
    pub id: String,
}

/// Starts a session for a person in a team, always with a new random secret (so a cookie planted
/// before sign-in is never the one in use after it).
pub async fn start_session(
    state: &AppState,
    person_id: &str,
    team_id: &str,
    headers: &HeaderMap,
) -> Result<NewSession, PageError> {
    let secret = random_secret()?;
    let csrf = random_secret()?;
    let max_age = SESSION_DAYS * 24 * 3600;
    let id = store::accounts::create_session(
        state.store.pool(),
        &store::accounts::NewSession {
            token_hash: &auth::hash_token(&secret),
            person_id,
            team_id,
            csrf_token: &csrf,
            expires_at: store::now_ms() + max_age * 1000,
        },
    )
    .await?;
    Ok(NewSession {
        cookie: set_cookie(SESSION_COOKIE, &secret, max_age, headers),
        id,
    })
}

/// A signed-in person. Pages that need one take this extractor; without a live session the
/// request is sent to the sign-in page (a redirect, not an error: that is what a person expects).
#[derive(Debug, Clone)]
pub struct Signed {
    /// The session and membership.
    pub info: SessionInfo,
    /// The same as an API principal, for calling the API's functions.
    pub who: Principal,
}

impl Signed {
    /// Refuses with a 403 page unless the role is at least `needed`.
    pub fn require(&self, needed: auth::Role) -> Result<(), PageError> {
        self.who.require(needed).map_err(PageError::from)
    }
    /// Whether this person may change goals, cameras and frames.
    pub fn can_edit(&self) -> bool {
        self.who.role >= auth::Role::Editor
    }
    /// Whether this person manages members and tokens.
    pub fn is_owner(&self) -> bool {
        self.who.role >= auth::Role::Owner
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
        let info = auth::session_of(&parts.headers, state)
            .await?
            .ok_or(PageError::SignIn { next })?;
        let who = auth::session_principal(&info)?;
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
        let expected = auth::cookie(req.headers(), FORM_COOKIE)
            .filter(|v| state.security.form_token_age(v).is_some())
            .unwrap_or("")
            .to_string();
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
    let media = crate::api::extract::media_type(&req);
    if media.as_deref() != Some("application/x-www-form-urlencoded") {
        return Err(PageError::UnsupportedMediaType(
            "this page takes an HTML form (application/x-www-form-urlencoded)".into(),
        ));
    }
    Ok(crate::api::extract::read_body(req, state).await?)
}

/// The form cookie and its value for a page that shows a pre-session form: the browser's own
/// while it is one we issued recently (so two open sign-in tabs both work), else a new one.
pub fn form_cookie(state: &AppState, headers: &HeaderMap) -> Result<(String, String), PageError> {
    let (value, max_age) = state
        .security
        .form_token_for(auth::cookie(headers, FORM_COOKIE))?;
    let max_age = i64::try_from(max_age).unwrap_or(3600);
    Ok((set_cookie(FORM_COOKIE, &value, max_age, headers), value))
}

/// `Set-Cookie` that removes the session cookie.
pub fn clear_session_cookie(headers: &HeaderMap) -> String {
    set_cookie(SESSION_COOKIE, "", 0, headers)
}

/// The `Set-Cookie` header name, for handlers that set one.
pub const SET_COOKIE: header::HeaderName = header::SET_COOKIE;
