//! A floating-point painting canvas and signed-distance helpers for the demo scene.

use crate::raster::{Image, Patch, crossings, finite, segment_distance};

/// Linear RGB-ish working colour, 0..=255 per channel (values are sRGB, mixed naively).
pub(crate) type Rgb = [f32; 3];

#[derive(Clone)]
pub(crate) struct Canvas {
    pub w: usize,
    pub h: usize,
    px: Vec<Rgb>,
    /// Samples per pixel along each axis: 1 evaluates a layer at pixel centres; n > 1 averages
    /// it over an n × n grid inside each pixel (the pixel's area), which keeps fine texture
    /// from flickering when a painted thing moves by a fraction of a pixel.
    pub samples: usize,
}

impl Canvas {
    pub fn new(w: usize, h: usize) -> Self {
        Self {
            w,
            h,
            px: vec![[0.0; 3]; w * h],
            samples: 1,
        }
    }

    /// Paints every pixel whose centre lies in the box `lo..hi` with `f(x, y)`, which returns
    /// a colour and an opacity (0..=1) to blend over what is there, or `None` to leave it.
    pub fn layer(
        &mut self,
        lo: [f64; 2],
        hi: [f64; 2],
        mut f: impl FnMut(f64, f64, Rgb) -> Option<(Rgb, f32)>,
    ) {
        let Some(p) = Patch::covering(self.w, self.h, lo, hi) else {
            return;
        };
        if self.samples > 1 {
            let n = self.samples;
            let offsets: Vec<f64> = (0..n).map(|a| (a as f64 + 0.5) / n as f64 - 0.5).collect();
            let share = 1.0 / (n * n) as f32;
            for j in p.y0..p.y0 + p.h {
                for i in p.x0..p.x0 + p.w {
                    let k = j * self.w + i;
                    let under = self.px[k];
                    let mut out = under;
                    for &dy in &offsets {
                        for &dx in &offsets {
                            if let Some((c, a)) = f(i as f64 + dx, j as f64 + dy, under) {
                                let a = a.clamp(0.0, 1.0) * share;
                                for m in 0..3 {
                                    out[m] += (c[m] - under[m]) * a;
                                }
                            }
                        }
                    }
                    self.px[k] = out;
                }
            }
            return;
        }
        for j in p.y0..p.y0 + p.h {
            for i in p.x0..p.x0 + p.w {
                let k = j * self.w + i;
                if let Some((c, a)) = f(i as f64, j as f64, self.px[k]) {
                    let a = a.clamp(0.0, 1.0);
                    if a > 0.0 {
                        let d = &mut self.px[k];
                        for n in 0..3 {
                            d[n] += (c[n] - d[n]) * a;
                        }
                    }
                }
            }
        }
    }

    /// Darkens by `amount` (0..=1) times `strength(x, y)`, for shadows.
    pub fn shade(&mut self, lo: [f64; 2], hi: [f64; 2], strength: impl Fn(f64, f64) -> f32) {
        self.layer(lo, hi, |x, y, under| {
            let s = strength(x, y);
            (s > 0.0).then(|| ([under[0] * 0.35, under[1] * 0.33, under[2] * 0.32], s))
        });
    }

    pub fn into_image(self) -> Image {
        let mut data = Vec::with_capacity(self.w * self.h * 4);
        for p in &self.px {
            for c in p {
                data.push(c.round().clamp(0.0, 255.0) as u8);
            }
            data.push(255);
        }
        Image {
            width: self.w,
            height: self.h,
            data,
        }
    }
}

pub(crate) fn scale(c: Rgb, k: f32) -> Rgb {
    [c[0] * k, c[1] * k, c[2] * k]
}

pub(crate) fn lerp(a: Rgb, b: Rgb, t: f32) -> Rgb {
    let t = t.clamp(0.0, 1.0);
    [
        a[0] + (b[0] - a[0]) * t,
        a[1] + (b[1] - a[1]) * t,
        a[2] + (b[2] - a[2]) * t,
    ]
}

pub(crate) fn smoothstep(e0: f64, e1: f64, x: f64) -> f64 {
    let t = ((x - e0) / (e1 - e0)).clamp(0.0, 1.0);
    t * t * (3.0 - 2.0 * t)
}

/// Opacity of a shape's anti-aliased edge from its signed distance (negative inside).
pub(crate) fn edge(sd: f64) -> f32 {
    (0.5 - sd).clamp(0.0, 1.0) as f32
}

/// A rectangle turned by `angle` radians about its centre; local coordinates have u along
/// the first side and v along the second.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Box2 {
    pub center: [f64; 2],
    pub half: [f64; 2],
    pub angle: f64,
}

impl Box2 {
    /// Local (u, v) of a frame point.
    pub fn local(&self, x: f64, y: f64) -> [f64; 2] {
        let (s, c) = self.angle.sin_cos();
        let (dx, dy) = (x - self.center[0], y - self.center[1]);
        [c * dx + s * dy, -s * dx + c * dy]
    }
    /// Frame point of local (u, v).
    pub fn world(&self, u: f64, v: f64) -> [f64; 2] {
        let (s, c) = self.angle.sin_cos();
        [
            self.center[0] + c * u - s * v,
            self.center[1] + s * u + c * v,
        ]
    }
    /// Signed distance to the box with corners rounded by `r`.
    pub fn sd(&self, x: f64, y: f64, r: f64) -> f64 {
        let [u, v] = self.local(x, y);
        rounded_box_sd(u, v, self.half[0], self.half[1], r)
    }
    /// Corners clockwise on screen from the top-left of the unturned box.
    pub fn corners(&self) -> [[f64; 2]; 4] {
        let [a, b] = self.half;
        [
            self.world(-a, -b),
            self.world(a, -b),
            self.world(a, b),
            self.world(-a, b),
        ]
    }
    /// Bounding box grown by `m`.
    pub fn bounds(&self, m: f64) -> ([f64; 2], [f64; 2]) {
        Patch::bounds(&self.corners(), m)
    }
}

/// Signed distance to an axis-aligned box of half sizes (a, b) with corner radius r.
pub(crate) fn rounded_box_sd(u: f64, v: f64, a: f64, b: f64, r: f64) -> f64 {
    let r = r.min(a).min(b).max(0.0);
    let qx = u.abs() - a + r;
    let qy = v.abs() - b + r;
    qx.max(0.0).hypot(qy.max(0.0)) + qx.max(qy).min(0.0) - r
}

/// Signed distance to a polygon (negative inside, non-zero rule).
pub(crate) fn polygon_sd(pts: &[[f64; 2]], x: f64, y: f64) -> f64 {
    let mut d = f64::INFINITY;
    for k in 0..pts.len() {
        d = d.min(segment_distance([x, y], pts[k], pts[(k + 1) % pts.len()]));
    }
    let mut xs = Vec::new();
    crossings(pts, y, &mut xs);
    let winding: i32 = xs.iter().filter(|c| c.0 < x).map(|c| c.1).sum();
    if winding != 0 && finite([x, y]) {
        -d
    } else {
        d
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn rounded_box_distance() {
        assert_eq!(rounded_box_sd(0.0, 0.0, 4.0, 2.0, 0.0), -2.0);
        assert_eq!(rounded_box_sd(6.0, 0.0, 4.0, 2.0, 0.0), 2.0);
        // A rounded corner is farther than the sharp one.
        let sharp = rounded_box_sd(5.0, 3.0, 4.0, 2.0, 0.0);
        let round = rounded_box_sd(5.0, 3.0, 4.0, 2.0, 1.0);
        assert!(round > sharp);
        let b = Box2 {
            center: [10.0, 10.0],
            half: [4.0, 2.0],
            angle: std::f64::consts::FRAC_PI_2,
        };
        // Turned a quarter: the long side is now vertical.
        assert!(b.sd(10.0, 13.5, 0.0) < 0.0);
        assert!(b.sd(13.5, 10.0, 0.0) > 0.0);
    }

    #[test]
    fn polygon_distance_signs() {
        let sq = [[0.0, 0.0], [4.0, 0.0], [4.0, 4.0], [0.0, 4.0]];
        assert_eq!(polygon_sd(&sq, 2.0, 1.0), -1.0);
        assert_eq!(polygon_sd(&sq, 6.0, 2.0), 2.0);
    }
}
