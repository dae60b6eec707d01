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
