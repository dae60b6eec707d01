//! The goal overlay: a frame with each term of a goal drawn on it.

use super::font::{TextStyle, text_size};
use super::image::{Color, Rgba8Image};
use super::palette;
use super::primitives::Pen;
use super::raster::{FillRule, finite};

/// What a zone means for the planner.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ZoneKind {
    /// Somewhere it is fine to be (drawn as a mint tint with a solid outline).
    Safe,
    /// Somewhere to stay out of (drawn hatched in brick red).
    NoGo,
}

/// One thing to draw on the overlay, in frame pixel coordinates. Labels are short texts such
/// as "1" or "2a" (empty for none), drawn beside the source with a dark halo.
#[derive(Debug, Clone, PartialEq)]
pub enum OverlayItem {
    /// A point that should reach a target point, within `tolerance_px` (0: no circle).
    PointMove {
        /// Where the point is now.
        source: [f64; 2],
        /// Where it should be.
        target: [f64; 2],
        /// Radius of the dashed tolerance circle around the target.
        tolerance_px: f64,
        /// Term label.
        label: String,
    },
    /// A point that should end inside a polygon, or within `tolerance_px` of it.
    Region {
        /// Where the point is now.
        source: [f64; 2],
        /// The region's vertices.
        polygon: Vec<[f64; 2]>,
        /// Width of the dashed tolerance band outside the polygon (0: none).
        tolerance_px: f64,
        /// Term label.
        label: String,
    },
    /// A point that should end inside a painted mask of `width × height` cells (row-major,
    /// `mask[j * width + i]`). A mask of another size than the frame is stretched over it
    /// (nearest cell); a mask whose length does not match its size is skipped.
    Mask {
        /// Where the point is now.
        source: [f64; 2],
        /// Mask width in cells.
        width: usize,
        /// Mask height in cells.
        height: usize,
        /// Inside flags, row-major.
        mask: Vec<bool>,
        /// Term label.
        label: String,
    },
    /// Several points of one object that should reach their targets together; `fitted` is
    /// where the fitted transform puts the sources (may be empty when not yet fitted).
    RigidMove {
        /// The object's points now.
        sources: Vec<[f64; 2]>,
        /// Their targets, in the same order.
        targets: Vec<[f64; 2]>,
        /// The sources moved by the fitted transform.
        fitted: Vec<[f64; 2]>,
        /// Term label.
        label: String,
    },
    /// A safe or no-go area.
    Zone {
        /// The zone's vertices.
        polygon: Vec<[f64; 2]>,
        /// Safe or no-go.
        kind: ZoneKind,
        /// Zone label, drawn at its centre (empty for none).
        label: String,
    },
}

/// Sizes scaled to the frame, so a 4K frame does not get hairlines nor a thumbnail blobs.
struct Sizes {
    line: f64,
    thin: f64,
    halo: f64,
    marker: f64,
    head: f64,
    dash: f64,
    text: usize,
}

impl Sizes {
    fn for_frame(w: usize, h: usize) -> Self {
        let u = (w.min(h) as f64 / 480.0).clamp(0.4, 4.0);
        Self {
            line: 2.2 * u,
            thin: 1.4 * u,
            halo: 1.3 * u,
            marker: 7.0 * u,
            head: 12.0 * u,
            dash: 6.0 * u,
            text: ((2.0 * u).round() as usize).max(1),
        }
    }
    fn pen(&self, color: Color) -> Pen {
        Pen::new(self.line, color).with_halo(self.halo, palette::HALO)
    }
    fn thin_pen(&self, color: Color) -> Pen {
        Pen::new(self.thin, color).with_halo(self.halo * 0.8, palette::HALO)
    }
}

/// The drawing order: background fills first, labels last, so nothing hides a label.
#[derive(Clone, Copy, PartialEq, Eq)]
enum Layer {
    Zones,
    Fills,
    Lines,
    Markers,
    Labels,
}

/// Draws `items` over a copy of `frame`. Items with non-finite coordinates (or a mask whose
/// length does not match its size) are skipped rather than failing the whole overlay.
pub fn render_overlay(frame: &Rgba8Image, items: &[OverlayItem]) -> Rgba8Image {
    let mut img = frame.clone();
    let s = Sizes::for_frame(img.width(), img.height());
    for layer in [
        Layer::Zones,
        Layer::Fills,
        Layer::Lines,
        Layer::Markers,
        Layer::Labels,
    ] {
        for item in items {
            draw_item(&mut img, item, layer, &s);
        }
    }
    img
}

fn draw_item(img: &mut Rgba8Image, item: &OverlayItem, layer: Layer, s: &Sizes) {
    match item {
        OverlayItem::PointMove {
            source,
            target,
            tolerance_px,
            label,
        } => match layer {
            Layer::Lines => {
                if tolerance_px.is_finite() && *tolerance_px > 0.0 {
                    let pen = s.thin_pen(palette::TOLERANCE);
                    img.stroke_circle_dashed(*target, *tolerance_px, s.dash, s.dash * 0.8, &pen);
                }
                arrow_between(img, *source, *target, s.marker + 2.0, s.marker + 2.0, s);
            }
            Layer::Markers => {
                img.draw_target_marker(*target, s.marker * 1.15, &s.pen(palette::TARGET));
                img.draw_source_marker(*source, s.marker, &s.pen(palette::SOURCE));
            }
            Layer::Labels => draw_label(img, *source, label, s),
            _ => {}
        },
        OverlayItem::Region {
            source,
            polygon,
            tolerance_px,
            label,
        } => match layer {
            Layer::Fills => {
                let fill = palette::TARGET.with_alpha(palette::FILL_ALPHA);
                img.fill_polygon(polygon, FillRule::NonZero, fill);
            }
            Layer::Lines => {
                if tolerance_px.is_finite() && *tolerance_px > 0.0 {
                    let pen = s.thin_pen(palette::TOLERANCE);
                    img.stroke_polygon_dashed(polygon, *tolerance_px, s.dash, s.dash * 0.8, &pen);
                }
                img.stroke_polyline(polygon, true, &s.pen(palette::TARGET));
                if let Some(c) = centroid(polygon)
                    && !point_in_polygon(polygon, *source)
                {
                    arrow_between(img, *source, c, s.marker + 2.0, 0.0, s);
                }
            }
            Layer::Markers => img.draw_source_marker(*source, s.marker, &s.pen(palette::SOURCE)),
            Layer::Labels => draw_label(img, *source, label, s),
            _ => {}
        },
        OverlayItem::Mask {
            source,
            width,
            height,
            mask,
            label,
        } => {
            if *width == 0 || *height == 0 || width.checked_mul(*height) != Some(mask.len()) {
                return;
            }
            match layer {
                Layer::Fills => draw_mask(img, *width, *height, mask),
                Layer::Lines => {
                    if let Some(c) = mask_centroid(img, *width, *height, mask) {
                        let inside = cell_at(img, *width, *height, mask, *source);
                        if !inside {
                            arrow_between(img, *source, c, s.marker + 2.0, 0.0, s);
                        }
                    }
                }
                Layer::Markers => {
                    img.draw_source_marker(*source, s.marker, &s.pen(palette::SOURCE))
                }
                Layer::Labels => draw_label(img, *source, label, s),
                _ => {}
            }
        }
        OverlayItem::RigidMove {
            sources,
            targets,
            fitted,
            label,
        } => {
            if sources.is_empty() || sources.len() != targets.len() {
                return;
            }
            draw_rigid(img, sources, targets, fitted, label, layer, s);
        }
        OverlayItem::Zone {
            polygon,
            kind,
            label,
        } => match layer {
            Layer::Zones => {
                let (color, pen) = match kind {
                    ZoneKind::Safe => (palette::SAFE, s.thin_pen(palette::SAFE)),
                    ZoneKind::NoGo => (palette::NO_GO, s.thin_pen(palette::NO_GO)),
                };
                img.fill_polygon(
                    polygon,
                    FillRule::NonZero,
                    color.with_alpha(palette::ZONE_ALPHA),
                );
                if *kind == ZoneKind::NoGo {
                    let spacing = s.marker * 1.4;
                    img.fill_polygon_hatched(
                        polygon,
                        FillRule::NonZero,
                        spacing,
                        s.thin,
                        color.with_alpha(190),
                    );
                }
                img.stroke_polyline(polygon, true, &pen);
            }
            Layer::Labels => {
                if let Some(c) = centroid(polygon) {
                    let (w, h) = text_size(label, s.text);
                    draw_label_at(
                        img,
                        [c[0] - w as f64 / 2.0, c[1] - h as f64 / 2.0],
                        label,
                        s,
                    );
                }
            }
            _ => {}
        },
    }
}

fn draw_rigid(
    img: &mut Rgba8Image,
    sources: &[[f64; 2]],
    targets: &[[f64; 2]],
    fitted: &[[f64; 2]],
    label: &str,
    layer: Layer,
    s: &Sizes,
) {
    match layer {
        Layer::Lines => {
            let closed = sources.len() > 2;
            let thin = Pen::new(s.thin, palette::SOURCE.with_alpha(200))
                .with_halo(s.halo * 0.6, palette::HALO.with_alpha(150));
            img.stroke_polyline(sources, closed, &thin);
            let thin_t = Pen {
                color: palette::TARGET.with_alpha(200),
                ..thin
            };
            img.stroke_polyline(targets, closed, &thin_t);
            for (f, t) in fitted.iter().zip(targets) {
                let res = Pen::new(s.thin * 0.8, palette::FITTED);
                img.stroke_segment(*f, *t, &res);
            }
            for (a, b) in sources.iter().zip(targets) {
                let gap = s.marker * 0.8 + 2.0;
                arrow_between(img, *a, *b, gap, gap, s);
            }
        }
        Layer::Markers => {
            let m = s.marker * 0.8;
            for t in targets {
                img.draw_target_marker(*t, m * 1.15, &s.pen(palette::TARGET));
            }
            for f in fitted {
                let [x, y] = *f;
                let q = m * 0.6;
                let sq = [
                    [x - q, y - q],
                    [x + q, y - q],
                    [x + q, y + q],
                    [x - q, y + q],
                ];
                img.stroke_polyline(&sq, true, &s.thin_pen(palette::FITTED));
            }
            for p in sources {
                img.draw_source_marker(*p, m, &s.pen(palette::SOURCE));
            }
        }
        Layer::Labels => {
            if let Some(c) = mean(sources) {
                draw_label(img, c, label, s);
            }
        }
        _ => {}
    }
}

/// An arrow from `a` to `b`, leaving `gap_a` and `gap_b` free around the ends for markers.
fn arrow_between(
    img: &mut Rgba8Image,
    a: [f64; 2],
    b: [f64; 2],
    gap_a: f64,
    gap_b: f64,
    s: &Sizes,
) {
    if !finite(a) || !finite(b) {
        return;
    }
    let (dx, dy) = (b[0] - a[0], b[1] - a[1]);
    let len = dx.hypot(dy);
    if len.is_nan() || len <= gap_a + gap_b + s.head * 0.5 {
        return;
    }
    let (ux, uy) = (dx / len, dy / len);
    let from = [a[0] + ux * gap_a, a[1] + uy * gap_a];
    let to = [b[0] - ux * gap_b, b[1] - uy * gap_b];
    img.draw_arrow(from, to, s.head, &s.pen(palette::ARROW));
}

/// A label up and to the right of `anchor`, moved inside the frame when it would leave it.
fn draw_label(img: &mut Rgba8Image, anchor: [f64; 2], label: &str, s: &Sizes) {
    if !finite(anchor) {
        return;
    }
    let (_, h) = text_size(label, s.text);
    let off = s.marker + 3.0;
    draw_label_at(
        img,
        [anchor[0] + off, anchor[1] - off - h as f64 * 0.8],
        label,
        s,
    );
}

fn draw_label_at(img: &mut Rgba8Image, origin: [f64; 2], label: &str, s: &Sizes) {
    if label.is_empty() || !finite(origin) {
        return;
    }
    let (w, h) = text_size(label, s.text);
    let margin = s.halo + 1.0;
    let clamp = |v: f64, size: f64, room: usize| {
        let hi = room as f64 - 0.5 - size - margin;
        let lo = -0.5 + margin;
        if hi < lo { lo } else { v.clamp(lo, hi) }
    };
    let x = clamp(origin[0], w as f64, img.width());
    let y = clamp(origin[1], h as f64, img.height());
    // Snap to the pixel grid so the glyph cells are crisp.
    let origin = [(x + 0.5).round() - 0.5, (y + 0.5).round() - 0.5];
    let style = TextStyle {
        scale: s.text,
        color: palette::LABEL,
        halo: s.halo.max(1.0).round(),
        halo_color: palette::HALO,
    };
    img.draw_text(origin, label, &style);
}

fn draw_mask(img: &mut Rgba8Image, mw: usize, mh: usize, mask: &[bool]) {
    let (w, h) = (img.width(), img.height());
    // Frame pixel centre x maps to mask cell floor((x + ½) · mw / W), the inverse of the
    // design's map-to-frame convention.
    let inside: Vec<bool> = (0..h)
        .flat_map(|j| (0..w).map(move |i| (i, j)))
        .map(|(i, j)| mask[((j * mh) / h) * mw + (i * mw) / w])
        .collect();
    let at = |i: isize, j: isize| {
        i >= 0
            && j >= 0
            && (i as usize) < w
            && (j as usize) < h
            && inside[j as usize * w + i as usize]
    };
    let fill = palette::TARGET.with_alpha(palette::FILL_ALPHA);
    for j in 0..h {
        for i in 0..w {
            let (ii, jj) = (i as isize, j as isize);
            let here = inside[j * w + i];
            let mut edge = false;
            for (di, dj) in [(-1, 0), (1, 0), (0, -1), (0, 1)] {
                if at(ii + di, jj + dj) != here {
                    edge = true;
                }
            }
            if here && edge {
                img.blend_pixel(i, j, palette::TARGET, 1.0);
            } else if here {
                img.blend_pixel(i, j, fill, 1.0);
            } else if edge {
                img.blend_pixel(i, j, palette::HALO, 0.8);
            }
        }
    }
}

fn cell_at(img: &Rgba8Image, mw: usize, mh: usize, mask: &[bool], p: [f64; 2]) -> bool {
    if !finite(p) {
        return false;
    }
    let (w, h) = (img.width() as f64, img.height() as f64);
    let ci = ((p[0] + 0.5) * mw as f64 / w).floor();
    let cj = ((p[1] + 0.5) * mh as f64 / h).floor();
    if ci < 0.0 || cj < 0.0 || ci >= mw as f64 || cj >= mh as f64 {
        return false;
    }
    mask[cj as usize * mw + ci as usize]
}

/// The mean position of the mask's inside cells, in frame coordinates.
fn mask_centroid(img: &Rgba8Image, mw: usize, mh: usize, mask: &[bool]) -> Option<[f64; 2]> {
    let (mut sx, mut sy, mut n) = (0.0, 0.0, 0usize);
    for (k, _) in mask.iter().enumerate().filter(|(_, m)| **m) {
        sx += (k % mw) as f64;
        sy += (k / mw) as f64;
        n += 1;
    }
    (n > 0).then(|| {
        let (fx, fy) = (
            img.width() as f64 / mw as f64,
            img.height() as f64 / mh as f64,
        );
        [
            (sx / n as f64 + 0.5) * fx - 0.5,
            (sy / n as f64 + 0.5) * fy - 0.5,
        ]
    })
}

fn mean(pts: &[[f64; 2]]) -> Option<[f64; 2]> {
    if pts.is_empty() || !pts.iter().all(|p| finite(*p)) {
        return None;
    }
    let n = pts.len() as f64;
    Some([
        pts.iter().map(|p| p[0]).sum::<f64>() / n,
        pts.iter().map(|p| p[1]).sum::<f64>() / n,
    ])
}

/// The area centroid of a polygon; the vertex mean when it encloses (almost) no area.
pub(crate) fn centroid(pts: &[[f64; 2]]) -> Option<[f64; 2]> {
    let m = mean(pts)?;
    let n = pts.len();
    let (mut a, mut cx, mut cy) = (0.0, 0.0, 0.0);
    for k in 0..n {
        // Relative to the mean, for precision far from the origin.
        let (p, q) = (pts[k], pts[(k + 1) % n]);
        let (px, py, qx, qy) = (p[0] - m[0], p[1] - m[1], q[0] - m[0], q[1] - m[1]);
        let cross = px * qy - qx * py;
        a += cross;
        cx += (px + qx) * cross;
        cy += (py + qy) * cross;
    }
    if a.abs() < 1e-9 {
        return Some(m);
    }
    let c = [m[0] + cx / (3.0 * a), m[1] + cy / (3.0 * a)];
    finite(c).then_some(c)
}

fn point_in_polygon(pts: &[[f64; 2]], p: [f64; 2]) -> bool {
    let mut inside = false;
    for k in 0..pts.len() {
        let (a, b) = (pts[k], pts[(k + 1) % pts.len()]);
        if (a[1] <= p[1]) != (b[1] <= p[1]) {
            let x = a[0] + (p[1] - a[1]) * (b[0] - a[0]) / (b[1] - a[1]);
            if x < p[0] {
                inside = !inside;
            }
        }
    }
    inside
}

#[cfg(test)]
mod tests {
    use super::*;

    fn frame() -> Rgba8Image {
        Rgba8Image::new(400, 300, Color::rgb(90, 80, 70)).unwrap()
    }

    fn diff(a: &Rgba8Image, b: &Rgba8Image) -> usize {
        a.data()
            .chunks_exact(4)
            .zip(b.data().chunks_exact(4))
            .filter(|(p, q)| p != q)
            .count()
    }

    #[test]
    fn point_move_marks_source_and_target() {
        let f = frame();
        let out = render_overlay(
            &f,
            &[OverlayItem::PointMove {
                source: [80.0, 150.0],
                target: [320.0, 150.0],
                tolerance_px: 30.0,
                label: "1".into(),
            }],
        );
        assert_eq!(out.width(), 400);
        // Source dot and target cross centre get their colours.
        assert_eq!(out.pixel(80, 150), Some(palette::SOURCE));
        assert_eq!(out.pixel(320, 150), Some(palette::TARGET));
        // The arrow runs between them.
        assert_eq!(out.pixel(200, 150), Some(palette::ARROW));
        // Far corners untouched.
        assert_eq!(out.pixel(0, 299), f.pixel(0, 299));
        assert_eq!(out.pixel(399, 0), f.pixel(399, 0));
        // The label ink is somewhere up and right of the source.
        let mut label = 0;
        for j in 80..150 {
            for i in 80..160 {
                label += usize::from(out.pixel(i, j) == Some(palette::LABEL));
            }
        }
        assert!(label > 5, "{label}");
    }

    #[test]
    fn every_kind_draws_something_and_odd_items_are_skipped() {
        let f = frame();
        let square = vec![[240.0, 60.0], [360.0, 60.0], [360.0, 180.0], [240.0, 180.0]];
        let mut mask = vec![false; 20 * 15];
        for j in 2..6 {
            for i in 3..9 {
                mask[j * 20 + i] = true;
            }
        }
        let items = vec![
            OverlayItem::Region {
                source: [60.0, 240.0],
                polygon: square.clone(),
                tolerance_px: 12.0,
                label: "2".into(),
            },
            OverlayItem::Mask {
                source: [300.0, 260.0],
                width: 20,
                height: 15,
                mask: mask.clone(),
                label: "3".into(),
            },
            OverlayItem::RigidMove {
                sources: vec![[40.0, 40.0], [100.0, 40.0], [70.0, 90.0]],
                targets: vec![[140.0, 180.0], [200.0, 180.0], [170.0, 230.0]],
                fitted: vec![[142.0, 182.0], [198.0, 178.0], [170.0, 232.0]],
                label: "4".into(),
            },
            OverlayItem::Zone {
                polygon: vec![[0.0, 200.0], [120.0, 200.0], [120.0, 299.0], [0.0, 299.0]],
                kind: ZoneKind::NoGo,
                label: "no".into(),
            },
            OverlayItem::Zone {
                polygon: square.clone(),
                kind: ZoneKind::Safe,
                label: String::new(),
            },
        ];
        for item in &items {
            let out = render_overlay(&f, std::slice::from_ref(item));
            assert!(diff(&out, &f) > 50, "{item:?} drew too little");
        }
        // The mask is stretched: cell (5, 3) covers frame pixels x 100..120, y 60..80.
        let out = render_overlay(&f, &items[1..2]);
        assert_eq!(
            out.pixel(110, 70),
            Some(Color::rgb(90, 80, 70)).map(|c| {
                let mut one = Rgba8Image::new(1, 1, c).unwrap();
                one.blend_pixel(0, 0, palette::TARGET.with_alpha(palette::FILL_ALPHA), 1.0);
                one.pixel(0, 0).unwrap()
            })
        );
        let odd = vec![
            OverlayItem::Mask {
                source: [1.0, 1.0],
                width: 20,
                height: 15,
                mask: vec![true; 7],
                label: "x".into(),
            },
            OverlayItem::PointMove {
                source: [f64::NAN, 1.0],
                target: [f64::INFINITY, 2.0],
                tolerance_px: f64::NAN,
                label: String::new(),
            },
            OverlayItem::Region {
                source: [1e300, -1e300],
                polygon: vec![[1.0, f64::NAN]],
                tolerance_px: -3.0,
                label: String::new(),
            },
            OverlayItem::RigidMove {
                sources: vec![],
                targets: vec![[1.0, 1.0]],
                fitted: vec![[f64::NAN, 0.0]],
                label: "z".into(),
            },
        ];
        let out = render_overlay(&f, &odd);
        assert_eq!(diff(&out, &f), 0);
    }

    #[test]
    fn labels_stay_inside_the_frame() {
        let f = frame();
        let out = render_overlay(
            &f,
            &[OverlayItem::PointMove {
                source: [398.0, 1.0],
                target: [300.0, 120.0],
                tolerance_px: 0.0,
                label: "12b".into(),
            }],
        );
        // The label was pushed left and down, so its ink is inside the frame.
        let ink = (0..300)
            .flat_map(|j| (0..400).map(move |i| (i, j)))
            .filter(|&(i, j)| out.pixel(i, j) == Some(palette::LABEL))
            .count();
        assert!(ink > 20, "{ink}");
    }

    #[test]
    fn centroid_of_a_square_and_a_flat_polygon() {
        let c = centroid(&[[0.0, 0.0], [4.0, 0.0], [4.0, 2.0], [0.0, 2.0]]).unwrap();
        assert!((c[0] - 2.0).abs() < 1e-12 && (c[1] - 1.0).abs() < 1e-12);
        let flat = centroid(&[[0.0, 0.0], [1.0, 1.0], [2.0, 2.0]]).unwrap();
        assert_eq!(flat, [1.0, 1.0]);
        assert!(centroid(&[]).is_none());
    }
}
