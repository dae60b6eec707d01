//! The few raster helpers the demo painter needs: an RGBA picture, the pixel box a shape can
//! touch, polygon crossings and distances, and "source over" blending.
//!
//! Pixel centres sit on whole coordinates: pixel (i, j) covers [i − ½, i + ½] × [j − ½, j + ½].

/// The largest side a picture may have.
const MAX_SIDE: usize = 1 << 15;

/// Why a picture could not be painted.
#[derive(Debug)]
pub struct BadSize {
    pub width: usize,
    pub height: usize,
}

impl std::fmt::Display for BadSize {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(
            f,
            "a picture must be 1 to {MAX_SIDE} pixels wide and high, not {} × {}",
            self.width, self.height
        )
    }
}

impl std::error::Error for BadSize {}

/// Checks a picture size.
pub fn check_size(width: usize, height: usize) -> Result<(), BadSize> {
    if width == 0 || height == 0 || width > MAX_SIDE || height > MAX_SIDE {
        return Err(BadSize { width, height });
    }
    Ok(())
}

/// A row-major, straight-alpha RGBA picture, 4 bytes per pixel.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Image {
    pub width: usize,
    pub height: usize,
    pub data: Vec<u8>,
}

impl Image {
    /// The RGB bytes, alpha dropped (the bench is opaque).
    pub fn to_rgb(&self) -> Vec<u8> {
        self.data
            .chunks_exact(4)
            .flat_map(|p| [p[0], p[1], p[2]])
            .collect()
    }

    /// Blends `c` (straight RGBA) fully over pixel (i, j); ignored outside the picture.
    pub fn blend_pixel(&mut self, i: usize, j: usize, c: [u8; 4]) {
        if i < self.width && j < self.height {
            let k = 4 * (j * self.width + i);
            let d = [
                self.data[k],
                self.data[k + 1],
                self.data[k + 2],
                self.data[k + 3],
            ];
            self.data[k..k + 4].copy_from_slice(&blend_over(d, c));
        }
    }
}

/// "Source over" for one pixel, straight alpha, on the sRGB values:
/// `out_a = s_a + d_a (1 − s_a)`, `out_c = (s_c s_a + d_c d_a (1 − s_a)) / out_a`.
fn blend_over(dst: [u8; 4], src: [u8; 4]) -> [u8; 4] {
    let sa = f32::from(src[3]) / 255.0;
    if sa <= 0.0 {
        return dst;
    }
    let da = f32::from(dst[3]) / 255.0;
    let out_a = sa + da * (1.0 - sa);
    let mix = |s: u8, d: u8| {
        let v = (f32::from(s) * sa + f32::from(d) * da * (1.0 - sa)) / out_a;
        v.round().clamp(0.0, 255.0) as u8
    };
    [
        mix(src[0], dst[0]),
        mix(src[1], dst[1]),
        mix(src[2], dst[2]),
        (out_a * 255.0).round().clamp(0.0, 255.0) as u8,
    ]
}

pub fn finite(p: [f64; 2]) -> bool {
    p[0].is_finite() && p[1].is_finite()
}

pub fn segment_distance(p: [f64; 2], a: [f64; 2], b: [f64; 2]) -> f64 {
    let (dx, dy) = (b[0] - a[0], b[1] - a[1]);
    let len2 = dx * dx + dy * dy;
    let t = if len2 > 0.0 {
        (((p[0] - a[0]) * dx + (p[1] - a[1]) * dy) / len2).clamp(0.0, 1.0)
    } else {
        0.0
    };
    (p[0] - a[0] - t * dx).hypot(p[1] - a[1] - t * dy)
}

/// Where the horizontal line at `y` crosses the polygon's edges, sorted by x, each with +1 for
/// an edge going down and −1 for one going up. Half-open in y, so a vertex on the line counts once.
pub fn crossings(pts: &[[f64; 2]], y: f64, xs: &mut Vec<(f64, i32)>) {
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

/// The pixels of a `width × height` picture whose squares meet a box: columns `x0..x0 + w`,
/// rows `y0..y0 + h`.
#[derive(Debug, Clone, Copy)]
pub struct Patch {
    pub x0: usize,
    pub y0: usize,
    pub w: usize,
    pub h: usize,
}

impl Patch {
    /// The pixels whose squares meet the box `min..max`, clipped to the picture; `None` when
    /// nothing is left or the box is not finite.
    pub fn covering(width: usize, height: usize, min: [f64; 2], max: [f64; 2]) -> Option<Patch> {
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
        Some(Patch {
            x0: i0,
            y0: j0,
            w: i1 - i0 + 1,
            h: j1 - j0 + 1,
        })
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
}
