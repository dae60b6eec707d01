//! Defects found in review, each with its test: SQLite URL forms, plain logs, the caution on
//! every export, bundle ETags, the last owner under concurrent demotions, one name rule.

use crate::on_both_databases;
use crate::support::*;
use reqwest::StatusCode;
use serde_json::{Value, json};
use std::process::{Command, Stdio};

/// `token create` then `serve` with a database URL as a person would type it, run from `cwd`;
/// the file must be created where the URL says.
fn serve_and_token_with(url: &str, cwd: &std::path::Path, expect_file: &std::path::Path) {
    let out = Command::new(bin())
        .current_dir(cwd)
        .args([
            "token",
            "create",
            "--team",
            "potting bench",
            "--role",
            "editor",
        ])
        .args(["--database", url])
        .env("GOALSMITH_LOG", "info")
        .output()
        .expect("run token create");
    assert!(
        out.status.success(),
        "token create with {url}: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    let token = String::from_utf8(out.stdout).expect("utf8");
    assert!(
        expect_file.is_file(),
        "{url} created {}",
        expect_file.display()
    );
    // Logs to a stderr that is not a terminal are plain text.
    assert!(
        !out.stderr.contains(&0x1b),
        "colour escapes in a redirected log: {}",
        String::from_utf8_lossy(&out.stderr)
    );

    let mut child = Command::new(bin())
        .current_dir(cwd)
        .args(["serve", "--bind", "127.0.0.1:0", "--database", url])
        .env("GOALSMITH_LOG", "info")
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("spawn serve");
    let stdout = child.stdout.take().expect("stdout");
    let mut line = String::new();
    std::io::BufRead::read_line(&mut std::io::BufReader::new(stdout), &mut line).expect("line");
    let base = line
        .trim()
        .strip_prefix("listening on ")
        .map(str::to_string);
    let status = base
        .as_ref()
        .map(|b| blocking_get_status(&format!("{b}/api/cameras"), token.trim()));
    let _ = child.kill();
    let out = child.wait_with_output().expect("wait");
    assert!(base.is_some(), "serve with {url} did not start: {line:?}");
    assert_eq!(status, Some(200), "the token from token create works");
    assert!(
        !out.stderr.contains(&0x1b),
        "colour escapes in the server's redirected log"
    );
}

/// A GET from a thread of its own with its own runtime (the callers are plain `#[test]`s).
fn blocking_get_status(url: &str, token: &str) -> u16 {
    let (url, token) = (url.to_string(), token.to_string());
    std::thread::spawn(move || {
        let rt = tokio::runtime::Builder::new_current_thread()
            .enable_all()
            .build()
            .expect("runtime");
        rt.block_on(async {
            reqwest::Client::new()
                .get(&url)
                .bearer_auth(&token)
                .send()
                .await
                .map(|r| r.status().as_u16())
                .unwrap_or(0)
        })
    })
    .join()
    .unwrap_or(0)
}

#[test]
fn every_documented_sqlite_url_form_creates_the_database() {
    let dir = tempfile::tempdir().expect("temp dir");
    let root = dir.path();
    // An absolute path, into a folder that does not exist yet.
    let abs = root.join("abs dir/goals.db");
    serve_and_token_with(&format!("sqlite://{}", abs.display()), root, &abs);
    // The bare `sqlite:` form, absolute.
    let bare = root.join("bare.db");
    serve_and_token_with(&format!("sqlite:{}", bare.display()), root, &bare);
    // Relative paths, resolved against the working directory.
    serve_and_token_with("sqlite://rel/goals.db", root, &root.join("rel/goals.db"));
    serve_and_token_with("sqlite://./dot.db", root, &root.join("dot.db"));
    serve_and_token_with("sqlite:plain.db", root, &root.join("plain.db"));
    // Through the environment variable, as the README documents.
    let out = Command::new(bin())
        .current_dir(root)
        .args([
            "token",
            "create",
            "--team",
            "potting bench",
            "--role",
            "viewer",
        ])
        .env("GOALSMITH_DATABASE_URL", "sqlite://env/goals.db")
        .output()
        .expect("token create");
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert!(root.join("env/goals.db").is_file());
}

#[test]
fn token_create_refuses_blank_and_overlong_team_names() {
    let db = tempfile::tempdir().expect("temp dir");
    let url = format!("sqlite://{}", db.path().join("t.db").display());
    for team in ["  ", "", &"x".repeat(101), "bench\u{202E}"] {
        let out = Command::new(bin())
            .args([
                "token",
                "create",
                "--team",
                team,
                "--role",
                "viewer",
                "--database",
                &url,
            ])
            .env("GOALSMITH_LOG", "warn")
            .output()
            .expect("token create");
        assert!(!out.status.success(), "team {team:?} accepted");
        assert!(out.stdout.is_empty(), "no token printed for {team:?}");
        let err = String::from_utf8_lossy(&out.stderr);
        assert!(err.contains("team"), "the message names the team: {err}");
    }
    // At the limit it works, and the label rule is the page's rule too.
    let ok = Command::new(bin())
        .args([
            "token",
            "create",
            "--team",
            &"x".repeat(100),
            "--role",
            "viewer",
        ])
        .args(["--database", &url, "--label", &"l".repeat(100)])
        .output()
        .expect("token create");
    assert!(
        ok.status.success(),
        "{}",
        String::from_utf8_lossy(&ok.stderr)
    );
    let long_label = Command::new(bin())
        .args(["token", "create", "--team", "bench", "--role", "viewer"])
        .args(["--database", &url, "--label", &"l".repeat(101)])
        .output()
        .expect("token create");
    assert!(!long_label.status.success());
}

const CAUTION_HEADER: &str = "x-goalsmith-caution";

async fn caution_travels_with_every_export(s: Server) {
    let (editor, _cam, frame) = camera_and_frame(&s, "greenhouse", json!({})).await;
    let caution = goalsmith::SAFETY_CAUTION;
    let has = |resp: &reqwest::Response, what: &str| {
        let v = resp
            .headers()
            .get(CAUTION_HEADER)
            .and_then(|v| v.to_str().ok())
            .unwrap_or_default()
            .to_string();
        assert_eq!(v, caution, "{what} carries the caution header");
    };
    let resp = s
        .client
        .post(s.url("/api/goals"))
        .bearer_auth(&editor)
        .json(&point_goal(&frame, "seed tray to the mat"))
        .send()
        .await
        .unwrap();
    assert_eq!(resp.status(), StatusCode::CREATED);
    has(&resp, "POST /api/goals");
    let rev: Value = resp.json().await.unwrap();
    let goal = rev["goal_id"].as_str().unwrap().to_string();
    let base = format!("/api/goals/{goal}/revisions/1");
    for path in [
        base.clone(),
        format!("/api/goals/{goal}"),
        format!("{base}/cost-maps.npy"),
        format!("{base}/bundle.zip"),
    ] {
        let resp = s
            .client
            .get(s.url(&path))
            .bearer_auth(&editor)
            .send()
            .await
            .unwrap();
        assert_eq!(resp.status(), StatusCode::OK, "{path}");
        has(&resp, &path);
    }
    let resp = s
        .client
        .post(s.url(&format!("{base}/cost")))
        .bearer_auth(&editor)
        .json(&json!({"points": [[[[40.0, 30.0]]]]}))
        .send()
        .await
        .unwrap();
    assert_eq!(resp.status(), StatusCode::OK);
    has(&resp, "POST …/cost");

    // The overlay says it inside the picture, under a keyword the PNG specification registers.
    let resp = s
        .client
        .get(s.url(&format!("{base}/overlay.png")))
        .bearer_auth(&editor)
        .send()
        .await
        .unwrap();
    assert_eq!(resp.status(), StatusCode::OK);
    has(&resp, "overlay.png");
    let png = resp.bytes().await.unwrap();
    let text = png_text(&png);
    assert!(
        text.iter().any(|(k, t)| k == "Warning" && t == caution),
        "overlay tEXt chunks: {text:?}"
    );

    let (st, set) = s
        .post(
            "/api/goal-sets",
            Some(&editor),
            &json!({"name": "bench morning", "items": [{"goal_id": goal, "revision": 1}]}),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{set}");
    let set_id = set["id"].as_str().unwrap();
    for path in [
        format!("/api/goal-sets/{set_id}"),
        format!("/api/goal-sets/{set_id}/bundle.zip"),
    ] {
        let resp = s
            .client
            .get(s.url(&path))
            .bearer_auth(&editor)
            .send()
            .await
            .unwrap();
        assert_eq!(resp.status(), StatusCode::OK, "{path}");
        has(&resp, &path);
    }

    // The offline scorer prints it on stderr, the result alone on stdout.
    let bundle = s
        .client
        .get(s.url(&format!("{base}/bundle.zip")))
        .bearer_auth(&editor)
        .send()
        .await
        .unwrap()
        .bytes()
        .await
        .unwrap();
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(dir.path().join("b.zip"), &bundle).unwrap();
    std::fs::write(dir.path().join("p.json"), r#"{"points": [[[[40, 30]]]]}"#).unwrap();
    let out = Command::new(bin())
        .arg("cost")
        .arg("--bundle")
        .arg(dir.path().join("b.zip"))
        .arg("--points")
        .arg(dir.path().join("p.json"))
        .output()
        .unwrap();
    assert!(out.status.success());
    assert!(String::from_utf8_lossy(&out.stderr).contains(caution));
    let result: Value = serde_json::from_slice(&out.stdout).expect("stdout is the JSON alone");
    assert_eq!(result["best"], 0);
}

on_both_databases!(caution_on_every_export, caution_travels_with_every_export);

async fn bundle_etag_answers_without_building(s: Server) {
    let (editor, _cam, frame) = camera_and_frame(&s, "greenhouse", json!({})).await;
    let (st, rev) = s
        .post("/api/goals", Some(&editor), &point_goal(&frame, "pot"))
        .await;
    assert_eq!(st, StatusCode::CREATED);
    let goal = rev["goal_id"].as_str().unwrap().to_string();
    let path = format!("/api/goals/{goal}/revisions/1/bundle.zip");
    let first = s
        .client
        .get(s.url(&path))
        .bearer_auth(&editor)
        .send()
        .await
        .unwrap();
    assert_eq!(first.status(), StatusCode::OK);
    let tag = first.headers()["etag"].to_str().unwrap().to_string();
    let bytes = first.bytes().await.unwrap();
    // The tag is the one derived from the revision bytes and the format, not from the ZIP.
    let (_, rev_bytes) = {
        let r = s
            .client
            .get(s.url(&format!("/api/goals/{goal}/revisions/1")))
            .bearer_auth(&editor)
            .send()
            .await
            .unwrap();
        (r.status(), r.text().await.unwrap())
    };
    use sha2::Digest;
    let mut h = sha2::Sha256::new();
    h.update(b"goal bundle format 2\n");
    h.update(rev_bytes.as_bytes());
    assert_eq!(tag, format!("\"{}\"", hex::encode(h.finalize())));
    let again = s
        .client
        .get(s.url(&path))
        .bearer_auth(&editor)
        .header("if-none-match", &tag)
        .send()
        .await
        .unwrap();
    assert_eq!(again.status(), StatusCode::NOT_MODIFIED);
    assert_eq!(again.headers()["etag"].to_str().unwrap(), tag);
    assert!(again.bytes().await.unwrap().is_empty());
    // A second GET without the header gives the same bytes under the same tag.
    let third = s
        .client
        .get(s.url(&path))
        .bearer_auth(&editor)
        .send()
        .await
        .unwrap();
    assert_eq!(third.headers()["etag"].to_str().unwrap(), tag);
    assert_eq!(third.bytes().await.unwrap(), bytes);

    // Revision numbers are canonical decimal.
    for n in ["01", "+1", "1.0", " 1"] {
        let (st, _) = s
            .get(&format!("/api/goals/{goal}/revisions/{n}"), Some(&editor))
            .await;
        assert_eq!(st, StatusCode::NOT_FOUND, "revision {n:?}");
    }
}

on_both_databases!(
    bundle_etag_from_revision,
    bundle_etag_answers_without_building
);

/// Two owners demote each other at the same moment, many times: a team never ends with no
/// owner. Before the team lock, READ COMMITTED on PostgreSQL let both demotions through.
async fn last_owner_survives(kind: Db) {
    let Some(db) = fresh_db(kind, "last_owner_race").await else {
        return;
    };
    let store = goalsmith::store::Store::connect(&db.url)
        .await
        .expect("connect");
    // Raw SQL sets up the people; the store's own pool stays private to the store.
    let pool = sqlx::AnyPool::connect(&db.url).await.expect("pool");
    let team = goalsmith::store::teams::get_or_create_team(&store, "potting shed")
        .await
        .expect("team");
    for round in 0..30 {
        let a = format!("a{round}");
        let b = format!("b{round}");
        for p in [&a, &b] {
            sqlx::query(
                "INSERT INTO people (id, login, display_name, password_hash, created_at) \
                 VALUES ($1, $1, $1, 'x', 0)",
            )
            .bind(p)
            .execute(&pool)
            .await
            .expect("person");
            sqlx::query(
                "INSERT INTO memberships (team_id, person_id, role, created_at) \
                 VALUES ($1, $2, 'owner', 0)",
            )
            .bind(&team.id)
            .bind(p)
            .execute(&pool)
            .await
            .expect("membership");
        }
        // Leave exactly these two owners.
        sqlx::query("UPDATE memberships SET role = 'viewer' WHERE team_id = $1 AND person_id NOT IN ($2, $3)")
            .bind(&team.id)
            .bind(&a)
            .bind(&b)
            .execute(&pool)
            .await
            .expect("reset");
        let (p1, p2, t1, t2) = (
            store.clone(),
            store.clone(),
            team.id.clone(),
            team.id.clone(),
        );
        let (a2, b2) = (a.clone(), b.clone());
        let demote_a = tokio::spawn(async move {
            goalsmith::store::accounts::set_role(&p1, &t1, &a2, goalsmith::store::Role::Viewer)
                .await
        });
        let remove_b = tokio::spawn(async move {
            if round % 2 == 0 {
                goalsmith::store::accounts::set_role(&p2, &t2, &b2, goalsmith::store::Role::Editor)
                    .await
            } else {
                goalsmith::store::accounts::remove_member(&p2, &t2, &b2).await
            }
        });
        let ra = demote_a.await.expect("join").expect("set_role");
        let rb = remove_b.await.expect("join").expect("second change");
        assert!(!(ra && rb), "round {round}: both changes went through");
        let owners: i64 = sqlx::query_scalar(
            "SELECT COUNT(*) FROM memberships WHERE team_id = $1 AND role = 'owner'",
        )
        .bind(&team.id)
        .fetch_one(&pool)
        .await
        .expect("count");
        assert_eq!(owners, 1, "round {round}: exactly one owner is left");
    }
    store.close().await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 4)]
async fn last_owner_survives_concurrent_demotions_sqlite() {
    last_owner_survives(Db::Sqlite).await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 4)]
async fn last_owner_survives_concurrent_demotions_postgres() {
    last_owner_survives(Db::Postgres).await;
}

async fn one_name_rule(s: Server) {
    let editor = s.token("greenhouse", "editor");
    let at = "n".repeat(200);
    let past = "n".repeat(201);
    for (path, extra) in [("/api/cameras", json!({"width": 64, "height": 48}))] {
        let mut ok = extra.clone();
        ok["name"] = json!(at);
        let (st, body) = s.post(path, Some(&editor), &ok).await;
        assert_eq!(st, StatusCode::CREATED, "{path} at the limit: {body}");
        let mut bad = extra.clone();
        bad["name"] = json!(past);
        let (st, body) = s.post(path, Some(&editor), &bad).await;
        assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY, "{path}: {body}");
        assert_eq!(body["error"]["field"], "name");
        assert_eq!(body["error"]["code"], "too_long");
        bad["name"] = json!("bench\u{202E}cam");
        let (st, body) = s.post(path, Some(&editor), &bad).await;
        assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY, "{path}: {body}");
        assert_eq!(body["error"]["code"], "bad_character");
    }
    let (_, _cam, frame) = camera_and_frame(&s, "greenhouse", json!({})).await;
    let mut goal = point_goal(&frame, &at);
    let (st, body) = s.post("/api/goals", Some(&editor), &goal).await;
    assert_eq!(st, StatusCode::CREATED, "{body}");
    goal["name"] = json!(past);
    let (st, body) = s.post("/api/goals", Some(&editor), &goal).await;
    assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY, "{body}");
    assert_eq!(body["error"]["field"], "name");
    let goal_id = {
        goal["name"] = json!("pot");
        let (_, b) = s.post("/api/goals", Some(&editor), &goal).await;
        b["goal_id"].as_str().unwrap().to_string()
    };
    let set = |name: &str| json!({"name": name, "items": [{"goal_id": goal_id, "revision": 1}]});
    let (st, body) = s.post("/api/goal-sets", Some(&editor), &set(&at)).await;
    assert_eq!(st, StatusCode::CREATED, "{body}");
    let (st, body) = s.post("/api/goal-sets", Some(&editor), &set(&past)).await;
    assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY, "{body}");
    assert_eq!(body["error"]["field"], "name");
}

on_both_databases!(one_name_rule_per_kind, one_name_rule);

/// The cost route scores probability maps as they arrive, block by block. A batch of several
/// blocks must give exactly (bit for bit) what the offline scorer gives on the whole batch at
/// once, and errors must name candidates by their index in the whole batch.
async fn streamed_maps_equal_whole_batch(s: Server) {
    let (editor, _cam, frame) = camera_and_frame(&s, "greenhouse", json!({})).await;
    let body = json!({
        "name": "tray and pot",
        "frame_id": frame,
        "terms": [
            {"kind": "point", "source": [10.0, 12.0], "target": [40.0, 30.0]},
            {"kind": "region", "source": [20.0, 5.0], "polygon": [[30.0, 5.0], [50.0, 5.0], [50.0, 20.0], [30.0, 20.0]], "weight": 2.0}
        ],
        "cost": {"metric": "huber", "huber_delta_px": 4.0, "steps": "all"}
    });
    let (st, rev) = s.post("/api/goals", Some(&editor), &body).await;
    assert_eq!(st, StatusCode::CREATED, "{rev}");
    let goal = rev["goal_id"].as_str().unwrap().to_string();
    let base = format!("/api/goals/{goal}/revisions/1");
    // 32×24 maps, T=3, P=2: 18 KiB a candidate, so 300 candidates fill one 4 MiB block (227
    // candidates) and part of a second.
    let (n, t, p, h, w) = (300usize, 3usize, 2usize, 24usize, 32usize);
    let mut state = 0x9e37_79b9_7f4a_7c15u64;
    let mut next = || {
        state ^= state << 13;
        state ^= state >> 7;
        state ^= state << 17;
        (state >> 40) as f32 / (1u64 << 24) as f32 / (h * w) as f32
    };
    let probs: Vec<f32> = (0..n * t * p * h * w).map(|_| next()).collect();
    let npy32 = goalsmith_core::npy::write_f32(&[n, t, p, h, w], &probs).unwrap();
    let (st, route) = s
        .post_bytes(
            &format!("{base}/cost"),
            Some(&editor),
            "application/x-npy",
            npy32.clone(),
        )
        .await;
    assert_eq!(st, StatusCode::OK, "{route}");
    assert_eq!(route["costs"].as_array().unwrap().len(), n);

    let bundle = s
        .client
        .get(s.url(&format!("{base}/bundle.zip")))
        .bearer_auth(&editor)
        .send()
        .await
        .unwrap()
        .bytes()
        .await
        .unwrap();
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(dir.path().join("b.zip"), &bundle).unwrap();
    std::fs::write(dir.path().join("m.npy"), &npy32).unwrap();
    let out = Command::new(bin())
        .arg("cost")
        .arg("--bundle")
        .arg(dir.path().join("b.zip"))
        .arg("--maps")
        .arg(dir.path().join("m.npy"))
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let whole: Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(
        route, whole,
        "streamed blocks and the whole batch agree bit for bit"
    );

    // A bad value in the last block is reported with its index in the whole batch.
    let mut bad = probs.clone();
    let at = ((250 * t + 1) * p + 1) * h * w + 5; // candidate 250, step 1, point 1
    bad[at] = -1.0;
    let (st, err) = s
        .post_bytes(
            &format!("{base}/cost"),
            Some(&editor),
            "application/x-npy",
            goalsmith_core::npy::write_f32(&[n, t, p, h, w], &bad).unwrap(),
        )
        .await;
    assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY, "{err}");
    let message = err["error"]["message"].as_str().unwrap();
    assert!(
        message.contains("candidate 250, step 1, point 1"),
        "{message}"
    );

    // A body shorter than its header says, and one longer, are refused.
    let mut short = npy32.clone();
    short.truncate(npy32.len() - 4);
    let (st, err) = s
        .post_bytes(
            &format!("{base}/cost"),
            Some(&editor),
            "application/x-npy",
            short,
        )
        .await;
    assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY, "{err}");
    let mut long = npy32.clone();
    long.extend_from_slice(&[0, 0, 0, 0]);
    let (st, err) = s
        .post_bytes(
            &format!("{base}/cost"),
            Some(&editor),
            "application/x-npy",
            long,
        )
        .await;
    assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY, "{err}");
}

on_both_databases!(
    streamed_maps_are_bit_identical,
    streamed_maps_equal_whole_batch
);
