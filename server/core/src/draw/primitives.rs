//! Drawing primitives on an image: strokes, circles, discs, polygons, arrows and markers.

use super::image::{Color, Rgba8Image};
use super::raster::{FillRule, Patch, finite};

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
}
