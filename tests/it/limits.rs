//! Limits on one request and on heavy work across requests: each limit answered AT (200) and
//! PAST (413/422 naming the limit) with small limits set through the environment, the defaults'
//! refusals of the probe's requests, and a burst shed with 503 `busy` while `/healthz` answers.

use crate::support::*;
use goalsmith_core::npy;
use reqwest::StatusCode;
use serde_json::{Value, json};

/// Runs an async test body on SQLite and on PostgreSQL against a server with `env` set.
macro_rules! on_both_databases_with_env {
    ($name:ident, $body:path, $env:expr) => {
        mod $name {
            use super::*;
            async fn run(kind: Db) {
                if let Some(db) = fresh_db(kind, stringify!($name)).await {
                    let s = Server::start_with_env(&db.url, &db.data_dir, &[], $env);
                    $body(s).await;
                }
            }
            #[tokio::test(flavor = "multi_thread", worker_threads = 2)]
            async fn sqlite() {
                run(Db::Sqlite).await;
            }
            #[tokio::test(flavor = "multi_thread", worker_threads = 2)]
            async fn postgres() {
                run(Db::Postgres).await;
            }
        }
    };
}

fn error_of(bytes: &[u8]) -> Value {
    serde_json::from_slice(bytes).expect("a JSON error body")
}

/// A convex polygon of `n` vertices on a circle inside the 64×48 frame.
fn circle(n: usize) -> Vec<[f64; 2]> {
    (0..n)
        .map(|k| {
            let a = std::f64::consts::TAU * k as f64 / n as f64;
            [32.0 + 20.0 * a.cos(), 24.0 + 20.0 * a.sin()]
        })
        .collect()
}

fn region(polygon: Vec<[f64; 2]>) -> Value {
    json!({"kind": "region", "source": [5.0, 5.0], "polygon": polygon})
}

/// A goal of `terms` on `frame`; returns its id.
async fn goal_of(s: &Server, editor: &str, frame: &str, terms: Value) -> String {
    let body = json!({"name": "limits", "frame_id": frame, "terms": terms});
    let (st, rev) = s.post("/api/goals", Some(editor), &body).await;
    assert_eq!(st, StatusCode::CREATED, "{rev}");
    rev["goal_id"].as_str().expect("goal id").to_string()
}

/// 2 · 64 · 48: the full-size maps of a 2-point goal on the 64×48 frame, exactly.
const MAP_VALUES: &str = "6144";

async fn request_limits(s: Server) {
    let (editor, _cam, frame) = camera_and_frame(&s, "limits", json!({})).await;
    let two = goal_of(
        &s,
        &editor,
        &frame,
        json!([
            {"kind": "point", "source": [10.0, 12.0], "target": [40.0, 30.0]},
            region(circle(4))
        ]),
    )
    .await;
    let base = format!("/api/goals/{two}/revisions/1");

    // Cost maps: P · h · w at the limit is served, one column more is refused naming it.
    for q in ["", "?width=64&height=48"] {
        let (st, bytes) = get_bytes(&s, &format!("{base}/cost-maps.npy{q}"), &editor).await;
        assert_eq!(st, StatusCode::OK, "{q}");
        let arr = npy::read(&bytes, usize::MAX).expect("npy");
        assert_eq!(arr.header.shape, vec![2, 48, 64]);
    }
    let (st, bytes) = get_bytes(
        &s,
        &format!("{base}/cost-maps.npy?width=65&height=48"),
        &editor,
    )
    .await;
    assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY);
    let err = error_of(&bytes);
    assert_eq!(err["error"]["code"], "map_too_large", "{err}");
    assert_eq!(err["error"]["field"], "width", "{err}");
    assert!(
        err["error"]["message"]
            .as_str()
            .unwrap_or("")
            .contains(MAP_VALUES),
        "{err}"
    );

    // The bundle's full-size maps: at the limit for this goal …
    let (st, _) = get_bytes(&s, &format!("{base}/bundle.zip"), &editor).await;
    assert_eq!(st, StatusCode::OK);
    // … past it for a goal of three points (3 · 64 · 48), whose smaller maps are still served.
    let three = goal_of(
        &s,
        &editor,
        &frame,
        json!([
            {"kind": "point", "source": [10.0, 12.0], "target": [40.0, 30.0]},
            {"kind": "point", "source": [11.0, 12.0], "target": [41.0, 30.0]},
            {"kind": "point", "source": [12.0, 12.0], "target": [42.0, 30.0]}
        ]),
    )
    .await;
    let base3 = format!("/api/goals/{three}/revisions/1");
    let (st, bytes) = get_bytes(&s, &format!("{base3}/bundle.zip"), &editor).await;
    assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY);
    let err = error_of(&bytes);
    assert_eq!(err["error"]["code"], "map_too_large", "{err}");
    assert!(
        err["error"]["message"]
            .as_str()
            .unwrap_or("")
            .contains(MAP_VALUES),
        "{err}"
    );
    let (st, _) = get_bytes(
        &s,
        &format!("{base3}/cost-maps.npy?width=32&height=48"),
        &editor,
    )
    .await;
    assert_eq!(st, StatusCode::OK);
    let set = json!({"name": "both", "items": [{"goal_id": two, "revision": 1}, {"goal_id": three, "revision": 1}]});
    let (st, doc) = s.post("/api/goal-sets", Some(&editor), &set).await;
    assert_eq!(st, StatusCode::CREATED, "{doc}");
    let set_id = doc["id"].as_str().expect("set id");
    let (st, bytes) = get_bytes(&s, &format!("/api/goal-sets/{set_id}/bundle.zip"), &editor).await;
    assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY);
    assert_eq!(error_of(&bytes)["error"]["code"], "map_too_large");
    // A set's items are summed: the 2-point goal alone is at the limit, twice it is past.
    let set = json!({"name": "once", "items": [{"goal_id": two, "revision": 1}]});
    let (st, doc) = s.post("/api/goal-sets", Some(&editor), &set).await;
    assert_eq!(st, StatusCode::CREATED, "{doc}");
    let once = doc["id"].as_str().expect("set id");
    let (st, _) = get_bytes(&s, &format!("/api/goal-sets/{once}/bundle.zip"), &editor).await;
    assert_eq!(st, StatusCode::OK);
    let set = json!({"name": "twice", "items": [{"goal_id": two, "revision": 1}, {"goal_id": two, "revision": 1}]});
    let (st, doc) = s.post("/api/goal-sets", Some(&editor), &set).await;
    assert_eq!(st, StatusCode::CREATED, "{doc}");
    let twice = doc["id"].as_str().expect("set id");
    let (st, bytes) = get_bytes(&s, &format!("/api/goal-sets/{twice}/bundle.zip"), &editor).await;
    assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY);
    let err = error_of(&bytes);
    assert_eq!(err["error"]["code"], "map_too_large", "{err}");
    assert_eq!(err["error"]["field"], "items", "{err}");

    // A probability-map batch: maps of P · h · w at the limit are scored, past it refused.
    let mut maps = vec![0f32; 2 * 48 * 64];
    maps[30 * 64 + 40] = 1.0;
    maps[48 * 64 + 24 * 64 + 32] = 1.0; // the centre of the region
    let body = npy::write_f32(&[1, 1, 2, 48, 64], &maps).expect("npy");
    let (st, r) = s
        .post_bytes(
            &format!("{base}/cost"),
            Some(&editor),
            "application/x-npy",
            body,
        )
        .await;
    assert_eq!(st, StatusCode::OK, "{r}");
    assert_eq!(r["costs"], json!([0.0]));
    let body = npy::write_f32(&[1, 1, 2, 48, 65], &vec![0f32; 2 * 48 * 65]).expect("npy");
    let (st, err) = s
        .post_bytes(
            &format!("{base}/cost"),
            Some(&editor),
            "application/x-npy",
            body,
        )
        .await;
    assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY, "{err}");
    assert_eq!(err["error"]["code"], "map_too_large", "{err}");

    // NPY points: N · T · P at the limit (4 · 1 · 2 = 8) are scored, one candidate more is 413.
    let pts = |n: usize| {
        let v: Vec<f32> = (0..n * 2).flat_map(|_| [40.0f32, 30.0]).collect();
        npy::write_f32(&[n, 1, 2, 2], &v).expect("npy")
    };
    let (st, r) = s
        .post_bytes(
            &format!("{base}/cost"),
            Some(&editor),
            "application/x-npy",
            pts(4),
        )
        .await;
    assert_eq!(st, StatusCode::OK, "{r}");
    assert_eq!(r["costs"].as_array().map(Vec::len), Some(4));
    let (st, err) = s
        .post_bytes(
            &format!("{base}/cost"),
            Some(&editor),
            "application/x-npy",
            pts(5),
        )
        .await;
    assert_eq!(st, StatusCode::PAYLOAD_TOO_LARGE, "{err}");
    assert_eq!(err["error"]["code"], "too_large", "{err}");
    assert!(
        err["error"]["message"]
            .as_str()
            .unwrap_or("")
            .contains("limit of 8 points"),
        "{err}"
    );

    // JSON cost bodies: exactly 1024 bytes are scored, 1025 are refused naming the limit.
    let json_of = |len: usize| {
        let mut b = br#"{"points": [[[[40.0, 30.0], [32.0, 24.0]]]]}"#.to_vec();
        b.resize(len, b' ');
        b
    };
    let (st, r) = s
        .post_bytes(
            &format!("{base}/cost"),
            Some(&editor),
            "application/json",
            json_of(1024),
        )
        .await;
    assert_eq!(st, StatusCode::OK, "{r}");
    assert_eq!(r["costs"], json!([0.0]));
    let (st, err) = s
        .post_bytes(
            &format!("{base}/cost"),
            Some(&editor),
            "application/json",
            json_of(1025),
        )
        .await;
    assert_eq!(st, StatusCode::PAYLOAD_TOO_LARGE, "{err}");
    assert_eq!(err["error"]["code"], "too_large", "{err}");
    assert!(
        err["error"]["message"]
            .as_str()
            .unwrap_or("")
            .contains("1024 bytes"),
        "{err}"
    );

    let (st, _) = s.get("/healthz", None).await;
    assert_eq!(st, StatusCode::OK);
}

on_both_databases_with_env!(
    request_limits_at_and_past,
    request_limits,
    &[
        ("GOALSMITH_MAX_MAP_VALUES", MAP_VALUES),
        ("GOALSMITH_MAX_NPY_POINTS", "8"),
        ("GOALSMITH_COST_JSON_BYTES", "1024"),
    ]
);

/// With the default limits: the probe's 8192 × 8192 maps are refused before any work, and the
/// vertices of a goal are bounded over all its terms.
async fn default_limits(s: Server) {
    let (editor, _cam, frame) = camera_and_frame(&s, "defaults", json!({})).await;
    let g = goal_of(
        &s,
        &editor,
        &frame,
        json!([{"kind": "point", "source": [10.0, 12.0], "target": [40.0, 30.0]}, region(circle(4))]),
    )
    .await;
    let base = format!("/api/goals/{g}/revisions/1");
    let viewer = s.token("defaults", "viewer");
    let (st, bytes) = get_bytes(
        &s,
        &format!("{base}/cost-maps.npy?width=8192&height=8192"),
        &viewer,
    )
    .await;
    assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY);
    let err = error_of(&bytes);
    assert_eq!(err["error"]["code"], "map_too_large", "{err}");
    assert!(
        err["error"]["message"]
            .as_str()
            .unwrap_or("")
            .contains("33554432"),
        "{err}"
    );
    // 2 · 4096 · 4096 = 2²⁵ is the limit exactly: refused one row past it.
    let (st, bytes) = get_bytes(
        &s,
        &format!("{base}/cost-maps.npy?width=4096&height=4097"),
        &viewer,
    )
    .await;
    assert_eq!(
        st,
        StatusCode::UNPROCESSABLE_ENTITY,
        "{}",
        String::from_utf8_lossy(&bytes)
    );

    // Vertices: four polygons of 1024 (4096 in all) are accepted, one triangle more is refused.
    let mut terms: Vec<Value> = (0..4).map(|_| region(circle(1024))).collect();
    goal_of(&s, &editor, &frame, Value::Array(terms.clone())).await;
    terms.push(region(circle(3)));
    let body = json!({"name": "too many", "frame_id": frame, "terms": terms});
    let (st, err) = s.post("/api/goals", Some(&editor), &body).await;
    assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY, "{err}");
    assert_eq!(err["error"]["code"], "too_many_vertices", "{err}");
    assert_eq!(err["error"]["field"], "terms", "{err}");
    assert!(
        err["error"]["message"]
            .as_str()
            .unwrap_or("")
            .contains("4096"),
        "{err}"
    );
}

on_both_databases_with_env!(default_limits_refuse_the_probe, default_limits, &[]);

/// One permit and no queue: of a burst of parallel map and bundle requests some are shed with
/// 503 `busy` and `Retry-After: 1`, at least one is served, `/healthz` answers meanwhile, and
/// the server serves again once the burst is over.
async fn burst(s: Server) {
    let (editor, _cam, frame) = camera_and_frame(&s, "burst", json!({})).await;
    // A 1024-vertex region: each map pixel measures every edge, so each request takes a while.
    let g = goal_of(
        &s,
        &editor,
        &frame,
        json!([{"kind": "point", "source": [10.0, 12.0], "target": [40.0, 30.0]}, region(circle(1024))]),
    )
    .await;
    let base = format!("/api/goals/{g}/revisions/1");
    // Build the model once so the burst contends for map building alone.
    let (st, _) = get_bytes(
        &s,
        &format!("{base}/cost-maps.npy?width=8&height=6"),
        &editor,
    )
    .await;
    assert_eq!(st, StatusCode::OK);
    let s = std::sync::Arc::new(s);
    let mut tasks = Vec::new();
    for k in 0..8 {
        let s = s.clone();
        let editor = editor.clone();
        let path = if k % 2 == 0 {
            format!("{base}/cost-maps.npy?width={}&height=768", 1024 + k)
        } else {
            format!("{base}/cost-maps.npy?width=1024&height={}", 768 + k)
        };
        tasks.push(tokio::spawn(async move {
            let resp = s
                .client
                .get(s.url(&path))
                .bearer_auth(&editor)
                .send()
                .await
                .expect("GET");
            let st = resp.status();
            let retry = resp
                .headers()
                .get("retry-after")
                .and_then(|v| v.to_str().ok())
                .map(str::to_string);
            let body = resp.bytes().await.expect("body");
            (st, retry, body)
        }));
    }
    let (st, health) = s.get("/healthz", None).await;
    assert_eq!(st, StatusCode::OK, "{health}");
    // A small JSON batch on the cached model is light work: it needs no permit, so it is
    // scored while the burst holds the permit and fills the queue.
    let (st, scored) = s
        .post(
            &format!("{base}/cost"),
            Some(&editor),
            &json!({"points": [[[[12.0, 14.0], [20.0, 20.0]]], [[[40.0, 30.0], [0.0, 0.0]]]]}),
        )
        .await;
    assert_eq!(st, StatusCode::OK, "{scored}");
    assert_eq!(
        scored["costs"].as_array().map(Vec::len),
        Some(2),
        "{scored}"
    );
    let mut ok = 0;
    let mut busy = 0;
    for t in tasks {
        let (st, retry, body) = t.await.expect("join");
        match st {
            StatusCode::OK => ok += 1,
            StatusCode::SERVICE_UNAVAILABLE => {
                busy += 1;
                assert_eq!(retry.as_deref(), Some("1"));
                let err = error_of(&body);
                assert_eq!(err["error"]["code"], "busy", "{err}");
            }
            other => panic!("unexpected {other}: {}", String::from_utf8_lossy(&body)),
        }
    }
    assert!(ok >= 1, "one request holds the permit and is served");
    assert!(busy >= 1, "with no queue the others are shed ({ok} served)");
    let (st, _) = get_bytes(&s, &format!("{base}/bundle.zip"), &editor).await;
    assert_eq!(st, StatusCode::OK, "served again after the burst");
}

on_both_databases_with_env!(
    a_burst_is_shed_with_503_busy,
    burst,
    &[
        ("GOALSMITH_HEAVY_PERMITS", "1"),
        ("GOALSMITH_HEAVY_QUEUE", "0")
    ]
);
