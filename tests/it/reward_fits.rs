//! Reward fits over HTTP: paths drawn by hand and a demo's track become a fit, run as an
//! operation; its weights, diagnostics and reward map are served; bad input is refused before
//! anything is queued; a queued fit can be cancelled. On SQLite and PostgreSQL.
//!
//! The computation itself is checked in goalsmith-core (server/core/tests/irl.rs: brute-force
//! enumeration, finite differences, a numpy implementation); here the paths head for a known
//! cell, so the reward's argmax must land there.

use crate::on_both_databases;
use crate::support::*;
use reqwest::StatusCode;
use serde_json::{Value, json};

const W: u32 = 160;
const H: u32 = 120;
const GOAL: [f64; 2] = [125.0, 95.0];

/// Hand-drawn paths from six starts straight to GOAL, a point every 4 px.
fn paths() -> Vec<Value> {
    straight_paths(
        &[
            [10.0, 10.0],
            [150.0, 5.0],
            [5.0, 110.0],
            [80.0, 20.0],
            [20.0, 60.0],
            [140.0, 40.0],
        ],
        GOAL,
        4.0,
    )
}

fn features() -> Value {
    json!([
        {"kind": "distance_to", "point": GOAL},
        {"kind": "inside", "polygon": [[60.0, 60.0], [100.0, 60.0], [100.0, 100.0], [60.0, 100.0]]},
        {"kind": "rbf", "center": [30.0, 90.0], "sigma_px": 15.0},
        {"kind": "no_go"}
    ])
}

async fn camera_frame(s: &Server, editor: &str, w: u32, h: u32) -> (String, String) {
    let (st, cam) = s
        .post(
            "/api/cameras",
            Some(editor),
            &json!({"name": "bench", "width": w, "height": h,
                    "no_go_zones": [[[140.0, 100.0], [159.0, 100.0], [159.0, 119.0], [140.0, 119.0]]]}),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{cam}");
    let cam = cam["id"].as_str().expect("camera").to_string();
    let (st, frame) = s
        .post_bytes(
            &format!("/api/cameras/{cam}/frames"),
            Some(editor),
            "image/png",
            png(w, h, 3),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{frame}");
    (cam, frame["id"].as_str().expect("frame").to_string())
}

async fn fits(s: Server) {
    let editor = s.token("reward bench", "editor");
    let viewer = s.token("reward bench", "viewer");
    let (cam, frame) = camera_frame(&s, &editor, W, H).await;
    // A demo of the camera with one track, followed to the end.
    let (st, demo) = s
        .post_bytes(
            &format!("/api/cameras/{cam}/demos"),
            Some(&editor),
            "application/zip",
            texture_demo_zip(W, H, 12, [3.0, 2.0]),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{demo}");
    let demo = demo["id"].as_str().expect("demo").to_string();
    let (st, started) = s
        .post(
            &format!("/api/demos/{demo}/tracks"),
            Some(&editor),
            &json!({"label": "pot rim", "frame": 0, "x": 70.0, "y": 55.0}),
        )
        .await;
    assert_eq!(st, StatusCode::ACCEPTED, "{started}");
    let track = started["track_id"].as_str().expect("track").to_string();
    operation_done(&s, &editor, started["operation_id"].as_str().expect("op")).await;

    let mut demos = paths();
    demos.push(json!({"demo_id": demo, "track_id": track}));
    let body = json!({"frame_id": frame, "cell_px": 10, "features": features(), "demos": demos});
    let (st, started) = s.post("/api/reward-fits", Some(&editor), &body).await;
    assert_eq!(st, StatusCode::ACCEPTED, "{started}");
    let id = started["id"].as_str().expect("fit").to_string();
    let op = operation_done(&s, &viewer, started["operation_id"].as_str().expect("op")).await;
    assert_eq!(op["state"], "succeeded", "{op}");
    assert_eq!(op["kind"], "reward_fit");
    assert_eq!(op["result"]["reward_fit_id"], id.as_str());
    let (st, fit) = s
        .get(&format!("/api/reward-fits/{id}"), Some(&viewer))
        .await;
    assert_eq!(st, StatusCode::OK, "{fit}");
    assert_eq!(fit["frame_id"], frame.as_str());
    assert_eq!(
        (fit["cols"].as_u64(), fit["rows"].as_u64()),
        (Some(16), Some(12))
    );
    assert_eq!(fit["demos"], 7);
    assert_eq!(fit["weights"].as_array().map(Vec::len), Some(4));
    assert_eq!(fit["feature_names"][0], "distance_to(125, 95)");
    assert_eq!(fit["converged"], true, "{fit}");
    // Every path heads for GOAL: the reward rises towards it (a negative weight on the distance)
    // and peaks in its cell, (12, 9), whose centre is (124.5, 94.5).
    assert!(fit["weights"][0].as_f64().expect("w0") < 0.0, "{fit}");
    assert_eq!(fit["reward_argmax"], json!([124.5, 94.5]), "{fit}");
    // With 7 demos, leave-one-out: the fitted reward explains unseen paths better than a walk.
    let held = fit["held_out_log_likelihood_per_step"]
        .as_f64()
        .expect("held out");
    let walk = fit["held_out_uniform_log_likelihood_per_step"]
        .as_f64()
        .expect("walk");
    assert!(
        held > walk + 0.3,
        "held out {held} against the uniform walk {walk}"
    );
    let trace = fit["trace"].as_array().expect("trace");
    assert_eq!(
        trace.len() as u64,
        fit["iterations"].as_u64().expect("it") + 1
    );
    // The reward map: NPY float32 (12, 16), its largest entry in the argmax cell.
    let (st, npy) = get_bytes(
        &s,
        &format!("/api/reward-fits/{id}/reward-map.npy"),
        &viewer,
    )
    .await;
    assert_eq!(st, StatusCode::OK);
    let arr = goalsmith_core::npy::read(&npy, 1 << 20).expect("npy");
    assert_eq!(arr.header.shape, vec![12, 16]);
    let values = arr.as_f32().expect("float32");
    let best = values
        .iter()
        .enumerate()
        .max_by(|a, b| a.1.total_cmp(b.1))
        .map(|(i, _)| i)
        .expect("values");
    assert_eq!(best, 9 * 16 + 12, "{values:?}");

    // What the operation streamed while it ran ends with the fit's own trace, line for line.
    let streamed = op["detail"]["trace"].as_array().expect("detail trace");
    assert_eq!(streamed.len(), trace.len(), "{op}");
    for (a, b) in streamed.iter().zip(trace) {
        assert_eq!(a[0], b["iteration"]);
        assert_eq!(a[1], b["log_likelihood_per_step"]);
        assert_eq!(a[2], b["grad_norm"]);
    }
    assert_eq!(op["detail"]["stage"], "held_out", "{op}");

    // The reward map as a picture: the frame's size, the caution inside, and most pixels the
    // editor's cost heat of its cell's learned cost blended over the frame (the rest, about a
    // quarter on this small frame, are the seven demos' paths and the best cell's mark).
    let (st, png_bytes) = get_bytes(
        &s,
        &format!("/api/reward-fits/{id}/reward-map.png"),
        &viewer,
    )
    .await;
    assert_eq!(st, StatusCode::OK);
    assert!(
        png_text(&png_bytes)
            .iter()
            .any(|(k, t)| k == "Warning" && t == goalsmith::SAFETY_CAUTION)
    );
    let picture = image::load_from_memory(&png_bytes).expect("png").to_rgba8();
    if let Ok(dir) = std::env::var("GOALSMITH_TEST_DUMP") {
        picture.save(format!("{dir}/reward-map.png")).expect("dump");
    }
    assert_eq!(picture.dimensions(), (W, H));
    let (st, frame_png) = get_bytes(&s, &format!("/api/frames/{frame}/image"), &viewer).await;
    assert_eq!(st, StatusCode::OK);
    let under = image::load_from_memory(&frame_png)
        .expect("frame")
        .to_rgba8();
    let (lo, hi) = values
        .iter()
        .fold((f32::INFINITY, f32::NEG_INFINITY), |(l, h), &v| {
            (l.min(v), h.max(v))
        });
    let mut heat_pixels = 0usize;
    for (i, j, p) in picture.enumerate_pixels() {
        let v = values[(j as usize / 10) * 16 + i as usize / 10];
        let t = f64::from(hi - v) / f64::from(hi - lo);
        let [r, g, b, a] = goalsmith::draw::palette::heat(t, false);
        let alpha = f64::from(a) / 255.0;
        let base = under.get_pixel(i, j).0;
        let want = [r, g, b]
            .into_iter()
            .zip(base)
            .map(|(c, u)| (f64::from(c) * alpha + f64::from(u) * (1.0 - alpha)).round());
        if want
            .zip(p.0)
            .all(|(w, got)| (w - f64::from(got)).abs() <= 1.0)
        {
            heat_pixels += 1;
        }
    }
    let all = (W * H) as usize;
    assert!(
        heat_pixels * 10 >= all * 7,
        "{heat_pixels} of {all} pixels show their cell's heat"
    );

    // The team's fits, newest first, this one among them with its figures.
    let (st, list) = s.get("/api/reward-fits", Some(&viewer)).await;
    assert_eq!(st, StatusCode::OK, "{list}");
    let listed = list["items"]
        .as_array()
        .expect("items")
        .iter()
        .find(|f| f["id"] == id.as_str())
        .expect("listed")
        .clone();
    assert_eq!(listed["finished"], true);
    assert_eq!(
        listed["log_likelihood_per_step"],
        fit["log_likelihood_per_step"]
    );
    assert_eq!(listed["feature_names"], fit["feature_names"]);

    // A `learned` term on the fit: its cost at a point is the best reward minus the reward of
    // the point's cell (cell ⌊(x + 0.5)/10⌋, ⌊(y + 0.5)/10⌋), at the frame's size and, exactly,
    // at any other.
    let max = values.iter().fold(f32::NEG_INFINITY, |m, &v| m.max(v)) as f64;
    let cost_at = |x: f64, y: f64| {
        let cell = |v: f64, n: usize| (((v + 0.5) / 10.0).floor().max(0.0) as usize).min(n - 1);
        max - values[cell(y, 12) * 16 + cell(x, 16)] as f64
    };
    let goal_doc = json!({"name": "tray where the demos went", "frame_id": frame,
        "terms": [{"kind": "learned", "label": "tray", "reward_fit_id": id, "source": [20.0, 20.0]}]});
    let (st, rev) = s.post("/api/goals", Some(&editor), &goal_doc).await;
    assert_eq!(st, StatusCode::CREATED, "{rev}");
    let goal = rev["goal_id"].as_str().expect("goal").to_string();
    for (w, h) in [(W as usize, H as usize), (40, 30), (23, 17)] {
        let (st, npy) = get_bytes(
            &s,
            &format!("/api/goals/{goal}/revisions/1/cost-maps.npy?width={w}&height={h}"),
            &viewer,
        )
        .await;
        assert_eq!(st, StatusCode::OK);
        let maps = goalsmith_core::npy::read(&npy, 1 << 24).expect("npy");
        assert_eq!(maps.header.shape, vec![1, h, w]);
        let got = maps.as_f32().expect("f32");
        for j in 0..h {
            for i in 0..w {
                // The map pixel's centre in frame pixels (docs/conventions.md).
                let x = (i as f64 + 0.5) * W as f64 / w as f64 - 0.5;
                let y = (j as f64 + 0.5) * H as f64 / h as f64 - 0.5;
                assert_eq!(
                    got[j * w + i],
                    cost_at(x, y) as f32,
                    "{w}x{h} at ({i}, {j})"
                );
            }
        }
    }
    // Scoring points: at the goal's cell the cost is 0, at the source its reward gap.
    let (st, scored) = s
        .post(
            &format!("/api/goals/{goal}/revisions/1/cost"),
            Some(&viewer),
            &json!({"points": [[[[124.0, 93.0]]], [[[20.0, 20.0]]]]}),
        )
        .await;
    assert_eq!(st, StatusCode::OK, "{scored}");
    assert_eq!(scored["costs"][0], 0.0, "{scored}");
    let gap = scored["costs"][1].as_f64().expect("cost");
    assert!(
        (gap - cost_at(20.0, 20.0)).abs() < 1e-6,
        "{gap} against {}",
        cost_at(20.0, 20.0)
    );
    // A learned term needs a finished fit of this team on the goal's frame.
    for (bad, why) in [
        (json!("00000000-0000-4000-8000-000000000000"), "no such fit"),
        (json!("not a fit id"), "malformed"),
    ] {
        let mut d = goal_doc.clone();
        d["terms"][0]["reward_fit_id"] = bad;
        let (st, err) = s.post("/api/goals", Some(&editor), &d).await;
        assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY, "{why}: {err}");
        assert_eq!(err["error"]["field"], "terms[0].reward_fit_id", "{err}");
    }

    // Refused before anything is queued, each naming its field.
    let (cam2, frame2) = camera_frame(&s, &editor, 640, 480).await;
    let (_, demo2) = s
        .post_bytes(
            &format!("/api/cameras/{cam2}/demos"),
            Some(&editor),
            "application/zip",
            texture_demo_zip(640, 480, 2, [1.0, 0.0]),
        )
        .await;
    let demo2 = demo2["id"].as_str().expect("demo 2").to_string();
    let mut on_other_frame = goal_doc.clone();
    on_other_frame["frame_id"] = json!(frame2);
    let (st, err) = s.post("/api/goals", Some(&editor), &on_other_frame).await;
    assert_eq!(
        st,
        StatusCode::UNPROCESSABLE_ENTITY,
        "a fit of another frame: {err}"
    );
    assert_eq!(err["error"]["field"], "terms[0].reward_fit_id", "{err}");
    let with = |f: &dyn Fn(&mut Value)| {
        let mut b = body.clone();
        f(&mut b);
        b
    };
    let cases: Vec<(Value, &str, &str)> = vec![
        (with(&|b| b["demos"] = json!([])), "demos", "bad_count"),
        (
            with(&|b| b["demos"] = json!([{"demo_id": demo2, "track_id": track}])),
            "demos[0].demo_id",
            "other_camera",
        ),
        (
            with(&|b| {
                b["features"][1]["polygon"] = json!([[60.0, 60.0], [400.0, 60.0], [100.0, 100.0]])
            }),
            "features[1].polygon[1]",
            "outside_frame",
        ),
        (
            with(&|b| {
                b["frame_id"] = json!(frame2);
                b["cell_px"] = json!(1);
                b["demos"] = json!([{"path": [[1.0, 1.0], [9.0, 9.0]]}]);
            }),
            "cell_px",
            "too_large",
        ),
        (
            with(&|b| {
                b["demos"] =
                    json!([{"path": [[12.0, 12.0]]}, {"path": [[50.0, 50.0], [51.0, 52.0]]}])
            }),
            "demos",
            "no_moves",
        ),
        (with(&|b| b["cell_px"] = json!(0)), "cell_px", "invalid"),
        (with(&|b| b["l2"] = json!(-1.0)), "l2", "out_of_range"),
        (
            with(&|b| b["features"][2]["sigma_px"] = json!(0.0)),
            "features[2].sigma_px",
            "invalid",
        ),
        (
            with(&|b| b["demos"] = json!([{"path": [[10.0, 10.0], [170.0, 10.0]]}])),
            "demos[0].samples[1]",
            "outside_frame",
        ),
        (
            with(&|b| b["features"] = json!([])),
            "features",
            "bad_count",
        ),
    ];
    for (bad, field, code) in cases {
        let (st, err) = s.post("/api/reward-fits", Some(&editor), &bad).await;
        assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY, "{field}: {err}");
        assert_eq!(
            (
                err["error"]["field"].as_str(),
                err["error"]["code"].as_str()
            ),
            (Some(field), Some(code)),
            "{err}"
        );
    }
    let (st, _) = s.post("/api/reward-fits", Some(&viewer), &body).await;
    assert_eq!(st, StatusCode::FORBIDDEN);
    let other = s.token("another bench", "editor");
    let (st, _) = s.post("/api/reward-fits", Some(&other), &body).await;
    assert_eq!(st, StatusCode::NOT_FOUND, "another team's frame");
    let (st, _) = s.get(&format!("/api/reward-fits/{id}"), Some(&other)).await;
    assert_eq!(st, StatusCode::NOT_FOUND, "another team's fit");
}

on_both_databases!(reward_fits_end_to_end, fits);

/// A fit that runs for a while (an 80 × 60 grid and zigzag paths of some 1 600 moves) is
/// stopped by a cancel while it runs: the operation ends `cancelled`, having streamed at least
/// one iteration, and the fit keeps no result and no map.
async fn running_cancel(s: Server) {
    let editor = s.token("long bench", "editor");
    let (_cam, frame) = camera_frame(&s, &editor, 640, 480).await;
    let zigzag = |y0: f64| -> Value {
        let pts: Vec<[f64; 2]> = (0..10)
            .flat_map(|k| {
                let y = y0 + f64::from(k) * 40.0;
                [[10.0, y], [630.0, y]]
            })
            .collect();
        json!({"path": pts})
    };
    let body = json!({"frame_id": frame, "cell_px": 8,
        "features": [{"kind": "distance_to", "point": [320.0, 240.0]},
                     {"kind": "rbf", "center": [100.0, 100.0], "sigma_px": 50.0}],
        "demos": [zigzag(20.0), zigzag(40.0), zigzag(60.0)]});
    let (st, started) = s.post("/api/reward-fits", Some(&editor), &body).await;
    assert_eq!(st, StatusCode::ACCEPTED, "{started}");
    let id = started["id"].as_str().expect("fit").to_string();
    let op = started["operation_id"].as_str().expect("op").to_string();
    let until = std::time::Instant::now() + std::time::Duration::from_secs(120);
    loop {
        let (_, v) = s.get(&format!("/api/operations/{op}"), Some(&editor)).await;
        assert_ne!(
            v["done"], true,
            "the fit ended before it could be cancelled: {v}"
        );
        if v["state"] == "running" && v["detail"]["iteration"].as_u64().is_some_and(|i| i >= 1) {
            break;
        }
        assert!(
            std::time::Instant::now() < until,
            "no iteration streamed: {v}"
        );
        tokio::time::sleep(std::time::Duration::from_millis(50)).await;
    }
    let (st, v) = s
        .post(
            &format!("/api/operations/{op}/cancel"),
            Some(&editor),
            &json!({}),
        )
        .await;
    assert_eq!(st, StatusCode::ACCEPTED, "{v}");
    let ended = operation_done(&s, &editor, &op).await;
    assert_eq!(ended["state"], "cancelled", "{ended}");
    let (st, fit) = s
        .get(&format!("/api/reward-fits/{id}"), Some(&editor))
        .await;
    assert_eq!(st, StatusCode::OK);
    assert!(fit.get("weights").is_none(), "{fit}");
    let (st, _) = s
        .get(
            &format!("/api/reward-fits/{id}/reward-map.npy"),
            Some(&editor),
        )
        .await;
    assert_eq!(st, StatusCode::CONFLICT);
}

on_both_databases!(a_running_fit_can_be_cancelled, running_cancel);

/// With no worker to run it, a fit stays queued: its map is not there yet (409), and a cancel
/// ends it.
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_queued_fit_has_no_map_and_can_be_cancelled() {
    let db = fresh_db(Db::Sqlite, "reward_fit_cancel")
        .await
        .expect("sqlite");
    let s = Server::start_with_env(
        &db.url,
        &db.data_dir,
        &[],
        &[("GOALSMITH_OPERATION_WORKERS", "0")],
    );
    let editor = s.token("reward bench", "editor");
    let (_, frame) = camera_frame(&s, &editor, W, H).await;
    let body = json!({"frame_id": frame, "cell_px": 10, "features": features(), "demos": paths()});
    let (st, started) = s.post("/api/reward-fits", Some(&editor), &body).await;
    assert_eq!(st, StatusCode::ACCEPTED, "{started}");
    let id = started["id"].as_str().expect("fit");
    let op = started["operation_id"].as_str().expect("op");
    let (st, fit) = s
        .get(&format!("/api/reward-fits/{id}"), Some(&editor))
        .await;
    assert_eq!(st, StatusCode::OK);
    assert!(fit.get("weights").is_none(), "{fit}");
    for map in ["reward-map.npy", "reward-map.png"] {
        let (st, err) = s
            .get(&format!("/api/reward-fits/{id}/{map}"), Some(&editor))
            .await;
        assert_eq!(st, StatusCode::CONFLICT, "{map}: {err}");
        assert_eq!(err["error"]["code"], "conflict", "{err}");
    }
    let (st, list) = s.get("/api/reward-fits", Some(&editor)).await;
    assert_eq!(st, StatusCode::OK);
    assert_eq!(list["items"][0]["id"], id, "{list}");
    assert_eq!(list["items"][0]["finished"], false, "{list}");
    let (st, v) = s
        .post(
            &format!("/api/operations/{op}/cancel"),
            Some(&editor),
            &json!({}),
        )
        .await;
    assert_eq!(st, StatusCode::ACCEPTED, "{v}");
    assert_eq!(v["state"], "cancelled", "{v}");
}
