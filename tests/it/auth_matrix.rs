//! The authorisation matrix: each route × {no token, other team, viewer, editor, owner}.

use crate::on_both_databases;
use crate::support::*;
use reqwest::{Method, StatusCode};
use serde_json::json;

#[derive(Clone, Copy)]
enum Body {
    None,
    Camera,
    Frame,
    Goal,
    Points,
    Outcome,
    Set,
    Preview,
    Demo,
    Track,
    Sample,
    DemoGoal,
    Fit,
}

/// A ZIP of two frames of the potting camera.
fn demo_zip(seed: u8) -> Vec<u8> {
    let (a, b) = (png(64, 48, seed), png(64, 48, seed.wrapping_add(1)));
    zip_of(&[("0.png", &a), ("1.png", &b)])
}

async fn matrix(s: Server) {
    let (editor, cam, frame) = camera_and_frame(
        &s,
        "potting",
        json!({"intrinsics": {"fx": 50.0, "fy": 50.0, "cx": 31.5, "cy": 23.5}}),
    )
    .await;
    let viewer = s.token("potting", "viewer");
    let owner = s.token("potting", "owner");
    let other = s.token("seedlings", "owner");
    let (st, rev) = s
        .post(
            "/api/goals",
            Some(&editor),
            &point_goal(&frame, "pot to mat"),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED);
    let goal = rev["goal_id"].as_str().unwrap().to_string();
    let (st, set) = s
        .post(
            "/api/goal-sets",
            Some(&editor),
            &json!({"name": "suite", "items": [{"goal_id": goal, "revision": 1}]}),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{set}");
    let set = set["id"].as_str().unwrap().to_string();
    let (st, demo) = s
        .post_bytes(
            &format!("/api/cameras/{cam}/demos"),
            Some(&editor),
            "application/zip",
            demo_zip(1),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{demo}");
    let demo = demo["id"].as_str().unwrap().to_string();
    let (st, started) = s
        .post(
            &format!("/api/demos/{demo}/tracks"),
            Some(&editor),
            &json!({"label": "rim", "frame": 0, "x": 10.0, "y": 10.0}),
        )
        .await;
    assert_eq!(st, StatusCode::ACCEPTED, "{started}");
    let track = started["track_id"].as_str().unwrap().to_string();
    let op = started["operation_id"].as_str().unwrap().to_string();
    operation_done(&s, &editor, &op).await;
    let fit_body = json!({"frame_id": frame, "cell_px": 8, "features": [{"kind": "distance_to", "point": [40.0, 30.0]}],
                          "demos": [{"path": [[5.0, 5.0], [20.0, 15.0], [40.0, 30.0]]}]});
    let (st, fit) = s.post("/api/reward-fits", Some(&editor), &fit_body).await;
    assert_eq!(st, StatusCode::ACCEPTED, "{fit}");
    let fit = fit["id"].as_str().unwrap().to_string();
    let fit_op = s
        .get(&format!("/api/reward-fits/{fit}"), Some(&editor))
        .await
        .1["operation_id"]
        .as_str()
        .unwrap()
        .to_string();
    assert_eq!(
        operation_done(&s, &editor, &fit_op).await["state"],
        "succeeded"
    );

    // Columns: no token, other team, viewer, editor, owner.
    use StatusCode as S;
    let (ok, created, accepted, unauth, forbidden, nf, invalid) = (
        S::OK,
        S::CREATED,
        S::ACCEPTED,
        S::UNAUTHORIZED,
        S::FORBIDDEN,
        S::NOT_FOUND,
        S::UNPROCESSABLE_ENTITY,
    );
    let table: Vec<(Method, String, Body, [StatusCode; 5])> = vec![
        (
            Method::GET,
            "/healthz".into(),
            Body::None,
            [ok, ok, ok, ok, ok],
        ),
        // Owners only; another team's owner reads its own (empty) log.
        (
            Method::GET,
            "/api/audit-log".into(),
            Body::None,
            [unauth, ok, forbidden, forbidden, ok],
        ),
        // Loopback clients (these tests) need no token; see `metrics` for the others.
        (
            Method::GET,
            "/metrics".into(),
            Body::None,
            [ok, ok, ok, ok, ok],
        ),
        (
            Method::GET,
            "/api/openapi.json".into(),
            Body::None,
            [ok, ok, ok, ok, ok],
        ),
        (
            Method::GET,
            "/api/schema/goal.json".into(),
            Body::None,
            [ok, ok, ok, ok, ok],
        ),
        (
            Method::POST,
            "/api/cameras".into(),
            Body::Camera,
            [unauth, created, forbidden, created, created],
        ),
        (
            Method::GET,
            "/api/cameras".into(),
            Body::None,
            [unauth, ok, ok, ok, ok],
        ),
        (
            Method::GET,
            format!("/api/cameras/{cam}"),
            Body::None,
            [unauth, nf, ok, ok, ok],
        ),
        (
            Method::POST,
            format!("/api/cameras/{cam}/frames"),
            Body::Frame,
            [unauth, nf, forbidden, created, created],
        ),
        (
            Method::GET,
            format!("/api/cameras/{cam}/frames"),
            Body::None,
            [unauth, nf, ok, ok, ok],
        ),
        (
            Method::GET,
            format!("/api/frames/{frame}"),
            Body::None,
            [unauth, nf, ok, ok, ok],
        ),
        (
            Method::GET,
            format!("/api/frames/{frame}/image"),
            Body::None,
            [unauth, nf, ok, ok, ok],
        ),
        // Another team's frame id inside a body is a bad reference (422 on frame_id), not a 404.
        (
            Method::POST,
            "/api/goals".into(),
            Body::Goal,
            [unauth, invalid, forbidden, created, created],
        ),
        (
            Method::GET,
            "/api/goals".into(),
            Body::None,
            [unauth, ok, ok, ok, ok],
        ),
        (
            Method::GET,
            format!("/api/goals/{goal}"),
            Body::None,
            [unauth, nf, ok, ok, ok],
        ),
        (
            Method::PUT,
            format!("/api/goals/{goal}"),
            Body::Goal,
            [unauth, nf, forbidden, ok, ok],
        ),
        (
            Method::GET,
            format!("/api/goals/{goal}/revisions"),
            Body::None,
            [unauth, nf, ok, ok, ok],
        ),
        (
            Method::GET,
            format!("/api/goals/{goal}/revisions/1"),
            Body::None,
            [unauth, nf, ok, ok, ok],
        ),
        (
            Method::GET,
            format!("/api/goals/{goal}/revisions/1/cost-maps.npy"),
            Body::None,
            [unauth, nf, ok, ok, ok],
        ),
        // Scoring writes nothing, so viewers (planners with read-only tokens) may do it.
        (
            Method::POST,
            format!("/api/goals/{goal}/revisions/1/cost"),
            Body::Points,
            [unauth, nf, ok, ok, ok],
        ),
        (
            Method::GET,
            format!("/api/goals/{goal}/revisions/1/overlay.png"),
            Body::None,
            [unauth, nf, ok, ok, ok],
        ),
        (
            Method::GET,
            format!("/api/goals/{goal}/revisions/1/bundle.zip"),
            Body::None,
            [unauth, nf, ok, ok, ok],
        ),
        (
            Method::POST,
            format!("/api/goals/{goal}/revisions/1/outcomes"),
            Body::Outcome,
            [unauth, nf, forbidden, created, created],
        ),
        (
            Method::GET,
            format!("/api/goals/{goal}/outcomes"),
            Body::None,
            [unauth, nf, ok, ok, ok],
        ),
        (
            Method::GET,
            format!("/api/cameras/{cam}/intrinsics"),
            Body::None,
            [unauth, nf, ok, ok, ok],
        ),
        (
            Method::POST,
            "/api/goal-sets".into(),
            Body::Set,
            [unauth, invalid, forbidden, created, created],
        ),
        (
            Method::GET,
            "/api/goal-sets".into(),
            Body::None,
            [unauth, ok, ok, ok, ok],
        ),
        (
            Method::GET,
            format!("/api/goal-sets/{set}"),
            Body::None,
            [unauth, nf, ok, ok, ok],
        ),
        (
            Method::PUT,
            format!("/api/goal-sets/{set}"),
            Body::Set,
            [unauth, nf, forbidden, ok, ok],
        ),
        (
            Method::GET,
            format!("/api/goal-sets/{set}/bundle.zip"),
            Body::None,
            [unauth, nf, ok, ok, ok],
        ),
        (
            Method::POST,
            format!("/api/cameras/{cam}/demos"),
            Body::Demo,
            [unauth, nf, forbidden, created, created],
        ),
        (
            Method::GET,
            format!("/api/cameras/{cam}/demos"),
            Body::None,
            [unauth, nf, ok, ok, ok],
        ),
        (
            Method::POST,
            "/api/reward-fits".into(),
            Body::Fit,
            [unauth, nf, forbidden, accepted, accepted],
        ),
        (
            Method::GET,
            format!("/api/reward-fits/{fit}"),
            Body::None,
            [unauth, nf, ok, ok, ok],
        ),
        (
            Method::GET,
            format!("/api/reward-fits/{fit}/reward-map.npy"),
            Body::None,
            [unauth, nf, ok, ok, ok],
        ),
        (
            Method::GET,
            format!("/api/reward-fits/{fit}/reward-map.png"),
            Body::None,
            [unauth, nf, ok, ok, ok],
        ),
        (
            Method::GET,
            "/api/reward-fits".into(),
            Body::None,
            [unauth, ok, ok, ok, ok],
        ),
        (
            Method::GET,
            format!("/api/demos/{demo}"),
            Body::None,
            [unauth, nf, ok, ok, ok],
        ),
        (
            Method::GET,
            format!("/api/demos/{demo}/frames/1/image"),
            Body::None,
            [unauth, nf, ok, ok, ok],
        ),
        (
            Method::POST,
            format!("/api/demos/{demo}/tracks"),
            Body::Track,
            [unauth, nf, forbidden, accepted, accepted],
        ),
        (
            Method::GET,
            format!("/api/demos/{demo}/tracks/{track}"),
            Body::None,
            [unauth, nf, ok, ok, ok],
        ),
        (
            Method::PUT,
            format!("/api/demos/{demo}/tracks/{track}/samples/1"),
            Body::Sample,
            [unauth, nf, forbidden, accepted, accepted],
        ),
        (
            Method::POST,
            format!("/api/demos/{demo}/goal"),
            Body::DemoGoal,
            [unauth, nf, forbidden, created, created],
        ),
        (
            Method::GET,
            format!("/api/demos/{demo}/tracks.json"),
            Body::None,
            [unauth, nf, ok, ok, ok],
        ),
        (
            Method::GET,
            format!("/api/demos/{demo}/tracks.csv"),
            Body::None,
            [unauth, nf, ok, ok, ok],
        ),
        (
            Method::GET,
            format!("/api/operations/{op}"),
            Body::None,
            [unauth, nf, ok, ok, ok],
        ),
        (
            Method::GET,
            format!("/api/operations/{op}/events"),
            Body::None,
            [unauth, nf, ok, ok, ok],
        ),
        (
            Method::POST,
            format!("/api/operations/{op}/cancel"),
            Body::None,
            [unauth, nf, forbidden, accepted, accepted],
        ),
        // The editor's live cost preview writes nothing, so viewers may use it.
        (
            Method::POST,
            "/api/preview/cost-map.png".into(),
            Body::Preview,
            [unauth, invalid, ok, ok, ok],
        ),
    ];
    let routes: Vec<(String, String)> = table
        .iter()
        .map(|(m, p, _, _)| {
            (
                m.to_string(),
                p.replace(&cam, "{id}")
                    .replace(&frame, "{id}")
                    .replace(&goal, "{id}")
                    .replace(&set, "{id}")
                    .replace(&demo, "{id}")
                    .replace(&op, "{id}")
                    .replace(&fit, "{id}")
                    .replace(&track, "{track_id}")
                    .replacen("/revisions/1", "/revisions/{n}", 1)
                    .replacen("/frames/1/", "/frames/{i}/", 1)
                    .replacen("/samples/1", "/samples/{frame}", 1),
            )
        })
        .collect();
    for (m, p) in goalsmith::api::routes::list() {
        assert!(
            routes.contains(&((*m).to_string(), (*p).to_string())),
            "route {m} {p} is missing from the authorisation matrix"
        );
    }

    let who: [Option<&str>; 5] = [
        None,
        Some(&other),
        Some(&viewer),
        Some(&editor),
        Some(&owner),
    ];
    let names = ["no token", "other team", "viewer", "editor", "owner"];
    let mut seed = 100u8;
    for (method, path, body, expected) in &table {
        for (col, token) in who.iter().enumerate() {
            let mut req = s.client.request(method.clone(), s.url(path));
            if let Some(t) = token {
                req = req.bearer_auth(t);
            }
            req = match body {
                Body::None => req,
                Body::Camera => req.json(&json!({"name": "side view", "width": 32, "height": 32})),
                Body::Frame => {
                    seed += 1;
                    req.header("content-type", "image/png")
                        .body(png(64, 48, seed))
                }
                Body::Set => {
                    if *method == Method::PUT {
                        let resp = s
                            .client
                            .get(s.url(&format!("/api/goal-sets/{set}")))
                            .bearer_auth(&editor)
                            .send()
                            .await
                            .unwrap();
                        req = req.header("if-match", etag(&resp).unwrap());
                    }
                    req.json(&json!({"name": "suite", "items": [{"goal_id": goal, "revision": 1}]}))
                }
                Body::Demo => {
                    seed += 1;
                    req.header("content-type", "application/zip")
                        .body(demo_zip(seed))
                }
                Body::Track => req.json(&json!({"label": "rim", "frame": 1, "x": 12.0, "y": 12.0})),
                Body::Sample => req.json(&json!({"x": 11.0, "y": 11.0})),
                Body::Fit => req.json(&fit_body),
                Body::DemoGoal => req.json(
                    &json!({"name": "rim", "tracks": [track], "start_frame": 0, "end_frame": 0}),
                ),
                Body::Preview => {
                    req.json(&json!({"goal": point_goal(&frame, "pot to mat"), "point": 0}))
                }
                Body::Points => req.json(&json!({"points": [[[[20.0, 20.0]]]]})),
                Body::Outcome => req.json(&json!({"final_points": [[40.0, 30.0]]})),
                Body::Goal => {
                    if *method == Method::PUT {
                        let resp = s
                            .client
                            .get(s.url(&format!("/api/goals/{goal}")))
                            .bearer_auth(&editor)
                            .send()
                            .await
                            .unwrap();
                        req = req.header("if-match", etag(&resp).unwrap());
                    }
                    req.json(&point_goal(&frame, "pot to mat"))
                }
            };
            let resp = req.send().await.unwrap();
            let status = resp.status();
            let text = resp.text().await.unwrap_or_default();
            assert_eq!(
                status, expected[col],
                "{method} {path} as {}: {text}",
                names[col]
            );
            if !status.is_success() {
                let v: serde_json::Value = serde_json::from_str(&text)
                    .unwrap_or_else(|_| panic!("error body is JSON: {text}"));
                assert!(
                    v["error"]["code"].is_string() && v["error"]["message"].is_string(),
                    "{text}"
                );
            }
        }
    }
}

on_both_databases!(authorisation_matrix, matrix);
