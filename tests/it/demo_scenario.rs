//! `serve --demo`: the demo team gets the painted demonstrations of demo-data/demos with the
//! frame counts and times their ground truth gives, a track started at load runs, and a point
//! tracked through a demo over the API stays near its known path. The demos are made by the
//! project's own painter, so this checks the demo data and the tracker against each other,
//! nothing outside.

use crate::support::*;
use reqwest::StatusCode;
use serde_json::{Value, json};
use std::collections::HashMap;
use std::time::{Duration, Instant};

const NAMES: [&str; 4] = ["tray_straight", "tray_curved", "tray_pause", "pot_to_mat"];

fn truth(name: &str) -> Value {
    let path = format!("{}/demo-data/demos/{name}.json", env!("CARGO_MANIFEST_DIR"));
    serde_json::from_str(&std::fs::read_to_string(path).expect("ground truth")).expect("json")
}

/// The demo ids the server lists on stderr at load (`  demo NAME (N frames): /api/demos/ID`).
fn announced(lines: &std::sync::mpsc::Receiver<String>) -> HashMap<String, (String, i64)> {
    let mut out = HashMap::new();
    let until = Instant::now() + Duration::from_secs(30);
    while out.len() < NAMES.len() {
        let left = until.saturating_duration_since(Instant::now());
        let line = lines
            .recv_timeout(left)
            .expect("the server lists its demos at load");
        let Some(rest) = line
            .trim()
            .strip_prefix("demo ")
            .filter(|r| r.contains(" frames): /api/demos/"))
        else {
            continue;
        };
        let (name, rest) = rest.split_once(" (").expect("name");
        let (count, rest) = rest.split_once(" frames): /api/demos/").expect("count");
        out.insert(
            name.to_string(),
            (rest.to_string(), count.parse().expect("frames")),
        );
    }
    out
}

/// Distances of a track's samples from a ground-truth path, frame by frame.
fn errors(track: &Value, path: &Value) -> Vec<f64> {
    let samples = track["samples"].as_array().expect("samples");
    assert_eq!(samples.len(), path.as_array().expect("path").len());
    samples
        .iter()
        .map(|s| {
            assert_eq!(s["lost"], false, "{s}");
            let k = s["frame"].as_u64().expect("frame") as usize;
            let (x, y) = (s["x"].as_f64().expect("x"), s["y"].as_f64().expect("y"));
            let (tx, ty) = (
                path[k][0].as_f64().expect("x"),
                path[k][1].as_f64().expect("y"),
            );
            (x - tx).hypot(y - ty)
        })
        .collect()
}

/// (median, largest) of the errors, px.
fn spread(mut e: Vec<f64>) -> (f64, f64) {
    e.sort_by(f64::total_cmp);
    (e[e.len() / 2], e[e.len() - 1])
}

// Tolerances: the painter's own test measures medians of 0.05–0.2 px and at most 0.31 px for
// frame-to-frame tracking of these points through the decoded GIFs; the server tracks both
// ways with its forward–backward check. Median 0.3 px and largest 0.6 px leave a margin for
// that without hiding a real fault (a point that slips a cell wall is off by pixels).
const MEDIAN_PX: f64 = 0.3;
const MAX_PX: f64 = 0.6;

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn demo_loads_its_demonstrations_and_they_track_sqlite() {
    demo_loads_its_demonstrations_and_they_track(Db::Sqlite).await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn demo_loads_its_demonstrations_and_they_track_postgres() {
    demo_loads_its_demonstrations_and_they_track(Db::Postgres).await;
}

async fn demo_loads_its_demonstrations_and_they_track(kind: Db) {
    let Some(db) = fresh_db(kind, "demo_scenario").await else {
        return;
    };
    let (s, lines) = start_with_stderr(&db.url, &db.data_dir, &["--demo"]);
    let demos = announced(&lines);
    let token = s.token("greenhouse", "editor");
    for name in NAMES {
        let t = truth(name);
        let (id, count) = &demos[name];
        assert_eq!(Some(*count), t["frame_count"].as_i64(), "{name}");
        let (st, d) = s.get(&format!("/api/demos/{id}"), Some(&token)).await;
        assert_eq!(st, StatusCode::OK, "{d}");
        assert_eq!(d["frame_count"], t["frame_count"], "{name}");
        assert_eq!(
            (d["width"].as_i64(), d["height"].as_i64()),
            (Some(640), Some(480))
        );
        let times: Vec<f64> = d["frames"]
            .as_array()
            .expect("frames")
            .iter()
            .map(|f| f["time_s"].as_f64().expect("time"))
            .collect();
        let want: Vec<f64> = t["times_s"]
            .as_array()
            .expect("times")
            .iter()
            .map(|v| v.as_f64().expect("time"))
            .collect();
        assert_eq!(times, want, "{name}");
    }
    // The paused demo holds still for 8 frames: those frames are one stored image.
    let (_, paused) = s
        .get(
            &format!("/api/demos/{}", demos["tray_pause"].0),
            Some(&token),
        )
        .await;
    let shas: Vec<&str> = paused["frames"]
        .as_array()
        .expect("frames")
        .iter()
        .map(|f| f["sha256"].as_str().expect("sha"))
        .collect();
    assert!(shas[12..=20].iter().all(|h| *h == shas[12]), "{shas:?}");
    assert_ne!(shas[11], shas[12]);

    // A point placed half-way through the curved demo, tracked both ways.
    let t = truth("tray_curved");
    let id = &demos["tray_curved"].0;
    let path = &t["points"]["walls_cross_bottom_right"]["path"];
    let (st, started) = s
        .post(
            &format!("/api/demos/{id}/tracks"),
            Some(&token),
            &json!({"label": "tray 2, walls crossing", "frame": 18,
                    "x": path[18][0], "y": path[18][1]}),
        )
        .await;
    assert_eq!(st, StatusCode::ACCEPTED, "{started}");
    let op = started["operation_id"].as_str().expect("op");
    let done = operation_done(&s, &token, op).await;
    assert_eq!(done["state"], "succeeded", "{done}");
    let track_id = started["track_id"].as_str().expect("track");
    let (st, track) = s
        .get(&format!("/api/demos/{id}/tracks/{track_id}"), Some(&token))
        .await;
    assert_eq!(st, StatusCode::OK, "{track}");
    let (median, max) = spread(errors(&track, path));
    eprintln!("tray_curved walls_cross_bottom_right: median {median:.3} px, max {max:.3} px");
    assert!(
        median <= MEDIAN_PX && max <= MAX_PX,
        "median {median} max {max}"
    );

    // The track started at load, on the first demo, runs too and follows its point.
    let first = &demos["tray_straight"].0;
    let path = &truth("tray_straight")["points"]["walls_cross_top_left"]["path"];
    let until = Instant::now() + Duration::from_secs(180);
    let track = loop {
        let (st, all) = s
            .get(&format!("/api/demos/{first}/tracks.json"), Some(&token))
            .await;
        assert_eq!(st, StatusCode::OK, "{all}");
        let items = all["items"].as_array().expect("items");
        assert_eq!(items.len(), 1, "{all}");
        if items[0]["samples"].as_array().map(Vec::len) == path.as_array().map(Vec::len) {
            break items[0].clone();
        }
        assert!(
            Instant::now() < until,
            "the load's track is not done: {all}"
        );
        tokio::time::sleep(Duration::from_millis(200)).await;
    };
    let (median, max) = spread(errors(&track, path));
    eprintln!("tray_straight walls_cross_top_left: median {median:.3} px, max {max:.3} px");
    assert!(
        median <= MEDIAN_PX && max <= MAX_PX,
        "median {median} max {max}"
    );
}
