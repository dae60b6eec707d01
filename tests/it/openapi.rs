//! The OpenAPI document against the server that serves it.
//!
//! One scenario calls every route of a running server as a client would and keeps each response.
//! Every JSON response must carry each property its documented schema requires (a light
//! structural check; `tests/reference/check_openapi.py` validates the same responses fully with
//! `jsonschema`), every documented `ETag` must be sent, and every documented 304 must happen.
//!
//! `GOALSMITH_WRITE_REFERENCE=1 cargo test --test it openapi` also writes the served document
//! and these responses to `tests/reference/` for that script.

use crate::support::*;
use base64::Engine;
use reqwest::{Method, StatusCode};
use serde_json::{Value, json};

/// One response as received.
struct Sample {
    method: Method,
    /// The documented path (`/api/goals/{id}`), not the concrete one.
    template: &'static str,
    status: StatusCode,
    content_type: String,
    etag: Option<String>,
    /// The concrete path, for re-requests.
    path: String,
    /// The parsed body of a JSON response, `Null` otherwise.
    body: Value,
    /// The JSON request body, if one was sent.
    request: Option<Value>,
}

/// An error request: method, documented path, concrete path, token, body, headers.
type ErrorCase<'a> = (
    Method,
    &'static str,
    String,
    Option<&'a str>,
    Req,
    Vec<(&'a str, &'a str)>,
);

enum Req {
    None,
    Json(Value),
    Bytes(&'static str, Vec<u8>),
}

struct Client<'a> {
    s: &'a Server,
    samples: Vec<Sample>,
}

impl Client<'_> {
    async fn call(
        &mut self,
        method: Method,
        template: &'static str,
        path: &str,
        token: Option<&str>,
        body: Req,
        headers: &[(&str, &str)],
    ) -> (StatusCode, Value, Option<String>) {
        let mut req = self.s.client.request(method.clone(), self.s.url(path));
        if let Some(t) = token {
            req = req.bearer_auth(t);
        }
        for (k, v) in headers {
            req = req.header(*k, *v);
        }
        let mut request = None;
        req = match body {
            Req::None => req,
            Req::Json(v) => {
                let r = req.json(&v);
                request = Some(v);
                r
            }
            Req::Bytes(ct, b) => req.header("content-type", ct).body(b),
        };
        let resp = req.send().await.expect("request");
        let status = resp.status();
        let etag = etag(&resp);
        let content_type = resp
            .headers()
            .get("content-type")
            .and_then(|v| v.to_str().ok())
            .unwrap_or("")
            .to_string();
        let bytes = resp.bytes().await.expect("body");
        let body = if content_type.starts_with("application/json") {
            serde_json::from_slice(&bytes).expect("a JSON response parses")
        } else {
            Value::Null
        };
        self.samples.push(Sample {
            method,
            template,
            status,
            content_type,
            etag: etag.clone(),
            path: path.to_string(),
            body: body.clone(),
            request,
        });
        (status, body, etag)
    }
}

fn str_of(v: &Value, key: &str) -> String {
    v[key]
        .as_str()
        .unwrap_or_else(|| panic!("{key} in {v}"))
        .to_string()
}

/// Calls every route at least once, successes and the common errors; returns what came back.
async fn scenario(s: &Server) -> Vec<Sample> {
    let editor = s.token("openapi", "editor");
    let viewer = s.token("openapi", "viewer");
    let (e, v) = (Some(editor.as_str()), Some(viewer.as_str()));
    let mut c = Client {
        s,
        samples: Vec::new(),
    };
    use Method as M;

    c.call(M::GET, "/healthz", "/healthz", None, Req::None, &[])
        .await;
    c.call(M::GET, "/metrics", "/metrics", None, Req::None, &[])
        .await;

    c.call(
        M::GET,
        "/api/openapi.json",
        "/api/openapi.json",
        None,
        Req::None,
        &[],
    )
    .await;
    c.call(
        M::GET,
        "/api/schema/goal.json",
        "/api/schema/goal.json",
        None,
        Req::None,
        &[],
    )
    .await;

    // A calibrated camera with a pose (so revisions carry 3-D targets) and a bare one (nulls).
    let calibrated = json!({
        "name": "bench overhead", "width": 64, "height": 48,
        "intrinsics": {"K": [50.0, 0.0, 31.5, 0.0, 50.0, 23.5, 0.0, 0.0, 1.0],
                       "D": [0.01, -0.002, 0.0, 0.0, 0.0], "distortion_model": "plumb_bob"},
        "work_plane": {"normal": [0.0, 0.0, 1.0], "offset_m": 0.4},
        "pose_in_base": {"rotation": [[1.0, 0.0, 0.0], [0.0, -1.0, 0.0], [0.0, 0.0, -1.0]],
                         "translation_m": [0.4, 0.0, 0.9]},
        "safe_zone": [[0.0, 0.0], [63.0, 0.0], [63.0, 47.0], [0.0, 47.0]],
        "no_go_zones": [[[55.0, 40.0], [62.0, 40.0], [62.0, 46.0]]]
    });
    let (st, cam, _) = c
        .call(
            M::POST,
            "/api/cameras",
            "/api/cameras",
            e,
            Req::Json(calibrated),
            &[],
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{cam}");
    let cam = str_of(&cam, "id");
    let (st, bare, _) = c
        .call(
            M::POST,
            "/api/cameras",
            "/api/cameras",
            e,
            Req::Json(json!({"name": "side view", "width": 32, "height": 24,
                             "intrinsics": {"fx": 30.0, "fy": 30.0, "cx": 15.5, "cy": 11.5}})),
            &[],
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{bare}");
    let (st, plain, _) = c
        .call(
            M::POST,
            "/api/cameras",
            "/api/cameras",
            e,
            Req::Json(json!({"name": "door", "width": 16, "height": 16})),
            &[],
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{plain}");
    c.call(M::GET, "/api/cameras", "/api/cameras", v, Req::None, &[])
        .await;
    c.call(
        M::GET,
        "/api/cameras/{id}",
        &format!("/api/cameras/{cam}"),
        v,
        Req::None,
        &[],
    )
    .await;
    c.call(
        M::GET,
        "/api/cameras/{id}/intrinsics",
        &format!("/api/cameras/{cam}/intrinsics?width=32&height=24"),
        v,
        Req::None,
        &[],
    )
    .await;

    let frames = "/api/cameras/{id}/frames";
    let image = png(64, 48, 3);
    let (st, frame, _) = c
        .call(
            M::POST,
            frames,
            &format!("/api/cameras/{cam}/frames"),
            e,
            Req::Bytes("image/png", image.clone()),
            &[],
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{frame}");
    let (st, _, _) = c
        .call(
            M::POST,
            frames,
            &format!("/api/cameras/{cam}/frames"),
            e,
            Req::Bytes("image/png", image),
            &[],
        )
        .await;
    assert_eq!(
        st,
        StatusCode::OK,
        "the same bytes again are the same frame"
    );
    let frame = str_of(&frame, "id");
    c.call(
        M::GET,
        frames,
        &format!("/api/cameras/{cam}/frames"),
        v,
        Req::None,
        &[],
    )
    .await;
    c.call(
        M::GET,
        "/api/frames/{id}",
        &format!("/api/frames/{frame}"),
        v,
        Req::None,
        &[],
    )
    .await;
    c.call(
        M::GET,
        "/api/frames/{id}/image",
        &format!("/api/frames/{frame}/image"),
        v,
        Req::None,
        &[],
    )
    .await;

    // A demonstration of two frames, read back with one of its frames.
    let demo_zip = {
        use std::io::Write;
        let mut z = zip::ZipWriter::new(std::io::Cursor::new(Vec::new()));
        let opts = zip::write::SimpleFileOptions::default();
        for (k, seed) in [(0, 3u8), (1, 9)] {
            z.start_file(format!("{k}.png"), opts).expect("entry");
            z.write_all(&png(64, 48, seed)).expect("write");
        }
        z.finish().expect("zip").into_inner()
    };
    let (st, demo, _) = c
        .call(
            M::POST,
            "/api/cameras/{id}/demos",
            &format!("/api/cameras/{cam}/demos"),
            e,
            Req::Bytes("application/zip", demo_zip),
            &[],
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{demo}");
    let demo = str_of(&demo, "id");
    c.call(
        M::GET,
        "/api/cameras/{id}/demos",
        &format!("/api/cameras/{cam}/demos"),
        v,
        Req::None,
        &[],
    )
    .await;
    c.call(
        M::GET,
        "/api/demos/{id}",
        &format!("/api/demos/{demo}"),
        v,
        Req::None,
        &[],
    )
    .await;
    c.call(
        M::GET,
        "/api/demos/{id}/frames/{i}/image",
        &format!("/api/demos/{demo}/frames/1/image"),
        v,
        Req::None,
        &[],
    )
    .await;

    // A track on it, its operation (polled until done, then its events), a correction, the
    // exports, and a cancel of the finished operation.
    let (st, started, _) = c
        .call(
            M::POST,
            "/api/demos/{id}/tracks",
            &format!("/api/demos/{demo}/tracks"),
            e,
            Req::Json(json!({"label": "rim", "frame": 0, "x": 30.0, "y": 20.0})),
            &[],
        )
        .await;
    assert_eq!(st, StatusCode::ACCEPTED, "{started}");
    let track = str_of(&started, "track_id");
    let op = str_of(&started, "operation_id");
    loop {
        let (_, v, _) = c
            .call(
                M::GET,
                "/api/operations/{id}",
                &format!("/api/operations/{op}"),
                v,
                Req::None,
                &[],
            )
            .await;
        if v["done"] == true {
            break;
        }
        tokio::time::sleep(std::time::Duration::from_millis(100)).await;
    }
    c.call(
        M::GET,
        "/api/operations/{id}/events",
        &format!("/api/operations/{op}/events"),
        v,
        Req::None,
        &[],
    )
    .await;
    c.call(
        M::POST,
        "/api/operations/{id}/cancel",
        &format!("/api/operations/{op}/cancel"),
        e,
        Req::None,
        &[],
    )
    .await;

    // A reward fit from a path drawn by hand, read while it runs and once it has, and its map.
    let (st, fit, _) = c
        .call(
            M::POST,
            "/api/reward-fits",
            "/api/reward-fits",
            e,
            Req::Json(json!({"frame_id": frame, "cell_px": 8,
                "features": [{"kind": "distance_to", "point": [40.0, 30.0]}, {"kind": "no_go"}],
                "demos": [{"path": [[5.0, 5.0], [20.0, 15.0], [40.0, 30.0]]}], "l2": 0.01})),
            &[],
        )
        .await;
    assert_eq!(st, StatusCode::ACCEPTED, "{fit}");
    let fit = str_of(&fit, "id");
    loop {
        let (_, v, _) = c
            .call(
                M::GET,
                "/api/reward-fits/{id}",
                &format!("/api/reward-fits/{fit}"),
                v,
                Req::None,
                &[],
            )
            .await;
        if v.get("weights").is_some() {
            break;
        }
        tokio::time::sleep(std::time::Duration::from_millis(100)).await;
    }
    c.call(
        M::GET,
        "/api/reward-fits/{id}/reward-map.npy",
        &format!("/api/reward-fits/{fit}/reward-map.npy"),
        v,
        Req::None,
        &[],
    )
    .await;
    c.call(
        M::GET,
        "/api/reward-fits/{id}/reward-map.png",
        &format!("/api/reward-fits/{fit}/reward-map.png"),
        v,
        Req::None,
        &[],
    )
    .await;
    c.call(
        M::GET,
        "/api/reward-fits",
        "/api/reward-fits",
        v,
        Req::None,
        &[],
    )
    .await;
    c.call(
        M::PUT,
        "/api/demos/{id}/tracks/{track_id}/samples/{frame}",
        &format!("/api/demos/{demo}/tracks/{track}/samples/1"),
        e,
        Req::Json(json!({"x": 31.0, "y": 20.5})),
        &[],
    )
    .await;
    c.call(
        M::GET,
        "/api/demos/{id}/tracks/{track_id}",
        &format!("/api/demos/{demo}/tracks/{track}"),
        v,
        Req::None,
        &[],
    )
    .await;
    let (st, made, _) = c
        .call(
            M::POST,
            "/api/demos/{id}/goal",
            &format!("/api/demos/{demo}/goal"),
            e,
            Req::Json(json!({"name": "rim to the mat", "tracks": [track], "start_frame": 0, "end_frame": 0})),
            &[],
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{made}");
    c.call(
        M::GET,
        "/api/demos/{id}/tracks.json",
        &format!("/api/demos/{demo}/tracks.json"),
        v,
        Req::None,
        &[],
    )
    .await;
    c.call(
        M::GET,
        "/api/demos/{id}/tracks.csv",
        &format!("/api/demos/{demo}/tracks.csv"),
        v,
        Req::None,
        &[],
    )
    .await;

    // A goal with every term kind that needs no reward fit.
    let mask = {
        let mut painted = vec![false; 64 * 48];
        for j in 20..30 {
            for i in 5..15 {
                painted[j * 64 + i] = true;
            }
        }
        goalsmith::images::encode_mask(64, 48, &painted).expect("mask png")
    };
    let goal_body = json!({
        "name": "pots onto the mat",
        "frame_id": frame,
        "terms": [
            {"kind": "point", "label": "small pot", "source": [10.0, 12.0], "target": [40.0, 30.0]},
            {"kind": "region", "source": [20.0, 5.0], "polygon": [[30.0, 5.0], [50.0, 5.0], [50.0, 20.0], [30.0, 20.0]], "weight": 2.0},
            {"kind": "mask", "source": [3.0, 3.0], "mask_png_base64": base64::engine::general_purpose::STANDARD.encode(&mask), "tolerance_px": 2.0},
            {"kind": "rigid", "label": "tray", "sources": [[0.0, 0.0], [1.0, 0.0], [0.0, 2.0]], "targets": [[10.0, 10.0], [9.0, 10.0], [10.0, 12.0]], "allow_scale": true}
        ],
        "cost": {"metric": "huber", "huber_delta_px": 3.0, "steps": "all"},
        "note": "first layout"
    });
    let (st, rev, tag1) = c
        .call(
            M::POST,
            "/api/goals",
            "/api/goals",
            e,
            Req::Json(goal_body.clone()),
            &[],
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{rev}");
    let goal = str_of(&rev, "goal_id");
    let tag1 = tag1.expect("ETag on create");
    c.call(M::GET, "/api/goals", "/api/goals", v, Req::None, &[])
        .await;
    c.call(
        M::GET,
        "/api/goals/{id}",
        &format!("/api/goals/{goal}"),
        v,
        Req::None,
        &[],
    )
    .await;
    let mut moved = goal_body.clone();
    moved["terms"][0]["target"] = json!([41.0, 31.0]);
    moved["note"] = json!("nudged the pot");
    let (st, rev2, _) = c
        .call(
            M::PUT,
            "/api/goals/{id}",
            &format!("/api/goals/{goal}"),
            e,
            Req::Json(moved.clone()),
            &[("if-match", &tag1)],
        )
        .await;
    assert_eq!(st, StatusCode::OK, "{rev2}");
    c.call(
        M::GET,
        "/api/goals/{id}/revisions",
        &format!("/api/goals/{goal}/revisions"),
        v,
        Req::None,
        &[],
    )
    .await;
    let base = format!("/api/goals/{goal}/revisions/1");
    c.call(
        M::GET,
        "/api/goals/{id}/revisions/{n}",
        &base,
        v,
        Req::None,
        &[],
    )
    .await;
    c.call(
        M::GET,
        "/api/goals/{id}/revisions/{n}/cost-maps.npy",
        &format!("{base}/cost-maps.npy?width=32&height=24"),
        v,
        Req::None,
        &[],
    )
    .await;
    // P = 1 + 1 + 1 + 3 source points.
    let pts = json!({"points": [
        [[[40.0, 30.0], [40.0, 12.0], [10.0, 25.0], [10.0, 10.0], [9.0, 10.0], [10.0, 12.0]]],
        [[[0.0, 0.0], [0.0, 0.0], [0.0, 0.0], [0.0, 0.0], [0.0, 0.0], [0.0, 0.0]]]
    ]});
    let cost = "/api/goals/{id}/revisions/{n}/cost";
    let (st, r, _) = c
        .call(
            M::POST,
            cost,
            &format!("{base}/cost"),
            v,
            Req::Json(pts.clone()),
            &[],
        )
        .await;
    assert_eq!(st, StatusCode::OK, "{r}");
    let npy = goalsmith_core::npy::write_f32(&[1, 1, 6, 2], &[20.0; 12]).expect("npy");
    let (st, r, _) = c
        .call(
            M::POST,
            cost,
            &format!("{base}/cost"),
            v,
            Req::Bytes("application/x-npy", npy),
            &[],
        )
        .await;
    assert_eq!(st, StatusCode::OK, "{r}");
    c.call(
        M::GET,
        "/api/goals/{id}/revisions/{n}/overlay.png",
        &format!("{base}/overlay.png"),
        v,
        Req::None,
        &[],
    )
    .await;
    c.call(
        M::GET,
        "/api/goals/{id}/revisions/{n}/bundle.zip",
        &format!("{base}/bundle.zip"),
        v,
        Req::None,
        &[],
    )
    .await;
    let outcomes = "/api/goals/{id}/outcomes";
    // Before any trial the summary's rates are null.
    c.call(
        M::GET,
        outcomes,
        &format!("/api/goals/{goal}/outcomes"),
        v,
        Req::None,
        &[],
    )
    .await;
    for (final_points, note) in [
        (pts["points"][0][0].clone(), Some("trial 1")),
        (pts["points"][1][0].clone(), None),
    ] {
        let mut body = json!({ "final_points": final_points });
        if let Some(n) = note {
            body["note"] = json!(n);
        }
        let (st, o, _) = c
            .call(
                M::POST,
                "/api/goals/{id}/revisions/{n}/outcomes",
                &format!("{base}/outcomes"),
                e,
                Req::Json(body),
                &[],
            )
            .await;
        assert_eq!(st, StatusCode::CREATED, "{o}");
    }
    c.call(
        M::GET,
        outcomes,
        &format!("/api/goals/{goal}/outcomes"),
        v,
        Req::None,
        &[],
    )
    .await;

    // Goal sets.
    let set_body = json!({"name": "morning tidy-up", "items": [
        {"goal_id": goal, "revision": 2}, {"goal_id": goal, "revision": 1}]});
    let (st, set, set_tag) = c
        .call(
            M::POST,
            "/api/goal-sets",
            "/api/goal-sets",
            e,
            Req::Json(set_body),
            &[],
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{set}");
    let set = str_of(&set, "id");
    let set_tag = set_tag.expect("ETag on a goal set");
    c.call(
        M::GET,
        "/api/goal-sets",
        "/api/goal-sets",
        v,
        Req::None,
        &[],
    )
    .await;
    c.call(
        M::GET,
        "/api/goal-sets/{id}",
        &format!("/api/goal-sets/{set}"),
        v,
        Req::None,
        &[],
    )
    .await;
    let (st, put, _) = c
        .call(
            M::PUT,
            "/api/goal-sets/{id}",
            &format!("/api/goal-sets/{set}"),
            e,
            Req::Json(
                json!({"name": "morning tidy-up", "items": [{"goal_id": goal, "revision": 1}]}),
            ),
            &[("if-match", &set_tag)],
        )
        .await;
    assert_eq!(st, StatusCode::OK, "{put}");
    c.call(
        M::GET,
        "/api/goal-sets/{id}/bundle.zip",
        &format!("/api/goal-sets/{set}/bundle.zip"),
        v,
        Req::None,
        &[],
    )
    .await;
    let (st, _, _) = c
        .call(
            M::POST,
            "/api/preview/cost-map.png",
            "/api/preview/cost-map.png",
            v,
            Req::Json(json!({"goal": point_goal(&frame, "preview"), "point": 0, "max_side": 32})),
            &[],
        )
        .await;
    assert_eq!(st, StatusCode::OK);

    // The common errors, each with the contract's error body.
    let errors: Vec<ErrorCase<'_>> = vec![
        (
            M::GET,
            "/api/cameras",
            "/api/cameras".into(),
            None,
            Req::None,
            vec![],
        ),
        (
            M::POST,
            "/api/cameras",
            "/api/cameras".into(),
            v,
            Req::Json(json!({"name": "x", "width": 8, "height": 8})),
            vec![],
        ),
        (
            M::GET,
            "/api/goals/{id}",
            format!("/api/goals/{}", uuid::Uuid::new_v4()),
            v,
            Req::None,
            vec![],
        ),
        (
            M::POST,
            "/api/goals",
            "/api/goals".into(),
            e,
            Req::Json(json!({"name": "", "frame_id": frame, "terms": []})),
            vec![],
        ),
        (
            M::POST,
            cost,
            format!("{base}/cost"),
            v,
            Req::Bytes("text/csv", b"1,2".to_vec()),
            vec![],
        ),
        (
            M::PUT,
            "/api/goals/{id}",
            format!("/api/goals/{goal}"),
            e,
            Req::Json(moved.clone()),
            vec![],
        ),
        (
            M::PUT,
            "/api/goals/{id}",
            format!("/api/goals/{goal}"),
            e,
            Req::Json(moved),
            vec![("if-match", "\"stale\"")],
        ),
    ];
    for (m, template, path, token, body, headers) in errors {
        let (st, err, _) = c.call(m, template, &path, token, body, &headers).await;
        assert!(st.is_client_error(), "{template}: {st} {err}");
    }
    // The audit log, for owners (after the writes above); a viewer is refused.
    let owner = s.token("openapi", "owner");
    c.call(
        M::GET,
        "/api/audit-log",
        "/api/audit-log?limit=3",
        Some(owner.as_str()),
        Req::None,
        &[],
    )
    .await;
    c.call(
        M::GET,
        "/api/audit-log",
        "/api/audit-log",
        v,
        Req::None,
        &[],
    )
    .await;
    c.samples
}

/// Follows `$ref`s (all of them point into `components/schemas`).
fn resolve<'a>(doc: &'a Value, mut schema: &'a Value) -> &'a Value {
    while let Some(r) = schema.get("$ref").and_then(Value::as_str) {
        let name = r
            .strip_prefix("#/components/schemas/")
            .unwrap_or_else(|| panic!("{r} points outside the document"));
        schema = &doc["components"]["schemas"][name];
        assert!(!schema.is_null(), "{r} has no schema");
    }
    schema
}

fn has_type(v: &Value, t: &str) -> bool {
    match t {
        "null" => v.is_null(),
        "boolean" => v.is_boolean(),
        "object" => v.is_object(),
        "array" => v.is_array(),
        "number" => v.is_number(),
        "integer" => v.is_i64() || v.is_u64(),
        "string" => v.is_string(),
        _ => true,
    }
}

/// A light structural check of `body` against `schema`: types, constants, every required
/// property present, no property the schema does not list, recursively. The full JSON Schema
/// validation is `tests/reference/check_openapi.py`'s.
fn check(doc: &Value, schema: &Value, body: &Value, at: &str, errors: &mut Vec<String>) {
    let schema = resolve(doc, schema);
    if schema == &Value::Bool(true) {
        return;
    }
    for key in ["oneOf", "anyOf"] {
        if let Some(alts) = schema[key].as_array() {
            let fits = alts.iter().any(|alt| {
                let mut e = Vec::new();
                check(doc, alt, body, at, &mut e);
                e.is_empty()
            });
            if !fits {
                errors.push(format!("{at}: fits none of {key} {alts:?}: {body}"));
            }
        }
    }
    for alt in schema["allOf"].as_array().into_iter().flatten() {
        check(doc, alt, body, at, errors);
    }
    let types: Vec<&str> = match &schema["type"] {
        Value::String(t) => vec![t.as_str()],
        Value::Array(ts) => ts.iter().filter_map(Value::as_str).collect(),
        _ => vec![],
    };
    if !types.is_empty() && !types.iter().any(|t| has_type(body, t)) {
        errors.push(format!("{at}: {body} is not {types:?}"));
        return;
    }
    if let Some(c) = schema.get("const")
        && c != body
    {
        errors.push(format!("{at}: {body} is not {c}"));
    }
    match body {
        Value::Object(m) => {
            for r in schema["required"].as_array().into_iter().flatten() {
                let r = r.as_str().unwrap_or_default();
                if !m.contains_key(r) {
                    errors.push(format!("{at}: required property {r:?} missing"));
                }
            }
            let props = schema["properties"].as_object();
            for (k, v) in m {
                match props.and_then(|p| p.get(k)) {
                    Some(p) => check(doc, p, v, &format!("{at}.{k}"), errors),
                    None => match schema.get("additionalProperties") {
                        Some(extra) => check(doc, extra, v, &format!("{at}.{k}"), errors),
                        None if props.is_some() => {
                            errors.push(format!("{at}: property {k:?} is not documented"))
                        }
                        None => {}
                    },
                }
            }
        }
        Value::Array(a) => {
            for (i, x) in a.iter().enumerate() {
                let item = schema["prefixItems"].get(i).or_else(|| schema.get("items"));
                if let Some(item) = item {
                    check(doc, item, x, &format!("{at}[{i}]"), errors);
                }
            }
        }
        _ => {}
    }
}

fn documented<'a>(doc: &'a Value, x: &Sample) -> &'a Value {
    let op = &doc["paths"][x.template][x.method.as_str().to_lowercase()];
    assert!(
        op.is_object(),
        "{} {} is not documented",
        x.method,
        x.template
    );
    let r = &op["responses"][x.status.as_str()];
    assert!(
        r.is_object(),
        "{} {} answered {}, which is not documented",
        x.method,
        x.template,
        x.status
    );
    r
}

fn reference_dir() -> std::path::PathBuf {
    std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/reference")
}

/// Runs the scenario on a fresh SQLite server and holds every response to the document the
/// same server serves.
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn served_responses_match_the_document() {
    let Some((s, _db)) = server(Db::Sqlite, "served_responses_match_the_document").await else {
        return;
    };
    let samples = scenario(&s).await;
    let doc = samples
        .iter()
        .find(|x| x.template == "/api/openapi.json")
        .map(|x| x.body.clone())
        .expect("the document was fetched");

    let mut errors = Vec::new();
    for x in &samples {
        let r = documented(&doc, x);
        let content = &r["content"];
        if x.content_type.starts_with("application/json") {
            let schema = &content["application/json"]["schema"];
            assert!(
                schema.is_object(),
                "{} {} {}: a JSON body, documented as {content}",
                x.method,
                x.template,
                x.status
            );
            let at = format!("{} {} {}", x.method, x.template, x.status);
            check(&doc, schema, &x.body, &at, &mut errors);
        } else {
            assert!(
                content.get(&x.content_type).is_some(),
                "{} {} {}: {} is not a documented media type ({content})",
                x.method,
                x.template,
                x.status,
                x.content_type
            );
        }
        if r["headers"].get("ETag").is_some() {
            assert!(
                x.etag.is_some(),
                "{} {}: ETag documented but not sent",
                x.method,
                x.template
            );
        }
    }
    assert!(errors.is_empty(), "{}", errors.join("\n"));

    // Every documented operation and success status was seen, so nothing above was vacuous.
    for (path, item) in doc["paths"].as_object().into_iter().flatten() {
        for (method, op) in item.as_object().into_iter().flatten() {
            for status in op["responses"]
                .as_object()
                .into_iter()
                .flatten()
                .map(|(k, _)| k)
            {
                if status.starts_with('2') {
                    assert!(
                        samples.iter().any(|x| x.template == path
                            && x.method.as_str().eq_ignore_ascii_case(method)
                            && x.status.as_str() == status),
                        "{method} {path} {status} was never seen"
                    );
                }
            }
        }
    }

    // Every documented 304 happens: the same request again with the ETag it answers now.
    let viewer = s.token("openapi", "viewer");
    for x in samples.iter().filter(|x| x.status == StatusCode::OK) {
        let r = &doc["paths"][x.template][x.method.as_str().to_lowercase()]["responses"];
        if r.get("304").is_none() {
            continue;
        }
        let now = s
            .client
            .request(x.method.clone(), s.url(&x.path))
            .bearer_auth(&viewer)
            .send()
            .await
            .expect("fetch again");
        let tag = etag(&now).expect("a 304-capable response has an ETag");
        let resp = s
            .client
            .request(x.method.clone(), s.url(&x.path))
            .bearer_auth(&viewer)
            .header("if-none-match", &tag)
            .send()
            .await
            .expect("revalidate");
        assert_eq!(resp.status(), StatusCode::NOT_MODIFIED, "{}", x.path);
    }

    let form = goalsmith::api::openapi::reference_form(&doc);
    let dir = reference_dir();
    if std::env::var("GOALSMITH_WRITE_REFERENCE").is_ok_and(|v| v == "1") {
        // The document is validated on its own; its copy here would only repeat it.
        let listed: Vec<Value> = samples
            .iter()
            .filter(|x| x.content_type.starts_with("application/json"))
            .filter(|x| x.template != "/api/openapi.json")
            .map(|x| {
                let mut v = json!({
                    "method": x.method.as_str().to_lowercase(),
                    "path": x.template,
                    "status": x.status.as_u16(),
                    "body": x.body,
                });
                if let Some(r) = &x.request {
                    v["request"] = r.clone();
                }
                v
            })
            .collect();
        let mut text = serde_json::to_string_pretty(&listed).expect("serialise samples");
        text.push('\n');
        std::fs::write(dir.join("openapi_responses.json"), text).expect("write responses");
        std::fs::write(dir.join("openapi.json"), &form).expect("write the document");
    } else {
        let committed = std::fs::read_to_string(dir.join("openapi.json")).unwrap_or_default();
        assert!(
            committed == form,
            "the served document differs from tests/reference/openapi.json: regenerate with \
             GOALSMITH_WRITE_REFERENCE=1 cargo test --test it openapi, then \
             python3 tests/reference/check_openapi.py, and commit the results"
        );
    }
}
