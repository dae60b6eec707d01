//! Anti-aliased coverage of strokes, discs, rings and polygons, and the primitives built on it.
//!
//! A shape is first rasterised into a [`Patch`] of coverage values (0..=1) over the pixels it can
//! touch, then blended once. Rasterising a whole shape before blending keeps joints of a polyline
//! or the shaft and head of an arrow from blending twice where they overlap.

use std::f64::consts::FRAC_1_SQRT_2;

use super::image::{Color, Rgba8Image};

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

/// How to stroke a line: its width and colour, and an optional darker band around it
/// (`halo` pixels on each side) that keeps it readable on light and dark frames alike.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Pen {
    /// Full stroke width in pixels.
    pub width: f64,
    /// Stroke colour.
    pub color: Color,
    /// Width of the halo band on each side, in pixels; 0 for none.
    pub halo: f64,
    /// Halo colour.
    pub halo_color: Color,
}

impl Pen {
    /// A plain pen without a halo.
    pub const fn new(width: f64, color: Color) -> Self {
        Self {
            width,
            color,
            halo: 0.0,
            halo_color: Color::rgba(0, 0, 0, 0),
        }
    }
    /// The same pen with a halo of `halo` pixels each side.
    pub const fn with_halo(self, halo: f64, halo_color: Color) -> Self {
        Self {
            halo,
            halo_color,
            ..self
        }
    }
    fn usable(&self) -> bool {
        self.width.is_finite() && self.width > 0.0 && self.halo.is_finite() && self.halo >= 0.0
    }
    /// (half width, colour) of each pass, halo first.
    fn passes(&self) -> impl Iterator<Item = (f64, Color)> {
        let hw = self.width / 2.0;
        let halo = (self.halo > 0.0).then_some((hw + self.halo, self.halo_color));
        halo.into_iter().chain(std::iter::once((hw, self.color)))
    }
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

impl Rgba8Image {
    /// Blends `color` over the patch's pixels, each with its coverage.
    pub(crate) fn blend_patch(&mut self, patch: &Patch, color: Color) {
        for jj in 0..patch.h {
            for ii in 0..patch.w {
                let c = patch.v[jj * patch.w + ii];
                if c > 0.0 {
                    self.blend_pixel(patch.x0 + ii, patch.y0 + jj, color, c);
                }
            }
        }
    }

    /// Strokes each pass of a pen: `shape(patch, half_width)` fills coverage for one pass.
    fn stroke_with(
        &mut self,
        pts: &[[f64; 2]],
        extent: f64,
        pen: &Pen,
        mut shape: impl FnMut(&mut Patch, f64),
    ) {
        if !pen.usable() || pts.is_empty() || !pts.iter().all(|p| finite(*p)) {
            return;
        }
        for (hw, color) in pen.passes() {
            let (lo, hi) = Patch::bounds(pts, extent + hw + 1.0);
            if let Some(mut patch) = Patch::over(self, lo, hi) {
                shape(&mut patch, hw);
                self.blend_patch(&patch, color);
            }
        }
    }

    /// A straight line from `a` to `b` with round caps.
    pub fn stroke_segment(&mut self, a: [f64; 2], b: [f64; 2], pen: &Pen) {
        self.stroke_with(&[a, b], 0.0, pen, |p, hw| p.max_capsule(a, b, hw));
    }

    /// Lines through `pts` in order, back to the first point when `closed`, with round joints.
    pub fn stroke_polyline(&mut self, pts: &[[f64; 2]], closed: bool, pen: &Pen) {
        let n = pts.len();
        let segments = if closed && n > 2 {
            n
        } else {
            n.saturating_sub(1)
        };
        self.stroke_with(pts, 0.0, pen, |p, hw| {
            if n == 1 {
                p.max_capsule(pts[0], pts[0], hw);
            }
            for k in 0..segments {
                p.max_capsule(pts[k], pts[(k + 1) % n], hw);
            }
        });
    }

    /// The outline of a circle.
    pub fn stroke_circle(&mut self, center: [f64; 2], radius: f64, pen: &Pen) {
        if !(radius.is_finite() && radius >= 0.0) {
            return;
        }
        self.stroke_with(&[center], radius, pen, |p, hw| {
            p.max_ring(center, radius, hw, None)
        });
    }

    /// A dashed circle outline (dashes `dash` pixels long with `gap` pixels between, measured
    /// along the circle and adjusted so a whole number of dashes fits); solid if it cannot fit
    /// one dash and gap. Used for tolerance circles.
    pub fn stroke_circle_dashed(
        &mut self,
        center: [f64; 2],
        radius: f64,
        dash: f64,
        gap: f64,
        pen: &Pen,
    ) {
        if !(radius.is_finite() && radius >= 0.0 && dash.is_finite() && gap.is_finite()) {
            return;
        }
        self.stroke_with(&[center], radius, pen, |p, hw| {
            p.max_ring(center, radius, hw, Some((dash, gap)))
        });
    }

    /// A filled, anti-aliased disc.
    pub fn fill_disc(&mut self, center: [f64; 2], radius: f64, color: Color) {
        if !(finite(center) && radius.is_finite() && radius > 0.0) {
            return;
        }
        let (lo, hi) = Patch::bounds(&[center], radius + 1.0);
        if let Some(mut patch) = Patch::over(self, lo, hi) {
            patch.max_disc(center, radius);
            self.blend_patch(&patch, color);
        }
    }

    /// A filled polygon (closed implicitly); translucent colours blend once per pixel even
    /// where the outline crosses itself. Fewer than 3 points draw nothing.
    pub fn fill_polygon(&mut self, pts: &[[f64; 2]], rule: FillRule, color: Color) {
        self.fill_polygon_inner(pts, rule, color, None);
    }

    /// A polygon filled with diagonal stripes `spacing` pixels apart and `line` pixels wide;
    /// a pattern that reads without relying on colour (no-go zones).
    pub fn fill_polygon_hatched(
        &mut self,
        pts: &[[f64; 2]],
        rule: FillRule,
        spacing: f64,
        line: f64,
        color: Color,
    ) {
        if spacing.is_finite() && line.is_finite() && spacing > line && line > 0.0 {
            self.fill_polygon_inner(pts, rule, color, Some((spacing, line)));
        }
    }

    fn fill_polygon_inner(
        &mut self,
        pts: &[[f64; 2]],
        rule: FillRule,
        color: Color,
        hatch: Option<(f64, f64)>,
    ) {
        if pts.len() < 3 || !pts.iter().all(|p| finite(*p)) {
            return;
        }
        let (lo, hi) = Patch::bounds(pts, 1.0);
        if let Some(mut patch) = Patch::over(self, lo, hi) {
            patch.max_polygon(pts, rule, 0.0);
            if let Some((spacing, line)) = hatch {
                patch.mul_hatch(spacing, line);
            }
            self.blend_patch(&patch, color);
        }
    }

    /// An arrow from `from` to `to`: a shaft and a filled triangular head `head` pixels long
    /// whose tip is exactly at `to`. The head shrinks on short arrows.
    pub fn draw_arrow(&mut self, from: [f64; 2], to: [f64; 2], head: f64, pen: &Pen) {
        let (dx, dy) = (to[0] - from[0], to[1] - from[1]);
        let len = dx.hypot(dy);
        if !(len.is_finite() && len > 1e-9 && head.is_finite() && head >= 0.0) {
            return;
        }
        let (ux, uy) = (dx / len, dy / len);
        let h = head.min(len * 0.6).max(pen.width);
        let half = h * 0.5 + pen.width * 0.25;
        let base = [to[0] - ux * h, to[1] - uy * h];
        let tri = [
            to,
            [base[0] - uy * half, base[1] + ux * half],
            [base[0] + uy * half, base[1] - ux * half],
        ];
        // The shaft stops inside the head so its round cap does not poke through the tip.
        let shaft_end = [to[0] - ux * h * 0.7, to[1] - uy * h * 0.7];
        let inner_hw = pen.width / 2.0;
        self.stroke_with(&[from, to, tri[1], tri[2]], 0.0, pen, |p, hw| {
            p.max_capsule(from, shaft_end, hw);
            p.max_polygon(&tri, FillRule::NonZero, hw - inner_hw);
        });
    }

    /// A source marker: a ring of radius `size` with a dot in the middle.
    pub fn draw_source_marker(&mut self, center: [f64; 2], size: f64, pen: &Pen) {
        if !(size.is_finite() && size > 0.0) {
            return;
        }
        let dot = (size * 0.35).max(pen.width * 0.6);
        self.stroke_with(&[center], size, pen, |p, hw| {
            p.max_ring(center, size, hw, None);
            p.max_disc(center, dot + (hw - pen.width / 2.0));
        });
    }

    /// A target marker: a diamond of half-diagonal `size` with a small cross at its centre,
    /// a different shape from the source ring so the two read apart without colour.
    pub fn draw_target_marker(&mut self, center: [f64; 2], size: f64, pen: &Pen) {
        if !(size.is_finite() && size > 0.0) {
            return;
        }
        let [x, y] = center;
        let d = [[x, y - size], [x + size, y], [x, y + size], [x - size, y]];
        let c = size * 0.35;
        self.stroke_with(&[center], size, pen, |p, hw| {
            for k in 0..4 {
                p.max_capsule(d[k], d[(k + 1) % 4], hw);
            }
            p.max_capsule([x - c, y], [x + c, y], hw);
            p.max_capsule([x, y - c], [x, y + c], hw);
        });
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    const BG: Color = Color::rgb(10, 20, 30);
    const INK: Color = Color::rgb(250, 200, 40);

    fn blank(w: usize, h: usize) -> Rgba8Image {
        Rgba8Image::new(w, h, BG).unwrap()
    }

    fn changed(a: &Rgba8Image, b: &Rgba8Image) -> Vec<(usize, usize)> {
        let mut out = Vec::new();
        for j in 0..a.height() {
            for i in 0..a.width() {
                if a.pixel(i, j) != b.pixel(i, j) {
                    out.push((i, j));
                }
            }
        }
        out
    }

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
    fn disc_colours_its_centre_and_nothing_far_away() {
        let mut img = blank(40, 30);
        img.fill_disc([20.0, 15.0], 5.0, INK);
        assert_eq!(img.pixel(20, 15), Some(INK));
        assert_eq!(img.pixel(24, 15), Some(INK));
        for (i, j) in changed(&img, &blank(40, 30)) {
            let d = (i as f64 - 20.0).hypot(j as f64 - 15.0);
            assert!(d < 5.0 + 0.75, "pixel ({i},{j}) at {d}");
        }
        assert_eq!(img.pixel(0, 0), Some(BG));
    }

    #[test]
    fn horizontal_line_covers_the_rows_of_the_pixel_centre_convention() {
        // Width 2 centred on y = 10 covers y in [9, 11]: row 10 fully, rows 9 and 11 half.
        let mut img = blank(30, 20);
        let pen = Pen::new(2.0, Color::rgb(255, 255, 255));
        img.stroke_segment([5.0, 10.0], [25.0, 10.0], &pen);
        assert_eq!(img.pixel(15, 10), Some(Color::rgb(255, 255, 255)));
        let half = img.pixel(15, 9).unwrap();
        assert_eq!((half.r, half.g, half.b), (133, 138, 143)); // (255 + BG) / 2, rounded
        assert_eq!(img.pixel(15, 11), img.pixel(15, 9));
        assert_eq!(img.pixel(15, 8), Some(BG));
        assert_eq!(img.pixel(15, 12), Some(BG));
        // A 1-px line on y = 10.5 (the border between rows) gives two half rows.
        let mut img = blank(30, 20);
        img.stroke_segment([5.0, 10.5], [25.0, 10.5], &Pen::new(1.0, INK));
        assert_eq!(img.pixel(15, 10), img.pixel(15, 11));
        assert_ne!(img.pixel(15, 10), Some(BG));
        assert_eq!(img.pixel(15, 9), Some(BG));
        assert_eq!(img.pixel(15, 12), Some(BG));
    }

    #[test]
    fn axis_aligned_square_polygon_is_pixel_exact() {
        // The square [1.5, 4.5]² covers exactly pixels 2..=4 in both axes.
        let mut img = blank(8, 8);
        let sq = [[1.5, 1.5], [4.5, 1.5], [4.5, 4.5], [1.5, 4.5]];
        img.fill_polygon(&sq, FillRule::EvenOdd, INK);
        for j in 0..8 {
            for i in 0..8 {
                let want = if (2..=4).contains(&i) && (2..=4).contains(&j) {
                    INK
                } else {
                    BG
                };
                assert_eq!(img.pixel(i, j), Some(want), "({i},{j})");
            }
        }
    }

    #[test]
    fn fill_rules_differ_on_a_self_crossing_star() {
        // A pentagram: even-odd leaves the central pentagon empty, non-zero fills it.
        let c = [50.0, 50.0];
        let star: Vec<[f64; 2]> = (0..5)
            .map(|k| {
                let a = -std::f64::consts::FRAC_PI_2 + k as f64 * 2.0 * std::f64::consts::TAU / 5.0;
                [c[0] + 40.0 * a.cos(), c[1] + 40.0 * a.sin()]
            })
            .collect();
        let mut eo = blank(100, 100);
        eo.fill_polygon(&star, FillRule::EvenOdd, INK);
        let mut nz = blank(100, 100);
        nz.fill_polygon(&star, FillRule::NonZero, INK);
        assert_eq!(eo.pixel(50, 50), Some(BG));
        assert_eq!(nz.pixel(50, 50), Some(INK));
        // A tip of the star is filled under both rules.
        assert_eq!(eo.pixel(50, 15), Some(INK));
        assert_eq!(nz.pixel(50, 15), Some(INK));
    }

    #[test]
    fn translucent_fill_blends_once_per_pixel() {
        let mut img = blank(20, 20);
        // Two overlapping triangles in one polygon (non-zero winding 2 in the overlap).
        let pts = [
            [2.0, 2.0],
            [18.0, 2.0],
            [2.0, 18.0],
            [2.0, 2.0],
            [18.0, 2.0],
            [18.0, 18.0],
        ];
        img.fill_polygon(&pts, FillRule::NonZero, Color::rgba(255, 255, 255, 128));
        let once = img.pixel(12, 4).unwrap();
        let mut reference = blank(1, 1);
        reference.blend_pixel(0, 0, Color::rgba(255, 255, 255, 128), 1.0);
        assert_eq!(Some(once), reference.pixel(0, 0));
    }

    #[test]
    fn odd_coordinates_do_not_panic_and_nan_is_skipped() {
        let mut img = blank(16, 12);
        let pen = Pen::new(2.0, INK).with_halo(1.0, Color::rgb(0, 0, 0));
        let nan = f64::NAN;
        let big = 1e300;
        img.stroke_segment([nan, 1.0], [5.0, 5.0], &pen);
        img.fill_disc([5.0, nan], 3.0, INK);
        img.fill_polygon(
            &[[1.0, 1.0], [nan, 2.0], [3.0, 9.0]],
            FillRule::NonZero,
            INK,
        );
        img.stroke_circle([f64::INFINITY, 0.0], 4.0, &pen);
        img.stroke_circle([4.0, 4.0], nan, &pen);
        img.draw_arrow([1.0, 1.0], [nan, nan], 5.0, &pen);
        img.stroke_segment([1.0, 1.0], [5.0, 5.0], &Pen::new(nan, INK));
        assert_eq!(img, blank(16, 12));
        // Far outside: nothing drawn, no panic.
        img.stroke_segment([-1e9, -1e9], [-1e9 + 5.0, -1e9], &pen);
        img.fill_disc([1e12, 1e12], 30.0, INK);
        img.stroke_circle_dashed([-1e7, 5.0], 10.0, 4.0, 3.0, &pen);
        assert_eq!(img, blank(16, 12));
        // Huge but finite shapes through the image: drawn, no panic, bounded work.
        img.stroke_segment([-big, 6.0], [big, 6.0], &pen);
        img.stroke_circle_dashed([8.0, 1e6], 1e6 - 6.0, 5.0, 5.0, &pen);
        img.fill_polygon(
            &[[-big, -big], [big, -big], [0.0, big]],
            FillRule::EvenOdd,
            INK,
        );
        img.draw_arrow([-1e12, 3.0], [8.0, 3.0], 6.0, &pen);
        img.stroke_polyline(&[], true, &pen);
        img.fill_polygon(&[[1.0, 1.0], [2.0, 2.0]], FillRule::NonZero, INK);
    }

    #[test]
    fn dashed_circle_has_gaps_and_solid_circle_does_not() {
        let pen = Pen::new(2.0, INK);
        let mut solid = blank(60, 60);
        solid.stroke_circle([30.0, 30.0], 20.0, &pen);
        let mut dashed = blank(60, 60);
        dashed.stroke_circle_dashed([30.0, 30.0], 20.0, 6.0, 6.0, &pen);
        let ring: Vec<f64> = (0..360)
            .map(|deg| {
                let a = (deg as f64).to_radians();
                let (i, j) = (
                    (30.0 + 20.0 * a.cos()).round() as usize,
                    (30.0 + 20.0 * a.sin()).round() as usize,
                );
                f64::from(dashed.pixel(i, j).unwrap().r)
            })
            .collect();
        let lit = ring.iter().filter(|&&v| v > 200.0).count();
        let dark = ring.iter().filter(|&&v| v < 40.0).count();
        assert!(lit > 100 && dark > 60, "lit {lit}, dark {dark}");
        assert_eq!(solid.pixel(50, 30), Some(INK));
        assert!(changed(&dashed, &blank(60, 60)).len() < changed(&solid, &blank(60, 60)).len());
    }

    #[test]
    fn arrow_tip_reaches_the_target_and_stays_inside_its_bounds() {
        let mut img = blank(60, 40);
        img.draw_arrow([5.0, 20.0], [50.0, 20.0], 10.0, &Pen::new(2.0, INK));
        assert_eq!(img.pixel(47, 20), Some(INK));
        assert_ne!(img.pixel(50, 20), Some(BG));
        assert_eq!(img.pixel(20, 20), Some(INK));
        assert_eq!(img.pixel(52, 20), Some(BG));
        // The head is wider than the shaft.
        assert_ne!(img.pixel(45, 23), Some(BG));
        assert_eq!(img.pixel(20, 23), Some(BG));
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

    #[test]
    fn markers_are_centred() {
        let pen = Pen::new(2.0, INK);
        let mut img = blank(40, 40);
        img.draw_source_marker([20.0, 20.0], 8.0, &pen);
        assert_eq!(img.pixel(20, 20), Some(INK)); // the dot
        assert_eq!(img.pixel(28, 20), Some(INK)); // the ring
        assert_eq!(img.pixel(24, 20), Some(BG)); // between
        let mut img = blank(40, 40);
        img.draw_target_marker([20.0, 20.0], 8.0, &pen);
        assert_eq!(img.pixel(20, 20), Some(INK));
        assert_eq!(img.pixel(20, 12), Some(INK));
        assert_eq!(img.pixel(24, 24), Some(INK)); // on the diamond edge
        assert_eq!(img.pixel(26, 26), Some(BG));
    }

    #[test]
    fn halo_surrounds_the_stroke() {
        let mut img = blank(30, 30);
        let pen = Pen::new(2.0, INK).with_halo(2.0, Color::rgb(0, 0, 0));
        img.stroke_segment([5.0, 15.0], [25.0, 15.0], &pen);
        assert_eq!(img.pixel(15, 15), Some(INK));
        assert_eq!(img.pixel(15, 17), Some(Color::rgb(0, 0, 0)));
        assert_eq!(img.pixel(15, 13), Some(Color::rgb(0, 0, 0)));
        assert_eq!(img.pixel(15, 20), Some(BG));
    }

    #[test]
    fn hatching_leaves_gaps() {
        let mut img = blank(40, 40);
        let sq = [[0.0, 0.0], [39.0, 0.0], [39.0, 39.0], [0.0, 39.0]];
        img.fill_polygon_hatched(&sq, FillRule::NonZero, 8.0, 2.0, INK);
        let n = changed(&img, &blank(40, 40)).len();
        assert!(n > 200 && n < 1000, "{n}");
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
