//! Optimistic concurrency: of 20 PUTs with the same If-Match exactly one wins.

use crate::on_both_databases;
use crate::support::*;
use reqwest::StatusCode;
use serde_json::json;
use std::sync::Arc;

async fn twenty_puts(s: Server) {
    let (editor, _cam, frame) = camera_and_frame(&s, "bench", json!({})).await;
    let resp = s
        .client
        .post(s.url("/api/goals"))
        .bearer_auth(&editor)
        .json(&point_goal(&frame, "race"))
        .send()
        .await
        .unwrap();
    assert_eq!(resp.status(), StatusCode::CREATED);
    let tag = etag(&resp).unwrap();
    let rev: serde_json::Value = resp.json().await.unwrap();
    let goal = rev["goal_id"].as_str().unwrap().to_string();

    let s = Arc::new(s);
    let mut tasks = Vec::new();
    for k in 0..20 {
        let (s, goal, tag, editor, frame) = (
            s.clone(),
            goal.clone(),
            tag.clone(),
            editor.clone(),
            frame.clone(),
        );
        tasks.push(tokio::spawn(async move {
            let mut body = point_goal(&frame, "race");
            body["terms"][0]["target"] = json!([20.0 + k as f64, 30.0]);
            s.put_goal(&goal, &editor, Some(&tag), &body).await.0
        }));
    }
    let mut statuses = Vec::new();
    for t in tasks {
        statuses.push(t.await.unwrap());
    }
    let ok = statuses.iter().filter(|s| **s == StatusCode::OK).count();
    let stale = statuses
        .iter()
        .filter(|s| **s == StatusCode::PRECONDITION_FAILED)
        .count();
    assert_eq!((ok, stale), (1, 19), "{statuses:?}");
    let (_, revs) = s
        .get(&format!("/api/goals/{goal}/revisions"), Some(&editor))
        .await;
    assert_eq!(
        revs["items"].as_array().unwrap().len(),
        2,
        "exactly one new revision"
    );
}

on_both_databases!(concurrent_puts_with_one_if_match, twenty_puts);
