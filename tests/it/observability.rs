//! What an operator sees of the running server: request ids in headers and error bodies, the
//! security headers of every response, `/metrics` in the Prometheus text format, and the audit
//! log of every change (API and page, on both databases).

use crate::pages::{Person, csrf_in, join};
use crate::support::*;
use reqwest::StatusCode;
use serde_json::{Value, json};

fn header(resp: &reqwest::Response, name: &str) -> Option<String> {
    resp.headers()
        .get(name)
        .and_then(|v| v.to_str().ok())
        .map(str::to_string)
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn error_bodies_and_headers_carry_the_request_id() {
    let Some((s, _db)) = server(Db::Sqlite, "request_ids").await else {
        return;
    };
    let viewer = s.token("ids", "viewer");
    let missing = "/api/goals/00000000-0000-4000-8000-000000000000";
    // A generated id: the header and the body say the same.
    let resp = s
        .client
        .get(s.url(missing))
        .bearer_auth(&viewer)
        .send()
        .await
        .unwrap();
    assert_eq!(resp.status(), StatusCode::NOT_FOUND);
    let id = header(&resp, "x-request-id").expect("every response names its request");
    assert!(uuid::Uuid::parse_str(&id).is_ok(), "{id}");
    let body: Value = resp.json().await.unwrap();
    assert_eq!(body["error"]["request_id"], id.as_str(), "{body}");
    assert_eq!(body["error"]["code"], "not_found");

    // The client's own id is kept when it is a short token; anything else is replaced.
    for (sent, kept) in [
        ("bench-7.retry_2", true),
        ("has space", false),
        (&*"x".repeat(65), false),
        (&*"y".repeat(64), true),
    ] {
        let resp = s
            .client
            .get(s.url(missing))
            .bearer_auth(&viewer)
            .header("x-request-id", sent)
            .send()
            .await
            .unwrap();
        let id = header(&resp, "x-request-id").unwrap();
        let body: Value = resp.json().await.unwrap();
        assert_eq!(body["error"]["request_id"], id.as_str());
        assert_eq!(id == sent, kept, "{sent:?} -> {id:?}");
    }

    // The framework's own errors too: 405, 413, 401 and a 404 under /static/.
    let resp = s.client.delete(s.url("/healthz")).send().await.unwrap();
    assert_eq!(resp.status(), StatusCode::METHOD_NOT_ALLOWED);
    let id = header(&resp, "x-request-id").unwrap();
    let body: Value = resp.json().await.unwrap();
    assert_eq!(body["error"]["request_id"], id.as_str(), "{body}");
    let (st, text) = crate::security::raw_exchange(
        &s.base,
        &format!(
            "POST /api/cameras HTTP/1.1\r\nAuthorization: Bearer {viewer}\r\n\
             Content-Type: application/json\r\nContent-Length: {}\r\n",
            17 << 20
        ),
    )
    .await;
    assert_eq!(st, 413, "{text}");
    let body: Value = serde_json::from_str(text.split("\r\n\r\n").nth(1).unwrap()).unwrap();
    assert!(body["error"]["request_id"].is_string(), "{body}");
    for path in ["/api/goals", "/static/nothing-here.js"] {
        let resp = s.client.get(s.url(path)).send().await.unwrap();
        assert!(resp.status().is_client_error(), "{path}");
        let id = header(&resp, "x-request-id").unwrap();
        let body: Value = resp.json().await.unwrap();
        assert_eq!(body["error"]["request_id"], id.as_str(), "{path}: {body}");
    }
    // Success bodies are left as they are.
    let (st, health) = s.get("/healthz", None).await;
    assert_eq!(st, StatusCode::OK);
    assert_eq!(health, json!({"status": "ok"}));
}

/// Requests hyper cannot parse never reach the router; its own answers (400, 414) still carry
/// the contract's body and the headers of every response, and the connection closes. (Its 431,
/// for a head over its read buffer, is replaced the same way, see `wire`'s unit tests; over a
/// socket the unread rest of such a request makes the close a reset, which a client may see
/// before the answer.)
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn unreadable_requests_get_the_contract_body() {
    let Some((s, _db)) = server(Db::Sqlite, "unreadable_requests").await else {
        return;
    };
    let long = format!("/api/goals/{}", "g".repeat(70 * 1024));
    for (what, head, status, code) in [
        // Past hyper's 64 KiB URI limit; a URI just under it reaches the router (404 below).
        (
            "a 70 KiB URI",
            format!("GET {long} HTTP/1.1\r\n"),
            414,
            "uri_too_long",
        ),
        (
            "a header without a colon",
            "GET /healthz HTTP/1.1\r\nno colon here\r\n".to_string(),
            400,
            "bad_request",
        ),
        (
            "a control character in the path",
            "GET /he\x01lthz HTTP/1.1\r\n".to_string(),
            400,
            "bad_request",
        ),
    ] {
        let (st, text) = crate::security::raw_exchange(&s.base, &head).await;
        assert_eq!(st, status, "{what}: {text:.300}");
        let (h, body) = text.split_once("\r\n\r\n").expect("head and body");
        let h = h.to_ascii_lowercase();
        for line in [
            "content-type: application/json",
            "x-content-type-options: nosniff",
            "x-frame-options: deny",
            "connection: close",
        ] {
            assert!(h.contains(line), "{what}: {line} missing in {h}");
        }
        let v: Value = serde_json::from_str(body).expect("a JSON body");
        assert_eq!(v["error"]["code"], code, "{what}: {v}");
        let id = h
            .lines()
            .find_map(|l| l.strip_prefix("x-request-id: "))
            .expect("x-request-id");
        assert_eq!(v["error"]["request_id"], id, "{what}");
    }
    // Just under the limit, the router answers (401: no token), and the server serves on.
    let under = format!("/api/goals/{}", "g".repeat(60 * 1024));
    let (st, text) =
        crate::security::raw_exchange(&s.base, &format!("GET {under} HTTP/1.1\r\n")).await;
    assert_eq!(st, 401, "{text:.300}");
    assert!(text.contains("\"code\":\"unauthorized\""), "{text:.300}");
    let (st, health) = s.get("/healthz", None).await;
    assert_eq!(st, StatusCode::OK, "{health}");
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn every_response_carries_the_security_headers() {
    let Some((s, _db)) = server(Db::Sqlite, "security_headers").await else {
        return;
    };
    let viewer = s.token("headers", "viewer");
    for (path, token) in [
        ("/signin", None),
        ("/", None),
        ("/no-such-page", None),
        ("/static/site.css", None),
        ("/static/editor.js", None),
        ("/static/nothing-here.js", None),
        ("/healthz", None),
        ("/api/goals", None),
        ("/api/goals", Some(viewer.as_str())),
        ("/api/openapi.json", None),
        ("/metrics", None),
    ] {
        let mut req = s.client.get(s.url(path));
        if let Some(t) = token {
            req = req.bearer_auth(t);
        }
        let resp = req.send().await.unwrap();
        let csp = header(&resp, "content-security-policy")
            .unwrap_or_else(|| panic!("{path}: no Content-Security-Policy"));
        for part in [
            "default-src 'self'",
            "script-src 'self'",
            "object-src 'none'",
            "frame-ancestors 'none'",
            "base-uri 'none'",
            "form-action 'self'",
        ] {
            assert!(csp.contains(part), "{path}: {csp} lacks {part}");
        }
        assert!(!csp.contains("unsafe-inline"), "{path}: {csp}");
        assert!(!csp.contains("unsafe-eval"), "{path}: {csp}");
        assert_eq!(
            header(&resp, "x-content-type-options").as_deref(),
            Some("nosniff"),
            "{path}"
        );
        assert_eq!(
            header(&resp, "x-frame-options").as_deref(),
            Some("DENY"),
            "{path}"
        );
        assert_eq!(
            header(&resp, "referrer-policy").as_deref(),
            Some("same-origin"),
            "{path}"
        );
    }
}

/// The policy forbids inline script, so the templates must hold none: no `<script>` without
/// `src`, no `on…=` handler attributes, no `javascript:` URLs, no inline `style` attributes.
#[test]
fn templates_hold_no_inline_script_or_style() {
    let dir = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("web/templates");
    let mut seen = 0;
    for entry in std::fs::read_dir(&dir).unwrap() {
        let path = entry.unwrap().path();
        let html = std::fs::read_to_string(&path).unwrap().to_ascii_lowercase();
        seen += 1;
        for (i, _) in html.match_indices("<script") {
            let tag: String = html[i..].chars().take_while(|c| *c != '>').collect();
            assert!(
                tag.contains(" src="),
                "{}: inline script {tag}",
                path.display()
            );
        }
        assert!(!html.contains("javascript:"), "{}", path.display());
        assert!(
            !html.contains(" style="),
            "{}: inline style",
            path.display()
        );
        let bytes = html.as_bytes();
        for (i, _) in html.match_indices(" on") {
            let name: String = html[i + 1..]
                .chars()
                .take_while(|c| c.is_ascii_alphabetic())
                .collect();
            let after = bytes.get(i + 1 + name.len()).copied();
            assert!(
                !(name.len() > 2 && after == Some(b'=')),
                "{}: handler attribute {name}",
                path.display()
            );
        }
    }
    assert!(seen >= 10, "read {seen} templates");
}

/// A parsed sample: name, labels, value.
type Sample = (String, Vec<(String, String)>, f64);

/// One sample line of the exposition format: `name{labels} value`.
fn sample(line: &str) -> Option<Sample> {
    let (head, value) = line.rsplit_once(' ')?;
    let value: f64 = match value {
        "+Inf" => f64::INFINITY,
        v => v.parse().ok()?,
    };
    let (name, labels) = match head.split_once('{') {
        None => (head.to_string(), Vec::new()),
        Some((name, rest)) => {
            let rest = rest.strip_suffix('}')?;
            let mut labels = Vec::new();
            for pair in rest.split("\",") {
                let (k, v) = pair.split_once("=\"")?;
                labels.push((k.to_string(), v.trim_end_matches('"').to_string()));
            }
            (name.to_string(), labels)
        }
    };
    let ok_name = name
        .chars()
        .all(|c| c.is_ascii_alphanumeric() || c == '_' || c == ':');
    ok_name.then_some((name, labels, value))
}

fn value_of(samples: &[Sample], name: &str, want: &[(&str, &str)]) -> Option<f64> {
    samples
        .iter()
        .find(|(n, labels, _)| {
            n == name
                && want
                    .iter()
                    .all(|(k, v)| labels.iter().any(|(lk, lv)| lk == k && lv == v))
        })
        .map(|s| s.2)
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn metrics_count_requests_operations_and_the_pool() {
    let Some((s, _db)) = server(Db::Sqlite, "metrics").await else {
        return;
    };
    let (editor, cam, _frame) = camera_and_frame(&s, "metrics", json!({})).await;
    for _ in 0..3 {
        assert_eq!(s.get("/healthz", None).await.0, StatusCode::OK);
    }
    let ids = [
        "00000000-0000-4000-8000-000000000001",
        "00000000-0000-4000-8000-000000000002",
    ];
    for id in ids {
        let (st, _) = s.get(&format!("/api/goals/{id}"), Some(&editor)).await;
        assert_eq!(st, StatusCode::NOT_FOUND);
    }
    // One operation run to its end.
    let (st, demo) = s
        .post_bytes(
            &format!("/api/cameras/{cam}/demos"),
            Some(&editor),
            "application/zip",
            texture_demo_zip(64, 48, 3, [1.0, 0.0]),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{demo}");
    let (st, started) = s
        .post(
            &format!("/api/demos/{}/tracks", demo["id"].as_str().unwrap()),
            Some(&editor),
            &json!({"label": "rim", "frame": 0, "x": 30.0, "y": 20.0}),
        )
        .await;
    assert_eq!(st, StatusCode::ACCEPTED, "{started}");
    let done = operation_done(&s, &editor, started["operation_id"].as_str().unwrap()).await;
    assert_eq!(done["state"], "succeeded", "{done}");

    let resp = s.client.get(s.url("/metrics")).send().await.unwrap();
    assert_eq!(resp.status(), StatusCode::OK);
    assert!(
        header(&resp, "content-type")
            .unwrap()
            .starts_with("text/plain; version=0.0.4"),
    );
    let text = resp.text().await.unwrap();
    // Every line is a comment of the format or a well-formed sample.
    let mut samples = Vec::new();
    for line in text.lines() {
        if line.starts_with("# HELP ") || line.starts_with("# TYPE ") {
            continue;
        }
        samples.push(sample(line).unwrap_or_else(|| panic!("not a sample line: {line:?}")));
    }
    let get = |name: &str, labels: &[(&str, &str)]| value_of(&samples, name, labels);
    let healthz = [("method", "GET"), ("route", "/healthz")];
    assert!(
        get(
            "goalsmith_http_requests_total",
            &[healthz[0], healthz[1], ("status", "200")]
        )
        .is_some_and(|n| n >= 3.0),
        "{text}"
    );
    // Labelled by the route's pattern, never by the ids clients send.
    let goal = [("method", "GET"), ("route", "/api/goals/{id}")];
    assert_eq!(
        get(
            "goalsmith_http_requests_total",
            &[goal[0], goal[1], ("status", "404")]
        ),
        Some(2.0)
    );
    for id in ids {
        assert!(!text.contains(id), "{id} leaked into the metrics");
    }
    // The histogram: cumulative buckets ending in the count.
    let count = get("goalsmith_http_request_duration_seconds_count", &healthz).unwrap();
    let inf = get(
        "goalsmith_http_request_duration_seconds_bucket",
        &[healthz[0], healthz[1], ("le", "+Inf")],
    )
    .unwrap();
    assert_eq!(count, inf);
    let mut last = 0.0;
    for (n, labels, v) in &samples {
        if n == "goalsmith_http_request_duration_seconds_bucket"
            && labels.iter().any(|(k, v)| k == "route" && v == "/healthz")
        {
            assert!(*v >= last, "buckets must not decrease");
            last = *v;
        }
    }
    assert_eq!(
        get(
            "goalsmith_operations",
            &[("kind", "track"), ("state", "succeeded")]
        ),
        Some(1.0),
        "{text}"
    );
    let in_use = get("goalsmith_db_pool_connections", &[("state", "in_use")]).unwrap();
    let idle = get("goalsmith_db_pool_connections", &[("state", "idle")]).unwrap();
    let max = get("goalsmith_db_pool_max_connections", &[]).unwrap();
    assert!(in_use + idle <= max && max >= 1.0, "{in_use} {idle} {max}");
    assert!(get("process_resident_memory_bytes", &[]).is_some_and(|b| b > 1e6));
    assert!(get("goalsmith_heavy_running", &[]).is_some());
}

/// The audit log: every successful change by a token or a session, readable by owners only, in
/// pages that follow one another, on the API and the team's page.
async fn audit_log(kind: Db) {
    let Some(db) = fresh_db(kind, "audit_log").await else {
        return;
    };
    let (s, link) = start_with_link(&db.url, &db.data_dir, &[]);
    let (mut owner, csrf) = join(&s.base, &link, "hazel", "Hazel Moss", "a long password 1").await;
    let editor = s.token("my team", "editor");
    let viewer = s.token("my team", "viewer");
    let owner_token = s.token("my team", "owner");

    let (st, cam) = s
        .post(
            "/api/cameras",
            Some(&editor),
            &json!({"name": "bench overhead", "width": 64, "height": 48}),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{cam}");
    let cam = cam["id"].as_str().unwrap().to_string();
    // Refused writes leave nothing: a viewer's, and an invalid one.
    let (st, _) = s
        .post(
            "/api/cameras",
            Some(&viewer),
            &json!({"name": "x", "width": 64, "height": 48}),
        )
        .await;
    assert_eq!(st, StatusCode::FORBIDDEN);
    let (st, _) = s
        .post(
            "/api/cameras",
            Some(&editor),
            &json!({"name": "x", "width": -1}),
        )
        .await;
    assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY);
    let (st, frame) = s
        .post_bytes(
            &format!("/api/cameras/{cam}/frames"),
            Some(&editor),
            "image/png",
            png(64, 48, 3),
        )
        .await;
    assert!(st.is_success(), "{frame}");
    let frame = frame["id"].as_str().unwrap().to_string();
    let (st, rev) = s
        .post(
            "/api/goals",
            Some(&editor),
            &point_goal(&frame, "pot to mat"),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{rev}");
    // Scoring changes nothing and leaves no entry.
    let (st, scored) = s
        .post(
            &format!(
                "/api/goals/{}/revisions/1/cost",
                rev["goal_id"].as_str().unwrap()
            ),
            Some(&editor),
            &json!({"points": [[[[12.0, 13.0]]]]}),
        )
        .await;
    assert_eq!(st, StatusCode::OK, "{scored}");
    // A change by the signed-in owner through a page form.
    let page = owner
        .post_form(
            "/team/invites",
            &[("csrf", &csrf), ("role", "viewer"), ("note", "Rosa")],
        )
        .await;
    assert!(page.status.is_success(), "{}", page.body);

    // Owners only.
    let (st, body) = s.get("/api/audit-log", Some(&viewer)).await;
    assert_eq!(st, StatusCode::FORBIDDEN, "{body}");
    let (st, _) = s.get("/api/audit-log", Some(&editor)).await;
    assert_eq!(st, StatusCode::FORBIDDEN);
    let other = s.token("seedlings", "owner");
    let (st, theirs) = s.get("/api/audit-log", Some(&other)).await;
    assert_eq!(st, StatusCode::OK);
    assert_eq!(theirs["items"], json!([]), "another team's log is its own");

    let (st, log) = s.get("/api/audit-log", Some(&owner_token)).await;
    assert_eq!(st, StatusCode::OK, "{log}");
    let items = log["items"].as_array().unwrap();
    let what: Vec<String> = items
        .iter()
        .map(|e| {
            format!(
                "{} {} {}",
                e["method"].as_str().unwrap(),
                e["route"].as_str().unwrap(),
                e["status"]
            )
        })
        .collect();
    // Newest first: the invitation, the goal, the frame, the camera, the owner joining.
    assert_eq!(
        what,
        [
            "POST /team/invites 201",
            "POST /api/goals 201",
            "POST /api/cameras/{id}/frames 201",
            "POST /api/cameras 201",
            "POST /welcome/{token} 303",
        ],
        "{log}"
    );
    // The invitation's secret stays out of the log.
    assert_eq!(items[4]["path"], "/welcome/{token}");
    let secret = link.rsplit('/').next().unwrap();
    assert!(
        secret.len() >= 32 && !log.to_string().contains(secret),
        "{log}"
    );
    let by_token = &items[1];
    assert_eq!(by_token["credential"], "token");
    assert_eq!(by_token["role"], "editor");
    assert_eq!(by_token["address"], "127.0.0.1");
    assert_eq!(by_token["path"], "/api/goals");
    let by_person = &items[0];
    assert_eq!(by_person["credential"], "session");
    assert_eq!(by_person["role"], "owner");
    assert_eq!(by_person["actor"], "Hazel Moss (hazel)");
    assert_eq!(items[2]["path"], format!("/api/cameras/{cam}/frames"));
    let times: Vec<i64> = items.iter().map(|e| e["at_ms"].as_i64().unwrap()).collect();
    assert!(times.windows(2).all(|w| w[0] >= w[1]), "{times:?}");

    // Pages of two follow one another without gaps or repeats.
    let mut seen = Vec::new();
    let mut before: Option<String> = None;
    loop {
        let path = match &before {
            None => "/api/audit-log?limit=2".to_string(),
            Some(b) => format!("/api/audit-log?limit=2&before={b}"),
        };
        let (st, page) = s.get(&path, Some(&owner_token)).await;
        assert_eq!(st, StatusCode::OK, "{page}");
        for e in page["items"].as_array().unwrap() {
            seen.push(e["id"].as_str().unwrap().to_string());
        }
        match page["next"].as_str() {
            Some(n) => before = Some(n.to_string()),
            None => break,
        }
    }
    let all: Vec<String> = items
        .iter()
        .map(|e| e["id"].as_str().unwrap().to_string())
        .collect();
    assert_eq!(seen, all);
    for bad in [
        "limit=0",
        "limit=201",
        "before=yesterday",
        "before=12.not-an-id",
        "colour=red",
    ] {
        let (st, body) = s
            .get(&format!("/api/audit-log?{bad}"), Some(&owner_token))
            .await;
        assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY, "{bad}: {body}");
    }

    // The page, for owners, with what people typed escaped.
    let page = owner.get("/team").await;
    assert!(
        page.body.contains("href=\"/team/changes\""),
        "the team page links the log"
    );
    let page = owner.get("/team/changes").await;
    assert_eq!(page.status, StatusCode::OK, "{}", page.body);
    assert!(page.body.contains("POST /team/invites"), "{}", page.body);
    assert!(
        page.body
            .contains(&format!("POST /api/cameras/{cam}/frames"))
    );
    assert!(page.body.contains("Hazel Moss (hazel)"));
    let mut stranger = Person::new(&s.base);
    let page = stranger.get("/team/changes").await;
    assert_eq!(page.status, StatusCode::SEE_OTHER, "sent to sign in");
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn audit_log_sqlite() {
    audit_log(Db::Sqlite).await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn audit_log_postgres() {
    audit_log(Db::Postgres).await;
}

/// Secrets never reach the log, even at debug level: API tokens (accepted and refused), the
/// start-up link's secret, passwords, session cookies and CSRF tokens.
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn secrets_stay_out_of_the_log() {
    let Some(db) = fresh_db(Db::Sqlite, "secret_logs").await else {
        return;
    };
    let (s, lines) = start_logging(&db.url, &db.data_dir, "debug");
    let token = s.token("my team", "editor");
    let wrong = format!("{token}x");
    let (st, _) = s.get("/api/cameras", Some(&token)).await;
    assert_eq!(st, StatusCode::OK);
    let (st, _) = s.get("/api/cameras", Some(&wrong)).await;
    assert_eq!(st, StatusCode::UNAUTHORIZED);
    // The start-up link of an empty database is on stderr by design; take it from there, then
    // check nothing after it repeats its secret.
    let mut link = None;
    let mut before = Vec::new();
    while link.is_none() {
        let line = lines
            .recv_timeout(std::time::Duration::from_secs(30))
            .expect("the start-up link");
        if let Some(i) = line.find("/welcome/") {
            link = Some(
                line[i..]
                    .split_whitespace()
                    .next()
                    .unwrap_or("")
                    .to_string(),
            );
        } else {
            before.push(line);
        }
    }
    let link = link.unwrap();
    let secret = link.trim_start_matches("/welcome/").to_string();
    let password = "compost and twine 42";
    let (mut p, csrf) = join(&s.base, &link, "ivy", "Ivy Fern", password).await;
    let session: Vec<String> = p.cookies.values().cloned().collect();
    let page = p.post_form("/signout", &[("csrf", &csrf)]).await;
    assert_eq!(page.status, StatusCode::SEE_OTHER);
    let mut q = Person::new(&s.base);
    let form = q.get("/signin").await;
    let form_token = csrf_in(&form.body);
    let page = q
        .post_form(
            "/signin",
            &[
                ("csrf", &form_token),
                ("login", "ivy"),
                ("password", password),
                ("next", "/"),
            ],
        )
        .await;
    assert_eq!(page.status, StatusCode::SEE_OTHER, "{}", page.body);
    let page = q
        .post_form(
            "/signin",
            &[
                ("csrf", &form_token),
                ("login", "ivy"),
                ("password", "not it at all"),
                ("next", "/"),
            ],
        )
        .await;
    assert!(page.status.is_redirection() || page.status.is_client_error());
    drop(s);
    std::thread::sleep(std::time::Duration::from_millis(200));
    let log: Vec<String> = before.into_iter().chain(lines.try_iter()).collect();
    assert!(
        log.iter()
            .any(|l| l.contains("DEBUG") || l.contains("INFO")),
        "the log was written at debug level: {} lines",
        log.len()
    );
    let mut secrets = vec![
        token.clone(),
        wrong,
        secret,
        password.to_string(),
        csrf,
        form_token,
    ];
    secrets.extend(session.into_iter().filter(|v| v.len() >= 16));
    for line in &log {
        for secret in &secrets {
            assert!(
                !line.contains(secret.as_str()),
                "a secret in the log: {line}"
            );
        }
    }
}
