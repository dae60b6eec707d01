//! Scoring and export of a stored revision, shared by the HTTP routes and the offline CLI
//! (`goalsmith cost --bundle …`), so both give the same numbers from the same code.

use crate::draw;
use crate::images;
use goalsmith_core::cost::{CostModel, CostResult, MapBatch, PreparedMaps, RewardGrid};
use goalsmith_core::goal::{CheckContext, GoalDocument, GoalSpec, RewardLookup};
use goalsmith_core::npy;
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};
use serde_json::{Value, json};
use sha2::{Digest, Sha256};
use std::io::{Cursor, Write};

/// Version of the bundle layout; bumped whenever the bytes of a bundle change for the same
/// revision (the bundle's ETag is derived from it). 2: bundles carry the reward fits of
/// `learned` terms (`reward_fits/<id>.json` and `.npy`).
pub const BUNDLE_FORMAT_VERSION: u32 = 2;

/// Why scoring or exporting failed, in words for the caller.
#[derive(Debug, thiserror::Error)]
pub enum ScoreError {
    /// The request breaks a rule (a 422), naming the field where one applies.
    #[error("{message}")]
    Invalid {
        /// snake_case code.
        code: &'static str,
        /// For a person.
        message: String,
        /// Offending field.
        field: Option<String>,
    },
    /// The request claims more data than is allowed (a 413).
    #[error("{0}")]
    TooLarge(String),
    /// Stored data that should be readable is not.
    #[error("{0}")]
    Internal(String),
}

fn invalid(code: &'static str, field: Option<&str>, message: impl Into<String>) -> ScoreError {
    ScoreError::Invalid {
        code,
        message: message.into(),
        field: field.map(str::to_string),
    }
}

/// Re-checks a stored revision document into a [`GoalSpec`] for a frame of `width` × `height`.
/// Safety zones are not re-applied: they were checked (or overridden, and recorded) when the
/// revision was written.
///
/// `reward_grid` finds the reward grid of a `learned` term's fit; without one (`&|_| None`), a
/// revision with learned terms is refused.
pub fn spec_from_revision(
    doc: &Value,
    width: u32,
    height: u32,
    reward_grid: RewardLookup<'_>,
) -> Result<GoalSpec, ScoreError> {
    let goal = GoalDocument {
        name: doc["name"].as_str().unwrap_or_default().to_string(),
        frame_id: doc["frame_id"].as_str().unwrap_or_default().to_string(),
        terms: serde_json::from_value(doc["terms"].clone())
            .map_err(|e| ScoreError::Internal(format!("stored terms unreadable: {e}")))?,
        cost: serde_json::from_value(doc["cost"].clone())
            .map_err(|e| ScoreError::Internal(format!("stored cost unreadable: {e}")))?,
        note: None,
        override_safety: true,
    };
    let decode_mask = |b64: &str| images::decode_mask(b64, 16384, 1 << 30);
    GoalSpec::check(
        goal,
        &CheckContext {
            width,
            height,
            safe_zone: None,
            no_go_zones: &[],
            decode_mask: &decode_mask,
            reward_grid,
        },
    )
    .map_err(|e| match e.code {
        // Saved before the per-goal vertex total existed: the client's request is refused
        // (its maps would cost W·H per vertex), not the server's fault.
        "too_many_vertices" => invalid(
            "too_many_vertices",
            None,
            format!(
                "this revision was saved before the current limits and breaks one: {}; save a \
                 new revision within it",
                e.message
            ),
        ),
        _ => ScoreError::Internal(format!("stored revision no longer checks: {e}")),
    })
}

/// The cost model of a checked goal.
pub fn model(spec: &GoalSpec) -> Result<CostModel, ScoreError> {
    model_until(spec, &|| false).map(|m| m.expect("never stopped"))
}

/// [`model`], given up (`Ok(None)`) when `stop` says so between mask terms.
pub fn model_until(
    spec: &GoalSpec,
    stop: &dyn Fn() -> bool,
) -> Result<Option<CostModel>, ScoreError> {
    let points = spec.cost_points().map_err(|e| ScoreError::Invalid {
        code: e.code,
        message: e.message,
        field: Some(e.field),
    })?;
    let (w, h) = spec.frame_size();
    CostModel::new_until(w as usize, h as usize, points, *spec.settings(), stop)
        .map_err(|e| ScoreError::Internal(e.to_string()))
}

/// The cost maps as an NPY file, float32 (P, h, w).
pub fn cost_maps_npy(
    model: &CostModel,
    width: usize,
    height: usize,
) -> Result<Vec<u8>, ScoreError> {
    cost_maps_npy_until(model, width, height, &|| false)
}

/// [`cost_maps_npy`], written plane by plane into the NPY bytes (one float64 plane held, not
/// P of them), and given up with an error when `stop` answers true (the client hung up; no one
/// reads the answer). The bytes are those of the whole-stack conversion exactly.
pub fn cost_maps_npy_until(
    model: &CostModel,
    width: usize,
    height: usize,
    stop: &(dyn Fn() -> bool + Sync),
) -> Result<Vec<u8>, ScoreError> {
    let shape = [model.len(), height, width];
    let metric = model.settings().metric();
    let mut out = npy::f32_header(&shape).map_err(|e| ScoreError::Internal(e.to_string()))?;
    let done = model
        .distance_planes(width, height, stop, |_, d| {
            if out.capacity() == out.len() {
                out.reserve_exact(shape.iter().product::<usize>() * 4);
            }
            for &v in d {
                out.extend_from_slice(&(metric.apply(v) as f32).to_le_bytes());
            }
        })
        .map_err(|e| invalid("bad_map_size", Some("width"), e.to_string()))?;
    if !done {
        return Err(ScoreError::Internal(
            "map building stopped: the client hung up".into(),
        ));
    }
    Ok(out)
}

/// The JSON body of `POST …/cost`.
#[derive(Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct PointsBody {
    /// Predicted pixel positions `[x, y]` of shape (N, T, P, 2): N candidates, T steps, P source
    /// points (the revision's `derived.points`).
    pub points: Vec<Vec<Vec<[f64; 2]>>>,
}

/// Predicted points (N, T, P, 2) from JSON `{"points": …}`, flattened, with (N, T).
pub fn points_from_json(body: &[u8], p: usize) -> Result<(Vec<f64>, usize, usize), ScoreError> {
    // One JSON object and nothing after it, as for every JSON body.
    if body.iter().find(|b| !b.is_ascii_whitespace()) != Some(&b'{') {
        return Err(invalid(
            "bad_json",
            None,
            "the body must be one JSON object {\"points\": …}",
        ));
    }
    let de = &mut serde_json::Deserializer::from_slice(body);
    let parsed: PointsBody = serde_path_to_error::deserialize(&mut *de).map_err(|e| {
        let path = e.path().to_string();
        invalid("bad_json", Some(&path), e.into_inner().to_string())
    })?;
    de.end().map_err(|e| {
        invalid(
            "bad_json",
            None,
            format!("the body holds more after its JSON object: {e}"),
        )
    })?;
    let n = parsed.points.len();
    let t = parsed.points.first().map_or(0, Vec::len);
    if n == 0 || t == 0 {
        return Err(invalid(
            "bad_shape",
            Some("points"),
            "points must have shape (N, T, P, 2) with N ≥ 1 and T ≥ 1",
        ));
    }
    let mut flat = Vec::with_capacity(n * t * p * 2);
    for (i, cand) in parsed.points.iter().enumerate() {
        if cand.len() != t {
            return Err(invalid(
                "bad_shape",
                Some(&format!("points[{i}]")),
                format!(
                    "candidate {i} has {} steps, candidate 0 has {t}",
                    cand.len()
                ),
            ));
        }
        for (k, step) in cand.iter().enumerate() {
            if step.len() != p {
                return Err(invalid(
                    "bad_shape",
                    Some(&format!("points[{i}][{k}]")),
                    format!("this goal has P = {p} source points, got {}", step.len()),
                ));
            }
            for xy in step {
                flat.extend_from_slice(xy);
            }
        }
    }
    Ok((flat, n, t))
}

/// Scores a request body against a model: JSON points, or an NPY of float32/float16
/// probability maps (N, T, P, h, w) — or of points (N, T, P, 2) as float32/float64.
pub fn evaluate(
    model: &CostModel,
    content_type: &str,
    body: &[u8],
    max_bytes: usize,
) -> Result<CostResult, ScoreError> {
    let p = model.len();
    let cost_err =
        |e: goalsmith_core::cost::CostError| invalid("bad_prediction", None, e.to_string());
    match content_type {
        "application/json" => {
            let (flat, n, t) = points_from_json(body, p)?;
            model.evaluate_points(&flat, n, t).map_err(cost_err)
        }
        "application/x-npy" | "application/octet-stream" => {
            let arr = npy::read(body, max_bytes).map_err(ScoreError::from_npy)?;
            let shape = arr.header.shape.clone();
            match shape.as_slice() {
                [n, t, pp, 2] if *pp == p => {
                    let flat: Vec<f64> = match &arr.data {
                        npy::NpyData::F64(v) => v.to_vec(),
                        npy::NpyData::F32(v) => v.iter().map(|&x| f64::from(x)).collect(),
                        npy::NpyData::F16(v) => v.iter().map(|x| x.to_f64()).collect(),
                    };
                    model.evaluate_points(&flat, *n, *t).map_err(cost_err)
                }
                [n, t, pp, h, w] if *pp == p => {
                    let batch = match &arr.data {
                        npy::NpyData::F32(v) => MapBatch::F32(v),
                        npy::NpyData::F16(v) => MapBatch::F16(v),
                        npy::NpyData::F64(_) => {
                            return Err(invalid(
                                "bad_npy",
                                None,
                                "probability maps must be float32 or float16, not float64",
                            ));
                        }
                    };
                    model.evaluate_maps(batch, *n, *t, *h, *w).map_err(cost_err)
                }
                other => Err(invalid(
                    "bad_shape",
                    None,
                    format!(
                        "this goal has P = {p} source points: send maps of shape (N, T, {p}, h, w) \
                         or points of shape (N, T, {p}, 2), not {other:?}"
                    ),
                )),
            }
        }
        other => Err(invalid(
            "unsupported_media_type",
            None,
            format!("send application/json points or an application/x-npy body, not {other:?}"),
        )),
    }
}

impl ScoreError {
    /// An NPY body that cannot be read: 413 when it claims more than the limit, else 422.
    pub fn from_npy(e: npy::NpyError) -> Self {
        match e {
            npy::NpyError::TooLarge { .. } => ScoreError::TooLarge(e.to_string()),
            other => invalid("bad_npy", None, other.to_string()),
        }
    }

    /// A batch the cost engine refuses.
    pub fn from_cost(e: goalsmith_core::cost::CostError) -> Self {
        invalid("bad_prediction", None, e.to_string())
    }
}

/// Scores probability maps (N, T, P, h, w) block by block as their bytes arrive, so a planner's
/// upload and the scoring overlap and only a few blocks are ever held, not the whole batch.
///
/// Candidates are scored independently by the same kernel whatever the block, so the result is
/// bit-identical to scoring the whole batch at once: the costs and per-point rows are
/// concatenated, `best` is the first minimum over all candidates (as in the core), and errors
/// name candidates by their index in the whole batch.
pub struct MapScorer {
    prepared: std::sync::Arc<PreparedMaps>,
    dtype: npy::Dtype,
    n: usize,
    t: usize,
    candidate_bytes: usize,
    done: usize,
    costs: Vec<f64>,
    per_point: Vec<Vec<f64>>,
}

/// Bytes of probability maps scored per block: big enough to keep the kernel's own
/// parallelism worthwhile, small enough that a few blocks in flight cost little memory.
pub const MAP_BLOCK_BYTES: usize = 4 << 20;

impl MapScorer {
    /// A scorer for `n` candidates of `t` steps of maps of the prepared size, in `dtype`
    /// (float32 or float16).
    pub fn new(
        prepared: std::sync::Arc<PreparedMaps>,
        dtype: npy::Dtype,
        n: usize,
        t: usize,
    ) -> Result<Self, ScoreError> {
        if dtype == npy::Dtype::F64 {
            return Err(invalid(
                "bad_npy",
                None,
                "probability maps must be float32 or float16, not float64",
            ));
        }
        if n == 0 || t == 0 {
            return Err(invalid(
                "bad_prediction",
                None,
                goalsmith_core::cost::CostError::EmptyBatch { n, t }.to_string(),
            ));
        }
        let candidate_bytes = t
            .checked_mul(prepared.points() * prepared.width() * prepared.height())
            .and_then(|v| v.checked_mul(dtype.itemsize()))
            .ok_or_else(|| ScoreError::TooLarge("the batch is larger than 2^64 bytes".into()))?;
        Ok(MapScorer {
            prepared,
            dtype,
            n,
            t,
            candidate_bytes,
            done: 0,
            costs: Vec::with_capacity(n),
            per_point: Vec::with_capacity(n),
        })
    }

    /// Bytes of one candidate's maps (T·P·h·w items).
    pub fn candidate_bytes(&self) -> usize {
        self.candidate_bytes
    }

    /// How many whole candidates make one block of about [`MAP_BLOCK_BYTES`].
    pub fn block_candidates(&self) -> usize {
        (MAP_BLOCK_BYTES / self.candidate_bytes.max(1)).clamp(1, self.n)
    }

    /// Scores the next whole candidates, held in `raw` (a multiple of [`Self::candidate_bytes`]).
    pub fn block(&mut self, raw: &[u8]) -> Result<(), ScoreError> {
        let k = raw.len() / self.candidate_bytes.max(1);
        if k == 0 || !raw.len().is_multiple_of(self.candidate_bytes) || self.done + k > self.n {
            return Err(ScoreError::Internal(format!(
                "a block of {} bytes is not whole candidates of {} bytes",
                raw.len(),
                self.candidate_bytes
            )));
        }
        let data =
            npy::data(self.dtype, raw).map_err(|e| invalid("bad_npy", None, e.to_string()))?;
        let batch = match &data {
            npy::NpyData::F32(v) => MapBatch::F32(v),
            npy::NpyData::F16(v) => MapBatch::F16(v),
            npy::NpyData::F64(_) => {
                return Err(ScoreError::Internal(
                    "float64 maps reached the scorer".into(),
                ));
            }
        };
        let offset = self.done;
        let result = self.prepared.evaluate(batch, k, self.t).map_err(|e| {
            invalid(
                "bad_prediction",
                None,
                shift_candidate(e, offset).to_string(),
            )
        })?;
        self.costs.extend(result.costs);
        self.per_point.extend(result.per_point);
        self.done += k;
        Ok(())
    }

    /// The result once every candidate has been scored.
    pub fn finish(self) -> Result<CostResult, ScoreError> {
        if self.done != self.n {
            return Err(ScoreError::Internal(format!(
                "{} of {} candidates scored",
                self.done, self.n
            )));
        }
        let mut best = 0;
        for (i, &c) in self.costs.iter().enumerate() {
            if c < self.costs[best] {
                best = i;
            }
        }
        Ok(CostResult {
            costs: self.costs,
            per_point: self.per_point,
            best,
        })
    }
}

/// An error about candidate `i` of a block, renumbered as candidate `offset + i` of the batch.
fn shift_candidate(
    e: goalsmith_core::cost::CostError,
    offset: usize,
) -> goalsmith_core::cost::CostError {
    use goalsmith_core::cost::CostError as E;
    match e {
        E::BadProbability {
            candidate,
            step,
            point,
        } => E::BadProbability {
            candidate: candidate + offset,
            step,
            point,
        },
        E::NonFiniteCost { candidate } => E::NonFiniteCost {
            candidate: candidate + offset,
        },
        other => other,
    }
}

/// The response body of a cost evaluation (and the offline CLI's output).
// Fields in alphabetical order: the key order of these bodies when they were built as a
// `serde_json::Value` (a sorted map in release builds), so the served bytes did not change.
#[derive(Debug, Clone, Serialize, JsonSchema)]
pub struct CostResponse {
    /// Index of the cheapest candidate (the first on ties).
    pub best: usize,
    /// Cost C_n of each candidate.
    pub costs: Vec<f64>,
    /// per_point[n][p]: point p's weighted share of C_n, so each row sums to `costs[n]`.
    pub per_point: Vec<Vec<f64>>,
}

/// The response body of a cost evaluation.
pub fn cost_response(r: &CostResult) -> CostResponse {
    CostResponse {
        best: r.best,
        costs: r.costs.clone(),
        per_point: r.per_point.clone(),
    }
}

/// Largest |x| or |y| of a reported final position, pixels. A frame is at most 8192 px wide,
/// so this leaves room for a source that left the view and still keeps every residual, its
/// square and the team's mean far from overflow.
pub const MAX_OUTCOME_COORD_PX: f64 = 1e6;

/// How one final position of an outcome did.
// Fields in alphabetical order: the key order of these bodies when they were built as a
// `serde_json::Value` (a sorted map in release builds), so the served bytes did not change.
#[derive(Debug, Clone, Serialize, serde::Deserialize, JsonSchema)]
pub struct OutcomePoint {
    /// Index p of the source point.
    pub index: usize,
    /// Distance to its target shape, pixels.
    pub residual_px: f64,
    /// Index of its term.
    pub term: usize,
    /// Its success radius, pixels.
    pub tolerance_px: f64,
    /// `residual_px <= tolerance_px`.
    pub within_tolerance: bool,
}

/// The result of [`outcome`].
#[derive(Debug, Clone)]
pub struct OutcomeResult {
    /// Every point within its tolerance.
    pub success: bool,
    /// Per point, in cost-map order.
    pub per_point: Vec<OutcomePoint>,
    /// The goal's cost of the final positions.
    pub cost: f64,
    /// Mean residual, pixels.
    pub mean_residual_px: f64,
}

/// Residuals of final positions: per point the distance to its target shape and whether it is
/// within tolerance; success when every point is; the goal's cost of those positions.
pub fn outcome(
    spec: &GoalSpec,
    model: &CostModel,
    final_points: &[[f64; 2]],
) -> Result<OutcomeResult, ScoreError> {
    let p = model.len();
    if final_points.len() != p {
        return Err(invalid(
            "bad_shape",
            Some("final_points"),
            format!(
                "this revision has P = {p} source points, got {}",
                final_points.len()
            ),
        ));
    }
    let sources = spec.source_points();
    let mut per_point = Vec::with_capacity(p);
    let mut flat = Vec::with_capacity(p * 2);
    let mut all_within = true;
    let mut sum = 0.0;
    for (k, xy) in final_points.iter().enumerate() {
        if !xy[0].is_finite() || !xy[1].is_finite() {
            return Err(invalid(
                "not_finite",
                Some(&format!("final_points[{k}]")),
                "coordinates must be finite numbers",
            ));
        }
        if xy[0].abs() > MAX_OUTCOME_COORD_PX || xy[1].abs() > MAX_OUTCOME_COORD_PX {
            return Err(invalid(
                "out_of_range",
                Some(&format!("final_points[{k}]")),
                format!(
                    "a final position must lie within {MAX_OUTCOME_COORD_PX} px of the frame's \
                     origin; [{}, {}] is no position a camera saw",
                    xy[0], xy[1]
                ),
            ));
        }
        let d = model
            .distance(k, xy[0], xy[1])
            .ok_or_else(|| ScoreError::Internal(format!("no point {k}")))?;
        let tol = sources[k].tolerance_px;
        let within = d <= tol;
        all_within &= within;
        sum += d;
        per_point.push(OutcomePoint {
            index: k,
            residual_px: d,
            term: sources[k].term,
            tolerance_px: tol,
            within_tolerance: within,
        });
        flat.extend_from_slice(xy);
    }
    let cost = model
        .evaluate_points(&flat, 1, 1)
        .map_err(|e| invalid("bad_prediction", Some("final_points"), e.to_string()))?;
    Ok(OutcomeResult {
        success: all_within,
        per_point,
        cost: cost.costs[0],
        mean_residual_px: sum / p as f64,
    })
}

/// Camera zones for the overlay.
pub struct Zones<'a> {
    /// Safe zone polygon.
    pub safe: Option<&'a [[f64; 2]]>,
    /// No-go polygons.
    pub no_go: &'a [Vec<[f64; 2]>],
}

/// The frame with the goal drawn on it, as PNG (the marking code is `draw::marks`).
pub fn overlay_png(
    spec: &GoalSpec,
    frame_bytes: &[u8],
    zones: Zones<'_>,
) -> Result<Vec<u8>, ScoreError> {
    overlay_png_until(spec, frame_bytes, zones, &|| false)
}

/// [`overlay_png`], given up with an error when `stop` answers true (the client hung up).
pub fn overlay_png_until(
    spec: &GoalSpec,
    frame_bytes: &[u8],
    zones: Zones<'_>,
    stop: &dyn Fn() -> bool,
) -> Result<Vec<u8>, ScoreError> {
    let frame = image::load_from_memory(frame_bytes)
        .map_err(|e| ScoreError::Internal(format!("stored frame unreadable: {e}")))?
        .to_rgba8();
    let items = draw::goal_items(spec, zones.safe, zones.no_go);
    let drawn = draw::render_overlay_until(&frame, &items, stop).ok_or_else(|| {
        ScoreError::Internal("overlay drawing stopped: the client hung up".into())
    })?;
    encode_png_with_caution(drawn.width(), drawn.height(), drawn.as_raw())
}

/// PNG keyword under which overlays carry the safety caution. `Warning` is one of the keywords
/// the PNG specification registers for tEXt chunks ("warning of nature of content", PNG
/// Specification, Third Edition, 11.3.3.2), so ordinary image tools show it.
pub const PNG_CAUTION_KEYWORD: &str = "Warning";

/// Encodes 8-bit RGBA pixels as a PNG that carries [`crate::SAFETY_CAUTION`] in a tEXt chunk
/// (and `Software: goalsmith`), so a picture pasted into a chat still says what it is for.
pub fn encode_png_with_caution(w: u32, h: u32, rgba: &[u8]) -> Result<Vec<u8>, ScoreError> {
    let internal = |e: png::EncodingError| ScoreError::Internal(format!("png encoding: {e}"));
    let mut out = Vec::new();
    {
        let mut enc = png::Encoder::new(&mut out, w, h);
        enc.set_color(png::ColorType::Rgba);
        enc.set_depth(png::BitDepth::Eight);
        enc.add_text_chunk(
            PNG_CAUTION_KEYWORD.to_string(),
            crate::SAFETY_CAUTION.to_string(),
        )
        .map_err(internal)?;
        enc.add_text_chunk("Software".to_string(), "goalsmith".to_string())
            .map_err(internal)?;
        let mut writer = enc.write_header().map_err(internal)?;
        writer.write_image_data(rgba).map_err(internal)?;
        writer.finish().map_err(internal)?;
    }
    Ok(out)
}

/// What goes into a bundle.
pub struct BundleParts<'a> {
    /// The exact revision document bytes.
    pub goal_json: &'a str,
    /// The parsed revision document.
    pub goal: &'a Value,
    /// The camera document as served (intrinsics in both forms, plane, pose, zones).
    pub camera: &'a Value,
    /// Full-size cost maps NPY.
    pub cost_maps_npy: &'a [u8],
    /// The stored frame bytes.
    pub frame: &'a [u8],
    /// `png` or `jpg`.
    pub frame_ext: &'a str,
    /// Number of source points P and the frame size, for the manifest.
    pub points: usize,
    /// Frame width.
    pub width: u32,
    /// Frame height.
    pub height: u32,
    /// The reward fits of the revision's `learned` terms, one per distinct fit, in id order.
    pub reward_fits: &'a [BundledRewardFit],
}

/// A reward fit as a bundle carries it, for the revision's `learned` terms that name it.
#[derive(Debug, Clone)]
pub struct BundledRewardFit {
    /// The fit's id, canonical (lower-case, hyphenated): see [`fit_file_id`].
    pub id: String,
    /// `reward_fits/<id>.json`: canonical JSON of the fit (see docs/conventions.md).
    pub json: Vec<u8>,
    /// `reward_fits/<id>.npy`: the reward map, float32 (rows, cols), the bytes of
    /// `GET /api/reward-fits/{id}/reward-map.npy`.
    pub npy: Vec<u8>,
    /// Grid rows.
    pub rows: usize,
    /// Grid columns.
    pub cols: usize,
    /// Side of a cell, pixels.
    pub cell_px: u32,
}

/// Bundle paths of a fit's JSON and reward map, from its canonical id.
pub fn reward_fit_paths(id: &str) -> (String, String) {
    (
        format!("reward_fits/{id}.json"),
        format!("reward_fits/{id}.npy"),
    )
}

/// The id under which a bundle files a fit: the canonical form of a term's `reward_fit_id`
/// (any form the server accepts names the same fit), or None when it is no fit id at all.
pub fn fit_file_id(raw: &str) -> Option<String> {
    uuid::Uuid::parse_str(raw).ok().map(|u| u.to_string())
}

/// The `learned` terms of a revision document: (term index, its `reward_fit_id` as stored).
pub fn learned_terms(goal: &Value) -> Vec<(usize, &str)> {
    goal["terms"]
        .as_array()
        .map(|terms| {
            terms
                .iter()
                .enumerate()
                .filter(|(_, t)| t["kind"] == "learned")
                .filter_map(|(k, t)| t["reward_fit_id"].as_str().map(|id| (k, id)))
                .collect()
        })
        .unwrap_or_default()
}

fn readme(parts: &BundleParts<'_>) -> String {
    format!(
        "goalsmith goal bundle (format {BUNDLE_FORMAT_VERSION})\n\n\
         CAUTION: {caution}\n\n\
         goal.json       the revision document exactly as the server serves it\n\
         cost-maps.npy   float32, C order, shape (P, H, W) = ({p}, {h}, {w}); entry [p, j, i] is the\n\
         \x20               cost of source point p being at pixel centre (x = i, y = j)\n\
         frame.{ext}       the camera frame the goal is drawn on\n\
         camera.json     the camera: intrinsics (also as ROS CameraInfo), work plane, pose, zones\n\
         {fits}\
         manifest.json   SHA-256 of every other file, format version, this caution\n\n\
         Pixel coordinates are [x, y], x right, y down, the centre of the top-left pixel at (0, 0).\n\
         Source points are numbered over all terms in term order (goal.json derived.points);\n\
         a rigid term contributes one point per source.\n\
         Score offline with: goalsmith cost --bundle THIS.zip --points P.json | --maps M.npy\n",
        caution = crate::SAFETY_CAUTION,
        p = parts.points,
        h = parts.height,
        w = parts.width,
        ext = parts.frame_ext,
        fits = if parts.reward_fits.is_empty() {
            ""
        } else {
            "reward_fits/<id>.json  a learned term's reward fit (one file per fit): grid,\n\
             \x20                      features as submitted, standardisation, weights,\n\
             \x20                      diagnostics, and how to recompute its reward per cell\n\
             reward_fits/<id>.npy   its reward map r, float32, C order, shape (rows, cols); the\n\
             \x20                      term's cost at (x, y) is max(r) - r[floor((y + 0.5) /\n\
             \x20                      cell_px), floor((x + 0.5) / cell_px)], clamped to the grid\n"
        },
    )
}

/// The files of one revision's bundle (without the manifest), in bundle order.
pub fn revision_files(parts: &BundleParts<'_>) -> Vec<(String, Vec<u8>)> {
    let mut files = vec![
        ("goal.json".into(), parts.goal_json.as_bytes().to_vec()),
        ("cost-maps.npy".into(), parts.cost_maps_npy.to_vec()),
        (format!("frame.{}", parts.frame_ext), parts.frame.to_vec()),
        (
            "camera.json".into(),
            goalsmith_core::canonical::to_string(parts.camera).into_bytes(),
        ),
    ];
    for fit in parts.reward_fits {
        let (json_name, npy_name) = reward_fit_paths(&fit.id);
        files.push((json_name, fit.json.clone()));
        files.push((npy_name, fit.npy.clone()));
    }
    files.push(("README.txt".into(), readme(parts).into_bytes()));
    files
}

/// SHA-256 of each file, by name.
pub fn file_hashes(files: &[(String, Vec<u8>)]) -> Value {
    let mut hashes = serde_json::Map::new();
    for (name, bytes) in files {
        hashes.insert(name.clone(), json!(hex::encode(Sha256::digest(bytes))));
    }
    Value::Object(hashes)
}

/// The manifest's list of reward fits: per fit its files, grid and the learned terms using it.
fn manifest_reward_fits(parts: &BundleParts<'_>) -> Value {
    let learned = learned_terms(parts.goal);
    Value::Array(
        parts
            .reward_fits
            .iter()
            .map(|fit| {
                let (json_name, npy_name) = reward_fit_paths(&fit.id);
                let terms: Vec<usize> = learned
                    .iter()
                    .filter(|(_, raw)| fit_file_id(raw).as_deref() == Some(fit.id.as_str()))
                    .map(|(k, _)| *k)
                    .collect();
                json!({
                    "id": fit.id,
                    "file": json_name,
                    "reward_map": {"file": npy_name, "dtype": "float32", "shape": [fit.rows, fit.cols]},
                    "cell_px": fit.cell_px,
                    "terms": terms,
                })
            })
            .collect(),
    )
}

/// The manifest of one revision's bundle.
pub fn revision_manifest(parts: &BundleParts<'_>, files: &[(String, Vec<u8>)]) -> Value {
    json!({
        "format": "goalsmith-bundle",
        "format_version": BUNDLE_FORMAT_VERSION,
        "goal_id": parts.goal["goal_id"],
        "revision": parts.goal["revision"],
        "name": parts.goal["name"],
        "spec_sha256": parts.goal["sha256"],
        "created_at": parts.goal["created_at"],
        "frame": {"file": format!("frame.{}", parts.frame_ext), "width": parts.width, "height": parts.height},
        "cost_maps": {"file": "cost-maps.npy", "dtype": "float32", "shape": [parts.points, parts.height, parts.width]},
        "reward_fits": manifest_reward_fits(parts),
        "files": file_hashes(files),
        "caution": crate::SAFETY_CAUTION,
    })
}

/// A ZIP that is byte-for-byte the same for the same files: given entry order, fixed
/// timestamps (1980-01-01, the ZIP epoch), fixed permissions, deterministic deflate; images,
/// already compressed, are stored.
pub fn zip_files(files: &[(String, Vec<u8>)]) -> Result<Vec<u8>, ScoreError> {
    let mut zip = zip::ZipWriter::new(Cursor::new(Vec::new()));
    let options = zip::write::SimpleFileOptions::default()
        .compression_method(zip::CompressionMethod::Deflated)
        .compression_level(Some(6))
        .last_modified_time(zip::DateTime::default())
        .unix_permissions(0o644);
    let zerr = |e: zip::result::ZipError| ScoreError::Internal(format!("zip: {e}"));
    for (name, bytes) in files {
        let stored = name.ends_with(".png") || name.ends_with(".jpg");
        let opts = if stored {
            options
                .compression_method(zip::CompressionMethod::Stored)
                .compression_level(None)
        } else {
            options
        };
        zip.start_file(name.as_str(), opts).map_err(zerr)?;
        zip.write_all(bytes)
            .map_err(|e| ScoreError::Internal(format!("zip: {e}")))?;
    }
    Ok(zip.finish().map_err(zerr)?.into_inner())
}

fn pretty(v: &Value) -> Result<Vec<u8>, ScoreError> {
    serde_json::to_vec_pretty(v).map_err(|e| ScoreError::Internal(e.to_string()))
}

/// One revision's bundle: its files and `manifest.json`, reproducible byte for byte.
pub fn bundle_zip(parts: &BundleParts<'_>) -> Result<Vec<u8>, ScoreError> {
    let mut files = revision_files(parts);
    let manifest = revision_manifest(parts, &files);
    files.push(("manifest.json".into(), pretty(&manifest)?));
    zip_files(&files)
}

/// A goal set's bundle: each item's revision files under `NN-<goal id>/` (in set order, each
/// with its own manifest) and a top-level `manifest.json` listing items and every file's hash.
pub fn goal_set_zip(set: &Value, items: &[BundleParts<'_>]) -> Result<Vec<u8>, ScoreError> {
    let mut all = Vec::new();
    let mut listed = Vec::new();
    for (k, parts) in items.iter().enumerate() {
        let dir = format!(
            "{:02}-{}",
            k + 1,
            parts.goal["goal_id"].as_str().unwrap_or("goal")
        );
        let mut files = revision_files(parts);
        let manifest = revision_manifest(parts, &files);
        files.push(("manifest.json".into(), pretty(&manifest)?));
        listed.push(json!({
            "position": k + 1,
            "folder": dir,
            "goal_id": parts.goal["goal_id"],
            "revision": parts.goal["revision"],
            "name": parts.goal["name"],
        }));
        all.extend(files.into_iter().map(|(n, b)| (format!("{dir}/{n}"), b)));
    }
    let manifest = json!({
        "format": "goalsmith-goal-set-bundle",
        "format_version": BUNDLE_FORMAT_VERSION,
        "goal_set_id": set["id"],
        "name": set["name"],
        "version": set["version"],
        "items": listed,
        "files": file_hashes(&all),
        "caution": crate::SAFETY_CAUTION,
    });
    all.push(("manifest.json".into(), pretty(&manifest)?));
    zip_files(&all)
}

/// A bundle read back by [`read_bundle`].
pub struct ReadBundle {
    /// The revision document (goal.json, checked against its SHA-256).
    pub goal: Value,
    /// Frame width.
    pub width: u32,
    /// Frame height.
    pub height: u32,
    /// The reward grid of each `learned` term's fit, by the term's `reward_fit_id` as stored.
    pub reward_grids: std::collections::HashMap<String, std::sync::Arc<RewardGrid>>,
}

impl ReadBundle {
    /// The checked goal, its `learned` terms scored from the bundled reward maps.
    pub fn spec(&self) -> Result<GoalSpec, ScoreError> {
        spec_from_revision(&self.goal, self.width, self.height, &|id: &str| {
            self.reward_grids.get(id).cloned()
        })
    }
}

fn bad_bundle(message: impl Into<String>) -> ScoreError {
    invalid("bad_bundle", None, message)
}

/// Reads a bundle back: the revision document, the frame size, and the reward grid of every
/// fit a `learned` term names. goal.json and each fit's files must be listed in manifest.json
/// and match their SHA-256 there; a bundle without a referenced fit (format 1 bundles carried
/// none) is refused, naming the file it lacks.
pub fn read_bundle(bytes: &[u8]) -> Result<ReadBundle, ScoreError> {
    let mut archive = zip::ZipArchive::new(Cursor::new(bytes))
        .map_err(|e| bad_bundle(format!("not a goalsmith bundle: {e}")))?;
    let mut read = |name: &str| -> Result<Vec<u8>, ScoreError> {
        let mut f = archive
            .by_name(name)
            .map_err(|_| bad_bundle(format!("the bundle has no {name}")))?;
        let mut out = Vec::new();
        std::io::Read::read_to_end(&mut f, &mut out)
            .map_err(|e| bad_bundle(format!("{name}: {e}")))?;
        Ok(out)
    };
    let manifest: Value = serde_json::from_slice(&read("manifest.json")?)
        .map_err(|e| bad_bundle(format!("manifest.json: {e}")))?;
    let goal_bytes = read("goal.json")?;
    let want = manifest["files"]["goal.json"].as_str().unwrap_or_default();
    if hex::encode(Sha256::digest(&goal_bytes)) != want {
        return Err(bad_bundle(
            "goal.json does not match its SHA-256 in manifest.json",
        ));
    }
    let goal: Value =
        serde_json::from_slice(&goal_bytes).map_err(|e| bad_bundle(format!("goal.json: {e}")))?;
    let dim = |k: &str| {
        manifest["frame"][k]
            .as_u64()
            .and_then(|v| u32::try_from(v).ok())
            .ok_or_else(|| bad_bundle(format!("manifest.json has no frame {k}")))
    };
    let (width, height) = (dim("width")?, dim("height")?);
    let mut reward_grids = std::collections::HashMap::new();
    let mut by_file_id: std::collections::HashMap<String, std::sync::Arc<RewardGrid>> =
        std::collections::HashMap::new();
    for (k, raw) in learned_terms(&goal) {
        if reward_grids.contains_key(raw) {
            continue;
        }
        let id = fit_file_id(raw).ok_or_else(|| {
            bad_bundle(format!(
                "goal.json: terms[{k}].reward_fit_id {raw:?} is not a reward fit id"
            ))
        })?;
        let grid = match by_file_id.get(&id) {
            Some(g) => g.clone(),
            None => {
                let g = std::sync::Arc::new(read_reward_fit(
                    &mut read, &manifest, &goal, &id, k, width, height,
                )?);
                by_file_id.insert(id, g.clone());
                g
            }
        };
        reward_grids.insert(raw.to_string(), grid);
    }
    Ok(ReadBundle {
        goal,
        width,
        height,
        reward_grids,
    })
}

/// Reads and checks one bundled fit (its JSON and reward map), for learned term `k`.
fn read_reward_fit(
    read: &mut dyn FnMut(&str) -> Result<Vec<u8>, ScoreError>,
    manifest: &Value,
    goal: &Value,
    id: &str,
    k: usize,
    width: u32,
    height: u32,
) -> Result<RewardGrid, ScoreError> {
    let (json_name, npy_name) = reward_fit_paths(id);
    let mut checked = |name: &str, what: &str| -> Result<Vec<u8>, ScoreError> {
        let Some(want) = manifest["files"][name].as_str() else {
            return Err(bad_bundle(format!(
                "manifest.json does not list {name}, {what} of the reward fit that learned term \
                 terms[{k}] uses; bundles of format 1 do not carry reward fits: export the \
                 bundle again"
            )));
        };
        let bytes = read(name)?;
        if hex::encode(Sha256::digest(&bytes)) != want {
            return Err(bad_bundle(format!(
                "{name} does not match its SHA-256 in manifest.json"
            )));
        }
        Ok(bytes)
    };
    let doc: Value = serde_json::from_slice(&checked(&json_name, "the description")?)
        .map_err(|e| bad_bundle(format!("{json_name}: {e}")))?;
    let npy_bytes = checked(&npy_name, "the reward map")?;
    let field = |key: &str| {
        doc[key]
            .as_u64()
            .ok_or_else(|| bad_bundle(format!("{json_name} has no whole number {key}")))
    };
    let cell_px = u32::try_from(field("cell_px")?)
        .map_err(|_| bad_bundle(format!("{json_name}: cell_px is out of range")))?;
    let to_usize = |v: u64, key: &str| {
        usize::try_from(v).map_err(|_| bad_bundle(format!("{json_name}: {key} is out of range")))
    };
    let cols = to_usize(field("cols")?, "cols")?;
    let rows = to_usize(field("rows")?, "rows")?;
    if doc["id"].as_str() != Some(id) {
        return Err(bad_bundle(format!("{json_name} describes another fit")));
    }
    if doc["frame_id"] != goal["frame_id"]
        || (field("width")?, field("height")?) != (u64::from(width), u64::from(height))
    {
        return Err(bad_bundle(format!(
            "{json_name} is a fit on another frame than goal.json's"
        )));
    }
    let arr = npy::read(&npy_bytes, npy_bytes.len())
        .map_err(|e| bad_bundle(format!("{npy_name}: {e}")))?;
    if arr.header.shape != [rows, cols] {
        return Err(bad_bundle(format!(
            "{npy_name} has shape {:?}, not ({rows}, {cols}) as {json_name} says",
            arr.header.shape
        )));
    }
    let values = arr
        .as_f32()
        .map_err(|e| bad_bundle(format!("{npy_name}: {e}")))?
        .to_vec();
    RewardGrid::new(cell_px, cols, rows, values).map_err(|e| bad_bundle(format!("{npy_name}: {e}")))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A revision stored before the per-goal vertex total: refused as the client's request (a
    /// 422 saying why), not as a server fault.
    #[test]
    fn a_stored_revision_past_the_vertex_total_is_refused_not_a_fault() {
        let circle: Vec<[f64; 2]> = (0..1024)
            .map(|k| {
                let a = std::f64::consts::TAU * f64::from(k) / 1024.0;
                [32.0 + 20.0 * a.cos(), 24.0 + 20.0 * a.sin()]
            })
            .collect();
        let region = json!({"kind": "region", "source": [5.0, 5.0], "polygon": circle});
        let doc = json!({"name": "old", "frame_id": "f", "terms": vec![region; 5]});
        match spec_from_revision(&doc, 64, 48, &|_| None) {
            Err(ScoreError::Invalid { code, message, .. }) => {
                assert_eq!(code, "too_many_vertices");
                assert!(message.contains("4096"), "{message}");
            }
            other => panic!("expected too_many_vertices, got {:?}", other.map(|_| ())),
        }
    }
}
