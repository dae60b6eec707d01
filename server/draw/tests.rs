//! Tests of the drawing: the pixel convention, fill coverage against shapely, the overlay of a
//! fixed scene against its committed picture, and labels in three scripts.

use super::canvas::{Canvas, Pen, circle, polyline, rect, to_skia};
use super::marks;
use super::overlay::place_labels;
use super::text::{Line, glyph_id};
use super::{OverlayItem, ZoneKind, render_overlay, render_overlay_until};
use ab_glyph::GlyphId;
use image::{Rgba, RgbaImage};
use serde_json::{Value, json};
use std::path::{Path, PathBuf};

fn frame(w: u32, h: u32, v: u8) -> RgbaImage {
    RgbaImage::from_pixel(w, h, Rgba([v, v, v, 255]))
}

fn repo() -> &'static Path {
    Path::new(env!("CARGO_MANIFEST_DIR"))
}

/// target/screenshots, beside the test binary's target folder.
fn screenshots() -> PathBuf {
    let dir = std::env::current_exe()
        .ok()
        .and_then(|exe| exe.ancestors().nth(3).map(Path::to_path_buf))
        .unwrap_or_else(|| repo().join("target"))
        .join("screenshots");
    std::fs::create_dir_all(&dir).expect("screenshot folder");
    dir
}

fn differing(a: &RgbaImage, b: &RgbaImage) -> usize {
    a.pixels().zip(b.pixels()).filter(|(p, q)| p != q).count()
}

#[test]
fn pixel_centres_sit_on_whole_coordinates() {
    let mut c = Canvas::from_frame(&frame(64, 48, 20)).unwrap();
    // Width 2 centred on y = 10 spans y 9..11: row 10 (y 9.5..10.5) is covered fully and rows
    // 9 and 11 by half, because pixel centres sit on whole coordinates.
    let line = polyline(&[[4.0, 10.0], [60.0, 10.0]], false).unwrap();
    let pen = Pen {
        width: 2.0,
        colour: marks::Rgba::rgb(255, 255, 255),
        dash: None,
    };
    c.stroke(&line, pen, None);
    // The square of pixels 30..=39 × 20..=29 is the box [29.5, 39.5] × [19.5, 29.5].
    c.fill(
        &rect([29.5, 19.5], [39.5, 29.5]).unwrap(),
        marks::POINT,
        None,
    );
    let img = c.into_image().unwrap();
    assert_eq!(img.get_pixel(30, 10).0, [255, 255, 255, 255]);
    for row in [9, 11] {
        let v = img.get_pixel(30, row).0[0];
        // Half way from 20 to 255 is 137.5; tiny-skia's coverage is 8-bit.
        assert!((136..=139).contains(&v), "row {row}: {v}");
    }
    assert_eq!(img.get_pixel(30, 8).0, [20, 20, 20, 255]);
    assert_eq!(img.get_pixel(30, 12).0, [20, 20, 20, 255]);
    for (i, j) in [(30, 20), (39, 29), (34, 25)] {
        assert_eq!(img.get_pixel(i, j).0, marks::POINT.0, "({i}, {j})");
    }
    for (i, j) in [(29, 25), (40, 25), (34, 19), (34, 30)] {
        assert_eq!(img.get_pixel(i, j).0, [20, 20, 20, 255], "({i}, {j})");
    }
}

/// Pixel coverages against shapely's exact intersection areas (tests/reference/gen_draw.py).
///
/// Tolerance: 0.15 of a pixel on any one pixel and 1.5 % on a shape's whole area. Why so much:
/// tiny-skia anti-aliases by supersampling, 4 sub-scanlines per pixel row with coverage kept in
/// 8 bits, so a pixel that an edge crosses can be off by over a tenth. Measured on these cases
/// (printed by the test): worst pixels 0.04 to 0.14, areas within 0.5 % except the sliver
/// triangle, about two pixels wide with edges running nearly along the sub-scanlines, whose
/// area comes out 1.3 % small. Circles are drawn as four cubic Béziers (their radial error is
/// under 0.03 % of the radius); tiny-skia's own conic circle came out 2 % small at r = 5.7 and
/// is not used. The old hand-written rasteriser met 0.001 to 0.07 per pixel and 0.5 %: this
/// is the price of dropping it, stated rather than hidden.
#[test]
fn coverage_matches_shapely_areas() {
    let text = std::fs::read_to_string(repo().join("tests/reference/draw_coverage.json")).unwrap();
    let doc: Value = serde_json::from_str(&text).unwrap();
    let (w, h) = (
        doc["width"].as_u64().unwrap() as u32,
        doc["height"].as_u64().unwrap() as u32,
    );
    let pt = |v: &Value| [v[0].as_f64().unwrap(), v[1].as_f64().unwrap()];
    let mut failures = Vec::new();
    for case in doc["cases"].as_array().unwrap() {
        let kind = case["kind"].as_str().unwrap();
        let path = match kind {
            "disc" => circle(pt(&case["center"]), case["radius"].as_f64().unwrap()).unwrap(),
            "polygon" => {
                let pts: Vec<[f64; 2]> =
                    case["points"].as_array().unwrap().iter().map(pt).collect();
                polyline(&pts, true).unwrap()
            }
            _ => {
                let line = polyline(&[pt(&case["from"]), pt(&case["to"])], false).unwrap();
                let stroke = tiny_skia::Stroke {
                    width: case["width"].as_f64().unwrap() as f32,
                    line_cap: tiny_skia::LineCap::Round,
                    ..tiny_skia::Stroke::default()
                };
                line.stroke(&stroke, 1.0).unwrap()
            }
        };
        let mut mask = tiny_skia::Mask::new(w, h).unwrap();
        mask.fill_path(&path, tiny_skia::FillRule::Winding, true, to_skia());
        let (mut worst, mut ours, mut theirs) = (0.0f64, 0.0, 0.0);
        for j in 0..h as usize {
            for i in 0..w as usize {
                let want = case["coverage"][j][i].as_f64().unwrap();
                let got = f64::from(mask.data()[j * w as usize + i]) / 255.0;
                worst = worst.max((got - want).abs());
                ours += got;
                theirs += want;
            }
        }
        let rel = (ours - theirs).abs() / theirs;
        eprintln!("{kind}: worst pixel {worst:.4}, total {ours:.3} vs {theirs:.3} ({rel:.4})");
        if worst > 0.15 || rel > 0.015 {
            failures.push(format!(
                "{kind}: worst pixel {worst}, area {ours} vs {theirs}"
            ));
        }
    }
    assert!(failures.is_empty(), "{failures:?}");
}

/// A 320 × 240 frame that is dark on the left, light on the right and has a bright patch, so
/// the marks are seen on both.
fn scene_frame() -> RgbaImage {
    RgbaImage::from_fn(320, 240, |x, y| {
        let (fx, fy) = (f64::from(x) / 319.0, f64::from(y) / 239.0);
        let bright = (196..=314).contains(&x) && (156..=234).contains(&y);
        let base = if bright { 236.0 } else { 40.0 + 150.0 * fx };
        let v = |k: f64| (base * k + 20.0 * fy).round().clamp(0.0, 255.0) as u8;
        Rgba([v(0.92), v(1.0), v(0.86), 255])
    })
}

fn mask_base64(w: usize, h: usize, painted: impl Fn(usize, usize) -> bool) -> String {
    use base64::Engine;
    let flags: Vec<bool> = (0..w * h).map(|k| painted(k % w, k / w)).collect();
    let png = crate::images::encode_mask(w as u32, h as u32, &flags).unwrap();
    base64::engine::general_purpose::STANDARD.encode(png)
}

/// The fixed scene: every term kind and both zone kinds on [`scene_frame`].
fn scene_goal() -> Value {
    json!({
        "name": "every kind of mark",
        "frame_id": "f",
        "cost": {"metric": "euclidean", "steps": "final", "mode": "expected"},
        "terms": [
            {"kind": "point", "label": "pot", "source": [36.0, 44.0], "target": [136.0, 36.0],
             "tolerance_px": 14.0},
            {"kind": "region", "label": "tray", "source": [28.0, 206.0],
             "polygon": [[84.0, 158.0], [140.0, 152.0], [150.0, 214.0], [94.0, 224.0]],
             "tolerance_px": 6.0},
            {"kind": "mask", "label": "mat", "source": [176.0, 176.0],
             "mask_png_base64": mask_base64(320, 240, |i, j| {
                 let (dx, dy) = (i as f64 - 250.0, j as f64 - 196.0);
                 (dx / 40.0).powi(2) + (dy / 24.0).powi(2) <= 1.0
             })},
            {"kind": "rigid", "label": "trowel",
             "sources": [[40.0, 112.0], [76.0, 112.0], [58.0, 140.0]],
             "targets": [[196.0, 98.0], [236.0, 114.0], [190.0, 140.0]],
             "tolerance_px": 4.0},
            {"kind": "learned", "label": "reward", "source": [276.0, 120.0], "reward_fit_id": "r"}
        ]
    })
}

fn scene_overlay() -> RgbaImage {
    let frame = scene_frame();
    let mut png = Vec::new();
    frame
        .write_to(&mut std::io::Cursor::new(&mut png), image::ImageFormat::Png)
        .unwrap();
    // The learned term's fit: a flat reward over 10 px cells (the overlay draws its source only).
    let grid = std::sync::Arc::new(
        goalsmith_core::cost::RewardGrid::new(10, 32, 24, vec![0.0; 32 * 24]).unwrap(),
    );
    let lookup = |_: &str| Some(grid.clone());
    let spec = crate::scoring::spec_from_revision(&scene_goal(), 320, 240, &lookup).unwrap();
    let safe = [[4.0, 4.0], [315.0, 4.0], [315.0, 235.0], [4.0, 235.0]];
    let no_go = vec![vec![
        [246.0, 14.0],
        [306.0, 14.0],
        [306.0, 64.0],
        [246.0, 64.0],
    ]];
    let out = crate::scoring::overlay_png(
        &spec,
        &png,
        crate::scoring::Zones {
            safe: Some(&safe),
            no_go: &no_go,
        },
    )
    .unwrap();
    image::load_from_memory(&out).unwrap().to_rgba8()
}

/// Saves `img` and a three times larger copy (nearest pixel) for looking at.
fn save_for_eyes(img: &RgbaImage, name: &str) {
    let dir = screenshots();
    img.save(dir.join(format!("{name}.png"))).unwrap();
    let big = image::imageops::resize(
        img,
        img.width() * 3,
        img.height() * 3,
        image::imageops::FilterType::Nearest,
    );
    big.save(dir.join(format!("{name}-x3.png"))).unwrap();
}

/// The overlay of the fixed scene, pixel for pixel, against tests/reference/overlay_scene.png.
/// `GOALSMITH_WRITE_REFERENCE=1 cargo test --lib draw` writes the picture anew (look at it
/// before committing it).
#[test]
fn overlay_of_the_fixed_scene_is_the_committed_picture() {
    let got = scene_overlay();
    save_for_eyes(&got, "overlay_scene");
    let path = repo().join("tests/reference/overlay_scene.png");
    if std::env::var("GOALSMITH_WRITE_REFERENCE").is_ok_and(|v| v == "1") {
        got.save(&path).unwrap();
    }
    let want = image::open(&path)
        .unwrap_or_else(|e| panic!("{}: {e}", path.display()))
        .to_rgba8();
    assert_eq!(got.dimensions(), want.dimensions());
    let n = differing(&got, &want);
    if n > 0 {
        let actual = screenshots().join("overlay_scene-actual.png");
        got.save(&actual).ok();
        panic!(
            "{n} pixels differ from {}; this run's picture is {}. If the change is meant, \
             rerun with GOALSMITH_WRITE_REFERENCE=1, look at the picture and commit it.",
            path.display(),
            actual.display()
        );
    }
}

/// Independent of the picture: each term's source disc is filled with its kind's colour, and
/// what lies far from every mark is the frame.
#[test]
fn the_scene_wears_the_marking_code() {
    let got = scene_overlay();
    let frame = scene_frame();
    for (kind, [x, y]) in [
        ("point", [36, 44]),
        ("region", [28, 206]),
        ("mask", [176, 176]),
        ("rigid", [40, 112]),
        ("learned", [276, 120]),
    ] {
        assert_eq!(
            got.get_pixel(x, y).0,
            marks::kind_colour(kind).0,
            "{kind} source at ({x}, {y})"
        );
    }
    // The painted area's edge pixel is in full colour (its top at (250, 172)), its inside
    // tinted.
    assert_eq!(got.get_pixel(250, 172).0, marks::MASK.0);
    assert_ne!(got.get_pixel(250, 196), frame.get_pixel(250, 196));
    assert_ne!(got.get_pixel(250, 196).0, marks::MASK.0);
    // Outside every mark and zone the frame shows through unchanged.
    assert_eq!(got.get_pixel(1, 238), frame.get_pixel(1, 238));
    assert_eq!(got.get_pixel(318, 120), frame.get_pixel(318, 120));
}

#[test]
fn odd_items_draw_nothing_and_labels_stay_inside() {
    let f = frame(200, 150, 90);
    let odd = vec![
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
            label: "x".into(),
        },
        OverlayItem::RigidMove {
            sources: vec![],
            targets: vec![[1.0, 1.0]],
            fitted: vec![[f64::NAN, 0.0]],
            tolerance_px: 1.0,
            label: "z".into(),
        },
        OverlayItem::Zone {
            polygon: vec![[1.0, 1.0]],
            kind: ZoneKind::NoGo,
            label: "one corner".into(),
        },
    ];
    assert_eq!(differing(&render_overlay(&f, &odd), &f), 0);
    // A label by a source in the top-right corner goes down and left, into the frame.
    let corner = render_overlay(
        &f,
        &[OverlayItem::Learned {
            source: [198.0, 1.0],
            label: "12b a long label".into(),
        }],
    );
    let item = OverlayItem::Learned {
        source: [198.0, 1.0],
        label: "12b a long label".into(),
    };
    let placed = place_labels(200, 150, std::slice::from_ref(&item), 1.0);
    let (line, min, max) = &placed[0];
    assert_eq!(*line, Line::new("12b a long label"));
    assert!(min[0] >= -0.5 && min[1] >= -0.5 && max[0] <= 199.5 && max[1] <= 149.5);
    // Below the source, where it fits, and clear of the source's disc.
    assert!(min[1] > 1.0 + marks::SIZES.source_radius, "{min:?}");
    let ink = corner
        .pixels()
        .filter(|p| p.0 == marks::LABEL_INK.0)
        .count();
    assert!(ink > 20, "{ink}");
}

/// Labels in German, Greek and Russian are drawn with their own glyphs, not "missing glyph"
/// boxes. The picture is written to target/screenshots/overlay-labels.png.
#[test]
fn labels_in_three_scripts_are_drawn_with_real_glyphs() {
    let labels = ["Topf groß → Matte", "Γλάστρα δεξιά", "Горшок на мат"];
    for l in labels {
        for c in l.chars() {
            assert_ne!(glyph_id(c), GlyphId(0), "{c:?} in {l:?} has no glyph");
        }
    }
    // A private-use character the font has no glyph for: it draws as the missing-glyph box.
    let missing = '\u{10FFFD}';
    assert_eq!(glyph_id(missing), GlyphId(0));
    let f = RgbaImage::from_fn(320, 200, |x, y| {
        let v = (60 + (x + y) % 40) as u8;
        Rgba([v, v + 10, v, 255])
    });
    let sources = [[20.0, 60.0], [20.0, 120.0], [20.0, 180.0]];
    let items = |texts: &[String]| -> Vec<OverlayItem> {
        sources
            .iter()
            .zip(texts)
            .map(|(s, t)| OverlayItem::PointMove {
                source: *s,
                target: [s[0] + 250.0, s[1] - 20.0],
                tolerance_px: 6.0,
                label: t.clone(),
            })
            .collect()
    };
    let real: Vec<String> = labels.iter().map(|l| l.to_string()).collect();
    let boxes: Vec<String> = labels
        .iter()
        .map(|l| std::iter::repeat_n(missing, l.chars().count()).collect())
        .collect();
    let drawn = render_overlay(&f, &items(&real));
    let as_boxes = render_overlay(&f, &items(&boxes));
    save_for_eyes(&drawn, "overlay-labels");
    let placed = place_labels(320, 200, &items(&real), 1.0);
    for ((l, b), (line, min, max)) in labels.iter().zip(&boxes).zip(&placed) {
        assert_eq!(*line, Line::new(l));
        // The comparison draws exactly as many missing-glyph boxes as the label has characters.
        assert_eq!(
            Line::new(b),
            Line::of_glyphs(&vec![GlyphId(0); l.chars().count()])
        );
        let (mut inked, mut differ, mut all) = (0, 0, 0);
        for j in (min[1] + 0.5) as u32..(max[1] + 0.5) as u32 {
            for i in (min[0] + 0.5) as u32..(max[0] + 0.5) as u32 {
                let p = drawn.get_pixel(i, j);
                all += 1;
                inked += usize::from(p.0 == marks::LABEL_INK.0);
                differ += usize::from(p != as_boxes.get_pixel(i, j));
            }
        }
        assert!(inked > 40, "{l}: {inked} fully inked pixels");
        assert!(
            differ * 5 > all,
            "{l}: only {differ} of {all} pixels differ from missing-glyph boxes"
        );
    }
}

#[test]
fn overlay_drawing_stops_when_asked() {
    let items: Vec<OverlayItem> = (0..8)
        .map(|k| OverlayItem::PointMove {
            source: [10.0 + 5.0 * f64::from(k), 30.0],
            target: [50.0, 10.0 + 4.0 * f64::from(k)],
            tolerance_px: 3.0,
            label: format!("{k}"),
        })
        .collect();
    let f = frame(64, 48, 40);
    // Never stopped: the same picture as the plain call.
    let whole = render_overlay_until(&f, &items, &|| false).expect("drawn");
    assert_eq!(whole, render_overlay(&f, &items));
    // Stopped after a few items: given up, and asked no more than once past that point.
    let asked = std::cell::Cell::new(0usize);
    let stopped = render_overlay_until(&f, &items, &|| {
        asked.set(asked.get() + 1);
        asked.get() > 5
    });
    assert!(stopped.is_none());
    assert_eq!(asked.get(), 6);
}
