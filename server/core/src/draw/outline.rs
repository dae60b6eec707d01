//! Dashed polygon outlines grown outward: the tolerance band of a region term.

use super::image::Rgba8Image;
use super::primitives::Pen;
use super::raster::{FillRule, Patch, band_coverage, finite};

/// Arc-length bookkeeping for the outline of a polygon grown by `offset`: straight parts
/// follow the edges, and each convex corner adds a circular arc of radius `offset`.
struct Offset<'a> {
    pts: &'a [[f64; 2]],
    offset: f64,
    /// +1 or −1 so that `sign * (dy, −dx)` points out of the polygon.
    sign: f64,
    /// Where the straight part of edge k starts along the grown outline.
    start: Vec<f64>,
    /// Arc length of the corner at vertex k.
    arc: Vec<f64>,
    /// Turning angle at vertex k (positive for convex corners).
    turn: Vec<f64>,
    total: f64,
}

impl<'a> Offset<'a> {
    fn new(pts: &'a [[f64; 2]], offset: f64) -> Self {
        let n = pts.len();
        let area2: f64 = (0..n)
            .map(|k| {
                let (p, q) = (pts[k], pts[(k + 1) % n]);
                p[0] * q[1] - q[0] * p[1]
            })
            .sum();
        let sign = if area2 >= 0.0 { 1.0 } else { -1.0 };
        let dir = |k: usize| {
            let (p, q) = (pts[k % n], pts[(k + 1) % n]);
            [q[0] - p[0], q[1] - p[1]]
        };
        let mut start = Vec::with_capacity(n);
        let mut arc = Vec::with_capacity(n);
        let mut turn = Vec::with_capacity(n);
        let mut s = 0.0;
        for k in 0..n {
            let (a, b) = (dir(k + n - 1), dir(k));
            let t = sign * (a[0] * b[1] - a[1] * b[0]).atan2(a[0] * b[0] + a[1] * b[1]);
            let corner = offset * t.max(0.0);
            turn.push(t);
            arc.push(corner);
            s += corner;
            start.push(s);
            s += b[0].hypot(b[1]);
        }
        Self {
            pts,
            offset,
            sign,
            start,
            arc,
            turn,
            total: s,
        }
    }

    fn normal(&self, k: usize) -> [f64; 2] {
        let n = self.pts.len();
        let (p, q) = (self.pts[k % n], self.pts[(k + 1) % n]);
        let (dx, dy) = (q[0] - p[0], q[1] - p[1]);
        let len = dx.hypot(dy).max(1e-12);
        [self.sign * dy / len, -self.sign * dx / len]
    }

    /// Position along the grown outline of the point nearest to `p` on edge k at parameter t.
    fn position(&self, k: usize, t: f64, p: [f64; 2]) -> f64 {
        let n = self.pts.len();
        let v = if t <= 0.0 {
            Some(k)
        } else if t >= 1.0 {
            Some((k + 1) % n)
        } else {
            None
        };
        let Some(v) = v else {
            let (a, b) = (self.pts[k], self.pts[(k + 1) % n]);
            return self.start[k] + t * (b[0] - a[0]).hypot(b[1] - a[1]);
        };
        // Around a corner: the angle from the previous edge's normal, up to the turn.
        let m = self.normal(v + n - 1);
        let u = [p[0] - self.pts[v][0], p[1] - self.pts[v][1]];
        let phi = self.sign * (m[0] * u[1] - m[1] * u[0]).atan2(m[0] * u[0] + m[1] * u[1]);
        let phi = phi.clamp(0.0, self.turn[v].max(0.0));
        self.start[v] - self.arc[v] + self.offset * phi
    }
}

impl Rgba8Image {
    /// A dashed outline of the polygon `pts` grown outward by `offset` pixels (rounded at
    /// convex corners); with `offset` 0 a dashed outline of the polygon itself. Dashes are
    /// measured along the outline and adjusted so a whole number of them fits.
    pub fn stroke_polygon_dashed(
        &mut self,
        pts: &[[f64; 2]],
        offset: f64,
        dash: f64,
        gap: f64,
        pen: &Pen,
    ) {
        let ok = pts.len() >= 3
            && pts.iter().all(|p| finite(*p))
            && [offset, dash, gap, pen.width, pen.halo]
                .iter()
                .all(|v| v.is_finite() && *v >= 0.0)
            && dash > 0.0
            && pen.width > 0.0;
        if !ok {
            return;
        }
        let geo = Offset::new(pts, offset);
        let period = dash + gap;
        let count = (geo.total / period).round().max(1.0);
        let (period, dash) = if gap > 0.0 && geo.total > period {
            let p = geo.total / count;
            (p, dash * p / period)
        } else {
            (f64::INFINITY, f64::INFINITY)
        };
        let passes = [
            (pen.width / 2.0 + pen.halo, pen.halo_color, pen.halo > 0.0),
            (pen.width / 2.0, pen.color, true),
        ];
        for (hw, color, wanted) in passes {
            if !wanted {
                continue;
            }
            let reach = offset + hw + 1.0;
            let (lo, hi) = Patch::bounds(pts, reach);
            let Some(mut patch) = Patch::over(self, lo, hi) else {
                continue;
            };
            let inside = patch.inside_mask(pts, FillRule::NonZero);
            let mut dist = vec![f32::INFINITY; patch.v.len()];
            let mut along = vec![0.0f64; patch.v.len()];
            let (x0, y0, w) = (patch.x0, patch.y0, patch.w);
            for k in 0..pts.len() {
                let (a, b) = (pts[k], pts[(k + 1) % pts.len()]);
                let (dx, dy) = (b[0] - a[0], b[1] - a[1]);
                let len2 = dx * dx + dy * dy;
                patch.near_segment(a, b, reach, |_, x, y| {
                    let t = if len2 > 0.0 {
                        (((x - a[0]) * dx + (y - a[1]) * dy) / len2).clamp(0.0, 1.0)
                    } else {
                        0.0
                    };
                    let d = (x - a[0] - t * dx).hypot(y - a[1] - t * dy) as f32;
                    let idx = (y as usize - y0) * w + (x as usize - x0);
                    if d < dist[idx] {
                        dist[idx] = d;
                        along[idx] = geo.position(k, t, [x, y]);
                    }
                });
            }
            for (idx, v) in patch.v.iter_mut().enumerate() {
                let d = f64::from(dist[idx]);
                let s = if inside[idx] { -d } else { d };
                let mut c = band_coverage((s - offset).abs(), hw);
                if c > 0.0 && period.is_finite() {
                    let p = along[idx].rem_euclid(period);
                    let on: f64 = [-period, 0.0, period]
                        .iter()
                        .map(|k| ((p + 0.5).min(k + dash) - (p - 0.5).max(*k)).max(0.0))
                        .sum();
                    c *= on.min(1.0) as f32;
                }
                *v = c;
            }
            self.blend_patch(&patch, color);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::draw::Color;

    #[test]
    fn grown_square_outline_lies_at_the_offset() {
        let bg = Color::rgb(0, 0, 0);
        let mut img = Rgba8Image::new(60, 60, bg).unwrap();
        let sq = [[20.0, 20.0], [40.0, 20.0], [40.0, 40.0], [20.0, 40.0]];
        let pen = Pen::new(2.0, Color::rgb(255, 255, 255));
        img.stroke_polygon_dashed(&sq, 8.0, 1e9, 0.0, &pen); // one endless dash: solid
        // Straight parts 8 px out; corners rounded with radius 8.
        assert_eq!(img.pixel(30, 12), Some(Color::rgb(255, 255, 255)));
        assert_eq!(img.pixel(48, 30), Some(Color::rgb(255, 255, 255)));
        assert_eq!(img.pixel(30, 30), Some(bg));
        assert_eq!(img.pixel(30, 20), Some(bg));
        let c = 40.0 + 8.0 * std::f64::consts::FRAC_1_SQRT_2;
        assert_eq!(
            img.pixel(c.round() as usize, c.round() as usize)
                .map(|p| p.r > 150),
            Some(true)
        );
        assert_eq!(img.pixel(47, 47), Some(bg));
    }

    #[test]
    fn dashes_follow_the_outline_in_either_winding() {
        let sq = [[20.0, 20.0], [40.0, 20.0], [40.0, 40.0], [20.0, 40.0]];
        let rev: Vec<[f64; 2]> = sq.iter().rev().copied().collect();
        for pts in [&sq[..], &rev[..]] {
            let mut img = Rgba8Image::new(60, 60, Color::rgb(0, 0, 0)).unwrap();
            img.stroke_polygon_dashed(
                pts,
                6.0,
                5.0,
                5.0,
                &Pen::new(2.0, Color::rgb(255, 255, 255)),
            );
            // Walk the top straight part: lit and dark stretches alternate.
            let row: Vec<bool> = (20..=40)
                .map(|i| img.pixel(i, 14).unwrap().r > 128)
                .collect();
            let flips = row.windows(2).filter(|w| w[0] != w[1]).count();
            assert!(flips >= 3, "{row:?}");
        }
    }

    #[test]
    fn odd_input_is_skipped() {
        let mut img = Rgba8Image::new(10, 10, Color::rgb(0, 0, 0)).unwrap();
        let before = img.clone();
        let pen = Pen::new(1.0, Color::rgb(255, 0, 0));
        img.stroke_polygon_dashed(
            &[[0.0, 0.0], [f64::NAN, 1.0], [3.0, 3.0]],
            1.0,
            2.0,
            2.0,
            &pen,
        );
        img.stroke_polygon_dashed(&[[0.0, 0.0], [5.0, 1.0]], 1.0, 2.0, 2.0, &pen);
        img.stroke_polygon_dashed(&[[0.0, 0.0], [5.0, 1.0], [3.0, 3.0]], -1.0, 2.0, 2.0, &pen);
        assert_eq!(img, before);
        // Degenerate but finite: repeated points, zero area.
        img.stroke_polygon_dashed(&[[2.0, 2.0], [2.0, 2.0], [2.0, 2.0]], 2.0, 2.0, 2.0, &pen);
        img.stroke_polygon_dashed(&[[-1e9, 0.0], [1e9, 0.0], [0.0, 1e9]], 2.0, 2.0, 2.0, &pen);
    }
}
