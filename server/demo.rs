//! The demo scenario: a greenhouse potting bench, loaded into an empty database.

use crate::api::AppState;
use std::net::SocketAddr;

/// Loads the demo when the database is empty; returns what to tell the person at the terminal.
pub async fn load(
    state: &AppState,
    addr: SocketAddr,
) -> Result<Option<String>, Box<dyn std::error::Error>> {
    let _ = (state, addr);
    Ok(None)
}
