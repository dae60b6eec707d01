//! Bundles of goals with `learned` terms carry their reward fits: `reward_fits/<id>.json` (grid,
//! features as submitted, standardisation, weights, diagnostics, the formulas) and
//! `reward_fits/<id>.npy` (the reward map as served), both in the manifest with their SHA-256.
//! From the JSON alone the reward map is recomputed here; `goalsmith cost --bundle` scores the
//! learned terms from the bundled maps bit for bit as the HTTP cost route does, and refuses a
//! bundle whose fit files are not listed or do not match. On SQLite and PostgreSQL.

use crate::on_both_databases;
use crate::support::*;
use goalsmith_core::npy;
use reqwest::StatusCode;
use serde_json::{Value, json};
use sha2::Digest;
use std::io::Read;

const W: u32 = 160;
const H: u32 = 120;
const GOAL: [f64; 2] = [125.0, 95.0];
/// The camera's one no-go zone, a square in the bottom-right corner.
const NO_GO: [[f64; 2]; 4] = [
    [140.0, 100.0],
    [159.0, 100.0],
    [159.0, 119.0],
    [140.0, 119.0],
];
/// The `inside` feature's polygon: an axis-aligned square, so the test's containment is exact.
const INSIDE: [[f64; 2]; 4] = [[60.0, 60.0], [100.0, 60.0], [100.0, 100.0], [60.0, 100.0]];

/// Hand-drawn paths from five starts straight to GOAL, a point every 4 px.
fn paths() -> Vec<Value> {
    straight_paths(
        &[
            [10.0, 10.0],
            [150.0, 5.0],
            [5.0, 110.0],
            [80.0, 20.0],
            [20.0, 60.0],
        ],
        GOAL,
        4.0,
    )
}

/// Starts a fit and waits for it to finish; its id.
async fn finished_fit(s: &Server, editor: &str, body: &Value) -> String {
    let (st, started) = s.post("/api/reward-fits", Some(editor), body).await;
    assert_eq!(st, StatusCode::ACCEPTED, "{started}");
    let op = operation_done(s, editor, started["operation_id"].as_str().expect("op")).await;
    assert_eq!(op["state"], "succeeded", "{op}");
    started["id"].as_str().expect("fit").to_string()
}

/// Every entry of a ZIP, in archive order.
fn entries(zip: &[u8]) -> Vec<(String, Vec<u8>)> {
    let mut archive = zip::ZipArchive::new(std::io::Cursor::new(zip)).expect("zip");
    (0..archive.len())
        .map(|i| {
            let mut f = archive.by_index(i).expect("entry");
            let mut bytes = Vec::new();
            f.read_to_end(&mut bytes).expect("read entry");
            (f.name().to_string(), bytes)
        })
        .collect()
}

fn entry<'a>(files: &'a [(String, Vec<u8>)], name: &str) -> &'a [u8] {
    files
        .iter()
        .find(|(n, _)| n == name)
        .map(|(_, b)| b.as_slice())
        .unwrap_or_else(|| panic!("no {name} in the bundle"))
}

fn sha256(bytes: &[u8]) -> String {
    hex::encode(sha2::Sha256::digest(bytes))
}

/// JSON text with every number outside strings replaced by `N`: the tests' serde_json parses
/// floats to within an ulp, not always exactly, so a re-serialised number may differ in its
/// last digit while the structure (key order, no whitespace) must not.
fn numbers_masked(text: &str) -> String {
    let mut out = String::new();
    let (mut in_string, mut escaped, mut in_number) = (false, false, false);
    for ch in text.chars() {
        if in_string {
            out.push(ch);
            match ch {
                _ if escaped => escaped = false,
                '\\' => escaped = true,
                '"' => in_string = false,
                _ => {}
            }
        } else if ch.is_ascii_digit() || "-+.eE".contains(ch) {
            if !in_number {
                out.push('N');
                in_number = true;
            }
        } else {
            in_number = false;
            in_string = ch == '"';
            out.push(ch);
        }
    }
    out
}

/// Runs `goalsmith cost --bundle B FLAG INPUT`: (success, stdout, stderr).
fn run_cost(bundle: &[u8], flag: &str, input: &[u8]) -> (bool, Vec<u8>, String) {
    let dir = tempfile::tempdir().expect("temp dir");
    std::fs::write(dir.path().join("b.zip"), bundle).expect("write bundle");
    std::fs::write(dir.path().join("input"), input).expect("write input");
    let out = std::process::Command::new(bin())
        .args(["cost", "--bundle"])
        .arg(dir.path().join("b.zip"))
        .arg(flag)
        .arg(dir.path().join("input"))
        .output()
        .expect("run goalsmith cost");
    (
        out.status.success(),
        out.stdout,
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

/// The HTTP cost route's body, as bytes.
async fn route_cost(s: &Server, path: &str, token: &str, ct: &str, body: Vec<u8>) -> Vec<u8> {
    let resp = s
        .client
        .post(s.url(path))
        .bearer_auth(token)
        .header("content-type", ct)
        .body(body)
        .send()
        .await
        .expect("POST cost");
    let st = resp.status();
    let bytes = resp.bytes().await.expect("body").to_vec();
    assert_eq!(st, StatusCode::OK, "{}", String::from_utf8_lossy(&bytes));
    bytes
}

/// The raw features of a cell centre (x, y), computed here from the bundled definitions.
fn raw_features(def: &Value, x: f64, y: f64, no_go: &[Vec<[f64; 2]>]) -> f64 {
    let xy = |v: &Value| [v[0].as_f64().expect("x"), v[1].as_f64().expect("y")];
    // Closed axis-aligned rectangles only (what this test's polygons are), checked here.
    let in_box = |poly: &[[f64; 2]], x: f64, y: f64| {
        let xs = poly.iter().map(|p| p[0]);
        let ys = poly.iter().map(|p| p[1]);
        let (x0, x1) = (
            xs.clone().fold(f64::MAX, f64::min),
            xs.fold(f64::MIN, f64::max),
        );
        let (y0, y1) = (
            ys.clone().fold(f64::MAX, f64::min),
            ys.fold(f64::MIN, f64::max),
        );
        assert_eq!(poly.len(), 4, "a rectangle");
        assert!(
            poly.iter()
                .all(|p| (p[0] == x0 || p[0] == x1) && (p[1] == y0 || p[1] == y1)),
            "axis-aligned"
        );
        x0 <= x && x <= x1 && y0 <= y && y <= y1
    };
    match def["kind"].as_str().expect("kind") {
        "distance_to" => {
            let p = xy(&def["point"]);
            ((x - p[0]).powi(2) + (y - p[1]).powi(2)).sqrt()
                / (f64::from(W).powi(2) + f64::from(H).powi(2)).sqrt()
        }
        "inside" => {
            let poly: Vec<[f64; 2]> = def["polygon"]
                .as_array()
                .expect("polygon")
                .iter()
                .map(xy)
                .collect();
            f64::from(u8::from(in_box(&poly, x, y)))
        }
        "rbf" => {
            let c = xy(&def["center"]);
            let s = def["sigma_px"].as_f64().expect("sigma");
            (-((x - c[0]).powi(2) + (y - c[1]).powi(2)) / (2.0 * s * s)).exp()
        }
        "no_go" => f64::from(u8::from(no_go.iter().any(|z| in_box(z, x, y)))),
        other => panic!("feature kind {other}"),
    }
}

/// Recomputes a bundled fit's reward map from its JSON alone (docs/conventions.md, "Reward
/// fits", and the JSON's `recompute`), both from the standardised weights with the means and
/// scales and from the raw weights with the offset, and compares both with the bundled map to
/// float32 rounding. The means and scales are recomputed too.
fn check_recomputed(doc: &Value, map: &[f32]) {
    let f64s = |k: &str| -> Vec<f64> {
        doc[k]
            .as_array()
            .unwrap_or_else(|| panic!("{k}"))
            .iter()
            .map(|v| v.as_f64().expect("number"))
            .collect()
    };
    let p = doc["cell_px"].as_u64().expect("cell_px") as usize;
    let (cols, rows) = (
        doc["cols"].as_u64().expect("cols") as usize,
        doc["rows"].as_u64().expect("rows") as usize,
    );
    let (w, h) = (W as usize, H as usize);
    assert_eq!((cols, rows), (w.div_ceil(p), h.div_ceil(p)));
    assert_eq!(map.len(), rows * cols);
    let defs = doc["features"].as_array().expect("features");
    let no_go: Vec<Vec<[f64; 2]>> = doc["no_go_zones"]
        .as_array()
        .expect("zones")
        .iter()
        .map(|z| {
            z.as_array()
                .expect("zone")
                .iter()
                .map(|v| [v[0].as_f64().expect("x"), v[1].as_f64().expect("y")])
                .collect()
        })
        .collect();
    let (weights, raw_weights) = (f64s("weights"), f64s("raw_weights"));
    let (means, scales) = (f64s("feature_means"), f64s("feature_scales"));
    let constant: Vec<bool> = doc["constant_features"]
        .as_array()
        .expect("constant")
        .iter()
        .map(|v| v.as_bool().expect("bool"))
        .collect();
    let offset = doc["raw_offset"].as_f64().expect("raw_offset");
    let k = defs.len();
    assert_eq!(
        [
            weights.len(),
            raw_weights.len(),
            means.len(),
            scales.len(),
            constant.len()
        ],
        [k; 5]
    );
    // The raw features at every cell centre.
    let centre =
        |i: usize, size: usize| ((i * p) as f64 + ((i + 1) * p).min(size) as f64 - 1.0) / 2.0;
    let mut raw = vec![0.0; rows * cols * k];
    for r in 0..rows {
        for c in 0..cols {
            let (x, y) = (centre(c, w), centre(r, h));
            for (j, def) in defs.iter().enumerate() {
                raw[(r * cols + c) * k + j] = raw_features(def, x, y, &no_go);
            }
        }
    }
    // The standardisation over all cells: population mean and standard deviation.
    let n = (rows * cols) as f64;
    for j in 0..k {
        let mean = (0..rows * cols).map(|s| raw[s * k + j]).sum::<f64>() / n;
        let std = ((0..rows * cols)
            .map(|s| (raw[s * k + j] - mean).powi(2))
            .sum::<f64>()
            / n)
            .sqrt();
        assert!(
            (mean - means[j]).abs() <= 1e-12 * mean.abs().max(1.0),
            "{j}"
        );
        assert!(!constant[j], "feature {j} varies over the cells");
        assert!((std - scales[j]).abs() <= 1e-12 * std.max(1.0), "{j}");
        assert!(
            (raw_weights[j] - weights[j] / scales[j]).abs() <= 1e-12 * raw_weights[j].abs(),
            "{j}"
        );
    }
    let biggest = map.iter().fold(0f64, |m, v| m.max(f64::from(v.abs())));
    // float32 rounding of the map's values, with room for the float64 differences of computing
    // the same sum in another order.
    let tol = f64::from(f32::EPSILON) * biggest;
    for s in 0..rows * cols {
        let f = &raw[s * k..(s + 1) * k];
        let standardised: f64 = (0..k)
            .map(|j| weights[j] * (f[j] - means[j]) / scales[j])
            .sum();
        let from_raw: f64 = (0..k).map(|j| raw_weights[j] * f[j]).sum::<f64>() + offset;
        let got = f64::from(map[s]);
        assert!(
            (standardised - got).abs() <= tol,
            "cell {s}: standardised weights give {standardised}, the map holds {got}"
        );
        assert!(
            (from_raw - got).abs() <= tol,
            "cell {s}: raw weights give {from_raw}, the map holds {got}"
        );
    }
}

async fn learned_bundles(s: Server) {
    let editor = s.token("fit bundles", "editor");
    let viewer = s.token("fit bundles", "viewer");
    let (st, cam) = s
        .post(
            "/api/cameras",
            Some(&editor),
            &json!({"name": "bench", "width": W, "height": H, "no_go_zones": [NO_GO]}),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{cam}");
    let cam = cam["id"].as_str().expect("camera").to_string();
    let (st, frame) = s
        .post_bytes(
            &format!("/api/cameras/{cam}/frames"),
            Some(&editor),
            "image/png",
            png(W, H, 3),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{frame}");
    let frame = frame["id"].as_str().expect("frame").to_string();

    // Two fits: every feature kind on 10 px cells, and distance and inside alone on 8 px cells
    // (whose last row and column are whole: 160 / 8, 120 / 8) without collapsing repeats.
    let features_a = json!([
        {"kind": "distance_to", "point": GOAL},
        {"kind": "inside", "polygon": INSIDE},
        {"kind": "rbf", "center": [30.0, 90.0], "sigma_px": 15.0},
        {"kind": "no_go"}
    ]);
    let features_b = json!([
        {"kind": "distance_to", "point": [40.0, 30.0]},
        {"kind": "inside", "polygon": INSIDE}
    ]);
    let fit_a = finished_fit(
        &s,
        &editor,
        &json!({"frame_id": frame, "cell_px": 10, "features": features_a, "demos": paths()}),
    )
    .await;
    let fit_b = finished_fit(
        &s,
        &editor,
        &json!({"frame_id": frame, "cell_px": 8, "features": features_b, "demos": paths(),
                "l2": 0.01, "collapse_repeats": false}),
    )
    .await;

    // A goal with both: fit A twice (once by its id in capitals, the same fit), a point term
    // between them, fit B last.
    let goal_doc = json!({"name": "tray where the demos went", "frame_id": frame, "terms": [
        {"kind": "learned", "label": "tray", "reward_fit_id": fit_a, "source": [20.0, 20.0]},
        {"kind": "point", "label": "pot", "source": [30.0, 40.0], "target": [90.0, 70.0]},
        {"kind": "learned", "label": "tray again", "reward_fit_id": fit_a.to_uppercase(),
         "source": [50.0, 10.0], "weight": 0.5},
        {"kind": "learned", "label": "cup", "reward_fit_id": fit_b, "source": [150.0, 60.0]}
    ], "cost": {"metric": "squared", "steps": "all"}});
    let (st, rev) = s.post("/api/goals", Some(&editor), &goal_doc).await;
    assert_eq!(st, StatusCode::CREATED, "{rev}");
    let goal = rev["goal_id"].as_str().expect("goal").to_string();
    let base = format!("/api/goals/{goal}/revisions/1");

    let (st, bundle) = get_bytes(&s, &format!("{base}/bundle.zip"), &viewer).await;
    assert_eq!(st, StatusCode::OK);
    let (_, again) = get_bytes(&s, &format!("{base}/bundle.zip"), &viewer).await;
    assert_eq!(bundle, again, "the same revision gives the same bytes");
    // Its strong ETag still names it (the fits it carries never change): format 2's.
    let resp = s
        .client
        .get(s.url(&format!("{base}/bundle.zip")))
        .bearer_auth(&viewer)
        .send()
        .await
        .expect("GET bundle");
    let tag = etag(&resp).expect("etag");
    assert_eq!(
        resp.bytes().await.expect("body").as_ref(),
        bundle.as_slice()
    );
    let (_, rev_bytes) = get_bytes(&s, &base, &viewer).await;
    let mut h = sha2::Sha256::new();
    h.update(b"goal bundle format 2\n");
    h.update(&rev_bytes);
    assert_eq!(tag, format!("\"{}\"", hex::encode(h.finalize())));
    let resp = s
        .client
        .get(s.url(&format!("{base}/bundle.zip")))
        .bearer_auth(&viewer)
        .header("if-none-match", &tag)
        .send()
        .await
        .expect("GET bundle again");
    assert_eq!(resp.status(), StatusCode::NOT_MODIFIED);
    let files = entries(&bundle);

    // The layout: the fits after camera.json, in id order, JSON then map.
    let mut ids = [fit_a.clone(), fit_b.clone()];
    ids.sort();
    let mut want_names: Vec<String> = ["goal.json", "cost-maps.npy", "frame.png", "camera.json"]
        .map(String::from)
        .to_vec();
    for id in &ids {
        want_names.push(format!("reward_fits/{id}.json"));
        want_names.push(format!("reward_fits/{id}.npy"));
    }
    want_names.extend(["README.txt", "manifest.json"].map(String::from));
    let names: Vec<String> = files.iter().map(|(n, _)| n.clone()).collect();
    assert_eq!(names, want_names);

    // Every file but the manifest is listed with its SHA-256.
    let manifest: Value = serde_json::from_slice(entry(&files, "manifest.json")).expect("manifest");
    assert_eq!(manifest["format_version"], 2);
    let listed = manifest["files"].as_object().expect("files");
    assert_eq!(listed.len(), files.len() - 1, "{listed:?}");
    for (name, bytes) in &files[..files.len() - 1] {
        assert_eq!(
            listed[name].as_str(),
            Some(sha256(bytes).as_str()),
            "{name}"
        );
    }
    let readme = String::from_utf8(entry(&files, "README.txt").to_vec()).expect("utf8");
    assert!(readme.contains("reward_fits/<id>.npy"), "{readme}");

    for (id, terms, features) in [
        (&fit_a, json!([0, 2]), &features_a),
        (&fit_b, json!([3]), &features_b),
    ] {
        let json_name = format!("reward_fits/{id}.json");
        let npy_name = format!("reward_fits/{id}.npy");
        let (st, view) = s
            .get(&format!("/api/reward-fits/{id}"), Some(&viewer))
            .await;
        assert_eq!(st, StatusCode::OK, "{view}");
        let rows = view["rows"].as_u64().expect("rows");
        let cols = view["cols"].as_u64().expect("cols");
        let listed = manifest["reward_fits"]
            .as_array()
            .expect("reward_fits")
            .iter()
            .find(|f| f["id"] == id.as_str())
            .unwrap_or_else(|| panic!("{id} in {manifest}"));
        assert_eq!(
            listed,
            &json!({"id": id, "file": json_name, "cell_px": view["cell_px"], "terms": terms,
                    "reward_map": {"file": npy_name, "dtype": "float32", "shape": [rows, cols]}})
        );

        // The map, byte for byte the served one.
        let (st, served) = get_bytes(
            &s,
            &format!("/api/reward-fits/{id}/reward-map.npy"),
            &viewer,
        )
        .await;
        assert_eq!(st, StatusCode::OK);
        assert_eq!(entry(&files, &npy_name), served.as_slice(), "{npy_name}");

        // The description: canonical JSON; what the fit serves, the features as submitted.
        let text = std::str::from_utf8(entry(&files, &json_name)).expect("utf8");
        let doc: Value = serde_json::from_str(text).expect("fit JSON");
        assert_eq!(
            numbers_masked(&goalsmith_core::canonical::to_string(&doc)),
            numbers_masked(text),
            "{json_name} is canonical JSON"
        );
        for key in [
            "id",
            "frame_id",
            "cell_px",
            "cols",
            "rows",
            "weights",
            "raw_weights",
            "feature_names",
            "l2",
            "collapse_repeats",
            "iterations",
            "converged",
            "stop",
            "grad_norm",
            "log_likelihood_per_step",
            "uniform_log_likelihood_per_step",
            "reward_argmax",
        ] {
            assert_eq!(doc[key], view[key], "{json_name}: {key}");
            assert!(!doc[key].is_null(), "{json_name}: {key}");
        }
        assert_eq!(
            (
                &doc["held_out"]["log_likelihood_per_step"],
                &doc["held_out"]["uniform_log_likelihood_per_step"],
                &doc["held_out"]["folds"]
            ),
            (
                &view["held_out_log_likelihood_per_step"],
                &view["held_out_uniform_log_likelihood_per_step"],
                &json!(5)
            )
        );
        assert_eq!(
            (doc["width"].as_u64(), doc["height"].as_u64()),
            (Some(160), Some(120))
        );
        assert_eq!(&doc["features"], features, "{json_name}: as submitted");
        assert_eq!(doc["no_go_zones"], json!([NO_GO]));
        assert_eq!(doc["reward_map"]["file"], npy_name.as_str());
        assert_eq!(doc["reward_map"]["shape"], json!([rows, cols]));
        for key in ["cell_centre", "features", "standardise", "reward", "cost"] {
            assert!(
                doc["recompute"][key].is_string(),
                "{json_name}: recompute.{key}"
            );
        }
        let arr = npy::read(&served, 1 << 20).expect("npy");
        check_recomputed(&doc, arr.as_f32().expect("float32"));
    }

    // Offline scoring of the bundle equals the route, byte for byte: points (in and out of
    // the frame, on cell edges) and probability maps at the frame's size and smaller.
    let mut rng = goalsmith_core::rng::SplitMix64(0x5eed_b0d1e5);
    let p = 4;
    let mut candidates: Vec<Value> = (0..40)
        .map(|_| {
            let steps: Vec<Value> = (0..3)
                .map(|_| {
                    let pts: Vec<[f64; 2]> = (0..p)
                        .map(|_| [rng.next_f64() * 180.0 - 10.0, rng.next_f64() * 140.0 - 10.0])
                        .collect();
                    json!(pts)
                })
                .collect();
            json!(steps)
        })
        .collect();
    let edges = [[9.5, 9.5], [124.5, 94.5], [-0.5, 119.5], [159.5, -0.5]];
    candidates.push(json!(vec![edges; 3]));
    let points = json!({"points": candidates}).to_string().into_bytes();
    let route_points = route_cost(
        &s,
        &format!("{base}/cost"),
        &viewer,
        "application/json",
        points.clone(),
    )
    .await;
    let (ok, cli, err) = run_cost(&bundle, "--points", &points);
    assert!(ok, "{err}");
    assert_eq!(
        String::from_utf8_lossy(&cli).trim_end(),
        String::from_utf8_lossy(&route_points)
    );
    for (n, t, h, w) in [
        (2usize, 2usize, H as usize, W as usize),
        (6, 1, 30, 40),
        (3, 2, 17, 23),
    ] {
        let values: Vec<f32> = (0..n * t * p * h * w)
            .map(|_| (rng.next_f64() * 2.0 / (h * w) as f64) as f32)
            .collect();
        let body = npy::write_f32(&[n, t, p, h, w], &values).expect("npy");
        let route = route_cost(
            &s,
            &format!("{base}/cost"),
            &viewer,
            "application/x-npy",
            body.clone(),
        )
        .await;
        let (ok, cli, err) = run_cost(&bundle, "--maps", &body);
        assert!(ok, "{w}x{h}: {err}");
        assert_eq!(
            String::from_utf8_lossy(&cli).trim_end(),
            String::from_utf8_lossy(&route),
            "maps {w}x{h}"
        );
    }

    // Refused, naming the file: a manifest without a fit's map (or description), a map or a
    // description that does not match its SHA-256.
    let rezip = |files: &[(String, Vec<u8>)]| {
        let refs: Vec<(&str, &[u8])> = files
            .iter()
            .map(|(n, b)| (n.as_str(), b.as_slice()))
            .collect();
        zip_of(&refs)
    };
    let without = |name: &str| {
        let mut m = manifest.clone();
        m["files"].as_object_mut().expect("files").remove(name);
        let mut f = files.clone();
        f.last_mut().expect("manifest").1 = serde_json::to_vec_pretty(&m).expect("json");
        rezip(&f)
    };
    let tampered = |name: &str| {
        let mut f = files.clone();
        let (_, bytes) = f.iter_mut().find(|(n, _)| n == name).expect("file");
        // The last byte: a map's last reward, a description's closing brace.
        let last = bytes.len() - 1;
        bytes[last] ^= 0x01;
        rezip(&f)
    };
    // Re-zipped as they are, the files still score the same (the control for what follows).
    let (ok, same, err) = run_cost(&rezip(&files), "--points", &points);
    assert!(ok, "{err}");
    assert_eq!(
        String::from_utf8_lossy(&same).trim_end(),
        String::from_utf8_lossy(&route_points)
    );
    let npy_b = format!("reward_fits/{fit_b}.npy");
    let json_a = format!("reward_fits/{fit_a}.json");
    for (what, bad, name, says) in [
        ("unlisted map", without(&npy_b), &npy_b, "does not list"),
        (
            "unlisted description",
            without(&json_a),
            &json_a,
            "does not list",
        ),
        ("tampered map", tampered(&npy_b), &npy_b, "SHA-256"),
        (
            "tampered description",
            tampered(&json_a),
            &json_a,
            "SHA-256",
        ),
    ] {
        let (ok, out, err) = run_cost(&bad, "--points", &points);
        assert!(!ok, "{what}: accepted: {}", String::from_utf8_lossy(&out));
        assert!(out.is_empty(), "{what}: no result");
        assert!(
            err.contains(name.as_str()) && err.contains(says),
            "{what}: {err}"
        );
    }
    // A fit's files left out of the archive entirely (but listed) are named too.
    let mut missing = files.clone();
    missing.retain(|(n, _)| n != &npy_b);
    let (ok, _, err) = run_cost(&rezip(&missing), "--points", &points);
    assert!(!ok && err.contains(&npy_b), "{err}");

    // A goal set holds the same files in the item's folder, listed in both manifests.
    let (st, plain) = s
        .post(
            "/api/goals",
            Some(&editor),
            &point_goal(&frame, "pot alone"),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{plain}");
    let plain = plain["goal_id"].as_str().expect("goal").to_string();
    let (st, set) = s
        .post(
            "/api/goal-sets",
            Some(&editor),
            &json!({"name": "tidy-up", "items": [
                {"goal_id": plain, "revision": 1}, {"goal_id": goal, "revision": 1}]}),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{set}");
    let (st, set_zip) = get_bytes(
        &s,
        &format!(
            "/api/goal-sets/{}/bundle.zip",
            set["id"].as_str().expect("set")
        ),
        &viewer,
    )
    .await;
    assert_eq!(st, StatusCode::OK);
    let set_files = entries(&set_zip);
    let top: Value = serde_json::from_slice(entry(&set_files, "manifest.json")).expect("manifest");
    let top_listed = top["files"].as_object().expect("files");
    assert_eq!(top_listed.len(), set_files.len() - 1);
    for (name, bytes) in &set_files[..set_files.len() - 1] {
        assert_eq!(
            top_listed[name].as_str(),
            Some(sha256(bytes).as_str()),
            "{name}"
        );
    }
    let plain_dir = format!("01-{plain}/");
    assert!(
        !set_files
            .iter()
            .any(|(n, _)| n.starts_with(&format!("{plain_dir}reward_fits/"))),
        "the plain goal carries no fit"
    );
    let item: Value =
        serde_json::from_slice(entry(&set_files, &format!("{plain_dir}manifest.json")))
            .expect("item");
    assert_eq!(item["reward_fits"], json!([]));
    let dir = format!("02-{goal}/");
    for id in &ids {
        for ext in ["json", "npy"] {
            let name = format!("reward_fits/{id}.{ext}");
            assert_eq!(
                entry(&set_files, &format!("{dir}{name}")),
                entry(&files, &name),
                "{dir}{name}"
            );
        }
    }
    let item: Value =
        serde_json::from_slice(entry(&set_files, &format!("{dir}manifest.json"))).expect("item");
    assert_eq!(item["reward_fits"], manifest["reward_fits"]);
    assert_eq!(item["files"], manifest["files"]);
}

on_both_databases!(bundles_carry_reward_fits, learned_bundles);
