//! Test support: the real `goalsmith` binary on a random port against a fresh database.

use reqwest::StatusCode;
use serde_json::Value;
use std::io::{BufRead, BufReader};
use std::path::PathBuf;
use std::process::{Child, Command, Stdio};
use std::time::Duration;

/// Which database a test runs on.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Db {
    Sqlite,
    Postgres,
}

/// When set (CI sets it), a missing service fails the test instead of skipping it.
pub fn services_required() -> bool {
    std::env::var("GOALSMITH_REQUIRE_SERVICES").is_ok_and(|v| v == "1")
}

/// Prints a skip line that `cargo test` shows even for passing tests: the print macros are
/// captured by the test harness, a direct write to the process's stderr is not.
pub fn skip(line: &str) {
    use std::io::Write;
    let _ = writeln!(std::io::stderr().lock(), "{line}");
}

/// A fresh, empty database of the given kind, or `None` (with a visible skip line) when
/// PostgreSQL is not configured locally.
pub struct TestDb {
    pub url: String,
    _dir: Option<tempfile::TempDir>,
    pub data_dir: PathBuf,
}

pub async fn fresh_db(kind: Db, test: &str) -> Option<TestDb> {
    let dir = tempfile::tempdir().expect("temp dir");
    let data_dir = dir.path().to_path_buf();
    match kind {
        Db::Sqlite => Some(TestDb {
            url: format!(
                "sqlite://{}?mode=rwc",
                dir.path().join("goalsmith.db").display()
            ),
            data_dir,
            _dir: Some(dir),
        }),
        Db::Postgres => {
            let Ok(base) = std::env::var("GOALSMITH_TEST_POSTGRES_URL") else {
                if services_required() {
                    panic!(
                        "GOALSMITH_TEST_POSTGRES_URL is not set but GOALSMITH_REQUIRE_SERVICES=1"
                    );
                }
                skip(&format!(
                    "SKIP {test} on postgres: GOALSMITH_TEST_POSTGRES_URL is not set"
                ));
                return None;
            };
            use sqlx::Connection;
            let mut conn = match sqlx::postgres::PgConnection::connect(&base).await {
                Ok(c) => c,
                Err(e) if !services_required() => {
                    skip(&format!(
                        "SKIP {test} on postgres: cannot connect to {base}: {e}"
                    ));
                    return None;
                }
                Err(e) => panic!("cannot connect to {base}: {e}"),
            };
            let name = format!("gs_{}", uuid::Uuid::new_v4().simple());
            sqlx::query(sqlx::AssertSqlSafe(format!("CREATE DATABASE {name}")))
                .execute(&mut conn)
                .await
                .expect("create test database");
            conn.close().await.ok();
            let url = replace_db_name(&base, &name);
            Some(TestDb {
                url,
                data_dir,
                _dir: Some(dir),
            })
        }
    }
}

fn replace_db_name(url: &str, name: &str) -> String {
    let (head, query) = match url.split_once('?') {
        Some((h, q)) => (h, Some(q)),
        None => (url, None),
    };
    let after_scheme = head.find("://").map(|i| i + 3).unwrap_or(0);
    let base = match head[after_scheme..].find('/') {
        Some(i) => &head[..after_scheme + i],
        None => head,
    };
    match query {
        Some(q) => format!("{base}/{name}?{q}"),
        None => format!("{base}/{name}"),
    }
}

pub fn bin() -> &'static str {
    env!("CARGO_BIN_EXE_goalsmith")
}

/// A running server process; killed on drop.
pub struct Server {
    pub base: String,
    pub child: Child,
    pub db_url: String,
    pub data_dir: PathBuf,
    pub client: reqwest::Client,
}

impl Server {
    pub fn start(db_url: &str, data_dir: &std::path::Path, extra: &[&str]) -> Server {
        Self::start_with_env(db_url, data_dir, extra, &[])
    }

    /// [`Server::start`] with environment variables (limits) set for the server process.
    pub fn start_with_env(
        db_url: &str,
        data_dir: &std::path::Path,
        extra: &[&str],
        env: &[(&str, &str)],
    ) -> Server {
        let mut child = Self::command(db_url, data_dir, extra, Stdio::inherit());
        child.envs(env.iter().copied());
        let child = child.spawn().expect("spawn goalsmith serve");
        Self::from_child(child, db_url, data_dir)
    }

    /// `goalsmith serve` on a free port, stdout piped for the listening line.
    fn spawn(db_url: &str, data_dir: &std::path::Path, extra: &[&str], stderr: Stdio) -> Child {
        Self::command(db_url, data_dir, extra, stderr)
            .spawn()
            .expect("spawn goalsmith serve")
    }

    fn command(db_url: &str, data_dir: &std::path::Path, extra: &[&str], stderr: Stdio) -> Command {
        let mut c = Command::new(bin());
        c.args(["serve", "--bind", "127.0.0.1:0", "--database", db_url])
            .arg("--data-dir")
            .arg(data_dir)
            .args(extra)
            .env("GOALSMITH_LOG", "warn")
            .stdout(Stdio::piped())
            .stderr(stderr);
        c
    }

    /// Waits for the one stdout line `listening on http://…` and wraps the process.
    fn from_child(mut child: Child, db_url: &str, data_dir: &std::path::Path) -> Server {
        let stdout = child.stdout.take().expect("stdout");
        let mut line = String::new();
        BufReader::new(stdout)
            .read_line(&mut line)
            .expect("read the listening line");
        let base = line
            .trim()
            .strip_prefix("listening on ")
            .unwrap_or_else(|| panic!("unexpected first stdout line {line:?}"))
            .to_string();
        Server {
            base,
            child,
            db_url: db_url.to_string(),
            data_dir: data_dir.to_path_buf(),
            client: reqwest::Client::builder()
                .timeout(Duration::from_secs(60))
                .build()
                .expect("client"),
        }
    }

    pub fn url(&self, path: &str) -> String {
        format!("{}{}", self.base, path)
    }

    /// A new API token through the real CLI.
    pub fn token(&self, team: &str, role: &str) -> String {
        token(&self.db_url, team, role)
    }

    pub async fn get(&self, path: &str, token: Option<&str>) -> (StatusCode, Value) {
        let mut req = self.client.get(self.url(path));
        if let Some(t) = token {
            req = req.bearer_auth(t);
        }
        into_json(req.send().await.expect("GET")).await
    }

    pub async fn send_json(
        &self,
        method: reqwest::Method,
        path: &str,
        token: Option<&str>,
        body: &Value,
    ) -> (StatusCode, Value) {
        let mut req = self.client.request(method, self.url(path)).json(body);
        if let Some(t) = token {
            req = req.bearer_auth(t);
        }
        into_json(req.send().await.expect("request")).await
    }

    pub async fn post(&self, path: &str, token: Option<&str>, body: &Value) -> (StatusCode, Value) {
        self.send_json(reqwest::Method::POST, path, token, body)
            .await
    }

    pub async fn post_bytes(
        &self,
        path: &str,
        token: Option<&str>,
        content_type: &str,
        body: Vec<u8>,
    ) -> (StatusCode, Value) {
        let mut req = self
            .client
            .post(self.url(path))
            .header("content-type", content_type)
            .body(body);
        if let Some(t) = token {
            req = req.bearer_auth(t);
        }
        into_json(req.send().await.expect("POST bytes")).await
    }

    /// PUT with an If-Match header (or none).
    pub async fn put_goal(
        &self,
        id: &str,
        token: &str,
        if_match: Option<&str>,
        body: &Value,
    ) -> (StatusCode, Value, Option<String>) {
        let mut req = self
            .client
            .put(self.url(&format!("/api/goals/{id}")))
            .bearer_auth(token)
            .json(body);
        if let Some(m) = if_match {
            req = req.header("if-match", m);
        }
        let resp = req.send().await.expect("PUT");
        let etag = etag(&resp);
        let (s, v) = into_json(resp).await;
        (s, v, etag)
    }

    pub fn kill(&mut self) {
        self.child.kill().ok();
        self.child.wait().ok();
    }
}

impl Drop for Server {
    fn drop(&mut self) {
        self.kill();
    }
}

pub fn etag(resp: &reqwest::Response) -> Option<String> {
    resp.headers()
        .get("etag")
        .and_then(|v| v.to_str().ok())
        .map(str::to_string)
}

pub async fn into_json(resp: reqwest::Response) -> (StatusCode, Value) {
    let status = resp.status();
    let bytes = resp.bytes().await.expect("body");
    let v = if bytes.is_empty() {
        Value::Null
    } else {
        serde_json::from_slice(&bytes)
            .unwrap_or_else(|_| Value::String(String::from_utf8_lossy(&bytes).into()))
    };
    (status, v)
}

pub fn token(db_url: &str, team: &str, role: &str) -> String {
    let out = Command::new(bin())
        .args([
            "token",
            "create",
            "--team",
            team,
            "--role",
            role,
            "--database",
            db_url,
        ])
        .env("GOALSMITH_LOG", "warn")
        .output()
        .expect("run token create");
    assert!(
        out.status.success(),
        "token create failed: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    let s = String::from_utf8(out.stdout).expect("utf8");
    let lines: Vec<&str> = s.lines().collect();
    assert_eq!(lines.len(), 1, "token create prints the token alone: {s:?}");
    lines[0].to_string()
}

/// Starts a server on a fresh database of `kind`; `None` when that database is not available.
pub async fn server(kind: Db, test: &str) -> Option<(Server, TestDb)> {
    let db = fresh_db(kind, test).await?;
    let s = Server::start(&db.url, &db.data_dir, &[]);
    Some((s, db))
}

/// Runs an async test body on SQLite and on PostgreSQL.
#[macro_export]
macro_rules! on_both_databases {
    ($name:ident, $body:path) => {
        mod $name {
            use super::*;
            #[tokio::test(flavor = "multi_thread", worker_threads = 2)]
            async fn sqlite() {
                if let Some((s, _db)) =
                    $crate::support::server($crate::support::Db::Sqlite, stringify!($name)).await
                {
                    $body(s).await;
                }
            }
            #[tokio::test(flavor = "multi_thread", worker_threads = 2)]
            async fn postgres() {
                if let Some((s, _db)) =
                    $crate::support::server($crate::support::Db::Postgres, stringify!($name)).await
                {
                    $body(s).await;
                }
            }
        }
    };
}

/// A PNG of `w`×`h` with a deterministic pattern.
pub fn png(w: u32, h: u32, seed: u8) -> Vec<u8> {
    let img = image::RgbImage::from_fn(w, h, |x, y| {
        image::Rgb([
            (x as u8).wrapping_mul(3).wrapping_add(seed),
            (y as u8).wrapping_mul(5),
            seed,
        ])
    });
    let mut out = std::io::Cursor::new(Vec::new());
    img.write_to(&mut out, image::ImageFormat::Png)
        .expect("encode png");
    out.into_inner()
}

/// A team with a camera (64×48, zones optional) and a frame; returns (editor token, camera id,
/// frame id).
pub async fn camera_and_frame(
    s: &Server,
    team: &str,
    camera_extra: Value,
) -> (String, String, String) {
    let editor = s.token(team, "editor");
    let mut body = serde_json::json!({"name": "bench overhead", "width": 64, "height": 48});
    if let (Some(b), Some(extra)) = (body.as_object_mut(), camera_extra.as_object()) {
        for (k, v) in extra {
            b.insert(k.clone(), v.clone());
        }
    }
    let (st, cam) = s.post("/api/cameras", Some(&editor), &body).await;
    assert_eq!(st, StatusCode::CREATED, "{cam}");
    let cam_id = cam["id"].as_str().expect("camera id").to_string();
    let (st, frame) = s
        .post_bytes(
            &format!("/api/cameras/{cam_id}/frames"),
            Some(&editor),
            "image/png",
            png(64, 48, 7),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{frame}");
    let frame_id = frame["id"].as_str().expect("frame id").to_string();
    (editor, cam_id, frame_id)
}

/// A small valid goal on `frame_id`.
pub fn point_goal(frame_id: &str, name: &str) -> Value {
    serde_json::json!({
        "name": name,
        "frame_id": frame_id,
        "terms": [{"kind": "point", "label": "pot", "source": [10.0, 12.0], "target": [40.0, 30.0]}],
        "note": "first try"
    })
}

/// Starts the server like [`Server::start`] and also returns the one-time sign-in link it prints
/// on stderr at start-up (other stderr lines are passed through).
pub fn start_with_link(
    db_url: &str,
    data_dir: &std::path::Path,
    extra: &[&str],
) -> (Server, String) {
    let mut child = Server::spawn(db_url, data_dir, extra, Stdio::piped());
    let stderr = child.stderr.take().expect("stderr");
    let (tx, rx) = std::sync::mpsc::channel::<String>();
    std::thread::spawn(move || {
        for line in BufReader::new(stderr).lines().map_while(Result::ok) {
            // `https://` too: with `--public-url` the link names the public address.
            if let Some(i) = line.find("http://").or_else(|| line.find("https://"))
                && line.contains("/welcome/")
            {
                let url = line[i..]
                    .split_whitespace()
                    .next()
                    .unwrap_or("")
                    .to_string();
                tx.send(url).ok();
            }
            eprintln!("{line}");
        }
    });
    let server = Server::from_child(child, db_url, data_dir);
    let link = rx
        .recv_timeout(Duration::from_secs(30))
        .expect("the server prints a sign-in link on an empty database");
    (server, link)
}

/// GET with a token; the status and the body's bytes.
pub async fn get_bytes(s: &Server, path: &str, token: &str) -> (StatusCode, Vec<u8>) {
    let resp = s
        .client
        .get(s.url(path))
        .bearer_auth(token)
        .send()
        .await
        .expect("GET");
    let st = resp.status();
    (st, resp.bytes().await.expect("body").to_vec())
}

/// A ZIP (deflated) of the named entries, in the order given.
pub fn zip_of(entries: &[(&str, &[u8])]) -> Vec<u8> {
    use std::io::Write;
    let mut z = zip::ZipWriter::new(std::io::Cursor::new(Vec::new()));
    let opts = zip::write::SimpleFileOptions::default()
        .compression_method(zip::CompressionMethod::Deflated);
    for (name, data) in entries {
        z.start_file(*name, opts).expect("entry");
        z.write_all(data).expect("write");
    }
    z.finish().expect("finish").into_inner()
}

/// A smooth texture (three Gaussian blobs about (70, 55) and a gentle ripple) of `w`×`h`,
/// shifted by `d` pixels, as a PNG: the texture point at (x, y) of the unshifted frame is at
/// (x + d.x, y + d.y).
pub fn texture_frame(w: u32, h: u32, d: [f64; 2]) -> Vec<u8> {
    let img = image::RgbImage::from_fn(w, h, |i, j| {
        let (x, y) = (f64::from(i) - d[0], f64::from(j) - d[1]);
        let blob = |cx: f64, cy: f64, s: f64| {
            (-((x - cx).powi(2) + (y - cy).powi(2)) / (2.0 * s * s)).exp()
        };
        let v = 60.0
            + 120.0 * blob(70.0, 55.0, 9.0)
            + 80.0 * blob(95.0, 70.0, 6.0)
            + 60.0 * blob(60.0, 75.0, 7.0)
            + 15.0 * ((x * 0.21).sin() * (y * 0.17).cos());
        let g = v.round().clamp(0.0, 255.0) as u8;
        image::Rgb([g, g, g])
    });
    let mut out = std::io::Cursor::new(Vec::new());
    img.write_to(&mut out, image::ImageFormat::Png)
        .expect("png");
    out.into_inner()
}

/// A demo ZIP of `frames` [`texture_frame`]s, frame k shifted by k × `step`, with a
/// `timestamps.csv` of 0.05 s a frame.
pub fn texture_demo_zip(w: u32, h: u32, frames: usize, step: [f64; 2]) -> Vec<u8> {
    let pngs: Vec<(String, Vec<u8>)> = (0..frames)
        .map(|k| {
            let d = [step[0] * k as f64, step[1] * k as f64];
            (format!("{k:03}.png"), texture_frame(w, h, d))
        })
        .collect();
    let times: String = (0..frames)
        .map(|k| format!("{}\n", k as f64 * 0.05))
        .collect();
    let mut entries: Vec<(&str, &[u8])> = pngs
        .iter()
        .map(|(n, b)| (n.as_str(), b.as_slice()))
        .collect();
    entries.push(("timestamps.csv", times.as_bytes()));
    zip_of(&entries)
}

/// Starts the server like [`Server::start`] and also hands back every line it writes to stderr
/// (each is passed through as well), for what it announces at start-up.
pub fn start_with_stderr(
    db_url: &str,
    data_dir: &std::path::Path,
    extra: &[&str],
) -> (Server, std::sync::mpsc::Receiver<String>) {
    let mut child = Server::spawn(db_url, data_dir, extra, Stdio::piped());
    let stderr = child.stderr.take().expect("stderr");
    let (tx, rx) = std::sync::mpsc::channel::<String>();
    std::thread::spawn(move || {
        for line in BufReader::new(stderr).lines().map_while(Result::ok) {
            eprintln!("{line}");
            tx.send(line).ok();
        }
    });
    (Server::from_child(child, db_url, data_dir), rx)
}

/// Starts the server with its log at `level` (a `GOALSMITH_LOG` filter) and hands back every
/// line it writes to stderr.
pub fn start_logging(
    db_url: &str,
    data_dir: &std::path::Path,
    level: &str,
) -> (Server, std::sync::mpsc::Receiver<String>) {
    let mut child = Server::command(db_url, data_dir, &[], Stdio::piped())
        .env("GOALSMITH_LOG", level)
        .spawn()
        .expect("spawn goalsmith serve");
    let stderr = child.stderr.take().expect("stderr");
    let (tx, rx) = std::sync::mpsc::channel::<String>();
    std::thread::spawn(move || {
        for line in BufReader::new(stderr).lines().map_while(Result::ok) {
            tx.send(line).ok();
        }
    });
    (Server::from_child(child, db_url, data_dir), rx)
}

/// Waits for an operation to end and returns it as `GET /api/operations/{id}` serves it (the
/// bound is a liveness guard, not a speed check).
pub async fn operation_done(s: &Server, token: &str, op: &str) -> Value {
    let until = std::time::Instant::now() + Duration::from_secs(600);
    loop {
        let (st, v) = s.get(&format!("/api/operations/{op}"), Some(token)).await;
        assert_eq!(st, StatusCode::OK, "{v}");
        if v["done"] == true {
            return v;
        }
        assert!(
            std::time::Instant::now() < until,
            "operation {op} still {v}"
        );
        tokio::time::sleep(Duration::from_millis(100)).await;
    }
}

/// The sample of `track` (a track as the API serves it) at `frame`.
pub fn sample_at(track: &Value, frame: i64) -> Value {
    track["samples"]
        .as_array()
        .expect("samples")
        .iter()
        .find(|s| s["frame"] == frame)
        .cloned()
        .unwrap_or_else(|| panic!("no sample at frame {frame} in {track}"))
}

/// The PNG tEXt chunks of a PNG, keyword → text.
pub fn png_text(bytes: &[u8]) -> Vec<(String, String)> {
    let decoder = png::Decoder::new(std::io::Cursor::new(bytes));
    let reader = decoder.read_info().expect("png");
    reader
        .info()
        .uncompressed_latin1_text
        .iter()
        .map(|t| (t.keyword.clone(), t.text.clone()))
        .collect()
}

/// Paths drawn by hand for reward fits: from each start straight to `goal`, a point every
/// `step` px, as `{"path": [[x, y], …]}` demos.
pub fn straight_paths(starts: &[[f64; 2]], goal: [f64; 2], step: f64) -> Vec<Value> {
    starts
        .iter()
        .map(|s| {
            let d = (goal[0] - s[0]).hypot(goal[1] - s[1]);
            let n = ((d / step).ceil() as usize).max(1);
            let pts: Vec<[f64; 2]> = (0..=n)
                .map(|k| {
                    let t = k as f64 / n as f64;
                    [s[0] + t * (goal[0] - s[0]), s[1] + t * (goal[1] - s[1])]
                })
                .collect();
            serde_json::json!({ "path": pts })
        })
        .collect()
}

/// What [`demo_track_fit`] makes.
pub struct DemoTrackFit {
    pub demo: String,
    pub track: String,
    pub track_operation: String,
    pub fit: String,
}

/// A demo of three textured 64 × 48 frames on `camera` (uploaded with `query`, e.g.
/// `?name=…`), one track labelled `label` followed to its end, and a reward fit of `frame`
/// started.
pub async fn demo_track_fit(
    s: &Server,
    editor: &str,
    camera: &str,
    frame: &str,
    query: &str,
    label: &str,
) -> DemoTrackFit {
    let (st, demo) = s
        .post_bytes(
            &format!("/api/cameras/{camera}/demos{query}"),
            Some(editor),
            "application/zip",
            texture_demo_zip(64, 48, 3, [1.0, 0.0]),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{demo}");
    let demo = demo["id"].as_str().expect("demo id").to_string();
    let (st, started) = s
        .post(
            &format!("/api/demos/{demo}/tracks"),
            Some(editor),
            &serde_json::json!({"label": label, "frame": 0, "x": 30.0, "y": 20.0}),
        )
        .await;
    assert_eq!(st, StatusCode::ACCEPTED, "{started}");
    let track_operation = started["operation_id"].as_str().expect("op").to_string();
    operation_done(s, editor, &track_operation).await;
    let fit_body = serde_json::json!({"frame_id": frame, "cell_px": 8,
        "features": [{"kind": "distance_to", "point": [40.0, 30.0]}],
        "demos": [{"path": [[5.0, 5.0], [20.0, 15.0], [40.0, 30.0]]}]});
    let (st, fit) = s.post("/api/reward-fits", Some(editor), &fit_body).await;
    assert_eq!(st, StatusCode::ACCEPTED, "{fit}");
    DemoTrackFit {
        demo,
        track: started["track_id"].as_str().expect("track id").to_string(),
        track_operation,
        fit: fit["id"].as_str().expect("fit id").to_string(),
    }
}
