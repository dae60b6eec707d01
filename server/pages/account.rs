//! Signing in and out, accepting an invite, changing one's password, switching teams.

use super::error::{PageError, safe_next};
use super::render::{Chrome, ok, page, redirect, redirect_flash};
use super::session::{
    CsrfForm, MIN_PASSWORD_CHARS, PreForm, SET_COOKIE, Signed, clear_session_cookie, form_cookie,
    hash_password, start_session, verify_password,
};
use crate::api::AppState;
use crate::api::auth::{self, hash_token};
use crate::security::ClientAddr;
use crate::store::{self, accounts::InviteRow};
use askama::Template;
use axum::extract::{Path, Query, State};
use axum::http::{HeaderMap, HeaderValue};
use axum::response::Response;
use goalsmith_core::names::{self, NameKind};
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
    Query(q): Query<NextQuery>,
) -> Result<Response, PageError> {
    let next = safe_next(q.next.as_deref().unwrap_or("/")).to_string();
    if auth::session_of(&headers, &state).await?.is_some() {
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

/// Ends the session the browser's cookie names, if any: signing in (or joining a team) always
/// starts a new session rather than carrying on one the browser already had.
async fn end_current_session(state: &AppState, headers: &HeaderMap) -> Result<(), PageError> {
    if let Some(old) = auth::session_of(headers, state).await? {
        store::accounts::delete_session(state.store.pool(), &old.id).await?;
    }
    Ok(())
}

/// `POST /signin`: throttled per login and per client address (429 before any hashing).
pub(super) async fn signin(
    State(state): State<AppState>,
    headers: HeaderMap,
    client: ClientAddr,
    PreForm(form): PreForm<SignInForm>,
) -> Result<Response, PageError> {
    let login = form.login.trim().to_lowercase();
    let next = safe_next(&form.next).to_string();
    state.security.sign_in_attempt(&login, &client)?;
    let person = store::accounts::find_person_by_login(state.store.pool(), &login).await?;
    let ok = match verify_password(
        &state,
        form.password,
        person.as_ref().map(|p| p.password_hash.clone()),
    )
    .await
    {
        Ok(ok) => ok,
        Err(busy @ PageError::Busy { .. }) => {
            state.security.attempt_not_run(&login, &client);
            return Err(busy);
        }
        Err(e) => return Err(e),
    };
    let back = format!("/signin?next={}", super::error::percent_encode(&next));
    let Some(person) = person.filter(|_| ok) else {
        tracing::info!(login = %login, "sign-in refused");
        return Ok(redirect_flash(
            &back,
            "That login and password do not match an account.",
            true,
            &headers,
        ));
    };
    state.security.signed_in(&login);
    let teams = store::accounts::memberships_of(state.store.pool(), &person.id).await?;
    let Some(team) = teams.first() else {
        return Ok(redirect_flash(
            &back,
            "This account no longer belongs to any team; ask an owner for a new invite.",
            true,
            &headers,
        ));
    };
    end_current_session(&state, &headers).await?;
    let session = start_session(&state, &person.id, &team.team_id, &headers).await?;
    Ok(with_cookie(redirect(&next), &session.cookie))
}

/// `POST /signout`.
pub(super) async fn signout(
    State(state): State<AppState>,
    headers: HeaderMap,
    CsrfForm { signed, .. }: CsrfForm<serde::de::IgnoredAny>,
) -> Result<Response, PageError> {
    store::accounts::delete_session(state.store.pool(), &signed.info.id).await?;
    let resp = redirect_flash("/signin", "You are signed out.", false, &headers);
    Ok(with_cookie(resp, &clear_session_cookie(&headers)))
}

async fn live_invite(state: &AppState, token: &str) -> Result<InviteRow, PageError> {
    store::accounts::find_invite(state.store.pool(), &hash_token(token))
        .await?
        .ok_or_else(|| {
            PageError::NotFound(
                "This invitation link was already used, was withdrawn, or has expired. Ask an \
                 owner of the team for a new one."
                    .into(),
            )
        })
}

/// `GET /welcome/{token}`.
pub(super) async fn welcome_form(
    State(state): State<AppState>,
    headers: HeaderMap,
    Path(token): Path<String>,
) -> Result<Response, PageError> {
    let invite = live_invite(&state, &token).await?;
    let current = auth::session_of(&headers, &state)
        .await?
        .map(|s| s.display_name);
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
    if password.len() > 1024 {
        return Err("a password may have at most 1024 bytes".into());
    }
    if password != again {
        return Err("the two passwords differ".into());
    }
    Ok(())
}

/// `POST /welcome/{token}`: creates the account (or uses the signed-in one) and joins the team.
pub(super) async fn welcome(
    State(state): State<AppState>,
    headers: HeaderMap,
    Path(token): Path<String>,
    PreForm(form): PreForm<WelcomeForm>,
) -> Result<Response, PageError> {
    let invite = live_invite(&state, &token).await?;
    let back = format!("/welcome/{}", super::error::percent_encode(&token));
    let fail = |m: &str| Ok(redirect_flash(&back, m, true, &headers));
    let person_id = if form.join_existing.is_some() {
        let Some(current) = auth::session_of(&headers, &state).await? else {
            return fail("Sign in first to join with an existing account.");
        };
        store::accounts::accept_invite(
            state.store.pool(),
            &invite.id,
            Some(&current.person_id),
            None,
        )
        .await?
    } else {
        let display_name = match check_display_name(&form.display_name) {
            Ok(n) => n,
            Err(m) => return fail(&m),
        };
        let login = match check_login(&form.login) {
            Ok(l) => l,
            Err(m) => return fail(m),
        };
        if let Err(m) = check_new_password(&form.password, &form.password_again) {
            return fail(&m);
        }
        if store::accounts::find_person_by_login(state.store.pool(), &login)
            .await?
            .is_some()
        {
            return fail(
                "That login is taken. If it is yours, sign in first and open this link again to \
                 join with your account.",
            );
        }
        let hash = hash_password(&state, form.password).await?;
        match store::accounts::accept_invite(
            state.store.pool(),
            &invite.id,
            None,
            Some((&login, &display_name, &hash)),
        )
        .await
        {
            Ok(p) => p,
            Err(store::StoreError::Constraint(_)) => {
                return fail("That login was taken a moment ago; choose another.");
            }
            Err(e) => return Err(e.into()),
        }
    };
    let Some(person_id) = person_id else {
        return Err(PageError::NotFound(
            "This invitation link was used a moment ago by someone else.".into(),
        ));
    };
    end_current_session(&state, &headers).await?;
    let session = start_session(&state, &person_id, &invite.team_id, &headers).await?;
    let text = format!(
        "Welcome to {}. You are {} of this team.",
        invite.team_name,
        with_article(&invite.role)
    );
    let resp = redirect_flash("/", &text, false, &headers);
    Ok(with_cookie(resp, &session.cookie))
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
    let fail = |m: &str| Ok(redirect_flash("/account", m, true, &headers));
    let person = store::accounts::get_person(state.store.pool(), &signed.info.person_id)
        .await?
        .ok_or_else(|| PageError::internal("signed-in person vanished"))?;
    state.security.sign_in_attempt(&person.login, &client)?;
    let right = match verify_password(&state, form.current, Some(person.password_hash)).await {
        Ok(right) => right,
        Err(busy @ PageError::Busy { .. }) => {
            state.security.attempt_not_run(&person.login, &client);
            return Err(busy);
        }
        Err(e) => return Err(e),
    };
    if !right {
        return fail("The current password is not right.");
    }
    state.security.signed_in(&person.login);
    if let Err(m) = check_new_password(&form.password, &form.password_again) {
        return fail(&m);
    }
    let hash = hash_password(&state, form.password).await?;
    store::accounts::set_password(state.store.pool(), &person.id, &hash).await?;
    let session = start_session(&state, &person.id, &signed.info.team_id, &headers).await?;
    store::accounts::delete_other_sessions(state.store.pool(), &person.id, &session.id).await?;
    let resp = redirect_flash(
        "/account",
        "Password changed. Other browsers signed in as you were signed out.",
        false,
        &headers,
    );
    Ok(with_cookie(resp, &session.cookie))
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
    let teams = store::accounts::memberships_of(state.store.pool(), &signed.info.person_id).await?;
    let Some(team) = teams.iter().find(|t| t.team_id == form.team_id) else {
        return Err(PageError::Forbidden(
            "you are not a member of that team".into(),
        ));
    };
    store::accounts::switch_team(state.store.pool(), &signed.info.id, &team.team_id).await?;
    let text = format!("Now working in {}.", team.team_name);
    Ok(redirect_flash("/", &text, false, &headers))
}

/// "an owner", "an editor", "a viewer".
fn with_article(role: &str) -> String {
    match role.chars().next() {
        Some('a' | 'e' | 'i' | 'o' | 'u') => format!("an {role}"),
        _ => format!("a {role}"),
    }
}
