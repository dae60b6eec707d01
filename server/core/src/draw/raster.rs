//! Anti-aliased coverage of strokes, discs, rings and polygons (the primitives in
//! `primitives.rs` are built on it).
//!
//! A shape is first rasterised into a [`Patch`] of coverage values (0..=1) over the pixels it can
//! touch, then blended once. Rasterising a whole shape before blending keeps joints of a polyline
//! or the shaft and head of an arrow from blending twice where they overlap.

use std::f64::consts::FRAC_1_SQRT_2;

use super::image::Rgba8Image;

/// How a polygon that winds around some points more than once is filled.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum FillRule {
    /// A point is inside when a ray from it crosses the outline an odd number of times:
    /// a self-crossing star has a hole in the middle.
    EvenOdd,
    /// A point is inside when the outline winds around it at least once in total, counting
    /// direction: a self-crossing star is filled solid. The usual choice for goal regions,
    /// which are simple polygons anyway, so both rules agree there.
    #[default]
    NonZero,
}

/// Length of the overlap of the interval [d − hw, d + hw] with the pixel's [−½, ½]: the exact
/// coverage of a band of half width `hw` whose centre line is `d` pixels from the pixel centre,
/// when the band runs along a pixel axis.
pub(crate) fn band_coverage(d: f64, hw: f64) -> f32 {
    ((d + hw).min(0.5) - (d - hw).max(-0.5)).clamp(0.0, 1.0) as f32
}

pub(crate) fn finite(p: [f64; 2]) -> bool {
    p[0].is_finite() && p[1].is_finite()
}

pub(crate) fn segment_distance(p: [f64; 2], a: [f64; 2], b: [f64; 2]) -> f64 {
    let (dx, dy) = (b[0] - a[0], b[1] - a[1]);
    let len2 = dx * dx + dy * dy;
    let t = if len2 > 0.0 {
        (((p[0] - a[0]) * dx + (p[1] - a[1]) * dy) / len2).clamp(0.0, 1.0)
    } else {
        0.0
    };
    (p[0] - a[0] - t * dx).hypot(p[1] - a[1] - t * dy)
}

/// Scanlines per pixel row when filling polygons.
pub(crate) const SUBROWS: usize = 8;

/// Where the horizontal line at `y` crosses the polygon's edges, sorted by x, each with +1 for
/// an edge going down and −1 for one going up. Half-open in y, so a vertex on the line counts once.
pub(crate) fn crossings(pts: &[[f64; 2]], y: f64, xs: &mut Vec<(f64, i32)>) {
    xs.clear();
    for k in 0..pts.len() {
        let (p, q) = (pts[k], pts[(k + 1) % pts.len()]);
        if (p[1] <= y) != (q[1] <= y) {
            let t = (y - p[1]) / (q[1] - p[1]);
            xs.push((p[0] + t * (q[0] - p[0]), if q[1] > p[1] { 1 } else { -1 }));
        }
    }
    xs.sort_by(|a, b| a.0.total_cmp(&b.0));
}

/// Exact area of the pixel centred at (x, y) inside the disc: the integral over the pixel's
/// columns of the disc's vertical chord clipped to the pixel's rows, in closed form.
fn disc_pixel_coverage(x: f64, y: f64, c: [f64; 2], r: f64) -> f32 {
    let (lo, hi) = (y - 0.5, y + 0.5);
    let (ua, ub) = (x - 0.5 - c[0], x + 0.5 - c[0]);
    let top = clipped_chord_integral(1.0, ua, ub, c[1], r, lo, hi);
    let bottom = clipped_chord_integral(-1.0, ua, ub, c[1], r, lo, hi);
    (top - bottom).clamp(0.0, 1.0) as f32
}

/// ∫ clamp(cy + sign · √(r² − u²), lo, hi) du over [ua, ub], with the root taken as 0 where
/// |u| > r. Split where the curve meets `lo`, `hi` or the disc's sides; on each piece the
/// integrand is a constant or the circle, whose integral is ½ (u √(r² − u²) + r² asin(u / r)).
fn clipped_chord_integral(sign: f64, ua: f64, ub: f64, cy: f64, r: f64, lo: f64, hi: f64) -> f64 {
    let h = |u: f64| (r * r - u * u).max(0.0).sqrt();
    let prim = |u: f64| {
        let u = u.clamp(-r, r);
        0.5 * (u * h(u) + r * r * (u / r).clamp(-1.0, 1.0).asin())
    };
    let mut cuts = vec![ua, ub, -r, r];
    for level in [lo, hi] {
        let k = sign * (level - cy);
        if (0.0..=r).contains(&k) {
            let u = (r * r - k * k).sqrt();
            cuts.extend([-u, u]);
        }
    }
    cuts.retain(|u| *u >= ua && *u <= ub);
    cuts.sort_by(f64::total_cmp);
    let mut sum = 0.0;
    for w in cuts.windows(2) {
        let (p, q) = (w[0], w[1]);
        if q <= p {
            continue;
        }
        let v = cy + sign * h(0.5 * (p + q));
        sum += if v >= hi {
            hi * (q - p)
        } else if v <= lo {
            lo * (q - p)
        } else {
            cy * (q - p) + sign * (prim(q) - prim(p))
        };
    }
    sum
}

/// Per-pixel values over the pixels of a clipped rectangle of the image.
#[derive(Debug, Clone)]
pub(crate) struct Patch {
    pub x0: usize,
    pub y0: usize,
    pub w: usize,
    pub h: usize,
    pub v: Vec<f32>,
}

impl Patch {
    /// The pixels whose squares meet the box `min..max`, clipped to a `width × height` image;
    /// `None` when nothing is left or the box is not finite.
    pub fn covering(
        width: usize,
        height: usize,
        min: [f64; 2],
        max: [f64; 2],
        init: f32,
    ) -> Option<Patch> {
        if !finite(min) || !finite(max) {
            return None;
        }
        let range = |lo: f64, hi: f64, n: usize| {
            let a = (lo - 0.5).ceil().max(0.0);
            let b = (hi + 0.5).floor().min(n as f64 - 1.0);
            (a <= b).then_some((a as usize, b as usize))
        };
        let (i0, i1) = range(min[0], max[0], width)?;
        let (j0, j1) = range(min[1], max[1], height)?;
        let (w, h) = (i1 - i0 + 1, j1 - j0 + 1);
        Some(Patch {
            x0: i0,
            y0: j0,
            w,
            h,
            v: vec![init; w * h],
        })
    }

    /// Same, for an image.
    pub fn over(img: &Rgba8Image, min: [f64; 2], max: [f64; 2]) -> Option<Patch> {
        Self::covering(img.width(), img.height(), min, max, 0.0)
    }

    /// The box of points within `r` of all of `pts`.
    pub fn bounds(pts: &[[f64; 2]], r: f64) -> ([f64; 2], [f64; 2]) {
        let mut lo = [f64::INFINITY; 2];
        let mut hi = [f64::NEG_INFINITY; 2];
        for p in pts {
            for k in 0..2 {
                lo[k] = lo[k].min(p[k] - r);
                hi[k] = hi[k].max(p[k] + r);
            }
        }
        (lo, hi)
    }

    /// Calls `f(value, x, y)` for every pixel of the patch whose centre may lie within `reach`
    /// of the segment `a`–`b` (a superset, walked row by row so the work follows the length of
    /// the segment, not the area of its bounding box).
    pub fn near_segment(
        &mut self,
        a: [f64; 2],
        b: [f64; 2],
        reach: f64,
        mut f: impl FnMut(&mut f32, f64, f64),
    ) {
        let (lo, hi) = Patch::bounds(&[a, b], reach);
        let j_lo = (lo[1].ceil().max(self.y0 as f64)) as usize;
        let j_hi = hi[1].floor().min((self.y0 + self.h) as f64 - 1.0);
        if j_hi.is_nan() || j_hi < j_lo as f64 {
            return;
        }
        let dy = b[1] - a[1];
        for j in j_lo..=(j_hi as usize) {
            let y = j as f64;
            // Parameters t where the segment is within `reach` of this row, vertically.
            let (t0, t1) = if dy.abs() < 1e-12 {
                (0.0, 1.0)
            } else {
                let u = (y - reach - a[1]) / dy;
                let v = (y + reach - a[1]) / dy;
                (u.min(v).max(0.0), u.max(v).min(1.0))
            };
            if t0 > t1 {
                continue;
            }
            let xa = a[0] + t0 * (b[0] - a[0]);
            let xb = a[0] + t1 * (b[0] - a[0]);
            let x_lo = (xa.min(xb) - reach).ceil().max(self.x0 as f64);
            let x_hi = (xa.max(xb) + reach)
                .floor()
                .min((self.x0 + self.w) as f64 - 1.0);
            if x_hi.is_nan() || x_lo.is_nan() || x_hi < x_lo {
                continue;
            }
            let row = (j - self.y0) * self.w;
            for i in (x_lo as usize)..=(x_hi as usize) {
                f(&mut self.v[row + i - self.x0], i as f64, y);
            }
        }
    }

    /// Coverage of a round-capped band of half width `hw` along `a`–`b`, merged by maximum.
    ///
    /// Along the straight part a pixel's coverage follows from its distance to the centre
    /// line; near the round ends, where that estimate is poor, the pixel is sampled 8 × 8.
    pub fn max_capsule(&mut self, a: [f64; 2], b: [f64; 2], hw: f64) {
        let near_end = hw + 0.75;
        self.near_segment(a, b, hw + 1.0, |v, x, y| {
            let d = segment_distance([x, y], a, b);
            if d >= hw + FRAC_1_SQRT_2 {
                return;
            }
            let end = (x - a[0]).hypot(y - a[1]).min((x - b[0]).hypot(y - b[1]));
            let c = if end < near_end {
                let mut hits = 0u32;
                for sj in 0..8 {
                    for si in 0..8 {
                        let sx = x - 0.5 + (si as f64 + 0.5) / 8.0;
                        let sy = y - 0.5 + (sj as f64 + 0.5) / 8.0;
                        hits += u32::from(segment_distance([sx, sy], a, b) <= hw);
                    }
                }
                hits as f32 / 64.0
            } else {
                band_coverage(d, hw)
            };
            *v = v.max(c);
        });
    }

    /// Coverage of a disc of radius `r`, merged by maximum; exact (the pixels the rim passes
    /// through get their area inside the disc in closed form).
    pub fn max_disc(&mut self, c: [f64; 2], r: f64) {
        self.for_each(|v, x, y| {
            let d = (x - c[0]).hypot(y - c[1]);
            let cov = if d <= r - FRAC_1_SQRT_2 {
                1.0
            } else if d >= r + FRAC_1_SQRT_2 {
                0.0
            } else {
                disc_pixel_coverage(x, y, c, r)
            };
            *v = v.max(cov);
        });
    }

    /// Coverage of a ring of radius `r` and half width `hw`; dashed when `dash` is
    /// `Some((on, off))` (lengths along the circle, adjusted so a whole number of dashes fits).
    pub fn max_ring(&mut self, c: [f64; 2], r: f64, hw: f64, dash: Option<(f64, f64)>) {
        let dash = dash.and_then(|(on, off)| {
            let circ = std::f64::consts::TAU * r;
            let nominal = on + off;
            if r < 1.0 || on <= 0.0 || off <= 0.0 || nominal >= circ {
                return None;
            }
            let period = circ / (circ / nominal).round().max(1.0);
            Some((on * period / nominal, period))
        });
        self.for_each(|v, x, y| {
            let d = (x - c[0]).hypot(y - c[1]);
            let off = (d - r).abs();
            if off > hw + 1.0 {
                return;
            }
            let mut cov = band_coverage(off, hw);
            if let Some((on, period)) = dash {
                // Arc length from the leftmost point, clockwise on screen.
                let s = ((y - c[1]).atan2(x - c[0]) + std::f64::consts::PI) * r;
                let p = s.rem_euclid(period);
                let along = [-period, 0.0, period]
                    .iter()
                    .map(|k| {
                        let (lo, hi) = (k + 0.0, k + on);
                        ((p + 0.5).min(hi) - (p - 0.5).max(lo)).max(0.0)
                    })
                    .sum::<f64>()
                    .min(1.0);
                cov *= along as f32;
            }
            *v = v.max(cov);
        });
    }

    /// Coverage of a filled polygon grown outward by `grow` pixels, merged by maximum.
    ///
    /// Each pixel row is cut into [`SUBROWS`] scanlines; on each, the spans inside the polygon
    /// (by `rule`) add their exact horizontal overlap with each pixel. So coverage is exact
    /// across x, in steps of 1/8 across y, and slivers thinner than a pixel come out faint
    /// rather than half-covered. Growing adds round-capped bands along the edges (the polygon
    /// dilated by a disc), which is how arrow heads get their halo.
    pub fn max_polygon(&mut self, pts: &[[f64; 2]], rule: FillRule, grow: f64) {
        if pts.len() < 3 {
            return;
        }
        let mut acc = vec![0.0f32; self.v.len()];
        let lo = self.x0 as f64 - 0.5;
        let hi = (self.x0 + self.w) as f64 - 0.5;
        let weight = 1.0 / SUBROWS as f64;
        let mut xs: Vec<(f64, i32)> = Vec::new();
        for jj in 0..self.h {
            let row = &mut acc[jj * self.w..(jj + 1) * self.w];
            for k in 0..SUBROWS {
                let y = (self.y0 + jj) as f64 - 0.5 + (k as f64 + 0.5) * weight;
                crossings(pts, y, &mut xs);
                let (mut winding, mut count) = (0i32, 0u32);
                for n in 0..xs.len().saturating_sub(1) {
                    winding += xs[n].1;
                    count += 1;
                    let inside = match rule {
                        FillRule::EvenOdd => count % 2 == 1,
                        FillRule::NonZero => winding != 0,
                    };
                    let (a, b) = (xs[n].0.max(lo), xs[n + 1].0.min(hi));
                    if !inside || a.is_nan() || b.is_nan() || a >= b {
                        continue;
                    }
                    let first = ((a + 0.5).floor() as usize).saturating_sub(self.x0);
                    let last =
                        (((b + 0.5).floor() as usize).saturating_sub(self.x0)).min(self.w - 1);
                    for (ii, cell) in row.iter_mut().enumerate().take(last + 1).skip(first) {
                        let c = (self.x0 + ii) as f64;
                        let overlap = (b.min(c + 0.5) - a.max(c - 0.5)).max(0.0);
                        *cell += (overlap * weight) as f32;
                    }
                }
            }
        }
        for (v, a) in self.v.iter_mut().zip(&acc) {
            *v = v.max(a.min(1.0));
        }
        if grow > 0.0 {
            for k in 0..pts.len() {
                self.max_capsule(pts[k], pts[(k + 1) % pts.len()], grow);
            }
        }
    }

    /// Whether each pixel centre of the patch is inside the polygon, by scanlines.
    pub fn inside_mask(&self, pts: &[[f64; 2]], rule: FillRule) -> Vec<bool> {
        let mut inside = vec![false; self.v.len()];
        let mut xs: Vec<(f64, i32)> = Vec::new();
        for jj in 0..self.h {
            let y = (self.y0 + jj) as f64;
            crossings(pts, y, &mut xs);
            let (mut next, mut winding, mut count) = (0usize, 0i32, 0u32);
            for ii in 0..self.w {
                let x = (self.x0 + ii) as f64;
                while next < xs.len() && xs[next].0 < x {
                    winding += xs[next].1;
                    count += 1;
                    next += 1;
                }
                inside[jj * self.w + ii] = match rule {
                    FillRule::EvenOdd => count % 2 == 1,
                    FillRule::NonZero => winding != 0,
                };
            }
        }
        inside
    }

    /// Keeps the coverage only on diagonal stripes (down to the right, 45°) `spacing` pixels
    /// apart and `line` pixels wide.
    pub fn mul_hatch(&mut self, spacing: f64, line: f64) {
        let hw = line / 2.0;
        self.for_each(|v, x, y| {
            let u = (x - y) * std::f64::consts::FRAC_1_SQRT_2;
            let p = u.rem_euclid(spacing);
            let d = p.min(spacing - p);
            *v *= band_coverage(d, hw);
        });
    }

    /// Adds the exact coverage of the axis-aligned box `[x0, x1] × [y0, y1]`; boxes that do not
    /// overlap add up exactly (glyph cells).
    pub fn add_box(&mut self, min: [f64; 2], max: [f64; 2]) {
        self.boxed(min, max, |v, c| *v = (*v + c).min(1.0));
    }

    /// Merges the coverage of a box by maximum (overlapping halo boxes).
    pub fn max_box(&mut self, min: [f64; 2], max: [f64; 2]) {
        self.boxed(min, max, |v, c| *v = v.max(c));
    }

    fn boxed(&mut self, min: [f64; 2], max: [f64; 2], mut f: impl FnMut(&mut f32, f32)) {
        let Some(sub) = Patch::covering(self.x0 + self.w, self.y0 + self.h, min, max, 0.0) else {
            return;
        };
        let over = |c: f64, lo: f64, hi: f64| ((c + 0.5).min(hi) - (c - 0.5).max(lo)).max(0.0);
        for j in sub.y0.max(self.y0)..sub.y0 + sub.h {
            let cy = over(j as f64, min[1], max[1]);
            for i in sub.x0.max(self.x0)..sub.x0 + sub.w {
                let c = (cy * over(i as f64, min[0], max[0])) as f32;
                if c > 0.0 {
                    f(&mut self.v[(j - self.y0) * self.w + i - self.x0], c);
                }
            }
        }
    }

    /// Calls `f(value, x, y)` on every pixel of the patch.
    pub fn for_each(&mut self, mut f: impl FnMut(&mut f32, f64, f64)) {
        for jj in 0..self.h {
            let y = (self.y0 + jj) as f64;
            for ii in 0..self.w {
                f(&mut self.v[jj * self.w + ii], (self.x0 + ii) as f64, y);
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    /// Coverage by brute force: the share of an n × n grid of sample points inside the pixel.
    fn sampled(i: usize, j: usize, n: usize, inside: impl Fn(f64, f64) -> bool) -> f64 {
        let mut hits = 0;
        for a in 0..n {
            for b in 0..n {
                let x = i as f64 - 0.5 + (a as f64 + 0.5) / n as f64;
                let y = j as f64 - 0.5 + (b as f64 + 0.5) / n as f64;
                hits += usize::from(inside(x, y));
            }
        }
        hits as f64 / (n * n) as f64
    }

    #[test]
    fn disc_areas_add_up_exactly() {
        for (c, r) in [
            ([10.0, 10.0], 3.0),
            ([10.3, 9.6], 0.3),
            ([9.71, 10.22], 5.55),
        ] {
            let mut p = Patch::covering(21, 21, [0.0, 0.0], [20.0, 20.0], 0.0).unwrap();
            p.max_disc(c, r);
            let total: f64 = p.v.iter().map(|v| f64::from(*v)).sum();
            let want = std::f64::consts::PI * r * r;
            assert!(
                (total - want).abs() < 1e-4 * want.max(1.0),
                "r {r}: {total} vs {want}"
            );
        }
        // A quarter of a disc centred on a pixel corner, in that pixel: π r² / 4 for r ≤ ½.
        assert!(
            (disc_pixel_coverage(0.0, 0.0, [0.5, 0.5], 0.4) as f64 - 0.04 * std::f64::consts::PI)
                .abs()
                < 1e-6
        );
    }

    proptest! {
        #[test]
        fn disc_coverage_matches_sampling(cx in 5.0..15.0f64, cy in 5.0..15.0f64, r in 0.8..4.0f64) {
            let mut p = Patch::covering(20, 20, [0.0, 0.0], [19.0, 19.0], 0.0).unwrap();
            p.max_disc([cx, cy], r);
            for j in 0..20 {
                for i in 0..20 {
                    let s = sampled(i, j, 32, |x, y| (x - cx).hypot(y - cy) <= r);
                    let fast = f64::from(p.v[j * 20 + i]);
                    prop_assert!((fast - s).abs() < 0.05, "({}, {}) fast {} sampled {}", i, j, fast, s);
                }
            }
        }

        #[test]
        fn polygon_coverage_matches_sampling(
            pts in proptest::collection::vec((1.0..19.0f64, 1.0..19.0f64), 3..7),
            even_odd in any::<bool>(),
        ) {
            let pts: Vec<[f64; 2]> = pts.into_iter().map(|(x, y)| [x, y]).collect();
            let rule = if even_odd { FillRule::EvenOdd } else { FillRule::NonZero };
            let mut p = Patch::covering(20, 20, [0.0, 0.0], [19.0, 19.0], 0.0).unwrap();
            p.max_polygon(&pts, rule, 0.0);
            for j in 0..20 {
                for i in 0..20 {
                    let s = sampled(i, j, 32, |x, y| winding_inside(&pts, x, y, rule));
                    let fast = f64::from(p.v[j * 20 + i]);
                    // Exact across x, 1/8 steps across y; the sampled reference has its own error.
                    prop_assert!((fast - s).abs() < 0.16, "({}, {}) fast {} sampled {}", i, j, fast, s);
                }
            }
        }

        #[test]
        fn line_coverage_matches_sampling(
            ax in 2.0..18.0f64, ay in 2.0..18.0f64, bx in 2.0..18.0f64, by in 2.0..18.0f64,
            w in 1.0..4.0f64,
        ) {
            let mut p = Patch::covering(20, 20, [0.0, 0.0], [19.0, 19.0], 0.0).unwrap();
            p.max_capsule([ax, ay], [bx, by], w / 2.0);
            for j in 0..20 {
                for i in 0..20 {
                    let s = sampled(i, j, 24, |x, y| segment_distance([x, y], [ax, ay], [bx, by]) <= w / 2.0);
                    let fast = f64::from(p.v[j * 20 + i]);
                    prop_assert!((fast - s).abs() < 0.12, "({}, {}) fast {} sampled {}", i, j, fast, s);
                }
            }
        }
    }

    /// Pixel coverages from shapely's exact intersection areas (tests/reference/gen_draw.py).
    #[test]
    fn coverage_matches_shapely_areas() {
        let text = include_str!(concat!(
            env!("CARGO_MANIFEST_DIR"),
            "/../../tests/reference/draw_coverage.json"
        ));
        let doc: serde_json::Value = serde_json::from_str(text).unwrap();
        let (w, h) = (
            doc["width"].as_u64().unwrap() as usize,
            doc["height"].as_u64().unwrap() as usize,
        );
        let pt = |v: &serde_json::Value| [v[0].as_f64().unwrap(), v[1].as_f64().unwrap()];
        for case in doc["cases"].as_array().unwrap() {
            let mut p =
                Patch::covering(w, h, [0.0, 0.0], [w as f64 - 1.0, h as f64 - 1.0], 0.0).unwrap();
            let kind = case["kind"].as_str().unwrap();
            // Tolerances: discs are exact; polygons exact across x and in 1/8 steps across y;
            // strokes estimate an edge pixel from its distance to the centre line.
            let (tol_px, tol_total) = match kind {
                "disc" => {
                    p.max_disc(pt(&case["center"]), case["radius"].as_f64().unwrap());
                    (1e-3, 1e-4)
                }
                "polygon" => {
                    let pts: Vec<[f64; 2]> =
                        case["points"].as_array().unwrap().iter().map(pt).collect();
                    p.max_polygon(&pts, FillRule::NonZero, 0.0);
                    (0.07, 0.005)
                }
                _ => {
                    let hw = case["width"].as_f64().unwrap() / 2.0;
                    p.max_capsule(pt(&case["from"]), pt(&case["to"]), hw);
                    (0.06, 0.005)
                }
            };
            let (mut worst, mut ours, mut theirs) = (0.0f64, 0.0, 0.0);
            for j in 0..h {
                for i in 0..w {
                    let want = case["coverage"][j][i].as_f64().unwrap();
                    let got = f64::from(p.v[j * w + i]);
                    worst = worst.max((got - want).abs());
                    ours += got;
                    theirs += want;
                }
            }
            let rel = (ours - theirs).abs() / theirs;
            eprintln!("{kind}: worst pixel {worst:.4}, total {ours:.3} vs {theirs:.3} ({rel:.4})");
            assert!(worst <= tol_px, "{kind}: worst pixel error {worst}");
            assert!(rel <= tol_total, "{kind}: area {ours} vs {theirs}");
        }
    }

    /// The slow, obvious point-in-polygon test for the property tests.
    fn winding_inside(pts: &[[f64; 2]], x: f64, y: f64, rule: FillRule) -> bool {
        let mut winding = 0;
        let mut crossings = 0;
        for k in 0..pts.len() {
            let (p, q) = (pts[k], pts[(k + 1) % pts.len()]);
            if (p[1] <= y) != (q[1] <= y) {
                let xc = p[0] + (y - p[1]) * (q[0] - p[0]) / (q[1] - p[1]);
                if xc < x {
                    crossings += 1;
                    winding += if q[1] > p[1] { 1 } else { -1 };
                }
            }
        }
        match rule {
            FillRule::EvenOdd => crossings % 2 == 1,
            FillRule::NonZero => winding != 0,
        }
    }
}
