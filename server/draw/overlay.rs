//! The goal overlay: a frame with a goal's terms and the camera's zones drawn on it in the
//! marking code of [`super::marks`].

use super::canvas::{Canvas, Pen, circle, finite, polyline};
use super::marks::{self, ARROW_HEAD, FITTED, Rgba, SIZES, SOURCE, TARGET};
use super::place::{Anchor, Obstacles, place};
use super::text::{Line, box_size, draw_label};
use goalsmith_core::distance::Mask;
use goalsmith_core::geometry::{PixelPoint, Polygon};
use goalsmith_core::goal::{GoalSpec, Term};
use std::sync::Arc;

/// What a zone means for the planner.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ZoneKind {
    /// Where targets must stay (a dashed mint outline).
    Safe,
    /// Where no target may be (tinted, hatched and outlined in brick).
    NoGo,
}

/// One thing to draw, in frame pixel coordinates. A label (empty for none) is drawn on its
/// dark box beside the source, where it covers least (see [`super::place`]).
#[derive(Debug, Clone, PartialEq)]
pub enum OverlayItem {
    /// A point that should reach a target point, within `tolerance_px`.
    PointMove {
        /// Where the point is now.
        source: [f64; 2],
        /// Where it should be.
        target: [f64; 2],
        /// Radius of the tolerance around the target (0: none drawn).
        tolerance_px: f64,
        /// Term label.
        label: String,
    },
    /// A point that should end inside a polygon, or within `tolerance_px` of it.
    Region {
        /// Where the point is now.
        source: [f64; 2],
        /// The area's corners.
        polygon: Vec<[f64; 2]>,
        /// Width of the tolerance band outside the outline (0: none drawn).
        tolerance_px: f64,
        /// Term label.
        label: String,
    },
    /// A point that should end on a painted area. A mask of another size than the frame is
    /// stretched over it (nearest mask pixel).
    Mask {
        /// Where the point is now.
        source: [f64; 2],
        /// The painted area.
        mask: Arc<Mask>,
        /// Term label.
        label: String,
    },
    /// Several points of one object that should reach their targets together.
    RigidMove {
        /// The object's points now.
        sources: Vec<[f64; 2]>,
        /// Their targets, in the same order.
        targets: Vec<[f64; 2]>,
        /// Where the fitted transform puts the sources (empty when there is no fit).
        fitted: Vec<[f64; 2]>,
        /// Radius of the tolerance around each target (0: none drawn).
        tolerance_px: f64,
        /// Term label.
        label: String,
    },
    /// A learned term: only its source has a place on the frame.
    Learned {
        /// Where the point is now.
        source: [f64; 2],
        /// Term label.
        label: String,
    },
    /// A safe or no-go zone.
    Zone {
        /// The zone's corners.
        polygon: Vec<[f64; 2]>,
        /// Safe or no-go.
        kind: ZoneKind,
        /// Drawn at the zone's centre (empty for none).
        label: String,
    },
}

/// The items of a checked goal and its camera's zones, in drawing order: the safe zone, the
/// no-go zones (labelled "no-go 1", "no-go 2", …), then the terms, each labelled with its
/// number and label ("2 seed tray").
pub fn goal_items(
    spec: &GoalSpec,
    safe_zone: Option<&[[f64; 2]]>,
    no_go_zones: &[Vec<[f64; 2]>],
) -> Vec<OverlayItem> {
    let mut items = Vec::new();
    if let Some(z) = safe_zone {
        items.push(OverlayItem::Zone {
            polygon: z.to_vec(),
            kind: ZoneKind::Safe,
            label: String::new(),
        });
    }
    for (k, z) in no_go_zones.iter().enumerate() {
        items.push(OverlayItem::Zone {
            polygon: z.clone(),
            kind: ZoneKind::NoGo,
            label: format!("no-go {}", k + 1),
        });
    }
    for (i, t) in spec.terms().iter().enumerate() {
        let label = match t.label.as_deref().map(str::trim) {
            Some(l) if !l.is_empty() => format!("{} {l}", i + 1),
            _ => format!("{}", i + 1),
        };
        let tolerance_px = t.tolerance_px;
        items.push(match &t.term {
            Term::Point { source, target } => OverlayItem::PointMove {
                source: source.to_array(),
                target: target.to_array(),
                tolerance_px,
                label,
            },
            Term::Region { source, polygon } => OverlayItem::Region {
                source: source.to_array(),
                polygon: polygon.vertices().iter().map(|v| v.to_array()).collect(),
                tolerance_px,
                label,
            },
            Term::Mask { source, mask } => OverlayItem::Mask {
                source: source.to_array(),
                mask: Arc::clone(mask),
                label,
            },
            Term::Rigid {
                sources,
                targets,
                fit,
            } => OverlayItem::RigidMove {
                sources: sources.iter().map(|s| s.to_array()).collect(),
                targets: targets.iter().map(|s| s.to_array()).collect(),
                fitted: sources.iter().map(|s| fit.apply(s.to_array())).collect(),
                tolerance_px,
                label,
            },
            Term::Learned { source, .. } => OverlayItem::Learned {
                source: source.to_array(),
                label,
            },
        });
    }
    items
}

/// Frame pixels per mark unit: 1 up to 480 pixels on the short side, then growing with the
/// frame (at most 4), so a 4K frame gets neither hairlines nor a thumbnail's blobs.
pub fn unit_for_frame(width: u32, height: u32) -> f64 {
    (f64::from(width.min(height)) / 480.0).clamp(1.0, 4.0)
}

/// The drawing order: zones, fills, lines, marks; then the labels, so nothing hides a label.
#[derive(Clone, Copy, PartialEq, Eq)]
enum Layer {
    Zones,
    Fills,
    Lines,
    Marks,
}

/// Draws `items` over a copy of `frame`. Items with coordinates that are not finite are left
/// out rather than failing the whole overlay.
pub fn render_overlay(frame: &image::RgbaImage, items: &[OverlayItem]) -> image::RgbaImage {
    render_overlay_until(frame, items, &|| false).unwrap_or_else(|| frame.clone())
}

/// [`render_overlay`], given up (`None`) when `stop` answers true, which it is asked before
/// each item of each layer and before the labels: a client that hung up stops the drawing of a
/// goal of many large terms within one term's work.
pub fn render_overlay_until(
    frame: &image::RgbaImage,
    items: &[OverlayItem],
    stop: &dyn Fn() -> bool,
) -> Option<image::RgbaImage> {
    let Some(mut canvas) = Canvas::from_frame(frame) else {
        return Some(frame.clone());
    };
    let u = unit_for_frame(canvas.width(), canvas.height());
    for layer in [Layer::Zones, Layer::Fills, Layer::Lines, Layer::Marks] {
        for item in items {
            if stop() {
                return None;
            }
            draw_item(&mut canvas, item, layer, u);
        }
    }
    if stop() {
        return None;
    }
    for (line, min, _) in place_labels(canvas.width(), canvas.height(), items, u) {
        draw_label(&mut canvas, &line, min, u);
    }
    Some(canvas.into_image().unwrap_or_else(|| frame.clone()))
}

fn draw_item(c: &mut Canvas, item: &OverlayItem, layer: Layer, u: f64) {
    match item {
        OverlayItem::PointMove {
            source,
            target,
            tolerance_px,
            ..
        } => {
            let colour = marks::POINT;
            match layer {
                Layer::Fills => tolerance_disc(c, *target, *tolerance_px, colour),
                Layer::Lines => {
                    tolerance_ring(c, *target, *tolerance_px, colour, u);
                    arrow(c, *source, *target, colour, false, true, u);
                }
                Layer::Marks => {
                    mark(c, TARGET, *target, colour, u);
                    mark(c, SOURCE, *source, colour, u);
                }
                Layer::Zones => {}
            }
        }
        OverlayItem::Region {
            source,
            polygon,
            tolerance_px,
            ..
        } => {
            let colour = marks::REGION;
            let Some(outline) = polygon_path(polygon) else {
                return;
            };
            match layer {
                Layer::Fills => {
                    if tolerance_px.is_finite() && *tolerance_px > 0.0 {
                        // The band outside the outline within the tolerance: a stroke twice as
                        // wide, round-joined, kept to the outside.
                        let band = Pen {
                            width: 2.0 * tolerance_px,
                            colour: colour.with_alpha(marks::TOLERANCE_ALPHA),
                            dash: None,
                        };
                        let outside = c.mask(&outline, true);
                        c.stroke(&outline, band, outside.as_ref());
                    }
                    c.fill(&outline, colour.with_alpha(marks::AREA_ALPHA), None);
                }
                Layer::Lines => {
                    let pen = Pen {
                        width: SIZES.line * u,
                        colour,
                        dash: None,
                    };
                    c.cased(&outline, pen, SIZES.casing * u);
                    if !point_in_polygon(polygon, *source)
                        && let Some(centre) = centroid(polygon)
                    {
                        arrow(c, *source, centre, colour, true, false, u);
                    }
                }
                Layer::Marks => mark(c, SOURCE, *source, colour, u),
                Layer::Zones => {}
            }
        }
        OverlayItem::Mask { source, mask, .. } => {
            let colour = marks::MASK;
            match layer {
                Layer::Fills => mask_tint(c, mask, colour),
                Layer::Lines => {
                    let (w, h) = (c.width(), c.height());
                    if !painted_at(w, h, mask, *source)
                        && let Some(centre) = mask_centroid(w, h, mask)
                    {
                        arrow(c, *source, centre, colour, true, false, u);
                    }
                }
                Layer::Marks => mark(c, SOURCE, *source, colour, u),
                Layer::Zones => {}
            }
        }
        OverlayItem::RigidMove {
            sources,
            targets,
            fitted,
            tolerance_px,
            ..
        } => {
            if sources.is_empty() || sources.len() != targets.len() {
                return;
            }
            let colour = marks::RIGID;
            match layer {
                Layer::Fills => {
                    for t in targets {
                        tolerance_disc(c, *t, *tolerance_px, colour);
                    }
                }
                Layer::Lines => {
                    let closed = sources.len() > 2;
                    let pen = Pen {
                        width: SIZES.thin * u,
                        colour,
                        dash: Some(SIZES.dash.map(|d| d * u)),
                    };
                    for pts in [sources, targets] {
                        if let Some(path) = polyline(pts, closed) {
                            c.cased(&path, pen, SIZES.casing * u);
                        }
                    }
                    for t in targets {
                        tolerance_ring(c, *t, *tolerance_px, colour, u);
                    }
                    for (s, t) in sources.iter().zip(targets) {
                        arrow(c, *s, *t, colour, false, true, u);
                    }
                }
                Layer::Marks => {
                    // Fitted squares over the targets: a good fit puts them inside the rings.
                    for t in targets {
                        mark(c, TARGET, *t, colour, u);
                    }
                    for f in fitted {
                        mark(c, FITTED, *f, colour, u);
                    }
                    for s in sources {
                        mark(c, SOURCE, *s, colour, u);
                    }
                }
                Layer::Zones => {}
            }
        }
        OverlayItem::Learned { source, .. } => {
            if layer == Layer::Marks {
                mark(c, SOURCE, *source, marks::LEARNED, u);
            }
        }
        OverlayItem::Zone { polygon, kind, .. } => {
            let Some(outline) = polygon_path(polygon) else {
                return;
            };
            match (layer, kind) {
                (Layer::Zones, ZoneKind::Safe) => {
                    let pen = Pen {
                        width: SIZES.line * u,
                        colour: marks::SAFE,
                        dash: Some(SIZES.dash.map(|d| d * u)),
                    };
                    c.cased(&outline, pen, SIZES.casing * u);
                }
                (Layer::Zones, ZoneKind::NoGo) => {
                    c.fill(&outline, marks::NO_GO.with_alpha(marks::NO_GO_ALPHA), None);
                    hatch(c, polygon, &outline, u);
                    let pen = Pen {
                        width: SIZES.line * u,
                        colour: marks::NO_GO,
                        dash: None,
                    };
                    c.cased(&outline, pen, SIZES.casing * u);
                }
                _ => {}
            }
        }
    }
}

/// Where each item's label goes, in drawing order: its text laid out and its box `min..max`.
/// Every mark and drawn arrow is an obstacle, and so is each label once placed (see
/// [`super::place`]).
pub(crate) fn place_labels(
    w: u32,
    h: u32,
    items: &[OverlayItem],
    u: f64,
) -> Vec<(Line, [f64; 2], [f64; 2])> {
    let mut obstacles = Obstacles::default();
    let (source_r, target_r) = (
        (SIZES.source_radius + SIZES.casing) * u,
        (SIZES.target_radius + SIZES.casing) * u,
    );
    let fitted_r = (SIZES.fitted_half * std::f64::consts::SQRT_2 + SIZES.casing) * u;
    let half_line = (SIZES.line / 2.0 + SIZES.casing) * u;
    let arrow_obstacle = |o: &mut Obstacles, a: [f64; 2], b: [f64; 2], to_mark: bool| {
        if let Some(g) = arrow_geometry(a, b, to_mark, u) {
            o.segment(g.from, g.tip, half_line);
        }
    };
    let mut anchors = Vec::new();
    for item in items {
        let anchor = match item {
            OverlayItem::PointMove {
                source,
                target,
                label,
                ..
            } => {
                obstacles.disc(*source, source_r);
                obstacles.disc(*target, target_r);
                arrow_obstacle(&mut obstacles, *source, *target, true);
                Some((
                    Anchor::Beside {
                        at: *source,
                        away: Some(*target),
                    },
                    label,
                ))
            }
            OverlayItem::Region {
                source,
                polygon,
                label,
                ..
            } if polygon_path(polygon).is_some() => {
                obstacles.disc(*source, source_r);
                let away = (!point_in_polygon(polygon, *source))
                    .then(|| centroid(polygon))
                    .flatten();
                if let Some(c) = away {
                    arrow_obstacle(&mut obstacles, *source, c, false);
                }
                Some((Anchor::Beside { at: *source, away }, label))
            }
            OverlayItem::Mask {
                source,
                mask,
                label,
            } => {
                obstacles.disc(*source, source_r);
                let away = (!painted_at(w, h, mask, *source))
                    .then(|| mask_centroid(w, h, mask))
                    .flatten();
                if let Some(c) = away {
                    arrow_obstacle(&mut obstacles, *source, c, false);
                }
                Some((Anchor::Beside { at: *source, away }, label))
            }
            OverlayItem::RigidMove {
                sources,
                targets,
                fitted,
                label,
                ..
            } => {
                if sources.is_empty() || sources.len() != targets.len() {
                    None
                } else {
                    for (s, t) in sources.iter().zip(targets) {
                        obstacles.disc(*s, source_r);
                        obstacles.disc(*t, target_r);
                        arrow_obstacle(&mut obstacles, *s, *t, true);
                    }
                    for f in fitted {
                        obstacles.disc(*f, fitted_r);
                    }
                    Some((
                        Anchor::Beside {
                            at: sources[0],
                            away: Some(targets[0]),
                        },
                        label,
                    ))
                }
            }
            OverlayItem::Learned { source, label } => {
                obstacles.disc(*source, source_r);
                Some((
                    Anchor::Beside {
                        at: *source,
                        away: None,
                    },
                    label,
                ))
            }
            OverlayItem::Region { .. } => None,
            OverlayItem::Zone { polygon, label, .. } => polygon_path(polygon)
                .and(centroid(polygon))
                .map(|c| (Anchor::Centred(c), label)),
        };
        anchors.extend(anchor);
    }
    let mut placed = Vec::new();
    for (anchor, label) in anchors {
        if label.is_empty() || !finite(anchor.point()) {
            continue;
        }
        let line = Line::new(label);
        let Some((bw, bh)) = box_size(&line, u) else {
            continue;
        };
        let Some(min) = place(anchor, bw, bh, u, w, h, &obstacles) else {
            continue;
        };
        let max = [min[0] + bw, min[1] + bh];
        obstacles.add_box(min, max);
        placed.push((line, min, max));
    }
    placed
}

fn mark(c: &mut Canvas, parts: &[marks::Part], at: [f64; 2], colour: Rgba, u: f64) {
    if finite(at) {
        c.mark(parts, at, u, 0.0, colour);
    }
}

/// The outline of an area or zone: at least three corners, all finite.
fn polygon_path(pts: &[[f64; 2]]) -> Option<tiny_skia::Path> {
    if pts.len() < 3 {
        return None;
    }
    polyline(pts, true)
}

fn tolerance_disc(c: &mut Canvas, at: [f64; 2], r: f64, colour: Rgba) {
    if let Some(path) = circle(at, r) {
        c.fill(&path, colour.with_alpha(marks::TOLERANCE_ALPHA), None);
    }
}

fn tolerance_ring(c: &mut Canvas, at: [f64; 2], r: f64, colour: Rgba, u: f64) {
    if let Some(path) = circle(at, r) {
        let pen = Pen {
            width: SIZES.thin * u,
            colour,
            dash: Some(SIZES.dash.map(|d| d * u)),
        };
        c.cased(&path, pen, SIZES.casing * u);
    }
}

/// An arrow from `a` to `b`, leaving room for the source mark at `a` and, when `to_mark`, the
/// target mark at `b`; left out when the two are too close for a head.
fn arrow(
    c: &mut Canvas,
    a: [f64; 2],
    b: [f64; 2],
    colour: Rgba,
    dashed: bool,
    to_mark: bool,
    u: f64,
) {
    let Some(geo) = arrow_geometry(a, b, to_mark, u) else {
        return;
    };
    let pen = Pen {
        width: SIZES.line * u,
        colour,
        dash: dashed.then(|| SIZES.dash.map(|d| d * u)),
    };
    let Some(shaft) = polyline(&[geo.from, geo.base], false) else {
        return;
    };
    let casing = Pen {
        width: pen.width + 2.0 * SIZES.casing * u,
        colour: marks::CASING,
        ..pen
    };
    // Shaft and head share one casing pass, then one colour pass.
    c.stroke(&shaft, casing, None);
    c.mark_casing(ARROW_HEAD, geo.tip, u, geo.angle);
    c.stroke(&shaft, pen, None);
    c.mark_ink(ARROW_HEAD, geo.tip, u, geo.angle, colour);
}

/// Where an arrow's shaft starts, where its head's base and tip are, and its direction.
pub(crate) struct ArrowGeometry {
    pub from: [f64; 2],
    pub base: [f64; 2],
    pub tip: [f64; 2],
    pub angle: f64,
}

/// The arrow from a source at `a` to `b` (a target mark when `to_mark`, else a bare point): it
/// starts `source_radius + arrow_gap` from `a` and its tip stops `target_radius + arrow_gap`
/// short of a target mark; `None` when less than a head's length would be left.
pub(crate) fn arrow_geometry(
    a: [f64; 2],
    b: [f64; 2],
    to_mark: bool,
    u: f64,
) -> Option<ArrowGeometry> {
    if !finite(a) || !finite(b) {
        return None;
    }
    let (dx, dy) = (b[0] - a[0], b[1] - a[1]);
    let len = dx.hypot(dy);
    let gap_a = (SIZES.source_radius + SIZES.arrow_gap) * u;
    let gap_b = if to_mark {
        (SIZES.target_radius + SIZES.arrow_gap) * u
    } else {
        0.0
    };
    let head = SIZES.head_length * u;
    // Also refuses a length that is NaN.
    if len.is_nan() || len <= gap_a + gap_b + head {
        return None;
    }
    let (ux, uy) = (dx / len, dy / len);
    let tip = [b[0] - ux * gap_b, b[1] - uy * gap_b];
    Some(ArrowGeometry {
        from: [a[0] + ux * gap_a, a[1] + uy * gap_a],
        base: [tip[0] - ux * head, tip[1] - uy * head],
        tip,
        angle: dy.atan2(dx),
    })
}

/// 45° lines, `hatch_spacing` apart along x, over the zone and kept inside it.
fn hatch(c: &mut Canvas, polygon: &[[f64; 2]], outline: &tiny_skia::Path, u: f64) {
    let Some(inside) = c.mask(outline, false) else {
        return;
    };
    let (mut lo, mut hi) = ([f64::INFINITY; 2], [f64::NEG_INFINITY; 2]);
    for p in polygon {
        for k in 0..2 {
            lo[k] = lo[k].min(p[k]);
            hi[k] = hi[k].max(p[k]);
        }
    }
    let spacing = SIZES.hatch_spacing * u;
    let span = hi[1] - lo[1];
    let mut pb = tiny_skia::PathBuilder::new();
    // Lines x + y = k · spacing, rising to the right, cover the zone's bounding box.
    let first = ((lo[0] + lo[1]) / spacing).floor();
    let last = ((hi[0] + hi[1]) / spacing).ceil();
    if !(first.is_finite() && last.is_finite()) || last - first > 1e5 {
        return;
    }
    for k in first as i64..=last as i64 {
        let s = k as f64 * spacing;
        pb.move_to((s - hi[1]) as f32, hi[1] as f32);
        pb.line_to((s - hi[1] + span) as f32, lo[1] as f32);
    }
    if let Some(lines) = pb.finish() {
        let pen = Pen {
            width: SIZES.thin * u,
            colour: marks::NO_GO.with_alpha(marks::HATCH_ALPHA),
            dash: None,
        };
        c.stroke(&lines, pen, Some(&inside));
    }
}

/// The mask pixel under frame pixel (i, j): frame pixel centre x maps to mask pixel
/// floor((x + ½) · mw / W).
fn mask_cell(i: u32, j: u32, w: u32, h: u32, m: &Mask) -> bool {
    let (mw, mh) = (m.width() as u64, m.height() as u64);
    let ci = (u64::from(i) * mw / u64::from(w)) as usize;
    let cj = (u64::from(j) * mh / u64::from(h)) as usize;
    m.is_inside(ci, cj)
}

/// Painted pixels in the kind colour: faint inside, full on the edge (a painted pixel with an
/// unpainted or outside 4-neighbour).
fn mask_tint(c: &mut Canvas, m: &Mask, colour: Rgba) {
    let (w, h) = (c.width(), c.height());
    let at = |i: i64, j: i64| {
        i >= 0
            && j >= 0
            && i < i64::from(w)
            && j < i64::from(h)
            && mask_cell(i as u32, j as u32, w, h, m)
    };
    c.pixel_layer(|i, j| {
        let (ii, jj) = (i64::from(i), i64::from(j));
        if !at(ii, jj) {
            return None;
        }
        let edge = [(-1, 0), (1, 0), (0, -1), (0, 1)]
            .iter()
            .any(|(di, dj)| !at(ii + di, jj + dj));
        Some(if edge {
            colour
        } else {
            colour.with_alpha(marks::AREA_ALPHA)
        })
    });
}

/// Whether the painted area covers frame point `p` (the pixel whose square holds it) in a
/// `w × h` frame.
fn painted_at(w: u32, h: u32, m: &Mask, p: [f64; 2]) -> bool {
    if !finite(p) {
        return false;
    }
    let (i, j) = ((p[0] + 0.5).floor(), (p[1] + 0.5).floor());
    if i < 0.0 || j < 0.0 || i >= f64::from(w) || j >= f64::from(h) {
        return false;
    }
    mask_cell(i as u32, j as u32, w, h, m)
}

/// The mean of the painted pixels' centres (the core's [`Mask::centroid`]), in the coordinates
/// of a `w × h` frame.
fn mask_centroid(w: u32, h: u32, m: &Mask) -> Option<[f64; 2]> {
    let (fx, fy) = (
        f64::from(w) / m.width() as f64,
        f64::from(h) / m.height() as f64,
    );
    m.centroid()
        .map(|[x, y]| [(x + 0.5) * fx - 0.5, (y + 0.5) * fy - 0.5])
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

/// The core's polygon of a point list, when it is a valid (simple, non-degenerate) polygon.
fn checked_polygon(pts: &[[f64; 2]]) -> Option<Polygon> {
    let vertices = pts
        .iter()
        .map(|p| PixelPoint::new(p[0], p[1]).ok())
        .collect::<Option<Vec<_>>>()?;
    Polygon::new(vertices).ok()
}

/// The area centroid of a polygon (the core's [`Polygon::centroid`]); the vertex mean, where a
/// label still needs an anchor, when the points make no valid polygon.
fn centroid(pts: &[[f64; 2]]) -> Option<[f64; 2]> {
    checked_polygon(pts)
        .and_then(|p| p.centroid())
        .or_else(|| mean(pts))
        .filter(|c| finite(*c))
}

/// Whether `p` is inside or on the polygon (the core's [`Polygon::contains`]).
fn point_in_polygon(pts: &[[f64; 2]], p: [f64; 2]) -> bool {
    checked_polygon(pts).is_some_and(|poly| poly.contains(p[0], p[1]))
}
