//! Bounded work, asserted: the resource probe's burst (examples/support/probe.rs, shared with
//! `cargo run --release --example resource_probe`, which reports the figures) against one real
//! server, and what README.md's "Limits" promise about it: the server's peak resident memory
//! stays within the documented envelope, every heavy request ends with its documented status
//! and error body (never a reset, never a 5xx other than 503 `busy`), and `/healthz` keeps
//! answering 200 throughout.
//!
//! No timing is asserted (speed belongs to the benchmarks): `/healthz` must answer within a
//! client timeout of a few seconds, a liveness bound, and its latencies are printed.

#[path = "../../examples/support/probe.rs"]
mod probe;

use crate::support::*;
use goalsmith_core::npy;
use std::time::Duration;

/// Heavy permits and queue of the server under test, set explicitly so the envelope does not
/// depend on the number of cores of the machine running the test (the defaults are the cores
/// and four times that; this is the 2-core machine of README.md's figures).
const PERMITS: u64 = 2;
const QUEUE: u64 = 8;

/// README.md, "Limits": at most about 600 MiB per heavy request (a frame decode at its 512 MiB
/// limit plus the 64 MiB upload), 64 MiB per waiting request (the largest body one holds while
/// it waits, a frame upload), and the caches, 256 MiB of goals and models plus 64 MiB of
/// prepared maps: "2 × 600 MiB + 8 × 64 MiB + 320 MiB ≈ 2 GiB at worst" on 2 cores.
fn envelope_mib(permits: u64, queue: u64) -> u64 {
    permits * 600 + queue * 64 + 320
}

/// `/healthz` must answer within this during the burst; a liveness bound, not a speed target.
const HEALTHZ_TIMEOUT: Duration = Duration::from_secs(5);

/// A heavy request that has not answered by then counts as no answer.
const REQUEST_TIMEOUT: Duration = Duration::from_secs(180);

/// A server with [`PERMITS`] and [`QUEUE`] on a fresh SQLite database, an editor token, and
/// the address and process id the probe needs.
async fn probe_server(test: &str) -> Option<(Server, TestDb, String, String, u32)> {
    let db = fresh_db(Db::Sqlite, test).await?;
    let (permits, queue) = (PERMITS.to_string(), QUEUE.to_string());
    let s = Server::start_with_env(
        &db.url,
        &db.data_dir,
        &[],
        &[
            ("GOALSMITH_HEAVY_PERMITS", &permits),
            ("GOALSMITH_HEAVY_QUEUE", &queue),
        ],
    );
    let token = s.token("probe", "editor");
    let addr = s.base.trim_start_matches("http://").to_string();
    let pid = s.child.id();
    Some((s, db, token, addr, pid))
}

/// Runs `set_up` (which makes the cases) and the burst off the async workers, and prints the
/// figures past the test harness's capture, as `skip` lines are.
async fn run_probe(
    test: &'static str,
    addr: String,
    token: String,
    pid: u32,
    set_up: fn(&str, &str) -> Result<Vec<probe::Case>, probe::http::Error>,
) -> probe::Report {
    let report = tokio::task::spawn_blocking(move || {
        let cases = set_up(&addr, &token).map_err(|e| e.to_string())?;
        Ok::<_, String>(probe::burst(
            &addr,
            &token,
            pid,
            cases,
            HEALTHZ_TIMEOUT,
            REQUEST_TIMEOUT,
        ))
    })
    .await
    .expect("the probe thread")
    .unwrap_or_else(|e| panic!("setting up the probe: {e}"));
    skip(&format!("{test}: {}", report.summary(test)));
    report
}

/// Every request answered, with one of its documented statuses and, for a refusal, the
/// contract's error body with the documented code.
fn assert_documented_answers(report: &probe::Report) {
    for o in &report.outcomes {
        let body = String::from_utf8_lossy(&o.body);
        assert!(
            o.status != 0,
            "{}: no answer (reset or timeout): {}",
            o.name,
            o.failure.as_deref().unwrap_or("")
        );
        assert!(
            o.allowed.contains(&o.status),
            "{}: {} is not one of its documented statuses {:?}: {body}",
            o.name,
            o.status,
            o.allowed
        );
        if let Some(code) = probe::documented_code(o.status) {
            assert_eq!(
                o.error_code().as_deref(),
                Some(code),
                "{}: {}: {body}",
                o.name,
                o.status
            );
        }
    }
}

/// The peak resident memory of the server's whole life (set-up included) within the envelope
/// README.md documents.
fn assert_within_envelope(report: &probe::Report) {
    let envelope = envelope_mib(PERMITS, QUEUE);
    assert!(report.peak_kib > 0, "VmHWM unreadable");
    assert!(
        report.peak_kib / 1024 <= envelope,
        "peak resident memory {} MiB is over README.md's envelope of {envelope} MiB: {:?}",
        report.peak_kib / 1024,
        report.statuses()
    );
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_burst_of_heavy_requests_stays_within_the_envelope() {
    let Some((s, _db, token, addr, pid)) = probe_server("resources").await else {
        return;
    };
    let report = run_probe("resources", addr, token, pid, probe::prepare).await;
    assert_documented_answers(&report);

    // The burst was heavy, not shed whole. A request passes the heavy queue once to build its
    // goal's model (when not cached) and again for its work, so which ones get 503 depends on
    // timing; but past the first arrivals nothing new joins the queue, so once the first stages
    // finish the rest are admitted: several always do their work. Without this check a server
    // that answered everything 503 would pass.
    let done = report
        .outcomes
        .iter()
        .filter(|o| o.allowed.contains(&503) && (o.status == 200 || o.status == 201))
        .count();
    assert!(
        done as u64 >= PERMITS,
        "only {done} heavy requests did their work: {:?}",
        report.statuses()
    );

    assert_within_envelope(&report);

    // /healthz answered 200 every time it was asked, within the client's timeout.
    assert!(
        report.healthz.len() >= 5,
        "/healthz was asked only {} times",
        report.healthz.len()
    );
    let failed: Vec<_> = report.healthz.iter().filter(|x| x.0 != 200).collect();
    assert!(
        failed.is_empty(),
        "/healthz did not answer 200 (0: no answer within {HEALTHZ_TIMEOUT:?}) during the burst: \
         {failed:?}"
    );
    let (st, _) = s.get("/healthz", None).await;
    assert_eq!(
        st,
        reqwest::StatusCode::OK,
        "the server serves after the burst"
    );
}

/// Several first scorings of one goal whose cost model is larger than the model cache (the
/// mask limit: about 580 MiB) each build their own model. Each keeps the permit it built under
/// for its scoring, so a request waiting in the heavy queue holds at most its body, as the
/// envelope counts it. (Before that, each kept its model while it waited for a second permit:
/// six at once peaked near 3.5 GiB and ten at 5.2 GiB, debug build, 2 permits, queue 8.)
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn first_scorings_of_a_large_model_stay_within_the_envelope() {
    let Some((_s, _db, token, addr, pid)) = probe_server("first_scorings").await else {
        return;
    };
    let report = run_probe("first scorings", addr, token, pid, |addr, token| {
        Ok(probe::scorings(&probe::mask_limit_goal(addr, token)?, 6))
    })
    .await;
    assert_documented_answers(&report);
    assert_within_envelope(&report);
}

/// A metric without labels from the server's `/metrics` (read from loopback).
async fn metric(s: &Server, name: &str) -> u64 {
    let text = s
        .client
        .get(s.url("/metrics"))
        .send()
        .await
        .expect("metrics")
        .text()
        .await
        .expect("metrics text");
    text.lines()
        .find_map(|l| l.strip_prefix(name)?.strip_prefix(' '))
        .and_then(|v| v.trim().parse().ok())
        .unwrap_or_else(|| panic!("{name} in /metrics"))
}

/// A 512×512 mask PNG with one painted pixel at (i, j).
fn one_pixel_mask(i: u32, j: u32) -> String {
    use base64::Engine;
    let img = image::GrayImage::from_fn(512, 512, |x, y| {
        image::Luma([if (x, y) == (i, j) { 255 } else { 0 }])
    });
    let mut out = std::io::Cursor::new(Vec::new());
    img.write_to(&mut out, image::ImageFormat::Png)
        .expect("encode png");
    base64::engine::general_purpose::STANDARD.encode(out.into_inner())
}

/// A team with a 512×512 camera and frame: (editor token, frame id), and the body of a goal on
/// that frame with 256 masks of 512² (2^26 mask pixels, the per-goal limit), whose check holds
/// a heavy permit while it decodes them for a while (over a second in a debug build).
async fn mask_heavy_goal(s: &Server, team: &str) -> (String, String, String) {
    let editor = s.token(team, "editor");
    let (st, cam) = s
        .post(
            "/api/cameras",
            Some(&editor),
            &serde_json::json!({"name": "tray rack", "width": 512, "height": 512}),
        )
        .await;
    assert_eq!(st, reqwest::StatusCode::CREATED, "{cam}");
    let cam_id = cam["id"].as_str().expect("camera id");
    let (st, frame) = s
        .post_bytes(
            &format!("/api/cameras/{cam_id}/frames"),
            Some(&editor),
            "image/png",
            png(512, 512, 3),
        )
        .await;
    assert_eq!(st, reqwest::StatusCode::CREATED, "{frame}");
    let frame_id = frame["id"].as_str().expect("frame id").to_string();
    let terms: Vec<_> = (0..256u32)
        .map(|k| {
            serde_json::json!({
                "kind": "mask",
                "source": [10.0, 10.0],
                "mask_png_base64": one_pixel_mask(100 + k, 300),
            })
        })
        .collect();
    let body = serde_json::json!({"name": "every tray cell", "frame_id": frame_id, "terms": terms})
        .to_string();
    (editor, frame_id, body)
}

/// Waits until the server runs a heavy computation (bounded, for a clear failure).
async fn until_heavy_running(s: &Server, what: &str) {
    let deadline = std::time::Instant::now() + Duration::from_secs(120);
    while metric(s, "goalsmith_heavy_running").await == 0 {
        assert!(std::time::Instant::now() < deadline, "{what}");
        tokio::time::sleep(Duration::from_millis(10)).await;
    }
}

/// A goal save whose check decodes many masks stops when its client hangs up: the server
/// counts the stop, writes nothing, and the same document saved by a client that waits is
/// checked in full and stored.
async fn a_goal_check_stops_when_its_client_hangs_up(s: Server) {
    use tokio::io::AsyncWriteExt;
    let (editor, _frame_id, body) = mask_heavy_goal(&s, "hang-up").await;
    let before = metric(&s, "goalsmith_heavy_stopped_total").await;

    // The whole request, then the connection closed without reading the answer.
    let addr = s.base.trim_start_matches("http://");
    let mut stream = tokio::net::TcpStream::connect(addr).await.expect("connect");
    let head = format!(
        "POST /api/goals HTTP/1.1\r\nHost: {addr}\r\nAuthorization: Bearer {editor}\r\n\
         Content-Type: application/json\r\nContent-Length: {}\r\n\r\n",
        body.len()
    );
    stream.write_all(head.as_bytes()).await.expect("write head");
    stream.write_all(body.as_bytes()).await.expect("write body");
    // Hung up once the check runs: it holds a heavy permit while it decodes the masks.
    until_heavy_running(&s, "the goal check never took a heavy permit").await;
    drop(stream);

    // The stop is counted once the check sees it (a wait, bounded for a clear failure).
    let deadline = std::time::Instant::now() + Duration::from_secs(120);
    while metric(&s, "goalsmith_heavy_stopped_total").await == before {
        assert!(
            std::time::Instant::now() < deadline,
            "the goal check never stopped after the client hung up"
        );
        tokio::time::sleep(Duration::from_millis(50)).await;
    }
    let (st, goals) = s.get("/api/goals", Some(&editor)).await;
    assert_eq!(st, reqwest::StatusCode::OK, "{goals}");
    assert_eq!(
        goals["items"].as_array().map(Vec::len),
        Some(0),
        "nothing was stored: {goals}"
    );

    // The same document from a client that waits: checked in full and stored.
    let (st, rev) = s
        .post(
            "/api/goals",
            Some(&editor),
            &serde_json::from_str(&body).expect("json"),
        )
        .await;
    assert_eq!(st, reqwest::StatusCode::CREATED, "{rev}");
    assert_eq!(rev["terms"].as_array().map(Vec::len), Some(256));
}

crate::on_both_databases!(
    goal_check_hang_up,
    a_goal_check_stops_when_its_client_hangs_up
);

/// The header of an NPY array of `descr` and `shape` (format 1.0), without its data.
fn npy_header_only(descr: &str, shape: &[usize]) -> Vec<u8> {
    let dims: Vec<String> = shape.iter().map(usize::to_string).collect();
    let mut dict = format!(
        "{{'descr': '{descr}', 'fortran_order': False, 'shape': ({}), }}",
        dims.join(", ")
    );
    while (10 + dict.len() + 1) % 64 != 0 {
        dict.push(' ');
    }
    dict.push('\n');
    let mut out = b"\x93NUMPY\x01\x00".to_vec();
    out.extend_from_slice(
        &u16::try_from(dict.len())
            .expect("short header")
            .to_le_bytes(),
    );
    out.extend_from_slice(dict.as_bytes());
    out
}

/// A request over a limit is refused for that, not queued: with the only heavy permit taken
/// and no room to wait, cost maps (`cost-maps.npy`, or NPY probability maps sent to `…/cost`) of
/// an unscored goal within the limit get 503 `busy`, and past the limit 422 `map_too_large`
/// (from the stored document and the NPY header, before any permit is asked for).
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_request_over_a_limit_is_refused_even_when_the_queue_is_full() {
    let Some(db) = fresh_db(Db::Sqlite, "limit_before_queue").await else {
        return;
    };
    let s = Server::start_with_env(
        &db.url,
        &db.data_dir,
        &[],
        &[
            ("GOALSMITH_HEAVY_PERMITS", "1"),
            ("GOALSMITH_HEAVY_QUEUE", "0"),
        ],
    );
    let (editor, frame_id, heavy) = mask_heavy_goal(&s, "queue").await;
    let (st, goal) = s
        .post(
            "/api/goals",
            Some(&editor),
            &point_goal(&frame_id, "pot to bench"),
        )
        .await;
    assert_eq!(st, reqwest::StatusCode::CREATED, "{goal}");
    let maps = |w: u32| {
        format!(
            "/api/goals/{}/revisions/1/cost-maps.npy?width={w}&height={w}",
            goal["goal_id"].as_str().expect("goal id")
        )
    };
    // The mask-heavy save takes the one permit.
    let saving = {
        let (client, url, editor) = (s.client.clone(), s.url("/api/goals"), editor.clone());
        tokio::spawn(async move {
            client
                .post(url)
                .bearer_auth(editor)
                .header("content-type", "application/json")
                .body(heavy)
                .send()
                .await
                .map(|r| r.status())
        })
    };
    let cost = s.url(&format!(
        "/api/goals/{}/revisions/1/cost",
        goal["goal_id"].as_str().expect("goal id")
    ));
    let score = |body: Vec<u8>| {
        let (client, cost, editor) = (s.client.clone(), cost.clone(), editor.clone());
        async move {
            let resp = client
                .post(cost)
                .bearer_auth(editor)
                .header("content-type", "application/x-npy")
                .body(body)
                .send()
                .await
                .expect("cost answers");
            into_json(resp).await
        }
    };
    until_heavy_running(&s, "the mask-heavy save never took the permit").await;
    let (st, busy) = s.get(&maps(64), Some(&editor)).await;
    let (st_over, over) = s.get(&maps(8192), Some(&editor)).await;
    // The same for probability maps sent as NPY: within the limit, busy; past it (the header
    // alone is sent), refused from the header.
    let (st_npy, busy_npy) =
        score(npy::write_f32(&[1, 1, 1, 8, 8], &[1.0 / 64.0; 64]).expect("npy")).await;
    let (st_npy_over, over_npy) = score(npy_header_only("<f4", &[1, 1, 1, 8192, 8192])).await;
    let still = metric(&s, "goalsmith_heavy_running").await;
    assert_eq!(still, 1, "the save ended too early for this test");
    assert_eq!(st, reqwest::StatusCode::SERVICE_UNAVAILABLE, "{busy}");
    assert_eq!(busy["error"]["code"], "busy");
    assert_eq!(st_over, reqwest::StatusCode::UNPROCESSABLE_ENTITY, "{over}");
    assert_eq!(over["error"]["code"], "map_too_large");
    assert_eq!(over["error"]["field"], "width");
    assert_eq!(
        st_npy,
        reqwest::StatusCode::SERVICE_UNAVAILABLE,
        "{busy_npy}"
    );
    assert_eq!(busy_npy["error"]["code"], "busy");
    assert_eq!(
        st_npy_over,
        reqwest::StatusCode::UNPROCESSABLE_ENTITY,
        "{over_npy}"
    );
    assert_eq!(over_npy["error"]["code"], "map_too_large");
    assert_eq!(
        saving.await.expect("join").expect("the save answers"),
        reqwest::StatusCode::CREATED
    );
}
