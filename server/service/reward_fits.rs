//! Reward fits: a linear reward over features of the frame's cells, inferred from demonstrations
//! by maximum-entropy inverse RL (`goalsmith_core::irl`), run as a durable operation.
//!
//! Starting a fit checks everything that can be checked before any work: the frame, the cell
//! size (at most `irl::MAX_CELLS` cells), the features (points and polygons on the frame), and
//! the demos (tracks of a demo on the frame's camera, or paths drawn by hand, on the frame). The
//! demos' samples are copied into the fit's settings, so the fit can be run again exactly
//! whatever happens to the tracks later; the fit is deterministic (no seed is involved).

use super::auth::{Principal, Role};
use super::error::{ServiceError, ServiceResult};
use super::operations::{Progress, RunError};
use super::{AppState, cameras, demos, frames, parse_id, rfc3339};
use crate::store::{self, reward_fits::RewardFitRow};
use goalsmith_core::cost::RewardGrid;
use goalsmith_core::goal::{Xy, check_zone};
use goalsmith_core::irl::{
    self, Control, Feature, FitSettings, GridSpec, IrlError, PathSample, RewardFitInput,
};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};
use serde_json::{Value, json};

/// The operation kind of reward fits.
pub const KIND: &str = "reward_fit";
/// Most features a fit may have.
pub const MAX_FEATURES: usize = 32;
/// Most demos a fit may have.
pub const MAX_DEMOS: usize = 200;
/// Most points of a path drawn by hand.
pub const MAX_PATH_POINTS: usize = 10_000;
/// Largest accepted L2 weight λ.
pub const MAX_L2: f64 = 1e6;

/// A feature of `POST /api/reward-fits`.
#[derive(Debug, Clone, Serialize, Deserialize, JsonSchema)]
#[serde(tag = "kind", rename_all = "snake_case", deny_unknown_fields)]
pub enum FeatureInput {
    /// Distance from the cell's centre to `point`, divided by the frame's diagonal.
    DistanceTo {
        /// Frame pixels.
        point: Xy,
    },
    /// 1 in cells whose centre lies in `polygon`, else 0.
    Inside {
        /// Frame pixels, at least 3 vertices.
        polygon: Vec<Xy>,
    },
    /// exp(−d²/(2σ²)) of the distance d from `center`.
    Rbf {
        /// Frame pixels.
        center: Xy,
        /// σ in pixels, > 0.
        sigma_px: f64,
    },
    /// 1 in cells whose centre lies in one of the camera's no-go zones, else 0.
    NoGo,
}

/// A number as a feature's name shows it: at most two decimals, trailing zeros dropped (the
/// exact values are in the fit's `features`).
fn short(v: f64) -> String {
    let t = format!("{v:.2}");
    let t = t.trim_end_matches('0').trim_end_matches('.');
    if t == "-0" { "0".into() } else { t.into() }
}

impl FeatureInput {
    fn name(&self) -> String {
        match self {
            FeatureInput::DistanceTo { point } => {
                format!("distance_to({}, {})", short(point[0]), short(point[1]))
            }
            FeatureInput::Inside { polygon } => format!("inside({} vertices)", polygon.len()),
            FeatureInput::Rbf { center, sigma_px } => format!(
                "rbf({}, {}; sigma {} px)",
                short(center[0]),
                short(center[1]),
                short(*sigma_px)
            ),
            FeatureInput::NoGo => "no_go".into(),
        }
    }
}

/// A demo of `POST /api/reward-fits`: a track of a demo, or a path drawn by hand.
#[derive(Debug, Clone, Deserialize, JsonSchema)]
#[serde(untagged, deny_unknown_fields)]
pub enum DemoInput {
    /// A track of a demo of the frame's camera.
    Track {
        /// The demo.
        demo_id: String,
        /// The track.
        track_id: String,
    },
    /// A path in frame pixels, in order.
    Path {
        /// At least one point, at most 10 000.
        path: Vec<Xy>,
    },
}

/// Body of `POST /api/reward-fits`.
#[derive(Debug, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct NewRewardFit {
    /// The frame the reward lives on (its camera's demos, size and no-go zones).
    pub frame_id: String,
    /// Side of a grid cell in pixels, 1 or more; the grid has at most 100 000 cells.
    pub cell_px: u32,
    /// The features, 1 to 32, in weight order.
    pub features: Vec<FeatureInput>,
    /// The demonstrations, 1 to 200.
    pub demos: Vec<DemoInput>,
    /// λ of the L2 term λ/2·|w|² on the standardised weights, 0 to 1e6 (default 1e-3).
    #[serde(default)]
    pub l2: Option<f64>,
    /// Count consecutive samples in one cell as one visit (default true): a path is then the
    /// sequence of cells it passes through, whatever its sampling rate. False keeps each as a
    /// "stay", for demos whose frame rate is the model's time step.
    #[serde(default)]
    pub collapse_repeats: Option<bool>,
}

/// Answer of `POST /api/reward-fits`.
#[derive(Debug, Serialize, JsonSchema)]
pub struct Started {
    /// The fit.
    pub id: String,
    /// The operation that runs it.
    pub operation_id: String,
}

/// One demo as the fit uses it: where it came from and its samples `[x, y, lost]`.
#[derive(Debug, Clone, Serialize, Deserialize)]
struct DemoSettings {
    #[serde(skip_serializing_if = "Option::is_none")]
    demo_id: Option<String>,
    #[serde(skip_serializing_if = "Option::is_none")]
    track_id: Option<String>,
    samples: Vec<(f64, f64, bool)>,
}

/// Everything a fit uses, stored with it.
#[derive(Debug, Clone, Serialize, Deserialize)]
struct Settings {
    width: u32,
    height: u32,
    cell_px: u32,
    features: Vec<FeatureInput>,
    no_go_zones: Vec<Vec<Xy>>,
    demos: Vec<DemoSettings>,
    l2: f64,
    collapse_repeats: bool,
    max_iterations: usize,
    grad_tolerance: f64,
}

fn irl_error(e: IrlError) -> ServiceError {
    let field = match &e {
        IrlError::Invalid { field, .. }
        | IrlError::OutsideFrame { field, .. }
        | IrlError::EmptyDemo { field }
        | IrlError::RemovedCell { field } => field.clone(),
        IrlError::TooManyCells { .. } => "cell_px".into(),
        _ => "demos".into(),
    };
    let code = match &e {
        IrlError::OutsideFrame { .. } => "outside_frame",
        IrlError::TooManyCells { .. } | IrlError::TooMuchWork { .. } => "too_large",
        IrlError::NoDemos | IrlError::NoMoves | IrlError::EmptyDemo { .. } => "no_moves",
        _ => "invalid",
    };
    ServiceError::invalid(code, field, e.to_string())
}

impl Settings {
    fn input(&self) -> ServiceResult<RewardFitInput> {
        let no_go = self
            .no_go_zones
            .iter()
            .enumerate()
            .map(|(i, z)| check_zone(self.width, self.height, z, &format!("no_go_zones[{i}]")))
            .collect::<Result<Vec<_>, _>>()?;
        let features = self
            .features
            .iter()
            .enumerate()
            .map(|(i, f)| {
                Ok(match f {
                    FeatureInput::DistanceTo { point } => Feature::DistanceTo { point: *point },
                    FeatureInput::Inside { polygon } => Feature::Inside {
                        polygon: check_zone(
                            self.width,
                            self.height,
                            polygon,
                            &format!("features[{i}].polygon"),
                        )?,
                    },
                    FeatureInput::Rbf { center, sigma_px } => Feature::Rbf {
                        centre: *center,
                        sigma_px: *sigma_px,
                    },
                    FeatureInput::NoGo => Feature::NoGo,
                })
            })
            .collect::<ServiceResult<Vec<_>>>()?;
        Ok(RewardFitInput {
            grid: GridSpec {
                width: self.width,
                height: self.height,
                cell_px: self.cell_px,
                no_go,
                remove_no_go: false,
            },
            features,
            demos: self
                .demos
                .iter()
                .map(|d| {
                    d.samples
                        .iter()
                        .map(|&(x, y, lost)| PathSample { x, y, lost })
                        .collect()
                })
                .collect(),
            collapse_repeats: self.collapse_repeats,
        })
    }

    fn fit_settings(&self) -> FitSettings {
        let mut s = FitSettings {
            l2: self.l2,
            ..FitSettings::default()
        };
        s.lbfgs.max_iterations = self.max_iterations;
        s.lbfgs.grad_tol = self.grad_tolerance;
        s
    }
}

/// Starts a fit: everything is checked, the demos' samples are copied into its settings, and
/// an operation is queued to run it.
pub async fn start(
    state: &AppState,
    who: &Principal,
    input: NewRewardFit,
) -> ServiceResult<Started> {
    who.require(Role::Editor)?;
    let frame = frames::load(state, who, &input.frame_id).await?;
    let camera_row = cameras::load(state, who, &frame.camera_id).await?;
    let camera = cameras::parse_doc(&camera_row)?;
    if input.features.is_empty() || input.features.len() > MAX_FEATURES {
        return Err(ServiceError::invalid(
            "bad_count",
            "features",
            format!("a fit has 1 to {MAX_FEATURES} features"),
        ));
    }
    if input.demos.is_empty() || input.demos.len() > MAX_DEMOS {
        return Err(ServiceError::invalid(
            "bad_count",
            "demos",
            format!("a fit has 1 to {MAX_DEMOS} demonstrations"),
        ));
    }
    let l2 = input.l2.unwrap_or(FitSettings::default().l2);
    if !(l2.is_finite() && (0.0..=MAX_L2).contains(&l2)) {
        return Err(ServiceError::invalid(
            "out_of_range",
            "l2",
            format!("l2 is a number from 0 to {MAX_L2}"),
        ));
    }
    let mut demo_settings = Vec::with_capacity(input.demos.len());
    for (i, d) in input.demos.iter().enumerate() {
        demo_settings.push(match d {
            DemoInput::Track { demo_id, track_id } => {
                let demo = demos::load(state, who, demo_id)
                    .await
                    .map_err(|e| match e {
                        ServiceError::NotFound(m) => {
                            ServiceError::invalid("not_found", format!("demos[{i}].demo_id"), m)
                        }
                        other => other,
                    })?;
                if demo.camera_id != frame.camera_id {
                    return Err(ServiceError::invalid(
                        "other_camera",
                        format!("demos[{i}].demo_id"),
                        "the demo is of another camera than the frame",
                    ));
                }
                let track = super::tracks::view(state, who, &demo.id, track_id)
                    .await
                    .map_err(|e| match e {
                        ServiceError::NotFound(m) => {
                            ServiceError::invalid("not_found", format!("demos[{i}].track_id"), m)
                        }
                        other => other,
                    })?;
                DemoSettings {
                    demo_id: Some(demo.id),
                    track_id: Some(track.id),
                    samples: track.samples.iter().map(|s| (s.x, s.y, s.lost)).collect(),
                }
            }
            DemoInput::Path { path } => {
                if path.is_empty() || path.len() > MAX_PATH_POINTS {
                    return Err(ServiceError::invalid(
                        "bad_count",
                        format!("demos[{i}].path"),
                        format!("a path has 1 to {MAX_PATH_POINTS} points"),
                    ));
                }
                DemoSettings {
                    demo_id: None,
                    track_id: None,
                    samples: path.iter().map(|p| (p[0], p[1], false)).collect(),
                }
            }
        });
    }
    let settings = Settings {
        width: camera.width,
        height: camera.height,
        cell_px: input.cell_px,
        features: input.features,
        no_go_zones: camera.no_go_zones.clone(),
        demos: demo_settings,
        l2,
        collapse_repeats: input.collapse_repeats.unwrap_or(true),
        max_iterations: FitSettings::default().lbfgs.max_iterations,
        grad_tolerance: FitSettings::default().lbfgs.grad_tol,
    };
    // Every check the fit itself makes, before anything is stored or queued.
    let checked = settings.input()?;
    let check = checked.clone();
    tokio::task::spawn_blocking(move || irl::check_input(&check))
        .await
        .map_err(|e| ServiceError::Internal(e.to_string()))?
        .map_err(irl_error)?;
    let row = RewardFitRow {
        id: uuid::Uuid::new_v4().to_string(),
        team_id: who.team_id.clone(),
        frame_id: frame.id.clone(),
        operation_id: uuid::Uuid::new_v4().to_string(),
        settings: goalsmith_core::canonical::to_string(
            &serde_json::to_value(&settings).map_err(|e| ServiceError::Internal(e.to_string()))?,
        ),
        result: None,
        reward_map: None,
        author: who.author.clone(),
        created_at: store::now_ms(),
    };
    store::reward_fits::insert(
        &state.store,
        &row,
        KIND,
        &json!({"reward_fit_id": row.id}).to_string(),
    )
    .await?;
    Ok(Started {
        id: row.id,
        operation_id: row.operation_id,
    })
}

/// The stored result of a fit.
#[derive(Debug, Clone, Serialize, Deserialize)]
struct ResultDoc {
    weights: Vec<f64>,
    raw_weights: Vec<f64>,
    feature_means: Vec<f64>,
    feature_scales: Vec<f64>,
    constant_features: Vec<bool>,
    iterations: usize,
    converged: bool,
    stop: String,
    grad_norm: f64,
    log_likelihood_per_step: f64,
    uniform_log_likelihood_per_step: f64,
    held_out: Option<HeldOutDoc>,
    moves: usize,
    rows: usize,
    cols: usize,
    reward_argmax: [f64; 2],
    trace: Vec<TraceDoc>,
}

#[derive(Debug, Clone, Serialize, Deserialize, JsonSchema)]
/// Leave-one-out scores of a fit.
pub struct HeldOutDoc {
    /// Log-likelihood per move of each held-out demo under the reward fitted on the others.
    pub log_likelihood_per_step: f64,
    /// The same for a uniform random walk on the same paths.
    pub uniform_log_likelihood_per_step: f64,
    /// Folds used.
    pub folds: usize,
}

/// One iteration of a fit.
#[derive(Debug, Clone, Serialize, Deserialize, JsonSchema)]
pub struct TraceDoc {
    /// Completed iterations.
    pub iteration: usize,
    /// Log-likelihood per move.
    pub log_likelihood_per_step: f64,
    /// Gradient norm.
    pub grad_norm: f64,
}

/// A reward fit as served by `GET /api/reward-fits/{id}`; the result fields appear once the
/// fit has run.
// Fields in alphabetical order, as every typed view of the API.
#[derive(Debug, Clone, Serialize, JsonSchema)]
pub struct RewardFitView {
    /// Who started it.
    pub author: String,
    /// Side of a cell, pixels.
    pub cell_px: u32,
    /// Whether consecutive samples in one cell counted as one visit.
    pub collapse_repeats: bool,
    /// Grid columns.
    pub cols: u32,
    /// Whether the gradient norm reached the tolerance.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub converged: Option<bool>,
    /// Created, RFC 3339 UTC.
    pub created_at: String,
    /// Number of demonstrations.
    pub demos: usize,
    /// Features, by name, in weight order.
    pub feature_names: Vec<String>,
    /// The features as submitted, in weight order.
    pub features: Vec<FeatureInput>,
    /// The frame.
    pub frame_id: String,
    /// |∇f|₂ at the weights.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub grad_norm: Option<f64>,
    /// Leave-one-out log-likelihood per move (3 or more demos).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub held_out_log_likelihood_per_step: Option<f64>,
    /// The uniform walk's log-likelihood per move on the held-out paths.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub held_out_uniform_log_likelihood_per_step: Option<f64>,
    /// Fit id.
    pub id: String,
    /// Completed L-BFGS iterations.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub iterations: Option<usize>,
    /// λ of the L2 term.
    pub l2: f64,
    /// Log-likelihood per move of all demos at the weights.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub log_likelihood_per_step: Option<f64>,
    /// The operation that runs it.
    pub operation_id: String,
    /// Weights in the features' own units (standardisation undone).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub raw_weights: Option<Vec<f64>>,
    /// Centre of the best cell, frame pixels.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub reward_argmax: Option<[f64; 2]>,
    /// Grid rows.
    pub rows: u32,
    /// Why the optimiser stopped: `converged`, `iteration_cap`, `line_search_failed`,
    /// `no_progress`.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub stop: Option<String>,
    /// Log-likelihood per move and gradient norm at each iteration.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub trace: Option<Vec<TraceDoc>>,
    /// The uniform walk's log-likelihood per move on all demos.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub uniform_log_likelihood_per_step: Option<f64>,
    /// Weights of the standardised features.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub weights: Option<Vec<f64>>,
}

/// A fit in a list: where it stands and its main figures, without its trace and weights.
// Fields in alphabetical order, as every typed view of the API.
#[derive(Debug, Clone, Serialize, JsonSchema)]
pub struct RewardFitSummary {
    /// Who started it.
    pub author: String,
    /// Side of a cell, pixels.
    pub cell_px: u32,
    /// Created, RFC 3339 UTC.
    pub created_at: String,
    /// Number of demonstrations.
    pub demos: usize,
    /// Features, by name, in weight order.
    pub feature_names: Vec<String>,
    /// Whether the fit has run (its result and reward map exist).
    pub finished: bool,
    /// The frame.
    pub frame_id: String,
    /// Leave-one-out log-likelihood per move, once run (3 or more demos).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub held_out_log_likelihood_per_step: Option<f64>,
    /// Fit id.
    pub id: String,
    /// Log-likelihood per move of all demos at the weights, once run.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub log_likelihood_per_step: Option<f64>,
    /// The operation that runs it.
    pub operation_id: String,
}

/// Most fits [`list`] returns.
pub const LIST_LIMIT: i64 = 200;

/// A fit's settings as a list needs them: the demos counted, their samples skipped unread.
#[derive(Deserialize)]
struct SettingsOutline {
    cell_px: u32,
    features: Vec<FeatureInput>,
    demos: Vec<serde::de::IgnoredAny>,
}

/// The team's fits, newest first: at most `limit` ([`LIST_LIMIT`] at most).
pub async fn list(
    state: &AppState,
    who: &Principal,
    limit: usize,
) -> ServiceResult<Vec<RewardFitSummary>> {
    let limit = (limit as i64).min(LIST_LIMIT);
    let rows = store::reward_fits::list(&state.store, &who.team_id, limit).await?;
    rows.into_iter()
        .map(|row| {
            let s: SettingsOutline = serde_json::from_str(&row.settings)
                .map_err(|e| ServiceError::Internal(format!("fit {} unreadable: {e}", row.id)))?;
            let r: Option<ResultDoc> = row
                .result
                .as_deref()
                .map(serde_json::from_str)
                .transpose()
                .map_err(|e| {
                    ServiceError::Internal(format!("fit {} result unreadable: {e}", row.id))
                })?;
            Ok(RewardFitSummary {
                author: row.author,
                cell_px: s.cell_px,
                created_at: rfc3339(row.created_at),
                demos: s.demos.len(),
                feature_names: s.features.iter().map(FeatureInput::name).collect(),
                finished: r.is_some(),
                frame_id: row.frame_id,
                held_out_log_likelihood_per_step: r
                    .as_ref()
                    .and_then(|r| r.held_out.as_ref())
                    .map(|h| h.log_likelihood_per_step),
                id: row.id,
                log_likelihood_per_step: r.as_ref().map(|r| r.log_likelihood_per_step),
                operation_id: row.operation_id,
            })
        })
        .collect()
}

fn settings_of(row: &RewardFitRow) -> ServiceResult<Settings> {
    serde_json::from_str(&row.settings)
        .map_err(|e| ServiceError::Internal(format!("fit {} unreadable: {e}", row.id)))
}

async fn load(state: &AppState, who: &Principal, id: &str) -> ServiceResult<RewardFitRow> {
    let id = parse_id(id, "reward fit")?;
    store::reward_fits::get(&state.store, &who.team_id, &id)
        .await?
        .ok_or_else(|| ServiceError::NotFound(format!("no reward fit with id {id}")))
}

/// A fit, with its result once it has run.
pub async fn view(state: &AppState, who: &Principal, id: &str) -> ServiceResult<RewardFitView> {
    let row = load(state, who, id).await?;
    let s = settings_of(&row)?;
    let result: Option<ResultDoc> = row
        .result
        .as_deref()
        .map(serde_json::from_str)
        .transpose()
        .map_err(|e| ServiceError::Internal(format!("fit {} result unreadable: {e}", row.id)))?;
    let (cols, rows) = (
        s.width.div_ceil(s.cell_px.max(1)),
        s.height.div_ceil(s.cell_px.max(1)),
    );
    let r = result.as_ref();
    Ok(RewardFitView {
        author: row.author,
        cell_px: s.cell_px,
        collapse_repeats: s.collapse_repeats,
        cols,
        converged: r.map(|r| r.converged),
        created_at: rfc3339(row.created_at),
        demos: s.demos.len(),
        feature_names: s.features.iter().map(FeatureInput::name).collect(),
        features: s.features.clone(),
        frame_id: row.frame_id,
        grad_norm: r.map(|r| r.grad_norm),
        held_out_log_likelihood_per_step: r
            .and_then(|r| r.held_out.as_ref())
            .map(|h| h.log_likelihood_per_step),
        held_out_uniform_log_likelihood_per_step: r
            .and_then(|r| r.held_out.as_ref())
            .map(|h| h.uniform_log_likelihood_per_step),
        id: row.id,
        iterations: r.map(|r| r.iterations),
        l2: s.l2,
        log_likelihood_per_step: r.map(|r| r.log_likelihood_per_step),
        operation_id: row.operation_id,
        raw_weights: r.map(|r| r.raw_weights.clone()),
        reward_argmax: r.map(|r| r.reward_argmax),
        rows,
        stop: r.map(|r| r.stop.clone()),
        trace: r.map(|r| r.trace.clone()),
        uniform_log_likelihood_per_step: r.map(|r| r.uniform_log_likelihood_per_step),
        weights: r.map(|r| r.weights.clone()),
    })
}

/// The values of a stored reward map: float32 little-endian, row-major.
fn map_values(bytes: &[u8]) -> Vec<f32> {
    bytes
        .chunks_exact(4)
        .map(|b| f32::from_le_bytes([b[0], b[1], b[2], b[3]]))
        .collect()
}

/// A finished fit's result and reward map, or `None` while it has not run.
fn finished(row: &RewardFitRow) -> ServiceResult<Option<(ResultDoc, Vec<f32>)>> {
    let (Some(result), Some(map)) = (row.result.as_deref(), row.reward_map.as_deref()) else {
        return Ok(None);
    };
    let r: ResultDoc = serde_json::from_str(result)
        .map_err(|e| ServiceError::Internal(format!("fit {} result unreadable: {e}", row.id)))?;
    Ok(Some((r, map_values(map))))
}

fn not_finished() -> ServiceError {
    ServiceError::Conflict("the fit has not finished yet; follow its operation".into())
}

/// The reward map as NPY: float32 (rows, cols), once the fit has run (409 before).
pub async fn reward_map_npy(state: &AppState, who: &Principal, id: &str) -> ServiceResult<Vec<u8>> {
    let row = load(state, who, id).await?;
    let (r, values) = finished(&row)?.ok_or_else(not_finished)?;
    goalsmith_core::npy::write_f32(&[r.rows, r.cols], &values)
        .map_err(|e| ServiceError::Internal(e.to_string()))
}

/// The reward map as a PNG of the fit's frame: the heat of the `learned` cost, the demos as
/// fitted and the best cell (see `draw::render_reward_map`), carrying the safety caution like
/// every picture the server makes. 409 until the fit has run.
pub async fn reward_map_png(state: &AppState, who: &Principal, id: &str) -> ServiceResult<Vec<u8>> {
    let row = load(state, who, id).await?;
    let settings = settings_of(&row)?;
    let (r, values) = finished(&row)?.ok_or_else(not_finished)?;
    let (_, _, image) = frames::image(state, who, &row.frame_id).await?;
    let grid = RewardGrid::new(settings.cell_px, r.cols, r.rows, values)
        .map_err(|e| ServiceError::Internal(format!("fit {}: {e}", row.id)))?;
    let demos: Vec<crate::draw::DemoPath> = settings
        .demos
        .iter()
        .map(|d| {
            d.samples
                .iter()
                .map(|&(x, y, lost)| (!lost).then_some([x, y]))
                .collect()
        })
        .collect();
    let permit = state.heavy_permits.acquire().await?;
    super::heavy::spawn(move || {
        let _permit = permit;
        let frame = image::load_from_memory(&image)
            .map_err(|e| ServiceError::Internal(format!("stored frame unreadable: {e}")))?
            .to_rgba8();
        let drawn = crate::draw::render_reward_map(&frame, &grid, &demos, r.reward_argmax);
        crate::scoring::encode_png_with_caution(drawn.width(), drawn.height(), drawn.as_raw())
            .map_err(|e| ServiceError::Internal(e.to_string()))
    })
    .await
    .map_err(|e| ServiceError::Internal(e.to_string()))?
}

/// The reward grids of the finished fits among `ids` that are the team's and on `frame_id`, by
/// id: what a goal's `learned` terms are checked and scored with. An id that is malformed,
/// another team's, on another frame or not finished is left out (the goal check then refuses
/// the term, naming it).
pub async fn grids_for<'a>(
    state: &AppState,
    who: &Principal,
    frame_id: &str,
    ids: impl IntoIterator<Item = &'a str>,
) -> ServiceResult<std::collections::HashMap<String, std::sync::Arc<RewardGrid>>> {
    let mut out = std::collections::HashMap::new();
    for raw in ids {
        let Ok(id) = parse_id(raw, "reward fit") else {
            continue;
        };
        let Some(row) = store::reward_fits::get(&state.store, &who.team_id, &id).await? else {
            continue;
        };
        if row.frame_id != frame_id {
            continue;
        }
        let Some((r, values)) = finished(&row)? else {
            continue;
        };
        let settings = settings_of(&row)?;
        let grid = RewardGrid::new(settings.cell_px, r.cols, r.rows, values)
            .map_err(|e| ServiceError::Internal(format!("fit {id}: {e}")))?;
        out.insert(raw.to_string(), std::sync::Arc::new(grid));
    }
    Ok(out)
}

/// A number for JSON, or null where it is not finite (JSON has no infinities).
fn finite_or_null(x: f64) -> Value {
    if x.is_finite() { json!(x) } else { Value::Null }
}

fn trace_json(trace: &[[f64; 3]]) -> Value {
    Value::Array(
        trace
            .iter()
            .map(|&[i, ll, g]| json!([i as usize, finite_or_null(ll), finite_or_null(g)]))
            .collect(),
    )
}

fn stop_name(s: irl::StopReason) -> &'static str {
    match s {
        irl::StopReason::Converged => "converged",
        irl::StopReason::IterationCap => "iteration_cap",
        irl::StopReason::Cancelled => "cancelled",
        irl::StopReason::LineSearchFailed => "line_search_failed",
        irl::StopReason::NoProgress => "no_progress",
    }
}

/// Runs a queued fit (the operation's work). Progress: the fit's iterations against the cap,
/// then the leave-one-out folds; a cancel stops it at the next iteration.
pub(super) async fn run(
    state: &AppState,
    team_id: &str,
    input: &Value,
    progress: Progress,
) -> Result<Value, RunError> {
    let id = input["reward_fit_id"]
        .as_str()
        .ok_or_else(|| RunError::Failed("the operation's input lacks reward_fit_id".into()))?;
    let row = store::reward_fits::by_id(&state.store, id)
        .await
        .map_err(|e| RunError::Failed(e.to_string()))?
        .filter(|r| r.team_id == team_id)
        .ok_or_else(|| RunError::Failed(format!("reward fit {id} is missing")))?;
    let settings = settings_of(&row).map_err(|e| RunError::Failed(e.to_string()))?;
    let fit_input = settings
        .input()
        .map_err(|e| RunError::Failed(e.to_string()))?;
    let fit_settings = settings.fit_settings();
    let cap = fit_settings.lbfgs.max_iterations.max(1) as f64;
    let p = progress.clone();
    let fitted = super::heavy::spawn(move || {
        // The fit's trace so far, streamed as the operation's detail.
        let mut trace: Vec<[f64; 3]> = Vec::new();
        let mut last = None::<irl::IterationReport>;
        irl::fit_reward(&fit_input, &fit_settings, &mut |event| {
            match event {
                // The main fit is the first half of the bar, the folds the second.
                irl::Progress::Iteration(r) => {
                    p.set((r.iteration as f64 / cap).min(1.0) * 0.5);
                    trace.push([r.iteration as f64, r.log_likelihood_per_step, r.grad_norm]);
                    last = Some(*r);
                    p.set_detail(&json!({
                        "stage": "fit",
                        "iteration": r.iteration,
                        "log_likelihood_per_step": finite_or_null(r.log_likelihood_per_step),
                        "grad_norm": finite_or_null(r.grad_norm),
                        "trace": trace_json(&trace),
                    }));
                }
                irl::Progress::HeldOutFold { fold, folds } => {
                    p.set(0.5 + 0.5 * *fold as f64 / (*folds).max(1) as f64);
                    if let Some(r) = last {
                        p.set_detail(&json!({
                            "stage": "held_out",
                            "fold": fold,
                            "folds": folds,
                            "iteration": r.iteration,
                            "log_likelihood_per_step": finite_or_null(r.log_likelihood_per_step),
                            "grad_norm": finite_or_null(r.grad_norm),
                            "trace": trace_json(&trace),
                        }));
                    }
                }
            }
            if p.stopped() {
                Control::Stop
            } else {
                Control::Continue
            }
        })
    })
    .await
    .map_err(|e| RunError::Failed(format!("the fit failed: {e}")))?
    .map_err(|e| RunError::Failed(e.to_string()))?;
    if progress.stopped() || fitted.fit.stop == irl::StopReason::Cancelled {
        return Err(RunError::Stopped);
    }
    let doc = ResultDoc {
        weights: fitted.fit.weights.clone(),
        raw_weights: fitted.raw_weights.clone(),
        feature_means: fitted.feature_stats.iter().map(|s| s.mean).collect(),
        feature_scales: fitted.feature_stats.iter().map(|s| s.scale).collect(),
        constant_features: fitted.feature_stats.iter().map(|s| s.constant).collect(),
        iterations: fitted.fit.iterations,
        converged: fitted.fit.converged,
        stop: stop_name(fitted.fit.stop).into(),
        grad_norm: fitted.fit.grad_norm,
        log_likelihood_per_step: fitted.fit.log_likelihood_per_step,
        uniform_log_likelihood_per_step: fitted.uniform_log_likelihood_per_step,
        held_out: fitted.held_out.map(|h| HeldOutDoc {
            log_likelihood_per_step: h.log_likelihood_per_step,
            uniform_log_likelihood_per_step: h.uniform_log_likelihood_per_step,
            folds: h.folds,
        }),
        moves: fitted.moves,
        rows: fitted.reward_map.rows,
        cols: fitted.reward_map.cols,
        reward_argmax: fitted.reward_map.argmax_px,
        trace: fitted
            .fit
            .trace
            .iter()
            .map(|t| TraceDoc {
                iteration: t.iteration,
                log_likelihood_per_step: t.log_likelihood_per_step,
                grad_norm: t.grad_norm,
            })
            .collect(),
    };
    let map: Vec<u8> = fitted
        .reward_map
        .values
        .iter()
        .flat_map(|v| v.to_le_bytes())
        .collect();
    let result = serde_json::to_string(&doc).map_err(|e| RunError::Failed(e.to_string()))?;
    store::reward_fits::put_result(&state.store, &row.id, &result, &map)
        .await
        .map_err(|e| RunError::Failed(e.to_string()))?;
    Ok(json!({
        "reward_fit_id": row.id,
        "iterations": doc.iterations,
        "converged": doc.converged,
    }))
}

/// A reward fit as a bundle describes it in `reward_fits/<id>.json` (canonical JSON): the grid,
/// the features as submitted, the standardisation, the weights, the fit's diagnostics, and the
/// formulas that give the reward map back from them.
// Fields in alphabetical order, like the API's views (the canonical form sorts them anyway).
#[derive(Debug, Serialize)]
struct BundledFitDoc<'a> {
    cell_px: u32,
    cols: usize,
    collapse_repeats: bool,
    constant_features: &'a [bool],
    converged: bool,
    created_at: String,
    demos: usize,
    feature_means: &'a [f64],
    feature_names: Vec<String>,
    feature_scales: &'a [f64],
    features: &'a [FeatureInput],
    format: &'static str,
    frame_id: &'a str,
    grad_norm: f64,
    grad_tolerance: f64,
    height: u32,
    held_out: Option<&'a HeldOutDoc>,
    id: &'a str,
    iterations: usize,
    l2: f64,
    log_likelihood_per_step: f64,
    max_iterations: usize,
    moves: usize,
    no_go_zones: &'a [Vec<Xy>],
    raw_offset: f64,
    raw_weights: &'a [f64],
    recompute: BundledFitFormulas,
    reward_argmax: [f64; 2],
    reward_map: BundledFitMap,
    rows: usize,
    stop: &'a str,
    uniform_log_likelihood_per_step: f64,
    weights: &'a [f64],
    width: u32,
}

/// Where a bundled fit's reward map is and what it holds.
#[derive(Debug, Serialize)]
struct BundledFitMap {
    dtype: &'static str,
    file: String,
    layout: &'static str,
    shape: [usize; 2],
}

/// How a bundled fit's reward is recomputed from its features, in words a planner can code
/// from (the same rules as docs/conventions.md, "Reward fits").
#[derive(Debug, Serialize)]
struct BundledFitFormulas {
    cell_centre: &'static str,
    cost: &'static str,
    features: &'static str,
    reward: &'static str,
    standardise: &'static str,
}

fn bundled_fit_formulas() -> BundledFitFormulas {
    BundledFitFormulas {
        cell_centre: "cell (c, r), c = 0 … cols − 1, r = 0 … rows − 1, of side p = cell_px covers x \
                  in [c·p − 0.5, min((c + 1)·p, width) − 0.5) and y likewise; its features are \
                  taken at the centre of that part, x = (c·p + min((c + 1)·p, width) − 1) / 2, \
                  y = (r·p + min((r + 1)·p, height) − 1) / 2 (frame pixels, x right, y down, \
                  the centre of the top-left pixel at (0, 0))",
        features: "raw_i at the cell centre (x, y), for features[i] by its kind: distance_to \
               {point: [px, py]}: sqrt((x − px)² + (y − py)²) / sqrt(width² + height²); inside \
               {polygon}: 1 when (x, y) lies in the closed polygon (its boundary included), \
               else 0; rbf {center: [cx, cy], sigma_px: s}: exp(−((x − cx)² + (y − cy)²) / \
               (2·s²)); no_go: 1 when (x, y) lies in one of no_go_zones (closed polygons), else 0",
        standardise: "phi_i = (raw_i − feature_means[i]) / feature_scales[i], and phi_i = 0 where \
                  constant_features[i]; the mean and the population standard deviation (the \
                  scale, 1 for a constant feature) are taken over all rows · cols cells",
        reward: "r(c, r) = sum over i of weights[i] · phi_i, in float64 in feature order, rounded to \
             float32: entry [r, c] of the reward map. The same up to float64 rounding: sum over \
             i of raw_weights[i] · raw_i, plus raw_offset (raw_weights[i] = weights[i] / \
             feature_scales[i], 0 where constant; raw_offset = −sum over the features not \
             constant of weights[i] · feature_means[i] / feature_scales[i])",
        cost: "a learned term's cost at frame point (x, y) is max(r) − r(c, r) over the reward map \
           as float32, with c = floor((x + 0.5) / cell_px) and r = floor((y + 0.5) / cell_px), \
           each clamped to the grid; in reward units, 0 in the best cells",
    }
}

/// The reward fits a bundle carries for a revision's `learned` terms on `frame_id`: one per
/// distinct fit among `ids` (in id order), each with its JSON (see [`BundledFitDoc`]) and its
/// reward map exactly as [`reward_map_npy`] serves it. The revision was checked against every
/// one of them when it was saved and a finished fit never changes, so a bundle's bytes still
/// depend only on the revision; a fit that is gone or unfinished is a fault, not the client's.
pub async fn bundled<'a>(
    state: &AppState,
    who: &Principal,
    frame_id: &str,
    ids: impl IntoIterator<Item = &'a str>,
) -> ServiceResult<Vec<crate::scoring::BundledRewardFit>> {
    let mut wanted = std::collections::BTreeSet::new();
    for raw in ids {
        let id = crate::scoring::fit_file_id(raw).ok_or_else(|| {
            ServiceError::Internal(format!("a learned term names {raw:?}, which is no fit id"))
        })?;
        wanted.insert(id);
    }
    let mut out = Vec::with_capacity(wanted.len());
    for id in wanted {
        let fault = |why: &str| ServiceError::Internal(format!("reward fit {id} {why}"));
        let row = store::reward_fits::get(&state.store, &who.team_id, &id)
            .await?
            .ok_or_else(|| fault("of a learned term is missing"))?;
        if row.frame_id != frame_id {
            return Err(fault("of a learned term is on another frame"));
        }
        let Some(result) = row.result.as_deref() else {
            return Err(fault("of a learned term has not finished"));
        };
        let s = settings_of(&row)?;
        let r: ResultDoc = serde_json::from_str(result)
            .map_err(|e| ServiceError::Internal(format!("fit {id} result unreadable: {e}")))?;
        // The offset of the reward in raw feature units, as `irl::Features::raw_weights` has it.
        let mut raw_offset = 0.0;
        for ((w, mean), (scale, constant)) in r
            .weights
            .iter()
            .zip(&r.feature_means)
            .zip(r.feature_scales.iter().zip(&r.constant_features))
        {
            if !constant {
                raw_offset -= w * mean / scale;
            }
        }
        let (_, npy_name) = crate::scoring::reward_fit_paths(&id);
        let doc = BundledFitDoc {
            cell_px: s.cell_px,
            cols: r.cols,
            collapse_repeats: s.collapse_repeats,
            constant_features: &r.constant_features,
            converged: r.converged,
            created_at: rfc3339(row.created_at),
            demos: s.demos.len(),
            feature_means: &r.feature_means,
            feature_names: s.features.iter().map(FeatureInput::name).collect(),
            feature_scales: &r.feature_scales,
            features: &s.features,
            format: "goalsmith-reward-fit",
            frame_id: &row.frame_id,
            grad_norm: r.grad_norm,
            grad_tolerance: s.grad_tolerance,
            height: s.height,
            held_out: r.held_out.as_ref(),
            id: &row.id,
            iterations: r.iterations,
            l2: s.l2,
            log_likelihood_per_step: r.log_likelihood_per_step,
            max_iterations: s.max_iterations,
            moves: r.moves,
            no_go_zones: &s.no_go_zones,
            raw_offset,
            raw_weights: &r.raw_weights,
            recompute: bundled_fit_formulas(),
            reward_argmax: r.reward_argmax,
            reward_map: BundledFitMap {
                dtype: "float32",
                file: npy_name,
                layout: "C order, little-endian: entry [r, c] is the reward of cell (c, r)",
                shape: [r.rows, r.cols],
            },
            rows: r.rows,
            stop: &r.stop,
            uniform_log_likelihood_per_step: r.uniform_log_likelihood_per_step,
            weights: &r.weights,
            width: s.width,
        };
        let value =
            serde_json::to_value(&doc).map_err(|e| ServiceError::Internal(e.to_string()))?;
        let json = goalsmith_core::canonical::to_string(&value).into_bytes();
        let npy = reward_map_npy(state, who, &id).await?;
        out.push(crate::scoring::BundledRewardFit {
            id,
            json,
            npy,
            rows: r.rows,
            cols: r.cols,
            cell_px: s.cell_px,
        });
    }
    Ok(out)
}
