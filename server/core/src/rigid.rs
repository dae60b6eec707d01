//! Least-squares similarity and rigid fits between point sets
//! (Umeyama, IEEE TPAMI 1991; with `allow_scale = false` the Kabsch rigid fit).

use thiserror::Error;

/// Why a fit cannot be made.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum FitError {
    /// Sources and targets differ in number.
    #[error("{sources} sources but {targets} targets")]
    LengthMismatch {
        /// Number of sources.
        sources: usize,
        /// Number of targets.
        targets: usize,
    },
    /// Fewer than two points.
    #[error("a rigid move needs at least 2 points, got {count}")]
    TooFewPoints {
        /// Number of points given.
        count: usize,
    },
    /// Two sources are the same point.
    #[error("sources {a} and {b} are the same point")]
    CoincidentSources {
        /// First index.
        a: usize,
        /// Second index.
        b: usize,
    },
    /// Three or more sources lie on one line.
    #[error("the sources lie on one line; use two points or move one off the line")]
    CollinearSources,
}

/// A fitted transform target ≈ scale · R · source + translation.
#[derive(Debug, Clone, PartialEq)]
pub struct RigidFit {
    /// 2×2 rotation matrix, row-major, det = +1.
    pub rotation: [[f64; 2]; 2],
    /// Scale factor (1 when scale is not allowed).
    pub scale: f64,
    /// Translation in pixels.
    pub translation: [f64; 2],
    /// Per-point residual lengths |fitted(source_i) − target_i| in pixels.
    pub residuals: Vec<f64>,
    /// Root mean square of the residual lengths.
    pub rms: f64,
}

impl RigidFit {
    /// Where the fitted transform takes `p`: scale · R · p + translation.
    pub fn apply(&self, p: [f64; 2]) -> [f64; 2] {
        let r = self.rotation;
        [
            self.scale * (r[0][0] * p[0] + r[0][1] * p[1]) + self.translation[0],
            self.scale * (r[1][0] * p[0] + r[1][1] * p[1]) + self.translation[1],
        ]
    }

    /// atan2(R10, R00) in degrees, in image coordinates (x right, y down).
    pub fn rotation_deg(&self) -> f64 {
        self.rotation[1][0].atan2(self.rotation[0][0]).to_degrees()
    }
}

/// Two sources closer than this (Euclidean, px) count as the same point.
///
/// Far below any real marking precision, yet well above f64 rounding of pixel coordinates, so
/// it catches a point entered twice without judging deliberate close pairs.
pub const COINCIDENT_TOLERANCE_PX: f64 = 1e-9;

/// Three or more sources that all lie within this distance (px) of one straight line are
/// refused as collinear: the fit's rotation would then rest on sub-pixel offsets across the line.
/// For sources spread over less than [`COLLINEAR_FULL_SPREAD_PX`] the allowance shrinks in
/// proportion, so that small but clearly two-dimensional sets (such as the 2-px triangle of
/// Umeyama's own example) still fit.
pub const COLLINEAR_TOLERANCE_PX: f64 = 0.5;

/// The spread (largest distance between two sources, px) from which the full
/// [`COLLINEAR_TOLERANCE_PX`] applies; below it the allowance is
/// `COLLINEAR_TOLERANCE_PX · spread / COLLINEAR_FULL_SPREAD_PX` (0.5 % of the spread).
pub const COLLINEAR_FULL_SPREAD_PX: f64 = 100.0;

/// Fits the similarity (or, without scale, the rigid) transform from `sources` to `targets`.
///
/// Minimises Σ |target_i − (scale · R · source_i + translation)|² over rotations R (det +1),
/// translations and, when `allow_scale`, scale > 0 — Umeyama, "Least-Squares Estimation of
/// Transformation Parameters Between Two Point Patterns", IEEE TPAMI 13(4), 1991, eqs. (38)–(43),
/// reflection guard included (S = diag(1, −1) when det Σ_xy < 0). In 2-D the optimal rotation
/// has the closed form θ = atan2(Σ10 − Σ01, Σ00 + Σ11) of the cross-covariance Σ_xy, and
/// tr(DS) = hypot(Σ00 + Σ11, Σ10 − Σ01), which equals Umeyama's SVD result (d1 + d2 when
/// det Σ_xy ≥ 0, d1 − d2 otherwise). Without scale this is the Kabsch fit (scale 1).
///
/// When every rotation fits equally well (for example targets that mirror an isotropic
/// source set, or all targets at one point) R is the identity and, with scale allowed, scale 0,
/// which is then the least-squares answer.
///
/// Errors, checked in this order: `LengthMismatch`; `TooFewPoints` below 2; `CoincidentSources`
/// when two sources are within [`COINCIDENT_TOLERANCE_PX`] (the first such pair by index);
/// `CollinearSources` when 3 or more sources all lie within [`COLLINEAR_TOLERANCE_PX`] of one line
/// (the narrowest strip holding them is at most twice that wide; scaled down for sources spread
/// over less than [`COLLINEAR_FULL_SPREAD_PX`]). Two distinct points always fit. Coordinates are expected
/// finite (they come from checked pixel points); non-finite ones give non-finite results.
pub fn fit(
    sources: &[[f64; 2]],
    targets: &[[f64; 2]],
    allow_scale: bool,
) -> Result<RigidFit, FitError> {
    if sources.len() != targets.len() {
        return Err(FitError::LengthMismatch {
            sources: sources.len(),
            targets: targets.len(),
        });
    }
    let n = sources.len();
    if n < 2 {
        return Err(FitError::TooFewPoints { count: n });
    }
    if let Some((a, b)) = first_coincident_pair(sources) {
        return Err(FitError::CoincidentSources { a, b });
    }
    if n >= 3 {
        let (width, spread) = width_and_spread(sources);
        let allowance = COLLINEAR_TOLERANCE_PX * (spread / COLLINEAR_FULL_SPREAD_PX).min(1.0);
        if width <= 2.0 * allowance {
            return Err(FitError::CollinearSources);
        }
    }

    let nf = n as f64;
    let mean = |p: &[[f64; 2]]| {
        let s = p.iter().fold([0.0, 0.0], |s, q| [s[0] + q[0], s[1] + q[1]]);
        [s[0] / nf, s[1] / nf]
    };
    let (mx, my) = (mean(sources), mean(targets));
    // σ_x² (eq. 36) and Σ_xy = (1/n) Σ (y − μ_y)(x − μ_x)ᵀ (eq. 38).
    let mut var_x = 0.0;
    let mut cov = [[0.0f64; 2]; 2];
    for (x, y) in sources.iter().zip(targets) {
        let dx = [x[0] - mx[0], x[1] - mx[1]];
        let dy = [y[0] - my[0], y[1] - my[1]];
        var_x += dx[0] * dx[0] + dx[1] * dx[1];
        for (r, row) in cov.iter_mut().enumerate() {
            for (c, v) in row.iter_mut().enumerate() {
                *v += dy[r] * dx[c];
            }
        }
    }
    var_x /= nf;
    for v in cov.iter_mut().flatten() {
        *v /= nf;
    }
    // tr(Rᵀ Σ) = cos θ (Σ00 + Σ11) + sin θ (Σ10 − Σ01) is largest at this angle.
    let (p, q) = (cov[0][0] + cov[1][1], cov[1][0] - cov[0][1]);
    let trace = p.hypot(q);
    let (cos, sin) = if trace > 0.0 {
        (p / trace, q / trace)
    } else {
        (1.0, 0.0)
    };
    let rotation = [[cos, -sin], [sin, cos]];
    // c = tr(DS) / σ_x² (eq. 42); var_x > 0 because the sources are distinct.
    let scale = if allow_scale { trace / var_x } else { 1.0 };
    let apply = |s: [f64; 2]| {
        [
            scale * (rotation[0][0] * s[0] + rotation[0][1] * s[1]),
            scale * (rotation[1][0] * s[0] + rotation[1][1] * s[1]),
        ]
    };
    let rm = apply(mx);
    let translation = [my[0] - rm[0], my[1] - rm[1]];
    let residuals: Vec<f64> = sources
        .iter()
        .zip(targets)
        .map(|(s, t)| {
            let f = apply(*s);
            (f[0] + translation[0] - t[0]).hypot(f[1] + translation[1] - t[1])
        })
        .collect();
    let rms = (residuals.iter().map(|r| r * r).sum::<f64>() / nf).sqrt();
    Ok(RigidFit {
        rotation,
        scale,
        translation,
        residuals,
        rms,
    })
}

/// The lexicographically first pair (a < b) of points within [`COINCIDENT_TOLERANCE_PX`].
/// Sort-and-sweep on x, so O(n log n) unless many points share an x.
fn first_coincident_pair(p: &[[f64; 2]]) -> Option<(usize, usize)> {
    let mut order: Vec<usize> = (0..p.len()).collect();
    order.sort_by(|&i, &j| p[i][0].total_cmp(&p[j][0]));
    let mut best: Option<(usize, usize)> = None;
    for (k, &i) in order.iter().enumerate() {
        for &j in &order[k + 1..] {
            if p[j][0] - p[i][0] > COINCIDENT_TOLERANCE_PX {
                break;
            }
            if (p[j][0] - p[i][0]).hypot(p[j][1] - p[i][1]) <= COINCIDENT_TOLERANCE_PX {
                let pair = (i.min(j), i.max(j));
                if best.is_none_or(|b| pair < b) {
                    best = Some(pair);
                }
            }
        }
    }
    best
}

/// The minimum width of the point set (the narrowest strip that holds every point) and its
/// diameter (largest distance between two points). The narrowest strip has one side along an
/// edge of the convex hull, so try each hull edge; O(h²) for h hull vertices, which is small
/// for fit-sized inputs. Width 0 when the hull is degenerate.
fn width_and_spread(p: &[[f64; 2]]) -> (f64, f64) {
    let hull = convex_hull(p);
    let spread = hull
        .iter()
        .flat_map(|a| hull.iter().map(move |b| (a[0] - b[0]).hypot(a[1] - b[1])))
        .fold(0.0, f64::max);
    if hull.len() < 3 {
        return (0.0, spread);
    }
    let m = hull.len();
    let width = (0..m)
        .map(|e| {
            let (a, b) = (hull[e], hull[(e + 1) % m]);
            let (dx, dy) = (b[0] - a[0], b[1] - a[1]);
            let len = dx.hypot(dy);
            hull.iter()
                .map(|c| ((c[0] - a[0]) * dy - (c[1] - a[1]) * dx).abs() / len)
                .fold(0.0, f64::max)
        })
        .fold(f64::INFINITY, f64::min);
    (width, spread)
}

/// Andrew's monotone chain; strictly convex vertices only (collinear points dropped).
fn convex_hull(p: &[[f64; 2]]) -> Vec<[f64; 2]> {
    use crate::geometry::orientation;
    use std::cmp::Ordering;
    let mut pts: Vec<[f64; 2]> = p.to_vec();
    pts.sort_by(|a, b| a[0].total_cmp(&b[0]).then(a[1].total_cmp(&b[1])));
    pts.dedup();
    if pts.len() < 3 {
        return pts;
    }
    let mut hull: Vec<[f64; 2]> = Vec::with_capacity(2 * pts.len());
    for pass in 0..2 {
        let start = hull.len();
        let seq: Box<dyn Iterator<Item = &[f64; 2]>> = if pass == 0 {
            Box::new(pts.iter())
        } else {
            Box::new(pts.iter().rev())
        };
        for &c in seq {
            while hull.len() >= start + 2
                && orientation(hull[hull.len() - 2], hull[hull.len() - 1], c) != Ordering::Greater
            {
                hull.pop();
            }
            hull.push(c);
        }
        // The last point of each chain starts the other.
        hull.pop();
    }
    hull
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;
    use serde_json::Value;

    fn pairs(v: &Value) -> Vec<[f64; 2]> {
        v.as_array()
            .unwrap()
            .iter()
            .map(|p| [p[0].as_f64().unwrap(), p[1].as_f64().unwrap()])
            .collect()
    }

    /// `apply` is the transform the fit reports: on Umeyama's worked example (below) it takes
    /// (1, 0) to c·R·(1, 0) + t = (0.721·0.832 − 0.8, 0.721·(−0.555) + 0.4) = (−0.2, 0.0),
    /// exactly (3/5 − 4/5, −2/5 + 2/5), and each residual is |apply(source) − target|.
    #[test]
    fn apply_is_the_reported_transform() {
        let (s, d) = (
            [[0.0, 0.0], [1.0, 0.0], [0.0, 2.0]],
            [[0.0, 0.0], [-1.0, 0.0], [0.0, 2.0]],
        );
        let f = fit(&s, &d, true).unwrap();
        let p = f.apply([1.0, 0.0]);
        assert!((p[0] + 0.2).abs() < 1e-12 && p[1].abs() < 1e-12, "{p:?}");
        for ((src, dst), r) in s.iter().zip(&d).zip(&f.residuals) {
            let q = f.apply(*src);
            assert!(((q[0] - dst[0]).hypot(q[1] - dst[1]) - r).abs() < 1e-12);
        }
    }

    /// Umeyama 1991, section IV ("Examples"): sources (0,0), (1,0), (0,2) onto (0,0), (−1,0),
    /// (0,2). det Σ_xy < 0 here, so without the reflection guard the fit would be a reflection;
    /// the paper gives c = 0.721 (= √13/5), R = [[0.832, 0.555], [−0.555, 0.832]]
    /// (= [[3, 2], [−2, 3]]/√13), t = (−0.8, 0.4).
    #[test]
    fn umeyama_worked_example() {
        let fit = fit(
            &[[0.0, 0.0], [1.0, 0.0], [0.0, 2.0]],
            &[[0.0, 0.0], [-1.0, 0.0], [0.0, 2.0]],
            true,
        )
        .unwrap();
        let r13 = 13f64.sqrt();
        assert!((fit.scale - r13 / 5.0).abs() < 1e-12);
        let want = [[3.0 / r13, 2.0 / r13], [-2.0 / r13, 3.0 / r13]];
        let flat = |m: [[f64; 2]; 2]| [m[0][0], m[0][1], m[1][0], m[1][1]];
        for (g, w) in flat(fit.rotation).iter().zip(flat(want)) {
            assert!((g - w).abs() < 1e-12, "{:?}", fit.rotation);
        }
        assert!((fit.translation[0] + 0.8).abs() < 1e-12);
        assert!((fit.translation[1] - 0.4).abs() < 1e-12);
        let det = fit.rotation[0][0] * fit.rotation[1][1] - fit.rotation[0][1] * fit.rotation[1][0];
        assert!((det - 1.0).abs() < 1e-12);
        assert!((fit.rotation_deg() - (-2f64).atan2(3.0).to_degrees()).abs() < 1e-12);
    }

    /// Outside reference: scikit-image 0.26 `SimilarityTransform.from_estimate` (scale allowed)
    /// and `EuclideanTransform.from_estimate` (rigid), which implement Umeyama's method, on
    /// random exact, noisy and mirrored (reflection-guard) cases from gen_geometry.py.
    #[test]
    fn matches_scikit_image() {
        let data: Value = serde_json::from_str(include_str!(concat!(
            env!("CARGO_MANIFEST_DIR"),
            "/../../tests/reference/rigid_umeyama.json"
        )))
        .unwrap();
        let cases = data["cases"].as_array().unwrap();
        assert!(cases.len() >= 40);
        for case in cases {
            let name = case["name"].as_str().unwrap();
            let allow_scale = case["allow_scale"].as_bool().unwrap();
            let f = fit(
                &pairs(&case["sources"]),
                &pairs(&case["targets"]),
                allow_scale,
            )
            .unwrap();
            // matrix = [[s·r00, s·r01, tx], [s·r10, s·r11, ty]]
            for (r, row) in case["matrix"].as_array().unwrap().iter().enumerate() {
                let m: Vec<f64> = row
                    .as_array()
                    .unwrap()
                    .iter()
                    .map(|v| v.as_f64().unwrap())
                    .collect();
                for (c, want) in m[..2].iter().enumerate() {
                    let got = f.scale * f.rotation[r][c];
                    assert!(
                        (got - want).abs() <= 1e-9,
                        "{name} ({allow_scale}) R[{r}][{c}]: {got} vs {want}"
                    );
                }
                let t = f.translation[r];
                assert!(
                    (t - m[2]).abs() <= 1e-9 * m[2].abs().max(1.0),
                    "{name} t[{r}]: {t} vs {}",
                    m[2]
                );
            }
            if !allow_scale {
                assert_eq!(f.scale, 1.0);
            }
            for (g, w) in f
                .residuals
                .iter()
                .zip(case["residuals"].as_array().unwrap())
            {
                assert!(
                    (g - w.as_f64().unwrap()).abs() <= 1e-9 * g.max(1.0),
                    "{name} residual"
                );
            }
        }
    }

    #[test]
    fn refusals() {
        let three = [[0.0, 0.0], [10.0, 0.0], [0.0, 10.0]];
        assert_eq!(
            fit(&three, &three[..2], true),
            Err(FitError::LengthMismatch {
                sources: 3,
                targets: 2
            })
        );
        assert_eq!(
            fit(&[], &[], true),
            Err(FitError::TooFewPoints { count: 0 })
        );
        assert_eq!(
            fit(&three[..1], &three[..1], false),
            Err(FitError::TooFewPoints { count: 1 })
        );
        let dup = [
            [0.0, 0.0],
            [5.0, 5.0],
            [9.0, 1.0],
            [5.0, 5.0 + 5e-10],
            [0.0, 0.0],
        ];
        assert_eq!(
            fit(&dup, &dup, true),
            Err(FitError::CoincidentSources { a: 0, b: 4 })
        );
        let dup = [
            [3.0, 0.0],
            [5.0, 5.0],
            [9.0, 1.0],
            [5.0 - 5e-10, 5.0 + 5e-10],
        ];
        assert_eq!(
            fit(&dup, &dup, true),
            Err(FitError::CoincidentSources { a: 1, b: 3 })
        );
        let near = [[3.0, 0.0], [5.0, 5.0], [9.0, 1.0], [5.0, 5.0 + 3e-9]];
        assert!(fit(&near, &near, true).is_ok());
        // Within 0.5 px of the line y = 0.45: refused; a little further out: fitted.
        let flat = [[0.0, 0.0], [100.0, 0.0], [50.0, 0.9], [20.0, 0.3]];
        assert_eq!(fit(&flat, &flat, true), Err(FitError::CollinearSources));
        let exact_line = [[0.0, 0.0], [1.0, 1.0], [2.0, 2.0]];
        assert_eq!(
            fit(&exact_line, &exact_line, false),
            Err(FitError::CollinearSources)
        );
        let ok = [[0.0, 0.0], [100.0, 0.0], [50.0, 1.2]];
        assert!(fit(&ok, &ok, true).is_ok());
        // Over a 10 px spread the allowance is 0.05 px.
        let small = [[0.0, 0.0], [10.0, 0.0], [5.0, 0.09]];
        assert_eq!(fit(&small, &small, true), Err(FitError::CollinearSources));
        let small = [[0.0, 0.0], [10.0, 0.0], [5.0, 0.11]];
        assert!(fit(&small, &small, true).is_ok());
    }

    #[test]
    fn two_points_and_degenerate_targets() {
        // A seed tray's two corner marks, moved by a pure rotation of 90° (y down) and a shift.
        let src = [[10.0, 20.0], [30.0, 20.0]];
        let dst = [[105.0, 50.0], [105.0, 70.0]];
        let f = fit(&src, &dst, false).unwrap();
        assert!((f.rotation_deg() - 90.0).abs() < 1e-12);
        assert!(f.rms < 1e-12 && f.residuals.len() == 2);
        let g = fit(&src, &[[0.0, 0.0], [0.0, 60.0]], true).unwrap();
        assert!((g.scale - 3.0).abs() < 1e-12 && g.rms < 1e-12);
        // All targets on one point: the least-squares similarity collapses (scale 0, R = I).
        let sq = [[0.0, 0.0], [4.0, 0.0], [4.0, 4.0], [0.0, 4.0]];
        let h = fit(&sq, &[[7.0, 7.0]; 4], true).unwrap();
        assert_eq!(
            (h.scale, h.rotation, h.translation),
            (0.0, [[1.0, 0.0], [0.0, 1.0]], [7.0, 7.0])
        );
        // Rigid: residuals are the corner distances to the centre, rms their quadratic mean.
        let r = fit(&sq, &[[2.0, 2.0]; 4], false).unwrap();
        assert!(r.residuals.iter().all(|v| (v - 8f64.sqrt()).abs() < 1e-12));
        assert!((r.rms - 8f64.sqrt()).abs() < 1e-12);
    }

    proptest! {
        /// Exact similarities are recovered with zero residual, with or without a reflection
        /// nearby; rigid fits of exact rigid moves too.
        #[test]
        fn exact_similarity_has_zero_residual(
            src in prop::collection::vec((-500.0f64..1500.0, -500.0f64..1000.0), 2..12),
            theta in -3.2f64..3.2,
            log_scale in -1.5f64..1.5,
            t in (-800.0f64..800.0, -800.0f64..800.0),
            allow_scale in any::<bool>(),
        ) {
            let src: Vec<[f64; 2]> = src.into_iter().map(|(x, y)| [x, y]).collect();
            let s = if allow_scale { log_scale.exp() } else { 1.0 };
            let (c, n) = (theta.cos(), theta.sin());
            let dst: Vec<[f64; 2]> = src
                .iter()
                .map(|p| [s * (c * p[0] - n * p[1]) + t.0, s * (n * p[0] + c * p[1]) + t.1])
                .collect();
            match fit(&src, &dst, allow_scale) {
                Ok(f) => {
                    prop_assert!(f.rms <= 1e-9, "rms {}", f.rms);
                    prop_assert!((f.scale - s).abs() <= 1e-9 * s);
                    let dtheta = (f.rotation_deg().to_radians() - theta).rem_euclid(std::f64::consts::TAU);
                    prop_assert!(dtheta.min(std::f64::consts::TAU - dtheta) < 1e-9);
                    let det = f.rotation[0][0] * f.rotation[1][1] - f.rotation[0][1] * f.rotation[1][0];
                    prop_assert!((det - 1.0).abs() < 1e-12);
                }
                Err(FitError::CollinearSources | FitError::CoincidentSources { .. }) => {}
                Err(e) => prop_assert!(false, "{e}"),
            }
        }
    }
}
