//! Goal sets: pinned revisions in order, If-Match saves, and one reproducible bundle.

use crate::on_both_databases;
use crate::support::*;
use reqwest::StatusCode;
use serde_json::json;

async fn sets(s: Server) {
    let (editor, _cam, frame) = camera_and_frame(&s, "suites", json!({})).await;
    let viewer = s.token("suites", "viewer");
    let mut goals = Vec::new();
    for name in ["pot one", "pot two"] {
        let (st, rev) = s
            .post("/api/goals", Some(&editor), &point_goal(&frame, name))
            .await;
        assert_eq!(st, StatusCode::CREATED);
        goals.push(rev["goal_id"].as_str().unwrap().to_string());
    }
    let body = json!({"name": "morning tidy-up", "items": [
        {"goal_id": goals[1], "revision": 1}, {"goal_id": goals[0], "revision": 1}]});
    let resp = s
        .client
        .post(s.url("/api/goal-sets"))
        .bearer_auth(&editor)
        .json(&body)
        .send()
        .await
        .unwrap();
    assert_eq!(resp.status(), StatusCode::CREATED);
    let tag = etag(&resp).unwrap();
    let set: serde_json::Value = resp.json().await.unwrap();
    let id = set["id"].as_str().unwrap().to_string();
    assert_eq!(set["version"], 1);
    assert_eq!(
        set["items"][0]["goal_id"],
        goals[1].as_str(),
        "order is kept"
    );
    assert_eq!(set["items"][0]["name"], "pot two");

    // Bad items are 422s naming the item; viewers cannot save.
    let (st, err) = s
        .post(
            "/api/goal-sets",
            Some(&editor),
            &json!({"name": "x", "items": [{"goal_id": goals[0], "revision": 9}]}),
        )
        .await;
    assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY);
    assert_eq!(err["error"]["field"], "items[0].revision");
    let (st, err) = s
        .post(
            "/api/goal-sets",
            Some(&editor),
            &json!({"name": "x", "items": []}),
        )
        .await;
    assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY, "{err}");
    let (st, _) = s.post("/api/goal-sets", Some(&viewer), &body).await;
    assert_eq!(st, StatusCode::FORBIDDEN);

    // Re-pin with If-Match; a stale tag is refused.
    let put = |tag: Option<String>, body: serde_json::Value| {
        let req = s
            .client
            .put(s.url(&format!("/api/goal-sets/{id}")))
            .bearer_auth(&editor)
            .json(&body);
        let req = match tag {
            Some(t) => req.header("if-match", t),
            None => req,
        };
        req.send()
    };
    let swapped =
        json!({"name": "morning tidy-up", "items": [{"goal_id": goals[0], "revision": 1}]});
    assert_eq!(
        put(None, swapped.clone()).await.unwrap().status(),
        StatusCode::PRECONDITION_REQUIRED
    );
    let resp = put(Some(tag.clone()), swapped.clone()).await.unwrap();
    assert_eq!(resp.status(), StatusCode::OK);
    assert_eq!(
        put(Some(tag), swapped).await.unwrap().status(),
        StatusCode::PRECONDITION_FAILED
    );
    let (st, got) = s.get(&format!("/api/goal-sets/{id}"), Some(&viewer)).await;
    assert_eq!(st, StatusCode::OK);
    assert_eq!(got["version"], 2);
    assert_eq!(got["items"].as_array().unwrap().len(), 1);
    let (_, list) = s.get("/api/goal-sets", Some(&viewer)).await;
    assert_eq!(list["items"].as_array().unwrap().len(), 1);

    // The bundle: same bytes twice; one folder per item with its own manifest.
    let get = |p: String| s.client.get(s.url(&p)).bearer_auth(&viewer).send();
    let a = get(format!("/api/goal-sets/{id}/bundle.zip"))
        .await
        .unwrap()
        .bytes()
        .await
        .unwrap();
    let b = get(format!("/api/goal-sets/{id}/bundle.zip"))
        .await
        .unwrap()
        .bytes()
        .await
        .unwrap();
    assert_eq!(a, b);
    let zip = zip::ZipArchive::new(std::io::Cursor::new(a.to_vec())).unwrap();
    let names: Vec<&str> = zip.file_names().collect();
    assert!(names.contains(&"manifest.json"), "{names:?}");
    assert!(
        names.contains(&format!("01-{}/goal.json", goals[0]).as_str()),
        "{names:?}"
    );
    assert!(
        names.contains(&format!("01-{}/cost-maps.npy", goals[0]).as_str()),
        "{names:?}"
    );
}

on_both_databases!(goal_sets_pin_and_bundle, sets);
