//! Outcomes: what happened when a revision was tried, and the tally per goal.

use super::auth::{Principal, Role};
use super::error::{ServiceError, ServiceResult};
use super::export::load;
use super::goals::{etag_of, load_revision};
use super::{AppState, rfc3339};
use crate::scoring;
use crate::store::{self, outcomes::OutcomeRow};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

/// Body of `POST …/outcomes`.
#[derive(Debug, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct OutcomeInput {
    /// Where each source point ended, `[x, y]` in pixels, in cost-map order (P entries).
    pub final_points: Vec<[f64; 2]>,
    /// At most 2000 characters.
    #[serde(default)]
    pub note: Option<String>,
}

/// An outcome as recorded.
// Fields in alphabetical order: the key order of these bodies when they were built as a
// `serde_json::Value` (a sorted map in release builds), so the served bytes did not change.
#[derive(Debug, Clone, Serialize, JsonSchema)]
pub struct OutcomeView {
    /// Who reported it.
    pub author: String,
    /// The goal's cost of the final positions.
    pub cost: f64,
    /// When it was reported, RFC 3339 UTC.
    pub created_at: String,
    /// The final positions as reported.
    pub final_points: Vec<[f64; 2]>,
    /// The goal.
    pub goal_id: String,
    /// Outcome id.
    pub id: String,
    /// Mean residual over the points, pixels.
    pub mean_residual_px: f64,
    /// The reporter's note ("" when none).
    pub note: String,
    /// Per point, in cost-map order.
    pub per_point: Vec<scoring::OutcomePoint>,
    /// The revision tried.
    pub revision: i64,
    /// Every point ended within its tolerance.
    pub success: bool,
}

/// Body of `GET /api/goals/{id}/outcomes`.
// Fields in alphabetical order: the key order of these bodies when they were built as a
// `serde_json::Value` (a sorted map in release builds), so the served bytes did not change.
#[derive(Debug, Clone, Serialize, JsonSchema)]
pub struct OutcomesView {
    /// The ETag of the goal's latest revision.
    pub latest_etag: String,
    /// The goal's latest revision number.
    pub latest_revision: i64,
    /// Every outcome of the goal, over all revisions.
    pub outcomes: Vec<OutcomeView>,
    /// Counts over those outcomes.
    pub summary: OutcomeSummary,
}

/// The `summary` of [`OutcomesView`].
#[derive(Debug, Clone, Serialize, JsonSchema)]
pub struct OutcomeSummary {
    /// Trials and successes per revision, by revision number.
    pub by_revision: Vec<RevisionTally>,
    /// Mean of the outcomes' mean residuals, pixels; null before the first trial.
    pub mean_residual_px: Option<f64>,
    /// successes / trials; null before the first trial.
    pub success_rate: Option<f64>,
    /// Outcomes that succeeded.
    pub successes: usize,
    /// Outcomes reported.
    pub trials: usize,
}

/// Trials of one revision.
#[derive(Debug, Clone, Serialize, JsonSchema)]
pub struct RevisionTally {
    /// The revision.
    pub revision: i64,
    /// Its outcomes that succeeded.
    pub successes: usize,
    /// Its outcomes.
    pub trials: usize,
}

/// Longest note of an outcome, in characters.
pub const MAX_NOTE_CHARS: usize = 2000;

/// Records an outcome of revision `n`: its success, residuals and cost against that revision.
pub async fn record(
    state: &AppState,
    who: &Principal,
    id: &str,
    n: &str,
    input: OutcomeInput,
) -> ServiceResult<OutcomeView> {
    who.require(Role::Editor)?;
    let note = input.note.unwrap_or_default();
    if note.chars().count() > MAX_NOTE_CHARS {
        return Err(ServiceError::invalid(
            "too_long",
            "note",
            format!("at most {MAX_NOTE_CHARS} characters"),
        ));
    }
    let l = load(state, who, id, n).await?;
    let result = scoring::outcome(l.spec(), l.model(), &input.final_points)?;
    let row = OutcomeRow {
        id: uuid::Uuid::new_v4().to_string(),
        goal_id: l.row.goal_id.clone(),
        revision: l.row.revision,
        final_points: serde_json::to_string(&input.final_points)
            .map_err(|e| ServiceError::Internal(e.to_string()))?,
        per_point: serde_json::to_string(&result.per_point)
            .map_err(|e| ServiceError::Internal(e.to_string()))?,
        success: result.success,
        cost: result.cost,
        mean_residual_px: result.mean_residual_px,
        note,
        author: who.author.clone(),
        created_at: store::now_ms(),
    };
    store::outcomes::insert(&state.store, &who.team_id, &row).await?;
    view(&row)
}

/// An outcome as served. Its points were stored by [`record`] from typed values, so a row that
/// does not parse back is corrupt, not a default.
fn view(o: &OutcomeRow) -> ServiceResult<OutcomeView> {
    let corrupt = |what: &str, e: serde_json::Error| {
        ServiceError::Internal(format!("outcome {} has unreadable {what}: {e}", o.id))
    };
    Ok(OutcomeView {
        author: o.author.clone(),
        cost: o.cost,
        created_at: rfc3339(o.created_at),
        final_points: serde_json::from_str(&o.final_points)
            .map_err(|e| corrupt("final_points", e))?,
        goal_id: o.goal_id.clone(),
        id: o.id.clone(),
        mean_residual_px: o.mean_residual_px,
        note: o.note.clone(),
        per_point: serde_json::from_str(&o.per_point).map_err(|e| corrupt("per_point", e))?,
        revision: o.revision,
        success: o.success,
    })
}

/// Every outcome of a goal, over all its revisions, and a success summary.
pub async fn list(state: &AppState, who: &Principal, id: &str) -> ServiceResult<OutcomesView> {
    let latest = load_revision(state, who, id, None).await?;
    let rows = store::outcomes::list(&state.store, &who.team_id, &latest.goal_id).await?;
    let trials = rows.len();
    let successes = rows.iter().filter(|o| o.success).count();
    let mean =
        (trials > 0).then(|| rows.iter().map(|o| o.mean_residual_px).sum::<f64>() / trials as f64);
    let mut per_revision = std::collections::BTreeMap::<i64, (usize, usize)>::new();
    for o in &rows {
        let e = per_revision.entry(o.revision).or_default();
        e.0 += 1;
        e.1 += usize::from(o.success);
    }
    Ok(OutcomesView {
        latest_etag: etag_of(&latest.document),
        latest_revision: latest.revision,
        outcomes: rows.iter().map(view).collect::<ServiceResult<_>>()?,
        summary: OutcomeSummary {
            by_revision: per_revision
                .iter()
                .map(|(r, (t, s))| RevisionTally {
                    revision: *r,
                    successes: *s,
                    trials: *t,
                })
                .collect(),
            mean_residual_px: mean,
            success_rate: (trials > 0).then(|| successes as f64 / trials as f64),
            successes,
            trials,
        },
    })
}

/// The outcomes of a team's goal as stored.
pub async fn rows(
    state: &AppState,
    who: &Principal,
    goal_id: &str,
) -> ServiceResult<Vec<OutcomeRow>> {
    Ok(store::outcomes::list(&state.store, &who.team_id, goal_id).await?)
}
