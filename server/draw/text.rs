//! Labels: text in DejaVu Sans, embedded in the binary, on a dark box.
//!
//! DejaVu Sans covers Latin, Greek and Cyrillic, so labels such as "Topf groß → Matte",
//! "Γλάστρα δεξιά" or "Горшок на мат" come out as written. Glyphs are taken from the font's
//! outlines with ab_glyph and filled by tiny-skia like every other shape, so text gets the same
//! anti-aliasing and the same pixel convention. There is no shaping beyond the font's kerning
//! pairs: enough for the left-to-right scripts the font covers. A character the font lacks
//! draws as the font's own "missing glyph" box.

use super::canvas::{Canvas, rect};
use super::marks::{LABEL_BOX, LABEL_INK, Rgba, SIZES};
use ab_glyph::{Font, FontRef, GlyphId, OutlineCurve};
use std::sync::OnceLock;
use tiny_skia::PathBuilder;

/// DejaVu Sans 2.37 (see assets/fonts/LICENSE-DejaVu.txt).
static FONT_BYTES: &[u8] = include_bytes!("../../assets/fonts/DejaVuSans.ttf");

/// The embedded font; `None` only if the embedded file were unreadable, in which case labels
/// are left out rather than failing the drawing.
pub fn font() -> Option<&'static FontRef<'static>> {
    static FONT: OnceLock<Option<FontRef<'static>>> = OnceLock::new();
    FONT.get_or_init(|| match FontRef::try_from_slice(FONT_BYTES) {
        Ok(f) => Some(f),
        Err(e) => {
            tracing::error!("the embedded label font is unreadable: {e}");
            None
        }
    })
    .as_ref()
}

/// The glyph the embedded font has for `c`; glyph 0 is its "missing glyph" box.
pub fn glyph_id(c: char) -> GlyphId {
    font().map_or(GlyphId(0), |f| f.glyph_id(c))
}

/// One line of text laid out in font units: each glyph with its pen position.
#[derive(Debug, Clone, PartialEq)]
pub struct Line {
    glyphs: Vec<(GlyphId, f32)>,
    width: f32,
}

impl Line {
    /// `text` on one line: line breaks and other control characters become spaces.
    pub fn new(text: &str) -> Line {
        let ids: Vec<GlyphId> = text
            .chars()
            .map(|c| if c.is_control() { ' ' } else { c })
            .map(glyph_id)
            .collect();
        Line::of_glyphs(&ids)
    }

    /// Given glyphs side by side, with the font's advances and kerning.
    pub fn of_glyphs(ids: &[GlyphId]) -> Line {
        let Some(f) = font() else {
            return Line {
                glyphs: Vec::new(),
                width: 0.0,
            };
        };
        let mut x = 0.0;
        let mut glyphs = Vec::with_capacity(ids.len());
        for (k, id) in ids.iter().enumerate() {
            if k > 0 {
                x += f.kern_unscaled(ids[k - 1], *id);
            }
            glyphs.push((*id, x));
            x += f.h_advance_unscaled(*id);
        }
        Line { glyphs, width: x }
    }

    /// Whether there is nothing to draw.
    pub fn is_empty(&self) -> bool {
        self.glyphs.is_empty()
    }
}

/// Pixels per font unit at an em of `size_px`, and the font's ascent and descent in font units.
fn metrics(size_px: f64) -> Option<(f64, f64, f64)> {
    let f = font()?;
    let per_unit = size_px / f64::from(f.units_per_em()?);
    Some((
        per_unit,
        f64::from(f.ascent_unscaled()),
        f64::from(f.descent_unscaled()),
    ))
}

/// Fills the glyphs of `line` with the pen starting at `x` on the baseline `y`.
pub(crate) fn draw_line(canvas: &mut Canvas, line: &Line, x: f64, y: f64, size_px: f64, ink: Rgba) {
    let (Some(f), Some((k, _, _))) = (font(), metrics(size_px)) else {
        return;
    };
    let mut pb = PathBuilder::new();
    for (id, pen) in &line.glyphs {
        let Some(outline) = f.outline(*id) else {
            continue;
        };
        // Font units have y up; frame pixels have y down.
        let at = |p: ab_glyph::Point| {
            (
                (x + (f64::from(*pen) + f64::from(p.x)) * k) as f32,
                (y - f64::from(p.y) * k) as f32,
            )
        };
        let mut last: Option<ab_glyph::Point> = None;
        for curve in &outline.curves {
            let (start, end) = match curve {
                OutlineCurve::Line(a, b) => (*a, *b),
                OutlineCurve::Quad(a, _, b) => (*a, *b),
                OutlineCurve::Cubic(a, _, _, b) => (*a, *b),
            };
            // A curve that does not start where the last one ended begins a new contour.
            if last != Some(start) {
                if last.is_some() {
                    pb.close();
                }
                let (sx, sy) = at(start);
                pb.move_to(sx, sy);
            }
            match curve {
                OutlineCurve::Line(_, b) => {
                    let (bx, by) = at(*b);
                    pb.line_to(bx, by);
                }
                OutlineCurve::Quad(_, c, b) => {
                    let ((cx, cy), (bx, by)) = (at(*c), at(*b));
                    pb.quad_to(cx, cy, bx, by);
                }
                OutlineCurve::Cubic(_, c1, c2, b) => {
                    let ((ax, ay), (cx, cy), (bx, by)) = (at(*c1), at(*c2), at(*b));
                    pb.cubic_to(ax, ay, cx, cy, bx, by);
                }
            }
            last = Some(end);
        }
        if last.is_some() {
            pb.close();
        }
    }
    if let Some(path) = pb.finish() {
        canvas.fill(&path, ink, None);
    }
}

/// The size of `line`'s label box (text plus padding), whole pixels, at `unit` pixels to a
/// mark unit.
pub(crate) fn box_size(line: &Line, unit: f64) -> Option<(f64, f64)> {
    let (k, asc, desc) = metrics(SIZES.label_size * unit)?;
    let pad = SIZES.label_pad * unit;
    let bw = (f64::from(line.width) * k + 2.0 * pad).ceil();
    let bh = ((asc - desc) * k + 2.0 * pad).ceil();
    Some((bw, bh))
}

/// Draws `line` on its dark box with the box's top-left corner at `min`.
pub(crate) fn draw_label(canvas: &mut Canvas, line: &Line, min: [f64; 2], unit: f64) {
    let (Some((k, asc, _)), Some((bw, bh))) =
        (metrics(SIZES.label_size * unit), box_size(line, unit))
    else {
        return;
    };
    if line.is_empty() {
        return;
    }
    if let Some(path) = rect(min, [min[0] + bw, min[1] + bh]) {
        canvas.fill(&path, LABEL_BOX, None);
    }
    let pad = SIZES.label_pad * unit;
    draw_line(
        canvas,
        line,
        min[0] + pad,
        min[1] + pad + asc * k,
        SIZES.label_size * unit,
        LABEL_INK,
    );
}
