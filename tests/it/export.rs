//! The planner's side: cost maps, batched costs, overlay, bundles and outcomes over HTTP.

use crate::on_both_databases;
use crate::support::*;
use goalsmith_core::npy;
use reqwest::StatusCode;
use serde_json::{Value, json};

async fn post_npy(s: &Server, path: &str, token: &str, body: Vec<u8>) -> (StatusCode, Value) {
    s.post_bytes(path, Some(token), "application/x-npy", body)
        .await
}

/// Costs computed outside goalsmith, in numpy, by tests/reference/gen_route_cost.py (see its
/// docstring for the formulas and the goals).
fn numpy_reference() -> Value {
    serde_json::from_str(include_str!("../reference/route_cost.json"))
        .expect("tests/reference/route_cost.json parses")
}

/// `got` equals `want` to 1e-9 relative: |got − want| ≤ 1e-9 · max(|got|, |want|), so a 0 must
/// be exactly 0. Why not exactly: goalsmith and shapely reach the distance to a slanted polygon
/// edge through different sequences of float64 operations, and serde_json's default float
/// parsing (of the reference file and of the responses) is best-effort rather than correctly
/// rounded; each of these costs an ulp or two (when this was written the route and the CLI
/// matched numpy bit for bit except on the slanted region's costs, within 3e-16 relative), so
/// 1e-9 leaves a wide margin and still catches any error in a formula.
fn assert_close(what: &str, got: &Value, want: &Value) {
    match (got.as_f64(), want.as_f64()) {
        (Some(g), Some(w)) => {
            let scale = g.abs().max(w.abs());
            assert!((g - w).abs() <= 1e-9 * scale, "{what}: got {g}, numpy {w}");
        }
        _ => match (got.as_array(), want.as_array()) {
            (Some(g), Some(w)) => {
                assert_eq!(g.len(), w.len(), "{what}: lengths differ: {got} vs {want}");
                for (k, (g, w)) in g.iter().zip(w).enumerate() {
                    assert_close(&format!("{what}[{k}]"), g, w);
                }
            }
            _ => panic!("{what}: got {got}, numpy {want}"),
        },
    }
}

/// A cost response against the numpy reference `want` ({costs, per_point, best}): `costs` and
/// `per_point` to 1e-9 relative ([`assert_close`]), `best` exactly (the generator checks that
/// the least cost is ahead of every other candidate's by far more than that, apart from an
/// exact copy of the best candidate placed after it).
fn assert_costs_close(what: &str, got: &Value, want: &Value) {
    assert_close(&format!("{what}: costs"), &got["costs"], &want["costs"]);
    assert_close(
        &format!("{what}: per_point"),
        &got["per_point"],
        &want["per_point"],
    );
    assert_eq!(got["best"], want["best"], "{what}: best: {got}");
}

/// Runs `goalsmith cost --bundle B --points|--maps F` and returns its JSON output.
fn offline_cost(bundle: &[u8], flag: &str, input: &[u8]) -> Value {
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(dir.path().join("b.zip"), bundle).unwrap();
    std::fs::write(dir.path().join("input"), input).unwrap();
    let out = std::process::Command::new(bin())
        .args(["cost", "--bundle"])
        .arg(dir.path().join("b.zip"))
        .arg(flag)
        .arg(dir.path().join("input"))
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    serde_json::from_slice(&out.stdout).unwrap()
}

/// The reference's probability maps of the export goal as a float32 NPY body.
fn reference_maps_npy(maps: &Value) -> Vec<u8> {
    let dim = |k: &str| maps[k].as_u64().unwrap() as usize;
    let values: Vec<f32> = maps["values"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v.as_f64().unwrap() as f32)
        .collect();
    npy::write_f32(
        &[dim("n"), dim("t"), dim("p"), dim("height"), dim("width")],
        &values,
    )
    .unwrap()
}

/// The terms and cost of [`goal`]; gen_route_cost.py's `export_goal` holds the same, and the
/// numpy checks below assert that it still does.
fn goal_body(frame: &str) -> Value {
    json!({
        "name": "pot to the mat corner",
        "frame_id": frame,
        "terms": [
            {"kind": "point", "source": [10.0, 12.0], "target": [40.0, 30.0], "tolerance_px": 3.0},
            {"kind": "region", "source": [20.0, 5.0], "polygon": [[30.0, 5.0], [50.0, 5.0], [50.0, 20.0], [30.0, 20.0]], "weight": 2.0}
        ],
        "cost": {"metric": "squared", "steps": "all"}
    })
}

/// The numpy reference of the export goal, checked to be about [`goal_body`]'s goal.
fn export_reference() -> Value {
    let reference = numpy_reference();
    let ours = goal_body("");
    let theirs = &reference["export_goal"];
    assert_eq!(
        (&ours["terms"], &ours["cost"]),
        (&theirs["terms"], &theirs["cost"]),
        "goal() and gen_route_cost.py's export_goal describe the same goal"
    );
    theirs.clone()
}

/// A goal with a point term (target (40, 30)) and a region term, on a 64×48 frame.
async fn goal(s: &Server) -> (String, String, String) {
    let (editor, _cam, frame) = camera_and_frame(s, "planners", json!({})).await;
    let body = goal_body(&frame);
    let (st, rev) = s.post("/api/goals", Some(&editor), &body).await;
    assert_eq!(st, StatusCode::CREATED, "{rev}");
    (editor, rev["goal_id"].as_str().unwrap().to_string(), frame)
}

async fn maps_costs_and_bad_input(s: Server) {
    let (editor, goal, _frame) = goal(&s).await;
    let base = format!("/api/goals/{goal}/revisions/1");

    // Full-size maps: (P, H, W) = (2, 48, 64); squared Euclidean distance to (40, 30).
    let (st, bytes) = get_bytes(&s, &format!("{base}/cost-maps.npy"), &editor).await;
    assert_eq!(st, StatusCode::OK);
    let arr = npy::read(&bytes, usize::MAX).unwrap();
    assert_eq!(arr.header.shape, vec![2, 48, 64]);
    let m = arr.as_f32().unwrap();
    assert_eq!(m[30 * 64 + 40], 0.0, "zero at the target pixel centre");
    assert_eq!(m[30 * 64 + 43], 9.0, "3 px right of the target: 3² = 9");
    assert_eq!(m[48 * 64 + 10 * 64 + 40], 0.0, "inside the region");
    assert_eq!(
        m[48 * 64 + 10 * 64 + 25],
        25.0,
        "5 px left of the region edge x = 30"
    );

    // Resampled: map pixel (i, j) of a 32×24 map is frame point ((i+0.5)·2−0.5, (j+0.5)·2−0.5).
    let (st, bytes) = get_bytes(
        &s,
        &format!("{base}/cost-maps.npy?width=32&height=24"),
        &editor,
    )
    .await;
    assert_eq!(st, StatusCode::OK);
    let arr = npy::read(&bytes, usize::MAX).unwrap();
    assert_eq!(arr.header.shape, vec![2, 24, 32]);
    let m = arr.as_f32().unwrap();
    let (x, y) = (20.0 * 2.0 + 0.5, 15.0 * 2.0 + 0.5);
    let expect = (x - 40.0f64).powi(2) + (y - 30.0f64).powi(2);
    assert!(
        (f64::from(m[15 * 32 + 20]) - expect).abs() < 1e-4,
        "{} vs {expect}",
        m[15 * 32 + 20]
    );
    for q in ["?width=32", "?width=0&height=3", "?width=big&height=3"] {
        let (st, _) = get_bytes(&s, &format!("{base}/cost-maps.npy{q}"), &editor).await;
        assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY, "{q}");
    }

    // JSON points (N=2, T=2, P=2). Candidate 0 sits on both targets at the end; costs sum over
    // steps with weights 1 and 2.
    let pts = json!({"points": [
        [[[37.0, 30.0], [40.0, 12.0]], [[40.0, 30.0], [40.0, 12.0]]],
        [[[40.0, 34.0], [25.0, 12.0]], [[-10.0, 30.0], [100.0, 12.0]]]
    ]});
    let (st, r) = s.post(&format!("{base}/cost"), Some(&editor), &pts).await;
    assert_eq!(st, StatusCode::OK, "{r}");
    assert_eq!(r["costs"][0], 9.0);
    // Candidate 1: point 16 + 2500, region 2·(25 + 2500) (x = 100 is 50 px right of x = 50).
    assert_eq!(r["per_point"][1][0], 16.0 + 2500.0);
    assert_eq!(r["per_point"][1][1], 2.0 * (25.0 + 2500.0));
    assert_eq!(r["best"], 0);

    // Probability maps, float32 and float16: a delta at the target pixel costs 0; at 3 px right 9.
    let (n, t, p, h, w) = (2usize, 1usize, 2usize, 48usize, 64usize);
    let mut maps = vec![0f32; n * t * p * h * w];
    let idx = |c: usize, pp: usize, x: usize, y: usize| ((c * t) * p + pp) * h * w + y * w + x;
    maps[idx(0, 0, 40, 30)] = 1.0;
    maps[idx(0, 1, 40, 10)] = 1.0;
    maps[idx(1, 0, 43, 30)] = 1.0;
    maps[idx(1, 1, 40, 10)] = 1.0;
    let body = npy::write_f32(&[n, t, p, h, w], &maps).unwrap();
    let (st, r) = post_npy(&s, &format!("{base}/cost"), &editor, body).await;
    assert_eq!(st, StatusCode::OK, "{r}");
    assert_eq!(r["costs"], json!([0.0, 9.0]));
    let halves: Vec<half::f16> = maps.iter().map(|&v| half::f16::from_f32(v)).collect();
    let (st, r16) = post_npy(
        &s,
        &format!("{base}/cost"),
        &editor,
        npy::write_f16(&[n, t, p, h, w], &halves).unwrap(),
    )
    .await;
    assert_eq!(st, StatusCode::OK, "{r16}");
    assert_eq!(r16["costs"], r["costs"]);
    // Smaller maps are scored against cost maps evaluated exactly at their size (not
    // interpolated), and used as sent (these sum to 0.04 to 1.17, not 1). Compared
    // exactly with the numpy reference, tests/reference/gen_route_cost.py (`export_goal.maps`):
    // the map values are multiples of 2^-10 and the 24×32 sample points half-integers, so every
    // cost-map value is a multiple of 1/4 and every product and partial sum is held exactly in
    // float32, whatever the order of summation; the script asserts that bound.
    let reference = export_reference();
    let (st, r) = post_npy(
        &s,
        &format!("{base}/cost"),
        &editor,
        reference_maps_npy(&reference["maps"]),
    )
    .await;
    assert_eq!(st, StatusCode::OK, "{r}");
    for key in ["costs", "per_point", "best"] {
        assert_eq!(
            r[key], reference["maps"][key],
            "{key}, numpy reference (tests/reference/gen_route_cost.py)"
        );
    }

    // Bad input, each a 4xx with our error body, and the server keeps serving.
    let f64_maps = {
        let mut b = npy::write_f32(&[1, 1, 2, 48, 64], &vec![0.0; 2 * 48 * 64]).unwrap();
        // Same header length: '<f4' → '<f8' and double the data.
        let text = String::from_utf8_lossy(&b[..128]).replace("<f4", "<f8");
        b.splice(..128, text.bytes());
        b.extend(vec![0u8; 2 * 48 * 64 * 4]);
        b
    };
    let fortran = {
        let b = npy::write_f32(&[1, 1, 2, 48, 64], &vec![0.0; 2 * 48 * 64]).unwrap();
        let text =
            String::from_utf8_lossy(&b).replace("'fortran_order': False", "'fortran_order': True ");
        text.into_bytes()
    };
    let huge_claim = {
        let mut b = npy::write_f32(&[1, 1, 2, 48, 64], &vec![0.0; 2 * 48 * 64]).unwrap();
        let head = String::from_utf8_lossy(&b[..128])
            .replace("(1, 1, 2, 48, 64)", "(99999, 1, 2, 48, 64)");
        b.splice(..128, head.bytes());
        b.truncate(256);
        b
    };
    let nan_points = npy::write_f32(&[1, 1, 2, 2], &[f32::NAN, 1.0, 2.0, 3.0]).unwrap();
    let cases: Vec<(&str, Vec<u8>, StatusCode)> = vec![
        ("float64 maps", f64_maps, StatusCode::UNPROCESSABLE_ENTITY),
        ("Fortran order", fortran, StatusCode::UNPROCESSABLE_ENTITY),
        (
            "P mismatch",
            npy::write_f32(&[1, 1, 3, 4, 4], &[0.0; 48]).unwrap(),
            StatusCode::UNPROCESSABLE_ENTITY,
        ),
        (
            "3-D array",
            npy::write_f32(&[2, 4, 4], &[0.0; 32]).unwrap(),
            StatusCode::UNPROCESSABLE_ENTITY,
        ),
        (
            "2 GB header claim",
            huge_claim,
            StatusCode::UNPROCESSABLE_ENTITY,
        ),
        (
            "NaN in points",
            nan_points,
            StatusCode::UNPROCESSABLE_ENTITY,
        ),
        (
            "not NPY at all",
            b"hello".to_vec(),
            StatusCode::UNPROCESSABLE_ENTITY,
        ),
        (
            "negative probabilities",
            npy::write_f32(&[1, 1, 2, 2, 2], &[-1.0; 8]).unwrap(),
            StatusCode::UNPROCESSABLE_ENTITY,
        ),
    ];
    for (what, body, status) in cases {
        let (st, err) = post_npy(&s, &format!("{base}/cost"), &editor, body).await;
        assert!(
            st == status || (what == "2 GB header claim" && st == StatusCode::PAYLOAD_TOO_LARGE),
            "{what}: {st} {err}"
        );
        assert!(err["error"]["message"].is_string(), "{what}: {err}");
    }
    let (st, err) = s
        .post(
            &format!("{base}/cost"),
            Some(&editor),
            &json!({"points": [[[[1.0, 2.0]]]]}),
        )
        .await;
    assert_eq!(
        st,
        StatusCode::UNPROCESSABLE_ENTITY,
        "P = 1 given for P = 2: {err}"
    );
    assert_eq!(err["error"]["field"], "points[0][0]");
    let (st, _) = s
        .post_bytes(
            &format!("{base}/cost"),
            Some(&editor),
            "text/csv",
            b"1,2".to_vec(),
        )
        .await;
    assert_eq!(st, StatusCode::UNSUPPORTED_MEDIA_TYPE);
    let (st, _) = s.get("/healthz", None).await;
    assert_eq!(st, StatusCode::OK);
}

on_both_databases!(cost_maps_and_costs, maps_costs_and_bad_input);

async fn bundle_overlay_outcomes(s: Server) {
    let (editor, goal, _frame) = goal(&s).await;
    let base = format!("/api/goals/{goal}/revisions/1");

    let (st, png) = get_bytes(&s, &format!("{base}/overlay.png"), &editor).await;
    assert_eq!(st, StatusCode::OK);
    let img = image::load_from_memory(&png).unwrap();
    assert_eq!((img.width(), img.height()), (64, 48));

    let (st, a) = get_bytes(&s, &format!("{base}/bundle.zip"), &editor).await;
    assert_eq!(st, StatusCode::OK);
    let (_, b) = get_bytes(&s, &format!("{base}/bundle.zip"), &editor).await;
    assert_eq!(a, b, "the same revision gives the same bytes");
    let mut zip = zip::ZipArchive::new(std::io::Cursor::new(a.clone())).unwrap();
    let names: Vec<String> = zip.file_names().map(str::to_string).collect();
    for f in [
        "goal.json",
        "cost-maps.npy",
        "frame.png",
        "camera.json",
        "README.txt",
        "manifest.json",
    ] {
        assert!(names.iter().any(|n| n == f), "{f} in {names:?}");
    }
    let manifest: Value = {
        let mut s = String::new();
        std::io::Read::read_to_string(&mut zip.by_name("manifest.json").unwrap(), &mut s).unwrap();
        serde_json::from_str(&s).unwrap()
    };
    assert!(manifest["caution"].as_str().unwrap().contains("ISO 10218"));
    use sha2::Digest;
    for (name, sha) in manifest["files"].as_object().unwrap() {
        let mut bytes = Vec::new();
        std::io::Read::read_to_end(&mut zip.by_name(name).unwrap(), &mut bytes).unwrap();
        assert_eq!(
            hex::encode(sha2::Sha256::digest(&bytes)),
            sha.as_str().unwrap(),
            "{name}"
        );
    }
    let (_, rev_bytes) = get_bytes(&s, &base, &editor).await;
    let mut goal_json = Vec::new();
    std::io::Read::read_to_end(&mut zip.by_name("goal.json").unwrap(), &mut goal_json).unwrap();
    assert_eq!(
        goal_json, rev_bytes,
        "goal.json is the served revision, byte for byte"
    );

    // The route and the offline CLI on this bundle both give numpy's costs (numpy reference,
    // tests/reference/gen_route_cost.py, `export_goal`): points to 1e-9 relative (see
    // `assert_close`), the maps exactly (see `maps_costs_and_bad_input`).
    let reference = export_reference();
    let want = &reference["points"];
    let pts = json!({"points": want["points"]});
    let (st, route) = s.post(&format!("{base}/cost"), Some(&editor), &pts).await;
    assert_eq!(st, StatusCode::OK, "{route}");
    assert_costs_close("route, points (numpy reference)", &route, want);
    let cli = offline_cost(&a, "--points", pts.to_string().as_bytes());
    assert_costs_close("goalsmith cost --points (numpy reference)", &cli, want);
    let cli = offline_cost(&a, "--maps", &reference_maps_npy(&reference["maps"]));
    for key in ["costs", "per_point", "best"] {
        assert_eq!(
            cli[key], reference["maps"][key],
            "goalsmith cost --maps: {key}, numpy reference (tests/reference/gen_route_cost.py)"
        );
    }

    // A second process serving the same database gives the same bundle bytes.
    let s2 = Server::start(&s.db_url, &s.data_dir, &[]);
    let (_, c) = get_bytes(&s2, &format!("{base}/bundle.zip"), &editor).await;
    assert_eq!(a, c, "identical across processes");
    drop(s2);

    // Outcomes: one success (within 3 px and inside the region), one miss.
    let (st, o) = s
        .post(
            &format!("{base}/outcomes"),
            Some(&editor),
            &json!({"final_points": [[41.0, 31.0], [35.0, 10.0]], "note": "trial 1"}),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{o}");
    assert_eq!(o["success"], true);
    assert!((o["per_point"][0]["residual_px"].as_f64().unwrap() - 2f64.sqrt()).abs() < 1e-12);
    assert_eq!(o["per_point"][1]["residual_px"], 0.0);
    let (st, o) = s
        .post(
            &format!("{base}/outcomes"),
            Some(&editor),
            &json!({"final_points": [[50.0, 30.0], [35.0, 10.0]]}),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED);
    assert_eq!(o["success"], false);
    assert_eq!(o["per_point"][0]["within_tolerance"], false);
    let (st, err) = s
        .post(
            &format!("{base}/outcomes"),
            Some(&editor),
            &json!({"final_points": [[50.0, 30.0]]}),
        )
        .await;
    assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY, "{err}");
    let (st, all) = s
        .get(&format!("/api/goals/{goal}/outcomes"), Some(&editor))
        .await;
    assert_eq!(st, StatusCode::OK);
    assert_eq!(all["summary"]["trials"], 2);
    assert_eq!(all["summary"]["successes"], 1);
    assert_eq!(all["summary"]["success_rate"], 0.5);
    assert!(
        (all["summary"]["mean_residual_px"].as_f64().unwrap() - (2f64.sqrt() / 2.0 + 5.0) / 2.0)
            .abs()
            < 1e-12
    );
}

on_both_databases!(bundles_overlays_outcomes, bundle_overlay_outcomes);

/// Every scorable term kind (point, region with slanted edges, mask, rigid with three sources)
/// under three cost settings, created over HTTP, scored by the route and by `goalsmith cost` on
/// the exported bundle, and both compared with numpy (numpy reference,
/// tests/reference/gen_route_cost.py, `goals`) to 1e-9 relative, `best` exactly.
async fn route_and_cli_match_numpy(s: Server) {
    use base64::Engine;
    let reference = numpy_reference();
    let (editor, _cam, frame) = camera_and_frame(&s, "numpy", json!({})).await;
    assert_eq!(
        (reference["width"].as_u64(), reference["height"].as_u64()),
        (Some(64), Some(48)),
        "the reference is for camera_and_frame's 64×48 frame"
    );
    let goals = reference["goals"].as_array().unwrap();
    assert_eq!(goals.len(), 3);
    for want in goals {
        let name = want["name"].as_str().unwrap();
        // Masks travel as rows of 0/1 in the reference and as a PNG in the goal document.
        let mut terms = want["terms"].clone();
        for term in terms.as_array_mut().unwrap() {
            if let Some(rows) = term.as_object_mut().unwrap().remove("mask_rows") {
                let painted: Vec<bool> = rows
                    .as_array()
                    .unwrap()
                    .iter()
                    .flat_map(|r| r.as_str().unwrap().chars().map(|c| c == '1'))
                    .collect();
                assert_eq!(painted.len(), 64 * 48);
                let png = goalsmith::images::encode_mask(64, 48, &painted).unwrap();
                term["mask_png_base64"] =
                    json!(base64::engine::general_purpose::STANDARD.encode(png));
            }
        }
        let body = json!({"name": name, "frame_id": frame, "terms": terms, "cost": want["cost"]});
        let (st, rev) = s.post("/api/goals", Some(&editor), &body).await;
        assert_eq!(st, StatusCode::CREATED, "{name}: {rev}");
        // P = 1 + 1 + 1 + 3 source points, in the reference's order.
        let p = want["points"][0][0].as_array().unwrap().len();
        assert_eq!(rev["derived"]["points"].as_array().map(Vec::len), Some(p));
        let base = format!(
            "/api/goals/{}/revisions/1",
            rev["goal_id"].as_str().unwrap()
        );
        let pts = json!({"points": want["points"]});
        let (st, route) = s.post(&format!("{base}/cost"), Some(&editor), &pts).await;
        assert_eq!(st, StatusCode::OK, "{name}: {route}");
        assert_costs_close(&format!("{name}: route (numpy reference)"), &route, want);
        // With "grad": true the same costs, bit for bit, and ∂C/∂x shaped like the points
        // (its values are checked against differences of the numpy evaluation in the Python
        // package's tests); a grad that is not a boolean is refused, naming the field.
        let with_grad = json!({"points": want["points"], "grad": true});
        let (st, graded) = s
            .post(&format!("{base}/cost"), Some(&editor), &with_grad)
            .await;
        assert_eq!(st, StatusCode::OK, "{name}: {graded}");
        assert_eq!(graded["costs"], route["costs"], "{name}");
        assert_eq!(graded["per_point"], route["per_point"], "{name}");
        assert!(route.get("grad").is_none(), "{name}: grad only when asked");
        let g = graded["grad"].as_array().expect("grad");
        assert_eq!(g.len(), want["points"].as_array().unwrap().len());
        assert_eq!(
            g[0].as_array().unwrap().len(),
            want["points"][0].as_array().unwrap().len()
        );
        assert_eq!(g[0][0].as_array().unwrap().len(), p);
        let hit = want["cost"]["mode"] == "hit";
        let nonzero = graded["grad"]
            .to_string()
            .split(|c: char| !(c.is_ascii_digit() || c == '.' || c == '-' || c == 'e'))
            .filter(|t| !t.is_empty())
            .any(|t| t.parse::<f64>().is_ok_and(|v| v != 0.0));
        assert_eq!(
            nonzero, !hit,
            "{name}: hit mode has zero gradient, the others not"
        );
        let bad = json!({"points": want["points"], "grad": "yes"});
        let (st, err) = s.post(&format!("{base}/cost"), Some(&editor), &bad).await;
        assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY, "{err}");
        assert_eq!(err["error"]["field"], "grad", "{err}");

        let (st, bundle) = get_bytes(&s, &format!("{base}/bundle.zip"), &editor).await;
        assert_eq!(st, StatusCode::OK);
        let cli = offline_cost(&bundle, "--points", pts.to_string().as_bytes());
        assert_costs_close(
            &format!("{name}: goalsmith cost (numpy reference)"),
            &cli,
            want,
        );
    }
}

on_both_databases!(costs_match_numpy, route_and_cli_match_numpy);
