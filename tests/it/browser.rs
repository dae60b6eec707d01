//! End to end in headless Chromium, driven through chromedriver, against the real server on a
//! random port: sign-in, frame upload, clicking goals on the canvas at known positions (checked
//! through the API at 1× and after zooming), an area, an object move from three points,
//! revision 2, a conflicting second session, restoring revision 1, and a viewer without edit
//! controls whose forged writes are refused. Screenshots go to `target/screenshots/`.
//!
//! Gated like PostgreSQL: without chromium and chromedriver the test prints a SKIP line, unless
//! GOALSMITH_REQUIRE_SERVICES=1 (CI), where it fails.

use crate::support::*;
use serde_json::{Value, json};
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};
use thirtyfour::prelude::*;
use thirtyfour::{ChromiumLikeCapabilities, DesiredCapabilities, Key};

const CHROMIUM: &str = "/usr/bin/chromium";
const CHROMEDRIVER: &str = "/usr/bin/chromedriver";

/// A chromedriver process on a free port; killed on drop.
struct Driver {
    child: Child,
    url: String,
}

impl Drop for Driver {
    fn drop(&mut self) {
        self.child.kill().ok();
        self.child.wait().ok();
    }
}

fn chromedriver(test: &str) -> Option<Driver> {
    if !Path::new(CHROMIUM).exists() || !Path::new(CHROMEDRIVER).exists() {
        if services_required() {
            panic!("{CHROMIUM} or {CHROMEDRIVER} missing but GOALSMITH_REQUIRE_SERVICES=1");
        }
        crate::support::skip(&format!(
            "SKIP {test}: chromium not installed (apt-get install chromium chromium-driver)"
        ));
        return None;
    }
    let port = std::net::TcpListener::bind("127.0.0.1:0")
        .and_then(|l| l.local_addr())
        .expect("free port")
        .port();
    let child = Command::new(CHROMEDRIVER)
        .arg(format!("--port={port}"))
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .expect("start chromedriver");
    let driver = Driver {
        child,
        url: format!("http://127.0.0.1:{port}"),
    };
    let start = Instant::now();
    while std::net::TcpStream::connect(("127.0.0.1", port)).is_err() {
        assert!(
            start.elapsed() < Duration::from_secs(20),
            "chromedriver did not listen"
        );
        std::thread::sleep(Duration::from_millis(50));
    }
    Some(driver)
}

async fn browser(driver: &Driver, profile: &Path) -> WebDriver {
    let mut caps = DesiredCapabilities::chrome();
    caps.set_binary(CHROMIUM).unwrap();
    for arg in [
        "--headless=new",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-dev-shm-usage",
        "--disable-quic",
        "--no-first-run",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        "--window-size=1280,800",
        "--force-device-scale-factor=1",
    ] {
        caps.add_arg(arg).unwrap();
    }
    caps.add_arg(&format!("--user-data-dir={}", profile.display()))
        .unwrap();
    WebDriver::new(driver.url.clone(), caps)
        .await
        .expect("browser session")
}

fn screenshots() -> PathBuf {
    // target/debug/deps/it-… → target/screenshots
    let exe = std::env::current_exe().expect("exe");
    let target = exe
        .ancestors()
        .nth(3)
        .map(Path::to_path_buf)
        .unwrap_or_else(|| PathBuf::from("target"));
    let dir = target.join("screenshots");
    std::fs::create_dir_all(&dir).expect("screenshot folder");
    dir
}

async fn js(d: &WebDriver, script: &str) -> Value {
    d.execute(script, Vec::new())
        .await
        .unwrap_or_else(|e| panic!("script {script}: {e}"))
        .json()
        .clone()
}

async fn wait_js(d: &WebDriver, script: &str, what: &str) {
    let start = Instant::now();
    loop {
        if js(d, script).await == json!(true) {
            return;
        }
        assert!(
            start.elapsed() < Duration::from_secs(20),
            "timed out waiting for {what}"
        );
        tokio::time::sleep(Duration::from_millis(100)).await;
    }
}

/// The element once it exists: polls, since a page may still be loading after a click.
async fn wait_for(d: &WebDriver, by: By) -> thirtyfour::WebElement {
    d.query(by)
        .wait(Duration::from_secs(20), Duration::from_millis(100))
        .first()
        .await
        .unwrap_or_else(|e| panic!("element never appeared: {e}"))
}

async fn fill(d: &WebDriver, css: &str, text: &str) {
    let e = d
        .query(By::Css(css))
        .wait(Duration::from_secs(20), Duration::from_millis(100))
        .first()
        .await
        .unwrap_or_else(|_| panic!("{css}"));
    // Emptied by script rather than WebDriver's clear, which fires a change event of its own.
    d.execute("arguments[0].value = '';", vec![e.to_json().unwrap()])
        .await
        .unwrap();
    e.send_keys(text).await.unwrap();
}

async fn click(d: &WebDriver, css: &str) {
    d.query(By::Css(css))
        .wait(Duration::from_secs(20), Duration::from_millis(100))
        .first()
        .await
        .unwrap_or_else(|_| panic!("no {css}"))
        .click()
        .await
        .unwrap_or_else(|e| panic!("click {css}: {e}"));
}

/// The editor's view: (zoom, pan x, pan y, canvas left, canvas top) in CSS px.
async fn view(d: &WebDriver) -> [f64; 5] {
    let v = js(
        d,
        "const v = window.goalEditor.view; const r = document.getElementById('stage-canvas').getBoundingClientRect(); return [v.z, v.px, v.py, r.left, r.top];",
    )
    .await;
    let f = |i: usize| v[i].as_f64().expect("number");
    [f(0), f(1), f(2), f(3), f(4)]
}

/// Clicks on the canvas over frame point (x, y); returns the frame point the click really hit
/// (the pointer lands on whole viewport pixels), by the page's own convention
/// x = (cx − px)/z − 0.5.
async fn click_frame(d: &WebDriver, x: f64, y: f64) -> [f64; 2] {
    let [z, px, py, left, top] = view(d).await;
    let vx = (left + px + (x + 0.5) * z).round();
    let vy = (top + py + (y + 0.5) * z).round();
    d.action_chain()
        .move_to(vx as i64, vy as i64)
        .click()
        .perform()
        .await
        .expect("click on canvas");
    [(vx - left - px) / z - 0.5, (vy - top - py) / z - 0.5]
}

async fn key(d: &WebDriver, k: impl Into<thirtyfour::TypingData>) {
    d.find(By::Id("stage-canvas"))
        .await
        .unwrap()
        .send_keys(k)
        .await
        .unwrap();
}

async fn save(d: &WebDriver, note: &str, revision: i64) {
    click(d, "#save").await;
    fill(d, "#save-note", note).await;
    click(d, "#save-confirm").await;
    wait_js(
        d,
        &format!(
            "return document.getElementById('editor').dataset.savedRevision === '{revision}';"
        ),
        &format!("revision {revision} saved"),
    )
    .await;
}

/// A headless browser against a fresh server on SQLite, whose first owner has signed up through
/// the start-up link; `None` (after the SKIP line) without Chromium.
struct Stage {
    a: WebDriver,
    s: Server,
    shots: PathBuf,
    work: tempfile::TempDir,
    db: TestDb,
    driver: Driver,
}

async fn stage(test: &str, db_name: &str, extra: &[&str], owner: [&str; 3]) -> Option<Stage> {
    let driver = chromedriver(test)?;
    let db = fresh_db(Db::Sqlite, db_name).await.expect("sqlite");
    let (s, link) = start_with_link(&db.url, &db.data_dir, extra);
    let work = tempfile::tempdir().unwrap();
    let a = browser(&driver, &work.path().join("a")).await;
    let [name, login, password] = owner;
    sign_up(&a, &link, name, login, password).await;
    Some(Stage {
        a,
        s,
        shots: screenshots(),
        work,
        db,
        driver,
    })
}

/// The first owner's sign-up through the start-up link; ends on the team home.
async fn sign_up(d: &WebDriver, link: &str, name: &str, login: &str, password: &str) {
    d.goto(link).await.unwrap();
    fill(d, "#display_name", name).await;
    fill(d, "#login", login).await;
    fill(d, "#password", password).await;
    fill(d, "#password_again", password).await;
    click(d, "form.stack button.primary").await;
    wait_js(d, "return location.pathname === '/';", "home").await;
}

async fn sign_in(d: &WebDriver, base: &str, login: &str, password: &str) {
    d.goto(format!("{base}/signin")).await.unwrap();
    fill(d, "#login", login).await;
    fill(d, "#password", password).await;
    click(d, "form[action='/signin'] button[type=submit]").await;
    wait_js(
        d,
        "return location.pathname === '/' && !!document.querySelector('.who');",
        "home after sign-in",
    )
    .await;
}

fn close(a: [f64; 2], b: &Value, tol: f64) -> bool {
    (a[0] - b[0].as_f64().unwrap()).abs() <= tol && (a[1] - b[1].as_f64().unwrap()).abs() <= tol
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn editor_end_to_end() {
    // The first owner signs up through the start-up link, signs out, and signs in again.
    let Some(Stage {
        a,
        s,
        shots,
        work,
        db: _db,
        driver,
    }) = stage(
        "editor_end_to_end",
        "editor_end_to_end",
        &[],
        ["Tamsin Greeve", "tamsin", "potting bench 1"],
    )
    .await
    else {
        return;
    };
    click(&a, "form[action='/signout'] button").await;
    wait_js(&a, "return location.pathname === '/signin';", "signed out").await;
    sign_in(&a, &s.base, "tamsin", "potting bench 1").await;
    let api = s.token("my team", "editor");

    // A camera with a no-go zone, then a frame uploaded through the file picker.
    click(&a, "#new-camera summary").await;
    fill(&a, "#cam-name", "bench overhead").await;
    fill(&a, "#cam-w", "320").await;
    fill(&a, "#cam-h", "240").await;
    fill(
        &a,
        "#cam-nogo",
        "[[[270, 10], [310, 10], [310, 50], [270, 50]]]",
    )
    .await;
    click(&a, "#new-camera button.primary").await;
    wait_js(
        &a,
        "return !!document.querySelector('input[type=file]');",
        "camera added",
    )
    .await;
    let frame_png = work.path().join("bench.png");
    std::fs::write(&frame_png, png(320, 240, 40)).unwrap();
    a.find(By::Css("input[type=file]"))
        .await
        .unwrap()
        .send_keys(frame_png.display().to_string())
        .await
        .unwrap();
    wait_js(
        &a,
        "return !!document.querySelector('.frame-card.fresh');",
        "frame uploaded",
    )
    .await;
    click(&a, ".frame-card.fresh a.new-goal").await;
    wait_js(
        &a,
        "return document.getElementById('editor')?.dataset.ready === '1';",
        "editor ready",
    )
    .await;

    // A point goal clicked at 1×: source and target land on the clicked pixels.
    click(&a, "[data-view=one]").await;
    assert_eq!(view(&a).await[0], 1.0);
    click(&a, "[data-tool=point]").await;
    let src1 = click_frame(&a, 40.0, 50.0).await;
    let dst1 = click_frame(&a, 120.0, 80.0).await;
    // And one after zooming in twice (4×) with the buttons.
    click(&a, "[data-view=in]").await;
    click(&a, "[data-view=in]").await;
    assert_eq!(view(&a).await[0], 4.0);
    let src2 = click_frame(&a, 150.0, 100.0).await;
    let dst2 = click_frame(&a, 190.0, 150.0).await;
    fill(&a, "#goal-name", "pot to mat").await;
    save(&a, "two points", 1).await;
    let (st, goals) = s.get("/api/goals", Some(&api)).await;
    assert_eq!(st.as_u16(), 200);
    let goal_id = goals["items"][0]["id"].as_str().unwrap().to_string();
    let (_, rev1) = s
        .get(&format!("/api/goals/{goal_id}/revisions/1"), Some(&api))
        .await;
    let t = &rev1["terms"];
    // Exactly the page's mapping of where the pointer landed, and within half a pixel of the
    // pixel aimed at.
    assert!(
        close(src1, &t[0]["source"], 1e-3),
        "{src1:?} vs {}",
        t[0]["source"]
    );
    assert!(
        close(dst1, &t[0]["target"], 1e-3),
        "{dst1:?} vs {}",
        t[0]["target"]
    );
    assert!(
        close([40.0, 50.0], &t[0]["source"], 0.5),
        "{}",
        t[0]["source"]
    );
    assert!(
        close([120.0, 80.0], &t[0]["target"], 0.5),
        "{}",
        t[0]["target"]
    );
    assert!(
        close(src2, &t[1]["source"], 1e-3) && close(dst2, &t[1]["target"], 1e-3),
        "{t}"
    );
    assert!(
        close([150.0, 100.0], &t[1]["source"], 0.5 / 4.0 + 1e-9),
        "{}",
        t[1]["source"]
    );
    assert!(
        close([190.0, 150.0], &t[1]["target"], 0.5 / 4.0 + 1e-9),
        "{}",
        t[1]["target"]
    );

    // An area, then an object move from three points; a label and a weight edited; revision 2.
    click(&a, "[data-view=fit]").await;
    click(&a, "[data-tool=region]").await;
    click_frame(&a, 60.0, 150.0).await;
    for (x, y) in [
        (200.0, 160.0),
        (250.0, 160.0),
        (250.0, 210.0),
        (200.0, 210.0),
    ] {
        click_frame(&a, x, y).await;
    }
    key(&a, Key::Enter).await;
    click(&a, "[data-tool=rigid]").await;
    for (x, y) in [(30.0, 200.0), (50.0, 200.0), (40.0, 220.0)] {
        click_frame(&a, x, y).await;
    }
    key(&a, Key::Enter).await;
    for (x, y) in [(100.0, 190.0), (120.0, 190.0), (110.0, 210.0)] {
        click_frame(&a, x, y).await;
    }
    fill(&a, "#term-0-label", "pot").await;
    a.find(By::Id("term-0-label"))
        .await
        .unwrap()
        .send_keys(Key::Tab)
        .await
        .unwrap();
    fill(&a, "#term-1-weight", "2").await;
    a.find(By::Id("term-1-weight"))
        .await
        .unwrap()
        .send_keys(Key::Tab)
        .await
        .unwrap();
    // Select the area's source so its cost heat shows in the screenshot.
    click(&a, ".term[data-index='2'] .term-pick").await;
    tokio::time::sleep(Duration::from_millis(900)).await;
    a.screenshot(&shots.join("editor.png")).await.unwrap();
    save(&a, "area and object move", 2).await;
    let (_, rev2) = s
        .get(&format!("/api/goals/{goal_id}/revisions/2"), Some(&api))
        .await;
    let kinds: Vec<&str> = rev2["terms"]
        .as_array()
        .unwrap()
        .iter()
        .map(|t| t["kind"].as_str().unwrap())
        .collect();
    assert_eq!(kinds, ["point", "point", "region", "rigid"], "{rev2}");
    assert_eq!(rev2["terms"][0]["label"], "pot");
    assert_eq!(rev2["terms"][1]["weight"], 2.0);
    assert_eq!(rev2["terms"][2]["polygon"].as_array().unwrap().len(), 4);
    assert_eq!(rev2["terms"][3]["sources"].as_array().unwrap().len(), 3);
    assert_eq!(rev2["terms"][3]["targets"].as_array().unwrap().len(), 3);
    assert!(
        rev2["derived"]["rigid"][0]["translation"].is_array(),
        "{rev2}"
    );

    // Arrow keys nudge the selected point: 1 px, Shift 0.1 px.
    click(&a, ".term[data-index='0'] .term-pick").await;
    let before = js(&a, "return window.goalEditor.state.terms[0].source;").await;
    key(&a, Key::Right).await;
    key(&a, Key::Shift + Key::Down).await;
    let after = js(&a, "return window.goalEditor.state.terms[0].source;").await;
    let dx = after[0].as_f64().unwrap() - before[0].as_f64().unwrap();
    let dy = after[1].as_f64().unwrap() - before[1].as_f64().unwrap();
    assert!(
        (dx - 1.0).abs() < 1e-9 && (dy - 0.1).abs() < 1e-9,
        "{before} → {after}"
    );

    // Each tool answers to the initial of its name; erasing is a visible toggle of the brush.
    for (k, tool) in [
        ("i", "region"),
        ("w", "rigid"),
        ("o", "mask"),
        ("s", "inspect"),
        ("p", "point"),
    ] {
        key(&a, k).await;
        let pressed = js(
            &a,
            &format!(
                "return document.querySelector('[data-tool={tool}]').getAttribute('aria-pressed');"
            ),
        )
        .await;
        assert_eq!(pressed, "true", "key {k} picks {tool}");
    }
    key(&a, "o").await;
    let erase = "return document.getElementById('paint-erase').getAttribute('aria-pressed');";
    assert_eq!(js(&a, erase).await, "false");
    click(&a, "#paint-erase").await;
    assert_eq!(
        js(&a, erase).await,
        "true",
        "the Erase button turns erasing on"
    );
    key(&a, "e").await;
    assert_eq!(js(&a, erase).await, "false", "E turns it off again");
    key(&a, "s").await;

    // `,` and `.` turn the selected object's targets about their centroid (Shift: 0.1°), and so
    // do the buttons on its card. Angles in image coordinates: atan2(dy, dx), y down.
    click(&a, ".term[data-index='3'] .term-pick").await;
    let angle = |v: &serde_json::Value| -> f64 {
        let pts: Vec<[f64; 2]> = (0..3)
            .map(|k| [v[k][0].as_f64().unwrap(), v[k][1].as_f64().unwrap()])
            .collect();
        let c = [
            pts.iter().map(|p| p[0]).sum::<f64>() / 3.0,
            pts.iter().map(|p| p[1]).sum::<f64>() / 3.0,
        ];
        (pts[0][1] - c[1]).atan2(pts[0][0] - c[0]).to_degrees()
    };
    let targets = "return window.goalEditor.state.terms[3].targets;";
    let t0 = angle(&js(&a, targets).await);
    key(&a, ".").await;
    let t1 = angle(&js(&a, targets).await);
    assert!((t1 - t0 - 1.0).abs() < 0.1, "`.` turns by +1°: {t0} → {t1}");
    key(&a, Key::Shift + ",").await;
    let t2 = angle(&js(&a, targets).await);
    assert!(
        (t2 - t1 + 0.1).abs() < 0.05,
        "Shift+, turns by −0.1°: {t1} → {t2}"
    );
    click(&a, ".term[data-index='3'] [data-turn='-1']").await;
    let t3 = angle(&js(&a, targets).await);
    assert!(
        (t3 - t2 + 1.0).abs() < 0.1,
        "the ⟲ button turns by −1°: {t2} → {t3}"
    );

    // A second browser session on the same goal; the first saves revision 3 meanwhile.
    let b = browser(&driver, &work.path().join("b")).await;
    sign_in(&b, &s.base, "tamsin", "potting bench 1").await;
    b.goto(format!("{}/goals/{goal_id}", s.base)).await.unwrap();
    wait_js(
        &b,
        "return document.getElementById('editor')?.dataset.ready === '1';",
        "second editor",
    )
    .await;
    save(&a, "nudged the pot", 3).await;
    fill(&b, "#term-1-weight", "3").await;
    b.find(By::Id("term-1-weight"))
        .await
        .unwrap()
        .send_keys(Key::Tab)
        .await
        .unwrap();
    click(&b, "#save").await;
    fill(&b, "#save-note", "heavier second point").await;
    click(&b, "#save-confirm").await;
    wait_js(
        &b,
        "return !document.getElementById('conflict').hidden;",
        "conflict message",
    )
    .await;
    let text = b
        .find(By::Id("conflict-text"))
        .await
        .unwrap()
        .text()
        .await
        .unwrap();
    assert!(
        text.contains("changed since you loaded it") && text.contains("revision 3"),
        "{text}"
    );
    b.screenshot(&shots.join("editor-conflict.png"))
        .await
        .unwrap();
    // Keep my change on top of the latest, and save again: revision 4.
    click(&b, "#conflict-keep").await;
    wait_js(
        &b,
        "return document.getElementById('save-dialog').open;",
        "save dialog again",
    )
    .await;
    click(&b, "#save-confirm").await;
    wait_js(
        &b,
        "return document.getElementById('editor').dataset.savedRevision === '4';",
        "revision 4",
    )
    .await;
    let (_, rev4) = s.get(&format!("/api/goals/{goal_id}"), Some(&api)).await;
    assert_eq!(rev4["revision"], 4);
    assert_eq!(rev4["terms"][1]["weight"], 3.0);

    // History: restore revision 1 as revision 5.
    a.goto(format!("{}/goals/{goal_id}/history", s.base))
        .await
        .unwrap();
    a.screenshot(&shots.join("history.png")).await.unwrap();
    click(&a, "li[data-revision='1'] form.restore button").await;
    wait_js(&a, "return !!document.querySelector('.flash') && document.querySelector('.flash').textContent.includes('restored');", "restored").await;
    let (_, latest) = s.get(&format!("/api/goals/{goal_id}"), Some(&api)).await;
    assert_eq!(latest["revision"], 5);
    assert_eq!(latest["terms"], rev1["terms"]);
    a.goto(format!("{}/goals/{goal_id}/compare?a=2&b=5", s.base))
        .await
        .unwrap();
    tokio::time::sleep(Duration::from_millis(500)).await;
    a.screenshot(&shots.join("compare.png")).await.unwrap();

    // A goal named like a script renders as text.
    let (st, _) = s
        .post(
            "/api/goals",
            Some(&api),
            &json!({
                "name": "<script>alert(1)</script>", "frame_id": latest["frame_id"],
                "terms": [{"kind": "point", "source": [5.0, 5.0], "target": [9.0, 9.0]}]
            }),
        )
        .await;
    assert_eq!(st.as_u16(), 201);
    a.goto(&s.base).await.unwrap();
    let names: Vec<String> = {
        let mut v = Vec::new();
        for e in a.find_all(By::Css("a.goal-link")).await.unwrap() {
            v.push(e.text().await.unwrap());
        }
        v
    };
    assert!(
        names.iter().any(|n| n == "<script>alert(1)</script>"),
        "{names:?}"
    );
    assert!(a.get_alert_text().await.is_err(), "no script ran");
    a.screenshot(&shots.join("home.png")).await.unwrap();

    // The owner invites a viewer; in the second browser they join and see no edit controls.
    a.goto(format!("{}/team", s.base)).await.unwrap();
    fill(&a, "#invite-note", "Rosa").await;
    a.find(By::Css("#invite-role option[value=viewer]"))
        .await
        .unwrap()
        .click()
        .await
        .unwrap();
    click(&a, "form[action='/team/invites'] button").await;
    let invite = wait_for(&a, By::Id("secret-value"))
        .await
        .value()
        .await
        .unwrap()
        .unwrap();
    click(&b, "form[action='/signout'] button").await;
    wait_js(
        &b,
        "return location.pathname === '/signin';",
        "second browser signed out",
    )
    .await;
    b.goto(&invite).await.unwrap();
    fill(&b, "#display_name", "Rosa").await;
    fill(&b, "#login", "rosa").await;
    fill(&b, "#password", "tomato seedling").await;
    fill(&b, "#password_again", "tomato seedling").await;
    click(&b, "form.stack button.primary").await;
    wait_js(&b, "return location.pathname === '/';", "viewer home").await;
    assert!(
        b.find_all(By::Css("a.new-goal")).await.unwrap().is_empty(),
        "viewers get no new-goal links"
    );
    b.goto(format!("{}/goals/{goal_id}", s.base)).await.unwrap();
    wait_js(
        &b,
        "return document.getElementById('editor')?.dataset.ready === '1';",
        "viewer editor",
    )
    .await;
    assert!(
        b.find_all(By::Css("[data-tool]")).await.unwrap().is_empty(),
        "no tools for a viewer"
    );
    assert!(
        b.find_all(By::Id("save")).await.unwrap().is_empty(),
        "no save for a viewer"
    );
    // Forged writes from the viewer's page: with the CSRF token the role refuses, without it
    // the CSRF check refuses.
    let statuses = b
        .execute_async(
            r#"const done = arguments[arguments.length - 1];
            const token = document.querySelector('meta[name="csrf-token"]').content;
            const body = JSON.stringify({name: 'forged', frame_id: 'x', terms: []});
            Promise.all([
              fetch('/api/goals', {method: 'POST', headers: {'Content-Type': 'application/json', 'X-CSRF-Token': token}, body}),
              fetch('/api/goals', {method: 'POST', headers: {'Content-Type': 'application/json'}, body}),
              fetch('/goals/GOAL/restore', {method: 'POST', headers: {'Content-Type': 'application/x-www-form-urlencoded'}, body: 'revision=1&etag=x&csrf=' + token}),
            ]).then(rs => done(rs.map(r => r.status)));"#
                .replace("GOAL", &goal_id),
            Vec::new(),
        )
        .await
        .unwrap()
        .json()
        .clone();
    assert_eq!(statuses, json!([403, 403, 403]));

    // Tablet size: the sheet moves under the frame.
    a.set_window_rect(0, 0, 820, 1180).await.unwrap();
    a.goto(format!("{}/goals/{goal_id}", s.base)).await.unwrap();
    wait_js(
        &a,
        "return document.getElementById('editor')?.dataset.ready === '1';",
        "tablet editor",
    )
    .await;
    a.screenshot(&shots.join("editor-tablet.png"))
        .await
        .unwrap();
    let overflow = js(
        &a,
        "return document.documentElement.scrollWidth > window.innerWidth + 1;",
    )
    .await;
    assert_eq!(
        overflow,
        json!(false),
        "no sideways scrolling at tablet size"
    );

    b.quit().await.ok();
    a.quit().await.ok();
}

/// The editor's canvas and the overlay PNG of the same goal, side by side in
/// `target/screenshots/editor-vs-overlay.png`: both draw in the marking code of
/// `goalsmith::draw::marks`, so each kind's colour and the zone colours appear in both.
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn editor_and_overlay_wear_the_same_marks() {
    use goalsmith::draw::marks;
    let Some(Stage {
        a,
        s,
        shots: _,
        work: _work,
        db: _db,
        driver: _driver,
    }) = stage(
        "editor_and_overlay_wear_the_same_marks",
        "editor_vs_overlay",
        &[],
        ["Ilse Marten", "ilse", "seed trays at noon"],
    )
    .await
    else {
        return;
    };
    let api = s.token("my team", "editor");

    // A 320 × 240 frame, dark to light, with a camera that has both kinds of zone.
    let (st, cam) = s
        .post(
            "/api/cameras",
            Some(&api),
            &json!({"name": "bench", "width": 320, "height": 240,
                    "safe_zone": [[6, 6], [313, 6], [313, 233], [6, 233]],
                    "no_go_zones": [[[250, 14], [304, 14], [304, 60], [250, 60]]]}),
        )
        .await;
    assert_eq!(st.as_u16(), 201, "{cam}");
    let frame_png = {
        let img = image::RgbImage::from_fn(320, 240, |x, y| {
            let v = (50 + x * 120 / 320 + y * 30 / 240) as u8;
            image::Rgb([v, v.saturating_add(8), v])
        });
        let mut out = std::io::Cursor::new(Vec::new());
        img.write_to(&mut out, image::ImageFormat::Png).unwrap();
        out.into_inner()
    };
    let cam_id = cam["id"].as_str().unwrap();
    let (st, frame) = s
        .post_bytes(
            &format!("/api/cameras/{cam_id}/frames"),
            Some(&api),
            "image/png",
            frame_png,
        )
        .await;
    assert_eq!(st.as_u16(), 201, "{frame}");
    let painted: Vec<bool> = (0..320 * 240)
        .map(|k| {
            let (i, j) = ((k % 320) as f64, (k / 320) as f64);
            ((i - 250.0) / 34.0).powi(2) + ((j - 180.0) / 22.0).powi(2) <= 1.0
        })
        .collect();
    let mask = {
        use base64::Engine;
        let png = goalsmith::images::encode_mask(320, 240, &painted).unwrap();
        base64::engine::general_purpose::STANDARD.encode(png)
    };
    let mut terms = json!([
        {"kind": "point", "label": "pot", "source": [40, 50], "target": [150, 40],
         "tolerance_px": 10},
        {"kind": "region", "label": "tray", "source": [40, 200],
         "polygon": [[110, 150], [190, 145], [200, 215], [120, 222]]},
        {"kind": "mask", "label": "mat", "source": [200, 110], "mask_png_base64": mask},
        {"kind": "rigid", "label": "trowel",
         "sources": [[40, 112], [80, 112], [60, 142]],
         "targets": [[215, 82], [250, 100], [222, 122]]}
    ]);
    let (st, rev) = s
        .post(
            "/api/goals",
            Some(&api),
            &json!({"name": "one of each", "frame_id": frame["id"], "terms": terms}),
        )
        .await;
    assert_eq!(st.as_u16(), 201, "{rev}");
    let goal = rev["goal_id"].as_str().unwrap().to_string();

    // The editor at 1:1 without the cost heat: one frame pixel per CSS pixel, as the overlay
    // of a frame this size draws one mark unit per pixel.
    a.goto(format!("{}/goals/{goal}", s.base)).await.unwrap();
    wait_js(
        &a,
        "return document.getElementById('editor')?.dataset.ready === '1';",
        "editor ready",
    )
    .await;
    click(&a, "[data-view=one]").await;
    js(
        &a,
        "const h = document.getElementById('heat-toggle'); if (h.checked) h.click(); return true;",
    )
    .await;
    tokio::time::sleep(Duration::from_millis(300)).await;
    let shot = a
        .find(By::Id("stage-canvas"))
        .await
        .unwrap()
        .screenshot_as_png()
        .await
        .unwrap();
    let canvas = image::load_from_memory(&shot).unwrap().to_rgba8();
    // The frame's part of the canvas: at 1:1 it starts at the view's pan (px, py).
    let [z, px, py, _, _] = view(&a).await;
    assert_eq!(z, 1.0);
    let editor = image::imageops::crop_imm(&canvas, px as u32, py as u32, 320, 240).to_image();
    let overlay = {
        let resp = s
            .client
            .get(s.url(&format!("/api/goals/{goal}/revisions/1/overlay.png")))
            .bearer_auth(&api)
            .send()
            .await
            .unwrap();
        assert_eq!(resp.status().as_u16(), 200);
        image::load_from_memory(&resp.bytes().await.unwrap())
            .unwrap()
            .to_rgba8()
    };

    // Side by side: the editor's canvas on the left, the overlay on the right.
    let gap = 12;
    let (w, h) = (
        editor.width() + gap + overlay.width(),
        editor.height().max(overlay.height()),
    );
    let mut both = image::RgbaImage::from_pixel(w, h, image::Rgba([255, 255, 255, 255]));
    image::imageops::overlay(&mut both, &editor, 0, 0);
    image::imageops::overlay(&mut both, &overlay, i64::from(editor.width() + gap), 0);
    both.save(screenshots().join("editor-vs-overlay.png"))
        .unwrap();
    image::imageops::resize(&both, w * 2, h * 2, image::imageops::FilterType::Nearest)
        .save(screenshots().join("editor-vs-overlay-x2.png"))
        .unwrap();
    // How close the two pictures are, pixel by pixel (text and anti-aliasing differ a little
    // between the browser and tiny-skia; the marks must not).
    let close = editor
        .pixels()
        .zip(overlay.pixels())
        .filter(|(p, q)| (0..3).all(|k| p.0[k].abs_diff(q.0[k]) <= 16))
        .count();
    let share = close as f64 / f64::from(320 * 240);
    eprintln!(
        "editor and overlay agree within 16 levels on {:.1} % of the pixels",
        share * 100.0
    );

    // Every kind's colour and both zone colours, solid, in both pictures (a few levels of
    // slack for the browser's colour handling).
    let count = |img: &image::RgbaImage, c: marks::Rgba| {
        img.pixels()
            .filter(|p| (0..3).all(|k| p.0[k].abs_diff(c.0[k]) <= 2))
            .count()
    };
    for (what, c) in [
        ("point", marks::POINT),
        ("region", marks::REGION),
        ("mask", marks::MASK),
        ("rigid", marks::RIGID),
        ("safe zone", marks::SAFE),
        ("no-go zone", marks::NO_GO),
        ("label", marks::LABEL_INK),
    ] {
        let (in_editor, in_overlay) = (count(&editor, c), count(&overlay, c));
        assert!(
            in_editor >= 20 && in_overlay >= 20,
            "{what} {}: {in_editor} pixels in the editor, {in_overlay} in the overlay",
            c.hex()
        );
    }
    // The browser loads the same constants the overlay used.
    let module = s
        .client
        .get(s.url("/static/marks.js"))
        .send()
        .await
        .unwrap();
    assert_eq!(module.status().as_u16(), 200);
    assert!(
        module.headers()["content-type"]
            .to_str()
            .unwrap()
            .starts_with("text/javascript")
    );
    assert_eq!(
        module.text().await.unwrap(),
        goalsmith::draw::marks::browser_module()
    );

    // Revision 2 moves the pot's target; the comparison draws both, and its legend's swatches
    // are drawn with the same marks: each kind's swatch is a source disc in that kind's colour.
    let resp = s
        .client
        .get(s.url(&format!("/api/goals/{goal}")))
        .bearer_auth(&api)
        .send()
        .await
        .unwrap();
    let tag = etag(&resp).expect("etag");
    terms[0]["target"] = json!([160, 70]);
    let (st, _, _) = s
        .put_goal(
            &goal,
            &api,
            Some(&tag),
            &json!({"name": "one of each", "frame_id": frame["id"], "terms": terms,
                    "note": "pot further down"}),
        )
        .await;
    assert_eq!(st.as_u16(), 200);
    a.set_window_rect(0, 0, 1280, 1300).await.unwrap();
    a.goto(format!("{}/goals/{goal}/compare?a=1&b=2", s.base))
        .await
        .unwrap();
    wait_js(
        &a,
        "return document.getElementById('compare-canvas')?.dataset.ready === '1';",
        "comparison drawn",
    )
    .await;
    let swatches = js(
        &a,
        "return [...document.querySelectorAll('#compare-legend li')].map((li) => [li.dataset.swatch, li.textContent.trim(), [...li.querySelector('canvas').getContext('2d').getImageData(26, 12, 1, 1).data]]);",
    )
    .await;
    let rows = swatches.as_array().expect("legend rows");
    for (kind, c) in marks::KIND_COLOURS.iter().take(4) {
        let row = rows
            .iter()
            .find(|r| r[0] == "kind" && r[1].as_str().is_some_and(|t| t.contains(kind_words(kind))))
            .unwrap_or_else(|| panic!("no legend row for {kind}: {swatches}"));
        assert_eq!(row[2], json!(c.0), "{kind} swatch");
    }
    for what in [
        "older",
        "newer",
        "source",
        "target",
        "tolerance",
        "fitted",
        "area",
        "painted",
        "safe",
        "no_go",
    ] {
        assert!(
            rows.iter().any(|r| r[0] == what),
            "no legend row {what}: {swatches}"
        );
    }
    a.find(By::Css(".compare-grid section:last-child"))
        .await
        .unwrap()
        .screenshot(&screenshots().join("compare-legend.png"))
        .await
        .unwrap();
    a.quit().await.ok();
}

/// How the legend names each kind (the editor's tool names).
fn kind_words(kind: &str) -> &'static str {
    match kind {
        "point" => "point to point",
        "region" => "into an area",
        "mask" => "onto paint",
        "rigid" => "whole object",
        _ => "learned reward",
    }
}

/// A page's view: (zoom, pan x, pan y, canvas left, canvas top) in CSS px, from the view the
/// page exposes as `window.<page>.view` and its canvas `#<canvas>`.
async fn page_view(d: &WebDriver, page: &str, canvas: &str) -> [f64; 5] {
    let v = js(
        d,
        &format!("const v = window.{page}.view; const r = document.getElementById('{canvas}').getBoundingClientRect(); return [v.z, v.px, v.py, r.left, r.top];"),
    )
    .await;
    let f = |i: usize| v[i].as_f64().expect("number");
    [f(0), f(1), f(2), f(3), f(4)]
}

/// The viewport pixel over frame point (x, y) of a page's canvas, and the frame point that
/// pixel really is (the pointer lands on whole viewport pixels): x = (cx − px)/z − 0.5.
async fn page_pixel(
    d: &WebDriver,
    page: &str,
    canvas: &str,
    x: f64,
    y: f64,
) -> ([i64; 2], [f64; 2]) {
    let [z, px, py, left, top] = page_view(d, page, canvas).await;
    let vx = (left + px + (x + 0.5) * z).round();
    let vy = (top + py + (y + 0.5) * z).round();
    (
        [vx as i64, vy as i64],
        [(vx - left - px) / z - 0.5, (vy - top - py) / z - 0.5],
    )
}

async fn demo_pixel(d: &WebDriver, x: f64, y: f64) -> ([i64; 2], [f64; 2]) {
    page_pixel(d, "demoPage", "demo-canvas", x, y).await
}

fn xy(s: &Value) -> [f64; 2] {
    [s["x"].as_f64().expect("x"), s["y"].as_f64().expect("y")]
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn demo_page_end_to_end() {
    // A demo of a smooth texture moved by STEP px a frame (tests/it/support.rs): a point is
    // started by clicking, followed to 100 % on the page, corrected by dragging, and the demo
    // becomes a goal. Screenshots: target/screenshots/demo-*.png.
    const W: u32 = 320;
    const H: u32 = 240;
    const FRAMES: usize = 24;
    const STEP: [f64; 2] = [1.5, 0.75];
    let Some(Stage {
        a,
        s,
        shots,
        work,
        db: _db,
        driver: _driver,
    }) = stage(
        "demo_page_end_to_end",
        "demo_page_end_to_end",
        &[],
        ["Ilse Marrow", "ilse", "seed trays 22"],
    )
    .await
    else {
        return;
    };
    let api = s.token("my team", "editor");
    let (st, cam) = s
        .post(
            "/api/cameras",
            Some(&api),
            &json!({"name": "bench side", "width": W, "height": H}),
        )
        .await;
    assert_eq!(st, reqwest::StatusCode::CREATED, "{cam}");

    // The demo is uploaded through the home page's drop zone (its file picker).
    a.refresh().await.unwrap();
    let zip = work.path().join("tray slide.zip");
    std::fs::write(&zip, texture_demo_zip(W, H, FRAMES, STEP)).unwrap();
    wait_for(&a, By::Css("form.demo-upload input[type=file]"))
        .await
        .send_keys(zip.display().to_string())
        .await
        .unwrap();
    wait_js(
        &a,
        "return location.pathname.startsWith('/demos/') && document.getElementById('demo')?.dataset.ready === '1';",
        "demo page after the upload",
    )
    .await;
    let demo = js(
        &a,
        "return JSON.parse(document.getElementById('demo').dataset.demo).demo.id;",
    )
    .await
    .as_str()
    .expect("demo id")
    .to_string();
    wait_js(
        &a,
        "return document.getElementById('demo').dataset.shown === '0';",
        "frame 0 shown",
    )
    .await;

    // The page fits the window's width (nothing hangs out sideways).
    let wide = js(
        &a,
        "const w = document.documentElement.clientWidth; return [...document.querySelectorAll('body *')].filter((e) => e.getBoundingClientRect().right > w + 0.5).map((e) => e.tagName + '#' + e.id + '.' + e.className + ' ' + Math.round(e.getBoundingClientRect().right)).slice(0, 8);",
    )
    .await;
    assert_eq!(wide, json!([]), "elements wider than the window");
    // Start a track by clicking the big blob's centre on frame 0.
    fill(&a, "#track-label", "tray corner").await;
    click(&a, "#place-point").await;
    let ([vx, vy], seed) = demo_pixel(&a, 70.0, 55.0).await;
    a.action_chain()
        .move_to(vx, vy)
        .click()
        .perform()
        .await
        .expect("click on the frame");
    // The progress bar of the tracking operation reaches 100 %.
    wait_js(
        &a,
        "const li = document.querySelector('#running-list li.operation'); return !!li && li.dataset.state === 'succeeded' && li.querySelector('progress').value === 1 && document.getElementById('demo').dataset.finished === '1';",
        "tracking at 100 %",
    )
    .await;
    let readout = js(
        &a,
        "return document.querySelector('#running-list li.operation output').textContent;",
    )
    .await;
    assert_eq!(readout, json!("100 % · done"));
    a.screenshot(&shots.join("demo-tracked.png")).await.unwrap();

    let (st, tracks) = s
        .get(&format!("/api/demos/{demo}/tracks.json"), Some(&api))
        .await;
    assert_eq!(st, reqwest::StatusCode::OK, "{tracks}");
    let track = tracks["items"][0].clone();
    assert_eq!(track["label"], "tray corner");
    let track_id = track["id"].as_str().expect("track id").to_string();
    assert_eq!(
        track["samples"].as_array().map(Vec::len),
        Some(FRAMES),
        "{track}"
    );
    let placed = sample_at(&track, 0);
    assert_eq!(placed["origin"], "manual");
    let got = xy(&placed);
    assert!(
        (got[0] - seed[0]).abs() < 1e-9 && (got[1] - seed[1]).abs() < 1e-9,
        "the click landed at {seed:?}, the track starts at {got:?}"
    );
    // The texture moves by STEP a frame, so the tracked point does too (to a tenth of a pixel:
    // the frames are rounded to 8-bit grey).
    let last = xy(&sample_at(&track, FRAMES as i64 - 1));
    let k = (FRAMES - 1) as f64;
    for (i, v) in last.iter().enumerate() {
        assert!(
            (v - (seed[i] + k * STEP[i])).abs() < 0.25,
            "frame {k}: {last:?} from {seed:?}"
        );
    }
    // The page shows every sample of the track.
    let shown = js(
        &a,
        &format!("return document.querySelector('#track-list li[data-track-id=\"{track_id}\"]').dataset.samples;"),
    )
    .await;
    assert_eq!(shown, json!(FRAMES.to_string()));

    // Step to frame 10 with the keys, and drag the point 4 px right and 3 px up there: a
    // correction, after which the frames after 10 are tracked again from where it was dropped.
    a.find(By::Id("demo-canvas"))
        .await
        .unwrap()
        .send_keys(Key::End + "")
        .await
        .unwrap();
    wait_js(
        &a,
        &format!(
            "return document.getElementById('demo').dataset.frame === '{}';",
            FRAMES - 1
        ),
        "End key",
    )
    .await;
    a.find(By::Id("demo-canvas"))
        .await
        .unwrap()
        .send_keys(Key::Home + "")
        .await
        .unwrap();
    for _ in 0..10 {
        a.find(By::Id("demo-canvas"))
            .await
            .unwrap()
            .send_keys(Key::Right + "")
            .await
            .unwrap();
    }
    wait_js(
        &a,
        "return document.getElementById('demo').dataset.frame === '10' && document.getElementById('demo').dataset.shown === '10';",
        "frame 10",
    )
    .await;
    let at10 = xy(&sample_at(&track, 10));
    let before9 = xy(&sample_at(&track, 9));
    let (from_px, from) = demo_pixel(&a, at10[0], at10[1]).await;
    let (to_px, to) = demo_pixel(&a, at10[0] + 4.0, at10[1] - 3.0).await;
    a.action_chain()
        .move_to(from_px[0], from_px[1])
        .click_and_hold()
        .move_to(
            from_px[0] + (to_px[0] - from_px[0]) / 2,
            from_px[1] + (to_px[1] - from_px[1]) / 2,
        )
        .move_to(to_px[0], to_px[1])
        .release()
        .perform()
        .await
        .expect("drag");
    wait_js(
        &a,
        "return document.getElementById('demo').dataset.finished === '2';",
        "re-tracking after the correction",
    )
    .await;
    a.screenshot(&shots.join("demo-corrected.png"))
        .await
        .unwrap();
    let (st, track) = s
        .get(&format!("/api/demos/{demo}/tracks/{track_id}"), Some(&api))
        .await;
    assert_eq!(st, reqwest::StatusCode::OK);
    let fixed = sample_at(&track, 10);
    assert_eq!(fixed["origin"], "manual", "{fixed}");
    // The drop point: where the point was grabbed, moved by the pointer's travel.
    let want = [at10[0] + (to[0] - from[0]), at10[1] + (to[1] - from[1])];
    let got = xy(&fixed);
    assert!(
        (got[0] - want[0]).abs() < 1e-6 && (got[1] - want[1]).abs() < 1e-6,
        "dropped at {want:?}, stored {got:?}"
    );
    // Frames before the correction keep their samples; the ones after follow the new point.
    assert_eq!(xy(&sample_at(&track, 9)), before9, "frame 9 is not touched");
    let after = xy(&sample_at(&track, 11));
    assert_eq!(sample_at(&track, 11)["origin"], "tracked");
    assert!(
        (after[0] - (got[0] + STEP[0])).abs() < 0.6 && (after[1] - (got[1] + STEP[1])).abs() < 0.6,
        "frame 11 {after:?} should follow the corrected point {got:?}"
    );

    // A second point near the right edge: the texture carries it off the frame, the tracker
    // loses it, and the frames after are listed to look at; a click on the entry goes there.
    a.find(By::Id("demo-canvas"))
        .await
        .unwrap()
        .send_keys(Key::Home + "")
        .await
        .unwrap();
    wait_js(
        &a,
        "return document.getElementById('demo').dataset.frame === '0';",
        "frame 0",
    )
    .await;
    fill(&a, "#track-label", "edge of the mat").await;
    click(&a, "#place-point").await;
    let ([vx, vy], _) = demo_pixel(&a, 306.0, 150.0).await;
    a.action_chain()
        .move_to(vx, vy)
        .click()
        .perform()
        .await
        .expect("click near the edge");
    wait_js(
        &a,
        "return document.getElementById('demo').dataset.finished === '3';",
        "the second track",
    )
    .await;
    let entries = js(
        &a,
        "return [...document.querySelectorAll('#review-list button')].map((b) => [b.textContent, b.dataset.frame]);",
    )
    .await;
    let entries = entries.as_array().expect("review entries").clone();
    // Every stretch is the edge track's (the first track is sure everywhere); the last is the
    // lost one running to the end (before it the window hangs over the edge: unsure).
    assert!(
        entries.iter().all(|e| e[0]
            .as_str()
            .unwrap_or("")
            .starts_with("edge of the mat: frame")),
        "{entries:?}"
    );
    let last = entries.last().expect("a stretch to look at");
    let text = last[0].as_str().unwrap_or("");
    assert!(
        text.ends_with(&format!("–{} lost", FRAMES - 1)),
        "{entries:?}"
    );
    let from = last[1].as_str().expect("frame").to_string();
    let (_, all) = s
        .get(&format!("/api/demos/{demo}/tracks.json"), Some(&api))
        .await;
    let edge = all["items"][1].clone();
    assert_eq!(edge["label"], "edge of the mat");
    let first_lost = edge["samples"]
        .as_array()
        .expect("samples")
        .iter()
        .find(|v| v["lost"] == true)
        .map(|v| v["frame"].to_string())
        .expect("a lost sample");
    assert_eq!(from, first_lost, "the entry starts at the first lost frame");
    click(&a, &format!("#review-list button[data-frame='{from}']")).await;
    wait_js(
        &a,
        &format!("return document.getElementById('demo').dataset.frame === '{from}';"),
        "the first lost frame",
    )
    .await;
    a.screenshot(&shots.join("demo-lost.png")).await.unwrap();
    // Only the first track goes into the goal.
    js(
        &a,
        &format!(
            "const i = document.querySelector('#goal-tracks input[value=\"{}\"]'); i.checked = false; i.dispatchEvent(new Event('change')); return true;",
            edge["id"].as_str().expect("id")
        ),
    )
    .await;

    // Make a goal from frames 0 to the last, and land in the editor on it.
    fill(&a, "#goal-name", "tray corner to the mat").await;
    fill(&a, "#goal-note", "from the slide demo").await;
    js(
        &a,
        "document.getElementById('demo-goal').scrollIntoView(); return true;",
    )
    .await;
    a.screenshot(&shots.join("demo-goal-form.png"))
        .await
        .unwrap();
    click(&a, "#make-goal").await;
    wait_js(
        &a,
        "return location.pathname.startsWith('/goals/') && document.getElementById('editor')?.dataset.ready === '1';",
        "the editor on the new goal",
    )
    .await;
    a.screenshot(&shots.join("demo-goal.png")).await.unwrap();
    let goal_id = js(&a, "return location.pathname.split('/')[2];")
        .await
        .as_str()
        .expect("goal id")
        .to_string();
    let (st, rev) = s.get(&format!("/api/goals/{goal_id}"), Some(&api)).await;
    assert_eq!(st, reqwest::StatusCode::OK, "{rev}");
    assert_eq!(rev["from_demo"]["demo_id"], demo.as_str());
    assert_eq!(rev["from_demo"]["tracks"], json!([track_id]));
    assert_eq!(rev["from_demo"]["start_frame"], 0);
    assert_eq!(rev["from_demo"]["end_frame"], FRAMES as i64 - 1);
    assert_eq!(rev["terms"].as_array().map(Vec::len), Some(1));
    assert_eq!(rev["terms"][0]["kind"], "point");
    let target = rev["terms"][0]["target"].clone();
    let end = xy(&sample_at(&track, FRAMES as i64 - 1));
    assert_eq!(
        target,
        json!(end),
        "the target is the track at the end frame"
    );
    // The history says where the revision came from.
    a.goto(format!("{}/goals/{goal_id}/history", s.base))
        .await
        .unwrap();
    let text = wait_for(&a, By::Css("main")).await.text().await.unwrap();
    let line = format!("made from demo {demo}, frames 0 to {}, 1 track", FRAMES - 1);
    assert!(text.contains(&line), "the history says {line:?}: {text}");
    a.screenshot(&shots.join("demo-history.png")).await.unwrap();
    click(&a, &format!(".rev-from a[href='/demos/{demo}']")).await;
    wait_js(
        &a,
        "return document.getElementById('demo')?.dataset.ready === '1';",
        "the demo page from the history",
    )
    .await;
    a.quit().await.ok();
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn demo_scenario_on_the_demo_page() {
    // `serve --demo`: the team home lists the painted demonstrations; the first one's page
    // shows the track started at load once it has run, and plays. Screenshots:
    // target/screenshots/demo-scenario-*.png.
    let Some(Stage {
        a,
        s: _s,
        shots,
        work: _work,
        db: _db,
        driver: _driver,
    }) = stage(
        "demo_scenario_on_the_demo_page",
        "demo_scenario_page",
        &["--demo"],
        ["Ilse Marrow", "ilse", "seed trays 22"],
    )
    .await
    else {
        return;
    };
    let names = js(
        &a,
        "return [...document.querySelectorAll('a.demo-link')].map((a) => a.textContent).sort();",
    )
    .await;
    assert_eq!(
        names,
        json!(["pot to mat", "tray curved", "tray pause", "tray straight"])
    );
    a.screenshot(&shots.join("demo-scenario-home.png"))
        .await
        .unwrap();
    a.query(By::XPath(
        "//a[contains(@class, 'demo-link') and text()='tray straight']",
    ))
    .first()
    .await
    .expect("the tray demo's link")
    .click()
    .await
    .unwrap();
    wait_js(
        &a,
        "return document.getElementById('demo')?.dataset.ready === '1';",
        "the demo page",
    )
    .await;
    // The track started at load covers every frame once its operation has run (reloading
    // until then: a page opened while it runs follows it too).
    let start = Instant::now();
    loop {
        let full = js(
            &a,
            "const d = JSON.parse(document.getElementById('demo').dataset.demo); const li = document.querySelector('#track-list li'); return !!li && li.dataset.samples === String(d.demo.frame_count);",
        )
        .await;
        if full == json!(true) {
            break;
        }
        assert!(
            start.elapsed() < Duration::from_secs(120),
            "the track started at load never covered the demo"
        );
        tokio::time::sleep(Duration::from_millis(500)).await;
        a.refresh().await.unwrap();
        wait_js(
            &a,
            "return document.getElementById('demo')?.dataset.ready === '1';",
            "the demo page again",
        )
        .await;
    }
    click(&a, "#play").await;
    wait_js(
        &a,
        "return Number(document.getElementById('demo').dataset.frame) >= 12;",
        "playing",
    )
    .await;
    click(&a, "#play").await;
    a.screenshot(&shots.join("demo-scenario-playing.png"))
        .await
        .unwrap();
    a.quit().await.ok();
}

async fn fit_pixel(d: &WebDriver, x: f64, y: f64) -> ([i64; 2], [f64; 2]) {
    page_pixel(d, "fitPage", "fit-canvas", x, y).await
}

async fn click_fit(d: &WebDriver, x: f64, y: f64) -> [f64; 2] {
    let (px, at) = fit_pixel(d, x, y).await;
    d.action_chain()
        .move_to(px[0], px[1])
        .click()
        .perform()
        .await
        .expect("click on the fit canvas");
    at
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn reward_fit_pages_end_to_end() {
    // Tracks of a demo (started over the API) → the fit page: the tracks ticked, a path drawn,
    // features placed with the tools → the fit runs → its page: the log-likelihood plot, the
    // held-out figures and the reward map → a goal with a learned term made there → its cost
    // maps and bundle. Screenshots: target/screenshots/fit-*.png.
    const W: u32 = 320;
    const H: u32 = 240;
    const FRAMES: usize = 16;
    const STEP: [f64; 2] = [2.0, 1.0];
    let Some(Stage {
        a,
        s,
        shots,
        work: _work,
        db: _db,
        driver: _driver,
    }) = stage(
        "reward_fit_pages_end_to_end",
        "reward_fit_pages_end_to_end",
        &[],
        ["Oona Pettersen", "oona", "watering mat 7"],
    )
    .await
    else {
        return;
    };
    let api = s.token("my team", "editor");
    let (st, cam) = s
        .post(
            "/api/cameras",
            Some(&api),
            &json!({"name": "potting bench", "width": W, "height": H}),
        )
        .await;
    assert_eq!(st, reqwest::StatusCode::CREATED, "{cam}");
    let cam = cam["id"].as_str().expect("camera").to_string();
    let (st, frame) = s
        .post_bytes(
            &format!("/api/cameras/{cam}/frames"),
            Some(&api),
            "image/png",
            texture_frame(W, H, [0.0, 0.0]),
        )
        .await;
    assert_eq!(st, reqwest::StatusCode::CREATED, "{frame}");
    let frame = frame["id"].as_str().expect("frame").to_string();
    let (st, demo) = s
        .post_bytes(
            &format!("/api/cameras/{cam}/demos?name=trays%20slide%20right"),
            Some(&api),
            "application/zip",
            texture_demo_zip(W, H, FRAMES, STEP),
        )
        .await;
    assert_eq!(st, reqwest::StatusCode::CREATED, "{demo}");
    let demo = demo["id"].as_str().expect("demo").to_string();
    for (label, x, y) in [
        ("tray a", 70.0, 55.0),
        ("tray b", 95.0, 70.0),
        ("tray c", 60.0, 75.0),
    ] {
        let (st, started) = s
            .post(
                &format!("/api/demos/{demo}/tracks"),
                Some(&api),
                &json!({"label": label, "frame": 0, "x": x, "y": y}),
            )
            .await;
        assert_eq!(st, reqwest::StatusCode::ACCEPTED, "{started}");
        let op = operation_done(&s, &api, started["operation_id"].as_str().expect("op")).await;
        assert_eq!(op["state"], "succeeded", "{op}");
    }

    // From the demo page's link to the fit page, with the demo's tracks ticked.
    a.goto(format!("{}/demos/{demo}", s.base)).await.unwrap();
    click(&a, "#fit-from-demo").await;
    wait_js(
        &a,
        "return location.pathname === '/fits/new' && document.getElementById('fit')?.dataset.ready === '1' && !!document.getElementById('fit').dataset.picture;",
        "the fit page with its frame",
    )
    .await;
    assert_eq!(
        js(&a, "return document.getElementById('fit').dataset.demos;").await,
        json!("3"),
        "the demo's three tracks are ticked"
    );
    // A path drawn by dragging along the top of the frame, towards where the trays go.
    let (from, _) = fit_pixel(&a, 40.0, 30.0).await;
    let (mid, _) = fit_pixel(&a, 90.0, 50.0).await;
    let (to, _) = fit_pixel(&a, 130.0, 70.0).await;
    click(&a, ".tool[data-tool=path]").await;
    a.action_chain()
        .move_to(from[0], from[1])
        .click_and_hold()
        .move_to(mid[0], mid[1])
        .move_to(to[0], to[1])
        .release()
        .perform()
        .await
        .expect("drag a path");
    wait_js(
        &a,
        "return document.getElementById('fit').dataset.demos === '4';",
        "the drawn path listed",
    )
    .await;
    // Features: the distance to where the trays end up, a bump there, and an area clicked
    // corner by corner and closed with Enter.
    click(&a, ".tool[data-tool=distance_to]").await;
    let goal_at = click_fit(&a, 110.0, 80.0).await;
    click(&a, ".tool[data-tool=rbf]").await;
    fill(&a, "#rbf-sigma", "25").await;
    let bump_at = click_fit(&a, 110.0, 80.0).await;
    click(&a, ".tool[data-tool=inside]").await;
    let mut corners = Vec::new();
    for (x, y) in [
        (200.0, 150.0),
        (300.0, 150.0),
        (300.0, 220.0),
        (200.0, 220.0),
    ] {
        corners.push(click_fit(&a, x, y).await);
    }
    a.find(By::Id("fit-canvas"))
        .await
        .unwrap()
        .send_keys(thirtyfour::Key::Enter)
        .await
        .unwrap();
    wait_js(
        &a,
        "return document.getElementById('fit').dataset.features === '3';",
        "three features",
    )
    .await;
    fill(&a, "#cell-px", "10").await;
    let readout = js(&a, "return document.getElementById('grid-readout').value;").await;
    assert_eq!(readout, json!("32 × 24 = 768 cells"), "{readout}");
    a.screenshot(&shots.join("fit-new.png")).await.unwrap();
    click(&a, "#start-fit").await;

    // The fit's page: it runs, and shows its trace, figures and map.
    wait_js(
        &a,
        "return location.pathname.startsWith('/fits/') && document.getElementById('fit')?.dataset.state === 'succeeded' && (document.getElementById('fit').dataset.picture || '').endsWith('reward-map.png');",
        "the finished fit with its reward map",
    )
    .await;
    let fit_id = js(&a, "return location.pathname.slice('/fits/'.length);")
        .await
        .as_str()
        .expect("fit id")
        .to_string();
    let (st, fit) = s
        .get(&format!("/api/reward-fits/{fit_id}"), Some(&api))
        .await;
    assert_eq!(st, reqwest::StatusCode::OK, "{fit}");
    assert_eq!(fit["demos"], 4, "{fit}");
    assert_eq!(fit["cell_px"], 10);
    // The features are where the clicks landed, by the page's pixel convention.
    let f = &fit["features"];
    assert_eq!(f[0]["kind"], "distance_to");
    assert!(close(goal_at, &f[0]["point"], 1e-9), "{f}");
    assert_eq!(f[1]["kind"], "rbf");
    assert!(close(bump_at, &f[1]["center"], 1e-9), "{f}");
    assert_eq!(f[1]["sigma_px"], 25.0);
    assert_eq!(f[2]["kind"], "inside");
    for (k, c) in corners.iter().enumerate() {
        assert!(close(*c, &f[2]["polygon"][k], 1e-9), "{f}");
    }
    // Every iteration of the trace is plotted; the held-out figures sit beside the walk's.
    let iterations = fit["iterations"].as_u64().expect("iterations");
    assert_eq!(
        js(&a, "return document.getElementById('fit').dataset.plotted;").await,
        json!((iterations + 1).to_string())
    );
    let plotted = js(
        &a,
        "return document.querySelector('#trace-plot polyline').getAttribute('points').trim().split(/\\s+/).length;",
    )
    .await;
    assert_eq!(plotted, json!(iterations + 1));
    let figures = js(&a, "return document.getElementById('figures').textContent;").await;
    let figures = figures.as_str().expect("figures");
    assert!(
        figures.contains("Held out, each demo left out in turn"),
        "{figures}"
    );
    assert!(
        figures.contains("better than a random walk by"),
        "{figures}"
    );
    let weights = js(
        &a,
        "return [...document.querySelectorAll('#weights tr')].map((r) => r.cells[0].textContent);",
    )
    .await;
    assert_eq!(weights, fit["feature_names"]);
    a.screenshot(&shots.join("fit-result.png")).await.unwrap();
    let wide = js(
        &a,
        "const w = document.documentElement.clientWidth; return [...document.querySelectorAll('body *')].filter((e) => e.getBoundingClientRect().right > w + 0.5).map((e) => e.tagName + '#' + e.id + '.' + e.className).slice(0, 8);",
    )
    .await;
    assert_eq!(wide, json!([]), "elements wider than the window");

    // A goal with a learned term, its point clicked on the reward map.
    let source = click_fit(&a, 70.0, 55.0).await;
    fill(&a, "#term-goal-name", "trays where the demos take them").await;
    fill(&a, "#term-label", "tray a").await;
    click(&a, "#make-term").await;
    wait_js(
        &a,
        "return location.pathname.startsWith('/goals/') && !!document.getElementById('editor');",
        "the new goal's editor",
    )
    .await;
    let goal = js(&a, "return location.pathname.slice('/goals/'.length);")
        .await
        .as_str()
        .expect("goal id")
        .to_string();
    let (st, rev) = s
        .get(&format!("/api/goals/{goal}/revisions/1"), Some(&api))
        .await;
    assert_eq!(st, reqwest::StatusCode::OK, "{rev}");
    let term = &rev["terms"][0];
    assert_eq!(term["kind"], "learned", "{rev}");
    assert_eq!(term["reward_fit_id"], fit_id.as_str());
    assert_eq!(rev["frame_id"], frame.as_str());
    let typed = [
        (source[0] * 10.0).round() / 10.0,
        (source[1] * 10.0).round() / 10.0,
    ];
    assert!(close(typed, &term["source"], 1e-9), "{term}");

    // Its cost maps are the fit's learned cost; its bundle downloads.
    let (st, npy) = get_bytes(
        &s,
        &format!("/api/reward-fits/{fit_id}/reward-map.npy"),
        &api,
    )
    .await;
    assert_eq!(st, reqwest::StatusCode::OK);
    let parsed = goalsmith_core::npy::read(&npy, 1 << 20).expect("npy");
    let reward = parsed.as_f32().expect("f32");
    let max = reward.iter().fold(f32::NEG_INFINITY, |m, &v| m.max(v));
    let (st, maps) = get_bytes(
        &s,
        &format!("/api/goals/{goal}/revisions/1/cost-maps.npy"),
        &api,
    )
    .await;
    assert_eq!(st, reqwest::StatusCode::OK);
    let maps = goalsmith_core::npy::read(&maps, 1 << 24).expect("maps");
    assert_eq!(maps.header.shape, vec![1, H as usize, W as usize]);
    let maps = maps.as_f32().expect("f32");
    for (j, i) in [
        (0usize, 0usize),
        (55, 70),
        (80, 110),
        (239, 319),
        (150, 200),
    ] {
        let cell = (j / 10) * 32 + i / 10;
        assert_eq!(
            maps[j * W as usize + i],
            (f64::from(max) - f64::from(reward[cell])) as f32,
            "pixel ({i}, {j})"
        );
    }
    let (st, bundle) = get_bytes(
        &s,
        &format!("/api/goals/{goal}/revisions/1/bundle.zip"),
        &api,
    )
    .await;
    assert_eq!(st, reqwest::StatusCode::OK);
    let mut zip = zip::ZipArchive::new(std::io::Cursor::new(bundle)).expect("a ZIP");
    let mut fit_map = Vec::new();
    std::io::Read::read_to_end(
        &mut zip
            .by_name(&format!("reward_fits/{fit_id}.npy"))
            .expect("the fit's map in the bundle"),
        &mut fit_map,
    )
    .unwrap();
    assert_eq!(fit_map, npy, "the bundled map is the fit's reward map");
    assert!(zip.by_name(&format!("reward_fits/{fit_id}.json")).is_ok());

    // The fit is listed on the team home.
    a.goto(&s.base).await.unwrap();
    let listed = js(
        &a,
        &format!("return !!document.querySelector('a.fit-link[href=\"/fits/{fit_id}\"]');"),
    )
    .await;
    assert_eq!(listed, json!(true));
}
