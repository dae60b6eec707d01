//! The service layer: the application state, who is asking and what they may do, and every
//! operation a person or a planner can ask for.
//!
//! Each operation takes typed input and a [`auth::Principal`], and returns typed results or one
//! [`error::ServiceError`]. The two edges, `api` (JSON for planners and scripts) and `pages`
//! (HTML for people), translate HTTP to and from these calls and import nothing from each other.
//! Below this layer sit the store (SQL, typed rows, its own errors), `scoring` (cost results,
//! bundles, overlays) and the core crate (geometry and costs).

pub mod accounts;
pub mod audit;
pub mod auth;
pub mod byte_lru;
pub mod cameras;
pub mod demos;
pub mod error;
pub mod export;
pub mod frames;
pub mod goal_sets;
pub mod goals;
pub mod heavy;
pub mod metrics;
pub mod operations;
pub mod outcomes;
pub mod revision_cache;
pub mod reward_fits;
pub mod team;
pub mod tracks;

use crate::config::Limits;
use crate::store::Store;
use std::sync::Arc;

pub use error::{ServiceError, ServiceResult};

/// Shared by every request of either edge.
#[derive(Clone)]
pub struct AppState {
    /// The database.
    pub store: Store,
    /// Body and image limits.
    pub limits: Arc<Limits>,
    /// Checked goals and cost models of recently scored revisions (revisions never change).
    pub models: Arc<export::ModelCache>,
    /// Sign-in throttles, the password-hash bound, the form-token key and the link base.
    pub security: Arc<crate::security::Security>,
    /// Permits for heavy work (see [`heavy`]), shared by every request.
    pub heavy_permits: Arc<heavy::Heavy>,
    /// Grey-level pyramids of demo frames, built once and shared by every track of a demo.
    pub pyramids: Arc<tracks::PyramidCache>,
    /// Request counts and latencies for `/metrics`.
    pub metrics: Arc<metrics::Metrics>,
    /// Recently read revisions (immutable), bounded by bytes.
    pub revisions: Arc<revision_cache::RevisionCache>,
}

/// RFC 3339 UTC with milliseconds, from unix milliseconds.
pub fn rfc3339(ms: i64) -> String {
    let t = time::OffsetDateTime::from_unix_timestamp_nanos(i128::from(ms) * 1_000_000)
        .unwrap_or(time::OffsetDateTime::UNIX_EPOCH);
    let format = time::macros::format_description!(
        "[year]-[month]-[day]T[hour]:[minute]:[second].[subsecond digits:3]Z"
    );
    t.format(&format).unwrap_or_default()
}

/// Parses a UUID id, so malformed ids are a plain 404 rather than a database round trip.
pub fn parse_id(raw: &str, what: &str) -> ServiceResult<String> {
    uuid::Uuid::parse_str(raw)
        .map(|u| u.to_string())
        .map_err(|_| ServiceError::NotFound(format!("no {what} with id {raw:?}")))
}

/// Parses a frame number of a path (from 0): canonical decimals only (`0`, `12`; not `01` or
/// `+1`), so one frame has one URL; anything else is a 404.
pub fn parse_frame_index(raw: &str) -> ServiceResult<i64> {
    Some(raw)
        .filter(|s| !s.is_empty() && s.bytes().all(|b| b.is_ascii_digit()))
        .filter(|s| *s == "0" || !s.starts_with('0'))
        .and_then(|s| s.parse::<i64>().ok())
        .ok_or_else(|| ServiceError::NotFound(format!("{raw:?} is not a frame number")))
}
