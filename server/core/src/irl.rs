//! Reward inference from demonstrations: a grid MDP over the frame and maximum-entropy inverse
//! reinforcement learning (Ziebart, Maas, Bagnell & Dey, "Maximum Entropy Inverse
//! Reinforcement Learning", AAAI 2008) with deterministic transitions and a linear reward
//! r(s) = w·φ(s). Demos of different lengths are each scored under the soft-optimal policy for
//! their own horizon (Snoswell, Singh & Ye, "Revisiting Maximum Entropy Inverse Reinforcement
//! Learning", 2020).
//!
//! - [`Grid`]: the frame cut into square cells; states are cells, actions stay or move to one of
//!   the 8 neighbours.
//! - [`Features`]: per-cell features at the cell centre, standardised over the states.
//! - [`path_states`]: a tracked path as a sequence of 8-connected states.
//! - [`MaxEnt`]: the objective (mean log-likelihood per move, minus λ/2·|w|²), its gradient and
//!   the expected visitation counts; [`soft_values`] the soft value table and policy.
//! - [`fit`] (L-BFGS, [`lbfgs`]), [`leave_one_out`], [`reward_map`], and [`fit_reward`], which
//!   runs them all from a frame description, features and tracked paths.
//!
//! The exact definitions are in the "Reward fits" section of `docs/conventions.md`.

pub mod lbfgs;
mod linear;
pub mod sample;

use crate::geometry::Polygon;
pub use lbfgs::{Control, LbfgsSettings, StopReason};
use thiserror::Error;

/// At most this many cells in a grid.
pub const MAX_CELLS: usize = 100_000;

/// At most this many entries states × (longest horizon + 1) in the soft value table
/// (2²⁶ float64, 512 MiB; the linear passes of [`MaxEnt::evaluate`] may add a u32 a deep
/// entry, up to 256 MiB more).
pub const MAX_VALUE_TABLE: usize = 1 << 26;

/// Below this log-ratio a log-sum-exp term is recomputed with its own shift (see
/// [`soft_values`]).
const LOG_FLOOR: f64 = -600.0;

const NO_STATE: u32 = u32::MAX;

/// Whether this CPU runs the AVX2 builds of the passes (checked once, then cached by std).
/// Both builds do the same f64 operations in the same order (no FMA), so their results are
/// identical bit for bit.
#[cfg(target_arch = "x86_64")]
fn has_avx2() -> bool {
    std::arch::is_x86_feature_detected!("avx2")
}

/// What is wrong with a reward fit's input.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum IrlError {
    /// A value is out of its range (`field` names it, e.g. `cell_px`, `features[2].sigma_px`).
    #[error("{field}: {reason}")]
    Invalid {
        /// The field, as a path into the input.
        field: String,
        /// What is wrong.
        reason: String,
    },
    /// A point or polygon vertex lies outside the frame [−0.5, W − 0.5] × [−0.5, H − 0.5].
    #[error("{field}: outside the {width}×{height} frame")]
    OutsideFrame {
        /// The field, e.g. `features[0].point`, `no_go[1]`, `demos[3].samples[17]`.
        field: String,
        /// Frame width, pixels.
        width: u32,
        /// Frame height, pixels.
        height: u32,
    },
    /// The grid would have more than [`MAX_CELLS`] cells.
    #[error(
        "cell_px: the grid would have {cells} cells, more than {max}; take cells of {smallest} px \
         or more"
    )]
    TooManyCells {
        /// cols × rows.
        cells: usize,
        /// The limit.
        max: usize,
        /// The smallest cell side whose grid stays within the limit.
        smallest: u32,
    },
    /// The soft value table would be too large (states × (longest horizon + 1)).
    #[error("demos: the value table would hold {values} values, more than {max}")]
    TooMuchWork {
        /// states × (longest horizon + 1).
        values: usize,
        /// The limit ([`MAX_VALUE_TABLE`]).
        max: usize,
    },
    /// No demonstrations.
    #[error("demos: no demonstrations")]
    NoDemos,
    /// Every demonstration stays in one cell: no move to learn from.
    #[error("demos: every demonstration stays in one cell, so there is no move to learn from")]
    NoMoves,
    /// Every sample of a demonstration is lost.
    #[error("{field}: every sample is lost")]
    EmptyDemo {
        /// `demos[i]`.
        field: String,
    },
    /// A path passes through a no-go cell that was removed from the states.
    #[error("{field}: the path passes through a removed no-go cell")]
    RemovedCell {
        /// `demos[i].samples[j]`: the sample at or after the removed cell.
        field: String,
    },
}

fn invalid(field: impl Into<String>, reason: impl Into<String>) -> IrlError {
    IrlError::Invalid {
        field: field.into(),
        reason: reason.into(),
    }
}

/// The frame and how it is cut into cells.
#[derive(Debug, Clone, PartialEq)]
pub struct GridSpec {
    /// Frame width, pixels (≥ 1).
    pub width: u32,
    /// Frame height, pixels (≥ 1).
    pub height: u32,
    /// Side of a cell, pixels (≥ 1).
    pub cell_px: u32,
    /// No-go zones; a cell whose centre lies in one (closed) is a no-go cell.
    pub no_go: Vec<Polygon>,
    /// Remove no-go cells from the states (no path may enter them).
    pub remove_no_go: bool,
}

/// The grid MDP: states are the cells kept, actions stay or move to one of the 8 neighbouring
/// kept cells (deterministic). The neighbour relation is symmetric.
#[derive(Debug, Clone)]
pub struct Grid {
    width: u32,
    height: u32,
    cell_px: u32,
    cols: usize,
    rows: usize,
    no_go_cell: Vec<bool>,
    state_of_cell: Vec<u32>,
    cell_of_state: Vec<u32>,
    nbr_start: Vec<u32>,
    nbr: Vec<u32>,
    /// Index of each state in the padded (rows + 2) × (cols + 2) layout of [`BoxSum`].
    pad: Vec<u32>,
}

fn in_frame(width: u32, height: u32, p: [f64; 2]) -> bool {
    p[0].is_finite()
        && p[1].is_finite()
        && p[0] >= -0.5
        && p[0] <= width as f64 - 0.5
        && p[1] >= -0.5
        && p[1] <= height as f64 - 0.5
}

impl Grid {
    /// Builds the grid: cols = ⌈W / cell_px⌉, rows = ⌈H / cell_px⌉. Refuses a zero size
    /// (`Invalid`), more than [`MAX_CELLS`] cells (`TooManyCells`) and a no-go vertex outside
    /// the frame (`OutsideFrame` on `no_go[i]`).
    pub fn new(spec: &GridSpec) -> Result<Self, IrlError> {
        for (field, v) in [
            ("width", spec.width),
            ("height", spec.height),
            ("cell_px", spec.cell_px),
        ] {
            if v == 0 {
                return Err(invalid(field, "must be at least 1"));
            }
        }
        let cells_of = |p: u32| {
            (spec.width as usize).div_ceil(p as usize) * (spec.height as usize).div_ceil(p as usize)
        };
        let cells = cells_of(spec.cell_px);
        if cells > MAX_CELLS {
            // The cell count only falls as cells grow, and a cell of the frame's longer side
            // makes one cell: the search ends.
            let smallest = (spec.cell_px..=spec.width.max(spec.height))
                .find(|&p| cells_of(p) <= MAX_CELLS)
                .unwrap_or(spec.width.max(spec.height));
            return Err(IrlError::TooManyCells {
                cells,
                max: MAX_CELLS,
                smallest,
            });
        }
        let p = spec.cell_px as usize;
        let cols = (spec.width as usize).div_ceil(p);
        let rows = (spec.height as usize).div_ceil(p);
        for (i, poly) in spec.no_go.iter().enumerate() {
            if poly
                .vertices()
                .iter()
                .any(|v| !in_frame(spec.width, spec.height, v.to_array()))
            {
                return Err(IrlError::OutsideFrame {
                    field: format!("no_go[{i}]"),
                    width: spec.width,
                    height: spec.height,
                });
            }
        }
        let mut grid = Grid {
            width: spec.width,
            height: spec.height,
            cell_px: spec.cell_px,
            cols,
            rows,
            no_go_cell: vec![false; cells],
            state_of_cell: vec![NO_STATE; cells],
            cell_of_state: Vec::with_capacity(cells),
            nbr_start: Vec::new(),
            nbr: Vec::new(),
            pad: Vec::new(),
        };
        for r in 0..rows {
            for c in 0..cols {
                let [x, y] = grid.cell_centre(c, r);
                let no_go = spec.no_go.iter().any(|poly| poly.contains(x, y));
                grid.no_go_cell[r * cols + c] = no_go;
                if !(no_go && spec.remove_no_go) {
                    grid.state_of_cell[r * cols + c] = grid.cell_of_state.len() as u32;
                    grid.cell_of_state.push((r * cols + c) as u32);
                }
            }
        }
        grid.nbr_start.push(0);
        for s in 0..grid.cell_of_state.len() {
            let cell = grid.cell_of_state[s] as usize;
            let (c, r) = ((cell % cols) as i64, (cell / cols) as i64);
            grid.nbr.push(s as u32);
            for dr in -1..=1i64 {
                for dc in -1..=1i64 {
                    if (dr, dc) == (0, 0) {
                        continue;
                    }
                    if let Some(t) = grid.state_at(c + dc, r + dr) {
                        grid.nbr.push(t as u32);
                    }
                }
            }
            grid.nbr_start.push(grid.nbr.len() as u32);
            grid.pad
                .push(((r + 1) as usize * (cols + 2) + (c + 1) as usize) as u32);
        }
        Ok(grid)
    }

    /// Frame width, pixels.
    pub fn width(&self) -> u32 {
        self.width
    }
    /// Frame height, pixels.
    pub fn height(&self) -> u32 {
        self.height
    }
    /// Side of a cell, pixels.
    pub fn cell_px(&self) -> u32 {
        self.cell_px
    }
    /// Number of columns.
    pub fn cols(&self) -> usize {
        self.cols
    }
    /// Number of rows.
    pub fn rows(&self) -> usize {
        self.rows
    }
    /// Number of states (cells kept).
    pub fn states(&self) -> usize {
        self.cell_of_state.len()
    }

    /// The centre of the covered part of cell (c, r), in frame pixels: cell c covers
    /// x ∈ [c·p − 0.5, min((c + 1)·p, W) − 0.5), so its centre is x = (c·p + min((c + 1)·p, W)
    /// − 1) / 2, which is c·p + (p − 1)/2 for a whole cell; y likewise.
    pub fn cell_centre(&self, c: usize, r: usize) -> [f64; 2] {
        let p = self.cell_px as f64;
        let centre = |i: usize, size: u32| {
            let lo = i as f64 * p;
            let hi = ((i + 1) as f64 * p).min(size as f64);
            (lo + hi - 1.0) / 2.0
        };
        [centre(c, self.width), centre(r, self.height)]
    }

    /// The cell (c, r) holding frame point (x, y), or None outside the frame. A point on the
    /// frame's right or bottom edge (x = W − 0.5) belongs to the last cell.
    pub fn cell_of_point(&self, x: f64, y: f64) -> Option<(usize, usize)> {
        if !in_frame(self.width, self.height, [x, y]) {
            return None;
        }
        let p = self.cell_px as f64;
        let c = (((x + 0.5) / p).floor() as usize).min(self.cols - 1);
        let r = (((y + 0.5) / p).floor() as usize).min(self.rows - 1);
        Some((c, r))
    }

    /// The state of cell (c, r), or None when off the grid or removed.
    pub fn state(&self, c: usize, r: usize) -> Option<usize> {
        if c >= self.cols || r >= self.rows {
            return None;
        }
        let s = self.state_of_cell[r * self.cols + c];
        (s != NO_STATE).then_some(s as usize)
    }

    fn state_at(&self, c: i64, r: i64) -> Option<usize> {
        if c < 0 || r < 0 {
            return None;
        }
        self.state(c as usize, r as usize)
    }

    /// The cell (c, r) of state `s`.
    pub fn cell(&self, s: usize) -> (usize, usize) {
        let cell = self.cell_of_state[s] as usize;
        (cell % self.cols, cell / self.cols)
    }

    /// The centre of state `s`'s cell, frame pixels.
    pub fn state_centre(&self, s: usize) -> [f64; 2] {
        let (c, r) = self.cell(s);
        self.cell_centre(c, r)
    }

    /// True when cell (c, r) is a no-go cell (its centre in a no-go zone), removed or not.
    pub fn is_no_go(&self, c: usize, r: usize) -> bool {
        self.no_go_cell[r * self.cols + c]
    }

    /// The states reachable from `s` in one move: `s` itself (stay) first, then the kept
    /// 8-neighbours in row-major order. Symmetric: t is in `neighbours(s)` iff s is in
    /// `neighbours(t)`.
    pub fn neighbours(&self, s: usize) -> &[u32] {
        &self.nbr[self.nbr_start[s] as usize..self.nbr_start[s + 1] as usize]
    }
}

/// One feature of a cell, evaluated at the cell centre (x, y).
#[derive(Debug, Clone, PartialEq)]
pub enum Feature {
    /// Euclidean distance to `point`, divided by the frame diagonal √(W² + H²).
    DistanceTo {
        /// The point, frame pixels.
        point: [f64; 2],
    },
    /// 1 when the centre lies in the closed polygon, else 0.
    Inside {
        /// The polygon, frame pixels.
        polygon: Polygon,
    },
    /// exp(−d²/(2σ²)), d the distance to `centre`.
    Rbf {
        /// The bump's centre, frame pixels.
        centre: [f64; 2],
        /// σ, pixels (> 0, finite).
        sigma_px: f64,
    },
    /// 1 in a no-go cell of the grid, else 0 (constant 0 when they are removed).
    NoGo,
}

/// How a feature was standardised: φ = (raw − mean) / scale.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FeatureStats {
    /// Mean of the raw feature over the states.
    pub mean: f64,
    /// Its population standard deviation, or 1 when the feature is constant.
    pub scale: f64,
    /// The raw feature is the same in every state (std ≤ 1e-12·max(1, |mean|)); its
    /// standardised value is 0 everywhere and its weight stays 0.
    pub constant: bool,
}

/// The standardised feature matrix, states × features, row-major.
#[derive(Debug, Clone, PartialEq)]
pub struct Features {
    k: usize,
    values: Vec<f64>,
    stats: Vec<FeatureStats>,
}

impl Features {
    /// Computes the features at every state's cell centre and standardises them. Refuses
    /// points and polygon vertices outside the frame (`OutsideFrame` on `features[i].point`,
    /// `.centre`, `.polygon`) and a σ that is not a positive finite number (`Invalid` on
    /// `features[i].sigma_px`).
    pub fn new(grid: &Grid, features: &[Feature]) -> Result<Self, IrlError> {
        let outside = |field: String| IrlError::OutsideFrame {
            field,
            width: grid.width,
            height: grid.height,
        };
        for (i, f) in features.iter().enumerate() {
            match f {
                Feature::DistanceTo { point } if !in_frame(grid.width, grid.height, *point) => {
                    return Err(outside(format!("features[{i}].point")));
                }
                Feature::Rbf { centre, sigma_px } => {
                    if !in_frame(grid.width, grid.height, *centre) {
                        return Err(outside(format!("features[{i}].centre")));
                    }
                    if !(sigma_px.is_finite() && *sigma_px > 0.0) {
                        return Err(invalid(
                            format!("features[{i}].sigma_px"),
                            "must be a positive number",
                        ));
                    }
                }
                Feature::Inside { polygon }
                    if polygon
                        .vertices()
                        .iter()
                        .any(|v| !in_frame(grid.width, grid.height, v.to_array())) =>
                {
                    return Err(outside(format!("features[{i}].polygon")));
                }
                _ => {}
            }
        }
        let k = features.len();
        let diag = (grid.width as f64).hypot(grid.height as f64);
        let mut raw = Vec::with_capacity(grid.states() * k);
        for s in 0..grid.states() {
            let [x, y] = grid.state_centre(s);
            let (c, r) = grid.cell(s);
            for f in features {
                raw.push(match f {
                    Feature::DistanceTo { point } => (x - point[0]).hypot(y - point[1]) / diag,
                    Feature::Inside { polygon } => f64::from(u8::from(polygon.contains(x, y))),
                    Feature::Rbf { centre, sigma_px } => {
                        let d2 = (x - centre[0]).powi(2) + (y - centre[1]).powi(2);
                        (-d2 / (2.0 * sigma_px * sigma_px)).exp()
                    }
                    Feature::NoGo => f64::from(u8::from(grid.is_no_go(c, r))),
                });
            }
        }
        Ok(Self::from_raw(k, raw))
    }

    /// Standardises a raw matrix (states × `k`, row-major) column by column.
    pub fn from_raw(k: usize, mut raw: Vec<f64>) -> Self {
        let n = raw.len().checked_div(k).unwrap_or(0);
        let mut stats = Vec::with_capacity(k);
        for j in 0..k {
            let mean = (0..n).map(|s| raw[s * k + j]).sum::<f64>() / n.max(1) as f64;
            let var =
                (0..n).map(|s| (raw[s * k + j] - mean).powi(2)).sum::<f64>() / n.max(1) as f64;
            let std = var.sqrt();
            let constant = std.is_nan() || std <= 1e-12 * mean.abs().max(1.0);
            let scale = if constant { 1.0 } else { std };
            for s in 0..n {
                let v = &mut raw[s * k + j];
                *v = if constant { 0.0 } else { (*v - mean) / scale };
            }
            stats.push(FeatureStats {
                mean,
                scale,
                constant,
            });
        }
        Self {
            k,
            values: raw,
            stats,
        }
    }

    /// Number of features.
    pub fn len(&self) -> usize {
        self.k
    }
    /// True when there are no features.
    pub fn is_empty(&self) -> bool {
        self.k == 0
    }
    /// The standardised features of state `s`.
    pub fn row(&self, s: usize) -> &[f64] {
        &self.values[s * self.k..(s + 1) * self.k]
    }
    /// How each feature was standardised.
    pub fn stats(&self) -> &[FeatureStats] {
        &self.stats
    }
    /// Weights in raw feature units: r = Σ wᵢ (rawᵢ − meanᵢ)/scaleᵢ = Σ (wᵢ/scaleᵢ)·rawᵢ + c
    /// (a constant feature's raw weight is 0). Returns the raw weights and the offset c.
    pub fn raw_weights(&self, w: &[f64]) -> (Vec<f64>, f64) {
        let mut offset = 0.0;
        let raw = w
            .iter()
            .zip(&self.stats)
            .map(|(wi, st)| {
                if st.constant {
                    0.0
                } else {
                    offset -= wi * st.mean / st.scale;
                    wi / st.scale
                }
            })
            .collect();
        (raw, offset)
    }
    /// The reward of every state, r(s) = w·φ(s).
    pub fn rewards(&self, w: &[f64]) -> Vec<f64> {
        let mut r = vec![0.0; self.values.len() / self.k.max(1)];
        self.rewards_into(w, &mut r);
        r
    }
    fn rewards_into(&self, w: &[f64], r: &mut [f64]) {
        if self.k == 0 {
            r.fill(0.0);
            return;
        }
        for (rs, row) in r.iter_mut().zip(self.values.chunks_exact(self.k)) {
            *rs = row.iter().zip(w).map(|(a, b)| a * b).sum();
        }
    }
}

/// One sample of a tracked path.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PathSample {
    /// Frame x, pixels.
    pub x: f64,
    /// Frame y, pixels.
    pub y: f64,
    /// The tracker lost the point here: the sample is dropped.
    pub lost: bool,
}

/// The cells of the 8-connected digital line from cell `a` to cell `b`, both included
/// (Bresenham 1965, all octants): one step per cell along the longer axis, so consecutive
/// cells are 8-neighbours and the line has max(|Δc|, |Δr|) + 1 cells.
pub fn cell_line(a: (i64, i64), b: (i64, i64)) -> Vec<(i64, i64)> {
    let (dx, dy) = ((b.0 - a.0).abs(), -(b.1 - a.1).abs());
    let (sx, sy) = ((b.0 - a.0).signum(), (b.1 - a.1).signum());
    let mut err = dx + dy;
    let (mut x, mut y) = a;
    let mut out = Vec::with_capacity((dx.max(-dy) + 1) as usize);
    loop {
        out.push((x, y));
        if (x, y) == b {
            return out;
        }
        let e2 = 2 * err;
        if e2 >= dy {
            err += dy;
            x += sx;
        }
        if e2 <= dx {
            err += dx;
            y += sy;
        }
    }
}

/// The states of a tracked path (`field` names it in errors, e.g. `demos[3]`): lost samples
/// are dropped, each kept sample maps to its cell, and consecutive kept samples whose cells are
/// not the same or 8-neighbours are joined by the cells of [`cell_line`] between them. With
/// `collapse_repeats`, consecutive equal cells become one (the path is the cells visited, in
/// order; a demo that never leaves its cell is one state). Refuses a kept sample outside the
/// frame or non-finite (`OutsideFrame` on `{field}.samples[j]`), a path through a removed cell
/// (`RemovedCell`) and a path with no kept sample (`EmptyDemo`).
pub fn path_states(
    grid: &Grid,
    samples: &[PathSample],
    collapse_repeats: bool,
    field: &str,
) -> Result<Vec<usize>, IrlError> {
    let mut out: Vec<usize> = Vec::new();
    let mut last: Option<(i64, i64)> = None;
    for (j, smp) in samples.iter().enumerate() {
        if smp.lost {
            continue;
        }
        let sample_field = || format!("{field}.samples[{j}]");
        let (c, r) = grid
            .cell_of_point(smp.x, smp.y)
            .ok_or_else(|| IrlError::OutsideFrame {
                field: sample_field(),
                width: grid.width,
                height: grid.height,
            })?;
        let cell = (c as i64, r as i64);
        let line = match last {
            None => vec![cell],
            Some(prev) => cell_line(prev, cell)[1..].to_vec(),
        };
        let line = if line.is_empty() { vec![cell] } else { line };
        for q in line {
            let s = grid
                .state_at(q.0, q.1)
                .ok_or_else(|| IrlError::RemovedCell {
                    field: sample_field(),
                })?;
            if !(collapse_repeats && out.last() == Some(&s)) {
                out.push(s);
            }
        }
        last = Some(cell);
    }
    if out.is_empty() {
        return Err(IrlError::EmptyDemo {
            field: field.to_string(),
        });
    }
    Ok(out)
}

/// Sums over the moves from each state, Σ_{s′ ∈ N(s)} x(s′), as a 3 × 3 box sum over a layout
/// of the grid padded by one zero cell all round, in which removed cells stay zero: one
/// horizontal and one vertical pass of three-term sums, contiguous and branch-free.
#[derive(Debug, Clone)]
struct BoxSum {
    p: Vec<f64>,
    h: Vec<f64>,
}

impl BoxSum {
    fn new(grid: &Grid) -> Self {
        let len = (grid.rows + 2) * (grid.cols + 2);
        Self {
            p: vec![0.0; len],
            h: vec![0.0; len],
        }
    }

    /// out[s] = Σ over the moves from s of x.
    fn sum(&mut self, grid: &Grid, x: &[f64], out: &mut [f64]) {
        for (&i, &v) in grid.pad.iter().zip(x) {
            self.p[i as usize] = v;
        }
        let len = self.p.len();
        let (a, b, c) = (&self.p[..len - 2], &self.p[1..len - 1], &self.p[2..]);
        for (((h, a), b), c) in self.h[1..len - 1].iter_mut().zip(a).zip(b).zip(c) {
            *h = a + b + c;
        }
        let w = grid.cols + 2;
        for (&i, o) in grid.pad.iter().zip(out.iter_mut()) {
            let i = i as usize;
            *o = self.h[i - w] + self.h[i] + self.h[i + w];
        }
    }
}

/// The soft value table of a reward for horizons 0 … `horizon` (the backward pass).
///
/// V₀(s) = r(s) and Vₖ(s) = r(s) + Qₖ(s), Qₖ(s) = log Σ_{s′ ∈ N(s)} exp Vₖ₋₁(s′): Vₖ(s) is the
/// log of the sum of exp(total reward) over all paths of k moves from s, so the soft-optimal
/// policy with k moves left is πₖ(s′ | s) = exp(Vₖ₋₁(s′) − Qₖ(s)).
#[derive(Debug, Clone)]
pub struct SoftValues {
    states: usize,
    horizon: usize,
    r: Vec<f64>,
    table: Table,
}

/// The value table in shifted form (see [`backward`]), so that its entries stay as small as
/// the spread of V over the states at one horizon, however long the horizon: the policy is
/// then as exact at horizon 500 as at horizon 5.
#[derive(Debug, Clone)]
struct Table {
    /// q[k·n + s] = Q̃ₖ(s) = Qₖ(s) − offset[k] (Q̃₀ = 0). In [`MaxEnt`], the linear passes
    /// (`linear.rs`) keep exp Q̃ₖ(s) here instead, when they apply.
    q: Vec<f64>,
    /// top[k] = maxₛ (r(s) + Q̃ₖ(s)).
    top: Vec<f64>,
    /// offset[k] = Σ_{j<k} top[j].
    offset: Vec<f64>,
}

impl Table {
    fn new(states: usize, horizon: usize) -> Self {
        Self {
            q: vec![0.0; states * (horizon + 1)],
            top: vec![0.0; horizon + 1],
            offset: vec![0.0; horizon + 1],
        }
    }

    /// Ṽₖ(s) = Vₖ(s) − offset[k] − top[k] = r(s) + Q̃ₖ(s) − top[k] ≤ 0, evaluated by the one
    /// expression both passes use (so they see the same rounding).
    #[inline(always)]
    fn shifted_value(&self, n: usize, r: &[f64], k: usize, s: usize) -> f64 {
        (r[s] + self.q[k * n + s]) - self.top[k]
    }

    fn value(&self, n: usize, r: &[f64], k: usize, s: usize) -> f64 {
        r[s] + self.q[k * n + s] + self.offset[k]
    }
}

/// Computes the soft value table of reward `w` for horizons 0 … `horizon`. Refuses a table
/// over [`MAX_VALUE_TABLE`] entries.
pub fn soft_values(
    grid: &Grid,
    features: &Features,
    w: &[f64],
    horizon: usize,
) -> Result<SoftValues, IrlError> {
    let n = grid.states();
    check_table(n, horizon)?;
    let r = features.rewards(w);
    let mut table = Table::new(n, horizon);
    let mut scratch = Scratch::new(grid);
    backward(grid, &r, horizon, &mut table, &mut scratch);
    Ok(SoftValues {
        states: n,
        horizon,
        r,
        table,
    })
}

fn check_table(states: usize, horizon: usize) -> Result<(), IrlError> {
    let values = states.saturating_mul(horizon.saturating_add(1));
    if values > MAX_VALUE_TABLE {
        return Err(IrlError::TooMuchWork {
            values,
            max: MAX_VALUE_TABLE,
        });
    }
    Ok(())
}

impl SoftValues {
    /// The longest horizon in the table.
    pub fn horizon(&self) -> usize {
        self.horizon
    }
    /// Vₖ(s): the log partition function of paths of k moves from s (rewards of all k + 1
    /// states included).
    pub fn value(&self, k: usize, s: usize) -> f64 {
        self.table.value(self.states, &self.r, k, s)
    }
    /// πₖ(· | s), the policy with k ≥ 1 moves left, in the order of [`Grid::neighbours`].
    pub fn policy(&self, grid: &Grid, k: usize, s: usize) -> Vec<f64> {
        assert!(k >= 1 && k <= self.horizon);
        let n = self.states;
        let q = self.table.q[k * n + s];
        grid.neighbours(s)
            .iter()
            .map(|&t| (self.table.shifted_value(n, &self.r, k - 1, t as usize) - q).exp())
            .collect()
    }
    /// log P(path | its start) under the soft-optimal policy for its horizon (len − 1 moves):
    /// Σₜ r(sₜ) − V_T(s₀). 0 for a one-state path. Panics when the path is longer than the
    /// table.
    pub fn path_log_likelihood(&self, path: &[usize]) -> f64 {
        let t = path.len() - 1;
        path.iter().map(|&s| self.r[s]).sum::<f64>() - self.value(t, path[0])
    }
}

/// The backward pass, in shifted form. With Ṽₖ₋₁ = r + Q̃ₖ₋₁ − topₖ₋₁ (whose maximum is 0):
/// Q̃ₖ(s) = log Σ_{s′ ∈ N(s)} exp Ṽₖ₋₁(s′), and Qₖ = Q̃ₖ + offsetₖ with offsetₖ =
/// offsetₖ₋₁ + topₖ₋₁; the policy πₖ(s′ | s) = exp(Ṽₖ₋₁(s′) − Q̃ₖ(s)) needs no offset.
///
/// The log-sum-exp shares one shift per step (the maximum 0): one exp per state and step,
/// not one per move. When a state's sum is under e^LOG_FLOOR (all its neighbours far below
/// the best state), its Q̃ is recomputed with its own maximum, so no term underflows to a
/// wrong result at any weight or horizon.
fn backward(grid: &Grid, r: &[f64], t_max: usize, table: &mut Table, sc: &mut Scratch) {
    let n = r.len();
    table.q[..n].fill(0.0);
    table.offset[0] = 0.0;
    table.top[0] = r.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    let floor = LOG_FLOOR.exp();
    for k in 1..=t_max {
        for s in 0..n {
            sc.vprev[s] = table.shifted_value(n, r, k - 1, s);
        }
        for (e, &v) in sc.e.iter_mut().zip(&sc.vprev) {
            *e = exp_nonpositive(v);
        }
        sc.boxes.sum(grid, &sc.e, &mut sc.z);
        table.offset[k] = table.offset[k - 1] + table.top[k - 1];
        let cur = &mut table.q[k * n..(k + 1) * n];
        let mut top = f64::NEG_INFINITY;
        for s in 0..n {
            let z = sc.z[s];
            let q = if z >= floor {
                z.ln()
            } else {
                let nb = grid.neighbours(s);
                let vprev = &sc.vprev;
                let lm = nb
                    .iter()
                    .map(|&t| vprev[t as usize])
                    .fold(f64::NEG_INFINITY, f64::max);
                lm + nb
                    .iter()
                    .map(|&t| (vprev[t as usize] - lm).exp())
                    .sum::<f64>()
                    .ln()
            };
            cur[s] = q;
            top = top.max(r[s] + q);
        }
        table.top[k] = top;
    }
}

/// exp(x) for x ≤ 0, written so that a loop over a slice vectorises: x = k·ln 2 + r with
/// |r| ≤ ln 2 / 2 (Cody–Waite split of ln 2), exp(r) by its Taylor polynomial of degree 13
/// (truncation under 1e-17 relative), times 2ᵏ built from the exponent bits. Within 2 ulp of
/// the exact value (tested against `f64::exp`); 0 below −708, where exp is under 3.3e-308.
#[inline(always)]
fn exp_nonpositive(x: f64) -> f64 {
    const LOG2E: f64 = std::f64::consts::LOG2_E;
    const LN2_HI: f64 = f64::from_bits(0x3FE6_2E42_FEE0_0000); // ln 2 to 32 bits
    const LN2_LO: f64 = f64::from_bits(0x3DEA_39EF_3579_3C76); // ln 2 − LN2_HI
    const MAGIC: f64 = 6_755_399_441_055_744.0; // 1.5·2⁵²: adding it rounds to an integer
    let xc = x.max(-708.0);
    let t = xc * LOG2E + MAGIC;
    let kf = t - MAGIC;
    let k = (t.to_bits() as i64).wrapping_sub(MAGIC.to_bits() as i64);
    let r = (xc - kf * LN2_HI) - kf * LN2_LO;
    let mut p = 1.0 / 6_227_020_800.0;
    for c in [
        1.0 / 479_001_600.0,
        1.0 / 39_916_800.0,
        1.0 / 3_628_800.0,
        1.0 / 362_880.0,
        1.0 / 40_320.0,
        1.0 / 5_040.0,
        1.0 / 720.0,
        1.0 / 120.0,
        1.0 / 24.0,
        1.0 / 6.0,
        0.5,
        1.0,
        1.0,
    ] {
        p = p * r + c;
    }
    let scale = f64::from_bits(((k + 1023) as u64) << 52);
    if x < -708.0 { 0.0 } else { p * scale }
}

/// Buffers of one state each, reused by every step of both passes.
#[derive(Debug, Clone)]
struct Scratch {
    vprev: Vec<f64>,
    e: Vec<f64>,
    z: Vec<f64>,
    g: Vec<f64>,
    acc: Vec<f64>,
    boxes: BoxSum,
}

impl Scratch {
    fn new(grid: &Grid) -> Self {
        let n = grid.states();
        Self {
            vprev: vec![0.0; n],
            e: vec![0.0; n],
            z: vec![0.0; n],
            g: vec![0.0; n],
            acc: vec![0.0; n],
            boxes: BoxSum::new(grid),
        }
    }
}

/// The value of the objective and its gradient at one w.
#[derive(Debug, Clone, PartialEq)]
pub struct Evaluation {
    /// f(w) = L(w) / M − λ/2·|w|², M the number of moves over all demos.
    pub objective: f64,
    /// L(w) = Σ_demos log P(path | start), natural log.
    pub log_likelihood: f64,
    /// L(w) / M.
    pub log_likelihood_per_step: f64,
    /// ∇f(w) = (empirical − expected feature counts) / M − λw.
    pub gradient: Vec<f64>,
}

/// The maximum-entropy objective over a set of demos, with reusable buffers (no allocation
/// per step or per evaluation).
#[derive(Debug, Clone)]
pub struct MaxEnt<'a> {
    grid: &'a Grid,
    features: &'a Features,
    demos: Vec<Vec<usize>>,
    t_max: usize,
    moves: usize,
    /// starts[k]: (state, number of demos with horizon k starting there).
    starts: Vec<Vec<(u32, f64)>>,
    empirical: Vec<f64>,
    r: Vec<f64>,
    table: Table,
    scratch: Scratch,
    d: Vec<f64>,
    d_next: Vec<f64>,
    visits: Vec<f64>,
    fallback: Vec<u32>,
    linear: linear::Linear,
}

impl<'a> MaxEnt<'a> {
    /// The objective over `demos`, each a sequence of states in which consecutive states are
    /// the same or neighbours (as [`path_states`] makes them). Refuses no demos (`NoDemos`),
    /// only one-state demos (`NoMoves`), a state out of range or a jump that is not a move
    /// (`Invalid` on `demos[i]`) and a value table over the limit (`TooMuchWork`).
    pub fn new(
        grid: &'a Grid,
        features: &'a Features,
        demos: Vec<Vec<usize>>,
    ) -> Result<Self, IrlError> {
        if demos.is_empty() {
            return Err(IrlError::NoDemos);
        }
        let n = grid.states();
        for (i, d) in demos.iter().enumerate() {
            if d.is_empty() {
                return Err(IrlError::EmptyDemo {
                    field: format!("demos[{i}]"),
                });
            }
            if d.iter().any(|&s| s >= n) {
                return Err(invalid(format!("demos[{i}]"), "a state is out of range"));
            }
            if d.windows(2)
                .any(|p| !grid.neighbours(p[0]).contains(&(p[1] as u32)))
            {
                return Err(invalid(
                    format!("demos[{i}]"),
                    "consecutive states are not neighbours",
                ));
            }
        }
        let moves: usize = demos.iter().map(|d| d.len() - 1).sum();
        if moves == 0 {
            return Err(IrlError::NoMoves);
        }
        let t_max = demos.iter().map(|d| d.len() - 1).max().unwrap_or(0);
        check_table(n, t_max)?;
        let mut starts: Vec<Vec<(u32, f64)>> = vec![Vec::new(); t_max + 1];
        for d in &demos {
            let list = &mut starts[d.len() - 1];
            match list.iter_mut().find(|(s, _)| *s as usize == d[0]) {
                Some(e) => e.1 += 1.0,
                None => list.push((d[0] as u32, 1.0)),
            }
        }
        let k = features.len();
        let mut empirical = vec![0.0; k];
        for d in &demos {
            for &s in d {
                for (e, f) in empirical.iter_mut().zip(features.row(s)) {
                    *e += f;
                }
            }
        }
        Ok(Self {
            grid,
            features,
            demos,
            t_max,
            moves,
            starts,
            empirical,
            r: vec![0.0; n],
            table: Table::new(n, t_max),
            scratch: Scratch::new(grid),
            d: vec![0.0; n],
            d_next: vec![0.0; n],
            visits: vec![0.0; n],
            fallback: Vec::new(),
            linear: linear::Linear::new(grid, t_max),
        })
    }

    /// M, the number of moves over all demos (Σ (length − 1)).
    pub fn moves(&self) -> usize {
        self.moves
    }
    /// The longest horizon (moves of the longest demo).
    pub fn max_horizon(&self) -> usize {
        self.t_max
    }
    /// The demos, as states.
    pub fn demos(&self) -> &[Vec<usize>] {
        &self.demos
    }
    /// Empirical feature counts: Σ over demos and all their states of φ(s).
    pub fn empirical_counts(&self) -> &[f64] {
        &self.empirical
    }
    /// The expected visitation counts of the last [`evaluate`](Self::evaluate): for each state,
    /// the expected number of times, summed over the demos, that a path from the demo's start
    /// with the demo's horizon T is there at t = 0 … T. They add up to Σ (Tᵢ + 1).
    pub fn expected_visits(&self) -> &[f64] {
        &self.visits
    }

    /// f(w) and ∇f(w) with L2 weight `l2` (λ): one backward pass to the longest horizon, and
    /// one forward pass in which every demo's start mass enters when as many moves are left as
    /// its horizon (the policy depends only on the moves left, so this is exact for every
    /// horizon at once). The passes run on the rescaled exponentials of the values, with no
    /// `exp` or `ln` per state and step but at the few states whose sums fall under e^−600
    /// (`irl/linear.rs`), when the rewards span less than 600; otherwise in log space.
    pub fn evaluate(&mut self, w: &[f64], l2: f64) -> Evaluation {
        self.features.rewards_into(w, &mut self.r);
        let ll = if self
            .linear
            .backward(self.grid, &self.r, self.t_max, &mut self.table.q)
        {
            self.linear.forward(
                self.grid,
                &self.r,
                &self.table.q,
                &self.starts,
                &mut self.visits,
            );
            self.log_likelihood(|me, k, s| me.linear.value(&me.r, &me.table.q, k, s))
        } else {
            self.log_space_passes()
        };
        let k = self.features.len();
        let mut expected = vec![0.0; k];
        for (s, &c) in self.visits.iter().enumerate() {
            if c != 0.0 {
                for (e, f) in expected.iter_mut().zip(self.features.row(s)) {
                    *e += c * f;
                }
            }
        }
        let mf = self.moves as f64;
        let w2: f64 = w.iter().map(|x| x * x).sum();
        let gradient = (0..k)
            .map(|j| (self.empirical[j] - expected[j]) / mf - l2 * w[j])
            .collect();
        Evaluation {
            objective: ll / mf - 0.5 * l2 * w2,
            log_likelihood: ll,
            log_likelihood_per_step: ll / mf,
            gradient,
        }
    }

    /// Σ over the demos of Σₜ r(sₜ) − V_T(s₀), with Vₖ(s) read by `value`.
    fn log_likelihood(&self, value: impl Fn(&Self, usize, usize) -> f64) -> f64 {
        self.demos
            .iter()
            .map(|d| d.iter().map(|&s| self.r[s]).sum::<f64>() - value(self, d.len() - 1, d[0]))
            .sum()
    }

    /// The backward and forward passes in log space (when the linear ones do not apply);
    /// returns the log-likelihood.
    fn log_space_passes(&mut self) -> f64 {
        let n = self.grid.states();
        backward(
            self.grid,
            &self.r,
            self.t_max,
            &mut self.table,
            &mut self.scratch,
        );
        self.forward();
        self.log_likelihood(|me, k, s| me.table.value(n, &me.r, k, s))
    }

    /// The forward pass over the value table of the last backward pass.
    ///
    /// With E(s′) = exp Ṽₖ₋₁(s′) and Z(s) = Σ_{s′ ∈ N(s)} E(s′) (so Q̃ₖ = log Z, recomputed here
    /// bit for bit as the backward pass made it), πₖ(s′ | s) = E(s′)/Z(s), and by the symmetry
    /// of the moves D′(s′) = E(s′)·Σ_{s ∈ N(s′)} D(s)/Z(s): two box sums and one exp per state.
    /// States whose Z is under the floor (their Q̃ was computed with its own shift) push their
    /// mass move by move instead.
    fn forward(&mut self) {
        let n = self.grid.states();
        let grid = self.grid;
        let table = &self.table;
        let sc = &mut self.scratch;
        let floor = LOG_FLOOR.exp();
        self.d.fill(0.0);
        self.visits.fill(0.0);
        for k in (0..=self.t_max).rev() {
            for &(s, c) in &self.starts[k] {
                self.d[s as usize] += c;
            }
            for (vs, ds) in self.visits.iter_mut().zip(&self.d) {
                *vs += ds;
            }
            if k == 0 {
                break;
            }
            for s in 0..n {
                sc.vprev[s] = table.shifted_value(n, &self.r, k - 1, s);
            }
            for (e, &v) in sc.e.iter_mut().zip(&sc.vprev) {
                *e = exp_nonpositive(v);
            }
            sc.boxes.sum(grid, &sc.e, &mut sc.z);
            self.fallback.clear();
            for (s, ((g, &ds), &z)) in sc.g.iter_mut().zip(&self.d).zip(&sc.z).enumerate() {
                *g = if ds == 0.0 {
                    0.0
                } else if z >= floor {
                    ds / z
                } else {
                    self.fallback.push(s as u32);
                    0.0
                };
            }
            sc.boxes.sum(grid, &sc.g, &mut sc.acc);
            for ((dn, a), e) in self.d_next.iter_mut().zip(&sc.acc).zip(&sc.e) {
                *dn = a * e;
            }
            let qk = &table.q[k * n..(k + 1) * n];
            for &s in &self.fallback {
                let s = s as usize;
                for &t in grid.neighbours(s) {
                    let v = sc.vprev[t as usize];
                    self.d_next[t as usize] += self.d[s] * (v - qk[s]).exp();
                }
            }
            std::mem::swap(&mut self.d, &mut self.d_next);
        }
    }
}

/// Σ log(1 / |N(sₜ)|) over the moves of `paths`: the log-likelihood of a uniform random walk
/// (each available action equally likely) on the same paths.
pub fn uniform_walk_log_likelihood(grid: &Grid, paths: &[Vec<usize>]) -> f64 {
    paths
        .iter()
        .flat_map(|p| p[..p.len().saturating_sub(1)].iter())
        .map(|&s| -(grid.neighbours(s).len() as f64).ln())
        .sum()
}

/// The settings of a fit.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FitSettings {
    /// λ of the L2 term λ/2·|w|² (on standardised weights); 1e-3 by default.
    pub l2: f64,
    /// The optimiser's settings (memory 10, 200 iterations, stop at |∇f|₂ ≤ 1e-6 by default).
    pub lbfgs: LbfgsSettings,
}

impl Default for FitSettings {
    fn default() -> Self {
        Self {
            l2: 1e-3,
            lbfgs: LbfgsSettings::default(),
        }
    }
}

/// One line of a fit's trace.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct IterationReport {
    /// Completed L-BFGS iterations (0 for the start, w = 0).
    pub iteration: usize,
    /// L(w)/M, the log-likelihood per move (without the L2 term).
    pub log_likelihood_per_step: f64,
    /// f(w), the objective (with the L2 term).
    pub objective: f64,
    /// |∇f(w)|₂.
    pub grad_norm: f64,
}

/// The result of [`fit`].
#[derive(Debug, Clone, PartialEq)]
pub struct Fit {
    /// Fitted weights of the standardised features.
    pub weights: Vec<f64>,
    /// Completed iterations.
    pub iterations: usize,
    /// True when the gradient norm reached the tolerance.
    pub converged: bool,
    /// Why the optimiser stopped.
    pub stop: StopReason,
    /// |∇f|₂ at the weights.
    pub grad_norm: f64,
    /// L(w)/M at the weights.
    pub log_likelihood_per_step: f64,
    /// The objective f(w) at the weights.
    pub objective: f64,
    /// One report per iteration, from iteration 0.
    pub trace: Vec<IterationReport>,
}

/// Maximises f from w = 0 with L-BFGS (minimising −f). `on_iteration` sees every report of the
/// trace as it is made and may stop the fit ([`StopReason::Cancelled`]).
pub fn fit(
    problem: &mut MaxEnt<'_>,
    settings: &FitSettings,
    on_iteration: &mut dyn FnMut(&IterationReport) -> Control,
) -> Fit {
    let k = problem.features.len();
    let l2 = settings.l2;
    let mut trace = Vec::new();
    let min = lbfgs::minimize(
        |w: &[f64], g: &mut [f64]| {
            let ev = problem.evaluate(w, l2);
            for (gi, e) in g.iter_mut().zip(&ev.gradient) {
                *gi = -e;
            }
            -ev.objective
        },
        &vec![0.0; k],
        &settings.lbfgs,
        &mut |step, w| {
            let objective = -step.value;
            let w2: f64 = w.iter().map(|x| x * x).sum();
            let report = IterationReport {
                iteration: step.iteration,
                log_likelihood_per_step: objective + 0.5 * l2 * w2,
                objective,
                grad_norm: step.grad_norm,
            };
            trace.push(report);
            on_iteration(&report)
        },
    );
    let w2: f64 = min.x.iter().map(|x| x * x).sum();
    Fit {
        converged: min.grad_norm <= settings.lbfgs.grad_tol,
        iterations: min.iterations,
        stop: min.stop,
        grad_norm: min.grad_norm,
        objective: -min.value,
        log_likelihood_per_step: -min.value + 0.5 * l2 * w2,
        weights: min.x,
        trace,
    }
}

/// Leave-one-out held-out scores.
#[derive(Debug, Clone, PartialEq)]
pub struct HeldOut {
    /// Σ over folds of the held-out demo's log P(path | start) under the weights fitted on the
    /// other demos, divided by the held-out moves Σ Tᵢ.
    pub log_likelihood_per_step: f64,
    /// The same for the uniform random walk on the same held-out paths.
    pub uniform_log_likelihood_per_step: f64,
    /// Folds used: those whose held-out demo has at least one move and whose other demos have
    /// at least one move between them.
    pub folds: usize,
}

/// Leave-one-out over the demos of `problem` (needs at least 3 demos; None otherwise or when no
/// fold could be used): for each demo with at least one move, fit on the others, score it.
/// `on_fold(i, n)` is called before fold i of n and may stop (None is returned).
pub fn leave_one_out(
    problem: &MaxEnt<'_>,
    settings: &FitSettings,
    on_fold: &mut dyn FnMut(usize, usize) -> Control,
) -> Option<HeldOut> {
    let demos = problem.demos();
    if demos.len() < 3 {
        return None;
    }
    let (mut ll, mut uni, mut moves, mut folds) = (0.0, 0.0, 0usize, 0usize);
    for i in 0..demos.len() {
        if on_fold(i, demos.len()) == Control::Stop {
            return None;
        }
        let held = &demos[i];
        if held.len() < 2 {
            continue;
        }
        let rest: Vec<Vec<usize>> = demos
            .iter()
            .enumerate()
            .filter(|&(j, _)| j != i)
            .map(|(_, d)| d.clone())
            .collect();
        let Ok(mut sub) = MaxEnt::new(problem.grid, problem.features, rest) else {
            continue;
        };
        let f = fit(&mut sub, settings, &mut |_| Control::Continue);
        let Ok(values) = soft_values(problem.grid, problem.features, &f.weights, held.len() - 1)
        else {
            continue;
        };
        ll += values.path_log_likelihood(held);
        uni += uniform_walk_log_likelihood(problem.grid, std::slice::from_ref(held));
        moves += held.len() - 1;
        folds += 1;
    }
    (folds > 0).then(|| HeldOut {
        log_likelihood_per_step: ll / moves as f64,
        uniform_log_likelihood_per_step: uni / moves as f64,
        folds,
    })
}

/// The reward over the grid.
#[derive(Debug, Clone, PartialEq)]
pub struct RewardMap {
    /// Rows of the grid.
    pub rows: usize,
    /// Columns of the grid.
    pub cols: usize,
    /// r at cell (c, r) in entry r·cols + c, float32; NaN in a removed cell.
    pub values: Vec<f32>,
    /// The cell (c, r) of the largest reward (the first in row-major order on a tie).
    pub argmax_cell: (usize, usize),
    /// Its centre in frame pixels ([`Grid::cell_centre`]).
    pub argmax_px: [f64; 2],
}

/// The reward map of weights `w` (standardised features).
pub fn reward_map(grid: &Grid, features: &Features, w: &[f64]) -> RewardMap {
    let r = features.rewards(w);
    let mut values = vec![f32::NAN; grid.cols * grid.rows];
    let mut best = 0usize;
    for (s, &rs) in r.iter().enumerate() {
        values[grid.cell_of_state[s] as usize] = rs as f32;
        if rs > r[best] {
            best = s;
        }
    }
    let argmax_cell = grid.cell(best);
    RewardMap {
        rows: grid.rows,
        cols: grid.cols,
        values,
        argmax_cell,
        argmax_px: grid.cell_centre(argmax_cell.0, argmax_cell.1),
    }
}

/// Everything a reward fit starts from.
#[derive(Debug, Clone, PartialEq)]
pub struct RewardFitInput {
    /// The frame, its cells and no-go zones.
    pub grid: GridSpec,
    /// The features, in weight order.
    pub features: Vec<Feature>,
    /// The tracked paths.
    pub demos: Vec<Vec<PathSample>>,
    /// Collapse consecutive samples in one cell into one state (see [`path_states`]).
    pub collapse_repeats: bool,
}

/// What [`fit_reward`] reports while it works.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Progress {
    /// An iteration of the fit on all demos.
    Iteration(IterationReport),
    /// Leave-one-out fold `fold` of `folds` starts.
    HeldOutFold {
        /// 0-based fold.
        fold: usize,
        /// Number of folds (demos).
        folds: usize,
    },
}

/// A finished reward fit.
#[derive(Debug, Clone, PartialEq)]
pub struct RewardFit {
    /// The fit on all demos (weights of the standardised features).
    pub fit: Fit,
    /// How each feature was standardised.
    pub feature_stats: Vec<FeatureStats>,
    /// The weights in raw feature units ([`Features::raw_weights`]).
    pub raw_weights: Vec<f64>,
    /// The uniform random walk's log-likelihood per move on all demos.
    pub uniform_log_likelihood_per_step: f64,
    /// Moves over all demos (M).
    pub moves: usize,
    /// Leave-one-out scores (≥ 3 demos, not cancelled).
    pub held_out: Option<HeldOut>,
    /// The reward map and its argmax.
    pub reward_map: RewardMap,
}

/// The grid, features and demo paths of a fit's input (the checks of [`fit_reward`] but the
/// last, the objective's own).
fn prepare(input: &RewardFitInput) -> Result<(Grid, Features, Vec<Vec<usize>>), IrlError> {
    let grid = Grid::new(&input.grid)?;
    let features = Features::new(&grid, &input.features)?;
    if input.demos.is_empty() {
        return Err(IrlError::NoDemos);
    }
    let demos = input
        .demos
        .iter()
        .enumerate()
        .map(|(i, d)| path_states(&grid, d, input.collapse_repeats, &format!("demos[{i}]")))
        .collect::<Result<Vec<_>, _>>()?;
    Ok((grid, features, demos))
}

/// Every check [`fit_reward`] makes before it starts fitting (grid, features, paths, the demos'
/// moves and the size of the value table), without fitting: what a server asks before it
/// queues the work.
pub fn check_input(input: &RewardFitInput) -> Result<(), IrlError> {
    let (grid, features, demos) = prepare(input)?;
    MaxEnt::new(&grid, &features, demos).map(|_| ())
}

/// Builds the grid, features and paths, fits on all demos, runs leave-one-out when there are at
/// least 3 demos (and the fit was not cancelled), and makes the reward map.
pub fn fit_reward(
    input: &RewardFitInput,
    settings: &FitSettings,
    on_progress: &mut dyn FnMut(&Progress) -> Control,
) -> Result<RewardFit, IrlError> {
    if !(settings.l2.is_finite() && settings.l2 >= 0.0) {
        return Err(invalid("l2", "must be a non-negative number"));
    }
    let (grid, features, demos) = prepare(input)?;
    let mut problem = MaxEnt::new(&grid, &features, demos)?;
    let f = fit(&mut problem, settings, &mut |r| {
        on_progress(&Progress::Iteration(*r))
    });
    let held_out = if f.stop == StopReason::Cancelled {
        None
    } else {
        leave_one_out(&problem, settings, &mut |fold, folds| {
            on_progress(&Progress::HeldOutFold { fold, folds })
        })
    };
    let uniform = uniform_walk_log_likelihood(&grid, problem.demos()) / problem.moves() as f64;
    Ok(RewardFit {
        feature_stats: features.stats().to_vec(),
        raw_weights: features.raw_weights(&f.weights).0,
        uniform_log_likelihood_per_step: uniform,
        moves: problem.moves(),
        held_out,
        reward_map: reward_map(&grid, &features, &f.weights),
        fit: f,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The vectorisable exp agrees with the standard library's to 2 ulp on [−708, 0], and is 0
    /// (or the subnormal the library gives) below.
    #[test]
    fn exp_nonpositive_is_accurate() {
        let mut worst = 0.0f64;
        let n = 200_000;
        for i in 0..=n {
            let x = -708.0 * (i as f64 / n as f64).powi(3);
            let (a, b) = (exp_nonpositive(x), x.exp());
            worst = worst.max((a - b).abs() / b);
        }
        assert!(worst <= 2.0 * f64::EPSILON, "{worst:e}");
        assert_eq!(exp_nonpositive(0.0), 1.0);
        assert_eq!(exp_nonpositive(-800.0), 0.0);
        assert_eq!(exp_nonpositive(f64::NEG_INFINITY), 0.0);
    }
    /// A grid of 13 × 9 cells with a removed block (so rows hold several runs of states), 3
    /// random features and demos of horizons 0, 3, 17 and 40 from random starts.
    fn mixed_problem(seed: u64) -> (Grid, Features, Vec<Vec<usize>>) {
        use crate::geometry::PixelPoint;
        let pts = [[20.0, 12.0], [35.0, 12.0], [35.0, 27.0], [20.0, 27.0]];
        let block = Polygon::new(
            pts.iter()
                .map(|p| PixelPoint::new(p[0], p[1]).expect("finite"))
                .collect(),
        )
        .expect("a rectangle");
        let spec = GridSpec {
            width: 51,
            height: 35,
            cell_px: 4,
            no_go: vec![block],
            remove_no_go: true,
        };
        let grid = Grid::new(&spec).expect("a grid");
        assert!(grid.states() < grid.cols() * grid.rows());
        let mut rng = crate::rng::SplitMix64(seed);
        let raw = (0..grid.states() * 3).map(|_| rng.next_f64()).collect();
        let features = Features::from_raw(3, raw);
        let demos = [0, 3, 17, 40]
            .into_iter()
            .map(|moves| {
                let mut path = vec![rng.below(grid.states())];
                for _ in 0..moves {
                    let nb = grid.neighbours(path[path.len() - 1]);
                    path.push(nb[rng.below(nb.len())] as usize);
                }
                path
            })
            .collect();
        (grid, features, demos)
    }

    /// Evaluates `me` at `w` by the linear passes (which must apply) and by the log-space
    /// passes, and returns the relative log-likelihood difference and the largest visit
    /// difference relative to max(1, visits).
    fn linear_against_log_space(me: &mut MaxEnt<'_>, w: &[f64]) -> (f64, f64) {
        let ev = me.evaluate(w, 0.0);
        let visits = me.expected_visits().to_vec();
        assert!(
            me.linear
                .backward(me.grid, &me.r, me.t_max, &mut me.table.q)
        );
        let ll = me.log_space_passes();
        let ll_err = (ev.log_likelihood - ll).abs() / ll.abs().max(1.0);
        let visit_err = visits
            .iter()
            .zip(me.expected_visits())
            .map(|(a, b)| (a - b).abs() / b.abs().max(1.0))
            .fold(0.0, f64::max);
        (ll_err, visit_err)
    }

    /// The linear passes give the log-space passes' log-likelihood and visits (to 1e-12), on
    /// a grid with removed cells at moderate weights, and rewards spanning more than 600 (or
    /// NaN) take the log-space passes.
    #[test]
    fn linear_passes_match_log_space() {
        for seed in 0..4 {
            let (grid, features, demos) = mixed_problem(seed);
            let mut me = MaxEnt::new(&grid, &features, demos).expect("a problem");
            let scale = [0.5, 3.0, 20.0, 60.0][seed as usize];
            let (ll_err, visit_err) =
                linear_against_log_space(&mut me, &[scale, -0.7 * scale, 0.4 * scale]);
            eprintln!("w×{scale}: log-likelihood {ll_err:.1e}, visits {visit_err:.1e}");
            assert!(
                ll_err < 1e-12 && visit_err < 1e-12,
                "w×{scale}: {ll_err:e} {visit_err:e}"
            );
        }
        let (grid, features, demos) = mixed_problem(9);
        let mut me = MaxEnt::new(&grid, &features, demos).expect("a problem");
        me.features.rewards_into(&[400.0, -300.0, 350.0], &mut me.r);
        assert!(!me.linear.backward(&grid, &me.r, me.t_max, &mut me.table.q));
        me.features.rewards_into(&[f64::NAN, 0.0, 0.0], &mut me.r);
        assert!(!me.linear.backward(&grid, &me.r, me.t_max, &mut me.table.q));
    }

    /// The linear passes with deep states (sums under e^LOG_FLOOR, whose Q̃ is its own
    /// log-sum-exp and whose mass moves move by move), some of them demo starts: the
    /// benchmark's problem at weights near its fit, and at twice and four times them, agree with
    /// the log-space passes to 1e-12.
    #[test]
    fn linear_passes_with_deep_states_match_log_space() {
        let (spec, feats, cells) = crate::bench::irl_bench_problem();
        let grid = Grid::new(&spec).expect("a grid");
        let features = Features::new(&grid, &feats).expect("features");
        let demos: Vec<Vec<usize>> = cells
            .iter()
            .map(|d| d.iter().filter_map(|&(c, r)| grid.state(c, r)).collect())
            .collect();
        let starts: Vec<(usize, usize)> = demos.iter().map(|d| (d.len() - 1, d[0])).collect();
        let mut me = MaxEnt::new(&grid, &features, demos).expect("a problem");
        let fitted = [-6.6, -1.2, -0.33, -1.8, -4.7, 0.0];
        for factor in [1.0, 2.0, 4.0] {
            let w: Vec<f64> = fitted.iter().map(|x| x * factor).collect();
            let (ll_err, visit_err) = linear_against_log_space(&mut me, &w);
            assert!(
                ll_err < 1e-12 && visit_err < 1e-12,
                "w×{factor}: {ll_err:e} {visit_err:e}"
            );
            assert!(me.linear.backward(&grid, &me.r, me.t_max, &mut me.table.q));
            assert!(!me.linear.deep.is_empty(), "w×{factor}: no deep state");
            let n = grid.states();
            let deep_starts = starts
                .iter()
                .filter(|&&(t, s)| me.table.q[t * n + s] < 0.0)
                .count();
            assert!(
                deep_starts > 0,
                "w×{factor}: no demo starts in a deep state"
            );
            eprintln!(
                "w×{factor}: log-likelihood {ll_err:.1e}, visits {visit_err:.1e}, {} deep \
                 entries, {deep_starts} deep starts",
                me.linear.deep.len()
            );
        }
    }
}
