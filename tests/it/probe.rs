//! The smaller holes a probe of the running server found: strict JSON, `If-Match: *`, the
//! auth scheme's case, `nosniff` everywhere, contract bodies on the framework's own errors,
//! cut-off images, absurd numbers, and restoring a revision that overrides the safety zones.

use crate::on_both_databases;
use crate::pages::{csrf_in, join};
use crate::support::*;
use reqwest::StatusCode;
use serde_json::{Value, json};

async fn raw_post(
    s: &Server,
    path: &str,
    token: &str,
    ct: &str,
    body: &str,
) -> (StatusCode, Value) {
    s.post_bytes(path, Some(token), ct, body.as_bytes().to_vec())
        .await
}

async fn contract_is_strict(s: Server) {
    let (editor, cam, frame) = camera_and_frame(&s, "greenhouse", json!({})).await;
    let camera = r#"{"name": "bench side", "width": 64, "height": 48}"#;

    // Trailing data after the object, and an array where an object belongs.
    for (body, what) in [
        (format!("{camera} x"), "trailing garbage"),
        (format!("{camera}{camera}"), "two objects"),
        (
            r#"["bench side", 64, 48]"#.to_string(),
            "an array for the object",
        ),
    ] {
        let (st, err) = raw_post(&s, "/api/cameras", &editor, "application/json", &body).await;
        assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY, "{what}: {err}");
        assert_eq!(err["error"]["code"], "bad_json", "{what}");
    }
    let (st, _) = raw_post(
        &s,
        "/api/cameras",
        &editor,
        "application/json",
        &format!(" {camera}\n "),
    )
    .await;
    assert_eq!(
        st,
        StatusCode::CREATED,
        "whitespace around the object is fine"
    );

    let (st, rev) = s
        .post("/api/goals", Some(&editor), &point_goal(&frame, "tray"))
        .await;
    assert_eq!(st, StatusCode::CREATED);
    let goal = rev["goal_id"].as_str().unwrap().to_string();
    let cost = format!("/api/goals/{goal}/revisions/1/cost");
    let pts = r#"{"points": [[[[40, 30]]]]}"#;
    let (st, err) = raw_post(&s, &cost, &editor, "application/json", &format!("{pts}]")).await;
    assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY, "{err}");
    let (st, _) = raw_post(&s, &cost, &editor, "application/json", "[[[[[40, 30]]]]]").await;
    assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY);

    // `If-Match: *` names no revision: 428, and nothing is written.
    let mut body = point_goal(&frame, "tray");
    body["terms"][0]["target"] = json!([20.0, 20.0]);
    let (st, err, _) = s.put_goal(&goal, &editor, Some("*"), &body).await;
    assert_eq!(st, StatusCode::PRECONDITION_REQUIRED, "{err}");
    let (_, revs) = s
        .get(&format!("/api/goals/{goal}/revisions"), Some(&editor))
        .await;
    assert_eq!(
        revs["items"].as_array().unwrap().len(),
        1,
        "nothing written"
    );

    // The auth scheme is case-insensitive; a blank token is no token.
    for scheme in ["Bearer", "bearer", "BEARER", "bEaReR"] {
        let resp = s
            .client
            .get(s.url("/api/cameras"))
            .header("authorization", format!("{scheme} {editor}"))
            .send()
            .await
            .unwrap();
        assert_eq!(resp.status(), StatusCode::OK, "{scheme}");
    }
    let resp = s
        .client
        .get(s.url("/api/cameras"))
        .header("authorization", "Bearer ")
        .send()
        .await
        .unwrap();
    assert_eq!(resp.status(), StatusCode::UNAUTHORIZED);

    // nosniff on JSON, images, static files and errors alike; a missing static file gets
    // the contract's body.
    for (path, want) in [
        ("/api/cameras".to_string(), StatusCode::OK),
        (format!("/api/frames/{frame}/image"), StatusCode::OK),
        ("/static/editor.js".to_string(), StatusCode::OK),
        ("/static/marks.js".to_string(), StatusCode::OK),
        ("/static/no-such-file.js".to_string(), StatusCode::NOT_FOUND),
        ("/api/no-such-route".to_string(), StatusCode::NOT_FOUND),
        ("/healthz".to_string(), StatusCode::OK),
    ] {
        let resp = s
            .client
            .get(s.url(&path))
            .bearer_auth(&editor)
            .send()
            .await
            .unwrap();
        assert_eq!(resp.status(), want, "{path}");
        assert_eq!(
            resp.headers()
                .get("x-content-type-options")
                .map(|v| v.as_bytes()),
            Some(&b"nosniff"[..]),
            "{path}"
        );
        if want == StatusCode::NOT_FOUND {
            let body: Value = resp.json().await.expect("a JSON error body");
            assert_eq!(body["error"]["code"], "not_found", "{path}");
        }
    }

    // A JPEG cut off in transfer is refused, and nothing is stored.
    let jpeg = {
        let img =
            image::RgbImage::from_fn(64, 48, |x, y| image::Rgb([x as u8 * 4, y as u8 * 5, 90]));
        let mut out = std::io::Cursor::new(Vec::new());
        img.write_to(&mut out, image::ImageFormat::Jpeg).unwrap();
        out.into_inner()
    };
    let path = format!("/api/cameras/{cam}/frames");
    let (st, err) = s
        .post_bytes(
            &path,
            Some(&editor),
            "image/jpeg",
            jpeg[..jpeg.len() * 2 / 3].to_vec(),
        )
        .await;
    assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY, "{err}");
    let (st, err) = s
        .post_bytes(
            &path,
            Some(&editor),
            "image/jpeg",
            jpeg[..jpeg.len() - 2].to_vec(),
        )
        .await;
    assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY, "no end marker: {err}");
    let (_, frames) = s.get(&path, Some(&editor)).await;
    assert_eq!(
        frames["items"].as_array().unwrap().len(),
        1,
        "only the first frame"
    );
    let (st, f) = s.post_bytes(&path, Some(&editor), "image/jpeg", jpeg).await;
    assert_eq!(st, StatusCode::CREATED, "the whole JPEG is fine: {f}");
}

on_both_databases!(strict_contract, contract_is_strict);

async fn absurd_numbers(s: Server) {
    let (editor, _cam, frame) = camera_and_frame(&s, "greenhouse", json!({})).await;
    // Weights: at the documented limit, and past it.
    let mut body = point_goal(&frame, "tray");
    body["terms"][0]["weight"] = json!(1e6);
    let (st, rev) = s.post("/api/goals", Some(&editor), &body).await;
    assert_eq!(st, StatusCode::CREATED, "{rev}");
    for w in [1.000001e6, 1e308] {
        body["terms"][0]["weight"] = json!(w);
        let (st, err) = s.post("/api/goals", Some(&editor), &body).await;
        assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY, "weight {w}: {err}");
        assert_eq!(err["error"]["field"], "terms[0].weight");
    }
    body["terms"][0]["weight"] = json!(1.0);
    body["terms"][0]["tolerance_px"] = json!(1e9);
    let (st, err) = s.post("/api/goals", Some(&editor), &body).await;
    assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY, "{err}");
    assert_eq!(err["error"]["field"], "terms[0].tolerance_px");

    // Outcomes far outside any frame are refused, and the summary stays a number.
    let goal = rev["goal_id"].as_str().unwrap();
    let outcomes = format!("/api/goals/{goal}/revisions/1/outcomes");
    let (st, err) = s
        .post(
            &outcomes,
            Some(&editor),
            &json!({"final_points": [[1e308, 1e308]]}),
        )
        .await;
    assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY, "{err}");
    assert_eq!(err["error"]["field"], "final_points[0]");
    let (st, _) = s
        .post(
            &outcomes,
            Some(&editor),
            &json!({"final_points": [[-1e6, 1e6]]}),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "at the limit");
    let (_, all) = s
        .get(&format!("/api/goals/{goal}/outcomes"), Some(&editor))
        .await;
    assert!(all["summary"]["mean_residual_px"].is_number(), "{all}");

    // Intrinsics no camera of that size has.
    for (field, value) in [("fx", 1e308), ("fy", 0.001), ("cx", 5000.0), ("cy", -100.0)] {
        let mut intr =
            json!({"fx": 60.0, "fy": 60.0, "cx": 31.5, "cy": 23.5, "distortion": [0, 0, 0, 0, 0]});
        intr[field] = json!(value);
        let (st, err) = s
            .post(
                "/api/cameras",
                Some(&editor),
                &json!({"name": "bench side", "width": 64, "height": 48, "intrinsics": intr}),
            )
            .await;
        assert_eq!(
            st,
            StatusCode::UNPROCESSABLE_ENTITY,
            "{field} = {value}: {err}"
        );
        assert_eq!(err["error"]["field"], "intrinsics");
        assert!(
            err["error"]["message"].as_str().unwrap().contains(field),
            "{err}"
        );
    }
    let (st, cam) = s
        .post(
            "/api/cameras",
            Some(&editor),
            &json!({"name": "bench side", "width": 64, "height": 48,
                    "intrinsics": {"fx": 60.0, "fy": 60.0, "cx": 31.5, "cy": 23.5, "distortion": [-0.1, 0.02, 0, 0, 0]}}),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{cam}");
}

on_both_databases!(absurd_numbers_refused, absurd_numbers);

/// Restoring a revision that overrode the safety zones asks the restorer to take the override
/// on; without the tick nothing is written.
async fn restore_asks_again(kind: Db) {
    let Some(db) = fresh_db(kind, "restore_override").await else {
        return;
    };
    let (s, link) = start_with_link(&db.url, &db.data_dir, &[]);
    let (mut owner, _csrf) = join(&s.base, &link, "tamsin", "Tamsin", "repotting at dawn 7").await;
    // The goal is made through the API by a token of the same team.
    let api = s.token("my team", "editor");
    let zones = json!({"no_go_zones": [[[30.0, 20.0], [50.0, 20.0], [50.0, 40.0], [30.0, 40.0]]]});
    let (_, _cam, frame_id) = camera_and_frame(&s, "my team", zones).await;
    // Revision 1 overrides (its target (40, 30) lies in the no-go square); revision 2 is safe.
    let mut body = point_goal(&frame_id, "pot past the drip line");
    body["override_safety"] = json!(true);
    let (st, r1) = s.post("/api/goals", Some(&api), &body).await;
    assert_eq!(st, StatusCode::CREATED, "{r1}");
    let goal = r1["goal_id"].as_str().unwrap().to_string();
    let latest = s
        .client
        .get(s.url(&format!("/api/goals/{goal}")))
        .bearer_auth(&api)
        .send()
        .await
        .unwrap();
    let etag = latest.headers()["etag"].to_str().unwrap().to_string();
    let mut safe = point_goal(&frame_id, "pot past the drip line");
    safe["terms"][0]["target"] = json!([10.0, 40.0]);
    let (st, r2, _) = s.put_goal(&goal, &api, Some(&etag), &safe).await;
    assert_eq!(st, StatusCode::OK, "{r2}");

    let history = owner.get(&format!("/goals/{goal}/history")).await;
    assert!(
        history.body.contains("confirm_override"),
        "the tick box is offered"
    );
    let hcsrf = csrf_in(&history.body);
    let latest_etag = {
        let i = history
            .body
            .find("name=\"etag\" value=\"")
            .expect("etag field");
        let rest = &history.body[i + "name=\"etag\" value=\"".len()..];
        html_unescape(&rest.chars().take_while(|c| *c != '"').collect::<String>())
    };
    let refused = owner
        .post_form(
            &format!("/goals/{goal}/restore"),
            &[("csrf", &hcsrf), ("revision", "1"), ("etag", &latest_etag)],
        )
        .await;
    assert_eq!(refused.status, StatusCode::SEE_OTHER);
    let (_, revs) = s
        .get(&format!("/api/goals/{goal}/revisions"), Some(&api))
        .await;
    assert_eq!(
        revs["items"].as_array().unwrap().len(),
        2,
        "nothing restored without the tick"
    );
    let flash = owner.get(refused.location.as_deref().unwrap_or("/")).await;
    assert!(
        flash.body.contains("overrides the camera"),
        "the page says why"
    );

    let done = owner
        .post_form(
            &format!("/goals/{goal}/restore"),
            &[
                ("csrf", &hcsrf),
                ("revision", "1"),
                ("etag", &latest_etag),
                ("confirm_override", "yes"),
            ],
        )
        .await;
    assert_eq!(done.status, StatusCode::SEE_OTHER);
    let (st, r3) = s
        .get(&format!("/api/goals/{goal}/revisions/3"), Some(&api))
        .await;
    assert_eq!(st, StatusCode::OK, "{r3}");
    assert_eq!(r3["override_safety"], true);
    assert_eq!(r3["author"], "Tamsin");
    assert!(!r3["derived"]["warnings"].as_array().unwrap().is_empty());
}

fn html_unescape(s: &str) -> String {
    s.replace("&quot;", "\"")
        .replace("&#34;", "\"")
        .replace("&amp;", "&")
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn restore_of_an_override_asks_again_sqlite() {
    restore_asks_again(Db::Sqlite).await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn restore_of_an_override_asks_again_postgres() {
    restore_asks_again(Db::Postgres).await;
}
