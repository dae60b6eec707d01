//! A frame to draw on, in frame pixel coordinates, over tiny-skia.
//!
//! goalsmith puts the centre of the top-left pixel at (0, 0), so pixel (i, j) covers
//! [i − ½, i + ½] × [j − ½, j + ½]. tiny-skia puts pixel centres at (i + ½, j + ½); every path is
//! therefore drawn through a translation by (+½, +½), and callers think only in frame pixels.

use super::marks::{CASING, Outline, Part, Rgba, SIZES};
use tiny_skia::{
    ColorU8, FillRule, LineCap, LineJoin, Mask, Paint, Path, PathBuilder, Pixmap, PixmapPaint,
    Stroke, StrokeDash, Transform,
};

/// The frame-to-tiny-skia translation.
pub(crate) fn to_skia() -> Transform {
    Transform::from_translate(0.5, 0.5)
}

/// An RGBA picture being drawn on.
pub(crate) struct Canvas {
    pixmap: Pixmap,
}

/// How a line is stroked: width, colour, and optionally dashes.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Pen {
    pub width: f64,
    pub colour: Rgba,
    pub dash: Option<[f64; 2]>,
}

impl Canvas {
    /// A canvas holding a copy of `frame`.
    pub fn from_frame(frame: &image::RgbaImage) -> Option<Canvas> {
        let mut pixmap = Pixmap::new(frame.width(), frame.height())?;
        for (dst, src) in pixmap.pixels_mut().iter_mut().zip(frame.pixels()) {
            let [r, g, b, a] = src.0;
            *dst = ColorU8::from_rgba(r, g, b, a).premultiply();
        }
        Some(Canvas { pixmap })
    }

    /// The picture, straight alpha again.
    pub fn into_image(self) -> Option<image::RgbaImage> {
        let (w, h) = (self.pixmap.width(), self.pixmap.height());
        image::RgbaImage::from_raw(w, h, self.pixmap.take_demultiplied())
    }

    pub fn width(&self) -> u32 {
        self.pixmap.width()
    }

    pub fn height(&self) -> u32 {
        self.pixmap.height()
    }

    /// The mask of what `path` covers, for clipping later drawing to it (or, with `outside`,
    /// to everything else).
    pub fn mask(&self, path: &Path, outside: bool) -> Option<Mask> {
        let mut mask = Mask::new(self.width(), self.height())?;
        mask.fill_path(path, FillRule::Winding, true, to_skia());
        if outside {
            mask.invert();
        }
        Some(mask)
    }

    /// Fills `path` (non-zero winding).
    pub fn fill(&mut self, path: &Path, colour: Rgba, clip: Option<&Mask>) {
        self.pixmap
            .fill_path(path, &paint(colour), FillRule::Winding, to_skia(), clip);
    }

    /// Strokes `path` with round caps and joins.
    pub fn stroke(&mut self, path: &Path, pen: Pen, clip: Option<&Mask>) {
        if let Some(stroke) = stroke(pen.width, pen.dash) {
            self.pixmap
                .stroke_path(path, &paint(pen.colour), &stroke, to_skia(), clip);
        }
    }

    /// Strokes `path` over its casing: first `pen` widened by `2 × casing` in the casing
    /// colour, then `pen` itself.
    pub fn cased(&mut self, path: &Path, pen: Pen, casing: f64) {
        let under = Pen {
            width: pen.width + 2.0 * casing,
            colour: CASING,
            ..pen
        };
        self.stroke(path, under, None);
        self.stroke(path, pen, None);
    }

    /// Draws a mark (see [`Part`]) at `at`, `unit` pixels to a mark unit, turned by `angle`
    /// radians: all casings first, then every part in `colour`.
    pub fn mark(&mut self, parts: &[Part], at: [f64; 2], unit: f64, angle: f64, colour: Rgba) {
        self.mark_casing(parts, at, unit, angle);
        self.mark_ink(parts, at, unit, angle, colour);
    }

    /// The casing pass of [`Canvas::mark`].
    pub fn mark_casing(&mut self, parts: &[Part], at: [f64; 2], unit: f64, angle: f64) {
        for part in parts {
            let (outline, width) = match part {
                Part::Fill { outline } => (outline, 0.0),
                Part::Stroke { width, outline } => (outline, *width),
            };
            if let Some(path) = outline_path(outline, at, unit, angle) {
                let pen = Pen {
                    width: (width + 2.0 * SIZES.casing) * unit,
                    colour: CASING,
                    dash: None,
                };
                self.stroke(&path, pen, None);
            }
        }
    }

    /// The colour pass of [`Canvas::mark`].
    pub fn mark_ink(&mut self, parts: &[Part], at: [f64; 2], unit: f64, angle: f64, colour: Rgba) {
        for part in parts {
            match part {
                Part::Fill { outline } => {
                    if let Some(path) = outline_path(outline, at, unit, angle) {
                        self.fill(&path, colour, None);
                    }
                }
                Part::Stroke { width, outline } => {
                    if let Some(path) = outline_path(outline, at, unit, angle) {
                        let pen = Pen {
                            width: width * unit,
                            colour,
                            dash: None,
                        };
                        self.stroke(&path, pen, None);
                    }
                }
            }
        }
    }

    /// Lays a picture of single pixels over the canvas: `f(i, j)` gives the colour of pixel
    /// (i, j) in that picture, if any, and the picture is blended over ("source over") once.
    pub fn pixel_layer(&mut self, mut f: impl FnMut(u32, u32) -> Option<Rgba>) {
        let (w, h) = (self.width(), self.height());
        let Some(mut layer) = Pixmap::new(w, h) else {
            return;
        };
        for (k, px) in layer.pixels_mut().iter_mut().enumerate() {
            let k = k as u32;
            if let Some(Rgba([r, g, b, a])) = f(k % w, k / w) {
                *px = ColorU8::from_rgba(r, g, b, a).premultiply();
            }
        }
        self.pixmap.draw_pixmap(
            0,
            0,
            layer.as_ref(),
            &PixmapPaint::default(),
            Transform::identity(),
            None,
        );
    }
}

fn paint(colour: Rgba) -> Paint<'static> {
    let [r, g, b, a] = colour.0;
    let mut p = Paint::default();
    p.set_color_rgba8(r, g, b, a);
    p.anti_alias = true;
    p
}

fn stroke(width: f64, dash: Option<[f64; 2]>) -> Option<Stroke> {
    if !(width.is_finite() && width > 0.0) {
        return None;
    }
    let dash = match dash {
        Some([on, off]) => Some(StrokeDash::new(vec![on as f32, off as f32], 0.0)?),
        None => None,
    };
    Some(Stroke {
        width: width as f32,
        line_cap: LineCap::Round,
        line_join: LineJoin::Round,
        dash,
        ..Stroke::default()
    })
}

/// The path of a polyline through `pts` (closed back to the first point when `closed`); `None`
/// with fewer than two points or any non-finite one.
pub(crate) fn polyline(pts: &[[f64; 2]], closed: bool) -> Option<Path> {
    if pts.len() < 2 || !pts.iter().all(|p| finite(*p)) {
        return None;
    }
    let mut pb = PathBuilder::new();
    pb.move_to(pts[0][0] as f32, pts[0][1] as f32);
    for p in &pts[1..] {
        pb.line_to(p[0] as f32, p[1] as f32);
    }
    if closed {
        pb.close();
    }
    pb.finish()
}

/// A circle about `c` as four cubic Béziers (radial error under 0.03 % of `r`; tiny-skia's
/// own conic circle is about 1 % small once rasterised); `None` for a radius that is not
/// positive or a point that is not finite.
pub(crate) fn circle(c: [f64; 2], r: f64) -> Option<Path> {
    if !(finite(c) && r.is_finite() && r > 0.0 && r < 1e7) {
        return None;
    }
    // The control-point distance of a quarter circle: 4/3 · tan(π/8) · r.
    let k = 0.552_284_749_830_793_4 * r;
    let p = |dx: f64, dy: f64| ((c[0] + dx) as f32, (c[1] + dy) as f32);
    let mut pb = PathBuilder::new();
    let (x, y) = p(r, 0.0);
    pb.move_to(x, y);
    for [a, b, e] in [
        [(r, k), (k, r), (0.0, r)],
        [(-k, r), (-r, k), (-r, 0.0)],
        [(-r, -k), (-k, -r), (0.0, -r)],
        [(k, -r), (r, -k), (r, 0.0)],
    ] {
        let ((ax, ay), (bx, by), (ex, ey)) = (p(a.0, a.1), p(b.0, b.1), p(e.0, e.1));
        pb.cubic_to(ax, ay, bx, by, ex, ey);
    }
    pb.close();
    pb.finish()
}

/// The axis-aligned rectangle `min..max`.
pub(crate) fn rect(min: [f64; 2], max: [f64; 2]) -> Option<Path> {
    let r = tiny_skia::Rect::from_ltrb(min[0] as f32, min[1] as f32, max[0] as f32, max[1] as f32)?;
    Some(PathBuilder::from_rect(r))
}

/// A mark's outline placed at `at`, scaled by `unit` and turned by `angle`.
fn outline_path(o: &Outline, at: [f64; 2], unit: f64, angle: f64) -> Option<Path> {
    match o {
        Outline::Circle { r } => circle(at, r * unit),
        Outline::Lines { points, closed } => {
            let (s, c) = angle.sin_cos();
            let placed: Vec<[f64; 2]> = points
                .iter()
                .map(|[x, y]| {
                    [
                        at[0] + unit * (c * x - s * y),
                        at[1] + unit * (s * x + c * y),
                    ]
                })
                .collect();
            polyline(&placed, *closed)
        }
    }
}

pub(crate) fn finite(p: [f64; 2]) -> bool {
    // Far beyond any frame: tiny-skia works in f32 and clips, but keep the numbers sane.
    p[0].is_finite() && p[1].is_finite() && p[0].abs() < 1e7 && p[1].abs() < 1e7
}
