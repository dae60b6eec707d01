//! The cost of candidate futures against a goal, exactly as `docs/conventions.md` defines it.
//!
//! A goal contributes P source points, each with a target shape (a point, a polygon region or a
//! painted mask), a weight w_p (a rigid term's weight already split over its points) and a
//! tolerance tol_p. For a predicted position x the distance d_p(x) is Euclidean to the target
//! point, to the closed polygon (0 inside) or to the nearest painted pixel centre (0 on one),
//! and the metric m is `euclidean` d, `squared` d² or `huber` (d²/2 up to δ, δ(d − δ/2) beyond).
//!
//! Candidates come as points (N, T, P, 2) or probability maps (N, T, P, h, w):
//! - points, `expected`: c = m(d_p(x)); `hit`: c = −ln(ε + 1[d_p(x) ≤ tol_p]);
//! - maps, `expected`: c = Σ_u P(u)·M_p(u) with the cost map M_p = m(d_p) at (h, w);
//!   `hit`: c = −ln(ε + Σ_{u: d_p(u) ≤ tol_p} P(u)); ε = [`HIT_EPSILON`].
//!
//! `final` uses t = T−1 only (and reads nothing else), `all` sums over t; the total is
//! C_n = Σ_p w_p Σ_t c. Probability maps are used as given, **not** renormalised: the cost is
//! the P-weighted sum, so a planner sending maps that sum to s gets s times the expected cost.
//!
//! A map of size (h, w) other than the frame's (W, H) samples frame point
//! ((i + 0.5)·W/w − 0.5, (j + 0.5)·H/h − 0.5) for map pixel (i, j), exactly, for every target
//! kind; it is not an interpolation of the full-size map.
//!
//! Work runs on the current rayon pool; wrap a call in `ThreadPool::install` to choose the
//! number of threads (the benchmarks do this to report one thread and all cores).

use crate::distance::{self, Mask};
use crate::geometry::{PixelPoint, Polygon};
use half::f16;
use half::slice::HalfFloatSliceExt;
use rayon::prelude::*;
use std::sync::Arc;
use thiserror::Error;

/// ε in the `hit` cost −ln(ε + probability).
pub const HIT_EPSILON: f64 = 1e-9;
/// Most values (P · h · w) in one stack of cost maps.
pub const MAX_MAP_VALUES: usize = 1 << 27;

/// Why a cost model cannot be built or a batch cannot be scored.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum CostError {
    /// Huber's δ must be a finite number > 0.
    #[error("huber delta must be a finite number > 0 px, got {0}")]
    BadHuberDelta(f64),
    /// The frame has no pixels.
    #[error("the frame must be at least 1x1 pixels, got {width}x{height}")]
    BadFrameSize {
        /// Width given.
        width: usize,
        /// Height given.
        height: usize,
    },
    /// A goal needs at least one source point.
    #[error("a cost model needs at least one source point")]
    NoPoints,
    /// A weight is negative or not finite.
    #[error("point {point}: weight must be a finite number >= 0, got {value}")]
    BadWeight {
        /// Index of the source point.
        point: usize,
        /// The weight.
        value: f64,
    },
    /// A tolerance is negative or not finite.
    #[error("point {point}: tolerance must be a finite number >= 0 px, got {value}")]
    BadTolerance {
        /// Index of the source point.
        point: usize,
        /// The tolerance.
        value: f64,
    },
    /// A mask target is not of the frame's size.
    #[error(
        "point {point}: the mask is {mask_width}x{mask_height} but the frame is {width}x{height}"
    )]
    MaskSize {
        /// Index of the source point.
        point: usize,
        /// Mask width.
        mask_width: usize,
        /// Mask height.
        mask_height: usize,
        /// Frame width.
        width: usize,
        /// Frame height.
        height: usize,
    },
    /// A requested map size is zero or too large.
    #[error(
        "cost maps of {width}x{height} for {points} points are not possible (each side >= 1, at most {MAX_MAP_VALUES} values in all)"
    )]
    BadMapSize {
        /// Map width.
        width: usize,
        /// Map height.
        height: usize,
        /// Number of source points.
        points: usize,
    },
    /// The batch has no candidates or no steps.
    #[error("a batch needs at least one candidate and one step, got N={n}, T={t}")]
    EmptyBatch {
        /// Candidates.
        n: usize,
        /// Steps.
        t: usize,
    },
    /// The batch length does not match its shape.
    #[error("the batch has {got} values but shape {shape} needs {expected}")]
    BatchShape {
        /// The shape, e.g. `(N=4, T=10, P=2, 2)`.
        shape: String,
        /// Values the shape needs.
        expected: String,
        /// Values given.
        got: usize,
    },
    /// A predicted point is NaN or infinite.
    #[error("candidate {candidate}, step {step}, point {point}: coordinates must be finite")]
    NonFinitePoint {
        /// n.
        candidate: usize,
        /// t.
        step: usize,
        /// p.
        point: usize,
    },
    /// A probability map has a negative, NaN or infinite entry (or sums beyond f32 range).
    #[error(
        "candidate {candidate}, step {step}, point {point}: probability maps must hold finite values >= 0"
    )]
    BadProbability {
        /// n.
        candidate: usize,
        /// t.
        step: usize,
        /// p.
        point: usize,
    },
    /// A cost overflowed (coordinates astronomically far from the frame).
    #[error("candidate {candidate}: the cost is not a finite number (coordinates too far out)")]
    NonFiniteCost {
        /// n.
        candidate: usize,
    },
}

/// The metric m(d) applied to a distance in pixels.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Metric {
    /// m(d) = d.
    Euclidean,
    /// m(d) = d².
    Squared,
    /// m(d) = d²/2 for d ≤ δ, δ(d − δ/2) beyond.
    Huber {
        /// δ in pixels, finite and > 0.
        delta_px: f64,
    },
}

impl Metric {
    /// m(d).
    pub fn apply(&self, d: f64) -> f64 {
        match *self {
            Metric::Euclidean => d,
            Metric::Squared => d * d,
            Metric::Huber { delta_px } => {
                if d <= delta_px {
                    0.5 * d * d
                } else {
                    delta_px * (d - 0.5 * delta_px)
                }
            }
        }
    }
}

impl Metric {
    /// m′(d) for a distance d ≥ 0: 1 for `euclidean`, 2d for `squared`, d up to δ and δ beyond
    /// for `huber` (continuous at δ, so Huber's m is differentiable everywhere).
    pub fn derivative(&self, d: f64) -> f64 {
        match *self {
            Metric::Euclidean => 1.0,
            Metric::Squared => 2.0 * d,
            Metric::Huber { delta_px } => {
                if d <= delta_px {
                    d
                } else {
                    delta_px
                }
            }
        }
    }
}

/// Which predicted steps count.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Steps {
    /// Only t = T − 1.
    Final,
    /// Every t, summed.
    All,
}

/// Expected metric cost, or negative log probability of being within tolerance.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Mode {
    /// c = m(d) for points, Σ P·M for maps.
    Expected,
    /// c = −ln(ε + probability of d ≤ tol).
    Hit,
}

/// Checked cost settings.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CostSettings {
    metric: Metric,
    steps: Steps,
    mode: Mode,
}

impl CostSettings {
    /// Checks the settings: Huber's δ finite and > 0.
    pub fn new(metric: Metric, steps: Steps, mode: Mode) -> Result<Self, CostError> {
        if let Metric::Huber { delta_px } = metric
            && !(delta_px.is_finite() && delta_px > 0.0)
        {
            return Err(CostError::BadHuberDelta(delta_px));
        }
        Ok(Self {
            metric,
            steps,
            mode,
        })
    }
    /// The metric.
    pub fn metric(&self) -> Metric {
        self.metric
    }
    /// Which steps count.
    pub fn steps(&self) -> Steps {
        self.steps
    }
    /// Expected or hit.
    pub fn mode(&self) -> Mode {
        self.mode
    }
}

/// Where a source point should end up.
#[derive(Debug, Clone)]
pub enum TargetShape {
    /// A target pixel.
    Point(PixelPoint),
    /// Anywhere inside (or on) a polygon.
    Region(Polygon),
    /// On a painted pixel of a mask of the frame's size.
    Mask(Arc<Mask>),
    /// Where a fitted reward is highest (a `learned` term).
    Reward(Arc<RewardGrid>),
}

/// A fitted reward on square cells of `cell_px` over the frame, as a `learned` term's target.
///
/// Its "distance" at a frame point is the negated, min-shifted reward of the cell holding it:
/// d(x, y) = r_max − r(c, r), 0 in the best cells and positive elsewhere, with the cell
/// c = ⌊(x + 0.5) / cell_px⌋, r = ⌊(y + 0.5) / cell_px⌋, clamped to the grid (a point outside
/// the frame takes the nearest edge cell). The upsampling to pixels is therefore piecewise
/// constant (nearest cell), evaluated exactly at any point, so a resampled map is exact too.
#[derive(Debug, Clone, PartialEq)]
pub struct RewardGrid {
    cell_px: u32,
    cols: usize,
    rows: usize,
    /// r at cell (c, r) in entry r·cols + c.
    values: Vec<f32>,
    max: f64,
}

impl RewardGrid {
    /// A grid of `cols` × `rows` cells of `cell_px` pixels with rewards `values` (row-major).
    /// Refuses an empty grid, a length that is not cols × rows, and non-finite rewards.
    pub fn new(cell_px: u32, cols: usize, rows: usize, values: Vec<f32>) -> Result<Self, String> {
        if cell_px == 0 || cols == 0 || rows == 0 {
            return Err("a reward grid has at least one cell of at least 1 px".into());
        }
        if cols.checked_mul(rows) != Some(values.len()) {
            return Err(format!(
                "a {cols} × {rows} reward grid needs {} values, not {}",
                cols * rows,
                values.len()
            ));
        }
        if values.iter().any(|v| !v.is_finite()) {
            return Err("a reward grid holds finite rewards only".into());
        }
        let max = values
            .iter()
            .fold(f64::NEG_INFINITY, |m, &v| m.max(f64::from(v)));
        Ok(Self {
            cell_px,
            cols,
            rows,
            values,
            max,
        })
    }

    /// d(x, y) = r_max − r(cell of (x, y)), see the type's documentation.
    pub fn cost_at(&self, x: f64, y: f64) -> f64 {
        let cell = f64::from(self.cell_px);
        let index = |v: f64, n: usize| -> usize {
            let k = ((v + 0.5) / cell).floor();
            if k.is_nan() || k <= 0.0 {
                0
            } else {
                (k as usize).min(n - 1)
            }
        };
        let (c, r) = (index(x, self.cols), index(y, self.rows));
        self.max - f64::from(self.values[r * self.cols + c])
    }

    /// Grid columns.
    pub fn cols(&self) -> usize {
        self.cols
    }
    /// Grid rows.
    pub fn rows(&self) -> usize {
        self.rows
    }
    /// Side of a cell, pixels.
    pub fn cell_px(&self) -> u32 {
        self.cell_px
    }
    /// The rewards, row-major.
    pub fn values(&self) -> &[f32] {
        &self.values
    }
}

/// One source point of a goal as the cost engine sees it.
#[derive(Debug, Clone)]
pub struct CostPoint {
    /// Its target.
    pub target: TargetShape,
    /// w_p ≥ 0 (a rigid term's weight already divided by its number of points).
    pub weight: f64,
    /// tol_p ≥ 0 in pixels, used by `hit` mode.
    pub tolerance_px: f64,
}

/// Candidates' costs.
#[derive(Debug, Clone, PartialEq)]
pub struct CostResult {
    /// C_n for each candidate.
    pub costs: Vec<f64>,
    /// per_point[n][p] = w_p Σ_t c, so costs[n] = Σ_p per_point[n][p].
    pub per_point: Vec<Vec<f64>>,
    /// argmin of `costs` (the first on ties).
    pub best: usize,
}

/// Probability maps (N, T, P, h, w), C order.
#[derive(Debug, Clone, Copy)]
pub enum MapBatch<'a> {
    /// float32 maps.
    F32(&'a [f32]),
    /// float16 maps, converted to float32 on the fly.
    F16(&'a [f16]),
}

impl MapBatch<'_> {
    fn len(&self) -> usize {
        match self {
            MapBatch::F32(v) => v.len(),
            MapBatch::F16(v) => v.len(),
        }
    }
}

/// A goal's source points with their targets, ready to score candidates.
#[derive(Debug, Clone)]
pub struct CostModel {
    width: usize,
    height: usize,
    points: Vec<CostPoint>,
    settings: CostSettings,
    /// For mask targets: the column index for exact off-grid queries.
    mask_index: Vec<Option<MaskIndex>>,
}

impl CostModel {
    /// Checks and builds a model for a `frame_width` × `frame_height` frame: at least one
    /// point, weights and tolerances finite and ≥ 0, masks of the frame's size.
    pub fn new(
        frame_width: usize,
        frame_height: usize,
        points: Vec<CostPoint>,
        settings: CostSettings,
    ) -> Result<Self, CostError> {
        Self::new_until(frame_width, frame_height, points, settings, &|| false)
            .map(|m| m.expect("never stopped"))
    }

    /// [`Self::new`], asking `stop` before each mask's index is built (the one part of a
    /// model that takes long: a pass over the mask per mask term); `Ok(None)` when it said
    /// stop, so work for a client that has gone is given up.
    pub fn new_until(
        frame_width: usize,
        frame_height: usize,
        points: Vec<CostPoint>,
        settings: CostSettings,
        stop: &dyn Fn() -> bool,
    ) -> Result<Option<Self>, CostError> {
        if frame_width == 0 || frame_height == 0 {
            return Err(CostError::BadFrameSize {
                width: frame_width,
                height: frame_height,
            });
        }
        if points.is_empty() {
            return Err(CostError::NoPoints);
        }
        let mut mask_index = Vec::with_capacity(points.len());
        for (i, p) in points.iter().enumerate() {
            if !(p.weight.is_finite() && p.weight >= 0.0) {
                return Err(CostError::BadWeight {
                    point: i,
                    value: p.weight,
                });
            }
            if !(p.tolerance_px.is_finite() && p.tolerance_px >= 0.0) {
                return Err(CostError::BadTolerance {
                    point: i,
                    value: p.tolerance_px,
                });
            }
            mask_index.push(match &p.target {
                TargetShape::Mask(m) => {
                    if m.width() != frame_width || m.height() != frame_height {
                        return Err(CostError::MaskSize {
                            point: i,
                            mask_width: m.width(),
                            mask_height: m.height(),
                            width: frame_width,
                            height: frame_height,
                        });
                    }
                    if stop() {
                        return Ok(None);
                    }
                    Some(MaskIndex::new(m))
                }
                _ => None,
            });
        }
        Ok(Some(Self {
            width: frame_width,
            height: frame_height,
            points,
            settings,
            mask_index,
        }))
    }

    /// Number of source points P.
    pub fn len(&self) -> usize {
        self.points.len()
    }
    /// Always false: a model has at least one point.
    pub fn is_empty(&self) -> bool {
        self.points.is_empty()
    }
    /// The source points in order.
    pub fn points(&self) -> &[CostPoint] {
        &self.points
    }
    /// The checked settings.
    pub fn settings(&self) -> &CostSettings {
        &self.settings
    }
    /// Frame (width, height).
    pub fn frame_size(&self) -> (usize, usize) {
        (self.width, self.height)
    }

    /// d_p at frame position (x, y), which may lie anywhere, also outside the frame.
    /// `None` when `p` is not a point index.
    pub fn distance(&self, p: usize, x: f64, y: f64) -> Option<f64> {
        let point = self.points.get(p)?;
        Some(match &point.target {
            TargetShape::Point(t) => t.distance_to(x, y),
            TargetShape::Region(poly) => poly.distance(x, y),
            TargetShape::Mask(_) => self.mask_index[p].as_ref()?.distance(x, y),
            TargetShape::Reward(g) => g.cost_at(x, y),
        })
    }

    /// d_p at (x, y), the value [`Self::distance`] gives, with its gradient ∇d_p from the same
    /// search: the unit vector from the nearest target point (the target point, the nearest
    /// point of the region's boundary, the nearest painted pixel centre) towards (x, y); (0, 0)
    /// at the target point, inside the region or on a painted pixel centre, and for `learned`
    /// terms (their cost is constant on each grid cell). Where the nearest point is not unique,
    /// the first found is used (documented per shape in `docs/conventions.md`), a subgradient.
    /// `None` when `p` is not a point index.
    pub fn distance_and_gradient(&self, p: usize, x: f64, y: f64) -> Option<(f64, [f64; 2])> {
        let point = self.points.get(p)?;
        let unit = crate::geometry::unit_vector;
        Some(match &point.target {
            TargetShape::Point(t) => (t.distance_to(x, y), unit(x - t.x(), y - t.y())),
            TargetShape::Region(poly) => poly.distance_and_gradient(x, y),
            TargetShape::Mask(_) => {
                let index = self.mask_index[p].as_ref()?;
                match index.nearest(x, y) {
                    Some((d, i, j)) => (d, unit(x - i, y - j)),
                    None => (index.distance(x, y), [0.0, 0.0]),
                }
            }
            TargetShape::Reward(g) => (g.cost_at(x, y), [0.0, 0.0]),
        })
    }

    /// Frame coordinates of the pixel centres of a (h, w) map: (xs of length w, ys of length h),
    /// x_i = (i + 0.5)·W/w − 0.5, y_j = (j + 0.5)·H/h − 0.5 (exactly i, j at the frame size).
    pub fn map_coordinates(&self, width: usize, height: usize) -> (Vec<f64>, Vec<f64>) {
        (
            sample_positions(self.width, width),
            sample_positions(self.height, height),
        )
    }

    /// Distance maps d_p at the pixel centres of a (height, width) map, shape (P, h, w).
    pub fn distance_maps(&self, width: usize, height: usize) -> Result<Vec<f64>, CostError> {
        let plane = self.check_map_size(width, height)?;
        let mut out = Vec::with_capacity(plane * self.points.len());
        self.distance_planes(width, height, &|| false, |_, d| out.extend_from_slice(d))?;
        Ok(out)
    }

    /// The distance maps one plane (source point) at a time, in order, handed to `each` as
    /// `(p, d_p)`, so a caller that converts them (to float32 NPY bytes, say) holds one plane of
    /// float64 rather than all of them. `stop` is asked between rows and between planes: when it
    /// answers true the work ends early and `Ok(false)` is returned (a client that hung up);
    /// otherwise `Ok(true)`. The values are those of [`Self::distance_maps`] exactly.
    pub fn distance_planes(
        &self,
        width: usize,
        height: usize,
        stop: &(dyn Fn() -> bool + Sync),
        mut each: impl FnMut(usize, &[f64]),
    ) -> Result<bool, CostError> {
        let plane = self.check_map_size(width, height)?;
        let (xs, ys) = self.map_coordinates(width, height);
        let mut dst = vec![0.0f64; plane];
        for (p, point) in self.points.iter().enumerate() {
            if stop() {
                return Ok(false);
            }
            match &point.target {
                TargetShape::Point(t) => {
                    for (row, &y) in dst.chunks_exact_mut(width).zip(&ys) {
                        if stop() {
                            return Ok(false);
                        }
                        for (v, &x) in row.iter_mut().zip(&xs) {
                            *v = t.distance_to(x, y);
                        }
                    }
                }
                TargetShape::Region(poly) => {
                    dst.par_chunks_mut(width)
                        .zip(ys.par_iter())
                        .for_each(|(row, &y)| {
                            // A region row costs width × vertices: the check is cheap beside it.
                            if stop() {
                                return;
                            }
                            for (v, &x) in row.iter_mut().zip(&xs) {
                                *v = poly.distance(x, y);
                            }
                        });
                    if stop() {
                        return Ok(false); // rows were skipped: the plane is incomplete
                    }
                }
                TargetShape::Mask(m) => dst.copy_from_slice(&distance::edt_at(m, &xs, &ys)),
                TargetShape::Reward(g) => {
                    for (row, &y) in dst.chunks_exact_mut(width).zip(&ys) {
                        for (v, &x) in row.iter_mut().zip(&xs) {
                            *v = g.cost_at(x, y);
                        }
                    }
                }
            }
            each(p, &dst);
        }
        Ok(true)
    }

    /// Bytes this model holds beyond its own struct, roughly: the masks and, for each mask
    /// target, its column index (two float32 per frame pixel). For bounding caches by bytes.
    pub fn approx_bytes(&self) -> usize {
        let points = self.points.len() * std::mem::size_of::<CostPoint>();
        let shapes: usize = self
            .points
            .iter()
            .map(|p| match &p.target {
                TargetShape::Point(_) => 0,
                TargetShape::Region(poly) => poly.vertices().len() * 16,
                TargetShape::Mask(m) => m.width() * m.height(),
                TargetShape::Reward(g) => g.values().len() * 4,
            })
            .sum();
        let index: usize = self
            .mask_index
            .iter()
            .flatten()
            .map(|i| (i.up.len() + i.down.len()) * 4)
            .sum();
        points + shapes + index
    }

    /// The cost maps M_p = m(d_p) as float32, shape (P, height, width), C order.
    pub fn cost_maps(&self, width: usize, height: usize) -> Result<Vec<f32>, CostError> {
        let metric = self.settings.metric;
        Ok(self
            .distance_maps(width, height)?
            .into_iter()
            .map(|d| metric.apply(d) as f32)
            .collect())
    }

    /// Precomputes what scoring (N, T, P, height, width) maps needs: the cost maps for
    /// `expected`, the within-tolerance indicators for `hit`. Keep it to score many batches.
    pub fn prepare_maps(&self, width: usize, height: usize) -> Result<PreparedMaps, CostError> {
        Ok(self.prepare_maps_until(width, height, &|| false)?.0)
    }

    /// [`Self::prepare_maps`] built plane by plane from [`Self::distance_planes`] (one float64
    /// plane held, not the stack), stopping early when `stop` answers true: the flag says
    /// whether the maps are complete (an incomplete set must not be used). The values are those
    /// of the whole-stack build exactly.
    pub fn prepare_maps_until(
        &self,
        width: usize,
        height: usize,
        stop: &(dyn Fn() -> bool + Sync),
    ) -> Result<(PreparedMaps, bool), CostError> {
        let plane = self.check_map_size(width, height)?;
        let metric = self.settings.metric;
        let mode = self.settings.mode;
        let mut kernel: Vec<f32> = Vec::with_capacity(plane * self.points.len());
        let done = self.distance_planes(width, height, stop, |p, ds| match mode {
            Mode::Expected => kernel.extend(ds.iter().map(|&d| metric.apply(d) as f32)),
            Mode::Hit => {
                let tol = self.points[p].tolerance_px;
                kernel.extend(ds.iter().map(|&d| if d <= tol { 1.0 } else { 0.0 }));
            }
        })?;
        Ok((
            PreparedMaps {
                width,
                height,
                weights: self.points.iter().map(|p| p.weight).collect(),
                settings: self.settings,
                kernel,
            },
            done,
        ))
    }

    /// Scores probability maps of shape (n, t, P, height, width); see [`PreparedMaps::evaluate`].
    pub fn evaluate_maps(
        &self,
        maps: MapBatch<'_>,
        n: usize,
        t: usize,
        height: usize,
        width: usize,
    ) -> Result<CostResult, CostError> {
        check_batch(maps.len(), n, t, self.len(), height, width)?;
        self.prepare_maps(width, height)?.evaluate(maps, n, t)
    }

    /// Scores predicted points, `points` of shape (n, t, P, 2) C order (`[x, y]` last).
    pub fn evaluate_points(
        &self,
        points: &[f64],
        n: usize,
        t: usize,
    ) -> Result<CostResult, CostError> {
        let np = self.len();
        if n == 0 || t == 0 {
            return Err(CostError::EmptyBatch { n, t });
        }
        let expected = n.checked_mul(t).and_then(|v| v.checked_mul(np * 2));
        if expected != Some(points.len()) {
            return Err(CostError::BatchShape {
                shape: format!("(N={n}, T={t}, P={np}, 2)"),
                expected: expected.map_or("more than 2^64".into(), |e| e.to_string()),
                got: points.len(),
            });
        }
        if let Some(k) = points.iter().position(|v| !v.is_finite()) {
            let k = k / 2;
            return Err(CostError::NonFinitePoint {
                candidate: k / (t * np),
                step: (k / np) % t,
                point: k % np,
            });
        }
        let steps = step_range(self.settings.steps, t);
        let stride = t * np * 2;
        let mut per = vec![0.0f64; n * np];
        let score = |(cand, out): (&[f64], &mut [f64])| {
            for s in steps.clone() {
                let row = &cand[s * np * 2..(s + 1) * np * 2];
                for (p, acc) in out.iter_mut().enumerate() {
                    let (x, y) = (row[2 * p], row[2 * p + 1]);
                    let d = self.distance(p, x, y).unwrap_or(f64::INFINITY);
                    *acc += match self.settings.mode {
                        Mode::Expected => self.settings.metric.apply(d),
                        Mode::Hit => hit_cost(if d <= self.points[p].tolerance_px {
                            1.0
                        } else {
                            0.0
                        }),
                    };
                }
            }
            for (acc, p) in out.iter_mut().zip(&self.points) {
                *acc *= p.weight;
            }
        };
        let work = n * steps.len() * np;
        if work >= 4096 && may_fan_out() {
            points
                .par_chunks_exact(stride)
                .zip(per.par_chunks_exact_mut(np))
                .with_min_len(64)
                .for_each(score);
        } else {
            points
                .chunks_exact(stride)
                .zip(per.chunks_exact_mut(np))
                .for_each(score);
        }
        finish(per, np)
    }

    /// [`Self::evaluate_points`] and the exact gradient of each candidate's cost C_n with respect
    /// to its predicted points, shaped as `points` (N, T, P, 2):
    /// ∂C_n/∂x_{n,t,p} = w_p · m′(d_p(x)) · ∇d_p(x) for each counted step (`final`: T − 1 only,
    /// zero elsewhere) in `expected` mode, see [`Self::distance_and_gradient`]. In `hit` mode the
    /// cost is constant except where d_p = tol_p, so the gradient is zero (and zero is taken on
    /// that boundary too). The costs are those of [`Self::evaluate_points`] bit for bit.
    pub fn evaluate_points_grad(
        &self,
        points: &[f64],
        n: usize,
        t: usize,
    ) -> Result<(CostResult, Vec<f64>), CostError> {
        let result = self.evaluate_points(points, n, t)?;
        let np = self.len();
        let mut grad = vec![0.0f64; points.len()];
        if self.settings.mode == Mode::Hit {
            return Ok((result, grad));
        }
        let steps = step_range(self.settings.steps, t);
        let stride = t * np * 2;
        let metric = self.settings.metric;
        let fill = |(cand, out): (&[f64], &mut [f64])| {
            for s in steps.clone() {
                let at = s * np * 2;
                for (p, point) in self.points.iter().enumerate() {
                    let (x, y) = (cand[at + 2 * p], cand[at + 2 * p + 1]);
                    let (d, g) = self
                        .distance_and_gradient(p, x, y)
                        .unwrap_or((f64::INFINITY, [0.0, 0.0]));
                    let k = point.weight * metric.derivative(d);
                    out[at + 2 * p] = k * g[0];
                    out[at + 2 * p + 1] = k * g[1];
                }
            }
        };
        if n * steps.len() * np >= 4096 && may_fan_out() {
            points
                .par_chunks_exact(stride)
                .zip(grad.par_chunks_exact_mut(stride))
                .with_min_len(64)
                .for_each(fill);
        } else {
            points
                .chunks_exact(stride)
                .zip(grad.chunks_exact_mut(stride))
                .for_each(fill);
        }
        Ok((result, grad))
    }

    fn check_map_size(&self, width: usize, height: usize) -> Result<usize, CostError> {
        let bad = CostError::BadMapSize {
            width,
            height,
            points: self.len(),
        };
        if width == 0 || height == 0 {
            return Err(bad);
        }
        match width
            .checked_mul(height)
            .and_then(|v| v.checked_mul(self.len()))
        {
            Some(v) if v <= MAX_MAP_VALUES => Ok(width * height),
            _ => Err(bad),
        }
    }
}

/// (i + 0.5)·frame/size − 0.5 for i in 0..size, computed so that size == frame gives exactly i.
fn sample_positions(frame: usize, size: usize) -> Vec<f64> {
    let (f, s) = (frame as f64, size as f64);
    (0..size).map(|i| (i as f64 + 0.5) * f / s - 0.5).collect()
}

fn step_range(steps: Steps, t: usize) -> std::ops::Range<usize> {
    match steps {
        Steps::Final => t - 1..t,
        Steps::All => 0..t,
    }
}

fn hit_cost(probability: f64) -> f64 {
    -(HIT_EPSILON + probability).ln()
}

fn check_batch(
    len: usize,
    n: usize,
    t: usize,
    p: usize,
    height: usize,
    width: usize,
) -> Result<(), CostError> {
    if n == 0 || t == 0 {
        return Err(CostError::EmptyBatch { n, t });
    }
    let expected = [t, p, height, width]
        .iter()
        .try_fold(n, |acc, &d| acc.checked_mul(d));
    if expected != Some(len) {
        return Err(CostError::BatchShape {
            shape: format!("(N={n}, T={t}, P={p}, h={height}, w={width})"),
            expected: expected.map_or("more than 2^64".into(), |e| e.to_string()),
            got: len,
        });
    }
    Ok(())
}

/// Totals, argmin, and the overflow check from the flat (N, P) weighted contributions.
fn finish(per: Vec<f64>, np: usize) -> Result<CostResult, CostError> {
    let costs: Vec<f64> = per.chunks_exact(np).map(|c| c.iter().sum()).collect();
    if let Some(candidate) = costs.iter().position(|c| !c.is_finite()) {
        return Err(CostError::NonFiniteCost { candidate });
    }
    let mut best = 0;
    for (i, &c) in costs.iter().enumerate() {
        if c < costs[best] {
            best = i;
        }
    }
    Ok(CostResult {
        costs,
        per_point: per.chunks_exact(np).map(<[f64]>::to_vec).collect(),
        best,
    })
}

thread_local! {
    /// Set while [`on_this_thread`] runs: scoring then stays on the calling thread.
    static ON_THIS_THREAD: std::cell::Cell<bool> = const { std::cell::Cell::new(false) };
}

/// Runs `f` with every scoring call it makes (maps, points, gradients) on the calling thread
/// alone, never handing work to rayon's workers. For a caller that asked for one thread: a
/// one-thread pool would cost a hand-off to its worker and back on every call (tens to
/// hundreds of microseconds when the worker has gone to sleep). Results are the same either
/// way: each candidate is scored on its own, by the same code.
pub fn on_this_thread<R>(f: impl FnOnce() -> R) -> R {
    struct Restore(bool);
    impl Drop for Restore {
        fn drop(&mut self) {
            ON_THIS_THREAD.with(|c| c.set(self.0));
        }
    }
    let _restore = Restore(ON_THIS_THREAD.with(|c| c.replace(true)));
    f()
}

/// Whether a scoring call may spread its candidates over rayon's workers.
fn may_fan_out() -> bool {
    !ON_THIS_THREAD.with(std::cell::Cell::get)
}

/// A model's maps at one size, ready to score batches of probability maps.
#[derive(Debug, Clone)]
pub struct PreparedMaps {
    width: usize,
    height: usize,
    weights: Vec<f64>,
    settings: CostSettings,
    /// (P, h, w): M_p for `expected`, 1[d_p ≤ tol_p] for `hit`.
    kernel: Vec<f32>,
}

/// Values summed in float32 lanes before the lanes are added into a float64 total; keeps the
/// rounding error of a map's sum near 1e-6 relative whatever the map size.
const BLOCK: usize = 1024;
/// Independent float32 accumulators, so the compiler can keep several vector registers busy.
const LANES: usize = 16;

/// How far ahead of the read position the map kernels ask for data, in bytes. The kernels read
/// a batch's maps one after another in memory order, one stream, and prefetch into whatever
/// follows the map they are reading (the next map, for all but the last). The hardware
/// prefetcher alone leaves one thread's streaming well below the memory's rate, and a prefetch
/// must be issued far ahead to hide the memory's latency. On the 200 × 10 × 2 × 64² batch, one
/// thread, an AMD EPYC (CPU family 26, Zen 5) read float32 maps in 1.67–1.70 ms and float16
/// maps in 0.87–0.94 ms at 8 KiB ahead, against 1.76–1.77 and 0.94–0.98 ms at 6 KiB and 1.84
/// and 1.14 ms at 4 KiB; 10 to 24 KiB were no faster. Reading four maps at once instead (four
/// streams, each load of the cost map serving all four, the best distance 3 KiB ahead in each)
/// took 1.89 and 1.15 ms there, so the kernels read one map at a time. At 128² (a 64 KiB cost
/// map per point) the four streams were a little faster (7.5 against 7.9 ms, 3.9 against
/// 4.6 ms); one read pattern for every size was kept.
const PREFETCH_BYTES: usize = 8192;

/// Hints the CPU to fetch the cache line at `p` into L1. Any address is allowed.
#[inline(always)]
pub(crate) fn prefetch(p: *const u8) {
    #[cfg(target_arch = "x86_64")]
    // SAFETY: a prefetch is only a hint: it never faults and reads nothing architecturally, so
    // any address is fine (callers form it with `wrapping_add`, which is not UB either).
    unsafe {
        std::arch::x86_64::_mm_prefetch::<{ std::arch::x86_64::_MM_HINT_T0 }>(p.cast())
    };
    #[cfg(not(target_arch = "x86_64"))]
    let _ = p;
}

/// Σ a·b in float32 lanes flushed to float64 every [`BLOCK`] values, and the minimum of `a`
/// (NaN in `a` shows up as a NaN sum, so the caller checks sum finite and min ≥ 0). With
/// `PREFETCH`, `a` is prefetched [`PREFETCH_BYTES`] ahead (into whatever follows it in the
/// batch); prefetching changes no result.
#[inline(always)]
fn dot_min_f32<const PREFETCH: bool>(a: &[f32], b: &[f32]) -> (f64, f32) {
    let mut total = [0.0f64; LANES];
    let mut mn = [f32::INFINITY; LANES];
    let ahead = a.as_ptr().cast::<u8>().wrapping_add(PREFETCH_BYTES);
    let mut offset = 0usize;
    for (ab, bb) in a.chunks(BLOCK).zip(b.chunks(BLOCK)) {
        add_block(ab, bb, &mut total, &mut mn, || {
            if PREFETCH {
                prefetch(ahead.wrapping_add(offset));
                offset += LANES * 4;
            }
        });
        offset = offset.wrapping_add(ab.len() % LANES * 4);
    }
    lanes_result(&total, &mn)
}

/// One block (at most [`BLOCK`] values) of [`dot_min_f32`]: Σ a·b in [`LANES`] float32 lanes
/// (the remainder in lane 0), added lane by lane into `total`, and the lanes' minima of `a`
/// into `mn`. `step` runs once per [`LANES`] values (the caller's prefetching).
#[inline(always)]
fn add_block(
    ab: &[f32],
    bb: &[f32],
    total: &mut [f64; LANES],
    mn: &mut [f32; LANES],
    mut step: impl FnMut(),
) {
    let mut acc = [0.0f32; LANES];
    let mut ac = ab.chunks_exact(LANES);
    let mut bc = bb.chunks_exact(LANES);
    for (x, y) in (&mut ac).zip(&mut bc) {
        step();
        for l in 0..LANES {
            acc[l] += x[l] * y[l];
            mn[l] = if x[l] < mn[l] { x[l] } else { mn[l] };
        }
    }
    for (x, y) in ac.remainder().iter().zip(bc.remainder()) {
        acc[0] += x * y;
        mn[0] = if *x < mn[0] { *x } else { mn[0] };
    }
    for l in 0..LANES {
        total[l] += f64::from(acc[l]);
    }
}

/// The kernels' result from their lanes: the float64 lane totals summed in lane order, and the
/// least lane minimum.
#[inline(always)]
fn lanes_result(total: &[f64; LANES], mn: &[f32; LANES]) -> (f64, f32) {
    (
        total.iter().sum(),
        mn.iter().fold(f32::INFINITY, |m, &v| m.min(v)),
    )
}

fn dot_min_f32_portable(a: &[f32], b: &[f32]) -> (f64, f32) {
    dot_min_f32::<true>(a, b)
}

/// A kernel's result for one map: Σ a·b and the minimum of `a`.
type SumMin = (f64, f32);

/// As [`dot_min_f32`] for float16 `a`, converted block by block into a stack buffer. The lanes
/// and their float64 totals are those of [`dot_min_f32`], and float16 → float32 is exact, so
/// the result is bit-identical to [`dot_min_f32`] of the maps converted to float32: a float16
/// batch scores exactly as its float32 conversion does.
#[inline(always)]
fn dot_min_f16(a: &[f16], b: &[f32]) -> (f64, f32) {
    let mut buf = [0.0f32; BLOCK];
    let mut total = [0.0f64; LANES];
    let mut mn = [f32::INFINITY; LANES];
    for (ab, bb) in a.chunks(BLOCK).zip(b.chunks(BLOCK)) {
        // Ask for the block after this one (2 KiB of float16) while converting this one.
        let next = ab.as_ptr().cast::<u8>().wrapping_add(BLOCK * 2);
        for line in (0..BLOCK * 2).step_by(64) {
            prefetch(next.wrapping_add(line));
        }
        let dst = &mut buf[..ab.len()];
        ab.convert_to_f32_slice(dst);
        add_block(dst, bb, &mut total, &mut mn, || {});
    }
    lanes_result(&total, &mn)
}

/// Sum of a float32 buffer read as one stream in 16 lanes with the map kernels' prefetching
/// ([`PREFETCH_BYTES`] ahead): a plain streaming read, the yardstick the benchmarks compare the
/// map kernel with.
pub(crate) fn streaming_sum(data: &[f32]) -> f32 {
    #[inline(always)]
    fn sum(data: &[f32]) -> f32 {
        let mut acc = [0.0f32; LANES];
        let mut chunks = data.chunks_exact(LANES);
        for c in &mut chunks {
            prefetch(c.as_ptr().cast::<u8>().wrapping_add(PREFETCH_BYTES));
            for l in 0..LANES {
                acc[l] += c[l];
            }
        }
        acc.iter().sum::<f32>() + chunks.remainder().iter().sum::<f32>()
    }
    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx2")]
    fn sum_avx2(data: &[f32]) -> f32 {
        sum(data)
    }
    #[cfg(target_arch = "x86_64")]
    if std::arch::is_x86_feature_detected!("avx2") {
        // SAFETY: the CPU has AVX2 (checked just above).
        return unsafe { sum_avx2(data) };
    }
    sum(data)
}

/// The same kernels compiled for AVX2 (and F16C for the conversion), chosen at run time.
/// Results are bit-identical to the portable ones: the lanes, their order and the float32
/// operations are the same, only wider registers carry them (and float16 → float32 is exact).
#[cfg(target_arch = "x86_64")]
mod x86 {
    use super::{BLOCK, LANES, PREFETCH_BYTES, SumMin, prefetch};
    use half::f16;
    use std::arch::x86_64::{
        __m256, _mm_loadu_si128, _mm256_add_ps, _mm256_cvtph_ps, _mm256_loadu_ps, _mm256_min_ps,
        _mm256_mul_ps, _mm256_set1_ps, _mm256_setzero_ps, _mm256_storeu_ps,
    };

    /// A value type of probability maps that the grouped kernel reads.
    pub(super) trait MapValue: Copy {
        /// The 8 values from `p` as float32.
        ///
        /// # Safety
        /// `p` must point to 8 readable values; the CPU must support AVX, and F16C for float16.
        unsafe fn load8(p: *const Self) -> __m256;
        /// One value as float32 (exact for both types).
        fn to_f32(self) -> f32;
    }

    impl MapValue for f32 {
        #[inline(always)]
        unsafe fn load8(p: *const Self) -> __m256 {
            // SAFETY: the caller's contract; the intrinsic accepts unaligned pointers.
            unsafe { _mm256_loadu_ps(p) }
        }
        #[inline(always)]
        fn to_f32(self) -> f32 {
            self
        }
    }

    impl MapValue for f16 {
        #[inline(always)]
        unsafe fn load8(p: *const Self) -> __m256 {
            // SAFETY: the caller's contract (8 float16 are the 16 bytes read); unaligned is fine.
            unsafe { _mm256_cvtph_ps(_mm_loadu_si128(p.cast())) }
        }
        #[inline(always)]
        fn to_f32(self) -> f32 {
            f16::to_f32(self)
        }
    }

    /// [`super::dot_min_f32`] in 8-wide registers. The lanes, their order and the float32
    /// operations are those of the portable kernel (two registers of the 16 lanes, a separate
    /// multiply and add, the remainder in lane 0, lane totals in float64 every [`BLOCK`]
    /// values), so the result is bit-identical to `dot_min_f32(a, b)`, or for float16 maps to
    /// `dot_min_f16(a, b)` (F16C converts exactly, as the portable conversion does). `a` must
    /// have the length of `b`. Prefetches [`PREFETCH_BYTES`] ahead of `a`, into whatever follows
    /// it. Inlined into [`dot_min_f32_avx2`] and [`dot_min_f16_avx2`], which enable the CPU
    /// features that the loads need.
    #[inline(always)]
    fn dot_min<T: MapValue>(a: &[T], b: &[f32]) -> SumMin {
        let len = b.len();
        assert_eq!(a.len(), len, "map and cost map differ in length");
        let bytes = std::mem::size_of::<T>();
        let ahead = a.as_ptr().cast::<u8>().wrapping_add(PREFETCH_BYTES);
        let mut total = [0.0f64; LANES];
        // SAFETY (all intrinsics below): the callers enable AVX2 (and F16C for float16).
        let mut m = unsafe { _mm256_set1_ps(f32::INFINITY) };
        let mut start = 0;
        while start < len {
            let block = (len - start).min(BLOCK);
            let full = block - block % LANES;
            let mut acc = [unsafe { _mm256_setzero_ps() }; 2];
            let mut k = start;
            while k < start + full {
                prefetch(ahead.wrapping_add(k * bytes));
                // SAFETY (loads): k + 16 ≤ len, and `a` and `b` hold `len` values.
                unsafe {
                    let (y0, y1) = (
                        _mm256_loadu_ps(b.as_ptr().add(k)),
                        _mm256_loadu_ps(b.as_ptr().add(k + 8)),
                    );
                    let (x0, x1) = (T::load8(a.as_ptr().add(k)), T::load8(a.as_ptr().add(k + 8)));
                    acc[0] = _mm256_add_ps(acc[0], _mm256_mul_ps(x0, y0));
                    acc[1] = _mm256_add_ps(acc[1], _mm256_mul_ps(x1, y1));
                    // min(x, m) = x < m ? x : m, as the portable lanes; the minimum's value
                    // does not depend on the order the lanes are folded in.
                    m = _mm256_min_ps(_mm256_min_ps(x0, x1), m);
                }
                k += LANES;
            }
            let mut lanes = [0.0f32; LANES];
            let mut mn = [f32::INFINITY; 8];
            // SAFETY: both arrays hold at least the 8 floats each store writes.
            unsafe {
                _mm256_storeu_ps(lanes.as_mut_ptr(), acc[0]);
                _mm256_storeu_ps(lanes.as_mut_ptr().add(8), acc[1]);
                _mm256_storeu_ps(mn.as_mut_ptr(), m);
            }
            let tail = start + full..start + block;
            for (x, y) in a[tail.clone()].iter().zip(&b[tail]) {
                let x = x.to_f32();
                lanes[0] += x * y;
                mn[0] = if x < mn[0] { x } else { mn[0] };
            }
            // SAFETY: `mn` holds 8 floats.
            m = unsafe { _mm256_loadu_ps(mn.as_ptr()) };
            for l in 0..LANES {
                total[l] += f64::from(lanes[l]);
            }
            start += block;
        }
        let mut mn = [f32::INFINITY; 8];
        // SAFETY: `mn` holds 8 floats.
        unsafe { _mm256_storeu_ps(mn.as_mut_ptr(), m) };
        (
            total.iter().sum(),
            mn.iter().fold(f32::INFINITY, |m, &v| m.min(v)),
        )
    }

    /// [`dot_min`] for float32 maps.
    #[target_feature(enable = "avx2")]
    pub(super) fn dot_min_f32_avx2(a: &[f32], b: &[f32]) -> SumMin {
        dot_min(a, b)
    }

    /// [`dot_min`] for float16 maps.
    #[target_feature(enable = "avx2,f16c")]
    pub(super) fn dot_min_f16_avx2(a: &[f16], b: &[f32]) -> SumMin {
        dot_min(a, b)
    }
}

impl PreparedMaps {
    /// Map width w.
    pub fn width(&self) -> usize {
        self.width
    }
    /// Map height h.
    pub fn height(&self) -> usize {
        self.height
    }
    /// Number of source points P.
    pub fn points(&self) -> usize {
        self.weights.len()
    }
    /// The (P, h, w) float32 maps the kernel multiplies with: M_p for `expected`, the
    /// within-tolerance indicator for `hit`.
    pub fn kernel_maps(&self) -> &[f32] {
        &self.kernel
    }

    /// Scores probability maps of shape (n, t, P, h, w).
    ///
    /// `expected`: c = Σ_u P(u)·M_p(u); `hit`: c = −ln(ε + Σ_{d_p(u) ≤ tol_p} P(u)). The maps
    /// are used as given (no renormalisation). Every map read must hold finite values ≥ 0;
    /// with `final` only the t = T−1 maps are read (and checked).
    pub fn evaluate(
        &self,
        maps: MapBatch<'_>,
        n: usize,
        t: usize,
    ) -> Result<CostResult, CostError> {
        let np = self.points();
        let plane = self.width * self.height;
        check_batch(maps.len(), n, t, np, self.height, self.width)?;
        let steps = step_range(self.settings.steps, t);
        let mut per = vec![0.0f64; n * np];
        let work = n * steps.len() * np * plane;
        let parallel = n > 1 && work >= 1 << 20 && may_fan_out();
        let result = match maps {
            MapBatch::F32(v) => {
                #[cfg(target_arch = "x86_64")]
                if std::arch::is_x86_feature_detected!("avx2") {
                    // SAFETY: the CPU has AVX2 (checked just above).
                    let dot = |a: &[f32], b: &[f32]| unsafe { x86::dot_min_f32_avx2(a, b) };
                    return self
                        .run(v, &mut per, t, steps, parallel, dot)
                        .and_then(|()| finish(per, np));
                }
                self.run(v, &mut per, t, steps, parallel, dot_min_f32_portable)
            }
            MapBatch::F16(v) => {
                #[cfg(target_arch = "x86_64")]
                if std::arch::is_x86_feature_detected!("avx2")
                    && std::arch::is_x86_feature_detected!("f16c")
                {
                    // SAFETY: the CPU has AVX2 and F16C (checked just above).
                    let dot = |a: &[f16], b: &[f32]| unsafe { x86::dot_min_f16_avx2(a, b) };
                    return self
                        .run(v, &mut per, t, steps, parallel, dot)
                        .and_then(|()| finish(per, np));
                }
                self.run(v, &mut per, t, steps, parallel, dot_min_f16)
            }
        };
        result?;
        finish(per, np)
    }

    /// Adds each candidate's weighted per-point costs into `per`. `dot` scores one map
    /// against its point's cost map; the maps are read in memory order (step by step, point by
    /// point), so the batch is one stream that `dot`'s prefetching keeps ahead of.
    fn run<T: Sync>(
        &self,
        maps: &[T],
        per: &mut [f64],
        t: usize,
        steps: std::ops::Range<usize>,
        parallel: bool,
        dot: impl Fn(&[T], &[f32]) -> SumMin + Sync,
    ) -> Result<(), CostError> {
        let np = self.points();
        let plane = self.width * self.height;
        let stride = t * np * plane;
        let score = |cand: &[T], out: &mut [f64]| -> Result<(), (usize, usize)> {
            for s in steps.clone() {
                let row = &cand[s * np * plane..(s + 1) * np * plane];
                let kernels = self.kernel.chunks_exact(plane);
                for (p, ((map, kernel), acc)) in row
                    .chunks_exact(plane)
                    .zip(kernels)
                    .zip(out.iter_mut())
                    .enumerate()
                {
                    let (sum, min) = dot(map, kernel);
                    if !(sum.is_finite() && min >= 0.0) {
                        return Err((s, p));
                    }
                    *acc += match self.settings.mode {
                        Mode::Expected => sum,
                        Mode::Hit => hit_cost(sum),
                    };
                }
            }
            for (acc, w) in out.iter_mut().zip(&self.weights) {
                *acc *= w;
            }
            Ok(())
        };
        let outcome = if parallel {
            maps.par_chunks_exact(stride)
                .zip(per.par_chunks_exact_mut(np))
                .try_for_each(|(c, o)| score(c, o))
        } else {
            maps.chunks_exact(stride)
                .zip(per.chunks_exact_mut(np))
                .try_for_each(|(c, o)| score(c, o))
        };
        if outcome.is_ok() {
            return Ok(());
        }
        // Report the first bad map in batch order, whichever thread found one first.
        let mut scratch = vec![0.0; np];
        for (candidate, c) in maps.chunks_exact(stride).enumerate() {
            scratch.fill(0.0);
            if let Err((step, point)) = score(c, &mut scratch) {
                return Err(CostError::BadProbability {
                    candidate,
                    step,
                    point,
                });
            }
        }
        // Not reached: the serial pass sees the same data as the parallel one.
        Err(CostError::BadProbability {
            candidate: 0,
            step: 0,
            point: 0,
        })
    }
}

/// Exact distance from any point of the plane to the nearest painted pixel centre of a mask.
///
/// For each pixel (i, j) it stores the nearest painted row at or above j and at or below j in
/// column i (row-major, so one query reads two contiguous rows). A query at (x, y) takes, for
/// each column i, the nearer of those rows around y, and minimises (x − i)² + dy² over the
/// columns within the best distance found so far (and within the columns that hold painted
/// pixels), starting next to x. A query costs at most one pass over the mask's column span.
#[derive(Debug, Clone)]
struct MaskIndex {
    width: usize,
    height: usize,
    /// Nearest painted row ≤ j in column i, or −∞.
    up: Vec<f32>,
    /// Nearest painted row ≥ j in column i, or +∞.
    down: Vec<f32>,
    /// First and last column with a painted pixel; no other column can be nearest.
    first_col: usize,
    last_col: usize,
}

impl MaskIndex {
    fn new(mask: &Mask) -> Self {
        let (w, h) = (mask.width(), mask.height());
        let data = mask.data();
        let mut up = vec![f32::NEG_INFINITY; w * h];
        let mut down = vec![f32::INFINITY; w * h];
        for j in 0..h {
            for i in 0..w {
                let k = j * w + i;
                up[k] = if data[k] {
                    j as f32
                } else if j > 0 {
                    up[k - w]
                } else {
                    f32::NEG_INFINITY
                };
            }
        }
        for j in (0..h).rev() {
            for i in 0..w {
                let k = j * w + i;
                down[k] = if data[k] {
                    j as f32
                } else if j + 1 < h {
                    down[k + w]
                } else {
                    f32::INFINITY
                };
            }
        }
        // A mask has at least one painted pixel, so both exist; fall back to all columns.
        let painted_col = |i: &usize| (0..h).any(|j| data[j * w + i]);
        let first_col = (0..w).find(painted_col).unwrap_or(0);
        let last_col = (0..w).rev().find(painted_col).unwrap_or(w - 1);
        Self {
            width: w,
            height: h,
            up,
            down,
            first_col,
            last_col,
        }
    }

    fn distance(&self, x: f64, y: f64) -> f64 {
        self.search::<false>(x, y).0.sqrt()
    }

    /// The distance to the painted pixel centre (i, j) nearest to (x, y), and (i, j), the first found in the search's order
    /// where several are equally near (the columns next to x, left to right, then those further
    /// left, then those further right; in a column the row above on a tie). `None` for a
    /// non-finite query.
    fn nearest(&self, x: f64, y: f64) -> Option<(f64, f64, f64)> {
        let (d2, i, j) = self.search::<true>(x, y);
        d2.is_finite()
            .then_some((d2.sqrt(), i as f64, f64::from(j)))
    }

    /// The least squared distance, and with `ARG` the column and row where it is reached (with
    /// `ARG` false the compiler drops the bookkeeping, so [`Self::distance`] pays nothing).
    #[inline(always)]
    fn search<const ARG: bool>(&self, x: f64, y: f64) -> (f64, usize, f32) {
        let (w, h) = (self.width, self.height);
        let (c0, c1) = (self.first_col, self.last_col);
        let last_row = (h - 1) as f64;
        // Rows of `up` at floor(y) and `down` at ceil(y), clamped into the mask.
        let jf = y.floor().clamp(0.0, last_row) as usize;
        let jc = y.ceil().clamp(0.0, last_row) as usize;
        let up = &self.up[jf * w..(jf + 1) * w];
        let down = &self.down[jc * w..(jc + 1) * w];
        let d2_range = |lo: usize, hi: usize| -> (f64, usize, f32) {
            let mut best = f64::INFINITY;
            let mut arg = (lo, f32::NAN);
            for i in lo..=hi {
                let a = (y - f64::from(up[i])).abs();
                let b = (f64::from(down[i]) - y).abs();
                let dy = if a < b { a } else { b };
                let dx = x - i as f64;
                let d2 = dx * dx + dy * dy;
                if ARG && d2 < best {
                    arg = (i, if a <= b { up[i] } else { down[i] });
                }
                best = if d2 < best { d2 } else { best };
            }
            (best, arg.0, arg.1)
        };
        // Start next to x, within the columns that hold painted pixels at all.
        let i0 = x.round().clamp(c0 as f64, c1 as f64) as usize;
        const WINDOW: usize = 16;
        let (wlo, whi) = (i0.saturating_sub(WINDOW).max(c0), (i0 + WINDOW).min(c1));
        let mut best = d2_range(wlo, whi);
        // Columns farther than sqrt(best) from x cannot do better.
        let r = best.0.sqrt();
        let (lo, hi) = if r.is_finite() {
            (
                (x - r).ceil().max(c0 as f64),
                (x + r).floor().min(c1 as f64),
            )
        } else {
            (c0 as f64, c1 as f64)
        };
        let better = |best: (f64, usize, f32), other: (f64, usize, f32)| {
            if ARG {
                if other.0 < best.0 { other } else { best }
            } else {
                (best.0.min(other.0), 0, 0.0)
            }
        };
        if lo <= hi {
            let (lo, hi) = (lo as usize, hi as usize);
            if lo < wlo {
                best = better(best, d2_range(lo, wlo - 1));
            }
            if hi > whi {
                best = better(best, d2_range(whi + 1, hi));
            }
        }
        best
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;
    use serde_json::Value;

    /// numpy / shapely / scipy evaluation of the cost formulas (docs/conventions.md); see
    /// tests/reference/gen_cost.py.
    const REFERENCE: &str = include_str!(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/../../tests/reference/gen_cost.json"
    ));

    fn floats(v: &Value) -> Vec<f64> {
        v.as_array()
            .unwrap()
            .iter()
            .map(|x| x.as_f64().unwrap())
            .collect()
    }

    fn pt(x: f64, y: f64) -> PixelPoint {
        PixelPoint::new(x, y).unwrap()
    }

    fn reference_points(doc: &Value) -> Vec<CostPoint> {
        doc["points"]
            .as_array()
            .unwrap()
            .iter()
            .map(|p| {
                let target = match p["kind"].as_str().unwrap() {
                    "point" => {
                        let t = floats(&p["target"]);
                        TargetShape::Point(pt(t[0], t[1]))
                    }
                    "region" => TargetShape::Region(
                        Polygon::new(
                            p["polygon"]
                                .as_array()
                                .unwrap()
                                .iter()
                                .map(|v| {
                                    let v = floats(v);
                                    pt(v[0], v[1])
                                })
                                .collect(),
                        )
                        .unwrap(),
                    ),
                    _ => {
                        let rows: Vec<&str> = p["rows"]
                            .as_array()
                            .unwrap()
                            .iter()
                            .map(|r| r.as_str().unwrap())
                            .collect();
                        let inside = rows.iter().flat_map(|r| r.bytes().map(|b| b == b'1'));
                        TargetShape::Mask(Arc::new(
                            Mask::new(rows[0].len(), rows.len(), inside.collect()).unwrap(),
                        ))
                    }
                };
                CostPoint {
                    target,
                    weight: p["weight"].as_f64().unwrap(),
                    tolerance_px: p["tolerance_px"].as_f64().unwrap(),
                }
            })
            .collect()
    }

    fn settings_of(case: &Value) -> CostSettings {
        let metric = match case["metric"].as_str().unwrap() {
            "euclidean" => Metric::Euclidean,
            "squared" => Metric::Squared,
            _ => Metric::Huber {
                delta_px: case["huber_delta_px"].as_f64().unwrap(),
            },
        };
        let steps = match case["steps"].as_str().unwrap() {
            "final" => Steps::Final,
            _ => Steps::All,
        };
        let mode = match case["mode"].as_str().unwrap() {
            "expected" => Mode::Expected,
            _ => Mode::Hit,
        };
        CostSettings::new(metric, steps, mode).unwrap()
    }

    fn close(got: f64, want: f64) -> bool {
        (got - want).abs() <= 1e-5 * want.abs() + 1e-7
    }

    #[test]
    fn matches_the_numpy_reference_for_every_setting() {
        let doc: Value = serde_json::from_str(REFERENCE).unwrap();
        let (w, h) = (
            doc["width"].as_u64().unwrap() as usize,
            doc["height"].as_u64().unwrap() as usize,
        );
        let points = reference_points(&doc);
        let pred = &doc["predicted_points"];
        let pred_values = floats(&pred["values"]);
        let (pn, pt_) = (
            pred["n"].as_u64().unwrap() as usize,
            pred["t"].as_u64().unwrap() as usize,
        );
        let mut checked = 0;
        for case in doc["cases"].as_array().unwrap() {
            let model = CostModel::new(w, h, points.clone(), settings_of(case)).unwrap();
            let input = case["input"].as_str().unwrap();
            let got = if input == "points" {
                model.evaluate_points(&pred_values, pn, pt_).unwrap()
            } else {
                let m = &doc["maps"][input.trim_start_matches("maps_")];
                let f32s: Vec<f32> = floats(&m["values"]).iter().map(|&v| v as f32).collect();
                let f16s: Vec<f16> = f32s.iter().map(|&v| f16::from_f32(v)).collect();
                let batch = match case["dtype"].as_str().unwrap() {
                    "f32" => MapBatch::F32(&f32s),
                    _ => MapBatch::F16(&f16s),
                };
                let dims = ["n", "t", "height", "width"].map(|k| m[k].as_u64().unwrap() as usize);
                model
                    .evaluate_maps(batch, dims[0], dims[1], dims[2], dims[3])
                    .unwrap()
            };
            let want_costs = floats(&case["costs"]);
            for (n, (g, e)) in got.costs.iter().zip(&want_costs).enumerate() {
                assert!(close(*g, *e), "{case}: cost[{n}] {g} vs {e}");
                let want_pp = floats(&case["per_point"][n]);
                for (p, (g, e)) in got.per_point[n].iter().zip(&want_pp).enumerate() {
                    assert!(close(*g, *e), "{input}: per_point[{n}][{p}] {g} vs {e}");
                }
                let sum: f64 = got.per_point[n].iter().sum();
                assert_eq!(sum, got.costs[n]);
            }
            assert_eq!(got.costs.len(), want_costs.len());
            assert_eq!(got.best as u64, case["best"].as_u64().unwrap(), "{case}");
            checked += 1;
        }
        assert_eq!(checked, 60);
    }

    #[test]
    fn distance_planes_are_the_maps_and_stop_when_asked() {
        use std::sync::atomic::{AtomicUsize, Ordering};
        let doc: Value = serde_json::from_str(REFERENCE).unwrap();
        let model = CostModel::new(
            24,
            18,
            reference_points(&doc),
            CostSettings::new(Metric::Squared, Steps::Final, Mode::Expected).unwrap(),
        )
        .unwrap();
        assert!(model.len() >= 2, "the reference has several points");
        let whole = model.distance_maps(24, 18).unwrap();
        let mut planes = Vec::new();
        let done = model
            .distance_planes(24, 18, &|| false, |p, d| {
                assert_eq!(p, planes.len() / (24 * 18));
                planes.extend_from_slice(d);
            })
            .unwrap();
        assert!(done);
        assert_eq!(planes, whole, "bit-identical to distance_maps");
        // A stop that turns true after the first plane: nothing more is handed over.
        let delivered = AtomicUsize::new(0);
        let done = model
            .distance_planes(24, 18, &|| delivered.load(Ordering::SeqCst) >= 1, |_, _| {
                delivered.fetch_add(1, Ordering::SeqCst);
            })
            .unwrap();
        assert!(!done);
        assert_eq!(delivered.load(Ordering::SeqCst), 1);
    }

    #[test]
    fn approx_bytes_counts_mask_indexes() {
        let doc: Value = serde_json::from_str(REFERENCE).unwrap();
        let points = reference_points(&doc);
        let masks = points
            .iter()
            .filter(|p| matches!(p.target, TargetShape::Mask(_)))
            .count();
        let model = CostModel::new(
            24,
            18,
            points,
            CostSettings::new(Metric::Squared, Steps::Final, Mode::Expected).unwrap(),
        )
        .unwrap();
        // Two float32 per pixel per mask index and a byte per mask pixel at least.
        assert!(model.approx_bytes() >= masks * 24 * 18 * 9);
    }

    /// A model build asked to stop gives up before a mask index and returns nothing; one never
    /// asked builds the same model as `new`.
    #[test]
    fn a_model_build_stops_when_asked() {
        let mask = |seed| TargetShape::Mask(Arc::new(random_mask(24, 18, seed, 0.1)));
        let points: Vec<CostPoint> = (0..3)
            .map(|k| CostPoint {
                target: mask(k),
                weight: 1.0,
                tolerance_px: 0.0,
            })
            .collect();
        let settings = CostSettings::new(Metric::Squared, Steps::Final, Mode::Expected).unwrap();
        let asked = std::cell::Cell::new(0);
        let stopped = CostModel::new_until(24, 18, points.clone(), settings, &|| {
            asked.set(asked.get() + 1);
            asked.get() > 1
        })
        .unwrap();
        assert!(stopped.is_none());
        assert_eq!(
            asked.get(),
            2,
            "asked before each mask, stopped at the second"
        );
        let whole = CostModel::new_until(24, 18, points.clone(), settings, &|| false)
            .unwrap()
            .expect("built");
        let plain = CostModel::new(24, 18, points, settings).unwrap();
        for (x, y) in [(0.0, 0.0), (7.5, 3.25), (30.0, -4.0)] {
            for p in 0..3 {
                assert_eq!(whole.distance(p, x, y), plain.distance(p, x, y));
            }
        }
    }

    #[test]
    fn distance_maps_match_the_reference_at_frame_and_resampled_size() {
        let doc: Value = serde_json::from_str(REFERENCE).unwrap();
        let points = reference_points(&doc);
        let settings = CostSettings::new(Metric::Squared, Steps::Final, Mode::Expected).unwrap();
        let model = CostModel::new(24, 18, points, settings).unwrap();
        for key in ["frame", "resampled"] {
            let r = &doc["distance_maps"][key];
            let (w, h) = (
                r["width"].as_u64().unwrap() as usize,
                r["height"].as_u64().unwrap() as usize,
            );
            let want = floats(&r["values"]);
            let got = model.distance_maps(w, h).unwrap();
            let maps = model.cost_maps(w, h).unwrap();
            assert_eq!(got.len(), want.len());
            for (k, ((g, e), m)) in got.iter().zip(&want).zip(&maps).enumerate() {
                assert!((g - e).abs() <= 1e-9 * (1.0 + e), "{key}[{k}]: {g} vs {e}");
                assert!(
                    close(f64::from(*m), e * e),
                    "{key}[{k}] map {m} vs {}",
                    e * e
                );
            }
            // Scattered-point distances agree with the map's.
            let (xs, ys) = model.map_coordinates(w, h);
            for p in 0..model.len() {
                for (j, &y) in ys.iter().enumerate() {
                    for (i, &x) in xs.iter().enumerate() {
                        let d = model.distance(p, x, y).unwrap();
                        let e = want[(p * h + j) * w + i];
                        assert!((d - e).abs() <= 1e-9 * (1.0 + e), "{key} p{p} ({x},{y})");
                    }
                }
            }
        }
    }

    fn brute_mask_distance(mask: &Mask, x: f64, y: f64) -> f64 {
        let mut best = f64::INFINITY;
        for j in 0..mask.height() {
            for i in 0..mask.width() {
                if mask.is_inside(i, j) {
                    best = best.min((x - i as f64).hypot(y - j as f64));
                }
            }
        }
        best
    }

    fn random_mask(w: usize, h: usize, seed: u64, density: f64) -> Mask {
        let mut s = seed;
        let mut inside: Vec<bool> = (0..w * h)
            .map(|_| {
                s = s
                    .wrapping_mul(6364136223846793005)
                    .wrapping_add(1442695040888963407);
                ((s >> 11) as f64 / (1u64 << 53) as f64) < density
            })
            .collect();
        inside[(seed as usize) % (w * h)] = true;
        Mask::new(w, h, inside).unwrap()
    }

    proptest! {
        #[test]
        fn mask_index_is_exact_anywhere(
            w in 1usize..40, h in 1usize..30, seed in 0u64..1000, density in 0.0f64..0.2,
            qs in proptest::collection::vec((-60.0f64..100.0, -60.0f64..90.0), 1..20),
        ) {
            let mask = random_mask(w, h, seed, density);
            let index = MaskIndex::new(&mask);
            for (x, y) in qs {
                let fast = index.distance(x, y);
                let slow = brute_mask_distance(&mask, x, y);
                prop_assert!((fast - slow).abs() <= 1e-12 * (1.0 + slow), "{fast} vs {slow}");
            }
            // Integer and half-integer positions too (floor/ceil edge cases).
            for (x, y) in [(0.0, 0.0), (w as f64 - 1.0, h as f64 - 1.0), (0.5, 0.5), (-0.5, h as f64)] {
                let fast = index.distance(x, y);
                prop_assert!((fast - brute_mask_distance(&mask, x, y)).abs() <= 1e-12 * (1.0 + fast));
            }
        }

        #[test]
        fn kernels_match_a_plain_f64_sum(len in 0usize..5000, seed in 0u64..1000) {
            let mut s = seed;
            let mut next = || {
                s = s.wrapping_mul(6364136223846793005).wrapping_add(1442695040888963407);
                (s >> 40) as f32 / (1u64 << 24) as f32
            };
            let a: Vec<f32> = (0..len).map(|_| next()).collect();
            let b: Vec<f32> = (0..len).map(|_| next() * 100.0).collect();
            let want: f64 = a.iter().zip(&b).map(|(x, y)| f64::from(*x) * f64::from(*y)).sum();
            let (got, min) = dot_min_f32::<true>(&a, &b);
            prop_assert!((got - want).abs() <= 1e-6 * want.abs() + 1e-9, "{got} vs {want}");
            let want_min = a.iter().copied().fold(f32::INFINITY, f32::min);
            prop_assert_eq!(min, want_min);
            let a16: Vec<f16> = a.iter().map(|&v| f16::from_f32(v)).collect();
            let want16: f64 = a16.iter().zip(&b).map(|(x, y)| f64::from(x.to_f32()) * f64::from(*y)).sum();
            let (got16, min16) = dot_min_f16(&a16, &b);
            prop_assert!((got16 - want16).abs() <= 1e-6 * want16.abs() + 1e-9);
            prop_assert_eq!(min16, a16.iter().map(|v| v.to_f32()).fold(f32::INFINITY, f32::min));
        }

        #[cfg(target_arch = "x86_64")]
        #[test]
        fn wide_kernels_are_bit_identical(len in 0usize..3000, seed in 0u64..1000, wild in any::<bool>()) {
            prop_assume!(std::arch::is_x86_feature_detected!("avx2")
                && std::arch::is_x86_feature_detected!("f16c"));
            let mut s = seed;
            let mut next = || {
                s = s.wrapping_mul(6364136223846793005).wrapping_add(1442695040888963407);
                (s >> 40) as f32 / (1u64 << 24) as f32 - 0.1
            };
            let a: Vec<f32> = (0..len).map(|_| next()).collect();
            // `wild`: cost values over 40 orders of magnitude, so that the lanes' float64
            // totals round and any difference in the order they are added in would show.
            let b: Vec<f32> = (0..len)
                .map(|k| next() * 100.0 * if wild { 10f32.powi(k as i32 % 41 - 20) } else { 1.0 })
                .collect();
            // float16 maps with subnormals too (below 6.1e-5).
            let a16: Vec<f16> = a.iter().enumerate()
                .map(|(k, &v)| f16::from_f32(v * if k % 5 == 0 { 1e-5 } else { 1e3 }))
                .collect();
            let a16_as_f32: Vec<f32> = a16.iter().map(|v| v.to_f32()).collect();
            // The portable float16 kernel scores exactly as float32 does on the converted maps.
            prop_assert_eq!(dot_min_f16(&a16, &b), dot_min_f32::<false>(&a16_as_f32, &b));
            // SAFETY (both calls): both features were detected above.
            prop_assert_eq!(unsafe { x86::dot_min_f32_avx2(&a, &b) }, dot_min_f32::<false>(&a, &b));
            prop_assert_eq!(unsafe { x86::dot_min_f16_avx2(&a16, &b) }, dot_min_f16(&a16, &b));
        }

        #[test]
        fn permuting_points_permutes_per_point(
            perm_seed in 0u64..1000,
            coords in proptest::collection::vec(-20.0f64..40.0, 4 * 3 * 4 * 2),
        ) {
            let mut points = mixed_points();
            let settings = CostSettings::new(Metric::Huber { delta_px: 2.0 }, Steps::All, Mode::Expected).unwrap();
            let model = CostModel::new(30, 20, points.clone(), settings).unwrap();
            let base = model.evaluate_points(&coords, 4, 3).unwrap();
            // A permutation of the 4 points from the seed.
            let mut order: Vec<usize> = (0..4).collect();
            let mut s = perm_seed;
            for i in (1..4).rev() {
                s = s.wrapping_mul(6364136223846793005).wrapping_add(1);
                order.swap(i, (s >> 33) as usize % (i + 1));
            }
            points = order.iter().map(|&k| points[k].clone()).collect();
            let permuted_model = CostModel::new(30, 20, points, settings).unwrap();
            let mut permuted = coords.clone();
            for nt in 0..12 {
                for (new, &old) in order.iter().enumerate() {
                    permuted[(nt * 4 + new) * 2] = coords[(nt * 4 + old) * 2];
                    permuted[(nt * 4 + new) * 2 + 1] = coords[(nt * 4 + old) * 2 + 1];
                }
            }
            let got = permuted_model.evaluate_points(&permuted, 4, 3).unwrap();
            for n in 0..4 {
                for (new, &old) in order.iter().enumerate() {
                    prop_assert_eq!(got.per_point[n][new], base.per_point[n][old]);
                }
                prop_assert!((got.costs[n] - base.costs[n]).abs() <= 1e-12 * (1.0 + base.costs[n].abs()));
            }
        }

        #[test]
        fn cost_is_zero_on_target_and_grows_with_distance(
            tx in 0.0f64..29.0, ty in 0.0f64..19.0, angle in 0.0f64..std::f64::consts::TAU,
            r1 in 0.0f64..50.0, dr in 0.001f64..50.0, metric_kind in 0usize..3,
        ) {
            let metric = [Metric::Euclidean, Metric::Squared, Metric::Huber { delta_px: 3.0 }][metric_kind];
            let settings = CostSettings::new(metric, Steps::Final, Mode::Expected).unwrap();
            let target = CostPoint { target: TargetShape::Point(pt(tx, ty)), weight: 1.0, tolerance_px: 1.0 };
            let model = CostModel::new(30, 20, vec![target], settings).unwrap();
            let (c, s) = (angle.cos(), angle.sin());
            let r2 = r1 + dr;
            let pts = [tx, ty, tx + r1 * c, ty + r1 * s, tx + r2 * c, ty + r2 * s];
            let res = model.evaluate_points(&pts, 3, 1).unwrap();
            prop_assert_eq!(res.costs[0], 0.0);
            prop_assert!(res.costs[1] <= res.costs[2]);
            prop_assert!(res.costs[1] >= 0.0);
            prop_assert_eq!(res.best, 0);
        }
    }

    /// A point, a region, a mask and a point, on a 30×20 frame.
    fn mixed_points() -> Vec<CostPoint> {
        let square = Polygon::new(vec![
            pt(5.0, 5.0),
            pt(12.0, 5.0),
            pt(12.0, 11.0),
            pt(5.0, 11.0),
        ])
        .unwrap();
        vec![
            CostPoint {
                target: TargetShape::Point(pt(3.0, 4.0)),
                weight: 1.0,
                tolerance_px: 2.0,
            },
            CostPoint {
                target: TargetShape::Region(square),
                weight: 0.5,
                tolerance_px: 1.0,
            },
            CostPoint {
                target: TargetShape::Mask(Arc::new(random_mask(30, 20, 7, 0.02))),
                weight: 2.0,
                tolerance_px: 1.5,
            },
            CostPoint {
                target: TargetShape::Point(pt(25.5, 15.25)),
                weight: 0.25,
                tolerance_px: 3.0,
            },
        ]
    }

    fn mixed_model(steps: Steps, mode: Mode) -> CostModel {
        let settings = CostSettings::new(Metric::Euclidean, steps, mode).unwrap();
        CostModel::new(30, 20, mixed_points(), settings).unwrap()
    }

    #[test]
    fn zero_cost_on_every_kind_of_target() {
        let model = mixed_model(Steps::Final, Mode::Expected);
        let mask = match &model.points()[2].target {
            TargetShape::Mask(m) => m.clone(),
            _ => unreachable!(),
        };
        let k = mask.data().iter().position(|&b| b).unwrap();
        let (mi, mj) = ((k % 30) as f64, (k / 30) as f64);
        let res = model
            .evaluate_points(&[3.0, 4.0, 8.0, 7.5, mi, mj, 25.5, 15.25], 1, 1)
            .unwrap();
        assert_eq!(res.costs, vec![0.0]);
        // Hit mode: everything within tolerance costs −ln(1 + ε) per point.
        let hit = mixed_model(Steps::Final, Mode::Hit);
        let res = hit
            .evaluate_points(&[3.0, 4.0, 8.0, 7.5, mi, mj, 25.5, 15.25], 1, 1)
            .unwrap();
        let each = -(1.0 + HIT_EPSILON).ln();
        assert!((res.costs[0] - each * 3.75).abs() < 1e-15);
        // A miss costs −ln ε times the weight.
        let res = hit
            .evaluate_points(&[100.0, 4.0, 8.0, 7.5, mi, mj, 25.5, 15.25], 1, 1)
            .unwrap();
        assert!((res.per_point[0][0] + HIT_EPSILON.ln()).abs() < 1e-12);
    }

    #[test]
    fn maps_at_the_target_cost_nothing_and_unnormalised_maps_scale() {
        let settings = CostSettings::new(Metric::Squared, Steps::All, Mode::Expected).unwrap();
        let target = CostPoint {
            target: TargetShape::Point(pt(4.0, 2.0)),
            weight: 3.0,
            tolerance_px: 1.0,
        };
        let model = CostModel::new(8, 6, vec![target], settings).unwrap();
        let mut maps = vec![0.0f32; 2 * 6 * 8];
        maps[2 * 8 + 4] = 1.0; // t = 0 on the target
        maps[48 + 2 * 8 + 6] = 1.0; // t = 1 two pixels to the right: d² = 4
        let res = model
            .evaluate_maps(MapBatch::F32(&maps), 1, 2, 6, 8)
            .unwrap();
        assert_eq!(res.costs, vec![12.0]);
        let doubled: Vec<f32> = maps.iter().map(|v| v * 2.0).collect();
        let res2 = model
            .evaluate_maps(MapBatch::F32(&doubled), 1, 2, 6, 8)
            .unwrap();
        assert_eq!(res2.costs, vec![24.0]);
    }

    #[test]
    fn final_reads_only_the_last_step() {
        let model = mixed_model(Steps::Final, Mode::Expected);
        let plane = 5 * 7;
        let mut maps = vec![1.0f32 / plane as f32; 2 * 3 * 4 * plane];
        let before = model
            .evaluate_maps(MapBatch::F32(&maps), 2, 3, 5, 7)
            .unwrap();
        // Garbage in steps 0 and 1 is never read with `final`.
        for n in 0..2 {
            for v in &mut maps[n * 3 * 4 * plane..(n * 3 + 2) * 4 * plane] {
                *v = f32::NAN;
            }
        }
        let after = model
            .evaluate_maps(MapBatch::F32(&maps), 2, 3, 5, 7)
            .unwrap();
        assert_eq!(before, after);
        let all = mixed_model(Steps::All, Mode::Expected);
        assert_eq!(
            all.evaluate_maps(MapBatch::F32(&maps), 2, 3, 5, 7),
            Err(CostError::BadProbability {
                candidate: 0,
                step: 0,
                point: 0
            })
        );
    }

    #[test]
    fn steps_sum_in_step_order_and_report_the_first_bad_map() {
        let (n, t, np, w, h) = (3usize, 7usize, 4usize, 9usize, 5usize);
        let plane = w * h;
        let prepared = mixed_model(Steps::All, Mode::Expected)
            .prepare_maps(w, h)
            .unwrap();
        let mut s = 11u64;
        let mut maps: Vec<f32> = (0..n * t * np * plane)
            .map(|_| {
                s = s.wrapping_mul(6364136223846793005).wrapping_add(1);
                (s >> 40) as f32 / (1u64 << 24) as f32
            })
            .collect();
        let res = prepared.evaluate(MapBatch::F32(&maps), n, t).unwrap();
        let kernel = prepared.kernel_maps();
        for c in 0..n {
            for p in 0..np {
                let mut want = 0.0;
                for st in 0..t {
                    let off = ((c * t + st) * np + p) * plane;
                    let k = &kernel[p * plane..(p + 1) * plane];
                    want += dot_min_f32::<false>(&maps[off..off + plane], k).0;
                }
                assert_eq!(res.per_point[c][p], want * prepared.weights[p]);
            }
        }
        // Step 2 of point 0 and step 1 of point 3 are bad: (1, 3) comes first.
        let at = |c: usize, st: usize, p: usize| ((c * t + st) * np + p) * plane + 3;
        maps[at(1, 2, 0)] = -1.0;
        maps[at(1, 1, 3)] = f32::NAN;
        let err = prepared.evaluate(MapBatch::F32(&maps), n, t);
        assert_eq!(
            err,
            Err(CostError::BadProbability {
                candidate: 1,
                step: 1,
                point: 3
            })
        );
    }

    /// float16 batches go through the wide kernel too (on AVX2 + F16C machines): for every
    /// steps and mode setting, a float16 batch scores bit for bit as its float32 conversion,
    /// and the first bad map is named as for float32.
    #[test]
    fn f16_batches_score_exactly_as_their_f32_conversion() {
        let (n, t, np, w, h) = (5usize, 7usize, 4usize, 13usize, 6usize);
        let plane = w * h;
        let mut s = 29u64;
        let maps16: Vec<f16> = (0..n * t * np * plane)
            .map(|_| {
                s = s.wrapping_mul(6364136223846793005).wrapping_add(1);
                f16::from_f32((s >> 40) as f32 / (1u64 << 24) as f32 / plane as f32)
            })
            .collect();
        let maps32: Vec<f32> = maps16.iter().map(|v| v.to_f32()).collect();
        for steps in [Steps::All, Steps::Final] {
            for mode in [Mode::Expected, Mode::Hit] {
                let prepared = mixed_model(steps, mode).prepare_maps(w, h).unwrap();
                let want = prepared.evaluate(MapBatch::F32(&maps32), n, t).unwrap();
                let got = prepared.evaluate(MapBatch::F16(&maps16), n, t).unwrap();
                assert_eq!(got, want, "{steps:?} {mode:?}");
            }
        }
        let prepared = mixed_model(Steps::All, Mode::Expected)
            .prepare_maps(w, h)
            .unwrap();
        let at = |c: usize, st: usize, p: usize| ((c * t + st) * np + p) * plane + 2;
        let (mut bad16, mut bad32) = (maps16.clone(), maps32.clone());
        for (k, v) in [(at(3, 5, 1), -0.5f32), (at(3, 4, 2), f32::NAN)] {
            bad16[k] = f16::from_f32(v);
            bad32[k] = v;
        }
        let want = Err(CostError::BadProbability {
            candidate: 3,
            step: 4,
            point: 2,
        });
        assert_eq!(prepared.evaluate(MapBatch::F32(&bad32), n, t), want);
        assert_eq!(prepared.evaluate(MapBatch::F16(&bad16), n, t), want);
    }

    #[test]
    fn bad_probabilities_are_refused_with_their_position() {
        let model = mixed_model(Steps::All, Mode::Hit);
        let plane = 4 * 4;
        let n = 40; // enough work to take the parallel path
        let mut maps = vec![0.01f32; n * 2 * 4 * plane];
        let at = |c: usize, s: usize, p: usize| ((c * 2 + s) * 4 + p) * plane + 5;
        maps[at(33, 1, 2)] = -1e-3;
        maps[at(37, 0, 1)] = f32::INFINITY;
        let err = model.evaluate_maps(MapBatch::F32(&maps), n, 2, 4, 4);
        assert_eq!(
            err,
            Err(CostError::BadProbability {
                candidate: 33,
                step: 1,
                point: 2
            })
        );
        maps[at(33, 1, 2)] = 0.0;
        let f16s: Vec<f16> = maps.iter().map(|&v| f16::from_f32(v)).collect();
        assert_eq!(
            model.evaluate_maps(MapBatch::F16(&f16s), n, 2, 4, 4),
            Err(CostError::BadProbability {
                candidate: 37,
                step: 0,
                point: 1
            })
        );
        // Large batches go parallel; big enough and well-formed still works.
        let big = vec![0.5f32; 64 * 2 * 4 * 64 * 64];
        let res = model
            .evaluate_maps(MapBatch::F32(&big), 64, 2, 64, 64)
            .unwrap();
        assert!(res.costs.iter().all(|c| *c == res.costs[0]));
    }

    #[test]
    fn scoring_on_this_thread_gives_the_same_results() {
        let model = mixed_model(Steps::All, Mode::Expected);
        // Batches large enough for the parallel paths of maps, points and gradients.
        let (n, t, w, h) = (64, 2, 64, 64);
        let maps: Vec<f32> = (0..n * t * 4 * w * h)
            .map(|k| (k % 97) as f32 / 9700.0)
            .collect();
        let points: Vec<f64> = (0..4096 * t * 4 * 2)
            .map(|k| (k % 53) as f64 * 0.7 - 5.0)
            .collect();
        let all = |model: &CostModel| {
            (
                model.evaluate_maps(MapBatch::F32(&maps), n, t, h, w),
                model.evaluate_points(&points, 4096, t),
                model.evaluate_points_grad(&points, 4096, t),
            )
        };
        let fanned = all(&model);
        assert!(may_fan_out());
        let (serial, inside) = on_this_thread(|| (all(&model), may_fan_out()));
        assert!(!inside, "inside, scoring stays on the calling thread");
        assert!(may_fan_out(), "the switch is put back afterwards");
        assert!(fanned.0.is_ok() && fanned.1.is_ok() && fanned.2.is_ok());
        assert_eq!(serial, fanned);
        // Nested calls keep it set until the outermost ends.
        on_this_thread(|| {
            on_this_thread(|| ());
            assert!(!may_fan_out());
        });
        assert!(may_fan_out());
    }

    #[test]
    fn shape_and_setting_errors() {
        assert_eq!(
            CostSettings::new(Metric::Huber { delta_px: 0.0 }, Steps::All, Mode::Hit),
            Err(CostError::BadHuberDelta(0.0))
        );
        assert!(
            CostSettings::new(Metric::Huber { delta_px: f64::NAN }, Steps::All, Mode::Hit).is_err()
        );
        let settings = CostSettings::new(Metric::Euclidean, Steps::All, Mode::Expected).unwrap();
        assert_eq!(
            CostModel::new(10, 10, vec![], settings).unwrap_err(),
            CostError::NoPoints
        );
        let mut p = mixed_points();
        p[1].weight = -1.0;
        assert!(matches!(
            CostModel::new(30, 20, p, settings),
            Err(CostError::BadWeight { point: 1, .. })
        ));
        assert!(matches!(
            CostModel::new(31, 20, mixed_points(), settings),
            Err(CostError::MaskSize { point: 2, .. })
        ));
        let model = mixed_model(Steps::All, Mode::Expected);
        assert!(matches!(
            model.evaluate_points(&[0.0; 15], 1, 2),
            Err(CostError::BatchShape { .. })
        ));
        assert_eq!(
            model.evaluate_points(&[], 0, 1).unwrap_err(),
            CostError::EmptyBatch { n: 0, t: 1 }
        );
        let mut pts = vec![1.0; 2 * 2 * 4 * 2];
        pts[(4 + 3) * 2 + 1] = f64::NAN; // n = 0, t = 1, p = 3, y
        assert_eq!(
            model.evaluate_points(&pts, 2, 2).unwrap_err(),
            CostError::NonFinitePoint {
                candidate: 0,
                step: 1,
                point: 3
            }
        );
        pts[(4 + 3) * 2 + 1] = 1e300; // squares overflow? euclidean: finite; squared below
        assert!(model.evaluate_points(&pts, 2, 2).is_ok());
        let sq = CostModel::new(
            30,
            20,
            mixed_points(),
            CostSettings::new(Metric::Squared, Steps::All, Mode::Expected).unwrap(),
        )
        .unwrap();
        assert_eq!(
            sq.evaluate_points(&pts, 2, 2).unwrap_err(),
            CostError::NonFiniteCost { candidate: 0 }
        );
        assert!(matches!(
            model.evaluate_maps(MapBatch::F32(&[0.0; 10]), 1, 1, 2, 2),
            Err(CostError::BatchShape { .. })
        ));
        assert!(model.cost_maps(0, 5).is_err());
        assert!(model.cost_maps(1 << 20, 1 << 20).is_err());
        assert_eq!(model.distance(9, 0.0, 0.0), None);
    }

    #[test]
    fn ties_pick_the_first_candidate() {
        let model = mixed_model(Steps::Final, Mode::Expected);
        let same = [3.0, 4.0, 8.0, 7.5, 0.0, 0.0, 25.0, 15.0];
        let mut pts = vec![];
        pts.extend_from_slice(&[50.0; 8]);
        pts.extend_from_slice(&same);
        pts.extend_from_slice(&same);
        let res = model.evaluate_points(&pts, 3, 1).unwrap();
        assert_eq!(res.best, 1);
    }

    #[test]
    fn one_thread_and_many_agree() {
        let model = mixed_model(Steps::All, Mode::Expected);
        let plane: usize = 16 * 16;
        let maps: Vec<f32> = (0..300 * 2 * 4 * plane)
            .map(|k| ((k * 7919) % 1000) as f32 * 1e-6)
            .collect();
        let one = rayon::ThreadPoolBuilder::new()
            .num_threads(1)
            .build()
            .unwrap();
        let a = one
            .install(|| model.evaluate_maps(MapBatch::F32(&maps), 300, 2, 16, 16))
            .unwrap();
        let b = model
            .evaluate_maps(MapBatch::F32(&maps), 300, 2, 16, 16)
            .unwrap();
        assert_eq!(a, b);
    }

    /// Central finite differences of C_n in one coordinate of one predicted point.
    fn central_difference(model: &CostModel, pts: &[f64], t: usize, k: usize, h: f64) -> f64 {
        let n = pts.len() / (t * model.len() * 2);
        let mut plus = pts.to_vec();
        let mut minus = pts.to_vec();
        plus[k] += h;
        minus[k] -= h;
        let cand = k / (t * model.len() * 2);
        let a = model.evaluate_points(&plus, n, t).unwrap().costs[cand];
        let b = model.evaluate_points(&minus, n, t).unwrap().costs[cand];
        (a - b) / (2.0 * h)
    }

    /// The analytic gradient against central differences of the cost itself, for every kind
    /// of target and metric, at points away from the non-smooth places (target points, region
    /// boundaries and medial axes, mask ties): a fixed grid of queries offset by irrational-ish
    /// fractions, keeping those whose neighbourhood is smooth (the differences at ±h and ±h/2
    /// agree).
    #[test]
    fn gradients_match_central_differences() {
        for metric in [
            Metric::Euclidean,
            Metric::Squared,
            Metric::Huber { delta_px: 2.5 },
        ] {
            for steps in [Steps::Final, Steps::All] {
                let settings = CostSettings::new(metric, steps, Mode::Expected).unwrap();
                let model = CostModel::new(30, 20, mixed_points(), settings).unwrap();
                let t = 2;
                let mut pts = vec![];
                for q in 0..24 {
                    for k in 0..t * 4 {
                        let f = (q * 8 + k) as f64;
                        pts.push(-4.0 + (f * 0.618_034 * 37.0) % 38.0);
                        pts.push(-4.0 + (f * 0.414_214 * 29.0) % 28.0);
                    }
                }
                let n = 24;
                let (res, grad) = model.evaluate_points_grad(&pts, n, t).unwrap();
                assert_eq!(res, model.evaluate_points(&pts, n, t).unwrap());
                let mut checked = 0;
                for (k, &gk) in grad.iter().enumerate() {
                    let h = 1e-5;
                    let fd = central_difference(&model, &pts, t, k, h);
                    let fd_half = central_difference(&model, &pts, t, k, h / 2.0);
                    if (fd - fd_half).abs() > 1e-7 * (1.0 + fd.abs()) {
                        continue; // a kink within h: no derivative to compare with
                    }
                    checked += 1;
                    assert!(
                        (gk - fd).abs() <= 1e-6 * (1.0 + fd.abs()),
                        "{metric:?} {steps:?} coordinate {k}: analytic {gk} vs differences {fd}"
                    );
                }
                assert!(
                    checked > pts.len() * 3 / 4,
                    "only {checked} smooth coordinates"
                );
                if steps == Steps::Final {
                    let stride = t * 4 * 2;
                    for c in 0..n {
                        assert!(grad[c * stride..c * stride + 8].iter().all(|&g| g == 0.0));
                    }
                }
            }
        }
    }

    /// Zero gradient on a target: at the target point, inside the region, on a painted pixel;
    /// zero everywhere in `hit` mode; unit length for `euclidean` off the targets.
    #[test]
    fn gradients_are_zero_on_targets_and_in_hit_mode() {
        let model = mixed_model(Steps::Final, Mode::Expected);
        let mask = match &model.points()[2].target {
            TargetShape::Mask(m) => m.clone(),
            _ => unreachable!(),
        };
        let k = mask.data().iter().position(|&b| b).unwrap();
        let (mx, my) = ((k % 30) as f64, (k / 30) as f64);
        let on = [3.0, 4.0, 8.0, 7.5, mx, my, 25.5, 15.25];
        let (_, g) = model.evaluate_points_grad(&on, 1, 1).unwrap();
        assert!(g.iter().all(|&v| v == 0.0), "{g:?}");
        let off = [13.0, 14.0, 40.0, 30.0, -7.0, 33.0, 0.0, 0.0];
        let (_, g) = model.evaluate_points_grad(&off, 1, 1).unwrap();
        let weights = [1.0, 0.5, 2.0, 0.25];
        for p in 0..4 {
            let len = g[2 * p].hypot(g[2 * p + 1]);
            assert!((len - weights[p]).abs() < 1e-12, "point {p}: {len}");
        }
        let hit = mixed_model(Steps::All, Mode::Hit);
        let (_, g) = hit.evaluate_points_grad(&off, 1, 1).unwrap();
        assert!(g.iter().all(|&v| v == 0.0));
    }

    /// Where two region edges are equally near, the first edge in vertex order gives the
    /// gradient (the documented subgradient): on the diagonal outside a corner of the square
    /// the vertex is nearest either way, and below the square's middle the bottom edge is.
    #[test]
    fn gradient_ties_take_the_first_nearest() {
        let square = Polygon::new(vec![
            pt(0.0, 0.0),
            pt(10.0, 0.0),
            pt(10.0, 10.0),
            pt(0.0, 10.0),
        ])
        .unwrap();
        // Corner (10, 0): the nearest boundary point is the vertex; the unit vector points
        // from it diagonally out.
        let g = square.distance_and_gradient(13.0, -3.0).1;
        let r = std::f64::consts::FRAC_1_SQRT_2;
        assert!(
            (g[0] - r).abs() < 1e-15 && (g[1] + r).abs() < 1e-15,
            "{g:?}"
        );
        // Inside: zero.
        assert_eq!(square.distance_and_gradient(5.0, 5.0).1, [0.0, 0.0]);
        // Straight below the bottom edge (y = 10): (0, 1).
        assert_eq!(square.distance_and_gradient(5.0, 14.0).1, [0.0, 1.0]);
    }
}
