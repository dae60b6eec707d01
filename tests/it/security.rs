//! The security list of the README, the parts not covered elsewhere: every body route refuses
//! oversized and malformed bodies with the contract's error and writes nothing; every route
//! that serves files refuses path traversal; every string a person or a script can store is
//! escaped on every page that shows it.

use crate::pages::join;
use crate::support::*;
use goalsmith::api::routes::{BodyLimit, table};
use reqwest::StatusCode;
use serde_json::{Value, json};
use tokio::io::{AsyncReadExt, AsyncWriteExt};

/// Small body limits, so every route can be sent one byte over its limit cheaply.
const LIMITS: &[(&str, &str)] = &[
    ("GOALSMITH_JSON_BODY_BYTES", "65536"),
    ("GOALSMITH_FRAME_UPLOAD_BYTES", "262144"),
    ("GOALSMITH_COST_BODY_BYTES", "524288"),
    ("GOALSMITH_DEMO_MAX_BYTES", "524288"),
];

fn limit_of(limit: &BodyLimit) -> usize {
    let of = |name: &str| {
        LIMITS
            .iter()
            .find(|(n, _)| *n == name)
            .and_then(|(_, v)| v.parse().ok())
            .unwrap()
    };
    match limit {
        BodyLimit::Json | BodyLimit::Default => of("GOALSMITH_JSON_BODY_BYTES"),
        BodyLimit::Frame => of("GOALSMITH_FRAME_UPLOAD_BYTES"),
        BodyLimit::Cost => of("GOALSMITH_COST_BODY_BYTES"),
        BodyLimit::Demo => of("GOALSMITH_DEMO_MAX_BYTES"),
        BodyLimit::Preview => goalsmith::api::routes::PREVIEW_BODY_BYTES,
    }
}

/// Everything a route's path can name, made once.
struct World {
    editor: String,
    goal: String,
    camera: String,
    frame: String,
    demo: String,
    track: String,
    set: String,
    operation: String,
    fit: String,
    etag: String,
}

async fn world(s: &Server) -> World {
    let (editor, camera, frame) = camera_and_frame(s, "bench", json!({})).await;
    let (st, rev) = s
        .post(
            "/api/goals",
            Some(&editor),
            &point_goal(&frame, "pot to mat"),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{rev}");
    let goal = rev["goal_id"].as_str().unwrap().to_string();
    let resp = s
        .client
        .get(s.url(&format!("/api/goals/{goal}")))
        .bearer_auth(&editor)
        .send()
        .await
        .unwrap();
    let etag = etag(&resp).unwrap();
    let (st, set) = s
        .post(
            "/api/goal-sets",
            Some(&editor),
            &json!({"name": "suite", "items": [{"goal_id": goal, "revision": 1}]}),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{set}");
    let made = demo_track_fit(s, &editor, &camera, &frame, "", "rim").await;
    World {
        editor,
        goal,
        camera,
        frame,
        demo: made.demo,
        track: made.track,
        set: set["id"].as_str().unwrap().to_string(),
        operation: made.track_operation,
        fit: made.fit,
        etag,
    }
}

impl World {
    /// The concrete path of a route's pattern.
    fn path(&self, pattern: &str) -> String {
        let id = match pattern.split('/').nth(2) {
            Some("goals") => &self.goal,
            Some("cameras") => &self.camera,
            Some("frames") => &self.frame,
            Some("demos") => &self.demo,
            Some("goal-sets") => &self.set,
            Some("operations") => &self.operation,
            Some("reward-fits") => &self.fit,
            _ => "",
        };
        pattern
            .replace("{id}", id)
            .replace("{track_id}", &self.track)
            .replace("{n}", "1")
            .replace("{i}", "0")
            .replace("{frame}", "1")
    }

    /// What the team holds, to see that refused bodies wrote nothing.
    async fn counts(&self, s: &Server) -> Vec<usize> {
        let mut out = Vec::new();
        for path in [
            "/api/goals".to_string(),
            "/api/cameras".to_string(),
            format!("/api/cameras/{}/frames", self.camera),
            format!("/api/cameras/{}/demos", self.camera),
            "/api/goal-sets".to_string(),
            "/api/reward-fits".to_string(),
            format!("/api/goals/{}/revisions", self.goal),
            format!("/api/goals/{}/outcomes", self.goal),
        ] {
            let (st, v) = s.get(&path, Some(&self.editor)).await;
            assert_eq!(st, StatusCode::OK, "{path}: {v}");
            let n = v["items"]
                .as_array()
                .map(Vec::len)
                .or_else(|| v["count"].as_u64().map(|n| n as usize))
                .unwrap_or_else(|| v.to_string().len());
            out.push(n);
        }
        out
    }
}

fn media_of(path: &str) -> &'static str {
    if path.ends_with("/frames") {
        "image/png"
    } else if path.ends_with("/demos") {
        "application/zip"
    } else {
        "application/json"
    }
}

fn assert_contract_error(what: &str, st: StatusCode, body: &Value) {
    assert!(st.is_client_error(), "{what}: {st} {body}");
    assert!(
        body["error"]["code"]
            .as_str()
            .is_some_and(|c| !c.is_empty())
            && body["error"]["message"].is_string(),
        "{what}: {st} without the contract's body: {body}"
    );
}

/// Every route that takes a body, one byte over its limit (413), malformed (422), of the wrong
/// media type (415) and empty (4xx): always the contract's error body, never a 5xx, and
/// nothing of it stored.
async fn bodies_on_every_route(s: Server) {
    let w = world(&s).await;
    let before = w.counts(&s).await;
    let mut seen = 0;
    for route in table() {
        let verb = route.verb.as_str();
        // Routes that read no body (a cancel) ignore one.
        if (verb != "POST" && verb != "PUT") || matches!(route.limit, BodyLimit::Default) {
            continue;
        }
        seen += 1;
        let path = w.path(route.path);
        let media = media_of(&path);
        let send = |body: Vec<u8>, ct: &str| {
            let mut req = match verb {
                "PUT" => s.client.put(s.url(&path)),
                _ => s.client.post(s.url(&path)),
            }
            .bearer_auth(&w.editor)
            .header("content-type", ct.to_string())
            .body(body);
            if route.path == "/api/goals/{id}" {
                req = req.header("if-match", w.etag.clone());
            }
            async move {
                let resp = req.send().await.expect("send");
                into_json(resp).await
            }
        };
        let what = format!("{verb} {}", route.path);
        // One byte over the limit, announced by Content-Length: the refusal comes before the
        // body is read, so the body is not sent at all (as a client waiting for 100-continue).
        let over = limit_of(&route.limit) + 1;
        let mut head = format!(
            "{verb} {path} HTTP/1.1\r\nAuthorization: Bearer {}\r\nContent-Type: {media}\r\n\
             Content-Length: {over}\r\n",
            w.editor
        );
        if route.path == "/api/goals/{id}" {
            head.push_str(&format!("If-Match: {}\r\n", w.etag));
        }
        let (st, text) = raw_exchange(&s.base, &head).await;
        let body: Value = serde_json::from_str(text.split("\r\n\r\n").nth(1).unwrap_or(""))
            .unwrap_or(Value::Null);
        assert_eq!(st, 413, "{what} over the limit: {text}");
        assert_eq!(body["error"]["code"], "too_large", "{what}");
        // Malformed.
        let broken: &[u8] = match media {
            "application/json" => b"{\"name\": \"half",
            _ => b"\x89PNG\r\n\x1a\n not really",
        };
        let (st, body) = send(broken.to_vec(), media).await;
        assert_contract_error(&format!("{what} malformed"), st, &body);
        if media == "application/json" {
            assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY, "{what}: {body}");
        }
        // Trailing data after a JSON value, and an array for an object.
        if media == "application/json" {
            for (label, bad) in [("trailing", &b"{} {}"[..]), ("array", &b"[]"[..])] {
                let (st, body) = send(bad.to_vec(), media).await;
                assert_contract_error(&format!("{what} {label}"), st, &body);
            }
        }
        // A media type the route does not take.
        let (st, body) = send(b"hello".to_vec(), "text/plain").await;
        assert_contract_error(&format!("{what} text/plain"), st, &body);
        // Empty.
        let (st, body) = send(Vec::new(), media).await;
        assert_contract_error(&format!("{what} empty"), st, &body);
    }
    assert!(seen >= 12, "walked {seen} body routes");
    assert_eq!(
        w.counts(&s).await,
        before,
        "a refused body changed what is stored"
    );
    let (st, _) = s.get("/healthz", None).await;
    assert_eq!(st, StatusCode::OK);
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn every_body_route_refuses_oversized_and_malformed_bodies_sqlite() {
    let Some(db) = fresh_db(Db::Sqlite, "bodies").await else {
        return;
    };
    bodies_on_every_route(Server::start_with_env(&db.url, &db.data_dir, &[], LIMITS)).await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn every_body_route_refuses_oversized_and_malformed_bodies_postgres() {
    let Some(db) = fresh_db(Db::Postgres, "bodies").await else {
        return;
    };
    bodies_on_every_route(Server::start_with_env(&db.url, &db.data_dir, &[], LIMITS)).await;
}

/// Sends a request head as it is (`Host` and `Connection: close` added) and reads one whole
/// response, by its `Content-Length`.
pub async fn raw_exchange(base: &str, head: &str) -> (u16, String) {
    let addr = base.trim_start_matches("http://");
    let mut stream = tokio::net::TcpStream::connect(addr).await.expect("connect");
    let req = format!("{head}Host: {addr}\r\nConnection: close\r\n\r\n");
    stream.write_all(req.as_bytes()).await.expect("write");
    let mut buf = Vec::new();
    let mut chunk = [0u8; 4096];
    loop {
        let text = String::from_utf8_lossy(&buf).to_string();
        if let Some(end) = text.find("\r\n\r\n") {
            let length = text[..end]
                .lines()
                .find_map(|l| {
                    l.to_ascii_lowercase()
                        .strip_prefix("content-length:")
                        .and_then(|v| v.trim().parse::<usize>().ok())
                })
                .unwrap_or(0);
            if buf.len() >= end + 4 + length {
                break;
            }
        }
        let n = tokio::time::timeout(std::time::Duration::from_secs(30), stream.read(&mut chunk))
            .await
            .expect("the server answers")
            .expect("read");
        if n == 0 {
            break;
        }
        buf.extend_from_slice(&chunk[..n]);
    }
    let text = String::from_utf8_lossy(&buf).to_string();
    let status = text
        .split_whitespace()
        .nth(1)
        .and_then(|s| s.parse().ok())
        .unwrap_or(0);
    (status, text)
}

/// Sends one request line as it is (no URL normalisation by a client library) and returns the
/// status and the body.
async fn raw_get(base: &str, target: &str, token: Option<&str>) -> (u16, String) {
    let addr = base.trim_start_matches("http://");
    let mut stream = tokio::net::TcpStream::connect(addr).await.expect("connect");
    let auth = token
        .map(|t| format!("Authorization: Bearer {t}\r\n"))
        .unwrap_or_default();
    let req = format!("GET {target} HTTP/1.1\r\nHost: {addr}\r\n{auth}Connection: close\r\n\r\n");
    stream.write_all(req.as_bytes()).await.expect("write");
    let mut buf = Vec::new();
    stream.read_to_end(&mut buf).await.expect("read");
    let text = String::from_utf8_lossy(&buf).to_string();
    let status = text
        .split_whitespace()
        .nth(1)
        .and_then(|s| s.parse().ok())
        .unwrap_or(0);
    (status, text)
}

/// Traversal spellings, each put where a route takes a name or an id.
const TRAVERSALS: &[&str] = &[
    "..",
    "../Cargo.toml",
    "..%2FCargo.toml",
    "..%2fCargo.toml",
    "%2e%2e%2fCargo.toml",
    "%2E%2E/Cargo.toml",
    "..%5cCargo.toml",
    "..\\Cargo.toml",
    "%252e%252e%252fCargo.toml",
    "....//Cargo.toml",
    "..%00/Cargo.toml",
    "%2e%2e%2f%2e%2e%2f%2e%2e%2fetc%2fpasswd",
    "../../../../etc/passwd",
    "..;/Cargo.toml",
    "%c0%ae%c0%ae/Cargo.toml",
    ".%2e/Cargo.toml",
    "%2e./Cargo.toml",
    "/etc/passwd",
    "%2Fetc%2Fpasswd",
    "file:%2F%2F%2Fetc%2Fpasswd",
];

/// Every GET route that names something in its path (files, images, maps, bundles) and the
/// static files: each traversal spelling is a 4xx, never a file of the machine or the
/// repository.
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn no_route_serves_a_file_by_traversal() {
    let Some((s, _db)) = server(Db::Sqlite, "traversal").await else {
        return;
    };
    let w = world(&s).await;
    let mut patterns: Vec<String> = table()
        .into_iter()
        .filter(|r| r.verb.as_str() == "GET" && r.path.contains('{'))
        .map(|r| r.path.to_string())
        .collect();
    patterns.push("/static/{name}".into());
    let mut tried = 0;
    for pattern in &patterns {
        // Each parameter in turn takes the traversal; the others are real.
        let params: Vec<&str> = pattern
            .split('/')
            .filter(|seg| seg.starts_with('{'))
            .collect();
        for param in params {
            for t in TRAVERSALS {
                let target = w.path(&pattern.replace(param, t));
                let (status, text) = raw_get(&s.base, &target, Some(&w.editor)).await;
                tried += 1;
                assert!(
                    (400..500).contains(&status),
                    "{target}: {status}\n{}",
                    text.chars().take(300).collect::<String>()
                );
                for leak in ["root:x:0", "[workspace]", "[package]"] {
                    assert!(!text.contains(leak), "{target} served a file: {leak}");
                }
            }
        }
    }
    assert!(tried >= 20 * 25, "tried {tried}");
}

/// A string with every character that matters in HTML, in attributes and in scripts.
const HOSTILE: &str = "<img src=x onerror=alert(1)>\"'</script><b>&amp;";

fn assert_escaped(page: &str, body: &str) {
    assert!(
        !body.contains("<img src=x onerror") && !body.contains("</script><b>"),
        "{page} shows a stored string unescaped"
    );
}

/// Every string a person or a script stores — camera, goal, term, goal set, demo, track, team,
/// token and invitation names, display names, outcome notes — goes through every page that
/// shows it escaped.
async fn hostile_strings(kind: Db) {
    let Some(db) = fresh_db(kind, "hostile_strings").await else {
        return;
    };
    let (s, link) = start_with_link(&db.url, &db.data_dir, &[]);
    let (mut owner, csrf) = join(&s.base, &link, "hazel", HOSTILE, "a long password 1").await;
    let editor = s.token("my team", "editor");
    let (st, cam) = s
        .post(
            "/api/cameras",
            Some(&editor),
            &json!({"name": HOSTILE, "width": 64, "height": 48}),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{cam}");
    let cam = cam["id"].as_str().unwrap().to_string();
    let (st, frame) = s
        .post_bytes(
            &format!("/api/cameras/{cam}/frames"),
            Some(&editor),
            "image/png",
            png(64, 48, 9),
        )
        .await;
    assert!(st.is_success(), "{frame}");
    let frame = frame["id"].as_str().unwrap().to_string();
    let mut goal_body = point_goal(&frame, HOSTILE);
    goal_body["terms"][0]["label"] = json!(HOSTILE);
    let (st, rev) = s.post("/api/goals", Some(&editor), &goal_body).await;
    assert_eq!(st, StatusCode::CREATED, "{rev}");
    let goal = rev["goal_id"].as_str().unwrap().to_string();
    let (st, _) = s
        .post(
            &format!("/api/goals/{goal}/revisions/1/outcomes"),
            Some(&editor),
            &json!({"final_points": [[20.0, 25.0]], "note": HOSTILE}),
        )
        .await;
    assert!(st.is_success());
    let (st, set) = s
        .post(
            "/api/goal-sets",
            Some(&editor),
            &json!({"name": HOSTILE, "items": [{"goal_id": goal, "revision": 1}]}),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{set}");
    let set = set["id"].as_str().unwrap().to_string();
    let name = percent_encoding::utf8_percent_encode(HOSTILE, percent_encoding::NON_ALPHANUMERIC);
    let made = demo_track_fit(&s, &editor, &cam, &frame, &format!("?name={name}"), HOSTILE).await;
    let (demo, fit) = (made.demo, made.fit);
    for (path, fields) in [
        ("/team/tokens", vec![("label", HOSTILE), ("role", "viewer")]),
        ("/team/invites", vec![("note", HOSTILE), ("role", "viewer")]),
        ("/team/name", vec![("name", HOSTILE)]),
    ] {
        let mut all = vec![("csrf", csrf.as_str())];
        all.extend(fields);
        let page = owner.post_form(path, &all).await;
        assert!(
            page.status.is_success() || page.status.is_redirection(),
            "{path}: {}",
            page.body
        );
        assert_escaped(path, &page.body);
    }
    let pages = [
        "/".to_string(),
        format!("/goals/{goal}"),
        format!("/goals/{goal}/history"),
        format!("/goals/{goal}/compare?a=1&b=1"),
        format!("/goals/new?frame={frame}"),
        "/goal-sets".to_string(),
        format!("/goal-sets/{set}"),
        format!("/demos/{demo}"),
        format!("/fits/new?camera={cam}&demo={demo}"),
        format!("/fits/{fit}"),
        "/team".to_string(),
        "/team/changes".to_string(),
        "/account".to_string(),
    ];
    for path in &pages {
        let page = owner.get(path).await;
        assert_eq!(page.status, StatusCode::OK, "{path}: {}", page.body);
        assert_escaped(path, &page.body);
    }
    // The strings were stored as sent (escaping is the page's, not a change to the data).
    let (_, g) = s.get(&format!("/api/goals/{goal}"), Some(&editor)).await;
    assert_eq!(g["name"], HOSTILE);
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn hostile_strings_are_escaped_on_every_page_sqlite() {
    hostile_strings(Db::Sqlite).await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn hostile_strings_are_escaped_on_every_page_postgres() {
    hostile_strings(Db::Postgres).await;
}
