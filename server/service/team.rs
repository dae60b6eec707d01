//! A team's members, invitations and API tokens, and its name: what owners manage.

use super::AppState;
use super::auth::{self, Principal, Role, hash_token};
use super::error::{ServiceError, ServiceResult};
use crate::store::{self, StoreError};
use goalsmith_core::names::{self, NameKind};

/// How long an invite link stays valid.
pub const INVITE_DAYS: i64 = 7;
/// Longest note on an invitation, in characters (longer notes are cut).
pub const MAX_INVITE_NOTE_CHARS: usize = 200;

/// Who is in the team, and for owners its pending invitations and tokens.
pub struct Overview {
    /// Members, owners first.
    pub members: Vec<store::accounts::MemberRow>,
    /// Pending invitations (owners only; empty for others).
    pub invites: Vec<store::accounts::InviteRow>,
    /// Tokens, revoked ones included (owners only; empty for others).
    pub tokens: Vec<store::accounts::TokenListRow>,
}

/// The team of `who`, as far as its role may see.
pub async fn overview(state: &AppState, who: &Principal) -> ServiceResult<Overview> {
    let members = store::accounts::list_members(&state.store, &who.team_id).await?;
    let (invites, tokens) = if who.role >= Role::Owner {
        (
            store::accounts::pending_invites(&state.store, &who.team_id).await?,
            store::accounts::list_tokens(&state.store, &who.team_id).await?,
        )
    } else {
        (Vec::new(), Vec::new())
    };
    Ok(Overview {
        members,
        invites,
        tokens,
    })
}

/// A new invitation: a one-time secret (shown once; only its hash is stored) that makes its
/// holder a member with `role`. Returns the secret and the note as kept.
pub async fn invite(
    state: &AppState,
    who: &Principal,
    role: Role,
    note: &str,
) -> ServiceResult<(String, String)> {
    who.require(Role::Owner)?;
    let note: String = note.trim().chars().take(MAX_INVITE_NOTE_CHARS).collect();
    let secret = auth::random_secret()?;
    store::accounts::create_invite(
        &state.store,
        &store::accounts::NewInvite {
            team_id: &who.team_id,
            token_hash: &hash_token(&secret),
            role,
            kind: "invite",
            note: &note,
            created_by: &who.author,
            expires_at: store::now_ms() + INVITE_DAYS * 24 * 3600 * 1000,
        },
    )
    .await?;
    Ok((secret, note))
}

/// Withdraws a pending invitation; `false` when it was already used or withdrawn.
pub async fn withdraw_invite(state: &AppState, who: &Principal, id: &str) -> ServiceResult<bool> {
    who.require(Role::Owner)?;
    Ok(store::accounts::revoke_invite(&state.store, &who.team_id, id).await?)
}

/// Changes a member's role; `false` when that would leave the team without an owner.
pub async fn set_role(
    state: &AppState,
    who: &Principal,
    person_id: &str,
    role: Role,
) -> ServiceResult<bool> {
    who.require(Role::Owner)?;
    Ok(store::accounts::set_role(&state.store, &who.team_id, person_id, role).await?)
}

/// Removes a member (their sessions in this team end at once); `false` when that would leave
/// the team without an owner.
pub async fn remove_member(
    state: &AppState,
    who: &Principal,
    person_id: &str,
) -> ServiceResult<bool> {
    who.require(Role::Owner)?;
    Ok(store::accounts::remove_member(&state.store, &who.team_id, person_id).await?)
}

/// A new API token of the team (shown once; only its hash is stored).
pub async fn create_token(
    state: &AppState,
    who: &Principal,
    role: Role,
    label: &str,
) -> ServiceResult<auth::NewToken> {
    who.require(Role::Owner)?;
    auth::create_team_token(&state.store, &who.team_id, role, label).await
}

/// Revokes a token; `false` when it was already revoked.
pub async fn revoke_token(state: &AppState, who: &Principal, id: &str) -> ServiceResult<bool> {
    who.require(Role::Owner)?;
    Ok(store::accounts::revoke_token(&state.store, &who.team_id, id).await?)
}

/// Renames the team by the team-name rule; 409 when another team has the name.
pub async fn rename(state: &AppState, who: &Principal, name: &str) -> ServiceResult<String> {
    who.require(Role::Owner)?;
    let name = names::check(NameKind::Team, name)
        .map_err(|e| ServiceError::invalid(e.code(), "name", e.to_string()))?;
    match store::accounts::rename_team(&state.store, &who.team_id, &name).await {
        Ok(()) => Ok(name),
        Err(StoreError::Unique(_)) => Err(ServiceError::Conflict(
            "another team already has that name".into(),
        )),
        Err(e) => Err(e.into()),
    }
}
