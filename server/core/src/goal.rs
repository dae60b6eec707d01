//! The goal document: what arrives over the wire (unchecked) and the checked [`GoalSpec`]
//! that only exists once every rule of the contract holds.
//!
//! Checking happens once, here; code downstream of a `GoalSpec` never re-validates.

use crate::cost::{CostPoint, CostSettings, Metric, Mode, RewardGrid, Steps, TargetShape};
use crate::distance::Mask;
use crate::geometry::{PixelPoint, Polygon, RowScan};
use crate::rigid::{self, RigidFit};
use serde::{Deserialize, Serialize};
use std::sync::Arc;

/// Default weight of a term.
pub const DEFAULT_WEIGHT: f64 = 1.0;
/// Default tolerance radius (pixels) used for success and `hit` costs.
pub const DEFAULT_TOLERANCE_PX: f64 = 5.0;
/// Longest goal name accepted, in characters.
pub const MAX_NAME_CHARS: usize = crate::names::NameKind::Goal.max_chars();
/// Longest label or note accepted, in characters.
pub const MAX_TEXT_CHARS: usize = 2000;
/// Most terms in one goal.
pub const MAX_TERMS: usize = 256;
/// Most vertices in one polygon and sources in one rigid term.
pub const MAX_VERTICES: usize = 1024;
/// Most polygon vertices and rigid sources over all terms of one goal. A region's cost map
/// costs W·H·vertices to build (every pixel measures every edge), so the total, not each
/// polygon alone, bounds the work of a map or a bundle; refused with `too_many_vertices` on
/// `terms`.
pub const MAX_VERTICES_PER_GOAL: usize = 4096;
/// Most painted pixels over all mask terms of one goal: 2²³ = 8,388,608, a fully painted
/// 4096 × 2048 frame. The safety check tests every painted pixel against every camera zone, so
/// the total over the goal's masks is bounded (up to [`MAX_TERMS`] of them), not each mask
/// alone. A goal past it is refused with `too_many_painted_pixels`, on the mask term whose
/// pixels take the running total over, whether or not the camera has zones and whether or not
/// `override_safety` is set.
pub const MAX_PAINTED_PIXELS_PER_GOAL: usize = 1 << 23;
/// Most mask pixels, painted or not, over all mask terms of one goal: 2²⁶ = 67,108,864, one
/// mask of the largest frame (8192 × 8192) or 32 masks of 1920 × 1080. Every mask is of the
/// frame's size and its cost model keeps a distance index of that size, so this bounds the
/// memory one goal's model can take (several hundred MiB at the limit). Checked from the
/// number of mask terms before any mask is decoded; refused with `too_many_mask_pixels` on
/// `terms`.
pub const MAX_MASK_PIXELS_PER_GOAL: usize = 1 << 26;

/// A pixel coordinate pair `[x, y]` as sent by clients.
pub type Xy = [f64; 2];

/// The goal body of `POST /api/goals` and `PUT /api/goals/{id}`, before any check.
#[derive(Debug, Clone, Deserialize, Serialize)]
#[cfg_attr(feature = "schema", derive(schemars::JsonSchema))]
#[serde(deny_unknown_fields)]
pub struct GoalDocument {
    /// Human name of the goal.
    pub name: String,
    /// The frame the goal is drawn on.
    pub frame_id: String,
    /// The parts of the goal, in order; cost maps follow this order.
    pub terms: Vec<TermDocument>,
    /// How candidate futures are scored; defaults to euclidean, final step, expected cost.
    #[serde(default)]
    pub cost: Option<CostDocument>,
    /// A short note saying why this revision was made.
    #[serde(default)]
    pub note: Option<String>,
    /// Accept targets outside the camera's safe zone or inside a no-go zone; recorded.
    #[serde(default)]
    pub override_safety: bool,
}

/// One term of a goal document.
#[derive(Debug, Clone, Deserialize, Serialize, PartialEq)]
#[cfg_attr(feature = "schema", derive(schemars::JsonSchema))]
#[serde(tag = "kind", rename_all = "snake_case", deny_unknown_fields)]
pub enum TermDocument {
    /// A source pixel that should reach a target pixel.
    Point {
        /// Optional name shown to people.
        #[serde(default, skip_serializing_if = "Option::is_none")]
        label: Option<String>,
        /// Where the thing is now.
        source: Xy,
        /// Where it should end up.
        target: Xy,
        /// Weight in the total cost (≥ 0, default 1).
        #[serde(default, skip_serializing_if = "Option::is_none")]
        weight: Option<f64>,
        /// Success radius in pixels (> 0, default 5).
        #[serde(default, skip_serializing_if = "Option::is_none")]
        tolerance_px: Option<f64>,
    },
    /// A source pixel that should end inside a polygon.
    Region {
        /// Optional name shown to people.
        #[serde(default, skip_serializing_if = "Option::is_none")]
        label: Option<String>,
        /// Where the thing is now.
        source: Xy,
        /// The closed target polygon (at least 3 vertices, not self-intersecting).
        polygon: Vec<Xy>,
        /// Weight in the total cost.
        #[serde(default, skip_serializing_if = "Option::is_none")]
        weight: Option<f64>,
        /// Success radius in pixels around the polygon.
        #[serde(default, skip_serializing_if = "Option::is_none")]
        tolerance_px: Option<f64>,
    },
    /// A source pixel that should end inside a painted area.
    Mask {
        /// Optional name shown to people.
        #[serde(default, skip_serializing_if = "Option::is_none")]
        label: Option<String>,
        /// Where the thing is now.
        source: Xy,
        /// A PNG of the frame's size, base64; painted where luma ≥ 128 and alpha ≥ 128.
        mask_png_base64: String,
        /// Weight in the total cost.
        #[serde(default, skip_serializing_if = "Option::is_none")]
        weight: Option<f64>,
        /// Success radius in pixels around the painted area.
        #[serde(default, skip_serializing_if = "Option::is_none")]
        tolerance_px: Option<f64>,
    },
    /// Several source points of one object that should reach their targets together.
    Rigid {
        /// Optional name shown to people.
        #[serde(default, skip_serializing_if = "Option::is_none")]
        label: Option<String>,
        /// Points on the object now (at least 2).
        sources: Vec<Xy>,
        /// Where each source should end up, in the same order.
        targets: Vec<Xy>,
        /// Fit a similarity (with scale) instead of a rigid transform.
        #[serde(default, skip_serializing_if = "Option::is_none")]
        allow_scale: Option<bool>,
        /// Weight of the whole term, split evenly over its points.
        #[serde(default, skip_serializing_if = "Option::is_none")]
        weight: Option<f64>,
        /// Success radius in pixels for each point.
        #[serde(default, skip_serializing_if = "Option::is_none")]
        tolerance_px: Option<f64>,
    },
    /// A reward fitted from demonstrations.
    Learned {
        /// Optional name shown to people.
        #[serde(default, skip_serializing_if = "Option::is_none")]
        label: Option<String>,
        /// The reward fit this term uses.
        reward_fit_id: String,
        /// Where the thing is now.
        source: Xy,
        /// Weight in the total cost.
        #[serde(default, skip_serializing_if = "Option::is_none")]
        weight: Option<f64>,
    },
}

impl TermDocument {
    /// The `kind` tag as it appears in JSON.
    pub fn kind(&self) -> &'static str {
        match self {
            TermDocument::Point { .. } => "point",
            TermDocument::Region { .. } => "region",
            TermDocument::Mask { .. } => "mask",
            TermDocument::Rigid { .. } => "rigid",
            TermDocument::Learned { .. } => "learned",
        }
    }
}

/// Cost settings as sent by clients.
#[derive(Debug, Clone, Deserialize, Serialize, PartialEq)]
#[cfg_attr(feature = "schema", derive(schemars::JsonSchema))]
#[serde(deny_unknown_fields)]
pub struct CostDocument {
    /// `euclidean`, `squared` or `huber`.
    #[serde(default = "default_metric")]
    pub metric: MetricName,
    /// Huber's δ in pixels; required for, and only allowed with, `huber`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub huber_delta_px: Option<f64>,
    /// `final` (last step only) or `all` (sum over steps).
    #[serde(default = "default_steps")]
    pub steps: StepsName,
    /// `expected` cost or `hit` (negative log probability of ending within tolerance).
    #[serde(default = "default_mode")]
    pub mode: ModeName,
}

fn default_metric() -> MetricName {
    MetricName::Euclidean
}
fn default_steps() -> StepsName {
    StepsName::Final
}
fn default_mode() -> ModeName {
    ModeName::Expected
}

impl Default for CostDocument {
    fn default() -> Self {
        Self {
            metric: MetricName::Euclidean,
            huber_delta_px: None,
            steps: StepsName::Final,
            mode: ModeName::Expected,
        }
    }
}

/// Metric names of the contract.
#[derive(Debug, Clone, Copy, Deserialize, Serialize, PartialEq, Eq)]
#[cfg_attr(feature = "schema", derive(schemars::JsonSchema))]
#[serde(rename_all = "snake_case")]
pub enum MetricName {
    /// m(d) = d.
    Euclidean,
    /// m(d) = d².
    Squared,
    /// Huber with δ = `huber_delta_px`.
    Huber,
}

/// Step modes of the contract.
#[derive(Debug, Clone, Copy, Deserialize, Serialize, PartialEq, Eq)]
#[cfg_attr(feature = "schema", derive(schemars::JsonSchema))]
#[serde(rename_all = "snake_case")]
pub enum StepsName {
    /// Only the last predicted step counts.
    Final,
    /// Every step counts.
    All,
}

/// Cost modes of the contract.
#[derive(Debug, Clone, Copy, Deserialize, Serialize, PartialEq, Eq)]
#[cfg_attr(feature = "schema", derive(schemars::JsonSchema))]
#[serde(rename_all = "snake_case")]
pub enum ModeName {
    /// Expected metric cost.
    Expected,
    /// −ln(ε + probability of ending within tolerance).
    Hit,
}

/// A rule of the goal document that does not hold, with the JSON path of the offending field.
#[derive(Debug, Clone, PartialEq)]
pub struct GoalError {
    /// Machine-readable code, snake_case.
    pub code: &'static str,
    /// A sentence for a person.
    pub message: String,
    /// JSON path such as `terms[2].target`.
    pub field: String,
}

impl GoalError {
    fn new(code: &'static str, field: impl Into<String>, message: impl Into<String>) -> Self {
        Self {
            code,
            message: message.into(),
            field: field.into(),
        }
    }
}

impl std::fmt::Display for GoalError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{}: {}", self.field, self.message)
    }
}

impl std::error::Error for GoalError {}

/// Decodes a term's `mask_png_base64` into (width, height, painted flags), or says why not.
pub type MaskDecoder<'a> = &'a dyn Fn(&str) -> Result<(usize, usize, Vec<bool>), String>;

/// What the check needs to know about the frame and its camera.
pub struct CheckContext<'a> {
    /// Frame width in pixels.
    pub width: u32,
    /// Frame height in pixels.
    pub height: u32,
    /// Targets must lie inside this closed polygon when given (its boundary counts as inside);
    /// a region target wholly, a mask at every painted pixel centre.
    pub safe_zone: Option<&'a Polygon>,
    /// Targets must share no point with any of these closed polygons: touching one is refused.
    pub no_go_zones: &'a [Polygon],
    /// Decodes a term's `mask_png_base64` into (width, height, painted flags).
    pub decode_mask: MaskDecoder<'a>,
    /// The reward grid of a finished reward fit with this id on the goal's frame, if any.
    pub reward_grid: RewardLookup<'a>,
}

/// Finds the reward grid of a finished reward fit by id (see [`CheckContext::reward_grid`]).
pub type RewardLookup<'a> = &'a dyn Fn(&str) -> Option<Arc<RewardGrid>>;

/// A checked term: every coordinate finite and inside the frame, every shape valid.
#[derive(Debug, Clone)]
pub enum Term {
    /// See [`TermDocument::Point`].
    Point {
        /// Source pixel.
        source: PixelPoint,
        /// Target pixel.
        target: PixelPoint,
    },
    /// See [`TermDocument::Region`].
    Region {
        /// Source pixel.
        source: PixelPoint,
        /// Target polygon.
        polygon: Polygon,
    },
    /// See [`TermDocument::Mask`].
    Mask {
        /// Source pixel.
        source: PixelPoint,
        /// Painted target area, of the frame's size.
        mask: Arc<Mask>,
    },
    /// See [`TermDocument::Rigid`].
    Rigid {
        /// Source points.
        sources: Vec<PixelPoint>,
        /// Targets, one per source.
        targets: Vec<PixelPoint>,
        /// The fitted transform (reported; the cost uses per-source distances).
        fit: RigidFit,
    },
    /// See [`TermDocument::Learned`].
    Learned {
        /// Source pixel.
        source: PixelPoint,
        /// The reward fit id.
        reward_fit_id: String,
        /// The fit's reward grid: the term's cost is its negated, min-shifted reward.
        grid: Arc<RewardGrid>,
    },
}

/// A checked term with its shared settings.
#[derive(Debug, Clone)]
pub struct CheckedTerm {
    /// The geometry of the term.
    pub term: Term,
    /// Optional label.
    pub label: Option<String>,
    /// Weight ≥ 0 of the whole term.
    pub weight: f64,
    /// Tolerance radius > 0 in pixels.
    pub tolerance_px: f64,
}

impl CheckedTerm {
    /// The `kind` tag of the term.
    pub fn term_kind(&self) -> &'static str {
        match self.term {
            Term::Point { .. } => "point",
            Term::Region { .. } => "region",
            Term::Mask { .. } => "mask",
            Term::Rigid { .. } => "rigid",
            Term::Learned { .. } => "learned",
        }
    }
}

/// A goal that satisfies every rule of the contract for its frame and camera.
#[derive(Debug, Clone)]
pub struct GoalSpec {
    document: GoalDocument,
    terms: Vec<CheckedTerm>,
    settings: CostSettings,
    width: u32,
    height: u32,
    warnings: Vec<String>,
}

fn check_text(value: &Option<String>, field: String) -> Result<(), GoalError> {
    if let Some(s) = value {
        if s.chars().count() > MAX_TEXT_CHARS {
            return Err(GoalError::new(
                "too_long",
                field,
                format!("at most {MAX_TEXT_CHARS} characters"),
            ));
        }
        // Line breaks and tabs are fine in notes; characters that reorder displayed text are not.
        if let Some(c) = s.chars().find(|&c| crate::names::is_bidi_control(c)) {
            return Err(GoalError::new(
                "bad_character",
                field,
                format!(
                    "cannot hold the bidirectional control U+{:04X}",
                    u32::from(c)
                ),
            ));
        }
    }
    Ok(())
}

struct Frame {
    width: u32,
    height: u32,
}

impl Frame {
    /// A point that must lie inside the frame: x in [−0.5, W − 0.5], y in [−0.5, H − 0.5].
    fn point(&self, xy: Xy, field: &str) -> Result<PixelPoint, GoalError> {
        let p = PixelPoint::new(xy[0], xy[1]).map_err(|_| {
            GoalError::new("not_finite", field, "coordinates must be finite numbers")
        })?;
        let (w, h) = (f64::from(self.width), f64::from(self.height));
        if !(-0.5..=w - 0.5).contains(&p.x()) || !(-0.5..=h - 0.5).contains(&p.y()) {
            return Err(GoalError::new(
                "outside_frame",
                field,
                format!(
                    "[{}, {}] lies outside the {}×{} frame (x must be in [-0.5, {}], y in [-0.5, {}])",
                    xy[0],
                    xy[1],
                    self.width,
                    self.height,
                    w - 0.5,
                    h - 0.5
                ),
            ));
        }
        Ok(p)
    }
}

/// Largest term weight. Weights are relative; this bound keeps a weighted cost of any position
/// a planner can send (squared distances of up to 10^12 px², over hundreds of steps and
/// points) far from floating-point overflow.
pub const MAX_WEIGHT: f64 = 1e6;
/// Largest tolerance radius, pixels: larger than any frame's diagonal.
pub const MAX_TOLERANCE_PX: f64 = 1e5;

fn check_weight(weight: Option<f64>, field: String) -> Result<f64, GoalError> {
    let w = weight.unwrap_or(DEFAULT_WEIGHT);
    if !w.is_finite() || !(0.0..=MAX_WEIGHT).contains(&w) {
        return Err(GoalError::new(
            "bad_weight",
            field,
            format!("weight must be a number from 0 to {MAX_WEIGHT}"),
        ));
    }
    Ok(w)
}

fn check_tolerance(tol: Option<f64>, field: String) -> Result<f64, GoalError> {
    let t = tol.unwrap_or(DEFAULT_TOLERANCE_PX);
    if !t.is_finite() || t <= 0.0 || t > MAX_TOLERANCE_PX {
        return Err(GoalError::new(
            "bad_tolerance",
            field,
            format!("tolerance_px must be a number > 0 and at most {MAX_TOLERANCE_PX}"),
        ));
    }
    Ok(t)
}

fn check_polygon(frame: &Frame, vertices: &[Xy], field: &str) -> Result<Polygon, GoalError> {
    if vertices.len() > MAX_VERTICES {
        return Err(GoalError::new(
            "too_many_vertices",
            field,
            format!("at most {MAX_VERTICES} vertices"),
        ));
    }
    let points = vertices
        .iter()
        .enumerate()
        .map(|(k, xy)| frame.point(*xy, &format!("{field}[{k}]")))
        .collect::<Result<Vec<_>, _>>()?;
    Polygon::new(points).map_err(|e| GoalError::new("bad_polygon", field, e.to_string()))
}

/// Checks a camera zone polygon (safe zone or no-go zone) given in frame pixels.
pub fn check_zone(
    width: u32,
    height: u32,
    vertices: &[Xy],
    field: &str,
) -> Result<Polygon, GoalError> {
    check_polygon(&Frame { width, height }, vertices, field)
}

impl GoalSpec {
    /// Checks a document against its frame and camera. The first failing rule is returned.
    pub fn check(document: GoalDocument, ctx: &CheckContext<'_>) -> Result<Self, GoalError> {
        let frame = Frame {
            width: ctx.width,
            height: ctx.height,
        };
        crate::names::check(crate::names::NameKind::Goal, &document.name)
            .map_err(|e| GoalError::new(e.code(), "name", e.to_string()))?;
        check_text(&document.note, "note".into())?;
        if document.terms.is_empty() {
            return Err(GoalError::new(
                "required",
                "terms",
                "a goal needs at least one term",
            ));
        }
        if document.terms.len() > MAX_TERMS {
            return Err(GoalError::new(
                "too_many_terms",
                "terms",
                format!("at most {MAX_TERMS} terms"),
            ));
        }
        let vertices: usize = document
            .terms
            .iter()
            .map(|t| match t {
                TermDocument::Region { polygon, .. } => polygon.len(),
                TermDocument::Rigid { sources, .. } => sources.len(),
                _ => 0,
            })
            .sum();
        if vertices > MAX_VERTICES_PER_GOAL {
            return Err(GoalError::new(
                "too_many_vertices",
                "terms",
                format!(
                    "at most {MAX_VERTICES_PER_GOAL} polygon vertices and rigid sources over all \
                     terms of a goal; this one has {vertices}"
                ),
            ));
        }
        let masks = document
            .terms
            .iter()
            .filter(|t| matches!(t, TermDocument::Mask { .. }))
            .count();
        let mask_pixels = masks
            .saturating_mul(frame.width as usize)
            .saturating_mul(frame.height as usize);
        if mask_pixels > MAX_MASK_PIXELS_PER_GOAL {
            return Err(GoalError::new(
                "too_many_mask_pixels",
                "terms",
                format!(
                    "at most {MAX_MASK_PIXELS_PER_GOAL} mask pixels over all mask terms of a goal \
                     (masks are of the frame's size, {}×{}); this one has {masks} masks",
                    frame.width, frame.height
                ),
            ));
        }
        let settings = check_cost(document.cost.as_ref())?;

        let mut terms = Vec::with_capacity(document.terms.len());
        for (i, t) in document.terms.iter().enumerate() {
            let f = |name: &str| format!("terms[{i}].{name}");
            let (term, label, weight, tolerance) = match t {
                TermDocument::Point {
                    label,
                    source,
                    target,
                    weight,
                    tolerance_px,
                } => (
                    Term::Point {
                        source: frame.point(*source, &f("source"))?,
                        target: frame.point(*target, &f("target"))?,
                    },
                    label,
                    *weight,
                    *tolerance_px,
                ),
                TermDocument::Region {
                    label,
                    source,
                    polygon,
                    weight,
                    tolerance_px,
                } => (
                    Term::Region {
                        source: frame.point(*source, &f("source"))?,
                        polygon: check_polygon(&frame, polygon, &f("polygon"))?,
                    },
                    label,
                    *weight,
                    *tolerance_px,
                ),
                TermDocument::Mask {
                    label,
                    source,
                    mask_png_base64,
                    weight,
                    tolerance_px,
                } => {
                    let source = frame.point(*source, &f("source"))?;
                    let (mw, mh, painted) = (ctx.decode_mask)(mask_png_base64)
                        .map_err(|m| GoalError::new("bad_mask", f("mask_png_base64"), m))?;
                    if mw != frame.width as usize || mh != frame.height as usize {
                        return Err(GoalError::new(
                            "bad_mask",
                            f("mask_png_base64"),
                            format!(
                                "the mask is {mw}×{mh} but the frame is {}×{}",
                                frame.width, frame.height
                            ),
                        ));
                    }
                    let mask = Mask::new(mw, mh, painted).map_err(|e| {
                        GoalError::new("bad_mask", f("mask_png_base64"), e.to_string())
                    })?;
                    (
                        Term::Mask {
                            source,
                            mask: Arc::new(mask),
                        },
                        label,
                        *weight,
                        *tolerance_px,
                    )
                }
                TermDocument::Rigid {
                    label,
                    sources,
                    targets,
                    allow_scale,
                    weight,
                    tolerance_px,
                } => {
                    if sources.len() > MAX_VERTICES {
                        return Err(GoalError::new(
                            "too_many_points",
                            f("sources"),
                            format!("at most {MAX_VERTICES} points"),
                        ));
                    }
                    let s = sources
                        .iter()
                        .enumerate()
                        .map(|(k, xy)| frame.point(*xy, &f(&format!("sources[{k}]"))))
                        .collect::<Result<Vec<_>, _>>()?;
                    let tg = targets
                        .iter()
                        .enumerate()
                        .map(|(k, xy)| frame.point(*xy, &f(&format!("targets[{k}]"))))
                        .collect::<Result<Vec<_>, _>>()?;
                    let field = if sources.len() != targets.len() {
                        f("targets")
                    } else {
                        f("sources")
                    };
                    let fit = rigid::fit(sources, targets, allow_scale.unwrap_or(false))
                        .map_err(|e| GoalError::new("bad_rigid", field, e.to_string()))?;
                    (
                        Term::Rigid {
                            sources: s,
                            targets: tg,
                            fit,
                        },
                        label,
                        *weight,
                        *tolerance_px,
                    )
                }
                TermDocument::Learned {
                    label,
                    reward_fit_id,
                    source,
                    weight,
                } => {
                    let source = frame.point(*source, &f("source"))?;
                    let Some(grid) = (ctx.reward_grid)(reward_fit_id) else {
                        return Err(GoalError::new(
                            "not_found",
                            f("reward_fit_id"),
                            "no finished reward fit with this id on this goal's frame",
                        ));
                    };
                    (
                        Term::Learned {
                            source,
                            reward_fit_id: reward_fit_id.clone(),
                            grid,
                        },
                        label,
                        *weight,
                        None,
                    )
                }
            };
            check_text(label, f("label"))?;
            terms.push(CheckedTerm {
                term,
                label: label.clone(),
                weight: check_weight(weight, f("weight"))?,
                tolerance_px: check_tolerance(tolerance, f("tolerance_px"))?,
            });
        }

        let warnings = check_safety(&terms, ctx, document.override_safety)?;
        Ok(Self {
            width: ctx.width,
            height: ctx.height,
            document,
            terms,
            settings,
            warnings,
        })
    }

    /// The document as sent, with defaults filled in (weights, tolerances, cost, trimmed name),
    /// which is what a revision stores and serves.
    pub fn normalized_document(&self) -> GoalDocument {
        let mut doc = self.document.clone();
        doc.name = doc.name.trim().to_string();
        doc.cost = Some(self.document.cost.clone().unwrap_or_default());
        for (t, checked) in doc.terms.iter_mut().zip(&self.terms) {
            match t {
                TermDocument::Point {
                    weight,
                    tolerance_px,
                    ..
                }
                | TermDocument::Region {
                    weight,
                    tolerance_px,
                    ..
                }
                | TermDocument::Mask {
                    weight,
                    tolerance_px,
                    ..
                } => {
                    *weight = Some(checked.weight);
                    *tolerance_px = Some(checked.tolerance_px);
                }
                TermDocument::Rigid {
                    weight,
                    tolerance_px,
                    allow_scale,
                    ..
                } => {
                    *weight = Some(checked.weight);
                    *tolerance_px = Some(checked.tolerance_px);
                    *allow_scale = Some(allow_scale.unwrap_or(false));
                }
                TermDocument::Learned { weight, .. } => *weight = Some(checked.weight),
            }
        }
        doc
    }

    /// The checked terms in order.
    pub fn terms(&self) -> &[CheckedTerm] {
        &self.terms
    }

    /// Checked cost settings.
    pub fn settings(&self) -> &CostSettings {
        &self.settings
    }

    /// Frame width and height.
    pub fn frame_size(&self) -> (u32, u32) {
        (self.width, self.height)
    }

    /// Safety warnings (only non-empty when `override_safety` was given).
    pub fn warnings(&self) -> &[String] {
        &self.warnings
    }

    /// Every source point over all terms in term order, with its term index.
    /// A rigid term contributes one entry per source; P is the length of this list.
    pub fn source_points(&self) -> Vec<SourcePoint> {
        let mut out = Vec::new();
        for (i, t) in self.terms.iter().enumerate() {
            match &t.term {
                Term::Point { source, .. }
                | Term::Region { source, .. }
                | Term::Mask { source, .. }
                | Term::Learned { source, .. } => out.push(SourcePoint {
                    term: i,
                    source: *source,
                    weight: t.weight,
                    tolerance_px: t.tolerance_px,
                }),
                Term::Rigid { sources, .. } => {
                    let w = t.weight / sources.len() as f64;
                    out.extend(sources.iter().map(|s| SourcePoint {
                        term: i,
                        source: *s,
                        weight: w,
                        tolerance_px: t.tolerance_px,
                    }));
                }
            }
        }
        out
    }

    /// The cost engine's view of this goal: one [`CostPoint`] per source point.
    /// A learned term's distance is its fit's negated, min-shifted reward ([`RewardGrid`]).
    pub fn cost_points(&self) -> Result<Vec<CostPoint>, GoalError> {
        let mut out = Vec::new();
        for t in &self.terms {
            let mut push = |target: TargetShape, weight: f64| {
                out.push(CostPoint {
                    target,
                    weight,
                    tolerance_px: t.tolerance_px,
                })
            };
            match &t.term {
                Term::Point { target, .. } => push(TargetShape::Point(*target), t.weight),
                Term::Region { polygon, .. } => {
                    push(TargetShape::Region(polygon.clone()), t.weight)
                }
                Term::Mask { mask, .. } => push(TargetShape::Mask(mask.clone()), t.weight),
                Term::Rigid { targets, .. } => {
                    let w = t.weight / targets.len() as f64;
                    for target in targets {
                        push(TargetShape::Point(*target), w);
                    }
                }
                // In reward units, not pixels: "within tolerance" means in a best cell.
                Term::Learned { grid, .. } => out.push(CostPoint {
                    target: TargetShape::Reward(grid.clone()),
                    weight: t.weight,
                    tolerance_px: 0.0,
                }),
            }
        }
        Ok(out)
    }
}

/// One source point of a goal (rigid terms contribute several).
#[derive(Debug, Clone, Copy)]
pub struct SourcePoint {
    /// Index of the term it belongs to.
    pub term: usize,
    /// The source pixel.
    pub source: PixelPoint,
    /// Its share of the term's weight.
    pub weight: f64,
    /// The term's tolerance.
    pub tolerance_px: f64,
}

fn check_cost(doc: Option<&CostDocument>) -> Result<CostSettings, GoalError> {
    let default = CostDocument::default();
    let doc = doc.unwrap_or(&default);
    let metric = match (doc.metric, doc.huber_delta_px) {
        (MetricName::Huber, Some(d)) if d.is_finite() && d > 0.0 => Metric::Huber { delta_px: d },
        (MetricName::Huber, Some(_)) => {
            return Err(GoalError::new(
                "bad_cost",
                "cost.huber_delta_px",
                "huber_delta_px must be a finite number > 0",
            ));
        }
        (MetricName::Huber, None) => {
            return Err(GoalError::new(
                "required",
                "cost.huber_delta_px",
                "the huber metric needs huber_delta_px",
            ));
        }
        (_, Some(_)) => {
            return Err(GoalError::new(
                "bad_cost",
                "cost.huber_delta_px",
                "huber_delta_px applies only to the huber metric",
            ));
        }
        (MetricName::Euclidean, None) => Metric::Euclidean,
        (MetricName::Squared, None) => Metric::Squared,
    };
    let steps = match doc.steps {
        StepsName::Final => Steps::Final,
        StepsName::All => Steps::All,
    };
    let mode = match doc.mode {
        ModeName::Expected => Mode::Expected,
        ModeName::Hit => Mode::Hit,
    };
    CostSettings::new(metric, steps, mode)
        .map_err(|e| GoalError::new("bad_cost", "cost", e.to_string()))
}

/// What is unsafe about one term: the error code, the field under the term, and a sentence.
type SafetyProblem = (&'static str, String, String);

/// The safety check of a point target: outside the safe zone, or in a no-go zone. Both zones
/// are closed, so a target on the safe zone's edge is inside it and one on a no-go zone's edge
/// is in the no-go zone.
fn point_problem(ctx: &CheckContext<'_>, p: PixelPoint) -> Option<(&'static str, String)> {
    let (x, y) = (p.x(), p.y());
    if let Some(zone) = ctx.safe_zone
        && !zone.contains(x, y)
    {
        return Some((
            "outside_safe_zone",
            format!("the target at [{x}, {y}] lies outside the camera's safe zone"),
        ));
    }
    let k = ctx.no_go_zones.iter().position(|z| z.contains(x, y))?;
    Some((
        "inside_no_go_zone",
        format!("the target at [{x}, {y}] lies inside no-go zone {k} of the camera"),
    ))
}

/// The safety check of a region target, exact (see [`Polygon::covers`] and
/// [`Polygon::intersects`]): the whole region, boundary included, must lie in the closed safe
/// zone, and it must share no point with any closed no-go zone. Touching a no-go zone's edge
/// or corner is refused — with a real arm the conservative reading is the safe one — while
/// running along the safe zone's edge is accepted, as a point target there is.
fn region_problem(ctx: &CheckContext<'_>, polygon: &Polygon) -> Option<(&'static str, String)> {
    if let Some(zone) = ctx.safe_zone
        && !zone.covers(polygon)
    {
        return Some((
            "outside_safe_zone",
            "the target region reaches outside the camera's safe zone".into(),
        ));
    }
    let k = ctx.no_go_zones.iter().position(|z| z.intersects(polygon))?;
    Some((
        "inside_no_go_zone",
        format!("the target region overlaps or touches no-go zone {k} of the camera"),
    ))
}

/// The safety check of a mask target: every painted pixel centre (i, j) must lie in the closed
/// safe zone and in no closed no-go zone; the first offender in row order is named.
///
/// Cost: one pass over the mask's flags, and for each row with a painted pixel an O(n) set-up
/// of a [`RowScan`] per zone (n its edge count), then O(log n) per zone for each painted pixel.
/// Nothing is allocated per pixel or per row; the scanners' buffers are reused.
fn mask_problem(ctx: &CheckContext<'_>, mask: &Mask) -> Option<(&'static str, String)> {
    if ctx.safe_zone.is_none() && ctx.no_go_zones.is_empty() {
        return None;
    }
    let mut safe = ctx.safe_zone.map(RowScan::new);
    let mut no_go: Vec<RowScan<'_>> = ctx.no_go_zones.iter().map(RowScan::new).collect();
    for (j, row) in mask.data().chunks_exact(mask.width()).enumerate() {
        if !row.contains(&true) {
            continue;
        }
        let y = j as f64;
        if let Some(s) = &mut safe {
            s.set_row(y);
        }
        for z in &mut no_go {
            z.set_row(y);
        }
        for (i, _) in row.iter().enumerate().filter(|(_, painted)| **painted) {
            let x = i as f64;
            if let Some(s) = &safe
                && !s.contains(x)
            {
                return Some((
                    "outside_safe_zone",
                    format!("painted pixel [{i}, {j}] lies outside the camera's safe zone"),
                ));
            }
            if let Some(k) = no_go.iter().position(|z| z.contains(x)) {
                return Some((
                    "inside_no_go_zone",
                    format!("painted pixel [{i}, {j}] lies inside no-go zone {k} of the camera"),
                ));
            }
        }
    }
    None
}

fn check_safety(
    terms: &[CheckedTerm],
    ctx: &CheckContext<'_>,
    override_safety: bool,
) -> Result<Vec<String>, GoalError> {
    check_safety_with_limit(terms, ctx, override_safety, MAX_PAINTED_PIXELS_PER_GOAL)
}

/// [`check_safety`] with the painted-pixel bound as an argument, so tests can reach it with
/// small masks.
fn check_safety_with_limit(
    terms: &[CheckedTerm],
    ctx: &CheckContext<'_>,
    override_safety: bool,
    max_painted: usize,
) -> Result<Vec<String>, GoalError> {
    let mut warnings = Vec::new();
    let mut painted = 0usize;
    for (i, t) in terms.iter().enumerate() {
        let problem: Option<SafetyProblem> = match &t.term {
            Term::Point { target, .. } => {
                point_problem(ctx, *target).map(|(c, m)| (c, "target".to_string(), m))
            }
            Term::Rigid { targets, .. } => targets.iter().enumerate().find_map(|(k, p)| {
                point_problem(ctx, *p).map(|(c, m)| (c, format!("targets[{k}]"), m))
            }),
            Term::Region { polygon, .. } => {
                region_problem(ctx, polygon).map(|(c, m)| (c, "polygon".to_string(), m))
            }
            Term::Mask { mask, .. } => {
                // Counted before the zones are looked at: the bound holds whatever the camera.
                painted = painted.saturating_add(mask.data().iter().filter(|&&p| p).count());
                if painted > max_painted {
                    return Err(GoalError::new(
                        "too_many_painted_pixels",
                        format!("terms[{i}].mask_png_base64"),
                        format!(
                            "the masks of one goal may paint at most {max_painted} pixels in \
                             all; with this term they paint {painted}"
                        ),
                    ));
                }
                mask_problem(ctx, mask).map(|(c, m)| (c, "mask_png_base64".to_string(), m))
            }
            Term::Learned { .. } => None,
        };
        if let Some((code, field, message)) = problem {
            let field = format!("terms[{i}].{field}");
            if override_safety {
                warnings.push(format!("{field}: {message} (safety override recorded)"));
            } else {
                return Err(GoalError::new(
                    code,
                    field,
                    format!("{message}; send override_safety: true to accept it deliberately"),
                ));
            }
        }
    }
    Ok(warnings)
}

#[cfg(test)]
mod tests {
    use super::*;

    const W: u32 = 64;
    const H: u32 = 48;

    fn zone(v: &[Xy]) -> Polygon {
        check_zone(W, H, v, "zone").unwrap()
    }

    /// The safe zone leaves out the right edge of the 64×48 frame; one small no-go square.
    fn bench_camera() -> (Polygon, Vec<Polygon>) {
        (
            zone(&[[0.0, 0.0], [56.0, 0.0], [56.0, 47.0], [0.0, 47.0]]),
            vec![zone(&[
                [20.0, 30.0],
                [30.0, 30.0],
                [30.0, 40.0],
                [20.0, 40.0],
            ])],
        )
    }

    /// An L-shaped safe zone: the frame's top strip and left strip, reflex corner at (20, 20).
    fn l_zone() -> Polygon {
        zone(&[
            [0.0, 0.0],
            [40.0, 0.0],
            [40.0, 20.0],
            [20.0, 20.0],
            [20.0, 40.0],
            [0.0, 40.0],
        ])
    }

    /// Test masks are written "i,j i,j …": the painted pixel centres of a 64×48 frame.
    fn decode_pixels(s: &str) -> Result<(usize, usize, Vec<bool>), String> {
        let (w, h) = (W as usize, H as usize);
        let mut flags = vec![false; w * h];
        for pair in s.split_whitespace() {
            let parse = |v: &str| v.parse::<usize>().map_err(|e| e.to_string());
            let (i, j) = pair.split_once(',').ok_or("not i,j")?;
            flags[parse(j)? * w + parse(i)?] = true;
        }
        Ok((w, h, flags))
    }

    fn check(
        safe: Option<&Polygon>,
        no_go: &[Polygon],
        terms: Vec<TermDocument>,
        override_safety: bool,
    ) -> Result<GoalSpec, GoalError> {
        let ctx = CheckContext {
            width: W,
            height: H,
            safe_zone: safe,
            no_go_zones: no_go,
            decode_mask: &decode_pixels,
            reward_grid: &|_| None,
        };
        GoalSpec::check(document(terms, override_safety), &ctx)
    }

    fn document(terms: Vec<TermDocument>, override_safety: bool) -> GoalDocument {
        GoalDocument {
            name: "repot the seedlings".into(),
            frame_id: "frame".into(),
            terms,
            cost: None,
            note: None,
            override_safety,
        }
    }

    fn region(polygon: &[Xy]) -> TermDocument {
        TermDocument::Region {
            label: None,
            source: [5.0, 5.0],
            polygon: polygon.to_vec(),
            weight: None,
            tolerance_px: None,
        }
    }

    fn mask(pixels: &str) -> TermDocument {
        TermDocument::Mask {
            label: None,
            source: [5.0, 5.0],
            mask_png_base64: pixels.into(),
            weight: None,
            tolerance_px: None,
        }
    }

    fn point(target: Xy) -> TermDocument {
        TermDocument::Point {
            label: None,
            source: [5.0, 5.0],
            target,
            weight: None,
            tolerance_px: None,
        }
    }

    fn refusal(result: Result<GoalSpec, GoalError>) -> (&'static str, String, String) {
        let e = result.expect_err("the goal should be refused");
        (e.code, e.field, e.message)
    }

    const BAND: [Xy; 4] = [[10.0, 34.0], [40.0, 34.0], [40.0, 36.0], [10.0, 36.0]];
    const CORNER_CUT: [Xy; 4] = [[18.0, 21.0], [21.0, 18.0], [22.0, 19.0], [19.0, 22.0]];

    #[test]
    fn a_band_through_a_no_go_zone_is_refused() {
        // No vertex of the band lies in the no-go square, and no corner of the square in the
        // band: the vertex-only check let this through.
        let (safe, no_go) = bench_camera();
        let (code, field, message) =
            refusal(check(Some(&safe), &no_go, vec![region(&BAND)], false));
        assert_eq!(
            (code, field.as_str()),
            ("inside_no_go_zone", "terms[0].polygon")
        );
        assert!(message.contains("no-go zone 0"), "{message}");
        // Touching the square's bottom edge is refused too; a pixel below it is not.
        let along = [[10.0, 40.0], [40.0, 40.0], [40.0, 44.0], [10.0, 44.0]];
        let (code, ..) = refusal(check(Some(&safe), &no_go, vec![region(&along)], false));
        assert_eq!(code, "inside_no_go_zone");
        let below = [[10.0, 41.0], [40.0, 41.0], [40.0, 44.0], [10.0, 44.0]];
        assert!(check(Some(&safe), &no_go, vec![region(&below)], false).is_ok());
        // A region swallowing the whole square.
        let around = [[15.0, 25.0], [35.0, 25.0], [35.0, 45.0], [15.0, 45.0]];
        let (code, field, _) = refusal(check(Some(&safe), &no_go, vec![region(&around)], false));
        assert_eq!(
            (code, field.as_str()),
            ("inside_no_go_zone", "terms[0].polygon")
        );
    }

    #[test]
    fn a_region_cutting_the_corner_of_an_l_shaped_safe_zone_is_refused() {
        let l = l_zone();
        assert!(CORNER_CUT.iter().all(|v| l.contains(v[0], v[1])));
        let (code, field, _) = refusal(check(Some(&l), &[], vec![region(&CORNER_CUT)], false));
        assert_eq!(
            (code, field.as_str()),
            ("outside_safe_zone", "terms[0].polygon")
        );
        // On the safe zone's boundary counts as inside: the left arm exactly, and a triangle
        // whose edge passes through the reflex corner.
        let arm = [[0.0, 0.0], [20.0, 0.0], [20.0, 40.0], [0.0, 40.0]];
        let through = [[10.0, 30.0], [30.0, 10.0], [10.0, 10.0]];
        let spec = check(Some(&l), &[], vec![region(&arm), region(&through)], false).unwrap();
        assert!(spec.warnings().is_empty());
        // Later terms are checked too: the refusal names the offending term.
        let (_, field, _) = refusal(check(
            Some(&l),
            &[],
            vec![region(&arm), region(&CORNER_CUT)],
            false,
        ));
        assert_eq!(field, "terms[1].polygon");
    }

    #[test]
    fn the_override_stores_the_goal_and_names_every_unsafe_term() {
        let (safe, no_go) = bench_camera();
        let l = l_zone();
        let spec = check(
            Some(&safe),
            &no_go,
            vec![point([10.0, 10.0]), region(&BAND), point([25.0, 35.0])],
            true,
        )
        .unwrap();
        let w = spec.warnings();
        assert_eq!(w.len(), 2, "{w:?}");
        assert!(w[0].starts_with("terms[1].polygon: ") && w[0].contains("no-go zone 0"));
        assert!(w[1].starts_with("terms[2].target: ") && w[1].contains("override recorded"));
        let spec = check(Some(&l), &[], vec![region(&CORNER_CUT)], true).unwrap();
        assert_eq!(spec.warnings().len(), 1);
        assert!(spec.warnings()[0].starts_with("terms[0].polygon: "));
        assert!(spec.warnings()[0].contains("outside the camera's safe zone"));
    }

    /// A convex polygon of `n` vertices on a circle inside the 64×48 frame.
    fn circle(n: usize) -> Vec<Xy> {
        (0..n)
            .map(|k| {
                let a = std::f64::consts::TAU * k as f64 / n as f64;
                [32.0 + 20.0 * a.cos(), 24.0 + 20.0 * a.sin()]
            })
            .collect()
    }

    #[test]
    fn vertices_are_bounded_over_the_whole_goal() {
        // At the limit: four polygons of MAX_VERTICES each make MAX_VERTICES_PER_GOAL.
        let at: Vec<TermDocument> = (0..MAX_VERTICES_PER_GOAL / MAX_VERTICES)
            .map(|_| region(&circle(MAX_VERTICES)))
            .collect();
        assert!(check(None, &[], at.clone(), false).is_ok());
        // One triangle more is past it, though every polygon alone is within MAX_VERTICES.
        let mut past = at;
        past.push(region(&circle(3)));
        let (code, field, message) = refusal(check(None, &[], past, false));
        assert_eq!((code, field.as_str()), ("too_many_vertices", "terms"));
        assert!(message.contains("4096"), "{message}");
        // Rigid sources count too.
        let mut rigid_past: Vec<TermDocument> =
            (0..3).map(|_| region(&circle(MAX_VERTICES))).collect();
        rigid_past.push(region(&circle(3)));
        rigid_past.push(TermDocument::Rigid {
            label: None,
            sources: vec![[2.0, 2.0]; MAX_VERTICES],
            targets: vec![[12.0, 2.0]; MAX_VERTICES],
            allow_scale: None,
            weight: None,
            tolerance_px: None,
        });
        let (code, field, _) = refusal(check(None, &[], rigid_past, false));
        assert_eq!((code, field.as_str()), ("too_many_vertices", "terms"));
    }

    #[test]
    fn point_and_rigid_targets_keep_their_fields() {
        let (safe, no_go) = bench_camera();
        let (code, field, _) = refusal(check(Some(&safe), &no_go, vec![point([60.0, 5.0])], false));
        assert_eq!(
            (code, field.as_str()),
            ("outside_safe_zone", "terms[0].target")
        );
        // On the no-go square's edge: in the zone.
        let (code, field, _) =
            refusal(check(Some(&safe), &no_go, vec![point([30.0, 33.0])], false));
        assert_eq!(
            (code, field.as_str()),
            ("inside_no_go_zone", "terms[0].target")
        );
        // On the safe zone's edge: inside it.
        assert!(check(Some(&safe), &no_go, vec![point([56.0, 5.0])], false).is_ok());
        let rigid = TermDocument::Rigid {
            label: None,
            sources: vec![[2.0, 2.0], [6.0, 2.0]],
            targets: vec![[12.0, 2.0], [22.0, 30.0]],
            allow_scale: Some(true),
            weight: None,
            tolerance_px: None,
        };
        let (code, field, _) = refusal(check(Some(&safe), &no_go, vec![rigid], false));
        assert_eq!(
            (code, field.as_str()),
            ("inside_no_go_zone", "terms[0].targets[1]")
        );
    }

    #[test]
    fn masks_are_checked_pixel_by_pixel() {
        let (safe, no_go) = bench_camera();
        // Pixel (30, 35) lies on the no-go square's right edge: touching counts as inside.
        let (code, field, message) = refusal(check(
            Some(&safe),
            &no_go,
            vec![mask("31,35 30,35 32,35")],
            false,
        ));
        assert_eq!(
            (code, field.as_str()),
            ("inside_no_go_zone", "terms[0].mask_png_base64")
        );
        assert!(message.contains("[30, 35]"), "{message}");
        assert!(check(Some(&safe), &no_go, vec![mask("31,35 32,35 20,29")], false).is_ok());
        // Column 57 is right of the safe zone; column 56 is its edge.
        let (code, field, message) =
            refusal(check(Some(&safe), &no_go, vec![mask("56,3 57,3")], false));
        assert_eq!(
            (code, field.as_str()),
            ("outside_safe_zone", "terms[0].mask_png_base64")
        );
        assert!(message.contains("[57, 3]"), "{message}");
        let spec = check(Some(&safe), &no_go, vec![mask("57,3"), mask("25,35")], true).unwrap();
        assert_eq!(spec.warnings().len(), 2);
        assert!(spec.warnings()[1].starts_with("terms[1].mask_png_base64: "));
    }

    #[test]
    fn a_mask_filling_an_l_shaped_safe_zone_is_accepted_and_one_more_pixel_is_not() {
        let l = l_zone();
        // Every pixel centre of the closed L, its boundary rows and columns included.
        let mut inside = String::new();
        for j in 0..H as usize {
            for i in 0..W as usize {
                if l.contains(i as f64, j as f64) {
                    inside.push_str(&format!("{i},{j} "));
                }
            }
        }
        assert!(inside.contains(" 20,40 ") && inside.contains(" 40,20 "));
        let no_go = [zone(&[[50.0, 30.0], [60.0, 30.0], [55.0, 40.0]])];
        assert!(check(Some(&l), &no_go, vec![mask(&inside)], false).is_ok());
        let (code, _, message) = refusal(check(
            Some(&l),
            &no_go,
            vec![mask(&format!("{inside} 21,21"))],
            false,
        ));
        assert_eq!(code, "outside_safe_zone");
        assert!(message.contains("[21, 21]"), "{message}");
    }

    fn mask_term(painted: &[(usize, usize)]) -> CheckedTerm {
        let (w, h) = (W as usize, H as usize);
        let mut flags = vec![false; w * h];
        for &(i, j) in painted {
            flags[j * w + i] = true;
        }
        CheckedTerm {
            term: Term::Mask {
                source: PixelPoint::new(1.0, 1.0).unwrap(),
                mask: Arc::new(Mask::new(w, h, flags).unwrap()),
            },
            label: None,
            weight: 1.0,
            tolerance_px: 5.0,
        }
    }

    #[test]
    fn the_painted_pixel_bound_counts_over_all_mask_terms() {
        let (safe, no_go) = bench_camera();
        let ctx = CheckContext {
            width: W,
            height: H,
            safe_zone: Some(&safe),
            no_go_zones: &no_go,
            decode_mask: &decode_pixels,
            reward_grid: &|_| None,
        };
        let terms = [
            mask_term(&[(1, 1), (2, 1), (3, 1)]),
            mask_term(&[(4, 4), (5, 4)]),
        ];
        assert!(check_safety_with_limit(&terms, &ctx, false, 5).is_ok());
        for override_safety in [false, true] {
            let e = check_safety_with_limit(&terms, &ctx, override_safety, 4).unwrap_err();
            assert_eq!(
                (e.code, e.field.as_str()),
                ("too_many_painted_pixels", "terms[1].mask_png_base64")
            );
            assert!(e.message.contains("at most 4 pixels"), "{}", e.message);
        }
        let e = check_safety_with_limit(&terms, &ctx, false, 2).unwrap_err();
        assert_eq!(e.field, "terms[0].mask_png_base64");
    }

    /// The public bound itself, at and just past it: a fully painted 4096×2048 frame is
    /// exactly 2²³ pixels.
    #[test]
    fn the_public_painted_pixel_bound_is_enforced_by_the_goal_check() {
        let (w, h) = (4096u32, 2048u32);
        assert_eq!(w as usize * h as usize, MAX_PAINTED_PIXELS_PER_GOAL);
        let decode = |s: &str| -> Result<(usize, usize, Vec<bool>), String> {
            let n = w as usize * h as usize;
            Ok(match s {
                "all" => (w as usize, h as usize, vec![true; n]),
                _ => {
                    let mut flags = vec![false; n];
                    flags[0] = true;
                    (w as usize, h as usize, flags)
                }
            })
        };
        let ctx = CheckContext {
            width: w,
            height: h,
            safe_zone: None,
            no_go_zones: &[],
            decode_mask: &decode,
            reward_grid: &|_| None,
        };
        assert!(GoalSpec::check(document(vec![mask("all")], false), &ctx).is_ok());
        let e = GoalSpec::check(document(vec![mask("all"), mask("one")], true), &ctx)
            .expect_err("one pixel past the bound");
        assert_eq!(
            (e.code, e.field.as_str()),
            ("too_many_painted_pixels", "terms[1].mask_png_base64")
        );
        assert!(e.message.contains("8388608"), "{}", e.message);
    }

    #[test]
    fn mask_pixels_are_bounded_before_any_mask_is_decoded() {
        // 1920 × 1080 frames: 32 masks fit in 2^26 pixels, 33 do not. The decoder is never
        // reached past the bound (it would fail the test), and at the bound it runs.
        let (w, h) = (1920u32, 1080u32);
        let decoded = std::cell::Cell::new(0usize);
        let decode = |_: &str| -> Result<(usize, usize, Vec<bool>), String> {
            decoded.set(decoded.get() + 1);
            let mut flags = vec![false; w as usize * h as usize];
            flags[0] = true;
            Ok((w as usize, h as usize, flags))
        };
        let ctx = CheckContext {
            width: w,
            height: h,
            safe_zone: None,
            no_go_zones: &[],
            decode_mask: &decode,
            reward_grid: &|_| None,
        };
        let mask = || TermDocument::Mask {
            label: None,
            source: [1.0, 1.0],
            mask_png_base64: "x".into(),
            weight: None,
            tolerance_px: None,
        };
        let at = MAX_MASK_PIXELS_PER_GOAL / (w as usize * h as usize);
        assert_eq!(at, 32);
        assert!(GoalSpec::check(document((0..at).map(|_| mask()).collect(), false), &ctx).is_ok());
        assert_eq!(decoded.get(), at);
        decoded.set(0);
        let e = GoalSpec::check(document((0..=at).map(|_| mask()).collect(), false), &ctx)
            .expect_err("one mask past the bound");
        assert_eq!(
            (e.code, e.field.as_str()),
            ("too_many_mask_pixels", "terms")
        );
        assert_eq!(decoded.get(), 0, "refused before decoding");
    }
}
