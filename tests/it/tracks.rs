//! Tracks through a demonstration: a point placed on one frame is followed both ways by a
//! durable operation, a correction re-tracks the frames after it and is never overwritten, and
//! the samples export as JSON and CSV. The frames are a smooth texture moved by a known
//! sub-pixel shift per frame, so the tracked positions are checked against the truth.

use crate::on_both_databases;
use crate::support::*;
use reqwest::StatusCode;
use serde_json::{Value, json};
use std::time::{Duration, Instant};

const W: u32 = 160;
const H: u32 = 120;
/// The shift of the texture per frame, px (the truth the tracker is held to).
const STEP: [f64; 2] = [1.5, 0.75];
const FRAMES: usize = 8;

fn demo_zip() -> Vec<u8> {
    texture_demo_zip(W, H, FRAMES, STEP)
}

/// A camera of W × H with the demo of [`demo_zip`]; the demo's id.
async fn camera_with_demo(s: &Server, editor: &str) -> String {
    let (st, cam) = s
        .post(
            "/api/cameras",
            Some(editor),
            &json!({"name": "side", "width": W, "height": H}),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{cam}");
    let cam = cam["id"].as_str().expect("camera").to_string();
    let (st, demo) = s
        .post_bytes(
            &format!("/api/cameras/{cam}/demos"),
            Some(editor),
            "application/zip",
            demo_zip(),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{demo}");
    demo["id"].as_str().expect("demo").to_string()
}

fn near(s: &Value, want: [f64; 2], tol: f64) {
    let (x, y) = (s["x"].as_f64().expect("x"), s["y"].as_f64().expect("y"));
    assert!(
        (x - want[0]).abs() <= tol && (y - want[1]).abs() <= tol,
        "{s} is not within {tol} px of {want:?}"
    );
}

async fn tracking(s: Server) {
    let editor = s.token("bench tracks", "editor");
    let viewer = s.token("bench tracks", "viewer");
    let demo = camera_with_demo(&s, &editor).await;
    let base = format!("/api/demos/{demo}/tracks");

    // The point on frame 3 at the big blob's centre; the truth moves by STEP per frame.
    let seed = [70.0 + 3.0 * STEP[0], 55.0 + 3.0 * STEP[1]];
    let truth = |k: i64| [70.0 + k as f64 * STEP[0], 55.0 + k as f64 * STEP[1]];
    let (st, started) = s
        .post(
            &base,
            Some(&editor),
            &json!({"label": "pot rim", "frame": 3, "x": seed[0], "y": seed[1]}),
        )
        .await;
    assert_eq!(st, StatusCode::ACCEPTED, "{started}");
    let track = started["track_id"].as_str().expect("track").to_string();
    let op = started["operation_id"]
        .as_str()
        .expect("operation")
        .to_string();
    let done = operation_done(&s, &viewer, &op).await;
    assert_eq!(done["state"], "succeeded", "{done}");
    assert_eq!(done["kind"], "track");
    assert_eq!(done["progress"], 1.0);
    assert_eq!(done["result"]["frames"], FRAMES as i64 - 1);
    let (st, t) = s.get(&format!("{base}/{track}"), Some(&viewer)).await;
    assert_eq!(st, StatusCode::OK);
    assert_eq!(t["label"], "pot rim");
    assert_eq!(t["samples"].as_array().map(Vec::len), Some(FRAMES));
    assert_eq!(sample_at(&t, 3)["origin"], "manual");
    // Tolerance: the texture is rounded to 8-bit grey levels, which moves the Lucas–Kanade
    // optimum by a few hundredths of a pixel per frame; 0.25 px over 5 frames is generous.
    for k in 0..FRAMES as i64 {
        let s_k = sample_at(&t, k);
        assert_eq!(s_k["lost"], false, "{s_k}");
        if k != 3 {
            assert_eq!(s_k["origin"], "tracked");
            assert!(s_k["confidence"].as_f64().unwrap_or(0.0) > 0.0);
        }
        near(&s_k, truth(k), 0.25);
        assert_eq!(s_k["time_s"].as_f64(), Some(k as f64 * 0.05));
    }

    // A correction at frame 5, 3 px to the right of the truth: frames 6 and 7 follow it, the
    // frames before keep theirs, and the correction itself is never overwritten.
    let moved = [truth(5)[0] + 3.0, truth(5)[1]];
    let (st, again) = s
        .send_json(
            reqwest::Method::PUT,
            &format!("{base}/{track}/samples/5"),
            Some(&editor),
            &json!({"x": moved[0], "y": moved[1]}),
        )
        .await;
    assert_eq!(st, StatusCode::ACCEPTED, "{again}");
    let done = operation_done(&s, &editor, again["operation_id"].as_str().expect("op")).await;
    assert_eq!(done["state"], "succeeded", "{done}");
    assert_eq!(
        done["result"]["frames"], 2,
        "only the frames after the correction"
    );
    let (_, t2) = s.get(&format!("{base}/{track}"), Some(&viewer)).await;
    let s5 = sample_at(&t2, 5);
    assert_eq!(
        (s5["origin"].as_str(), s5["x"].as_f64()),
        (Some("manual"), Some(moved[0]))
    );
    for k in 6..FRAMES as i64 {
        let want = [
            moved[0] + (k - 5) as f64 * STEP[0],
            moved[1] + (k - 5) as f64 * STEP[1],
        ];
        near(&sample_at(&t2, k), want, 0.5);
    }
    for k in 0..5 {
        assert_eq!(sample_at(&t2, k), sample_at(&t, k), "frame {k} kept");
    }
    // Tracking from the seed again (a correction at 3) stops before the manual sample at 5.
    let (st, again) = s
        .send_json(
            reqwest::Method::PUT,
            &format!("{base}/{track}/samples/3"),
            Some(&editor),
            &json!({"x": seed[0], "y": seed[1]}),
        )
        .await;
    assert_eq!(st, StatusCode::ACCEPTED);
    let done = operation_done(&s, &editor, again["operation_id"].as_str().expect("op")).await;
    assert_eq!(done["result"]["frames"], 1, "frame 4 only: 5 is manual");
    let (_, t3) = s.get(&format!("{base}/{track}"), Some(&viewer)).await;
    assert_eq!(
        sample_at(&t3, 5)["x"].as_f64(),
        Some(moved[0]),
        "manual sample kept"
    );

    // Exports: JSON of every track, CSV of every sample.
    let (st, all) = s
        .get(&format!("/api/demos/{demo}/tracks.json"), Some(&viewer))
        .await;
    assert_eq!(st, StatusCode::OK);
    assert_eq!(all["items"][0]["id"], track.as_str());
    let resp = s
        .client
        .get(s.url(&format!("/api/demos/{demo}/tracks.csv")))
        .bearer_auth(&viewer)
        .send()
        .await
        .expect("csv");
    assert_eq!(resp.status(), StatusCode::OK);
    let csv = resp.text().await.expect("text");
    let lines: Vec<&str> = csv.lines().collect();
    assert_eq!(
        lines[0],
        "track_id,label,frame,time_s,x,y,origin,confidence,lost"
    );
    assert_eq!(lines.len(), 1 + FRAMES);
    assert!(
        lines[6].starts_with(&format!("{track},\"pot rim\",5,0.25,")),
        "{}",
        lines[6]
    );
    assert!(lines[6].contains(",manual,1,false"), "{}", lines[6]);

    // The events of a finished operation: one `operation` event, done, and the stream ends.
    let resp = s
        .client
        .get(s.url(&format!("/api/operations/{op}/events")))
        .bearer_auth(&viewer)
        .send()
        .await
        .expect("events");
    assert_eq!(resp.status(), StatusCode::OK);
    assert!(
        resp.headers()["content-type"]
            .to_str()
            .unwrap_or("")
            .starts_with("text/event-stream")
    );
    let body = resp.text().await.expect("stream ends");
    assert!(body.contains("event: operation"), "{body}");
    assert!(body.contains("\"done\":true"), "{body}");

    // A goal from the demo: frame 0 becomes a frame of the camera, the track's positions at 0
    // and 7 the source and the target; its cost maps are served like any goal's.
    let (_, t4) = s.get(&format!("{base}/{track}"), Some(&viewer)).await;
    let (src, dst) = (sample_at(&t4, 0), sample_at(&t4, 7));
    let body = json!({"name": "rim to the mat", "tracks": [track], "start_frame": 0, "end_frame": 7, "note": "from the clip"});
    let (st, rev) = s
        .post(&format!("/api/demos/{demo}/goal"), Some(&editor), &body)
        .await;
    assert_eq!(st, StatusCode::CREATED, "{rev}");
    assert_eq!(
        rev["from_demo"],
        json!({"demo_id": demo, "start_frame": 0, "end_frame": 7, "tracks": [track]})
    );
    assert_eq!(rev["terms"][0]["kind"], "point");
    assert_eq!(rev["terms"][0]["label"], "pot rim");
    assert_eq!(rev["terms"][0]["source"], json!([src["x"], src["y"]]));
    assert_eq!(rev["terms"][0]["target"], json!([dst["x"], dst["y"]]));
    let goal = rev["goal_id"].as_str().expect("goal");
    let (st, frame) = s
        .get(
            &format!("/api/frames/{}", rev["frame_id"].as_str().expect("frame")),
            Some(&viewer),
        )
        .await;
    assert_eq!(st, StatusCode::OK);
    assert_eq!(
        frame["sha256"],
        json!(sample_sha(&s, &viewer, &demo, 0).await)
    );
    let resp = s
        .client
        .get(s.url(&format!("/api/goals/{goal}/revisions/1/cost-maps.npy")))
        .bearer_auth(&viewer)
        .send()
        .await
        .expect("maps");
    assert_eq!(resp.status(), StatusCode::OK);
    let npy = resp.bytes().await.expect("bytes");
    let maps = goalsmith_core::npy::read(&npy, 1 << 30).expect("npy");
    assert_eq!(maps.header.shape, vec![1, H as usize, W as usize]);
    assert_eq!(maps.as_f32().expect("f32").len(), (W * H) as usize);
    for (body, field) in [
        (
            json!({"name": "x", "tracks": [track], "start_frame": 0, "end_frame": 8}),
            "end_frame",
        ),
        (
            json!({"name": "x", "tracks": [track], "start_frame": 0, "end_frame": 7, "rigid": true}),
            "tracks",
        ),
        (
            json!({"name": "x", "tracks": [], "start_frame": 0, "end_frame": 7}),
            "tracks",
        ),
        (
            json!({"name": "x", "tracks": ["00000000-0000-4000-8000-000000000000"], "start_frame": 0, "end_frame": 7}),
            "tracks[0]",
        ),
    ] {
        let (st, err) = s
            .post(&format!("/api/demos/{demo}/goal"), Some(&editor), &body)
            .await;
        assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY, "{body}: {err}");
        assert_eq!(err["error"]["field"], field, "{err}");
    }

    // Who may do what, and bad input.
    let (st, _) = s
        .post(
            &base,
            Some(&viewer),
            &json!({"label": "x", "frame": 0, "x": 5.0, "y": 5.0}),
        )
        .await;
    assert_eq!(st, StatusCode::FORBIDDEN);
    for (body, field) in [
        (
            json!({"label": "x", "frame": 8, "x": 5.0, "y": 5.0}),
            "frame",
        ),
        (
            json!({"label": "x", "frame": -1, "x": 5.0, "y": 5.0}),
            "frame",
        ),
        (json!({"label": "x", "frame": 0, "x": 159.6, "y": 5.0}), "x"),
        (json!({"label": "x", "frame": 0, "x": 5.0, "y": -0.6}), "y"),
        (
            json!({"label": "  ", "frame": 0, "x": 5.0, "y": 5.0}),
            "label",
        ),
    ] {
        let (st, err) = s.post(&base, Some(&editor), &body).await;
        assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY, "{body}: {err}");
        assert_eq!(err["error"]["field"], field, "{err}");
    }
    let (st, _) = s
        .post(
            &base,
            Some(&editor),
            &json!({"label": "edge", "frame": 7, "x": 159.5, "y": 119.5}),
        )
        .await;
    assert_eq!(
        st,
        StatusCode::ACCEPTED,
        "the last pixel centre's far edge is on the frame"
    );
    let other = s.token("another bench", "editor");
    let (st, _) = s.get(&format!("/api/operations/{op}"), Some(&other)).await;
    assert_eq!(st, StatusCode::NOT_FOUND, "another team's operation");
    let (st, _) = s.get(&format!("{base}/{track}"), Some(&other)).await;
    assert_eq!(st, StatusCode::NOT_FOUND);
    let (st, v) = s
        .post(
            &format!("/api/operations/{op}/cancel"),
            Some(&editor),
            &json!({}),
        )
        .await;
    assert_eq!(st, StatusCode::ACCEPTED);
    assert_eq!(
        v["state"], "succeeded",
        "a finished operation stays as it ended"
    );
}

/// The SHA-256 of a demo frame, from the demo's own listing.
async fn sample_sha(s: &Server, token: &str, demo: &str, frame: usize) -> String {
    let (_, d) = s.get(&format!("/api/demos/{demo}"), Some(token)).await;
    d["frames"][frame]["sha256"]
        .as_str()
        .expect("sha")
        .to_string()
}

on_both_databases!(tracks_through_a_demo, tracking);

/// Reads server-sent events from `resp` until the stream ends; the `data` of each `operation`
/// event, in order.
async fn operation_events(mut resp: reqwest::Response) -> Vec<Value> {
    let mut text = String::new();
    let until = Instant::now() + Duration::from_secs(120);
    while let Some(chunk) = tokio::time::timeout_at(until.into(), resp.chunk())
        .await
        .expect("the event stream ends once the operation is done")
        .expect("event stream")
    {
        text.push_str(&String::from_utf8_lossy(&chunk));
    }
    text.split("\n\n")
        .filter(|e| e.lines().any(|l| l == "event: operation"))
        .map(|e| {
            let data = e
                .lines()
                .find_map(|l| l.strip_prefix("data: "))
                .unwrap_or_else(|| panic!("event without data: {e}"));
            serde_json::from_str(data).expect("event data is JSON")
        })
        .collect()
}

/// Followed live over SSE: a track started on a server process without workers is queued, and
/// its event stream, opened there, goes on through the run that a second process on the same
/// database makes, to done.
async fn live_events(kind: Db) {
    let Some(db) = fresh_db(kind, "tracks_live_events").await else {
        return;
    };
    let a = Server::start_with_env(
        &db.url,
        &db.data_dir,
        &[],
        &[("GOALSMITH_OPERATION_WORKERS", "0")],
    );
    let editor = a.token("live bench", "editor");
    let demo = camera_with_demo(&a, &editor).await;
    let (st, started) = a
        .post(
            &format!("/api/demos/{demo}/tracks"),
            Some(&editor),
            &json!({"label": "pot rim", "frame": 0, "x": 70.0, "y": 55.0}),
        )
        .await;
    assert_eq!(st, StatusCode::ACCEPTED, "{started}");
    let op = started["operation_id"].as_str().expect("op").to_string();
    let resp = a
        .client
        .get(a.url(&format!("/api/operations/{op}/events")))
        .bearer_auth(&editor)
        .send()
        .await
        .expect("events");
    assert_eq!(resp.status(), StatusCode::OK);
    let reading = tokio::spawn(operation_events(resp));
    // Only once the stream is open does a process with a worker join.
    tokio::time::sleep(Duration::from_millis(600)).await;
    let b = Server::start_with_env(
        &db.url,
        &db.data_dir,
        &[],
        &[("GOALSMITH_OPERATION_WORKERS", "1")],
    );
    let events = reading.await.expect("reader");
    assert!(events.len() >= 2, "{events:?}");
    assert_eq!(events[0]["state"], "queued", "{events:?}");
    assert_eq!(events[0]["done"], false);
    let last = events.last().expect("an event");
    assert_eq!(last["state"], "succeeded", "{events:?}");
    assert_eq!(last["done"], true);
    assert_eq!(last["progress"], 1.0);
    assert_eq!(last["result"]["frames"], FRAMES as i64 - 1);
    // Progress never goes back, and only the last event is done.
    for w in events.windows(2) {
        assert!(
            w[1]["progress"].as_f64() >= w[0]["progress"].as_f64(),
            "{events:?}"
        );
        assert_eq!(w[0]["done"], false, "{events:?}");
    }
    // Both processes serve the result.
    let (_, via_b) = b.get(&format!("/api/operations/{op}"), Some(&editor)).await;
    assert_eq!(&via_b, last);
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn live_events_sqlite() {
    live_events(Db::Sqlite).await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn live_events_postgres() {
    live_events(Db::Postgres).await;
}
