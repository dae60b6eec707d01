//! Moving and keeping data: `goalsmith copy` from a SQLite database filled through the real
//! server into PostgreSQL (and back), verified over HTTP byte for byte, rerun, and refused on a
//! tampered target; `goalsmith backup` while revisions are being written, and `goalsmith
//! restore` of it; what restore and backup refuse.

use crate::pages::{Person, csrf_in, join};
use crate::support::*;
use reqwest::StatusCode;
use serde_json::{Value, json};
use std::path::Path;
use std::process::Command;
use std::sync::{Arc, Mutex};
use std::time::{Duration, Instant};

const W: u32 = 160;
const H: u32 = 120;

/// `goalsmith ARGS`: (success, stdout, stderr).
fn run(args: &[&str]) -> (bool, String, String) {
    let out = Command::new(bin())
        .args(args)
        .env("GOALSMITH_LOG", "warn")
        .env_remove("GOALSMITH_DATABASE_URL")
        .output()
        .expect("run goalsmith");
    (
        out.status.success(),
        String::from_utf8_lossy(&out.stdout).into_owned(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

/// Status, ETag and bytes of a GET.
async fn fetch(s: &Server, path: &str, token: &str) -> (StatusCode, Option<String>, Vec<u8>) {
    let resp = s
        .client
        .get(s.url(path))
        .bearer_auth(token)
        .send()
        .await
        .expect("GET");
    let st = resp.status();
    let tag = etag(&resp);
    (st, tag, resp.bytes().await.expect("body").to_vec())
}

/// A sign-in with login and password from a new browser; returns it signed in.
async fn sign_in(base: &str, login: &str, password: &str) -> Person {
    let mut p = Person::new(base);
    let page = p.get("/signin").await;
    assert_eq!(page.status, StatusCode::OK, "{}", page.body);
    let form = csrf_in(&page.body);
    let done = p
        .post_form(
            "/signin",
            &[
                ("csrf", &form),
                ("login", login),
                ("password", password),
                ("next", "/"),
            ],
        )
        .await;
    assert_eq!(done.status, StatusCode::SEE_OTHER, "{}", done.body);
    assert_eq!(done.location.as_deref(), Some("/"));
    p
}

/// Everything the test wrote, and the API paths that show it.
struct Filled {
    editor: String,
    viewer: String,
    goal: String,
    paths: Vec<String>,
}

/// Fills a database through the server: a team with a person, tokens, two cameras, frames, a
/// goal with three revisions, a goal set, an outcome, a demo with a track run to completion,
/// and a reward fit.
async fn fill(s: &Server) -> Filled {
    let team = "my team";
    let (editor, cam, frame) = camera_and_frame(s, team, json!({})).await;
    let viewer = s.token(team, "viewer");
    let (st, second) = s
        .post_bytes(
            &format!("/api/cameras/{cam}/frames"),
            Some(&editor),
            "image/png",
            png(64, 48, 99),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{second}");
    let second = second["id"].as_str().expect("frame").to_string();

    let resp = s
        .client
        .post(s.url("/api/goals"))
        .bearer_auth(&editor)
        .json(&point_goal(&frame, "pot to tray"))
        .send()
        .await
        .expect("POST goal");
    assert_eq!(resp.status(), StatusCode::CREATED);
    let mut tag = etag(&resp).expect("etag");
    let rev: Value = resp.json().await.expect("json");
    let goal = rev["goal_id"].as_str().expect("goal").to_string();
    for k in 0..2 {
        let mut body = point_goal(if k == 0 { &frame } else { &second }, "pot to tray");
        body["terms"][0]["target"] = json!([30.0 + k as f64, 20.5]);
        body["note"] = json!(format!("moved ünder the shelf, try {k}"));
        let (st, v, t) = s.put_goal(&goal, &editor, Some(&tag), &body).await;
        assert_eq!(st, StatusCode::OK, "{v}");
        tag = t.expect("etag");
    }
    let (st, set) = s
        .post(
            "/api/goal-sets",
            Some(&editor),
            &json!({"name": "morning", "items": [{"goal_id": goal, "revision": 2}, {"goal_id": goal, "revision": 3}]}),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{set}");
    let set = set["id"].as_str().expect("set").to_string();
    let (st, outcome) = s
        .post(
            &format!("/api/goals/{goal}/revisions/2/outcomes"),
            Some(&editor),
            &json!({"final_points": [[30.5, 21.0]], "note": "trial 1"}),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{outcome}");

    // A demo, a track through it, and a reward fit from the track and drawn paths.
    let (st, cam2) = s
        .post(
            "/api/cameras",
            Some(&editor),
            &json!({"name": "side", "width": W, "height": H}),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{cam2}");
    let cam2 = cam2["id"].as_str().expect("camera").to_string();
    let (st, fit_frame) = s
        .post_bytes(
            &format!("/api/cameras/{cam2}/frames"),
            Some(&editor),
            "image/png",
            png(W, H, 3),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{fit_frame}");
    let fit_frame = fit_frame["id"].as_str().expect("frame").to_string();
    let (st, demo) = s
        .post_bytes(
            &format!("/api/cameras/{cam2}/demos"),
            Some(&editor),
            "application/zip",
            texture_demo_zip(W, H, 6, [2.0, 1.5]),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{demo}");
    let demo = demo["id"].as_str().expect("demo").to_string();
    let (st, started) = s
        .post(
            &format!("/api/demos/{demo}/tracks"),
            Some(&editor),
            &json!({"label": "pot rim", "frame": 0, "x": 70.0, "y": 55.0}),
        )
        .await;
    assert_eq!(st, StatusCode::ACCEPTED, "{started}");
    let track = started["track_id"].as_str().expect("track").to_string();
    let track_op = started["operation_id"].as_str().expect("op").to_string();
    let done = operation_done(s, &editor, &track_op).await;
    assert_eq!(done["state"], "succeeded", "{done}");
    let mut demos = straight_paths(
        &[[10.0, 10.0], [150.0, 5.0], [5.0, 110.0]],
        [125.0, 95.0],
        4.0,
    );
    demos.push(json!({"demo_id": demo, "track_id": track}));
    let (st, started) = s
        .post(
            "/api/reward-fits",
            Some(&editor),
            &json!({"frame_id": fit_frame, "cell_px": 10, "demos": demos,
                    "features": [{"kind": "distance_to", "point": [125.0, 95.0]}]}),
        )
        .await;
    assert_eq!(st, StatusCode::ACCEPTED, "{started}");
    let fit = started["id"].as_str().expect("fit").to_string();
    let fit_op = started["operation_id"].as_str().expect("op").to_string();
    let done = operation_done(s, &editor, &fit_op).await;
    assert_eq!(done["state"], "succeeded", "{done}");

    let mut paths = vec![
        "/api/cameras".to_string(),
        format!("/api/cameras/{cam}"),
        format!("/api/cameras/{cam}/frames"),
        format!("/api/frames/{frame}/image"),
        format!("/api/frames/{second}/image"),
        format!("/api/frames/{fit_frame}/image"),
        "/api/goals".to_string(),
        format!("/api/goals/{goal}"),
        format!("/api/goals/{goal}/revisions"),
        format!("/api/goals/{goal}/outcomes"),
        format!("/api/goals/{goal}/revisions/3/bundle.zip"),
        "/api/goal-sets".to_string(),
        format!("/api/goal-sets/{set}"),
        format!("/api/demos/{demo}"),
        format!("/api/demos/{demo}/tracks/{track}"),
        format!("/api/demos/{demo}/tracks.csv"),
        format!("/api/operations/{track_op}"),
        format!("/api/operations/{fit_op}"),
        "/api/reward-fits".to_string(),
        format!("/api/reward-fits/{fit}"),
        format!("/api/reward-fits/{fit}/reward-map.npy"),
    ];
    for n in 1..=3 {
        paths.push(format!("/api/goals/{goal}/revisions/{n}"));
    }
    for i in 0..6 {
        paths.push(format!("/api/demos/{demo}/frames/{i}/image"));
    }
    Filled {
        editor,
        viewer,
        goal,
        paths,
    }
}

/// Every path's status, ETag and bytes, read with `token`.
async fn responses(
    s: &Server,
    paths: &[String],
    token: &str,
) -> Vec<(String, StatusCode, Option<String>, Vec<u8>)> {
    let mut out = Vec::new();
    for p in paths {
        let (st, tag, bytes) = fetch(s, p, token).await;
        assert_eq!(
            st,
            StatusCode::OK,
            "{p}: {}",
            String::from_utf8_lossy(&bytes)
        );
        out.push((p.clone(), st, tag, bytes));
    }
    out
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn copy_sqlite_to_postgres_and_back() {
    let Some(pg) = fresh_db(Db::Postgres, "copy_sqlite_to_postgres").await else {
        return;
    };
    let src = fresh_db(Db::Sqlite, "copy_sqlite_to_postgres")
        .await
        .expect("sqlite");
    let (mut s, link) = start_with_link(&src.url, &src.data_dir, &[]);
    let (mut person, _) = join(&s.base, &link, "ines", "Ines", "tomato vines in july").await;
    let filled = fill(&s).await;
    let before = responses(&s, &filled.paths, &filled.viewer).await;
    s.kill();

    // The copy, then a rerun that finds everything there.
    let (ok, out, err) = run(&["copy", "--from", &src.url, "--to", &pg.url]);
    assert!(ok, "copy failed: {out}\n{err}");
    for t in [
        "teams",
        "sessions",
        "goal_revisions",
        "images",
        "reward_fits",
        "track_samples",
    ] {
        assert!(
            out.lines()
                .any(|l| l.starts_with(&format!("{t} ")) && l.contains("  ok")),
            "{t} verified: {out}"
        );
    }
    assert!(out.contains("every table verified"), "{out}");
    assert!(!out.contains("copied 0 rows"), "{out}");
    assert!(
        out.lines()
            .any(|l| l.starts_with("images") && l.contains("re-hashed")),
        "{out}"
    );
    let (ok, again, err) = run(&["copy", "--from", &src.url, "--to", &pg.url]);
    assert!(ok, "rerun failed: {again}\n{err}");
    assert!(again.contains("copied 0 rows"), "{again}");

    // A row changed in the target: the rerun names it, stops, and leaves it as it is.
    {
        use sqlx::{Connection, Row};
        let mut conn = sqlx::postgres::PgConnection::connect(&pg.url)
            .await
            .expect("connect");
        let original: String =
            sqlx::query("SELECT document FROM goal_revisions WHERE goal_id = $1 AND revision = 2")
                .bind(&filled.goal)
                .fetch_one(&mut conn)
                .await
                .expect("revision")
                .get(0);
        let tampered = original.replacen("try 0", "try 9", 1);
        assert_ne!(tampered, original);
        sqlx::query("UPDATE goal_revisions SET document = $1 WHERE goal_id = $2 AND revision = 2")
            .bind(&tampered)
            .bind(&filled.goal)
            .execute(&mut conn)
            .await
            .expect("tamper");
        conn.close().await.ok();
        let (ok, out, err) = run(&["copy", "--from", &src.url, "--to", &pg.url]);
        assert!(!ok, "a tampered target must fail: {out}");
        assert!(err.contains("goal_revisions"), "{err}");
        assert!(
            err.contains("revision=2") && err.contains(&filled.goal),
            "{err}"
        );
        assert!(
            err.contains("document") && err.contains("not overwritten"),
            "{err}"
        );
        let mut conn = sqlx::postgres::PgConnection::connect(&pg.url)
            .await
            .expect("connect");
        let now: String =
            sqlx::query("SELECT document FROM goal_revisions WHERE goal_id = $1 AND revision = 2")
                .bind(&filled.goal)
                .fetch_one(&mut conn)
                .await
                .expect("revision")
                .get(0);
        assert_eq!(now, tampered, "the copy changed nothing");
        sqlx::query("UPDATE goal_revisions SET document = $1 WHERE goal_id = $2 AND revision = 2")
            .bind(&original)
            .bind(&filled.goal)
            .execute(&mut conn)
            .await
            .expect("put back");
        conn.close().await.ok();
    }
    let (ok, out, err) = run(&["copy", "--from", &src.url, "--to", &pg.url]);
    assert!(ok && out.contains("copied 0 rows"), "{out}\n{err}");

    // And on to SQLite again: any direction works.
    let back = fresh_db(Db::Sqlite, "copy_back").await.expect("sqlite");
    let (ok, out, err) = run(&["copy", "--from", &pg.url, "--to", &back.url]);
    assert!(ok && out.contains("every table verified"), "{out}\n{err}");

    // A server on the PostgreSQL copy serves the same bytes and ETags, with the same tokens;
    // the session goes on, and the password signs in.
    let t = Server::start(&pg.url, &pg.data_dir, &[]);
    let after = responses(&t, &filled.paths, &filled.viewer).await;
    for (b, a) in before.iter().zip(after.iter()) {
        assert_eq!(b.0, a.0);
        assert_eq!(b.2, a.2, "{}: the ETag is kept", b.0);
        assert!(b.3 == a.3, "{}: the bytes are kept", b.0);
    }
    for n in 1..=3 {
        let (_, tag, bytes) = fetch(
            &t,
            &format!("/api/goals/{}/revisions/{n}", filled.goal),
            &filled.editor,
        )
        .await;
        use sha2::Digest;
        let sha = hex::encode(sha2::Sha256::digest(&bytes));
        assert_eq!(
            tag,
            Some(format!("\"{sha}\"")),
            "revision {n}'s ETag is its SHA-256"
        );
        let doc: Value = serde_json::from_slice(&bytes).expect("json");
        assert_eq!(doc["revision"], n);
    }
    let (st, _) = t
        .post(
            &format!("/api/goals/{}/revisions/3/outcomes", filled.goal),
            Some(&filled.editor),
            &json!({"final_points": [[31.0, 20.5]], "note": "after the move"}),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "the editor token writes");
    person.base = t.base.clone();
    let home = person.get("/").await;
    assert_eq!(
        home.status,
        StatusCode::OK,
        "still signed in: {}",
        home.body
    );
    let mut fresh = sign_in(&t.base, "ines", "tomato vines in july").await;
    assert_eq!(fresh.get("/").await.status, StatusCode::OK);

    // The target is now in use: a rerun refuses before writing (the new outcome and session
    // are rows the source does not have).
    drop(t);
    let (ok, out, err) = run(&["copy", "--from", &src.url, "--to", &pg.url]);
    assert!(!ok, "{out}");
    assert!(err.contains("that the source does not have"), "{err}");
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn copy_refusals() {
    let a = fresh_db(Db::Sqlite, "copy_refusals").await.expect("sqlite");
    let b = fresh_db(Db::Sqlite, "copy_refusals").await.expect("sqlite");
    token(&a.url, "bench", "editor");
    let file = a.data_dir.join("goalsmith.db");
    let same = format!(
        "sqlite://{}/../{}/goalsmith.db",
        a.data_dir.display(),
        a.data_dir.file_name().expect("name").to_string_lossy()
    );
    let (ok, _, err) = run(&["copy", "--from", &a.url, "--to", &same]);
    assert!(!ok && err.contains("same database"), "{err}");
    let missing = format!("sqlite://{}", a.data_dir.join("nothing.db").display());
    let (ok, _, err) = run(&["copy", "--from", &missing, "--to", &b.url]);
    assert!(!ok && err.contains("no SQLite database"), "{err}");
    let c = fresh_db(Db::Sqlite, "copy_refusals").await.expect("sqlite");
    let (ok, out, err) = run(&["copy", "--from", &a.url, "--to", &c.url]);
    assert!(ok, "{out}\n{err}");
    // A target a server has open is refused.
    let s = Server::start(&b.url, &b.data_dir, &[]);
    let (ok, _, err) = run(&["copy", "--from", &a.url, "--to", &b.url]);
    assert!(!ok && err.contains("open in another process"), "{err}");
    drop(s);
    // A target with rows of its own (the server made a team and a start-up link) is refused.
    let (ok, _, err) = run(&["copy", "--from", &a.url, "--to", &b.url]);
    assert!(
        !ok && err.contains("that the source does not have"),
        "{err}"
    );
    // A source at other migrations than this binary's is refused.
    {
        use sqlx::Connection;
        let mut conn = sqlx::sqlite::SqliteConnection::connect(&a.url)
            .await
            .expect("open");
        sqlx::query(
            "INSERT INTO _sqlx_migrations (version, description, success, checksum, execution_time) \
             VALUES (9999, 'from the future', 1, x'00', 0)",
        )
        .execute(&mut conn)
        .await
        .expect("insert");
        conn.close().await.ok();
    }
    let d = fresh_db(Db::Sqlite, "copy_refusals").await.expect("sqlite");
    let (ok, _, err) = run(&["copy", "--from", &a.url, "--to", &d.url]);
    assert!(
        !ok && err.contains("migration 9999") && err.contains("newer"),
        "{err}"
    );
    assert!(file.exists());
}

/// Random bytes that do not compress: a PNG of noise of `w`×`h`.
fn noise_png(w: u32, h: u32, seed: u64) -> Vec<u8> {
    let mut x = seed
        .wrapping_mul(6364136223846793005)
        .wrapping_add(1442695040888963407);
    let img = image::RgbImage::from_fn(w, h, |_, _| {
        x = x
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        let b = (x >> 33).to_le_bytes();
        image::Rgb([b[0], b[1], b[2]])
    });
    let mut out = std::io::Cursor::new(Vec::new());
    img.write_to(&mut out, image::ImageFormat::Png)
        .expect("png");
    out.into_inner()
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn backup_while_writing_then_restore() {
    let db = fresh_db(Db::Sqlite, "backup_while_writing")
        .await
        .expect("sqlite");
    let s = Arc::new(Server::start(&db.url, &db.data_dir, &[]));
    let (editor, _cam, frame) = camera_and_frame(&s, "kept", json!({})).await;
    // Some megabytes, so the snapshot takes a while.
    let (st, big) = s
        .post(
            "/api/cameras",
            Some(&editor),
            &json!({"name": "wide", "width": 640, "height": 480}),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{big}");
    let big = big["id"].as_str().expect("camera").to_string();
    for k in 0..12 {
        let (st, v) = s
            .post_bytes(
                &format!("/api/cameras/{big}/frames"),
                Some(&editor),
                "image/png",
                noise_png(640, 480, k),
            )
            .await;
        assert_eq!(st, StatusCode::CREATED, "{v}");
    }
    let resp = s
        .client
        .post(s.url("/api/goals"))
        .bearer_auth(&editor)
        .json(&point_goal(&frame, "kept goal"))
        .send()
        .await
        .expect("POST");
    assert_eq!(resp.status(), StatusCode::CREATED);
    let first_tag = etag(&resp).expect("etag");
    let goal = resp.json::<Value>().await.expect("json")["goal_id"]
        .as_str()
        .expect("goal")
        .to_string();

    // A writer saving revision after revision; each acknowledged one is recorded with its ETag.
    let acked: Arc<Mutex<Vec<(i64, String)>>> = Arc::new(Mutex::new(vec![(1, first_tag)]));
    let stop = Arc::new(std::sync::atomic::AtomicBool::new(false));
    let writer = {
        let (s, acked, stop, editor, goal, frame) = (
            s.clone(),
            acked.clone(),
            stop.clone(),
            editor.clone(),
            goal.clone(),
            frame.clone(),
        );
        tokio::spawn(async move {
            let until = Instant::now() + Duration::from_secs(120);
            while !stop.load(std::sync::atomic::Ordering::SeqCst) && Instant::now() < until {
                let (n, tag) = acked.lock().expect("lock").last().cloned().expect("one");
                let mut body = point_goal(&frame, "kept goal");
                body["terms"][0]["target"] = json!([20.0 + (n % 20) as f64, 25.0]);
                let (st, v, t) = s.put_goal(&goal, &editor, Some(&tag), &body).await;
                assert_eq!(st, StatusCode::OK, "{v}");
                acked.lock().expect("lock").push((n + 1, t.expect("etag")));
            }
        })
    };
    while acked.lock().expect("lock").len() < 5 {
        tokio::time::sleep(Duration::from_millis(20)).await;
    }
    let out = db.data_dir.join("backups").join("kept.db");
    std::fs::create_dir_all(out.parent().expect("dir")).expect("dir");
    let before: Vec<(i64, String)> = acked.lock().expect("lock").clone();
    let (ok, printed, err) = tokio::task::spawn_blocking({
        let (url, out) = (db.url.clone(), out.clone());
        move || {
            run(&[
                "backup",
                "--database",
                &url,
                "--out",
                out.to_str().expect("utf8"),
            ])
        }
    })
    .await
    .expect("backup");
    let during = acked.lock().expect("lock").len() - before.len();
    stop.store(true, std::sync::atomic::Ordering::SeqCst);
    writer.await.expect("writer");
    assert!(ok, "backup failed: {printed}\n{err}");
    assert!(printed.contains("integrity_check ok"), "{printed}");
    assert!(during > 0, "revisions were written while the backup ran");
    // Nothing is left under a temporary name, and the backup is never overwritten.
    let names: Vec<String> = std::fs::read_dir(out.parent().expect("dir"))
        .expect("dir")
        .map(|e| e.expect("entry").file_name().to_string_lossy().into_owned())
        .collect();
    assert_eq!(names, vec!["kept.db".to_string()]);
    let (ok, _, err) = run(&[
        "backup",
        "--database",
        &db.url,
        "--out",
        out.to_str().expect("utf8"),
    ]);
    assert!(!ok && err.contains("never overwrites"), "{err}");
    let (ok, _, err) = run(&[
        "backup",
        "--database",
        "postgres://nobody@127.0.0.1:1/none",
        "--out",
        "x.db",
    ]);
    assert!(!ok && err.contains("pg_dump"), "{err}");

    // Restored to a new path, a server on it has every revision acknowledged before the backup.
    let restored_dir = tempfile::tempdir().expect("dir");
    let restored = format!(
        "sqlite://{}",
        restored_dir.path().join("goalsmith.db").display()
    );
    let (ok, printed, err) = run(&[
        "restore",
        "--from",
        out.to_str().expect("utf8"),
        "--database",
        &restored,
    ]);
    assert!(ok, "restore failed: {printed}\n{err}");
    assert!(printed.contains("goal_revisions"), "{printed}");
    let r = Server::start(&restored, restored_dir.path(), &[]);
    for (n, tag) in &before {
        let (st, got, _) = fetch(&r, &format!("/api/goals/{goal}/revisions/{n}"), &editor).await;
        assert_eq!(st, StatusCode::OK, "revision {n}");
        assert_eq!(got.as_ref(), Some(tag), "revision {n} is byte-identical");
    }
    let (st, frames) = r
        .get(&format!("/api/cameras/{big}/frames"), Some(&editor))
        .await;
    assert_eq!(st, StatusCode::OK);
    assert_eq!(
        frames["items"].as_array().map(Vec::len),
        Some(12),
        "{frames}"
    );

    // With its server running, the restored database is neither replaced without --force nor
    // with it; stopped, --force replaces it.
    let (ok, _, err) = run(&[
        "restore",
        "--from",
        out.to_str().expect("utf8"),
        "--database",
        &restored,
    ]);
    assert!(!ok && err.contains("--force"), "{err}");
    let (ok, _, err) = run(&[
        "restore",
        "--from",
        out.to_str().expect("utf8"),
        "--database",
        &restored,
        "--force",
    ]);
    assert!(!ok && err.contains("open in another process"), "{err}");
    drop(r);
    let (ok, printed, err) = run(&[
        "restore",
        "--from",
        out.to_str().expect("utf8"),
        "--database",
        &restored,
        "--force",
    ]);
    assert!(ok, "{printed}\n{err}");
    drop(s);
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn restore_refuses_what_is_not_a_backup() {
    let dir = tempfile::tempdir().expect("dir");
    let target = format!("sqlite://{}", dir.path().join("new.db").display());
    let check = |from: &Path, want: &str| {
        let (ok, out, err) = run(&[
            "restore",
            "--from",
            from.to_str().expect("utf8"),
            "--database",
            &target,
        ]);
        assert!(!ok, "{} restored: {out}", from.display());
        assert!(err.contains(want), "{}: {err}", from.display());
        assert!(!dir.path().join("new.db").exists(), "nothing written");
    };
    let random = dir.path().join("random.bin");
    std::fs::write(
        &random,
        noise_png(32, 32, 5)
            .into_iter()
            .skip(60)
            .collect::<Vec<u8>>(),
    )
    .expect("write");
    check(&random, "not an SQLite database");
    check(&dir.path().join("absent.db"), "no backup file");
    let empty = dir.path().join("empty.db");
    {
        use sqlx::Connection;
        let url = format!("sqlite://{}?mode=rwc", empty.display());
        let mut conn = sqlx::sqlite::SqliteConnection::connect(&url)
            .await
            .expect("open");
        sqlx::query("CREATE TABLE notes (id TEXT)")
            .execute(&mut conn)
            .await
            .expect("table");
        conn.close().await.ok();
    }
    check(&empty, "no _sqlx_migrations table");
    let (ok, _, err) = run(&[
        "restore",
        "--from",
        empty.to_str().expect("utf8"),
        "--database",
        "postgres://nobody@127.0.0.1:1/none",
    ]);
    assert!(
        !ok && err.contains("goalsmith copy --from sqlite://"),
        "{err}"
    );
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn copy_reports_an_image_whose_bytes_do_not_match() {
    let a = fresh_db(Db::Sqlite, "copy_bad_image")
        .await
        .expect("sqlite");
    let b = fresh_db(Db::Sqlite, "copy_bad_image")
        .await
        .expect("sqlite");
    let mut s = Server::start(&a.url, &a.data_dir, &[]);
    camera_and_frame(&s, "bench", json!({})).await;
    s.kill();
    {
        use sqlx::Connection;
        let mut conn = sqlx::sqlite::SqliteConnection::connect(&a.url)
            .await
            .expect("open");
        sqlx::query("UPDATE images SET bytes = x'00'")
            .execute(&mut conn)
            .await
            .expect("corrupt");
        conn.close().await.ok();
    }
    let (ok, out, err) = run(&["copy", "--from", &a.url, "--to", &b.url]);
    assert!(!ok, "{out}");
    let line = out
        .lines()
        .find(|l| l.starts_with("images "))
        .unwrap_or_else(|| panic!("no images line: {out}"));
    assert!(line.contains("MISMATCH"), "{line}");
    assert!(line.contains("so does the source"), "{line}");
    assert!(out.contains("VERIFICATION FAILED for images"), "{out}");
    assert!(err.contains("does not match its source"), "{err}");
}
