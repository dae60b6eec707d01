//! Durable operations at work: a few workers per process claim queued operations from the
//! database, run them off the async workers, send heartbeats with their progress (which also
//! bring back cancel requests), and record how each ended. A sweeper queues again, or fails
//! with a reason, any operation whose worker stopped sending heartbeats: a server that died
//! mid-operation leaves nothing running for ever, and several processes on one PostgreSQL
//! share the work, each operation running once (see `store::operations`).

use super::auth::{Principal, Role};
use super::error::{ServiceError, ServiceResult};
use super::{AppState, parse_id};
use crate::store::operations::{self as ops, OpState, OperationRow};
use schemars::JsonSchema;
use serde::Serialize;
use serde_json::Value;
use std::sync::Arc;
use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};
use std::time::Duration;

/// How often a worker tells the database it is alive (and reads cancel requests).
pub const HEARTBEAT: Duration = Duration::from_millis(500);
/// An operation whose last heartbeat is older than this is given up by the sweeper.
pub const STALE_MS: i64 = 10_000;
/// Claims an operation gets before it is failed rather than queued again.
pub const MAX_ATTEMPTS: i64 = 3;
/// How long an idle worker waits before it looks for work again.
const IDLE: Duration = Duration::from_millis(200);

/// An operation as served by `GET /api/operations/{id}` and its events.
// Fields in alphabetical order, as every typed view of the API.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct OperationView {
    /// What the work says about itself beyond its progress, while and after it runs: for
    /// `reward_fit`, `{stage, iteration, log_likelihood_per_step, grad_norm, trace}` (`stage`
    /// is `fit`, then `held_out` with `fold` and `folds`; `trace` holds
    /// `[iteration, log_likelihood_per_step, grad_norm]` for each iteration so far).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub detail: Option<Value>,
    /// Whether it has ended (succeeded, failed or cancelled).
    pub done: bool,
    /// Why it failed.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub error: Option<String>,
    /// Operation id.
    pub id: String,
    /// What kind of work: `track` or `reward_fit`.
    pub kind: String,
    /// 0..1.
    pub progress: f64,
    /// What it made, once succeeded (for `track`: `{track_id, frames, lost_from}`; for
    /// `reward_fit`: `{reward_fit_id, iterations, converged}`).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub result: Option<Value>,
    /// `queued`, `running`, `succeeded`, `failed` or `cancelled`.
    pub state: String,
}

pub(super) fn view(op: &OperationRow) -> OperationView {
    OperationView {
        detail: op
            .detail
            .as_deref()
            .and_then(|d| serde_json::from_str(d).ok()),
        done: op.state.is_done(),
        error: op.error.clone(),
        id: op.id.clone(),
        kind: op.kind.clone(),
        progress: op.progress,
        result: op
            .result
            .as_deref()
            .and_then(|r| serde_json::from_str(r).ok()),
        state: op.state.as_str().to_string(),
    }
}

/// A team's operation.
pub async fn get(state: &AppState, who: &Principal, id: &str) -> ServiceResult<OperationView> {
    let id = parse_id(id, "operation")?;
    let op = ops::get(&state.store, &who.team_id, &id)
        .await?
        .ok_or_else(|| ServiceError::NotFound(format!("no operation with id {id}")))?;
    Ok(view(&op))
}

/// Asks an operation to stop; a queued one stops at once, a running one at its next heartbeat.
pub async fn cancel(state: &AppState, who: &Principal, id: &str) -> ServiceResult<OperationView> {
    who.require(Role::Editor)?;
    let id = parse_id(id, "operation")?;
    if !ops::request_cancel(&state.store, &who.team_id, &id).await? {
        return Err(ServiceError::NotFound(format!("no operation with id {id}")));
    }
    get(state, who, &id).await
}

/// Queues an operation of `kind` for the team; returns its id.
pub(super) async fn queue(
    state: &AppState,
    team_id: &str,
    kind: &str,
    input: &Value,
) -> ServiceResult<String> {
    Ok(ops::create(&state.store, team_id, kind, &input.to_string()).await?)
}

/// What a running operation reports and is told: its progress, and whether to stop.
#[derive(Clone, Default)]
pub struct Progress {
    value: Arc<AtomicU64>,
    stop: Arc<AtomicBool>,
    /// The latest detail, and whether a heartbeat has carried it yet.
    detail: Arc<std::sync::Mutex<(Option<String>, bool)>>,
}

impl Progress {
    /// Sets the progress, 0..1.
    pub fn set(&self, p: f64) {
        self.value
            .store(p.clamp(0.0, 1.0).to_bits(), Ordering::Relaxed);
    }
    fn get(&self) -> f64 {
        f64::from_bits(self.value.load(Ordering::Relaxed))
    }
    /// Sets what the work says about itself beyond its progress (served as the operation's
    /// `detail`); the next heartbeat stores it.
    pub fn set_detail(&self, detail: &Value) {
        if let Ok(mut d) = self.detail.lock() {
            *d = (Some(detail.to_string()), false);
        }
    }
    /// The detail not yet stored, if any; marks it stored.
    fn take_new_detail(&self) -> Option<String> {
        let mut d = self.detail.lock().ok()?;
        if d.1 {
            return None;
        }
        d.1 = true;
        d.0.clone()
    }
    /// Whether the work should stop (cancelled, or no longer this worker's).
    pub fn stopped(&self) -> bool {
        self.stop.load(Ordering::Relaxed)
    }
    fn halt(&self) {
        self.stop.store(true, Ordering::Relaxed);
    }
}

/// How a piece of work ended without a result.
#[derive(Debug)]
pub enum RunError {
    /// It saw [`Progress::stopped`].
    Stopped,
    /// It failed; the reason is kept with the operation.
    Failed(String),
}

impl From<ServiceError> for RunError {
    fn from(e: ServiceError) -> Self {
        RunError::Failed(e.to_string())
    }
}

/// Starts `workers` workers (none for 0) and the sweeper on the current runtime; they run as
/// long as it.
pub fn start(state: AppState, workers: usize) {
    // `<pid>-<random>/<n>`: the pid says which process holds an operation (in the operations
    // table and the logs); the random part keeps two hosts' equal pids apart.
    let process = format!(
        "{}-{}",
        std::process::id(),
        &uuid::Uuid::new_v4().simple().to_string()[..8]
    );
    for w in 0..workers {
        let state = state.clone();
        let worker = format!("{process}/{w}");
        tokio::spawn(async move {
            loop {
                match ops::claim(&state.store, &worker).await {
                    Ok(Some(op)) => run_one(&state, &worker, op).await,
                    Ok(None) => tokio::time::sleep(IDLE).await,
                    Err(e) => {
                        tracing::warn!(error = %e, "cannot claim operations");
                        tokio::time::sleep(Duration::from_secs(1)).await;
                    }
                }
            }
        });
    }
    tokio::spawn(async move {
        loop {
            let stale_before = crate::store::now_ms() - STALE_MS;
            match ops::recover_stale(&state.store, stale_before, MAX_ATTEMPTS).await {
                Ok((0, 0)) => {}
                Ok((requeued, failed)) => tracing::warn!(
                    requeued,
                    failed,
                    "operations whose worker stopped were given up"
                ),
                Err(e) => tracing::warn!(error = %e, "cannot sweep operations"),
            }
            tokio::time::sleep(Duration::from_secs(2)).await;
        }
    });
}

async fn run_one(state: &AppState, worker: &str, op: OperationRow) {
    let progress = Progress::default();
    progress.set(op.progress);
    // The work runs as a task of its own, so it keeps going while a heartbeat waits. Polled
    // from this loop instead, it stood still whenever a heartbeat waited for SQLite's write
    // lock, and the lock could be held by the work itself (a transaction writing its result
    // across awaits): each heartbeat then waited out the busy timeout, the work moved one
    // statement on, and the next tick began again, so a finished tracking took hours to write.
    let mut work = {
        let (state, op, progress) = (state.clone(), op.clone(), progress.clone());
        tokio::spawn(async move { run_kind(&state, &op, progress).await })
    };
    let mut beat = tokio::time::interval(HEARTBEAT);
    // After a slow heartbeat, the next one waits a full period rather than firing at once.
    beat.set_missed_tick_behavior(tokio::time::MissedTickBehavior::Delay);
    let ended = loop {
        tokio::select! {
            r = &mut work => break Some(r.unwrap_or_else(|e| {
                Err(RunError::Failed(format!("the operation stopped unexpectedly: {e}")))
            })),
            _ = beat.tick() => match ops::heartbeat(
                &state.store,
                &op.id,
                worker,
                progress.get(),
                progress.take_new_detail().as_deref(),
            )
            .await
            {
                Ok(Some(true)) => progress.halt(),
                Ok(Some(false)) => {}
                // Given up as stale and perhaps claimed elsewhere: stop and record nothing.
                Ok(None) => {
                    progress.halt();
                    work.abort();
                    break None;
                }
                Err(e) => tracing::warn!(error = %e, operation = %op.id, "heartbeat failed"),
            },
        }
    };
    let Some(ended) = ended else {
        return;
    };
    // The last detail the work gave, so the final event carries it too.
    if let Some(detail) = progress.take_new_detail()
        && let Err(e) =
            ops::heartbeat(&state.store, &op.id, worker, progress.get(), Some(&detail)).await
    {
        tracing::warn!(error = %e, operation = %op.id, "cannot record an operation's detail");
    }
    let (state_to, result, error) = match ended {
        Ok(v) => (OpState::Succeeded, Some(v.to_string()), None),
        Err(RunError::Stopped) => (OpState::Cancelled, None, None),
        Err(RunError::Failed(m)) => (OpState::Failed, None, Some(m)),
    };
    if let Err(e) = ops::finish(
        &state.store,
        &op.id,
        worker,
        state_to,
        result.as_deref(),
        error.as_deref(),
    )
    .await
    {
        // The sweeper will queue it again: the work is idempotent.
        tracing::warn!(error = %e, operation = %op.id, "cannot record the end of an operation");
    }
}

async fn run_kind(
    state: &AppState,
    op: &OperationRow,
    progress: Progress,
) -> Result<Value, RunError> {
    let input: Value = serde_json::from_str(&op.input)
        .map_err(|e| RunError::Failed(format!("unreadable input: {e}")))?;
    match op.kind.as_str() {
        super::tracks::KIND => super::tracks::run(state, &op.team_id, &input, progress).await,
        super::reward_fits::KIND => {
            super::reward_fits::run(state, &op.team_id, &input, progress).await
        }
        other => Err(RunError::Failed(format!(
            "unknown operation kind {other:?}"
        ))),
    }
}
