//! Members and tokens: owners invite people with a role, change roles, remove members, create and
//! revoke API tokens for robots and planners, and rename the team. Others see who is in the team.

use super::error::{PageError, PageQuery};
use super::render::{Chrome, ok, page, redirect_flash, render, when};
use super::session::{CsrfForm, Signed};
use crate::service::auth::Role;
use crate::service::team::{self, INVITE_DAYS};
use crate::service::{AppState, ServiceError};
use askama::Template;
use axum::extract::{Path, State};
use axum::http::{HeaderMap, StatusCode};
use axum::response::Response;
use serde::Deserialize;

struct MemberLine {
    person_id: String,
    login: String,
    display_name: String,
    role: Role,
    joined: String,
    is_me: bool,
}

struct InviteLine {
    id: String,
    role: Role,
    note: String,
    by: String,
    expires: String,
}

struct TokenLine {
    id: String,
    label: String,
    role: Role,
    created: String,
    revoked: Option<String>,
}

#[derive(Template)]
#[template(path = "team.html")]
struct TeamPage {
    chrome: Chrome,
    members: Vec<MemberLine>,
    invites: Vec<InviteLine>,
    tokens: Vec<TokenLine>,
    is_owner: bool,
    roles: [&'static str; 3],
}

/// Shown once, right after it is made: an invite link or an API token.
#[derive(Template)]
#[template(path = "secret.html")]
struct SecretPage {
    chrome: Chrome,
    heading: String,
    what: String,
    secret: String,
    advice: String,
}

page!(TeamPage, SecretPage);

/// `GET /team`.
pub(super) async fn team(
    State(state): State<AppState>,
    headers: HeaderMap,
    signed: Signed,
) -> Result<Response, PageError> {
    let overview = team::overview(&state, &signed.who).await?;
    let members = overview
        .members
        .into_iter()
        .map(|m| MemberLine {
            is_me: m.person_id == signed.info.person_id,
            person_id: m.person_id,
            login: m.login,
            display_name: m.display_name,
            role: m.role,
            joined: when(m.joined_at),
        })
        .collect();
    let invites = overview
        .invites
        .into_iter()
        .map(|i| InviteLine {
            id: i.id,
            role: i.role,
            note: i.note,
            by: i.created_by,
            expires: when(i.expires_at),
        })
        .collect();
    let tokens = overview
        .tokens
        .into_iter()
        .map(|t| TokenLine {
            id: t.id,
            label: t.label,
            role: t.role,
            created: when(t.created_at),
            revoked: t.revoked_at.map(when),
        })
        .collect();
    let page = TeamPage {
        chrome: Chrome::signed(&state, &signed, &headers, "team").await,
        members,
        invites,
        tokens,
        is_owner: signed.is_owner(),
        roles: ["viewer", "editor", "owner"],
    };
    Ok(ok(&page))
}

fn parse_role(raw: &str) -> Result<Role, PageError> {
    Role::parse(raw).ok_or_else(|| PageError::BadRequest(format!("{raw:?} is not a role")))
}

#[derive(Deserialize)]
pub(super) struct InviteForm {
    role: String,
    #[serde(default)]
    note: String,
}

/// `POST /team/invites`: a one-time link, shown once.
pub(super) async fn invite(
    State(state): State<AppState>,
    headers: HeaderMap,
    CsrfForm { signed, form }: CsrfForm<InviteForm>,
) -> Result<Response, PageError> {
    let role = parse_role(&form.role)?;
    let (secret, note) = team::invite(&state, &signed.who, role, &form.note).await?;
    let page = SecretPage {
        chrome: Chrome::signed(&state, &signed, &headers, "team").await,
        heading: "Invitation link".into(),
        what: format!(
            "Send this link to {} privately. It makes them a {} of {} and works once, for {INVITE_DAYS} days.",
            if note.is_empty() { "the new member".to_string() } else { note.clone() },
            role.as_str(),
            signed.info.team_name
        ),
        secret: format!("{}/welcome/{secret}", state.security.link_base(Some(&headers))),
        advice: "This page is the only time the link is shown. You can withdraw it on the members page until it is used.".into(),
    };
    Ok(render(StatusCode::CREATED, &page))
}

/// `POST /team/invites/{id}/withdraw`.
pub(super) async fn withdraw_invite(
    State(state): State<AppState>,
    headers: HeaderMap,
    Path(id): Path<String>,
    CsrfForm { signed, .. }: CsrfForm<serde::de::IgnoredAny>,
) -> Result<Response, PageError> {
    let done = team::withdraw_invite(&state, &signed.who, &id).await?;
    Ok(if done {
        redirect_flash("/team", "Invitation withdrawn.", false, &headers)
    } else {
        redirect_flash(
            "/team",
            "That invitation was already used or withdrawn.",
            true,
            &headers,
        )
    })
}

#[derive(Deserialize)]
pub(super) struct RoleForm {
    role: String,
}

/// `POST /team/members/{id}/role`.
pub(super) async fn set_role(
    State(state): State<AppState>,
    headers: HeaderMap,
    Path(person): Path<String>,
    CsrfForm { signed, form }: CsrfForm<RoleForm>,
) -> Result<Response, PageError> {
    let role = parse_role(&form.role)?;
    let done = team::set_role(&state, &signed.who, &person, role).await?;
    Ok(if done {
        redirect_flash(
            "/team",
            &format!("Role changed to {}.", role.as_str()),
            false,
            &headers,
        )
    } else {
        redirect_flash(
            "/team",
            "The role was not changed: a team keeps at least one owner.",
            true,
            &headers,
        )
    })
}

/// `POST /team/members/{id}/remove`: also ends their sessions in this team at once.
pub(super) async fn remove_member(
    State(state): State<AppState>,
    headers: HeaderMap,
    Path(person): Path<String>,
    CsrfForm { signed, .. }: CsrfForm<serde::de::IgnoredAny>,
) -> Result<Response, PageError> {
    let done = team::remove_member(&state, &signed.who, &person).await?;
    Ok(if done {
        redirect_flash("/team", "Member removed.", false, &headers)
    } else {
        redirect_flash(
            "/team",
            "Nobody was removed: a team keeps at least one owner.",
            true,
            &headers,
        )
    })
}

#[derive(Deserialize)]
pub(super) struct TokenForm {
    label: String,
    role: String,
}

/// `POST /team/tokens`: a new API token, shown once.
pub(super) async fn create_token(
    State(state): State<AppState>,
    headers: HeaderMap,
    CsrfForm { signed, form }: CsrfForm<TokenForm>,
) -> Result<Response, PageError> {
    let role = parse_role(&form.role)?;
    let made = match team::create_token(&state, &signed.who, role, &form.label).await {
        Ok(t) => t,
        Err(e @ ServiceError::Invalid { .. }) => {
            return Ok(redirect_flash(
                "/team#tokens",
                &format!("{e}, saying which robot or planner holds it."),
                true,
                &headers,
            ));
        }
        Err(e) => return Err(e.into()),
    };
    let label = &made.label;
    let page = SecretPage {
        chrome: Chrome::signed(&state, &signed, &headers, "team").await,
        heading: "New API token".into(),
        what: format!(
            "Token “{label}” acts as a {} of {}. Send it as Authorization: Bearer TOKEN.",
            role.as_str(),
            signed.info.team_name
        ),
        secret: made.token,
        advice: "Copy it now: only its hash is stored, so this page is the only time it is shown. Revoke it on the members page when the robot or planner no longer needs it.".into(),
    };
    Ok(render(StatusCode::CREATED, &page))
}

/// `POST /team/tokens/{id}/revoke`.
pub(super) async fn revoke_token(
    State(state): State<AppState>,
    headers: HeaderMap,
    Path(id): Path<String>,
    CsrfForm { signed, .. }: CsrfForm<serde::de::IgnoredAny>,
) -> Result<Response, PageError> {
    let done = team::revoke_token(&state, &signed.who, &id).await?;
    Ok(if done {
        redirect_flash(
            "/team#tokens",
            "Token revoked; it stops working at once.",
            false,
            &headers,
        )
    } else {
        redirect_flash(
            "/team#tokens",
            "That token was already revoked.",
            true,
            &headers,
        )
    })
}

#[derive(Deserialize)]
pub(super) struct RenameForm {
    name: String,
}

/// `POST /team/name`.
pub(super) async fn rename(
    State(state): State<AppState>,
    headers: HeaderMap,
    CsrfForm { signed, form }: CsrfForm<RenameForm>,
) -> Result<Response, PageError> {
    match team::rename(&state, &signed.who, &form.name).await {
        Ok(name) => Ok(redirect_flash(
            "/team",
            &format!("The team is now called {name}."),
            false,
            &headers,
        )),
        Err(e @ ServiceError::Invalid { .. }) => {
            Ok(redirect_flash("/team", &format!("{e}."), true, &headers))
        }
        Err(ServiceError::Conflict(_)) => Ok(redirect_flash(
            "/team",
            "Another team already has that name.",
            true,
            &headers,
        )),
        Err(e) => Err(e.into()),
    }
}

/// The audit log as the page shows it.
#[derive(Template)]
#[template(path = "changes.html")]
struct ChangesPage {
    chrome: Chrome,
    entries: Vec<crate::service::audit::AuditEntry>,
    older: Option<String>,
    first: bool,
}

page!(ChangesPage);

#[derive(Deserialize)]
pub(super) struct ChangesQuery {
    before: Option<String>,
}

/// `GET /team/changes[?before=]`: the audit log, 50 entries a page, for owners.
pub(super) async fn changes(
    State(state): State<AppState>,
    headers: HeaderMap,
    signed: Signed,
    PageQuery(q): PageQuery<ChangesQuery>,
) -> Result<Response, PageError> {
    signed.require(Role::Owner)?;
    let (entries, next) =
        crate::service::audit::list(&state, &signed.who, q.before.as_deref(), Some(50)).await?;
    let page = ChangesPage {
        chrome: Chrome::signed(&state, &signed, &headers, "team").await,
        entries,
        older: next.map(|n| {
            percent_encoding::utf8_percent_encode(&n, percent_encoding::NON_ALPHANUMERIC)
                .to_string()
        }),
        first: q.before.is_none(),
    };
    Ok(ok(&page))
}
