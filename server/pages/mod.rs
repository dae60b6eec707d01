//! Server-rendered pages for people: sign-in, team home, the goal editor, history, goal sets.

use crate::api::AppState;
use axum::Router;
use std::net::SocketAddr;

/// The page routes (merged beside the API by `app`).
pub fn router() -> Router<AppState> {
    Router::new()
}

/// What to print at start-up for a person to sign in: a one-time link for the first owner of an
/// empty database, or of the demo team (`demo_team`) after `--demo`. `None` when people already
/// have accounts.
pub async fn startup_link(
    state: &AppState,
    addr: SocketAddr,
    demo_team: Option<&str>,
) -> Result<Option<String>, Box<dyn std::error::Error>> {
    let _ = (state, addr, demo_team);
    Ok(None)
}
