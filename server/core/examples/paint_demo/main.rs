//! Writes the demo scenario: `cargo run -p goalsmith-core --example paint_demo -- DIR`
//!
//! DIR/bench.png (the potting bench, 640 × 480), DIR/scene.json (where everything is, in
//! frame pixels, plus suggested goals) and four short demonstrations in DIR/demos/ (animated
//! GIFs of a seed tray or a pot slid to the watering mat, each with a JSON of the known paths
//! of points on it), which `serve --demo` loads. Deterministic: the same seed gives the same
//! files.
//!
//! The painter lives here rather than in goalsmith-core, which keeps computation only; it has
//! its own small raster helpers (`raster.rs`, `lettering.rs`) so the pictures stay exactly
//! what they were when they were first painted.

mod demos;
mod gif_out;
mod lettering;
mod noise;
mod raster;
mod scene;

use std::error::Error;
use std::fs::File;
use std::io::BufWriter;
use std::path::Path;

use image::ImageEncoder;
use image::codecs::png::{CompressionType, FilterType, PngEncoder};
use raster::Image;
use scene::{BenchLayout, bench_layout, paint_potting_bench};
use serde_json::json;

const W: usize = 640;
const H: usize = 480;
const SEED: u64 = 20_240_611;

fn write_png(img: &Image, path: &Path) -> Result<u64, Box<dyn Error>> {
    let out = BufWriter::new(File::create(path)?);
    let enc = PngEncoder::new_with_quality(out, CompressionType::Best, FilterType::Adaptive);
    // The bench is opaque, so RGB keeps the files a quarter smaller.
    enc.write_image(
        &img.to_rgb(),
        img.width as u32,
        img.height as u32,
        image::ExtendedColorType::Rgb8,
    )?;
    Ok(std::fs::metadata(path)?.len())
}

fn round2(p: [f64; 2]) -> [f64; 2] {
    [
        (p[0] * 100.0).round() / 100.0,
        (p[1] * 100.0).round() / 100.0,
    ]
}

/// Rounds every number to 2 decimals (a hundredth of a pixel is plenty for goals).
fn rounded(v: serde_json::Value) -> serde_json::Value {
    use serde_json::Value;
    match v {
        Value::Number(n) => match (n.as_u64(), n.as_f64()) {
            (Some(u), _) => Value::from(u),
            (None, Some(f)) => json!((f * 100.0).round() / 100.0),
            _ => Value::Number(n),
        },
        Value::Array(a) => Value::Array(a.into_iter().map(rounded).collect()),
        Value::Object(o) => Value::Object(o.into_iter().map(|(k, v)| (k, rounded(v))).collect()),
        other => other,
    }
}

/// One-line JSON with a space after each comma between array items.
fn compact(v: &serde_json::Value) -> String {
    match v {
        serde_json::Value::Array(a) => {
            format!("[{}]", a.iter().map(compact).collect::<Vec<_>>().join(", "))
        }
        other => other.to_string(),
    }
}

/// Pretty JSON that keeps points and point lists on one line.
fn pretty(v: &serde_json::Value, indent: usize, out: &mut String) {
    use serde_json::Value;
    let flat = |v: &Value| match v {
        Value::Array(a) => a.iter().all(|e| match e {
            Value::Array(p) => p.iter().all(Value::is_number),
            e => !e.is_object() && !e.is_array(),
        }),
        e => !e.is_object(),
    };
    let pad = "  ".repeat(indent + 1);
    match v {
        Value::Object(o) => {
            out.push_str("{\n");
            // Keys sorted, whether or not another crate in the build turned on serde_json's
            // `preserve_order`.
            let mut entries: Vec<_> = o.iter().collect();
            entries.sort_by(|a, b| a.0.cmp(b.0));
            for (k, (key, val)) in entries.into_iter().enumerate() {
                out.push_str(&format!("{pad}{}: ", Value::from(key.as_str())));
                pretty(val, indent + 1, out);
                out.push_str(if k + 1 < o.len() { ",\n" } else { "\n" });
            }
            out.push_str(&format!("{}}}", "  ".repeat(indent)));
        }
        Value::Array(a) if !flat(v) => {
            out.push_str("[\n");
            for (k, val) in a.iter().enumerate() {
                out.push_str(&pad);
                pretty(val, indent + 1, out);
                out.push_str(if k + 1 < a.len() { ",\n" } else { "\n" });
            }
            out.push_str(&format!("{}]", "  ".repeat(indent)));
        }
        other => out.push_str(&compact(other)),
    }
}

fn suggestions(l: &BenchLayout) -> serde_json::Value {
    let small = &l.pots[0];
    let tray2 = &l.trays[1];
    // A strip on the mat along its left edge, for the tray's centre to end in.
    let m = &l.mat;
    let lerp =
        |a: [f64; 2], b: [f64; 2], t: f64| [a[0] + (b[0] - a[0]) * t, a[1] + (b[1] - a[1]) * t];
    let (tl, bl) = (m[0], m[3]);
    let inset = |p: [f64; 2], dx: f64| [p[0] + dx, p[1]];
    let region = vec![
        round2(inset(lerp(tl, bl, 0.56), 12.0)),
        round2(inset(lerp(tl, bl, 0.56), 80.0)),
        round2(inset(lerp(tl, bl, 0.94), 80.0)),
        round2(inset(lerp(tl, bl, 0.94), 12.0)),
    ];
    // The trowel stood upright in the free strip of bench between tray 1 and the mat: a
    // rigid motion (turn and shift) that puts the tip at `new_tip` with the handle below it.
    let t = &l.trowel;
    let pts = [t.tip, t.shoulder_left, t.shoulder_right, t.handle_end];
    let now = (t.handle_end[1] - t.tip[1]).atan2(t.handle_end[0] - t.tip[0]);
    let turn = std::f64::consts::FRAC_PI_2 - now;
    let (sa, ca) = turn.sin_cos();
    let new_tip = [276.0, 58.0];
    let moved: Vec<[f64; 2]> = pts
        .iter()
        .map(|p| {
            let (dx, dy) = (p[0] - t.tip[0], p[1] - t.tip[1]);
            round2([
                new_tip[0] + ca * dx - sa * dy,
                new_tip[1] + sa * dx + ca * dy,
            ])
        })
        .collect();
    json!({
        "move_small_pot_onto_mat": {
            "kind": "point", "source": round2(small.center), "target": round2(l.spare_spot.center),
            "tolerance_px": 8.0
        },
        "slide_tray_2_by_mat_edge": {
            "kind": "region", "source": round2(tray2.center), "polygon": region
        },
        "trowel_to_new_pose": {
            "kind": "rigid",
            "point_names": ["tip", "shoulder_left", "shoulder_right", "handle_end"],
            "sources": pts.iter().map(|p| round2(*p)).collect::<Vec<_>>(),
            "targets": moved
        }
    })
}

fn main() -> Result<(), Box<dyn Error>> {
    let dir = std::env::args()
        .nth(1)
        .unwrap_or_else(|| "demo-data".into());
    let dir = Path::new(&dir);
    std::fs::create_dir_all(dir)?;

    let bench = paint_potting_bench(W, H, SEED)?;
    let size = write_png(&bench, &dir.join("bench.png"))?;
    println!("bench.png {size} bytes");

    let layout = bench_layout(W, H, SEED)?;
    let mut scene = serde_json::to_value(&layout)?;
    scene["image"] = json!("bench.png");
    scene["convention"] =
        json!("pixel coordinates [x, y], x right, y down, centre of the top-left pixel at (0, 0)");
    scene["suggested_goals"] = suggestions(&layout);
    let mut text = String::new();
    pretty(&rounded(scene), 0, &mut text);
    std::fs::write(dir.join("scene.json"), text + "\n")?;
    println!("scene.json written");

    demos::write_all(dir, W, H, SEED, |v| {
        let mut text = String::new();
        pretty(v, 0, &mut text);
        text
    })?;
    Ok(())
}
