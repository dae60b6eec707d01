//! Every route of the foundation, walked through as a client would, on both databases.

use crate::on_both_databases;
use crate::support::*;
use reqwest::StatusCode;
use serde_json::json;

async fn cameras_frames_goals(s: Server) {
    let (st, _) = s.get("/healthz", None).await;
    assert_eq!(st, StatusCode::OK);
    let editor = s.token("greenhouse", "editor");
    let viewer = s.token("greenhouse", "viewer");

    // A calibrated camera given in ROS CameraInfo form comes back in both forms.
    let (st, cam) = s
        .post(
            "/api/cameras",
            Some(&editor),
            &json!({
                "name": "bench overhead",
                "width": 64, "height": 48,
                "intrinsics": {"K": [50.0, 0.0, 31.5, 0.0, 50.0, 23.5, 0.0, 0.0, 1.0],
                                "D": [0.01, -0.002, 0.0, 0.0, 0.0], "distortion_model": "plumb_bob"},
                "work_plane": {"normal": [0.0, 0.0, 2.0], "offset_m": 0.8},
                "pose_in_base": {"rotation": [[1.0, 0.0, 0.0], [0.0, -1.0, 0.0], [0.0, 0.0, -1.0]],
                                 "translation_m": [0.4, 0.0, 0.9]},
                "safe_zone": [[0.0, 0.0], [63.0, 0.0], [63.0, 47.0], [0.0, 47.0]],
                "no_go_zones": [[[55.0, 40.0], [62.0, 40.0], [62.0, 46.0]]]
            }),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{cam}");
    assert_eq!(cam["intrinsics"]["fx"], 50.0);
    assert_eq!(cam["intrinsics"]["distortion"][0], 0.01);
    assert_eq!(cam["camera_info"]["distortion_model"], "plumb_bob");
    assert_eq!(
        cam["camera_info"]["k"][2]
            .as_f64()
            .or(cam["camera_info"]["K"][2].as_f64()),
        Some(31.5)
    );
    // n·X = d with n = (0, 0, 2), d = 0.8 is the plane z = 0.4: stored with a unit normal.
    assert_eq!(
        cam["work_plane"]["normal"],
        json!([0.0, 0.0, 1.0]),
        "normal is stored normalised"
    );
    assert_eq!(cam["work_plane"]["offset_m"], 0.4);
    let cam_id = cam["id"].as_str().unwrap().to_string();

    // Intrinsics for frames resized to 32×24 (factor ½): fx' = fx/2, cx' = (cx + 0.5)/2 − 0.5.
    let (st, small) = s
        .get(
            &format!(
                "/api/cameras/{}/intrinsics?width=32&height=24",
                cam["id"].as_str().unwrap()
            ),
            Some(&viewer),
        )
        .await;
    assert_eq!(st, StatusCode::OK, "{small}");
    assert_eq!(small["intrinsics"]["fx"], 25.0);
    assert_eq!(small["intrinsics"]["cx"], 15.5);
    assert_eq!(small["camera_info"]["K"][5], 11.5);
    let (st, list) = s.get("/api/cameras", Some(&viewer)).await;
    assert_eq!(st, StatusCode::OK);
    assert_eq!(list["items"].as_array().unwrap().len(), 1);
    let (st, one) = s
        .get(&format!("/api/cameras/{cam_id}"), Some(&viewer))
        .await;
    assert_eq!(st, StatusCode::OK);
    assert_eq!(one, cam);

    // Frames: stored by SHA-256; the same bytes again are the same frame.
    let bytes = png(64, 48, 1);
    let (st, frame) = s
        .post_bytes(
            &format!("/api/cameras/{cam_id}/frames"),
            Some(&editor),
            "image/png",
            bytes.clone(),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{frame}");
    use sha2::Digest;
    assert_eq!(frame["sha256"], hex::encode(sha2::Sha256::digest(&bytes)));
    assert_eq!(
        (frame["width"].as_i64(), frame["height"].as_i64()),
        (Some(64), Some(48))
    );
    let (st, again) = s
        .post_bytes(
            &format!("/api/cameras/{cam_id}/frames"),
            Some(&editor),
            "image/png",
            bytes.clone(),
        )
        .await;
    assert_eq!(st, StatusCode::OK);
    assert_eq!(again["id"], frame["id"]);
    let frame_id = frame["id"].as_str().unwrap().to_string();
    let (st, f) = s
        .get(&format!("/api/frames/{frame_id}"), Some(&viewer))
        .await;
    assert_eq!(st, StatusCode::OK);
    assert_eq!(f, frame);
    let resp = s
        .client
        .get(s.url(&format!("/api/frames/{frame_id}/image")))
        .bearer_auth(&viewer)
        .send()
        .await
        .unwrap();
    assert_eq!(resp.status(), StatusCode::OK);
    assert_eq!(resp.headers()["content-type"], "image/png");
    assert_eq!(resp.bytes().await.unwrap().as_ref(), bytes.as_slice());
    let (st, frames) = s
        .get(&format!("/api/cameras/{cam_id}/frames"), Some(&viewer))
        .await;
    assert_eq!(st, StatusCode::OK);
    assert_eq!(frames["items"].as_array().unwrap().len(), 1);

    // A goal with every distance-based term kind.
    let mask = {
        let mut painted = vec![false; 64 * 48];
        for j in 20..30 {
            for i in 5..15 {
                painted[j * 64 + i] = true;
            }
        }
        goalsmith::images::encode_mask(64, 48, &painted).unwrap()
    };
    use base64::Engine;
    let body = json!({
        "name": "pots onto the mat",
        "frame_id": frame_id,
        "terms": [
            {"kind": "point", "label": "small pot", "source": [10.0, 12.0], "target": [40.0, 30.0]},
            {"kind": "region", "source": [20.0, 5.0], "polygon": [[30.0, 5.0], [50.0, 5.0], [50.0, 20.0], [30.0, 20.0]], "weight": 2.0},
            {"kind": "mask", "source": [3.0, 3.0], "mask_png_base64": base64::engine::general_purpose::STANDARD.encode(&mask), "tolerance_px": 2.0},
            {"kind": "rigid", "label": "tray", "sources": [[0.0, 0.0], [1.0, 0.0], [0.0, 2.0]], "targets": [[10.0, 10.0], [9.0, 10.0], [10.0, 12.0]], "allow_scale": true}
        ],
        "cost": {"metric": "huber", "huber_delta_px": 3.0, "steps": "all"},
        "note": "first layout"
    });
    let resp = s
        .client
        .post(s.url("/api/goals"))
        .bearer_auth(&editor)
        .json(&body)
        .send()
        .await
        .unwrap();
    assert_eq!(resp.status(), StatusCode::CREATED);
    let etag1 = etag(&resp).expect("ETag on create");
    let location = resp.headers()["location"].to_str().unwrap().to_string();
    let rev1: serde_json::Value = resp.json().await.unwrap();
    let goal_id = rev1["goal_id"].as_str().unwrap().to_string();
    assert_eq!(location, format!("/api/goals/{goal_id}/revisions/1"));
    assert_eq!(rev1["revision"], 1);
    assert_eq!(rev1["name"], "pots onto the mat");
    assert_eq!(rev1["author"], "editor token");
    assert_eq!(rev1["note"], "first layout");
    assert_eq!(rev1["terms"][0]["weight"], 1.0, "defaults are filled in");
    assert_eq!(rev1["terms"][0]["tolerance_px"], 5.0);
    assert_eq!(rev1["cost"]["mode"], "expected");
    assert_eq!(rev1["sha256"].as_str().unwrap().len(), 64);
    // P = 1 + 1 + 1 + 3 source points, in term order; the rigid weight is split evenly.
    let points = rev1["derived"]["points"].as_array().unwrap();
    assert_eq!(points.len(), 6);
    assert_eq!(points[3]["term"], 3);
    assert!((points[3]["weight"].as_f64().unwrap() - 1.0 / 3.0).abs() < 1e-12);
    // Umeyama 1991's worked example, shifted by (10, 10): c = √13/5, R = [[3,2],[-2,3]]/√13.
    let rigid = &rev1["derived"]["rigid"][0];
    assert!((rigid["scale"].as_f64().unwrap() - 13f64.sqrt() / 5.0).abs() < 1e-9);
    assert!(
        (rigid["rotation_deg"].as_f64().unwrap() - (-2f64).atan2(3.0).to_degrees()).abs() < 1e-9
    );
    // The calibrated camera gives 3-D targets on the work plane z = 0.4 m.
    let t3 = rev1["derived"]["targets_3d"]
        .as_array()
        .expect("targets_3d");
    assert!(!t3.is_empty());
    assert!(
        (t3[0]["camera_m"][2].as_f64().unwrap() - 0.4).abs() < 1e-9,
        "{t3:?}"
    );
    // X_base = R·X_cam + t with R = diag(1, −1, −1), t = (0.4, 0, 0.9).
    let (c, b) = (&t3[0]["camera_m"], &t3[0]["base_m"]);
    assert!((b[0].as_f64().unwrap() - (c[0].as_f64().unwrap() + 0.4)).abs() < 1e-12);
    assert!((b[1].as_f64().unwrap() + c[1].as_f64().unwrap()).abs() < 1e-12);
    assert!((b[2].as_f64().unwrap() - (0.9 - c[2].as_f64().unwrap())).abs() < 1e-12);
    assert!(t3[0]["base_m"].is_array());

    // Reads: latest, by number, 304 on a matching If-None-Match, list, revisions.
    let resp = s
        .client
        .get(s.url(&format!("/api/goals/{goal_id}")))
        .bearer_auth(&viewer)
        .send()
        .await
        .unwrap();
    assert_eq!(etag(&resp).as_deref(), Some(etag1.as_str()));
    let resp = s
        .client
        .get(s.url(&format!("/api/goals/{goal_id}/revisions/1")))
        .bearer_auth(&viewer)
        .header("if-none-match", &etag1)
        .send()
        .await
        .unwrap();
    assert_eq!(resp.status(), StatusCode::NOT_MODIFIED);

    // PUT: 428 without If-Match, 412 when stale (nothing written), 200 with the right one.
    let mut body2 = body.clone();
    body2["terms"][0]["target"] = json!([41.0, 31.0]);
    body2["note"] = json!("nudged the pot");
    let (st, err, _) = s.put_goal(&goal_id, &editor, None, &body2).await;
    assert_eq!(st, StatusCode::PRECONDITION_REQUIRED, "{err}");
    let (st, err, _) = s
        .put_goal(&goal_id, &editor, Some("\"stale\""), &body2)
        .await;
    assert_eq!(st, StatusCode::PRECONDITION_FAILED, "{err}");
    assert_eq!(err["error"]["code"], "stale_revision");
    let (st, rev2, etag2) = s.put_goal(&goal_id, &editor, Some(&etag1), &body2).await;
    assert_eq!(st, StatusCode::OK, "{rev2}");
    assert_eq!(rev2["revision"], 2);
    assert_ne!(etag2.as_deref(), Some(etag1.as_str()));
    assert_ne!(rev2["sha256"], rev1["sha256"]);
    let (st, err, _) = s.put_goal(&goal_id, &editor, Some(&etag1), &body2).await;
    assert_eq!(
        st,
        StatusCode::PRECONDITION_FAILED,
        "the old ETag is stale now: {err}"
    );

    let (_, r1) = s
        .get(&format!("/api/goals/{goal_id}/revisions/1"), Some(&viewer))
        .await;
    assert_eq!(r1, rev1, "revision 1 is immutable");
    let (_, latest) = s.get(&format!("/api/goals/{goal_id}"), Some(&viewer)).await;
    assert_eq!(latest, rev2);
    let (st, revs) = s
        .get(&format!("/api/goals/{goal_id}/revisions"), Some(&viewer))
        .await;
    assert_eq!(st, StatusCode::OK);
    let revs = revs["items"].as_array().unwrap().clone();
    assert_eq!(revs.len(), 2);
    assert_eq!(revs[1]["note"], "nudged the pot");
    let (st, goals) = s.get("/api/goals", Some(&viewer)).await;
    assert_eq!(st, StatusCode::OK);
    assert_eq!(goals["items"][0]["id"], goal_id.as_str());
    assert_eq!(goals["items"][0]["revision"], 2);
    let (st, _) = s
        .get(&format!("/api/goals/{goal_id}/revisions/3"), Some(&viewer))
        .await;
    assert_eq!(st, StatusCode::NOT_FOUND);

    // The same specification hashes the same, whoever saves it and when.
    let (st, rev3, _) = s
        .put_goal(&goal_id, &editor, Some(etag2.as_deref().unwrap()), &body)
        .await;
    assert_eq!(st, StatusCode::OK);
    assert_eq!(rev3["sha256"], rev1["sha256"]);

    // Safety override: refused without, recorded with.
    let unsafe_goal = json!({
        "name": "into the no-go corner", "frame_id": frame_id,
        "terms": [{"kind": "point", "source": [10.0, 10.0], "target": [60.0, 44.0]}]
    });
    let (st, err) = s.post("/api/goals", Some(&editor), &unsafe_goal).await;
    assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY);
    assert_eq!(err["error"]["field"], "terms[0].target");
    let mut overridden = unsafe_goal.clone();
    overridden["override_safety"] = json!(true);
    let (st, rev) = s.post("/api/goals", Some(&editor), &overridden).await;
    assert_eq!(st, StatusCode::CREATED, "{rev}");
    assert_eq!(rev["override_safety"], true);
    assert!(
        rev["derived"]["warnings"][0]
            .as_str()
            .unwrap()
            .contains("terms[0].target")
    );

    // Contract documents.
    let (st, doc) = s.get("/api/openapi.json", None).await;
    assert_eq!(st, StatusCode::OK);
    assert_eq!(doc["openapi"], "3.1.0");
    assert!(doc["paths"]["/api/goals/{id}/revisions/{n}"]["get"].is_object());
    let (st, schema) = s.get("/api/schema/goal.json", None).await;
    assert_eq!(st, StatusCode::OK);
    assert_eq!(
        schema["$schema"],
        "https://json-schema.org/draft/2020-12/schema"
    );
}

on_both_databases!(walk_through_every_route, cameras_frames_goals);
