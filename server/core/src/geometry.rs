//! Points and polygons in frame pixel coordinates.
//!
//! Convention: x to the right, y down, the centre of the top-left pixel is (0, 0).

use std::cmp::Ordering;

use thiserror::Error;

/// What is wrong with a point or polygon.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum GeometryError {
    /// A coordinate is NaN or infinite.
    #[error("coordinates must be finite numbers")]
    NonFinite,
    /// A polygon needs at least three distinct vertices.
    #[error("a polygon needs at least 3 vertices, got {count}")]
    TooFewVertices {
        /// Number of vertices given, not counting a closing vertex equal to the first.
        count: usize,
    },
    /// Two consecutive vertices are the same point.
    #[error("vertex {index} repeats the vertex before it")]
    RepeatedVertex {
        /// Index of the repeated vertex.
        index: usize,
    },
    /// All vertices lie on one line, so the polygon encloses nothing.
    #[error("the polygon encloses no area (its vertices lie on one line)")]
    ZeroArea,
    /// Two edges that are not neighbours cross or touch.
    #[error("the polygon crosses itself: edge {edge_a} meets edge {edge_b}")]
    SelfIntersecting {
        /// Index of the first edge (edge i runs from vertex i to vertex i+1).
        edge_a: usize,
        /// Index of the second edge.
        edge_b: usize,
    },
}

/// A point with finite pixel coordinates.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PixelPoint {
    x: f64,
    y: f64,
}

impl PixelPoint {
    /// A point; refuses NaN and infinities.
    pub fn new(x: f64, y: f64) -> Result<Self, GeometryError> {
        if x.is_finite() && y.is_finite() {
            Ok(Self { x, y })
        } else {
            Err(GeometryError::NonFinite)
        }
    }
    /// Horizontal coordinate (pixels, right).
    pub fn x(&self) -> f64 {
        self.x
    }
    /// Vertical coordinate (pixels, down).
    pub fn y(&self) -> f64 {
        self.y
    }
    /// `[x, y]`.
    pub fn to_array(&self) -> [f64; 2] {
        [self.x, self.y]
    }
    /// Euclidean distance to `(x, y)`.
    pub fn distance_to(&self, x: f64, y: f64) -> f64 {
        (self.x - x).hypot(self.y - y)
    }
}

/// A simple (non-self-intersecting) closed polygon with at least three vertices.
///
/// Vertices may be given in either turning direction. The checks in [`Polygon::new`] use exact
/// orientation predicates, so a polygon that is accepted really is simple (for coordinates of
/// ordinary size: products of coordinate differences must neither overflow nor underflow).
#[derive(Debug, Clone, PartialEq)]
pub struct Polygon {
    vertices: Vec<PixelPoint>,
}

impl Polygon {
    /// Checks and builds a polygon. A closing vertex equal to the first is dropped.
    ///
    /// Refused, in this order: a vertex equal to the one before it (`RepeatedVertex`, index in
    /// the list as given), fewer than 3 vertices after dropping the closing one
    /// (`TooFewVertices`), all vertices on one line (`ZeroArea`), and two edges that meet
    /// anywhere other than the shared vertex of neighbouring edges (`SelfIntersecting`; this
    /// includes a vertex touching another edge and neighbouring edges that fold back over each
    /// other). The self-intersection check compares all pairs of edges, O(n²): meant for
    /// hand-drawn polygons of up to a few hundred vertices.
    pub fn new(mut vertices: Vec<PixelPoint>) -> Result<Self, GeometryError> {
        if let Some(index) = (1..vertices.len()).find(|&i| vertices[i] == vertices[i - 1]) {
            return Err(GeometryError::RepeatedVertex { index });
        }
        if vertices.len() >= 2 && vertices.first() == vertices.last() {
            vertices.pop();
        }
        let n = vertices.len();
        if n < 3 {
            return Err(GeometryError::TooFewVertices { count: n });
        }
        let p: Vec<[f64; 2]> = vertices.iter().map(PixelPoint::to_array).collect();
        // v0 != v1 (no repeats), so the line through them is defined.
        if p[2..]
            .iter()
            .all(|&c| orientation(p[0], p[1], c) == Ordering::Equal)
        {
            return Err(GeometryError::ZeroArea);
        }
        if let Some((edge_a, edge_b)) = first_self_intersection(&p) {
            return Err(GeometryError::SelfIntersecting { edge_a, edge_b });
        }
        Ok(Self { vertices })
    }
    /// The vertices in the order given (without a repeated closing vertex).
    pub fn vertices(&self) -> &[PixelPoint] {
        &self.vertices
    }
    /// The edges as `(start, end)` pairs; edge i runs from vertex i to vertex i+1 (mod n).
    pub fn edges(&self) -> impl Iterator<Item = ([f64; 2], [f64; 2])> + '_ {
        let n = self.vertices.len();
        (0..n).map(move |i| {
            (
                self.vertices[i].to_array(),
                self.vertices[(i + 1) % n].to_array(),
            )
        })
    }
    /// Shoelace signed area in px². Positive when the vertices turn clockwise on screen
    /// (x right, y down), negative when they turn counter-clockwise.
    pub fn signed_area(&self) -> f64 {
        let o = self.vertices[0].to_array();
        let twice: f64 = self
            .edges()
            .map(|(a, b)| (a[0] - o[0]) * (b[1] - o[1]) - (a[1] - o[1]) * (b[0] - o[0]))
            .sum();
        twice / 2.0
    }
    /// Enclosed area in px² (always positive for a checked polygon).
    pub fn area(&self) -> f64 {
        self.signed_area().abs()
    }
    /// `[min_x, min_y, max_x, max_y]` of the vertices.
    pub fn bounding_box(&self) -> [f64; 4] {
        self.vertices.iter().fold(
            [
                f64::INFINITY,
                f64::INFINITY,
                f64::NEG_INFINITY,
                f64::NEG_INFINITY,
            ],
            |b, v| [b[0].min(v.x), b[1].min(v.y), b[2].max(v.x), b[3].max(v.y)],
        )
    }
    /// The area centroid (shoelace formula), the centre of mass of the enclosed area; `None`
    /// for a polygon of (numerically) zero area, whose centroid is not defined. The one
    /// centroid of the project: 3-D targets of regions and the overlay's labels use it.
    pub fn centroid(&self) -> Option<[f64; 2]> {
        let v = self.vertices();
        let (mut a, mut cx, mut cy) = (0.0, 0.0, 0.0);
        for k in 0..v.len() {
            let (p, q) = (v[k], v[(k + 1) % v.len()]);
            let cross = p.x() * q.y() - q.x() * p.y();
            a += cross;
            cx += (p.x() + q.x()) * cross;
            cy += (p.y() + q.y()) * cross;
        }
        if a.abs() < f64::EPSILON {
            return None;
        }
        Some([cx / (3.0 * a), cy / (3.0 * a)])
    }

    /// True when `(x, y)` is inside or on the boundary (closed polygon). Exact: points on an
    /// edge or vertex count as inside whatever the polygon's shape. False for non-finite input.
    pub fn contains(&self, x: f64, y: f64) -> bool {
        if !(x.is_finite() && y.is_finite()) {
            return false;
        }
        let q = [x, y];
        // Winding number (Sunday's crossing rule), with an exact on-edge test for each edge that
        // spans the query's y.
        let mut winding = 0i32;
        for (a, b) in self.edges() {
            if y < a[1].min(b[1]) || y > a[1].max(b[1]) {
                continue;
            }
            let o = orientation(a, b, q);
            if o == Ordering::Equal && x >= a[0].min(b[0]) && x <= a[0].max(b[0]) {
                return true;
            }
            if a[1] <= y && b[1] > y && o == Ordering::Greater {
                winding += 1;
            } else if b[1] <= y && a[1] > y && o == Ordering::Less {
                winding -= 1;
            }
        }
        winding != 0
    }
    /// Exact Euclidean distance from `(x, y)` to the closed polygon: 0 inside or on an edge.
    /// NaN for a NaN coordinate, infinity for an infinite one.
    pub fn distance(&self, x: f64, y: f64) -> f64 {
        if x.is_nan() || y.is_nan() {
            return f64::NAN;
        }
        if !(x.is_finite() && y.is_finite()) {
            return f64::INFINITY;
        }
        if self.contains(x, y) {
            return 0.0;
        }
        self.edges()
            .map(|(a, b)| segment_distance_squared([x, y], a, b))
            .fold(f64::INFINITY, f64::min)
            .sqrt()
    }
    /// [`Polygon::distance`] at `(x, y)` (the same value) and its gradient ∇d from the same
    /// search: (0, 0) inside or on an edge, else the unit vector from the nearest boundary point
    /// towards `(x, y)`, computed per case of [`segment_distance_squared`]: from a vertex,
    /// (p − a)/|p − a|; from the inside of an edge, sign(w × d)·(d_y, −d_x)/|d|, the derivative
    /// of |w × d|/|d|. Where several edges are equally near (a point on the medial axis, where d
    /// has no derivative), the first of them in vertex order is taken: a subgradient, one of the
    /// one-sided derivatives. For a non-finite coordinate the distance of [`Polygon::distance`]
    /// and a zero gradient.
    pub fn distance_and_gradient(&self, x: f64, y: f64) -> (f64, [f64; 2]) {
        if !(x.is_finite() && y.is_finite()) {
            return (self.distance(x, y), [0.0, 0.0]);
        }
        if self.contains(x, y) {
            return (0.0, [0.0, 0.0]);
        }
        let p = [x, y];
        let mut best = f64::INFINITY;
        let mut nearest = None;
        for (a, b) in self.edges() {
            let d2 = segment_distance_squared(p, a, b);
            if d2 < best {
                best = d2;
                nearest = Some((a, b));
            }
        }
        let grad = match nearest {
            Some((a, b)) => segment_distance_gradient(p, a, b),
            None => [0.0, 0.0],
        };
        (best.sqrt(), grad)
    }
    /// [`Polygon::distance`] at every point of the Cartesian grid `xs × ys`, row-major
    /// `(ys.len(), xs.len())`: entry `[j * xs.len() + i]` is the distance at `(xs[i], ys[j])`.
    /// Rows are computed in parallel (rayon).
    pub fn distance_grid(&self, xs: &[f64], ys: &[f64]) -> Vec<f64> {
        use rayon::prelude::*;
        let mut out = vec![0.0; xs.len() * ys.len()];
        if xs.is_empty() {
            return out;
        }
        out.par_chunks_mut(xs.len())
            .zip(ys.par_iter())
            .for_each(|(row, &y)| {
                for (d, &x) in row.iter_mut().zip(xs) {
                    *d = self.distance(x, y);
                }
            });
        out
    }

    /// True when the closed polygons `self` and `other` share at least one point: their
    /// boundaries cross or touch (a shared vertex, a vertex on an edge, collinear edges that
    /// overlap), or one lies inside the other. Symmetric. O(n·m) in the vertex counts.
    ///
    /// Why it is exact: if the boundaries meet, the exact [`segments_intersect`] finds an edge
    /// pair. If they do not, each boundary, a connected curve, lies wholly inside or wholly
    /// outside the other polygon, so one exact [`Polygon::contains`] of a vertex each way tells
    /// which. When both lie outside, the polygons are disjoint: `other` is connected and misses
    /// `self`'s boundary, so it lies wholly in `self`'s interior — boundary included, which was
    /// just ruled out — or wholly outside `self`.
    pub fn intersects(&self, other: &Polygon) -> bool {
        let (a, b) = (self.bounding_box(), other.bounding_box());
        if a[2] < b[0] || b[2] < a[0] || a[3] < b[1] || b[3] < a[1] {
            return false;
        }
        if self
            .edges()
            .any(|(p, q)| other.edges().any(|(r, s)| segments_intersect(p, q, r, s)))
        {
            return true;
        }
        let (v, w) = (self.vertices[0], other.vertices[0]);
        other.contains(v.x, v.y) || self.contains(w.x, w.y)
    }

    /// True when every point of `other`, boundary included, lies in the closed `self`
    /// (shapely's `covers`): `other` may touch `self`'s boundary from inside, run along it or
    /// be equal to `self`. O(n·m) in the vertex counts.
    ///
    /// Why it is exact (no intersection point is ever computed; every decision is a sign of
    /// [`orientation`] or a comparison of input coordinates):
    ///
    /// - `self` is simply connected, so `other ⊆ self` iff `other`'s boundary is: a point of
    ///   `other` outside `self` could reach infinity through `self`'s connected exterior, and
    ///   on the way would cross `other`'s boundary outside `self`.
    /// - Each vertex of `other` must pass the exact closed [`Polygon::contains`].
    /// - Then an edge p → q of `other` leaves `self` iff some point of it lies in `self`'s
    ///   (open) exterior. Take the first parameter X where a run of exterior points starts:
    ///   X lies on `self`'s boundary and X ≠ q. Either X is a vertex v of `self` — then the
    ///   direction v → q points strictly into the exterior angle at v, decided by the signs of
    ///   `orientation(v, next, q)` and `orientation(v, prev, q)` and whether v turns convex or
    ///   reflex — or X lies inside an edge a–b of `self`, where `self` is locally a half-plane,
    ///   so p → q is not along a–b: if X = p, q lies strictly on a–b's exterior side; if not,
    ///   p → q crosses a–b properly (p, q strictly on opposite sides of a–b, and a, b strictly
    ///   on opposite sides of p–q). Conversely each of these three tests, when it fires, shows
    ///   points of the edge just past X that are outside `self`. Collinear overlaps and an edge
    ///   passing exactly through a reflex vertex therefore need no special case: they make
    ///   orientations exactly zero, and only strict signs count as leaving.
    /// - Which side of an edge is inside comes from the turn at the lowest-leftmost vertex,
    ///   which is strictly convex in a checked polygon (its neighbours lie on one side of it,
    ///   and [`Polygon::new`] refuses edges that fold back).
    pub fn covers(&self, other: &Polygon) -> bool {
        let (a, b) = (self.bounding_box(), other.bounding_box());
        if b[0] < a[0] || b[1] < a[1] || b[2] > a[2] || b[3] > a[3] {
            return false;
        }
        if !other.vertices.iter().all(|v| self.contains(v.x, v.y)) {
            return false;
        }
        let side = self.inside_side();
        other.edges().all(|(p, q)| !self.segment_leaves(p, q, side))
    }

    /// +1 when the inside lies where `orientation(a, b, ·)` is `Greater` for every edge a → b,
    /// −1 when it lies where it is `Less`: the turn at the lowest-leftmost vertex.
    fn inside_side(&self) -> i32 {
        let v = &self.vertices;
        let n = v.len();
        // Compared with `<` and `==`, not `total_cmp`, so that −0.0 and 0.0 are one coordinate.
        let mut k = 0;
        for i in 1..n {
            if v[i].x < v[k].x || (v[i].x == v[k].x && v[i].y < v[k].y) {
                k = i;
            }
        }
        let (prev, here, next) = (v[(k + n - 1) % n], v[k], v[(k + 1) % n]);
        orientation(prev.to_array(), here.to_array(), next.to_array()) as i32
    }

    /// Whether the segment p → q, whose ends both lie in the closed polygon, has a point
    /// outside it. `side` is [`Polygon::inside_side`]. The argument is in [`Polygon::covers`].
    fn segment_leaves(&self, p: [f64; 2], q: [f64; 2], side: i32) -> bool {
        let n = self.vertices.len();
        let at = |i: usize| self.vertices[i % n].to_array();
        for i in 0..n {
            let (prev, a, b) = (at(i + n - 1), at(i), at(i + 1));
            let oa = orientation(p, q, a) as i32;
            let ob = orientation(p, q, b) as i32;
            // A proper crossing of the edge a–b, inside both segments.
            if oa * ob < 0 && (orientation(a, b, p) as i32) * (orientation(a, b, q) as i32) < 0 {
                return true;
            }
            // The vertex a on the segment (not at q): does the segment go on, towards q, into
            // the exterior angle at a?
            if oa == 0 && a != q && in_box(a, p, q) {
                let to_next = side * orientation(a, b, q) as i32;
                let to_prev = side * orientation(a, prev, q) as i32;
                // A straight vertex (turn 0) has the half-plane of a convex one.
                let convex = side * orientation(prev, a, b) as i32 >= 0;
                let leaves = if convex {
                    to_next < 0 || to_prev > 0
                } else {
                    to_next < 0 && to_prev > 0
                };
                if leaves {
                    return true;
                }
            }
            // The segment starts inside the edge a–b (its ends are the vertex case above) and
            // heads strictly to the outer side.
            if p != a
                && p != b
                && orientation(a, b, p) == Ordering::Equal
                && in_box(p, a, b)
                && side * (orientation(a, b, q) as i32) < 0
            {
                return true;
            }
        }
        false
    }
}

/// Closed containment in one polygon of many points of one horizontal line, for scanning a
/// raster row by row: [`RowScan::set_row`] costs O(n) for the polygon's n edges, then each
/// [`RowScan::contains`] costs O(log n) instead of [`Polygon::contains`]'s O(n). The buffers are
/// reused from row to row.
///
/// Same answers as [`Polygon::contains`], exactly. For a point off the boundary, that winding
/// number is the sum of ±1 over the edges crossing the row (half-open in y, as there) whose
/// crossing lies to the right of the point. Crossings are computed in floating point with an
/// error below 12·2⁻⁵³ times the largest |x| of the polygon (five rounded operations on a
/// crossing parameter in [0, 1]), plus a few units of 2⁻¹⁰⁷⁴ should a product underflow. A
/// point within 1e−9·(1 + largest |x|) — over 10⁵ times more — of a computed crossing goes to
/// the exact [`Polygon::contains`]; every other point lies on the same side of each true
/// crossing as of its computed one, so the count is right. The boundary points of the row are
/// true crossings (hence within that margin) or vertices and horizontal edges lying on the
/// row, which are compared exactly.
#[derive(Debug, Clone)]
pub struct RowScan<'a> {
    polygon: &'a Polygon,
    bbox: [f64; 4],
    margin: f64,
    y: f64,
    /// Computed crossings of the current row, sorted by x, with each edge's ±1.
    crossings: Vec<(f64, i32)>,
    /// `winding_right[k]`: the sum of the ±1 of `crossings[k..]`.
    winding_right: Vec<i32>,
    /// `[min x, max x]` of vertices and horizontal edges lying on the current row.
    on_row: Vec<[f64; 2]>,
}

impl<'a> RowScan<'a> {
    /// A scanner for `polygon`; call [`RowScan::set_row`] before [`RowScan::contains`]
    /// (until then every point is outside).
    pub fn new(polygon: &'a Polygon) -> Self {
        let widest = polygon
            .vertices
            .iter()
            .fold(0.0f64, |m, v| m.max(v.x.abs()));
        Self {
            polygon,
            bbox: polygon.bounding_box(),
            margin: 1e-9 * (1.0 + widest),
            y: f64::NAN,
            crossings: Vec::new(),
            winding_right: vec![0],
            on_row: Vec::new(),
        }
    }

    /// Prepares the row at height `y`.
    pub fn set_row(&mut self, y: f64) {
        self.y = y;
        self.crossings.clear();
        self.on_row.clear();
        self.winding_right.clear();
        if y >= self.bbox[1] && y <= self.bbox[3] {
            for (a, b) in self.polygon.edges() {
                if a[1] == y {
                    self.on_row.push([a[0], a[0]]);
                    if b[1] == y {
                        self.on_row.push([a[0].min(b[0]), a[0].max(b[0])]);
                    }
                }
                // The same half-open rule as `Polygon::contains`; both kinds count for points
                // left of the crossing (see there: `Greater` and `Less` respectively).
                let dir = if a[1] <= y && b[1] > y {
                    1
                } else if b[1] <= y && a[1] > y {
                    -1
                } else {
                    continue;
                };
                let x = a[0] + (y - a[1]) * (b[0] - a[0]) / (b[1] - a[1]);
                self.crossings.push((x, dir));
            }
        }
        self.crossings.sort_by(|p, q| p.0.total_cmp(&q.0));
        self.winding_right.resize(self.crossings.len() + 1, 0);
        for k in (0..self.crossings.len()).rev() {
            self.winding_right[k] = self.winding_right[k + 1] + self.crossings[k].1;
        }
    }

    /// Whether `(x, y)` lies in the closed polygon, `y` being the current row; the same as
    /// `polygon.contains(x, y)`.
    pub fn contains(&self, x: f64) -> bool {
        if !(x >= self.bbox[0] && x <= self.bbox[2] && self.y.is_finite()) {
            return false;
        }
        if self.on_row.iter().any(|r| x >= r[0] && x <= r[1]) {
            return true;
        }
        let k = self.crossings.partition_point(|c| c.0 <= x);
        let near = |c: Option<&(f64, i32)>| c.is_some_and(|c| (c.0 - x).abs() <= self.margin);
        if near(k.checked_sub(1).and_then(|l| self.crossings.get(l))) || near(self.crossings.get(k))
        {
            return self.polygon.contains(x, self.y);
        }
        self.winding_right[k] != 0
    }
}

/// Squared distance from `p` to the closed segment `a`–`b` (`a` may equal `b`).
pub fn segment_distance_squared(p: [f64; 2], a: [f64; 2], b: [f64; 2]) -> f64 {
    let (dx, dy) = (b[0] - a[0], b[1] - a[1]);
    let (wx, wy) = (p[0] - a[0], p[1] - a[1]);
    let along = wx * dx + wy * dy;
    if along <= 0.0 {
        return wx * wx + wy * wy;
    }
    let len2 = dx * dx + dy * dy;
    if along >= len2 {
        let (ux, uy) = (p[0] - b[0], p[1] - b[1]);
        return ux * ux + uy * uy;
    }
    // Perpendicular foot inside the segment: |w × d|² / |d|².
    let cross = wx * dy - wy * dx;
    cross * cross / len2
}

/// ∇ of the distance √[`segment_distance_squared`] from `p` to the segment `a`–`b`, case by case
/// as that function measures it; (0, 0) where the distance is 0.
pub fn segment_distance_gradient(p: [f64; 2], a: [f64; 2], b: [f64; 2]) -> [f64; 2] {
    let (dx, dy) = (b[0] - a[0], b[1] - a[1]);
    let (wx, wy) = (p[0] - a[0], p[1] - a[1]);
    let along = wx * dx + wy * dy;
    if along <= 0.0 {
        return unit_vector(wx, wy);
    }
    let len2 = dx * dx + dy * dy;
    if along >= len2 {
        return unit_vector(p[0] - b[0], p[1] - b[1]);
    }
    let cross = wx * dy - wy * dx;
    if cross == 0.0 {
        return [0.0, 0.0];
    }
    let len = len2.sqrt();
    let s = cross.signum();
    [s * dy / len, -s * dx / len]
}

/// (ux, uy) scaled to unit length; (0, 0) for the zero vector: the gradient of the distance
/// from a fixed point, at the offset (ux, uy) from it.
pub fn unit_vector(ux: f64, uy: f64) -> [f64; 2] {
    let d = ux.hypot(uy);
    if d > 0.0 {
        [ux / d, uy / d]
    } else {
        [0.0, 0.0]
    }
}

/// Exact sign of the cross product (b − a) × (c − a) = (bx − ax)(cy − ay) − (by − ay)(cx − ax).
///
/// `Greater` when c lies to the left of the directed line a → b in a y-up frame (on screen, with
/// y down, that is a clockwise turn a → b → c), `Less` for the other side, `Equal` when the three
/// points are exactly collinear. Shewchuk's fast floating-point filter ("Adaptive Precision
/// Floating-Point Arithmetic and Fast Robust Geometric Predicates", 1997, orient2d) decides almost
/// every case; near-degenerate ones fall back to an exact sum of exact products. Exact as long
/// as the products neither overflow nor underflow; NaN input gives `Equal`.
pub fn orientation(a: [f64; 2], b: [f64; 2], c: [f64; 2]) -> Ordering {
    // Shewchuk's ccwerrboundA = (3 + 16ε)ε with ε = 2^-53.
    const EPS: f64 = f64::EPSILON / 2.0;
    const ERR_BOUND: f64 = (3.0 + 16.0 * EPS) * EPS;
    let left = (a[0] - c[0]) * (b[1] - c[1]);
    let right = (a[1] - c[1]) * (b[0] - c[0]);
    let det = left - right;
    let sum = if left > 0.0 {
        if right <= 0.0 {
            return sign(det);
        }
        left + right
    } else if left < 0.0 {
        if right >= 0.0 {
            return sign(det);
        }
        -left - right
    } else {
        return sign(det);
    };
    let bound = ERR_BOUND * sum;
    if det >= bound || -det >= bound {
        return sign(det);
    }
    orientation_exact(a, b, c)
}

fn sign(v: f64) -> Ordering {
    if v > 0.0 {
        Ordering::Greater
    } else if v < 0.0 {
        Ordering::Less
    } else {
        Ordering::Equal
    }
}

/// The determinant expanded as ax·by − ax·cy − ay·bx + ay·cx + bx·cy − by·cx: each product split
/// exactly into value + rounding error (fused multiply-add), then all twelve parts summed into a
/// non-overlapping expansion (Shewchuk's two-sum growth, as in Python's `math.fsum`). The sign of
/// an expansion is the sign of its largest component.
fn orientation_exact(a: [f64; 2], b: [f64; 2], c: [f64; 2]) -> Ordering {
    let products = [
        (a[0], b[1]),
        (-a[0], c[1]),
        (-a[1], b[0]),
        (a[1], c[0]),
        (b[0], c[1]),
        (-b[1], c[0]),
    ];
    let mut partials = [0.0f64; 12];
    let mut len = 0usize;
    for (u, v) in products {
        let p = u * v;
        let e = u.mul_add(v, -p);
        for mut x in [p, e] {
            let mut kept = 0usize;
            for k in 0..len {
                let mut y = partials[k];
                if x.abs() < y.abs() {
                    std::mem::swap(&mut x, &mut y);
                }
                let hi = x + y;
                let lo = y - (hi - x);
                if lo != 0.0 {
                    partials[kept] = lo;
                    kept += 1;
                }
                x = hi;
            }
            // At most one new partial per added term, so 12 slots always suffice.
            partials[kept] = x;
            len = kept + 1;
        }
    }
    partials[..len]
        .iter()
        .rev()
        .find(|v| **v != 0.0)
        .map_or(Ordering::Equal, |&v| sign(v))
}

/// True when the closed segments `p1`–`p2` and `q1`–`q2` share at least one point (crossing,
/// touching at an end, or overlapping when collinear). Exact.
pub fn segments_intersect(p1: [f64; 2], p2: [f64; 2], q1: [f64; 2], q2: [f64; 2]) -> bool {
    // Bounding boxes first: cheap, exact, and it settles the collinear case.
    if p1[0].max(p2[0]) < q1[0].min(q2[0])
        || q1[0].max(q2[0]) < p1[0].min(p2[0])
        || p1[1].max(p2[1]) < q1[1].min(q2[1])
        || q1[1].max(q2[1]) < p1[1].min(p2[1])
    {
        return false;
    }
    let o1 = orientation(p1, p2, q1) as i32;
    let o2 = orientation(p1, p2, q2) as i32;
    if o1 == 0 && o2 == 0 {
        // Collinear with overlapping boxes: they overlap.
        return true;
    }
    let o3 = orientation(q1, q2, p1) as i32;
    let o4 = orientation(q1, q2, p2) as i32;
    o1 * o2 <= 0 && o3 * o4 <= 0
}

/// Whether `x` lies in the closed axis-aligned box spanned by `p` and `q`; for a point on the
/// line through them, whether it lies on the closed segment.
fn in_box(x: [f64; 2], p: [f64; 2], q: [f64; 2]) -> bool {
    x[0] >= p[0].min(q[0])
        && x[0] <= p[0].max(q[0])
        && x[1] >= p[1].min(q[1])
        && x[1] <= p[1].max(q[1])
}

/// The first pair of edges (i < j) that meet where they should not, if any.
fn first_self_intersection(p: &[[f64; 2]]) -> Option<(usize, usize)> {
    let n = p.len();
    for i in 0..n {
        let (a0, a1) = (p[i], p[(i + 1) % n]);
        for j in i + 1..n {
            let (b0, b1) = (p[j], p[(j + 1) % n]);
            let meets = if j == i + 1 {
                // Shared vertex a1 == b0.
                folds_back(a0, a1, b1)
            } else if i == 0 && j == n - 1 {
                // Shared vertex b1 == a0.
                folds_back(b0, a0, a1)
            } else {
                segments_intersect(a0, a1, b0, b1)
            };
            if meets {
                return Some((i, j));
            }
        }
    }
    None
}

/// Whether the edges `a`–`s` and `s`–`c` (sharing `s`, with `a != s != c`) overlap along more
/// than `s`: they are collinear and `a`, `c` lie on the same side of `s`.
fn folds_back(a: [f64; 2], s: [f64; 2], c: [f64; 2]) -> bool {
    if orientation(a, s, c) != Ordering::Equal {
        return false;
    }
    // On one non-vertical line the x order decides; on a vertical line, the y order.
    let axis = if a[0] != s[0] { 0 } else { 1 };
    (a[axis] - s[axis]).signum() == (c[axis] - s[axis]).signum()
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;
    use serde_json::Value;

    fn pts(v: &[[f64; 2]]) -> Vec<PixelPoint> {
        v.iter()
            .map(|p| PixelPoint::new(p[0], p[1]).unwrap())
            .collect()
    }

    fn poly(v: &[[f64; 2]]) -> Polygon {
        Polygon::new(pts(v)).unwrap()
    }

    /// The L made of three unit squares has its centroid at the mean of the squares' centres,
    /// (5/6, 5/6), in either turning direction (decomposition of the area, a textbook identity).
    #[test]
    fn centroid_of_an_l_is_the_mean_of_its_squares() {
        let l = [
            [0.0, 0.0],
            [2.0, 0.0],
            [2.0, 1.0],
            [1.0, 1.0],
            [1.0, 2.0],
            [0.0, 2.0],
        ];
        let mut rev = l;
        rev.reverse();
        for v in [l, rev] {
            let [x, y] = poly(&v).centroid().expect("area");
            assert!((x - 5.0 / 6.0).abs() < 1e-15 && (y - 5.0 / 6.0).abs() < 1e-15);
        }
    }

    /// The reference file stores coordinates as round-trip decimal strings, because the JSON
    /// reader's own float parsing is not guaranteed to be correctly rounded; `str::parse` is.
    fn xy(v: &Value) -> [f64; 2] {
        let f = |s: &Value| s.as_str().unwrap().parse::<f64>().unwrap();
        [f(&v[0]), f(&v[1])]
    }

    /// Outside reference: shapely 2.2 `Polygon(vertices).distance(Point(q))` and
    /// `Polygon(vertices).covers(Point(q))`, written by tests/reference/gen_geometry.py (star-shaped
    /// polygons with random radii, integer-vertex stars with queries exactly on edges, random
    /// simple polygons from 2-opt untangling, and a comb-shaped seed-tray outline in both turning
    /// directions). Rings that shapely's `LinearRing.is_simple` calls non-simple must be refused.
    #[test]
    fn matches_shapely_distance_and_covers() {
        let data: Value = serde_json::from_str(include_str!(concat!(
            env!("CARGO_MANIFEST_DIR"),
            "/../../tests/reference/geometry_polygons.json"
        )))
        .unwrap();
        let mut checked = 0;
        for case in data["polygons"].as_array().unwrap() {
            let name = case["name"].as_str().unwrap();
            let verts: Vec<[f64; 2]> = case["vertices"]
                .as_array()
                .unwrap()
                .iter()
                .map(xy)
                .collect();
            let p = Polygon::new(pts(&verts)).unwrap_or_else(|e| panic!("{name}: {e}"));
            let queries = case["queries"].as_array().unwrap();
            for (k, q) in queries.iter().enumerate() {
                let [x, y] = xy(q);
                let want = case["distance"][k].as_f64().unwrap();
                let got = p.distance(x, y);
                assert!(
                    (got - want).abs() <= 1e-9 * want.max(1.0),
                    "{name} q{k} ({x}, {y}): {got} vs shapely {want}"
                );
                assert_eq!(
                    p.contains(x, y),
                    case["covers"][k].as_bool().unwrap(),
                    "{name} q{k} ({x}, {y})"
                );
                checked += 1;
            }
        }
        assert!(checked > 1500);
        for case in data["rejected"].as_array().unwrap() {
            let name = case["name"].as_str().unwrap();
            let verts: Vec<[f64; 2]> = case["vertices"]
                .as_array()
                .unwrap()
                .iter()
                .map(xy)
                .collect();
            let err = Polygon::new(pts(&verts)).unwrap_err();
            assert!(
                matches!(err, GeometryError::SelfIntersecting { .. }),
                "{name}: {err:?}"
            );
        }
    }

    /// Outside reference: shapely 2.2 (GEOS 3.14) `Polygon(a).intersects(Polygon(b))`,
    /// `Polygon(a).covers(Polygon(b))` and `Polygon(b).covers(Polygon(a))`, written by
    /// tests/reference/gen_zones.py: random convex and star-shaped polygons, 2-opt untangled
    /// polygons and polyominoes (float, integer and dyadic coordinates), and hand-built touching
    /// cases (shared vertices and edge parts, collinear overlaps, a band through a small
    /// rectangle, an L's corner cut, edges through reflex vertices).
    #[test]
    fn matches_shapely_intersects_and_covers() {
        let data: Value = serde_json::from_str(include_str!(concat!(
            env!("CARGO_MANIFEST_DIR"),
            "/../../tests/reference/zones_polygon_pairs.json"
        )))
        .unwrap();
        let read = |case: &Value, key: &str| -> Polygon {
            let verts: Vec<[f64; 2]> = case[key].as_array().unwrap().iter().map(xy).collect();
            Polygon::new(pts(&verts)).unwrap_or_else(|e| panic!("{} {key}: {e}", case["name"]))
        };
        let pairs = data["pairs"].as_array().unwrap();
        let mut touching = 0;
        for case in pairs {
            let name = case["name"].as_str().unwrap();
            let (a, b) = (read(case, "a"), read(case, "b"));
            let want = |k: &str| case[k].as_bool().unwrap();
            assert_eq!(a.intersects(&b), want("intersects"), "{name}: a ∩ b");
            assert_eq!(b.intersects(&a), want("intersects"), "{name}: b ∩ a");
            assert_eq!(a.covers(&b), want("a_covers_b"), "{name}: a covers b");
            assert_eq!(b.covers(&a), want("b_covers_a"), "{name}: b covers a");
            touching += usize::from(name.contains("touch") || name.contains("shared"));
        }
        assert!(pairs.len() > 300 && touching > 8);
    }

    #[test]
    fn covers_and_intersects_on_the_cases_vertex_checks_miss() {
        // A thin band drawn through a small no-go rectangle: no vertex of either polygon lies
        // in the other.
        let no_go = poly(&[[20.0, 30.0], [30.0, 30.0], [30.0, 40.0], [20.0, 40.0]]);
        let band = poly(&[[10.0, 34.0], [40.0, 34.0], [40.0, 36.0], [10.0, 36.0]]);
        assert!(
            band.vertices()
                .iter()
                .all(|v| !no_go.contains(v.x(), v.y()))
        );
        assert!(
            no_go
                .vertices()
                .iter()
                .all(|v| !band.contains(v.x(), v.y()))
        );
        assert!(no_go.intersects(&band) && band.intersects(&no_go));
        // Touching along the rectangle's bottom edge counts; a pixel's gap does not.
        let under = poly(&[[10.0, 40.0], [40.0, 40.0], [40.0, 42.0], [10.0, 42.0]]);
        assert!(no_go.intersects(&under));
        let below = poly(&[[10.0, 41.0], [40.0, 41.0], [40.0, 42.0], [10.0, 42.0]]);
        assert!(!no_go.intersects(&below));
        // Containment either way.
        let big = poly(&[[0.0, 0.0], [60.0, 0.0], [60.0, 60.0], [0.0, 60.0]]);
        assert!(big.intersects(&no_go) && no_go.intersects(&big));

        // A thin region cutting the corner out of an L-shaped safe zone, every vertex inside.
        let l = poly(&[
            [0.0, 0.0],
            [40.0, 0.0],
            [40.0, 20.0],
            [20.0, 20.0],
            [20.0, 40.0],
            [0.0, 40.0],
        ]);
        let cut = poly(&[[18.0, 21.0], [21.0, 18.0], [22.0, 19.0], [19.0, 22.0]]);
        assert!(cut.vertices().iter().all(|v| l.contains(v.x(), v.y())));
        assert!(!l.covers(&cut) && l.intersects(&cut));
        // Through the reflex vertex (20, 20) exactly, staying inside: covered.
        let through = poly(&[[10.0, 30.0], [30.0, 10.0], [10.0, 10.0]]);
        assert!(l.covers(&through));
        // Along the boundary, and the whole L in both turning directions.
        let arm = poly(&[[0.0, 0.0], [20.0, 0.0], [20.0, 40.0], [0.0, 40.0]]);
        assert!(l.covers(&arm) && !arm.covers(&l));
        let mut reversed = l.vertices().to_vec();
        reversed.reverse();
        let reversed = Polygon::new(reversed).unwrap();
        assert!(l.covers(&reversed) && reversed.covers(&l) && reversed.covers(&arm));
        assert!(!reversed.covers(&cut));

        // A U whose notch a triangle bridges: both vertices on the boundary, the edge between
        // them along the boundary except over the notch; nothing crosses properly.
        let u = poly(&[
            [0.0, 0.0],
            [10.0, 0.0],
            [10.0, 10.0],
            [20.0, 10.0],
            [20.0, 0.0],
            [30.0, 0.0],
            [30.0, 20.0],
            [0.0, 20.0],
        ]);
        assert!(!u.covers(&poly(&[[0.0, 0.0], [30.0, 0.0], [15.0, 15.0]])));
        // An edge through the reflex vertex (10, 10) on into the notch.
        assert!(!u.covers(&poly(&[[0.0, 20.0], [20.0, 0.0], [30.0, 20.0]])));
        assert!(u.covers(&poly(&[
            [0.0, 10.0],
            [30.0, 10.0],
            [30.0, 20.0],
            [0.0, 20.0]
        ])));
        // The notch's lower half: one edge runs from inside one wall across to the other, every
        // other edge lies on the boundary, and no vertex of the U lies on that edge.
        let notch = [[10.0, 5.0], [20.0, 5.0], [20.0, 10.0], [10.0, 10.0]];
        assert!(!u.covers(&poly(&notch)) && u.intersects(&poly(&notch)));
        let mut notch = notch.to_vec();
        notch.reverse();
        assert!(!u.covers(&poly(&notch)));
    }

    /// Whether every point of the polygon `b`'s boundary at the parameters k / 4096 along each
    /// edge lies in the closed `a`, and the same with `a` and `b` swapped.
    fn sampled_boundary_in(a: &Polygon, b: &Polygon) -> bool {
        b.edges().all(|(p, q)| {
            (0..=4096).all(|k| {
                let t = f64::from(k);
                // Exact: small integers times k, then a division by a power of two.
                let x = p[0] + t * (q[0] - p[0]) / 4096.0;
                let y = p[1] + t * (q[1] - p[1]) / 4096.0;
                a.contains(x, y)
            })
        })
    }

    fn sampled_boundary_meets(a: &Polygon, b: &Polygon) -> bool {
        b.edges().any(|(p, q)| {
            (0..=4096).any(|k| {
                let t = f64::from(k);
                a.contains(
                    p[0] + t * (q[0] - p[0]) / 4096.0,
                    p[1] + t * (q[1] - p[1]) / 4096.0,
                )
            })
        })
    }

    fn gcd(a: i64, b: i64) -> i64 {
        if b == 0 { a } else { gcd(b, a % b) }
    }

    /// 3 to 8 distinct points of the lattice [0, 4]², in angular order around a random centre
    /// off the lattice: a star-shaped, often non-convex polygon (or, rarely, one that
    /// `Polygon::new` refuses).
    fn lattice_star() -> impl Strategy<Value = Vec<PixelPoint>> {
        (
            prop::collection::btree_set((0i32..=4, 0i32..=4), 3..9),
            (0.3f64..3.7, 0.3f64..3.7),
        )
            .prop_map(|(set, (cx, cy))| {
                let mut v: Vec<[f64; 2]> = set
                    .into_iter()
                    .map(|(x, y)| [f64::from(x), f64::from(y)])
                    .collect();
                v.sort_by(|p, q| {
                    let angle = |p: &[f64; 2]| (p[1] - cy).atan2(p[0] - cx);
                    angle(p).total_cmp(&angle(q))
                });
                pts(&v)
            })
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(600))]

        /// Star-shaped polygons with integer vertices in [0, 4]², where touching, shared edges and edges
        /// through vertices are common, against dense exact sampling of the boundaries. Sound
        /// and complete here: along an edge of b, every parameter where it meets a's boundary is
        /// a fraction with denominator at most 32 (a cross product of coordinate differences of
        /// at most 4), so any stretch of the edge outside a spans more than 1/1024 and contains
        /// a sample k/4096; and two polygons that meet either have a vertex (k = 0) in the other
        /// or meet along a stretch of a boundary.
        #[test]
        fn covers_and_intersects_match_dense_sampling(
            a in lattice_star(),
            b in lattice_star(),
        ) {
            let (Ok(a), Ok(b)) = (Polygon::new(a), Polygon::new(b)) else { return Ok(()) };
            prop_assert_eq!(a.covers(&b), sampled_boundary_in(&a, &b));
            prop_assert_eq!(b.covers(&a), sampled_boundary_in(&b, &a));
            let meets = sampled_boundary_meets(&a, &b) || sampled_boundary_meets(&b, &a);
            prop_assert_eq!(a.intersects(&b), meets);
            prop_assert_eq!(b.intersects(&a), meets);
        }

        /// Polygons whose vertices all lie on the boundary of a (some of a's vertices and of the
        /// lattice points on its edges, in boundary order): every edge is a chord of a or runs
        /// along it, the hardest case for `covers`. Checked against dense sampling as above.
        #[test]
        fn covers_matches_dense_sampling_for_inscribed_polygons(
            a in lattice_star(),
            pick in any::<u64>(),
        ) {
            let Ok(a) = Polygon::new(a) else { return Ok(()) };
            let mut on_boundary = Vec::new();
            for (p, q) in a.edges() {
                let (dx, dy) = ((q[0] - p[0]) as i64, (q[1] - p[1]) as i64);
                let steps = gcd(dx.abs(), dy.abs());
                for s in 0..steps {
                    let t = (s as f64) / (steps as f64);
                    on_boundary.push([p[0] + t * dx as f64, p[1] + t * dy as f64]);
                }
            }
            let chosen: Vec<[f64; 2]> = on_boundary
                .iter()
                .enumerate()
                .filter(|(k, _)| pick >> (k % 64) & 1 == 1)
                .map(|(_, v)| *v)
                .collect();
            let Ok(b) = Polygon::new(pts(&chosen)) else { return Ok(()) };
            prop_assert_eq!(a.covers(&b), sampled_boundary_in(&a, &b));
            prop_assert_eq!(b.covers(&a), sampled_boundary_in(&b, &a));
            prop_assert!(a.intersects(&b));
        }

        /// The row scanner answers like `contains` at every pixel centre around the polygon, for
        /// integer-vertex stars (vertices and horizontal edges on rows, crossings on pixel
        /// centres) and float ones.
        #[test]
        fn row_scan_matches_contains(
            radii in prop::collection::vec(2.0f64..30.0, 3..16),
            jitter in prop::collection::vec(0.0f64..0.9, 16),
            centre in (0.0f64..40.0, 0.0f64..40.0),
            round in any::<bool>(),
        ) {
            let n = radii.len();
            let verts: Vec<[f64; 2]> = (0..n)
                .map(|k| {
                    let ang = (k as f64 + jitter[k]) / n as f64 * std::f64::consts::TAU;
                    let v = [centre.0 + radii[k] * ang.cos(), centre.1 + radii[k] * ang.sin()];
                    if round { [v[0].round(), v[1].round()] } else { v }
                })
                .collect();
            let Ok(p) = Polygon::new(pts(&verts)) else { return Ok(()) };
            let mut scan = RowScan::new(&p);
            let [x0, y0, x1, y1] = p.bounding_box();
            for j in (y0.floor() as i32 - 1)..=(y1.ceil() as i32 + 1) {
                let y = f64::from(j);
                scan.set_row(y);
                for i in (x0.floor() as i32 - 1)..=(x1.ceil() as i32 + 1) {
                    let x = f64::from(i);
                    prop_assert_eq!(scan.contains(x), p.contains(x, y), "({}, {})", x, y);
                    // Half-pixel points too: odd multiples of 0.5 are exact.
                    prop_assert_eq!(scan.contains(x + 0.5), p.contains(x + 0.5, y));
                }
            }
        }
    }

    #[test]
    fn row_scan_on_an_outline_with_rows_along_its_edges() {
        // The L: rows 0, 20 and 40 run along horizontal edges, columns 0, 20 and 40 along
        // vertical ones, and (20, 20) is the reflex vertex.
        let l = poly(&[
            [0.0, 0.0],
            [40.0, 0.0],
            [40.0, 20.0],
            [20.0, 20.0],
            [20.0, 40.0],
            [0.0, 40.0],
        ]);
        let mut scan = RowScan::new(&l);
        assert!(!scan.contains(5.0)); // no row set yet
        for j in -2..=42 {
            let y = f64::from(j);
            scan.set_row(y);
            for i in -2..=42 {
                let x = f64::from(i);
                assert_eq!(scan.contains(x), l.contains(x, y), "({x}, {y})");
            }
        }
        scan.set_row(f64::NAN);
        assert!(!scan.contains(5.0));
    }

    #[test]
    fn constructor_checks() {
        let sq = [[0.0, 0.0], [4.0, 0.0], [4.0, 3.0], [0.0, 3.0]];
        let mut closed = sq.to_vec();
        closed.push(sq[0]);
        assert_eq!(poly(&closed).vertices().len(), 4);
        assert_eq!(poly(&closed), poly(&sq));
        let cases: Vec<(Vec<[f64; 2]>, GeometryError)> = vec![
            (vec![], GeometryError::TooFewVertices { count: 0 }),
            (vec![[1.0, 1.0]], GeometryError::TooFewVertices { count: 1 }),
            (
                vec![[0.0, 0.0], [1.0, 0.0], [0.0, 0.0]],
                GeometryError::TooFewVertices { count: 2 },
            ),
            (
                vec![[0.0, 0.0], [1.0, 0.0], [1.0, 0.0], [0.0, 1.0]],
                GeometryError::RepeatedVertex { index: 2 },
            ),
            (
                vec![[0.0, 0.0], [1.0, 0.0], [0.0, 1.0], [0.0, 0.0], [0.0, 0.0]],
                GeometryError::RepeatedVertex { index: 4 },
            ),
            (
                vec![[0.0, 0.0], [1.0, 1.0], [3.0, 3.0]],
                GeometryError::ZeroArea,
            ),
            (
                vec![[0.0, 0.0], [2.0, 0.0], [1.0, 0.0], [5.0, 0.0]],
                GeometryError::ZeroArea,
            ),
            // Bowtie: edges 0 and 2 cross.
            (
                vec![[0.0, 0.0], [2.0, 2.0], [2.0, 0.0], [0.0, 2.0]],
                GeometryError::SelfIntersecting {
                    edge_a: 0,
                    edge_b: 2,
                },
            ),
            // Spike that folds back along its own edge (edges 1 and 2 overlap).
            (
                vec![[0.0, 0.0], [4.0, 0.0], [4.0, 4.0], [4.0, 2.0], [0.0, 4.0]],
                GeometryError::SelfIntersecting {
                    edge_a: 1,
                    edge_b: 2,
                },
            ),
            // Vertex 3 touches edge 0.
            (
                vec![[0.0, 0.0], [4.0, 0.0], [4.0, 4.0], [2.0, 0.0], [0.0, 4.0]],
                GeometryError::SelfIntersecting {
                    edge_a: 0,
                    edge_b: 2,
                },
            ),
            // Edges 0 and 2 overlap along a line (non-neighbours).
            (
                vec![
                    [2.0, 0.0],
                    [4.0, 0.0],
                    [4.0, 4.0],
                    [0.0, 4.0],
                    [0.0, 0.0],
                    [3.0, 0.0],
                ],
                GeometryError::SelfIntersecting {
                    edge_a: 0,
                    edge_b: 4,
                },
            ),
            // The last edge folds back over the first (the wrap-around neighbours).
            (
                vec![[0.0, 0.0], [2.0, 0.0], [2.0, 3.0], [4.0, 3.0], [4.0, 0.0]],
                GeometryError::SelfIntersecting {
                    edge_a: 0,
                    edge_b: 4,
                },
            ),
        ];
        for (v, want) in cases {
            assert_eq!(Polygon::new(pts(&v)), Err(want), "{v:?}");
        }
        assert_eq!(
            PixelPoint::new(f64::NAN, 0.0),
            Err(GeometryError::NonFinite)
        );
        assert_eq!(
            PixelPoint::new(0.0, f64::INFINITY),
            Err(GeometryError::NonFinite)
        );
    }

    #[test]
    fn area_box_contains_and_distance_on_a_concave_outline() {
        // An L-shaped potting-bench corner, counter-clockwise on screen.
        let l = poly(&[
            [0.0, 0.0],
            [0.0, 10.0],
            [10.0, 10.0],
            [10.0, 6.0],
            [4.0, 6.0],
            [4.0, 0.0],
        ]);
        assert_eq!(l.area(), 64.0);
        assert_eq!(l.signed_area(), -64.0);
        assert_eq!(l.bounding_box(), [0.0, 0.0, 10.0, 10.0]);
        for v in l.vertices() {
            assert!(l.contains(v.x(), v.y()));
            assert_eq!(l.distance(v.x(), v.y()), 0.0);
        }
        assert!(l.contains(2.0, 0.0) && l.contains(7.0, 6.0) && l.contains(10.0, 8.0));
        assert!(l.contains(2.0, 8.0) && !l.contains(7.0, 3.0) && !l.contains(-1e-12, 5.0));
        assert_eq!(l.distance(7.0, 3.0), 3.0); // in the notch: 3 px to x = 4 and to y = 6
        assert_eq!(l.distance(7.0, 5.0), 1.0);
        assert_eq!(l.distance(13.0, 14.0), 5.0);
        assert_eq!(l.distance(-3.0, 5.0), 3.0);
        assert!(l.distance(f64::NAN, 1.0).is_nan());
        assert_eq!(l.distance(f64::INFINITY, 1.0), f64::INFINITY);
        assert!(!l.contains(f64::NAN, 1.0));
        let xs = [-1.0, 2.0, 7.0];
        let ys = [3.0, 8.0];
        let grid = l.distance_grid(&xs, &ys);
        for (j, &y) in ys.iter().enumerate() {
            for (i, &x) in xs.iter().enumerate() {
                assert_eq!(grid[j * 3 + i], l.distance(x, y));
            }
        }
    }

    #[test]
    fn orientation_is_exact_where_naive_arithmetic_fails() {
        // Points a hair off the line y = x; the naive determinant rounds to the wrong sign or 0
        // for some of them. Exact: c is above (y > x) when the perturbation is positive.
        let a = [0.5, 0.5];
        let b = [12.0, 12.0];
        let ulp = (-48f64).exp2(); // spacing of doubles in [16, 32)
        for k in -20i32..=20 {
            let c = [24.0, 24.0 + f64::from(k) * ulp];
            let want = k.cmp(&0);
            // (b − a) × (c − a) > 0 ⇔ c above the line ⇔ k > 0.
            assert_eq!(orientation(a, b, c), want, "k = {k}");
        }
        // 0.1, 0.3, 0.7 are not exactly collinear as doubles; all are multiples of 2^-56.
        for (a, b, c) in [
            ([0.1, 0.1], [0.3, 0.3], [0.7, 0.7]),
            ([0.1, 0.3], [0.3, 0.7], [0.7, 0.1]),
            ([0.3, 0.1], [0.1, 0.3], [0.2, 0.2]),
        ] {
            assert_eq!(orientation(a, b, c), exact_sign_dyadic(a, b, c, 56));
        }
    }

    /// Exact sign for coordinates that are whole multiples of 2^-`bits`, scaled to i128
    /// (checked: panics rather than answer wrongly if the values do not fit).
    fn exact_sign_dyadic(a: [f64; 2], b: [f64; 2], c: [f64; 2], bits: i32) -> Ordering {
        let s = |v: f64| -> i128 {
            let scaled = v * f64::from(bits).exp2();
            assert_eq!(scaled.fract(), 0.0);
            scaled as i128
        };
        let (ax, ay, bx, by, cx, cy) = (s(a[0]), s(a[1]), s(b[0]), s(b[1]), s(c[0]), s(c[1]));
        let det = (bx - ax).checked_mul(cy - ay).unwrap() - (by - ay).checked_mul(cx - ax).unwrap();
        det.cmp(&0)
    }

    proptest! {
        /// Orientation against exact integer arithmetic: coordinates are random integers scaled by
        /// 2^-20 (so exactly representable), with c nudged onto / next to the line through a, b.
        #[test]
        fn orientation_matches_exact_integers(
            ax in -(1i64 << 40)..(1i64 << 40), ay in -(1i64 << 40)..(1i64 << 40),
            bx in -(1i64 << 40)..(1i64 << 40), by in -(1i64 << 40)..(1i64 << 40),
            t in 0i64..64, nudge in -3i64..=3,
        ) {
            let scale = (-20f64).exp2();
            let f = |v: i64| v as f64 * scale;
            // c = a + t/16 (b − a) rounded to the grid, plus a tiny nudge: often exactly collinear.
            let cx = ax + (bx - ax) / 16 * t;
            let cy = ay + (by - ay) / 16 * t + nudge;
            let (a, b, c) = ([f(ax), f(ay)], [f(bx), f(by)], [f(cx), f(cy)]);
            let det = i128::from(bx - ax) * i128::from(cy - ay) - i128::from(by - ay) * i128::from(cx - ax);
            prop_assert_eq!(orientation(a, b, c), det.cmp(&0));
            prop_assert_eq!(orientation(a, b, c), exact_sign_dyadic(a, b, c, 20));
        }

        /// Star-shaped polygons with random radii: distance equals an independent brute force
        /// (0 when inside by an angle-sum winding number, else the minimum over edges of the
        /// distance to the clamped projection).
        #[test]
        fn distance_matches_brute_force(
            radii in prop::collection::vec(5.0f64..100.0, 3..24),
            jitter in prop::collection::vec(0.0f64..0.9, 24),
            queries in prop::collection::vec((-150.0f64..150.0, -150.0f64..150.0), 1..40),
        ) {
            let n = radii.len();
            let verts: Vec<[f64; 2]> = (0..n)
                .map(|k| {
                    let ang = (k as f64 + jitter[k]) / n as f64 * std::f64::consts::TAU;
                    [radii[k] * ang.cos(), radii[k] * ang.sin()]
                })
                .collect();
            let Ok(p) = Polygon::new(pts(&verts)) else { return Ok(()) };
            for &(x, y) in &queries {
                let seg_min = (0..n)
                    .map(|k| {
                        let (a, b) = (verts[k], verts[(k + 1) % n]);
                        let (dx, dy) = (b[0] - a[0], b[1] - a[1]);
                        let t = (((x - a[0]) * dx + (y - a[1]) * dy) / (dx * dx + dy * dy)).clamp(0.0, 1.0);
                        (x - (a[0] + t * dx)).hypot(y - (a[1] + t * dy))
                    })
                    .fold(f64::INFINITY, f64::min);
                if seg_min < 1e-9 {
                    continue;
                }
                let winding: f64 = (0..n)
                    .map(|k| {
                        let (a, b) = (verts[k], verts[(k + 1) % n]);
                        let (ux, uy, vx, vy) = (a[0] - x, a[1] - y, b[0] - x, b[1] - y);
                        (ux * vy - uy * vx).atan2(ux * vx + uy * vy)
                    })
                    .sum();
                let inside = winding.abs() > std::f64::consts::PI;
                prop_assert_eq!(p.contains(x, y), inside);
                let want = if inside { 0.0 } else { seg_min };
                prop_assert!((p.distance(x, y) - want).abs() <= 1e-9, "({}, {}): {} vs {}", x, y, p.distance(x, y), want);
            }
        }

        /// Segment intersection against a rational brute force on small integer coordinates.
        #[test]
        fn segments_intersect_matches_integer_brute_force(
            c in prop::array::uniform8(-4i64..=4),
        ) {
            let f = |i: usize| [c[i] as f64, c[i + 1] as f64];
            let got = segments_intersect(f(0), f(2), f(4), f(6));
            // Brute force: look for a common point with both parameters in [0, 1], over a fine
            // rational grid (all intersection parameters here are multiples of 1/det with
            // |det| ≤ 128, so 1/(128!) is not needed: check candidates from the exact solution).
            let (p, r) = ([c[0], c[1]], [c[2] - c[0], c[3] - c[1]]);
            let (q, s) = ([c[4], c[5]], [c[6] - c[4], c[7] - c[5]]);
            let cross = |u: [i64; 2], v: [i64; 2]| u[0] * v[1] - u[1] * v[0];
            let qp = [q[0] - p[0], q[1] - p[1]];
            let rs = cross(r, s);
            let want = if rs != 0 {
                let (t, u) = (cross(qp, s), cross(qp, r));
                let within = |n: i64| if rs > 0 { (0..=rs).contains(&n) } else { (rs..=0).contains(&n) };
                within(t) && within(u)
            } else if cross(qp, r) != 0 {
                false
            } else {
                // Collinear (or degenerate): compare the 1-D extents on both axes.
                let ext = |a: i64, b: i64| (a.min(b), a.max(b));
                let (px, qx) = (ext(c[0], c[2]), ext(c[4], c[6]));
                let (py, qy) = (ext(c[1], c[3]), ext(c[5], c[7]));
                let axis_ok = |a: (i64, i64), b: (i64, i64)| a.0 <= b.1 && b.0 <= a.1;
                if r == [0, 0] && s == [0, 0] {
                    p == q
                } else {
                    axis_ok(px, qx) && axis_ok(py, qy)
                }
            };
            prop_assert_eq!(got, want);
        }
    }
}
