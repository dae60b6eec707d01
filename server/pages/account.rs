//! Signing in and out, accepting an invite, changing one's password, switching teams.

use super::error::{PageError, PageQuery, safe_next};
use super::render::{Chrome, ok, page, redirect, redirect_flash};
use super::session::{
    CsrfForm, PreForm, SET_COOKIE, Signed, clear_session_cookie, form_cookie, session_cookie,
    session_secret,
};
use crate::security::ClientAddr;
use crate::service::accounts::{self, Joiner, MIN_PASSWORD_CHARS, SignIn};
use crate::service::audit::AuditSlot;
use crate::service::{AppState, ServiceError, auth};
use crate::store::accounts::InviteRow;
use askama::Template;
use axum::extract::{Path, State};
use axum::http::{HeaderMap, HeaderValue};
use axum::response::Response;
use serde::Deserialize;

#[derive(Template)]
#[template(path = "signin.html")]
struct SignInPage {
    chrome: Chrome,
    form_token: String,
    next: String,
}

#[derive(Template)]
#[template(path = "welcome.html")]
struct WelcomePage {
    chrome: Chrome,
    form_token: String,
    token: String,
    invite: InviteRow,
    /// Set when a session already exists: that person may join with their account.
    current: Option<String>,
}

#[derive(Template)]
#[template(path = "account.html")]
struct AccountPage {
    chrome: Chrome,
    login: String,
    min_chars: usize,
}

page!(SignInPage, WelcomePage, AccountPage);

fn with_cookie(mut resp: Response, cookie: &str) -> Response {
    if let Ok(v) = HeaderValue::from_str(cookie) {
        resp.headers_mut().append(SET_COOKIE, v);
    }
    resp
}

#[derive(Deserialize)]
pub(super) struct NextQuery {
    #[serde(default)]
    next: Option<String>,
}

/// `GET /signin`.
pub(super) async fn signin_form(
    State(state): State<AppState>,
    headers: HeaderMap,
    PageQuery(q): PageQuery<NextQuery>,
) -> Result<Response, PageError> {
    let next = safe_next(q.next.as_deref().unwrap_or("/")).to_string();
    if let Some(secret) = session_secret(&headers)
        && auth::session_for_secret(&state, &secret).await?.is_some()
    {
        return Ok(redirect(&next));
    }
    let (cookie, form_token) = form_cookie(&state, &headers)?;
    let page = SignInPage {
        chrome: Chrome::anonymous(&headers),
        form_token,
        next,
    };
    Ok(with_cookie(ok(&page), &cookie))
}

#[derive(Deserialize)]
pub(super) struct SignInForm {
    login: String,
    password: String,
    #[serde(default)]
    next: String,
}

/// `POST /signin`: throttled per login and per client address (429 before any hashing).
pub(super) async fn signin(
    State(state): State<AppState>,
    headers: HeaderMap,
    client: ClientAddr,
    slot: Option<axum::Extension<AuditSlot>>,
    PreForm(form): PreForm<SignInForm>,
) -> Result<Response, PageError> {
    let next = safe_next(&form.next).to_string();
    let current = session_secret(&headers);
    let back = format!("/signin?next={}", super::error::percent_encode(&next));
    let outcome = accounts::sign_in(
        &state,
        &form.login,
        form.password,
        &client,
        current.as_deref(),
    )
    .await?;
    match outcome {
        SignIn::Refused => Ok(redirect_flash(
            &back,
            "That login and password do not match an account.",
            true,
            &headers,
        )),
        SignIn::NoTeam => Ok(redirect_flash(
            &back,
            "This account no longer belongs to any team; ask an owner for a new invite.",
            true,
            &headers,
        )),
        SignIn::Started(session) => {
            audit_session(&state, slot, &session.secret).await;
            Ok(with_cookie(
                redirect(&next),
                &session_cookie(&session, &headers),
            ))
        }
    }
}

/// `POST /signout`.
pub(super) async fn signout(
    State(state): State<AppState>,
    headers: HeaderMap,
    CsrfForm { signed, .. }: CsrfForm<serde::de::IgnoredAny>,
) -> Result<Response, PageError> {
    accounts::sign_out(&state, &signed.info).await?;
    let resp = redirect_flash("/signin", "You are signed out.", false, &headers);
    Ok(with_cookie(resp, &clear_session_cookie(&headers)))
}

/// `GET /welcome/{token}`.
pub(super) async fn welcome_form(
    State(state): State<AppState>,
    headers: HeaderMap,
    Path(token): Path<String>,
) -> Result<Response, PageError> {
    let invite = accounts::live_invite(&state, &token).await?;
    let current = match session_secret(&headers) {
        Some(secret) => auth::session_for_secret(&state, &secret)
            .await?
            .map(|s| s.display_name),
        None => None,
    };
    let (cookie, form_token) = form_cookie(&state, &headers)?;
    let page = WelcomePage {
        chrome: Chrome::anonymous(&headers),
        form_token,
        token,
        invite,
        current,
    };
    Ok(with_cookie(ok(&page), &cookie))
}

#[derive(Deserialize)]
pub(super) struct WelcomeForm {
    #[serde(default)]
    join_existing: Option<String>,
    #[serde(default)]
    display_name: String,
    #[serde(default)]
    login: String,
    #[serde(default)]
    password: String,
    #[serde(default)]
    password_again: String,
}

/// `POST /welcome/{token}`: creates the account (or uses the signed-in one) and joins the team.
pub(super) async fn welcome(
    State(state): State<AppState>,
    headers: HeaderMap,
    Path(token): Path<String>,
    slot: Option<axum::Extension<AuditSlot>>,
    PreForm(form): PreForm<WelcomeForm>,
) -> Result<Response, PageError> {
    let back = format!("/welcome/{}", super::error::percent_encode(&token));
    let current = session_secret(&headers);
    let joiner = if form.join_existing.is_some() {
        match current.as_deref() {
            Some(secret) => Joiner::Signed(secret),
            None => {
                return Ok(redirect_flash(
                    &back,
                    "Sign in first to join with an existing account.",
                    true,
                    &headers,
                ));
            }
        }
    } else {
        Joiner::New {
            display_name: &form.display_name,
            login: &form.login,
            password: form.password,
            password_again: &form.password_again,
        }
    };
    let joined = match accounts::accept_invite(&state, &token, joiner, current.as_deref()).await {
        Ok(j) => j,
        Err(e @ ServiceError::Invalid { .. }) => {
            return Ok(redirect_flash(&back, &e.to_string(), true, &headers));
        }
        Err(e) => return Err(e.into()),
    };
    let text = format!(
        "Welcome to {}. You are {} of this team.",
        joined.invite.team_name,
        with_article(joined.invite.role.as_str())
    );
    audit_session(&state, slot, &joined.session.secret).await;
    let resp = redirect_flash("/", &text, false, &headers);
    Ok(with_cookie(
        resp,
        &session_cookie(&joined.session, &headers),
    ))
}

/// `GET /account`.
pub(super) async fn account(
    State(state): State<AppState>,
    headers: HeaderMap,
    signed: Signed,
) -> Result<Response, PageError> {
    let page = AccountPage {
        chrome: Chrome::signed(&state, &signed, &headers, "account").await,
        login: signed.info.login.clone(),
        min_chars: MIN_PASSWORD_CHARS,
    };
    Ok(ok(&page))
}

#[derive(Deserialize)]
pub(super) struct PasswordForm {
    current: String,
    password: String,
    password_again: String,
}

/// `POST /account/password`: needs the current password (throttled like sign-in, so a borrowed
/// session cannot guess it); ends all the person's sessions, this one included, and continues
/// in a new one with a new cookie.
pub(super) async fn change_password(
    State(state): State<AppState>,
    headers: HeaderMap,
    client: ClientAddr,
    CsrfForm { signed, form }: CsrfForm<PasswordForm>,
) -> Result<Response, PageError> {
    let session = match accounts::change_password(
        &state,
        &signed.info,
        &client,
        form.current,
        form.password,
        &form.password_again,
    )
    .await
    {
        Ok(s) => s,
        Err(e @ ServiceError::Invalid { .. }) => {
            return Ok(redirect_flash("/account", &e.to_string(), true, &headers));
        }
        Err(e) => return Err(e.into()),
    };
    let resp = redirect_flash(
        "/account",
        "Password changed. Other browsers signed in as you were signed out.",
        false,
        &headers,
    );
    Ok(with_cookie(resp, &session_cookie(&session, &headers)))
}

#[derive(Deserialize)]
pub(super) struct SwitchForm {
    team_id: String,
}

/// `POST /account/team`: work in another team one belongs to.
pub(super) async fn switch_team(
    State(state): State<AppState>,
    headers: HeaderMap,
    CsrfForm { signed, form }: CsrfForm<SwitchForm>,
) -> Result<Response, PageError> {
    let name = accounts::switch_team(&state, &signed.info, &form.team_id).await?;
    let text = format!("Now working in {name}.");
    Ok(redirect_flash("/", &text, false, &headers))
}

/// "an owner", "an editor", "a viewer".
fn with_article(role: &str) -> String {
    match role.chars().next() {
        Some('a' | 'e' | 'i' | 'o' | 'u') => format!("an {role}"),
        _ => format!("a {role}"),
    }
}

/// A sign-in or a join is made before anyone is identified: name the new session's person in
/// the audit log's entry.
async fn audit_session(state: &AppState, slot: Option<axum::Extension<AuditSlot>>, secret: &str) {
    let Some(axum::Extension(slot)) = slot else {
        return;
    };
    if let Ok(Some(info)) = auth::session_for_secret(state, secret).await {
        slot.fill(
            &auth::session_principal(&info),
            "session",
            &auth::session_actor(&info),
        );
    }
}
