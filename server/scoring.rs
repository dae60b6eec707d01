//! Scoring and export of a stored revision, shared by the HTTP routes and the offline CLI
//! (`goalsmith cost --bundle …`), so both give the same numbers from the same code.

use crate::draw;
pub use goalsmith_bundle::{
    BUNDLE_FORMAT_VERSION, BundleParts, BundledRewardFit, ReadBundle, ScoreError, bundle_zip,
    file_hashes, fit_file_id, goal_set_zip, invalid, learned_terms, model, model_until,
    read_bundle, revision_files, revision_manifest, reward_fit_paths, spec_from_revision,
    zip_files,
};
use goalsmith_core::cost::{CostModel, CostResult, MapBatch, PreparedMaps};
use goalsmith_core::goal::GoalSpec;
use goalsmith_core::npy;
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

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
    /// Also return `grad`, ∂cost/∂point of shape (N, T, P, 2) (docs/conventions.md,
    /// "Gradients").
    #[serde(default)]
    pub grad: bool,
}

/// Predicted points read from a JSON cost body.
pub struct JsonPoints {
    /// (N, T, P, 2) flattened, C order.
    pub flat: Vec<f64>,
    /// N.
    pub n: usize,
    /// T.
    pub t: usize,
    /// Whether the body asked for the gradient.
    pub grad: bool,
}

/// A scored batch: the costs, and the gradient when it was asked for.
pub struct Scored {
    /// Costs, per-point shares, best.
    pub result: CostResult,
    /// ∂C_n/∂x, (N, T, P, 2) flattened, with (T, P).
    pub grad: Option<(Vec<f64>, usize, usize)>,
}

impl From<CostResult> for Scored {
    fn from(result: CostResult) -> Self {
        Scored { result, grad: None }
    }
}

/// Predicted points (N, T, P, 2) from JSON `{"points": …, "grad"?: bool}`, flattened.
pub fn points_from_json(body: &[u8], p: usize) -> Result<JsonPoints, ScoreError> {
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
    Ok(JsonPoints {
        flat,
        n,
        t,
        grad: parsed.grad,
    })
}

/// Scores a request body against a model: JSON points, or an NPY of float32/float16
/// probability maps (N, T, P, h, w) — or of points (N, T, P, 2) as float32/float64.
pub fn evaluate(
    model: &CostModel,
    content_type: &str,
    body: &[u8],
    max_bytes: usize,
) -> Result<Scored, ScoreError> {
    let p = model.len();
    let cost_err =
        |e: goalsmith_core::cost::CostError| invalid("bad_prediction", None, e.to_string());
    match content_type {
        "application/json" => {
            let pts = points_from_json(body, p)?;
            if pts.grad {
                let (result, grad) = model
                    .evaluate_points_grad(&pts.flat, pts.n, pts.t)
                    .map_err(cost_err)?;
                Ok(Scored {
                    result,
                    grad: Some((grad, pts.t, p)),
                })
            } else {
                model
                    .evaluate_points(&pts.flat, pts.n, pts.t)
                    .map(Scored::from)
                    .map_err(cost_err)
            }
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
                    model
                        .evaluate_points(&flat, *n, *t)
                        .map(Scored::from)
                        .map_err(cost_err)
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
                    model
                        .evaluate_maps(batch, *n, *t, *h, *w)
                        .map(Scored::from)
                        .map_err(cost_err)
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
    /// With `"grad": true`: grad[n][t][p] = ∂C_n/∂(x, y) of predicted point p at step t.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub grad: Option<Vec<Vec<Vec<[f64; 2]>>>>,
    /// per_point[n][p]: point p's weighted share of C_n, so each row sums to `costs[n]`.
    pub per_point: Vec<Vec<f64>>,
}

/// The response body of a cost evaluation.
pub fn cost_response(s: &Scored) -> CostResponse {
    let r = &s.result;
    CostResponse {
        best: r.best,
        costs: r.costs.clone(),
        grad: s.grad.as_ref().map(|(g, t, p)| {
            g.chunks_exact(t * p * 2)
                .map(|cand| {
                    cand.chunks_exact(p * 2)
                        .map(|step| step.chunks_exact(2).map(|xy| [xy[0], xy[1]]).collect())
                        .collect()
                })
                .collect()
        }),
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
