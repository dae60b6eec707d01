//! Two `goalsmith serve` processes on one PostgreSQL behave as one server: a sign-in form served
//! by one is accepted by the other and the session works on both; of 50 editors split across
//! the two who send the same If-Match, exactly one wins each round; 100 queued tracking
//! operations run exactly once each, shared by both; and an operation left by a killed process
//! is taken up and finished by the other.

use crate::pages::{Person, csrf_in, join};
use crate::support::*;
use reqwest::StatusCode;
use serde_json::json;
use std::collections::BTreeMap;

/// The pid that ran an operation, from its worker id `<pid>-<random>/<n>`.
fn worker_pid(worker: &str) -> u32 {
    worker
        .split(['-', '/'])
        .next()
        .and_then(|p| p.parse().ok())
        .unwrap_or_else(|| panic!("worker id {worker:?} starts with a pid"))
}

async fn operation_rows(
    db_url: &str,
    ids: &[String],
) -> Vec<(String, String, i64, Option<String>)> {
    sqlx::any::install_default_drivers();
    let pool = sqlx::AnyPool::connect(db_url).await.expect("pool");
    let mut rows = Vec::new();
    for id in ids {
        let (state, attempts, worker): (String, i64, Option<String>) =
            sqlx::query_as("SELECT state, attempts, worker FROM operations WHERE id = $1")
                .bind(id)
                .fetch_one(&pool)
                .await
                .expect("operation row");
        rows.push((id.clone(), state, attempts, worker));
    }
    pool.close().await;
    rows
}

#[tokio::test(flavor = "multi_thread", worker_threads = 4)]
async fn two_processes_on_one_postgres_act_as_one_server() {
    let Some(db) = fresh_db(Db::Postgres, "scale_out").await else {
        return;
    };
    let workers = [("GOALSMITH_OPERATION_WORKERS", "2")];
    // Each start on a database without accounts prints a new sign-in link (and the older one
    // stops working), so B starts first and the link is A's. A runs the default number of
    // workers (one on two cores), B two.
    let b = Server::start_with_env(&db.url, &db.data_dir, &[], &workers);
    let (a, link) = start_with_link(&db.url, &db.data_dir, &[]);

    // Sessions: joined on A; a sign-in form from A posted to B; the session works on both.
    let (_, _) = join(&a.base, &link, "rosa", "Rosa", "seedlings need light").await;
    let mut p = Person::new(&a.base);
    let form = p.get("/signin").await;
    assert_eq!(form.status, StatusCode::OK);
    let csrf = csrf_in(&form.body);
    p.base = b.base.clone();
    let done = p
        .post_form(
            "/signin",
            &[
                ("csrf", &csrf),
                ("login", "rosa"),
                ("password", "seedlings need light"),
                ("next", "/"),
            ],
        )
        .await;
    assert_eq!(
        done.status,
        StatusCode::SEE_OTHER,
        "B accepts A's form: {}",
        done.body
    );
    for base in [&a.base, &b.base] {
        p.base = base.clone();
        let home = p.get("/").await;
        assert_eq!(
            home.status,
            StatusCode::OK,
            "signed in on {base}: {}",
            home.body
        );
    }

    // Tokens work on both; 50 editors, 25 on each, race on one ETag: one wins per round.
    let (editor, camera, frame) = camera_and_frame(&a, "potting bench", json!({})).await;
    let (st, goal) = b
        .post("/api/goals", Some(&editor), &point_goal(&frame, "tray"))
        .await;
    assert_eq!(st, StatusCode::CREATED, "{goal}");
    let goal = goal["goal_id"].as_str().expect("goal id").to_string();
    for round in 0..5 {
        let latest = a
            .client
            .get(a.url(&format!("/api/goals/{goal}")))
            .bearer_auth(&editor)
            .send()
            .await
            .expect("GET");
        let tag = etag(&latest).expect("ETag");
        let mut racers = tokio::task::JoinSet::new();
        for e in 0..50 {
            let s = if e % 2 == 0 { &a } else { &b };
            let (client, url, token, tag) = (
                s.client.clone(),
                s.url(&format!("/api/goals/{goal}")),
                editor.clone(),
                tag.clone(),
            );
            let mut body = point_goal(&frame, "tray");
            body["terms"][0]["target"] = json!([5.0 + e as f64 / 2.0, 30.0]);
            racers.spawn(async move {
                client
                    .put(url)
                    .bearer_auth(token)
                    .header("If-Match", tag)
                    .json(&body)
                    .send()
                    .await
                    .expect("PUT")
                    .status()
            });
        }
        let mut seen: BTreeMap<u16, usize> = BTreeMap::new();
        while let Some(st) = racers.join_next().await {
            *seen.entry(st.expect("racer").as_u16()).or_default() += 1;
        }
        assert_eq!(
            seen,
            BTreeMap::from([(200, 1), (412, 49)]),
            "round {round}: one save, 49 refused"
        );
        let (_, revs) = b
            .get(&format!("/api/goals/{goal}/revisions"), Some(&editor))
            .await;
        assert_eq!(
            revs["items"].as_array().map(Vec::len),
            Some(round + 2),
            "one revision per round"
        );
    }

    // 100 tracking operations, queued through both, each run once.
    let (st, demo) = a
        .post_bytes(
            &format!("/api/cameras/{camera}/demos"),
            Some(&editor),
            "application/zip",
            texture_demo_zip(64, 48, 40, [0.05, 0.02]),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{demo}");
    let demo = demo["id"].as_str().expect("demo id").to_string();
    let mut ops = Vec::new();
    for k in 0..100 {
        let s = if k % 2 == 0 { &a } else { &b };
        let (st, v) = s
            .post(
                &format!("/api/demos/{demo}/tracks"),
                Some(&editor),
                &json!({"label": format!("seedling {k}"), "frame": 0, "x": 20.0 + (k % 20) as f64, "y": 24.0}),
            )
            .await;
        assert_eq!(st, StatusCode::ACCEPTED, "{v}");
        ops.push(
            v["operation_id"]
                .as_str()
                .expect("operation id")
                .to_string(),
        );
    }
    for (k, op) in ops.iter().enumerate() {
        let s = if k % 2 == 0 { &b } else { &a };
        let done = operation_done(s, &editor, op).await;
        assert_eq!(done["state"], "succeeded", "{done}");
        assert_eq!(done["result"]["frames"], 39, "{done}");
    }
    let mut by_process: BTreeMap<u32, usize> = BTreeMap::new();
    for (id, state, attempts, worker) in operation_rows(&db.url, &ops).await {
        assert_eq!(
            (state.as_str(), attempts),
            ("succeeded", 1),
            "{id} ran once"
        );
        let pid = worker_pid(worker.as_deref().expect("a worker ran it"));
        *by_process.entry(pid).or_default() += 1;
    }
    println!("tracking operations per process: {by_process:?}");
    let pids = BTreeMap::from([(a.child.id(), ()), (b.child.id(), ())]);
    assert!(
        by_process.keys().all(|p| pids.contains_key(p)),
        "only A and B ran them: {by_process:?}"
    );
    assert_eq!(
        by_process.len(),
        2,
        "both processes took a share: {by_process:?}"
    );

    // A long operation; whichever process claimed it is killed in the middle, and the other
    // takes it up once the heartbeats have stopped, and finishes it.
    let (st, wide) = a
        .post(
            "/api/cameras",
            Some(&editor),
            &json!({"name": "bench side", "width": 160, "height": 120}),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{wide}");
    let wide = wide["id"].as_str().expect("camera id").to_string();
    let (st, long_demo) = a
        .post_bytes(
            &format!("/api/cameras/{wide}/demos"),
            Some(&editor),
            "application/zip",
            texture_demo_zip(160, 120, 600, [0.05, 0.02]),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{long_demo}");
    let long_demo = long_demo["id"].as_str().expect("demo id").to_string();
    let mut servers = [Some(a), Some(b)];
    let mut attempt = 0;
    let (op, killed_pid) = loop {
        attempt += 1;
        assert!(attempt <= 5, "the tracking always ended before the kill");
        let s = servers.iter().flatten().next().expect("a server");
        let (st, v) = s
            .post(
                &format!("/api/demos/{long_demo}/tracks"),
                Some(&editor),
                &json!({"label": format!("tray corner {attempt}"), "frame": 0, "x": 70.0, "y": 55.0}),
            )
            .await;
        assert_eq!(st, StatusCode::ACCEPTED, "{v}");
        let op = v["operation_id"]
            .as_str()
            .expect("operation id")
            .to_string();
        let until = std::time::Instant::now() + std::time::Duration::from_secs(60);
        let row = loop {
            let row = operation_rows(&db.url, std::slice::from_ref(&op))
                .await
                .remove(0);
            if row.1 != "queued" {
                break row;
            }
            assert!(std::time::Instant::now() < until, "never claimed");
            tokio::time::sleep(std::time::Duration::from_millis(5)).await;
        };
        let pid = worker_pid(row.3.as_deref().expect("worker"));
        let holder = servers
            .iter()
            .position(|s| s.as_ref().is_some_and(|s| s.child.id() == pid))
            .expect("A or B claimed it");
        let mut gone = servers[holder].take().expect("holder");
        gone.kill();
        let state = operation_rows(&db.url, std::slice::from_ref(&op))
            .await
            .remove(0)
            .1;
        if state == "running" {
            break (op, pid);
        }
        // It ended just before the kill: bring the process back and try again.
        servers[holder] = Some(Server::start_with_env(&db.url, &db.data_dir, &[], &workers));
    };
    let survivor = servers.iter().flatten().next().expect("survivor");
    let done = operation_done(survivor, &editor, &op).await;
    assert_eq!(done["state"], "succeeded", "{done}");
    assert_eq!(done["result"]["frames"], 599, "{done}");
    let (_, _, attempts, worker) = operation_rows(&db.url, std::slice::from_ref(&op))
        .await
        .remove(0);
    assert_eq!(attempts, 2, "claimed once by each process");
    let finisher = worker_pid(worker.as_deref().expect("worker"));
    assert_ne!(finisher, killed_pid);
    assert_eq!(finisher, survivor.child.id(), "the survivor finished it");
}
