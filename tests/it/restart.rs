//! Durability: acknowledged revisions survive SIGKILL, byte for byte; operations of a killed
//! process are taken up again or failed, never left running.

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

/// An operation that was running in a process that died is taken up again at the next start
/// (its heartbeats stopped), and one that has used up its attempts is failed with the reason:
/// none stays `running` for ever. The dead worker is set up in the database directly.
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn operations_of_a_dead_process_are_resumed_or_failed() {
    let db = fresh_db(Db::Sqlite, "operations_restart").await.unwrap();
    // No workers: the operations stay queued while the test arranges them.
    let mut s = Server::start_with_env(
        &db.url,
        &db.data_dir,
        &[],
        &[("GOALSMITH_OPERATION_WORKERS", "0")],
    );
    let editor = s.token("durable", "editor");
    let (st, cam) = s
        .post(
            "/api/cameras",
            Some(&editor),
            &json!({"name": "side", "width": 64, "height": 48}),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED);
    let cam = cam["id"].as_str().unwrap().to_string();
    let zip = {
        use std::io::Write;
        let mut z = zip::ZipWriter::new(std::io::Cursor::new(Vec::new()));
        for k in 0..3u8 {
            z.start_file(format!("{k}.png"), zip::write::SimpleFileOptions::default())
                .unwrap();
            z.write_all(&png(64, 48, k * 30)).unwrap();
        }
        z.finish().unwrap().into_inner()
    };
    let (st, demo) = s
        .post_bytes(
            &format!("/api/cameras/{cam}/demos"),
            Some(&editor),
            "application/zip",
            zip,
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{demo}");
    let demo = demo["id"].as_str().unwrap().to_string();
    let mut ops = Vec::new();
    for label in ["resumed", "given up"] {
        let (st, v) = s
            .post(
                &format!("/api/demos/{demo}/tracks"),
                Some(&editor),
                &json!({"label": label, "frame": 0, "x": 20.0, "y": 20.0}),
            )
            .await;
        assert_eq!(st, StatusCode::ACCEPTED, "{v}");
        ops.push(v["operation_id"].as_str().unwrap().to_string());
    }
    s.kill();
    // Both were running in the dead process a minute ago; the second had used its attempts.
    sqlx::any::install_default_drivers();
    let pool = sqlx::AnyPool::connect(&db.url).await.expect("pool");
    let old = goalsmith::store::now_ms() - 60_000;
    for (op, attempts) in [(&ops[0], 1i64), (&ops[1], 3)] {
        sqlx::query("UPDATE operations SET state = 'running', worker = 'dead', heartbeat_at = $1, attempts = $2 WHERE id = $3")
            .bind(old)
            .bind(attempts)
            .bind(op)
            .execute(&pool)
            .await
            .expect("arrange");
    }
    pool.close().await;
    let s = Server::start(&db.url, &db.data_dir, &[]);
    let mut ended = Vec::new();
    for op in &ops {
        ended.push(operation_done(&s, &editor, op).await);
    }
    assert_eq!(ended[0]["state"], "succeeded", "{}", ended[0]);
    assert_eq!(ended[1]["state"], "failed", "{}", ended[1]);
    assert!(
        ended[1]["error"].as_str().unwrap_or("").contains("stopped"),
        "{}",
        ended[1]
    );
}

/// A server killed (SIGKILL) while it tracks: after the restart the operation is taken up again
/// and ends, with every frame tracked; it is never left `running`. On SQLite and PostgreSQL.
async fn killed_while_tracking(kind: Db) {
    let Some(db) = fresh_db(kind, "killed_while_tracking").await else {
        return;
    };
    const FRAMES: usize = 600;
    let workers = [("GOALSMITH_OPERATION_WORKERS", "1")];
    let mut s = Server::start_with_env(&db.url, &db.data_dir, &[], &workers);
    let editor = s.token("durable", "editor");
    let (st, cam) = s
        .post(
            "/api/cameras",
            Some(&editor),
            &json!({"name": "side", "width": 160, "height": 120}),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED);
    let cam = cam["id"].as_str().unwrap().to_string();
    let (st, demo) = s
        .post_bytes(
            &format!("/api/cameras/{cam}/demos"),
            Some(&editor),
            "application/zip",
            texture_demo_zip(160, 120, FRAMES, [0.05, 0.02]),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{demo}");
    let demo = demo["id"].as_str().unwrap().to_string();
    sqlx::any::install_default_drivers();
    // Killed as soon as the operation is running. Should it have ended in the moment between
    // the last look and the kill (the row says so), the test starts another track and tries
    // again: what is checked is a kill in the middle.
    let mut attempt = 0;
    let (op, track) = loop {
        attempt += 1;
        assert!(attempt <= 5, "the tracking always ended before the kill");
        let (st, started) = s
            .post(
                &format!("/api/demos/{demo}/tracks"),
                Some(&editor),
                &json!({"label": format!("pot rim {attempt}"), "frame": 0, "x": 70.0, "y": 55.0}),
            )
            .await;
        assert_eq!(st, StatusCode::ACCEPTED, "{started}");
        let op = started["operation_id"].as_str().unwrap().to_string();
        let track = started["track_id"].as_str().unwrap().to_string();
        let until = std::time::Instant::now() + std::time::Duration::from_secs(60);
        loop {
            let (_, v) = s.get(&format!("/api/operations/{op}"), Some(&editor)).await;
            if v["state"] != "queued" {
                break;
            }
            assert!(std::time::Instant::now() < until, "never claimed: {v}");
            tokio::time::sleep(std::time::Duration::from_millis(2)).await;
        }
        s.kill();
        let pool = sqlx::AnyPool::connect(&db.url).await.expect("pool");
        let state: String = sqlx::query_scalar("SELECT state FROM operations WHERE id = $1")
            .bind(&op)
            .fetch_one(&pool)
            .await
            .expect("state");
        pool.close().await;
        s = Server::start_with_env(&db.url, &db.data_dir, &[], &workers);
        if state == "running" {
            break (op, track);
        }
    };
    let done = operation_done(&s, &editor, &op).await;
    assert_eq!(done["state"], "succeeded", "{done}");
    assert_eq!(done["result"]["frames"], FRAMES as i64 - 1);
    let (_, t) = s
        .get(&format!("/api/demos/{demo}/tracks/{track}"), Some(&editor))
        .await;
    assert_eq!(t["samples"].as_array().map(Vec::len), Some(FRAMES), "{t}");
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn killed_while_tracking_sqlite() {
    killed_while_tracking(Db::Sqlite).await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn killed_while_tracking_postgres() {
    killed_while_tracking(Db::Postgres).await;
}
