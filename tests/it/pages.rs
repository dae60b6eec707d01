//! The pages over plain HTTP, on SQLite and PostgreSQL: accounts, sessions and their cookie
//! flags, CSRF on forms and on cookie-authenticated API writes, roles, members and tokens, error
//! pages (404, 403, 413), escaping, and the cost preview route.

use crate::support::*;
use reqwest::{Method, StatusCode};
use serde_json::{Value, json};
use std::collections::HashMap;

/// A person's browser without the browser: keeps cookies, does not follow redirects.
pub struct Person {
    pub base: String,
    pub client: reqwest::Client,
    pub cookies: HashMap<String, String>,
    /// Every Set-Cookie seen, for checking flags.
    pub set_cookies: Vec<String>,
}

pub struct Page {
    pub status: StatusCode,
    pub location: Option<String>,
    pub content_type: String,
    pub retry_after: Option<String>,
    pub body: String,
}

impl Person {
    pub fn new(base: &str) -> Person {
        Person {
            base: base.to_string(),
            client: reqwest::Client::builder()
                .redirect(reqwest::redirect::Policy::none())
                .build()
                .expect("client"),
            cookies: HashMap::new(),
            set_cookies: Vec::new(),
        }
    }

    fn cookie_header(&self) -> String {
        self.cookies
            .iter()
            .map(|(k, v)| format!("{k}={v}"))
            .collect::<Vec<_>>()
            .join("; ")
    }

    pub async fn send(&mut self, req: reqwest::RequestBuilder) -> Page {
        let req = if self.cookies.is_empty() {
            req
        } else {
            req.header("cookie", self.cookie_header())
        };
        let resp = req.send().await.expect("request");
        for v in resp.headers().get_all("set-cookie") {
            let v = v.to_str().expect("ascii cookie").to_string();
            let pair = v.split(';').next().unwrap_or("");
            if let Some((k, val)) = pair.split_once('=') {
                if val.is_empty() || v.contains("Max-Age=0") {
                    self.cookies.remove(k);
                } else {
                    self.cookies.insert(k.to_string(), val.to_string());
                }
            }
            self.set_cookies.push(v);
        }
        let status = resp.status();
        let location = resp
            .headers()
            .get("location")
            .and_then(|v| v.to_str().ok())
            .map(str::to_string);
        let content_type = resp
            .headers()
            .get("content-type")
            .and_then(|v| v.to_str().ok())
            .unwrap_or("")
            .to_string();
        let retry_after = resp
            .headers()
            .get("retry-after")
            .and_then(|v| v.to_str().ok())
            .map(str::to_string);
        let body = resp.text().await.unwrap_or_default();
        Page {
            status,
            location,
            content_type,
            retry_after,
            body,
        }
    }

    pub async fn get(&mut self, path: &str) -> Page {
        let url = self.url(path);
        let req = self.client.get(url);
        self.send(req).await
    }

    pub fn url(&self, path: &str) -> String {
        if path.starts_with("http") {
            path.to_string()
        } else {
            format!("{}{}", self.base, path)
        }
    }

    pub async fn post_form(&mut self, path: &str, fields: &[(&str, &str)]) -> Page {
        let body = serde_urlencoded::to_string(fields).expect("form");
        let req = self
            .client
            .post(self.url(path))
            .header("content-type", "application/x-www-form-urlencoded")
            .body(body);
        self.send(req).await
    }

    /// A JSON API call with the session cookie and (when `csrf`) the page's CSRF token.
    pub async fn api(
        &mut self,
        method: Method,
        path: &str,
        body: &Value,
        csrf: Option<&str>,
    ) -> Page {
        let mut req = self.client.request(method, self.url(path)).json(body);
        if let Some(t) = csrf {
            req = req.header("x-csrf-token", t);
        }
        self.send(req).await
    }
}

/// The value of the first `name="csrf" value="…"` field (or the meta tag) in a page.
pub fn csrf_in(html: &str) -> String {
    for pat in ["name=\"csrf\" value=\"", "name=\"csrf-token\" content=\""] {
        if let Some(i) = html.find(pat) {
            let rest = &html[i + pat.len()..];
            let v: String = rest.chars().take_while(|c| *c != '"').collect();
            if !v.is_empty() {
                return v;
            }
        }
    }
    panic!("no csrf token in page");
}

/// Accepts an invite link as a new person; returns them signed in, with the page's CSRF token.
pub async fn join(
    base: &str,
    link: &str,
    login: &str,
    name: &str,
    password: &str,
) -> (Person, String) {
    let mut p = Person::new(base);
    let page = p.get(link).await;
    assert_eq!(page.status, StatusCode::OK, "{}", page.body);
    let form = csrf_in(&page.body);
    let done = p
        .post_form(
            link,
            &[
                ("csrf", &form),
                ("display_name", name),
                ("login", login),
                ("password", password),
                ("password_again", password),
            ],
        )
        .await;
    assert_eq!(done.status, StatusCode::SEE_OTHER, "{}", done.body);
    assert_eq!(done.location.as_deref(), Some("/"));
    let home = p.get("/").await;
    assert_eq!(home.status, StatusCode::OK, "{}", home.body);
    let csrf = csrf_in(&home.body);
    (p, csrf)
}

fn link_in(html: &str) -> String {
    let i = html.find("/welcome/").expect("invite link on the page");
    let start = html[..i].rfind("http").expect("absolute link");
    html[start..]
        .chars()
        .take_while(|c| *c != '"' && *c != '<')
        .collect()
}

async fn accounts(kind: Db) {
    let Some(db) = fresh_db(kind, "pages_accounts").await else {
        return;
    };
    let (s, link) = start_with_link(&db.url, &db.data_dir, &[]);

    // A form posted without the cookie-bound token is refused with a readable page.
    let mut stranger = Person::new(&s.base);
    let refused = stranger
        .post_form(
            &link,
            &[
                ("csrf", "nope"),
                ("display_name", "X"),
                ("login", "x"),
                ("password", "0123456789"),
                ("password_again", "0123456789"),
            ],
        )
        .await;
    assert_eq!(refused.status, StatusCode::FORBIDDEN);
    assert!(
        refused.content_type.starts_with("text/html"),
        "{}",
        refused.content_type
    );

    let (mut owner, csrf) = join(&s.base, &link, "tamsin", "Tamsin", "repotting at dawn 7").await;
    let session_cookie = owner
        .set_cookies
        .iter()
        .find(|c| c.starts_with("gs_session="))
        .expect("session cookie")
        .clone();
    assert!(session_cookie.contains("HttpOnly"), "{session_cookie}");
    assert!(
        session_cookie.contains("SameSite=Strict"),
        "{session_cookie}"
    );
    assert!(
        !session_cookie.contains("Secure"),
        "plain HTTP: {session_cookie}"
    );
    // The start-up link works once.
    assert_eq!(
        Person::new(&s.base).get(&link).await.status,
        StatusCode::NOT_FOUND
    );

    // Signing in again behind a TLS proxy gives a Secure cookie; a wrong password does not sign in.
    let mut again = Person::new(&s.base);
    let form = csrf_in(&again.get("/signin?next=/team").await.body);
    let wrong = again
        .post_form(
            "/signin",
            &[
                ("csrf", &form),
                ("login", "tamsin"),
                ("password", "wrong"),
                ("next", "/team"),
            ],
        )
        .await;
    assert_eq!(wrong.status, StatusCode::SEE_OTHER);
    assert!(wrong.location.unwrap_or_default().starts_with("/signin"));
    assert!(!again.cookies.contains_key("gs_session"));
    let req = again
        .client
        .post(again.url("/signin"))
        .header("content-type", "application/x-www-form-urlencoded")
        .header("x-forwarded-proto", "https")
        .body(
            serde_urlencoded::to_string([
                ("csrf", form.as_str()),
                ("login", "TAMSIN"),
                ("password", "repotting at dawn 7"),
                ("next", "/team"),
            ])
            .unwrap(),
        );
    let ok = again.send(req).await;
    assert_eq!(ok.location.as_deref(), Some("/team"));
    assert!(
        again
            .set_cookies
            .iter()
            .any(|c| c.starts_with("gs_session=") && c.contains("; Secure"))
    );
    // A crafted next= cannot send a person elsewhere.
    let form = csrf_in(&Person::new(&s.base).get("/signin").await.body);
    let mut third = Person::new(&s.base);
    third.cookies.insert("gs_form".into(), form.clone());
    let away = third
        .post_form(
            "/signin",
            &[
                ("csrf", &form),
                ("login", "tamsin"),
                ("password", "repotting at dawn 7"),
                ("next", "//evil.example"),
            ],
        )
        .await;
    assert_eq!(away.location.as_deref(), Some("/"));

    // Cookie-authenticated API writes need the CSRF header; reads do not.
    assert_eq!(
        owner
            .api(Method::GET, "/api/cameras", &json!(null), None)
            .await
            .status,
        StatusCode::OK
    );
    let cam_body = json!({"name": "bench overhead", "width": 64, "height": 48, "no_go_zones": [[[50, 0], [63, 0], [63, 12]]]});
    let no_csrf = owner
        .api(Method::POST, "/api/cameras", &cam_body, None)
        .await;
    assert_eq!(no_csrf.status, StatusCode::FORBIDDEN, "{}", no_csrf.body);
    let bad_csrf = owner
        .api(Method::POST, "/api/cameras", &cam_body, Some("0000"))
        .await;
    assert_eq!(bad_csrf.status, StatusCode::FORBIDDEN);
    let cam = owner
        .api(Method::POST, "/api/cameras", &cam_body, Some(&csrf))
        .await;
    assert_eq!(cam.status, StatusCode::CREATED, "{}", cam.body);
    let cam: Value = serde_json::from_str(&cam.body).unwrap();
    let cam_id = cam["id"].as_str().unwrap().to_string();
    let req = owner
        .client
        .post(owner.url(&format!("/api/cameras/{cam_id}/frames")))
        .header("content-type", "image/png")
        .header("x-csrf-token", &csrf)
        .body(png(64, 48, 3));
    let frame = owner.send(req).await;
    assert_eq!(frame.status, StatusCode::CREATED, "{}", frame.body);
    let frame: Value = serde_json::from_str(&frame.body).unwrap();
    let frame_id = frame["id"].as_str().unwrap().to_string();

    // Every user string is escaped.
    let evil = "<script>alert(1)</script>";
    let goal = owner
        .api(
            Method::POST,
            "/api/goals",
            &point_goal(&frame_id, evil),
            Some(&csrf),
        )
        .await;
    assert_eq!(goal.status, StatusCode::CREATED, "{}", goal.body);
    let goal: Value = serde_json::from_str(&goal.body).unwrap();
    let goal_id = goal["goal_id"].as_str().unwrap().to_string();
    for path in [
        "/".to_string(),
        format!("/goals/{goal_id}"),
        format!("/goals/{goal_id}/history"),
        format!("/goals/{goal_id}/compare?a=1&b=1"),
        "/?q=script".to_string(),
    ] {
        let page = owner.get(&path).await;
        assert_eq!(page.status, StatusCode::OK, "{path}: {}", page.body);
        assert!(
            !page.body.contains(evil),
            "{path} carries the name unescaped"
        );
        assert!(
            page.body.contains("&lt;script&gt;alert(1)&lt;/script&gt;")
                || page
                    .body
                    .contains("&#60;script&#62;alert(1)&#60;/script&#62;"),
            "{path} lacks the escaped name"
        );
    }

    // Readable error pages with proper status codes.
    for (path, status) in [
        ("/no/such/page".to_string(), StatusCode::NOT_FOUND),
        (
            format!("/goals/{}", uuid::Uuid::new_v4()),
            StatusCode::NOT_FOUND,
        ),
        (
            "/goals/not-an-id/history".to_string(),
            StatusCode::NOT_FOUND,
        ),
    ] {
        let page = owner.get(&path).await;
        assert_eq!(page.status, status, "{path}");
        assert!(
            page.content_type.starts_with("text/html"),
            "{path}: {}",
            page.content_type
        );
        assert!(page.body.contains("<h1>"), "{path}");
    }
    // 413 on a too-large frame upload, refused by its declared length before the body is read.
    {
        use tokio::io::{AsyncReadExt, AsyncWriteExt};
        let addr = s.base.trim_start_matches("http://").to_string();
        let mut tcp = tokio::net::TcpStream::connect(&addr).await.unwrap();
        let head = format!(
            "POST /cameras/{cam_id}/frames HTTP/1.1\r\nHost: {addr}\r\nCookie: {}\r\nContent-Type: multipart/form-data; boundary=xx\r\nContent-Length: 900000000\r\nConnection: close\r\n\r\n--xx\r\n",
            owner.cookie_header()
        );
        tcp.write_all(head.as_bytes()).await.unwrap();
        let mut buf = Vec::new();
        tokio::time::timeout(
            std::time::Duration::from_secs(20),
            tcp.read_to_end(&mut buf),
        )
        .await
        .ok();
        let text = String::from_utf8_lossy(&buf);
        assert!(text.starts_with("HTTP/1.1 413"), "{text}");
        assert!(
            text.contains("text/html") && text.contains("Too large"),
            "{text}"
        );
    }

    // The no-script upload form works and needs its token.
    let boundary = "gsboundary";
    let mut mp = Vec::new();
    mp.extend_from_slice(format!("--{boundary}\r\nContent-Disposition: form-data; name=\"csrf\"\r\n\r\n{csrf}\r\n--{boundary}\r\nContent-Disposition: form-data; name=\"frame\"; filename=\"f.png\"\r\nContent-Type: image/png\r\n\r\n").as_bytes());
    mp.extend_from_slice(&png(64, 48, 9));
    mp.extend_from_slice(format!("\r\n--{boundary}--\r\n").as_bytes());
    let req = owner
        .client
        .post(owner.url(&format!("/cameras/{cam_id}/frames")))
        .header(
            "content-type",
            format!("multipart/form-data; boundary={boundary}"),
        )
        .body(mp);
    let up = owner.send(req).await;
    assert_eq!(up.status, StatusCode::SEE_OTHER, "{}", up.body);
    assert!(up.location.unwrap_or_default().starts_with("/?uploaded="));

    // Owners invite a viewer; the viewer reads but cannot write, by page or API.
    let team = owner.get("/team").await;
    let team_csrf = csrf_in(&team.body);
    let invite = owner
        .post_form(
            "/team/invites",
            &[("csrf", &team_csrf), ("role", "viewer"), ("note", "Rosa")],
        )
        .await;
    assert_eq!(invite.status, StatusCode::CREATED, "{}", invite.body);
    let viewer_link = link_in(&invite.body);
    let (mut viewer, vcsrf) = join(&s.base, &viewer_link, "rosa", "Rosa", "tomato seedling").await;
    let editor_page = viewer.get(&format!("/goals/{goal_id}")).await;
    assert_eq!(editor_page.status, StatusCode::OK);
    assert!(
        !editor_page.body.contains("data-tool="),
        "a viewer sees no tools"
    );
    assert!(
        !editor_page.body.contains("id=\"save\""),
        "a viewer sees no save button"
    );
    let forged = viewer
        .api(
            Method::POST,
            "/api/goals",
            &point_goal(&frame_id, "mine"),
            Some(&vcsrf),
        )
        .await;
    assert_eq!(forged.status, StatusCode::FORBIDDEN, "{}", forged.body);
    let forged = viewer
        .post_form(
            &format!("/goals/{goal_id}/restore"),
            &[("csrf", &vcsrf), ("revision", "1"), ("etag", "\"x\"")],
        )
        .await;
    assert_eq!(forged.status, StatusCode::FORBIDDEN);
    assert!(forged.content_type.starts_with("text/html"));
    let forged = viewer
        .post_form(
            "/team/tokens",
            &[("csrf", &vcsrf), ("label", "mine"), ("role", "owner")],
        )
        .await;
    assert_eq!(forged.status, StatusCode::FORBIDDEN);
    assert!(
        !viewer.get("/team").await.body.contains("/team/tokens"),
        "viewers see no token controls"
    );

    // Owners change roles at once, and keep at least one owner.
    let members = owner.get("/team").await.body;
    let rosa_id = {
        let i = members.find("data-login=\"rosa\"").unwrap();
        let j = members[i..].find("/team/members/").unwrap() + i + "/team/members/".len();
        members[j..j + 36].to_string()
    };
    let r = owner
        .post_form(
            &format!("/team/members/{rosa_id}/role"),
            &[("csrf", &team_csrf), ("role", "editor")],
        )
        .await;
    assert_eq!(r.status, StatusCode::SEE_OTHER);
    let cam2 = viewer
        .api(
            Method::POST,
            "/api/cameras",
            &json!({"name": "side", "width": 32, "height": 32}),
            Some(&vcsrf),
        )
        .await;
    assert_eq!(
        cam2.status,
        StatusCode::CREATED,
        "an editor now: {}",
        cam2.body
    );
    let tamsin_id = {
        let i = members.find("data-login=\"tamsin\"").unwrap();
        let j = members[i..].find("/team/members/").unwrap() + i + "/team/members/".len();
        members[j..j + 36].to_string()
    };
    owner
        .post_form(
            &format!("/team/members/{tamsin_id}/role"),
            &[("csrf", &team_csrf), ("role", "viewer")],
        )
        .await;
    assert!(
        owner.get("/team").await.body.contains("/team/tokens"),
        "the last owner stays owner"
    );

    // Tokens: shown once, work as Bearer, stop working when revoked.
    let made = owner
        .post_form(
            "/team/tokens",
            &[
                ("csrf", &team_csrf),
                ("label", "arm-2 planner"),
                ("role", "viewer"),
            ],
        )
        .await;
    assert_eq!(made.status, StatusCode::CREATED);
    let token: String = {
        let i = made.body.find("gs_").unwrap();
        made.body[i..]
            .chars()
            .take_while(|c| c.is_ascii_alphanumeric() || *c == '_')
            .collect()
    };
    assert_eq!(s.get("/api/goals", Some(&token)).await.0, StatusCode::OK);
    let team_page = owner.get("/team").await.body;
    assert!(!team_page.contains(&token), "the token is shown only once");
    let i = team_page.find("/revoke").unwrap();
    let revoke = &team_page[team_page[..i].rfind("/team/tokens/").unwrap()..i + "/revoke".len()];
    owner.post_form(revoke, &[("csrf", &team_csrf)]).await;
    assert_eq!(
        s.get("/api/goals", Some(&token)).await.0,
        StatusCode::UNAUTHORIZED
    );

    // Removing a member ends their session at once.
    owner
        .post_form(
            &format!("/team/members/{rosa_id}/remove"),
            &[("csrf", &team_csrf)],
        )
        .await;
    let gone = viewer.get("/").await;
    assert_eq!(gone.status, StatusCode::SEE_OTHER);
    assert_eq!(
        viewer
            .api(Method::GET, "/api/goals", &json!(null), None)
            .await
            .status,
        StatusCode::UNAUTHORIZED
    );

    // Password change: needs the current one; ends the other sessions.
    let acc = owner.get("/account").await;
    let acsrf = csrf_in(&acc.body);
    let bad = owner
        .post_form(
            "/account/password",
            &[
                ("csrf", &acsrf),
                ("current", "nope"),
                ("password", "a new longer one"),
                ("password_again", "a new longer one"),
            ],
        )
        .await;
    assert_eq!(bad.status, StatusCode::SEE_OTHER);
    owner
        .post_form(
            "/account/password",
            &[
                ("csrf", &acsrf),
                ("current", "repotting at dawn 7"),
                ("password", "a new longer one"),
                ("password_again", "a new longer one"),
            ],
        )
        .await;
    assert_eq!(
        again.get("/").await.status,
        StatusCode::SEE_OTHER,
        "the other session ended"
    );
    assert_eq!(
        owner.get("/").await.status,
        StatusCode::OK,
        "this session goes on"
    );

    // Sign out without the token is refused; with it the session ends. The password change
    // started a new session, with a new page token.
    let acsrf = csrf_in(&owner.get("/account").await.body);
    assert_eq!(
        owner.post_form("/signout", &[("csrf", "x")]).await.status,
        StatusCode::FORBIDDEN
    );
    let out = owner.post_form("/signout", &[("csrf", &acsrf)]).await;
    assert_eq!(out.status, StatusCode::SEE_OTHER);
    assert_eq!(owner.get("/").await.status, StatusCode::SEE_OTHER);
}

async fn startup_link_replaced(kind: Db) {
    let Some(db) = fresh_db(kind, "pages_startup_link").await else {
        return;
    };
    let (mut s, first) = start_with_link(&db.url, &db.data_dir, &[]);
    s.kill();
    let (s, second) = start_with_link(&db.url, &db.data_dir, &[]);
    assert_ne!(first, second);
    let path = |l: &str| l[l.find("/welcome/").unwrap()..].to_string();
    let (first, second) = (path(&first), path(&second));
    let mut p = Person::new(&s.base);
    assert_eq!(
        p.get(&first).await.status,
        StatusCode::NOT_FOUND,
        "an older start-up link stops working"
    );
    assert_eq!(p.get(&second).await.status, StatusCode::OK);
    assert_eq!(p.get("/").await.location.as_deref(), Some("/signin?next=/"));
}

async fn preview_and_sets(kind: Db) {
    let Some((s, _db)) = server(kind, "pages_preview").await else {
        return;
    };
    let (editor, _cam, frame) = camera_and_frame(
        &s,
        "potting",
        json!({"no_go_zones": [[[50, 0], [63, 0], [63, 12]]]}),
    )
    .await;
    let goal = point_goal(&frame, "pot to mat");
    let resp = s
        .client
        .post(s.url("/api/preview/cost-map.png"))
        .bearer_auth(&editor)
        .json(&json!({"goal": goal, "point": 0}))
        .send()
        .await
        .unwrap();
    assert_eq!(resp.status(), StatusCode::OK);
    assert_eq!(resp.headers()["content-type"], "image/png");
    let img = image::load_from_memory(&resp.bytes().await.unwrap())
        .unwrap()
        .to_rgba8();
    assert_eq!(img.dimensions(), (64, 48));
    // The target (40, 30) is within tolerance; a far corner is not.
    use goalsmith::draw::palette;
    let within = palette::heat(0.0, true);
    assert_eq!(img.get_pixel(40, 30).0, within);
    assert_ne!(img.get_pixel(0, 0).0, within);
    let mut refused = goal.clone();
    refused["terms"][0]["target"] = json!([60.0, 2.0]);
    let (st, err) = s
        .post(
            "/api/preview/cost-map.png",
            Some(&editor),
            &json!({"goal": refused, "point": 0}),
        )
        .await;
    assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY);
    assert_eq!(err["error"]["field"], "terms[0].target");
    let (st, _) = s
        .post(
            "/api/preview/cost-map.png",
            Some(&editor),
            &json!({"goal": goal, "point": 3}),
        )
        .await;
    assert_eq!(st, StatusCode::UNPROCESSABLE_ENTITY);
}

fn field_in(html: &str, name: &str) -> String {
    let pat = format!("name=\"{name}\" value=\"");
    let i = html.find(&pat).unwrap_or_else(|| panic!("no field {name}")) + pat.len();
    let raw: String = html[i..].chars().take_while(|c| *c != '"').collect();
    raw.replace("&#34;", "\"").replace("&quot;", "\"")
}

async fn goal_set_pages(kind: Db) {
    let Some(db) = fresh_db(kind, "pages_goal_sets").await else {
        return;
    };
    let (s, link) = start_with_link(&db.url, &db.data_dir, &[]);
    let (mut owner, _) = join(&s.base, &link, "tamsin", "Tamsin", "repotting at dawn 7").await;
    let (api, _cam, frame) = camera_and_frame(&s, "my team", json!({})).await;
    let mut ids = Vec::new();
    for name in ["pot to mat", "tray to bench"] {
        let (st, rev) = s
            .post("/api/goals", Some(&api), &point_goal(&frame, name))
            .await;
        assert_eq!(st, StatusCode::CREATED);
        ids.push(rev["goal_id"].as_str().unwrap().to_string());
    }
    let page = owner.get("/goal-sets").await;
    let csrf = csrf_in(&page.body);
    let made = owner
        .post_form(
            "/goal-sets",
            &[
                ("csrf", &csrf),
                ("name", "morning suite"),
                ("goal", &ids[0]),
                ("goal", &ids[1]),
            ],
        )
        .await;
    assert_eq!(made.status, StatusCode::SEE_OTHER, "{}", made.body);
    let here = made.location.unwrap();
    let set_id = here.trim_start_matches("/goal-sets/").to_string();
    let page = owner.get(&here).await;
    assert!(page.body.contains("pot to mat") && page.body.contains("tray to bench"));
    assert!(
        page.body
            .contains(&format!("/api/goal-sets/{set_id}/bundle.zip"))
    );
    assert!(
        page.body.contains("Before a robot uses this"),
        "the caution sits by the download"
    );
    let old_tag = field_in(&page.body, "etag");
    let moved = owner
        .post_form(
            &here,
            &[("csrf", &csrf), ("etag", &old_tag), ("action", "down:0")],
        )
        .await;
    assert_eq!(moved.status, StatusCode::SEE_OTHER);
    let (_, set) = s.get(&format!("/api/goal-sets/{set_id}"), Some(&api)).await;
    assert_eq!(set["items"][0]["goal_id"], ids[1].as_str(), "{set}");
    // A newer revision of a goal, then every pin updated.
    let (_, latest) = s.get(&format!("/api/goals/{}", ids[0]), Some(&api)).await;
    let resp = s
        .client
        .get(s.url(&format!("/api/goals/{}", ids[0])))
        .bearer_auth(&api)
        .send()
        .await
        .unwrap();
    let tag = etag(&resp).unwrap();
    let (st, _, _) = s
        .put_goal(
            &ids[0],
            &api,
            Some(&tag),
            &point_goal(&frame, latest["name"].as_str().unwrap()),
        )
        .await;
    assert_eq!(st, StatusCode::OK);
    let page = owner.get(&here).await;
    assert!(
        page.body.contains("latest is 2"),
        "the outdated pin is marked"
    );
    let fresh = field_in(&page.body, "etag");
    owner
        .post_form(
            &here,
            &[("csrf", &csrf), ("etag", &fresh), ("action", "pin-all")],
        )
        .await;
    let (_, set) = s.get(&format!("/api/goal-sets/{set_id}"), Some(&api)).await;
    assert_eq!(set["items"][1]["revision"], 2, "{set}");
    // A stale form changes nothing and says why.
    let stale = owner
        .post_form(
            &here,
            &[("csrf", &csrf), ("etag", &old_tag), ("action", "remove:0")],
        )
        .await;
    assert_eq!(stale.status, StatusCode::SEE_OTHER);
    let page = owner.get(&here).await;
    assert!(
        page.body.contains("changed since you loaded it"),
        "{}",
        page.body
    );
    let (_, after) = s.get(&format!("/api/goal-sets/{set_id}"), Some(&api)).await;
    assert_eq!(after["items"].as_array().unwrap().len(), 2);
}

/// A sign-in attempt with a form token the server issued: from the sign-in page, or, when the
/// browser is signed in (the page then redirects), the form cookie it already holds.
async fn try_signin(p: &mut Person, login: &str, password: &str, next: &str) -> Page {
    let page = p.get("/signin").await;
    let form = if page.status == StatusCode::OK {
        csrf_in(&page.body)
    } else {
        p.cookies.get("gs_form").cloned().expect("a form cookie")
    };
    p.post_form(
        "/signin",
        &[
            ("csrf", &form),
            ("login", login),
            ("password", password),
            ("next", next),
        ],
    )
    .await
}

fn retry_after(page_status: StatusCode, headers_body: &Page) -> u64 {
    assert_eq!(headers_body.status, page_status, "{}", headers_body.body);
    assert!(
        headers_body.content_type.starts_with("text/html"),
        "{}",
        headers_body.content_type
    );
    headers_body
        .retry_after
        .as_deref()
        .and_then(|v| v.parse().ok())
        .expect("Retry-After in seconds")
}

async fn signin_throttle(kind: Db) {
    let Some(db) = fresh_db(kind, "pages_signin_throttle").await else {
        return;
    };
    let (s, link) = start_with_link(
        &db.url,
        &db.data_dir,
        &[
            "--signin-failures-per-login",
            "3",
            "--signin-attempts-per-address",
            "12",
        ],
    );
    join(&s.base, &link, "ilse", "Ilse", "seed trays at six").await;
    let mut p = Person::new(&s.base);

    // Two failures, then the right password works and clears them.
    for _ in 0..2 {
        let wrong = try_signin(&mut p, "ilse", "not it", "/").await;
        assert_eq!(wrong.status, StatusCode::SEE_OTHER);
    }
    let right = try_signin(&mut p, "ilse", "seed trays at six", "/team").await;
    assert_eq!(right.location.as_deref(), Some("/team"));
    p.cookies.remove("gs_session");

    // Three more failures reach the login's limit: even the right password is refused now,
    // with 429, Retry-After and a readable page, and no session.
    for _ in 0..3 {
        let wrong = try_signin(&mut p, "ILSE", "not it", "/").await;
        assert_eq!(wrong.status, StatusCode::SEE_OTHER, "{}", wrong.body);
    }
    let refused = try_signin(&mut p, "ilse", "seed trays at six", "/").await;
    assert!(retry_after(StatusCode::TOO_MANY_REQUESTS, &refused) > 0);
    assert!(refused.body.contains("Too many"), "{}", refused.body);
    assert!(!p.cookies.contains_key("gs_session"));

    // Another login from the same address is not held back by ilse's limit...
    let other = try_signin(&mut p, "bruno", "whatever", "/").await;
    assert_eq!(other.status, StatusCode::SEE_OTHER);
    // ...until the address has used its 12 attempts (6 for ilse, 1 for bruno so far; refused
    // attempts do not count).
    for i in 0..5 {
        let page = try_signin(&mut p, &format!("guess{i}"), "whatever", "/").await;
        assert_eq!(page.status, StatusCode::SEE_OTHER, "attempt {i}");
    }
    let refused = try_signin(&mut p, "someone-new", "whatever", "/").await;
    assert!(retry_after(StatusCode::TOO_MANY_REQUESTS, &refused) > 0);
}

async fn form_token_issued_by_server(kind: Db) {
    let Some((s, _db)) = server(kind, "pages_form_token").await else {
        return;
    };
    // Made-up pairs of cookie and field are refused: the old 64-hex format, and one shaped like
    // ours with a wrong MAC.
    let forged_mac = format!(
        "{:x}.{}.{}",
        1_900_000_000u64,
        "ab".repeat(16),
        "cd".repeat(32)
    );
    for made_up in ["0123456789abcdef".repeat(4), forged_mac] {
        let mut p = Person::new(&s.base);
        p.cookies.insert("gs_form".into(), made_up.clone());
        let page = p
            .post_form(
                "/signin",
                &[
                    ("csrf", made_up.as_str()),
                    ("login", "nobody"),
                    ("password", "whatever"),
                ],
            )
            .await;
        assert_eq!(page.status, StatusCode::FORBIDDEN, "{made_up}");
        assert!(page.content_type.starts_with("text/html"));
    }
    // The sign-in page replaces a made-up cookie with one of ours, which then passes.
    let mut p = Person::new(&s.base);
    p.cookies
        .insert("gs_form".into(), "0123456789abcdef".repeat(4));
    let page = try_signin(&mut p, "nobody", "whatever", "/").await;
    assert_eq!(page.status, StatusCode::SEE_OTHER, "{}", page.body);
}

async fn session_rotation(kind: Db) {
    let Some(db) = fresh_db(kind, "pages_session_rotation").await else {
        return;
    };
    let (s, link) = start_with_link(&db.url, &db.data_dir, &[]);
    let (mut first, _) = join(&s.base, &link, "oskar", "Oskar", "compost turner 3").await;
    let first_cookie = first.cookies["gs_session"].clone();

    // Fixation: a session cookie planted before sign-in is not the one in use after it.
    let planted = "5".repeat(64);
    let mut p = Person::new(&s.base);
    p.cookies.insert("gs_session".into(), planted.clone());
    let ok = try_signin(&mut p, "oskar", "compost turner 3", "/").await;
    assert_eq!(ok.status, StatusCode::SEE_OTHER);
    let signed = p
        .cookies
        .get("gs_session")
        .cloned()
        .expect("a session cookie");
    assert_ne!(signed, planted);
    assert_eq!(p.get("/").await.status, StatusCode::OK);

    // Signing in again from a signed-in browser ends its old session.
    let again = try_signin(&mut p, "oskar", "compost turner 3", "/").await;
    assert_eq!(again.status, StatusCode::SEE_OTHER, "{}", again.body);
    let rotated = p.cookies["gs_session"].clone();
    assert_ne!(rotated, signed);
    let mut stale = Person::new(&s.base);
    stale.cookies.insert("gs_session".into(), signed);
    assert_eq!(stale.get("/").await.status, StatusCode::SEE_OTHER);

    // A password change: this browser continues in a new session; the old cookie is dead.
    let acsrf = csrf_in(&first.get("/account").await.body);
    let changed = first
        .post_form(
            "/account/password",
            &[
                ("csrf", &acsrf),
                ("current", "compost turner 3"),
                ("password", "worm bin number 4"),
                ("password_again", "worm bin number 4"),
            ],
        )
        .await;
    assert_eq!(changed.status, StatusCode::SEE_OTHER);
    let new_cookie = first.cookies["gs_session"].clone();
    assert_ne!(new_cookie, first_cookie);
    assert_eq!(first.get("/account").await.status, StatusCode::OK);
    let mut old = Person::new(&s.base);
    old.cookies.insert("gs_session".into(), first_cookie);
    assert_eq!(old.get("/").await.status, StatusCode::SEE_OTHER);
    assert_eq!(
        p.get("/").await.status,
        StatusCode::SEE_OTHER,
        "other browsers end too"
    );
}

/// `next` values that must not leave the site, as the form or the decoded query carries them.
const BAD_NEXT: &[&str] = &[
    "//evil.example",
    "/\\evil.example",
    "/\\/evil.example",
    "/%09/evil.example",
    "/%2F/evil.example",
    "/%5C/evil.example",
    "https://evil.example",
    "javascript:alert(1)",
    "/\t/evil.example",
    "/\n/evil.example",
    "%2F%2Fevil.example",
    " /x",
    "/x%0d%0aSet-Cookie:a=b",
    "/x\r\nSet-Cookie: a=b",
    "evil.example",
];

async fn next_stays_on_site(kind: Db) {
    let Some(db) = fresh_db(kind, "pages_next").await else {
        return;
    };
    let (s, link) = start_with_link(
        &db.url,
        &db.data_dir,
        &["--signin-attempts-per-address", "1000"],
    );
    let (mut signed, _) = join(&s.base, &link, "petra", "Petra", "drip line valve").await;
    let mut anon = Person::new(&s.base);
    let query = |v: &str| {
        format!(
            "/signin?{}",
            serde_urlencoded::to_string([("next", v)]).unwrap()
        )
    };
    for bad in BAD_NEXT {
        // GET, signed in: redirected home.
        let page = signed.get(&query(bad)).await;
        assert_eq!(page.location.as_deref(), Some("/"), "GET signed in {bad:?}");
        // GET, signed out: the form carries the home page.
        let page = anon.get(&query(bad)).await;
        assert!(
            page.body.contains("name=\"next\" value=\"/\""),
            "GET signed out {bad:?}"
        );
        // POST: after signing in, home.
        let mut p = Person::new(&s.base);
        let page = try_signin(&mut p, "petra", "drip line valve", bad).await;
        assert_eq!(page.location.as_deref(), Some("/"), "POST {bad:?}");
    }
    // The raw query strings of the probe, undecoded by us.
    for raw in [
        "/signin?next=/%09/other.host/x",
        "/signin?next=%2F%2Fother.host",
        "/signin?next=/%5Cother.host",
    ] {
        assert_eq!(
            signed.get(raw).await.location.as_deref(),
            Some("/"),
            "{raw}"
        );
    }
    // A local next is kept, on both.
    let good = "/goals/abc?x=1";
    assert_eq!(
        signed.get(&query(good)).await.location.as_deref(),
        Some(good)
    );
    let mut p = Person::new(&s.base);
    let page = try_signin(&mut p, "petra", "drip line valve", good).await;
    assert_eq!(page.location.as_deref(), Some(good));
}

async fn invite(owner: &mut Person, host: Option<&str>) -> String {
    let team_csrf = csrf_in(&owner.get("/team").await.body);
    let body = serde_urlencoded::to_string([
        ("csrf", team_csrf.as_str()),
        ("role", "viewer"),
        ("note", "Wren"),
    ])
    .unwrap();
    let mut req = owner
        .client
        .post(owner.url("/team/invites"))
        .header("content-type", "application/x-www-form-urlencoded")
        .body(body);
    if let Some(h) = host {
        req = req.header("host", h);
    }
    let page = owner.send(req).await;
    assert_eq!(page.status, StatusCode::CREATED, "{}", page.body);
    link_in(&page.body)
}

async fn invite_links(kind: Db) {
    let Some(db) = fresh_db(kind, "pages_invite_links").await else {
        return;
    };
    {
        let (s, link) = start_with_link(&db.url, &db.data_dir, &[]);
        let (mut owner, _) = join(&s.base, &link, "hedda", "Hedda", "raised bed 12 ft").await;
        let forged = invite(&mut owner, Some("evil.example")).await;
        assert!(
            forged.starts_with(&format!("{}/welcome/", s.base)),
            "{forged} should point at {}",
            s.base
        );
        let plain = invite(&mut owner, None).await;
        assert!(
            plain.starts_with(&format!("{}/welcome/", s.base)),
            "{plain}"
        );
    }
    let Some(db) = fresh_db(kind, "pages_invite_links_public").await else {
        return;
    };
    let public = "https://goals.example.org";
    let (s, link) = start_with_link(&db.url, &db.data_dir, &["--public-url", public]);
    assert!(link.starts_with(&format!("{public}/welcome/")), "{link}");
    let path = &link[public.len()..];
    let (mut owner, _) = join(&s.base, path, "hedda", "Hedda", "raised bed 12 ft").await;
    let forged = invite(&mut owner, Some("evil.example")).await;
    assert!(
        forged.starts_with(&format!("{public}/welcome/")),
        "{forged}"
    );
}

/// The reward-fit pages: set-up and result pages escape every user string, unknown ids are
/// 404 pages, and the team home lists the fit.
async fn fit_pages(kind: Db) {
    let Some(db) = fresh_db(kind, "pages_fits").await else {
        return;
    };
    let (s, link) = start_with_link(&db.url, &db.data_dir, &[]);
    let (mut owner, _) = join(&s.base, &link, "wren", "Wren", "seed drill 44").await;
    let api = s.token("my team", "editor");
    let evil = "<script>alert(1)</script>";
    let (st, cam) = s
        .post(
            "/api/cameras",
            Some(&api),
            &json!({"name": evil, "width": 160, "height": 120}),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{cam}");
    let cam = cam["id"].as_str().unwrap().to_string();
    let (st, frame) = s
        .post_bytes(
            &format!("/api/cameras/{cam}/frames"),
            Some(&api),
            "image/png",
            png(160, 120, 3),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{frame}");
    let frame = frame["id"].as_str().unwrap().to_string();
    let (st, demo) = s
        .post_bytes(
            &format!("/api/cameras/{cam}/demos?name=%3Cscript%3Ealert(1)%3C%2Fscript%3E"),
            Some(&api),
            "application/zip",
            texture_demo_zip(160, 120, 6, [2.0, 1.0]),
        )
        .await;
    assert_eq!(st, StatusCode::CREATED, "{demo}");
    let demo = demo["id"].as_str().unwrap().to_string();
    let (st, started) = s
        .post(
            &format!("/api/demos/{demo}/tracks"),
            Some(&api),
            &json!({"label": evil, "frame": 0, "x": 70.0, "y": 55.0}),
        )
        .await;
    assert_eq!(st, StatusCode::ACCEPTED, "{started}");
    let track = started["track_id"].as_str().unwrap().to_string();
    operation_done(&s, &api, started["operation_id"].as_str().unwrap()).await;
    let (st, fit) = s
        .post(
            "/api/reward-fits",
            Some(&api),
            &json!({"frame_id": frame, "cell_px": 10,
                "features": [{"kind": "distance_to", "point": [100.0, 60.0]}],
                "demos": [{"demo_id": demo, "track_id": track},
                          {"path": [[10.0, 10.0], [60.0, 40.0], [100.0, 60.0]]}]}),
        )
        .await;
    assert_eq!(st, StatusCode::ACCEPTED, "{fit}");
    let fit_id = fit["id"].as_str().unwrap().to_string();
    operation_done(&s, &api, fit["operation_id"].as_str().unwrap()).await;
    for path in [
        format!("/fits/new?camera={cam}"),
        format!("/fits/new?camera={cam}&demo={demo}"),
        format!("/fits/{fit_id}"),
        format!("/demos/{demo}"),
        "/".to_string(),
    ] {
        let page = owner.get(&path).await;
        assert_eq!(page.status, StatusCode::OK, "{path}: {}", page.body);
        assert!(
            !page.body.contains(evil),
            "{path} carries a string unescaped"
        );
        assert!(
            page.body.contains("&lt;script&gt;alert(1)&lt;/script&gt;")
                || page
                    .body
                    .contains("&#60;script&#62;alert(1)&#60;/script&#62;"),
            "{path} lacks the escaped string"
        );
    }
    let home = owner.get("/").await;
    assert!(home.body.contains(&format!("href=\"/fits/{fit_id}\"")));
    assert!(
        home.body
            .contains(&format!("href=\"/fits/new?camera={cam}\""))
    );
    for path in [
        format!("/fits/{}", uuid::Uuid::new_v4()),
        "/fits/not-an-id".to_string(),
        format!("/fits/new?camera={}", uuid::Uuid::new_v4()),
    ] {
        let page = owner.get(&path).await;
        assert_eq!(page.status, StatusCode::NOT_FOUND, "{path}");
        assert!(page.content_type.starts_with("text/html"), "{path}");
    }
    // An address with its query trimmed off, as a person may type it: a readable 400 that
    // names what is missing and says where the link is.
    for (path, field) in [
        ("/fits/new".to_string(), "camera"),
        ("/goals/new".to_string(), "frame"),
        (format!("/goals/{fit_id}/compare?a=1"), "b"),
    ] {
        let page = owner.get(&path).await;
        assert_eq!(page.status, StatusCode::BAD_REQUEST, "{path}");
        assert!(page.content_type.starts_with("text/html"), "{path}");
        assert!(
            page.body.contains(&format!("missing field `{field}`"))
                || page
                    .body
                    .contains(&format!("missing field &#96;{field}&#96;")),
            "{path}: {}",
            page.body
        );
        assert!(page.body.contains("from its link"), "{path}: {}", page.body);
    }
}

macro_rules! both {
    ($name:ident, $body:ident) => {
        mod $name {
            #[tokio::test(flavor = "multi_thread", worker_threads = 2)]
            async fn sqlite() {
                super::$body(crate::support::Db::Sqlite).await;
            }
            #[tokio::test(flavor = "multi_thread", worker_threads = 2)]
            async fn postgres() {
                super::$body(crate::support::Db::Postgres).await;
            }
        }
    };
}

both!(accounts_sessions_roles_tokens_errors, accounts);
both!(
    startup_link_is_replaced_at_each_start,
    startup_link_replaced
);
both!(cost_preview_route, preview_and_sets);
both!(goal_set_pages_create_reorder_pin, goal_set_pages);
both!(signin_is_throttled_per_login_and_address, signin_throttle);
both!(
    signin_form_token_must_be_issued_by_the_server,
    form_token_issued_by_server
);
both!(
    session_id_rotates_on_signin_and_password_change,
    session_rotation
);
both!(next_after_signin_stays_on_this_site, next_stays_on_site);
both!(invite_links_use_the_real_or_public_address, invite_links);
both!(reward_fit_pages_escape_and_refuse, fit_pages);
