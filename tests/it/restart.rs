//! Durability: acknowledged revisions survive SIGKILL, byte for byte.

use crate::support::*;
use reqwest::StatusCode;
use serde_json::json;

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn acknowledged_revisions_survive_sigkill() {
    let db = fresh_db(Db::Sqlite, "restart").await.unwrap();
    let mut s = Server::start(&db.url, &db.data_dir, &[]);
    let (editor, _cam, frame) = camera_and_frame(&s, "durable", json!({})).await;
    let mut acknowledged = Vec::new();
    for g in 0..3 {
        let resp = s
            .client
            .post(s.url("/api/goals"))
            .bearer_auth(&editor)
            .json(&point_goal(&frame, &format!("goal {g}")))
            .send()
            .await
            .unwrap();
        assert_eq!(resp.status(), StatusCode::CREATED);
        let mut tag = etag(&resp).unwrap();
        let rev: serde_json::Value = resp.json().await.unwrap();
        let id = rev["goal_id"].as_str().unwrap().to_string();
        for k in 0..4 {
            let mut body = point_goal(&frame, &format!("goal {g}"));
            body["terms"][0]["target"] = json!([20.0 + k as f64, 25.0]);
            let (st, _, t) = s.put_goal(&id, &editor, Some(&tag), &body).await;
            assert_eq!(st, StatusCode::OK);
            tag = t.unwrap();
        }
        for n in 1..=5 {
            let bytes = s
                .client
                .get(s.url(&format!("/api/goals/{id}/revisions/{n}")))
                .bearer_auth(&editor)
                .send()
                .await
                .unwrap()
                .bytes()
                .await
                .unwrap();
            acknowledged.push((id.clone(), n, bytes));
        }
    }
    // No graceful anything: the process dies mid-flight.
    s.kill();
    let s = Server::start(&db.url, &db.data_dir, &[]);
    for (id, n, bytes) in &acknowledged {
        let after = s
            .client
            .get(s.url(&format!("/api/goals/{id}/revisions/{n}")))
            .bearer_auth(&editor)
            .send()
            .await
            .unwrap();
        assert_eq!(after.status(), StatusCode::OK);
        assert_eq!(
            &after.bytes().await.unwrap(),
            bytes,
            "revision {n} of {id} is byte-identical"
        );
    }
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn sigterm_exits_cleanly() {
    let db = fresh_db(Db::Sqlite, "sigterm").await.unwrap();
    let mut s = Server::start(&db.url, &db.data_dir, &[]);
    let (st, _) = s.get("/healthz", None).await;
    assert_eq!(st, StatusCode::OK);
    let pid = s.child.id();
    let status = std::process::Command::new("kill")
        .args(["-TERM", &pid.to_string()])
        .status()
        .unwrap();
    assert!(status.success());
    let code = s.child.wait().unwrap();
    assert!(code.success(), "exit status after SIGTERM: {code:?}");
}
