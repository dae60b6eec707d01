//! The crash test: clients write revisions, frames and demonstrations at once while the server
//! is killed with SIGKILL at random moments, 20 times. After every restart each write that was
//! answered with a 2xx is there, byte for byte (by SHA-256), and every goal's revision numbers
//! run 1, 2, 3, … with none repeated or skipped. On SQLite and on PostgreSQL.
//!
//! The moments are drawn from a seed printed at the start, so a failing run can be repeated
//! with `GOALSMITH_CRASH_SEED=<seed>`.

use crate::support::*;
use futures_util::StreamExt;
use reqwest::StatusCode;
use serde_json::{Value, json};
use sha2::{Digest, Sha256};
use std::collections::BTreeMap;
use std::sync::{Arc, Mutex};
use std::time::Duration;

const KILLS: usize = 20;
const GOAL_WRITERS: usize = 3;

/// A write the server acknowledged with a 2xx.
#[derive(Debug, Clone)]
enum Ack {
    /// A revision: its goal, its number when the body was read, and its strong ETag (the
    /// SHA-256 of the document's bytes), which the 2xx carried in its headers.
    Revision {
        goal: String,
        n: Option<i64>,
        etag: String,
    },
    /// A frame and the SHA-256 of the bytes sent.
    Frame { id: String, sha256: String },
    /// A demonstration and the SHA-256 of each frame sent, in order.
    Demo { id: String, frames: Vec<String> },
}

type Ledger = Arc<Mutex<Vec<Ack>>>;

fn sha_hex(bytes: &[u8]) -> String {
    hex::encode(Sha256::digest(bytes))
}

/// A 64×48 PNG whose pixels spell `n`, so every upload is new bytes.
fn numbered_png(n: u64) -> Vec<u8> {
    let b = n.to_le_bytes();
    let img = image::RgbImage::from_fn(64, 48, |x, y| {
        image::Rgb([
            b[(x as usize) % 8],
            b[(y as usize) % 8].wrapping_add(x as u8),
            (x ^ y) as u8,
        ])
    });
    let mut out = std::io::Cursor::new(Vec::new());
    img.write_to(&mut out, image::ImageFormat::Png)
        .expect("encode png");
    out.into_inner()
}

fn goal_body(frame: &str, name: &str, k: u64) -> Value {
    let mut body = point_goal(frame, name);
    body["terms"][0]["target"] = json!([10.0 + (k % 40) as f64, 8.0 + (k % 30) as f64]);
    body
}

/// Saves revisions of one goal, each on the ETag of the one before, until the server goes.
async fn goal_writer(
    client: reqwest::Client,
    base: String,
    token: String,
    goal: String,
    frame: String,
    ledger: Ledger,
    salt: u64,
) {
    let url = format!("{base}/api/goals/{goal}");
    // The last write of the previous round may have landed without its answer: start from the
    // latest revision the server has.
    let Ok(latest) = client.get(&url).bearer_auth(&token).send().await else {
        return;
    };
    let Some(mut tag) = etag(&latest) else {
        return;
    };
    for k in 0u64.. {
        let body = goal_body(&frame, "bench row", salt.wrapping_mul(1000) + k);
        let Ok(resp) = client
            .put(&url)
            .bearer_auth(&token)
            .header("If-Match", &tag)
            .json(&body)
            .send()
            .await
        else {
            return;
        };
        assert_eq!(
            resp.status(),
            StatusCode::OK,
            "a lone writer is never refused"
        );
        let Some(t) = etag(&resp) else {
            panic!("a saved revision carries its ETag");
        };
        let n = match resp.bytes().await {
            Ok(b) => {
                assert_eq!(
                    sha_hex(&b),
                    t.trim_matches('"'),
                    "the ETag is the body's SHA-256"
                );
                serde_json::from_slice::<Value>(&b)
                    .ok()
                    .and_then(|v| v["revision"].as_i64())
            }
            Err(_) => None,
        };
        ledger.lock().expect("ledger").push(Ack::Revision {
            goal: goal.clone(),
            n,
            etag: t.clone(),
        });
        tag = t;
    }
}

/// Creates goals until the server goes; each new goal joins the ones checked.
async fn goal_creator(
    client: reqwest::Client,
    base: String,
    token: String,
    frame: String,
    ledger: Ledger,
    salt: u64,
) {
    for k in 0u64.. {
        let Ok(resp) = client
            .post(format!("{base}/api/goals"))
            .bearer_auth(&token)
            .json(&goal_body(&frame, &format!("tray {salt}-{k}"), k))
            .send()
            .await
        else {
            return;
        };
        assert_eq!(resp.status(), StatusCode::CREATED);
        let tag = etag(&resp).expect("ETag");
        let Ok(v) = resp.json::<Value>().await else {
            // Acknowledged, but without the body we do not know the goal's id: the revision
            // is still checked by the number-sequence check of every goal listed.
            continue;
        };
        let goal = v["goal_id"].as_str().expect("goal_id").to_string();
        ledger.lock().expect("ledger").push(Ack::Revision {
            goal,
            n: Some(1),
            etag: tag,
        });
    }
}

/// POSTs `body` as `content_type` to `url`; the created object's id once the 201 and its body
/// have arrived, `Err(())` when the server has gone, `Ok(None)` when the 201 came without its
/// body (acknowledged, but not known by id: not checked).
async fn upload(
    client: &reqwest::Client,
    url: String,
    token: &str,
    content_type: &str,
    body: Vec<u8>,
) -> Result<Option<String>, ()> {
    let resp = client
        .post(url)
        .bearer_auth(token)
        .header("content-type", content_type)
        .body(body)
        .send()
        .await
        .map_err(drop)?;
    assert_eq!(
        resp.status(),
        StatusCode::CREATED,
        "new bytes make a new object"
    );
    Ok(resp
        .json::<Value>()
        .await
        .ok()
        .and_then(|v| v["id"].as_str().map(str::to_string)))
}

async fn frame_writer(
    client: reqwest::Client,
    base: String,
    token: String,
    camera: String,
    ledger: Ledger,
    salt: u64,
) {
    for k in 0u64.. {
        let bytes = numbered_png((salt << 20) | k);
        let sha256 = sha_hex(&bytes);
        let url = format!("{base}/api/cameras/{camera}/frames");
        match upload(&client, url, &token, "image/png", bytes).await {
            Err(()) => return,
            Ok(None) => {}
            Ok(Some(id)) => ledger
                .lock()
                .expect("ledger")
                .push(Ack::Frame { id, sha256 }),
        }
    }
}

async fn demo_writer(
    client: reqwest::Client,
    base: String,
    token: String,
    camera: String,
    ledger: Ledger,
    salt: u64,
) {
    for k in 0u64.. {
        let frames: Vec<Vec<u8>> = (0..3)
            .map(|i| numbered_png((1 << 40) | (salt << 20) | (k << 2) | i))
            .collect();
        let names: Vec<String> = (0..frames.len()).map(|i| format!("{i:03}.png")).collect();
        let entries: Vec<(&str, &[u8])> = names
            .iter()
            .map(String::as_str)
            .zip(frames.iter().map(Vec::as_slice))
            .collect();
        let url = format!("{base}/api/cameras/{camera}/demos");
        match upload(&client, url, &token, "application/zip", zip_of(&entries)).await {
            Err(()) => return,
            Ok(None) => {}
            Ok(Some(id)) => ledger.lock().expect("ledger").push(Ack::Demo {
                id,
                frames: frames.iter().map(|f| sha_hex(f)).collect(),
            }),
        }
    }
}

/// Checks one acknowledged write against the restarted server; `Err` says what differs.
async fn check(s: &Server, token: &str, ack: &Ack) -> Result<(), String> {
    let fetch = |path: String| {
        let req = s.client.get(s.url(&path)).bearer_auth(token);
        async move {
            let resp = req.send().await.map_err(|e| format!("{path}: {e}"))?;
            let status = resp.status();
            let tag = etag(&resp);
            let body = resp.bytes().await.map_err(|e| format!("{path}: {e}"))?;
            if status != StatusCode::OK {
                return Err(format!("{path}: {status}"));
            }
            Ok::<_, String>((tag, body))
        }
    };
    match ack {
        Ack::Revision {
            goal,
            n: Some(n),
            etag,
        } => {
            let (tag, body) = fetch(format!("/api/goals/{goal}/revisions/{n}")).await?;
            if tag.as_ref() != Some(etag) || format!("\"{}\"", sha_hex(&body)) != *etag {
                return Err(format!("revision {n} of {goal} changed: {tag:?} vs {etag}"));
            }
        }
        Ack::Revision {
            goal,
            n: None,
            etag,
        } => {
            let (_, list) = fetch(format!("/api/goals/{goal}/revisions")).await?;
            let list: Value = serde_json::from_slice(&list).map_err(|e| e.to_string())?;
            let count = list["items"].as_array().map_or(0, Vec::len);
            let mut found = false;
            for n in 1..=count {
                let (tag, _) = fetch(format!("/api/goals/{goal}/revisions/{n}")).await?;
                found |= tag.as_ref() == Some(etag);
            }
            if !found {
                return Err(format!("no revision of {goal} has ETag {etag}"));
            }
        }
        Ack::Frame { id, sha256 } => {
            let (_, body) = fetch(format!("/api/frames/{id}/image")).await?;
            if sha_hex(&body) != *sha256 {
                return Err(format!("frame {id} changed"));
            }
        }
        Ack::Demo { id, frames } => {
            let (_, meta) = fetch(format!("/api/demos/{id}")).await?;
            let meta: Value = serde_json::from_slice(&meta).map_err(|e| e.to_string())?;
            let stored = meta["frames"].as_array().map_or(0, Vec::len);
            if stored != frames.len() {
                return Err(format!(
                    "demo {id} has {stored} frames, not {}",
                    frames.len()
                ));
            }
            for (i, sha) in frames.iter().enumerate() {
                let (_, body) = fetch(format!("/api/demos/{id}/frames/{i}/image")).await?;
                if sha_hex(&body) != *sha {
                    return Err(format!("frame {i} of demo {id} changed"));
                }
            }
        }
    }
    Ok(())
}

/// Every goal of the team has revisions numbered 1..=k, each once.
async fn revision_numbers_run_on(s: &Server, token: &str) -> usize {
    let (st, goals) = s.get("/api/goals", Some(token)).await;
    assert_eq!(st, StatusCode::OK, "{goals}");
    let goals = goals["items"].as_array().cloned().expect("goal list");
    for g in &goals {
        let id = g["id"].as_str().expect("goal id");
        let (st, revs) = s
            .get(&format!("/api/goals/{id}/revisions"), Some(token))
            .await;
        assert_eq!(st, StatusCode::OK, "{revs}");
        let numbers: Vec<i64> = revs["items"]
            .as_array()
            .expect("revision list")
            .iter()
            .map(|r| r["revision"].as_i64().expect("revision number"))
            .collect();
        let expected: Vec<i64> = (1..=numbers.len() as i64).collect();
        assert_eq!(numbers, expected, "revisions of {id} run 1, 2, 3, …");
    }
    goals.len()
}

async fn crash_test(kind: Db) {
    let Some(db) = fresh_db(kind, "crash").await else {
        return;
    };
    let seed = std::env::var("GOALSMITH_CRASH_SEED")
        .ok()
        .and_then(|s| s.parse().ok())
        .unwrap_or_else(|| {
            std::time::SystemTime::now()
                .duration_since(std::time::UNIX_EPOCH)
                .map_or(1, |d| d.as_nanos() as u64)
                | 1
        });
    println!("crash test on {kind:?}: GOALSMITH_CRASH_SEED={seed}");
    let mut schedule = goalsmith_core::rng::SplitMix64(seed);
    let mut s = Server::start(&db.url, &db.data_dir, &[]);
    let (token, camera, frame) = camera_and_frame(&s, "potting bench", json!({})).await;
    let mut goals = Vec::new();
    for g in 0..GOAL_WRITERS {
        let (st, v) = s
            .post(
                "/api/goals",
                Some(&token),
                &goal_body(&frame, &format!("row {g}"), 0),
            )
            .await;
        assert_eq!(st, StatusCode::CREATED, "{v}");
        goals.push(v["goal_id"].as_str().expect("goal id").to_string());
    }
    let ledger: Ledger = Arc::default();
    let mut tally: BTreeMap<&str, usize> = BTreeMap::new();
    for round in 0..KILLS {
        let salt = round as u64 + 1;
        let mut writers = tokio::task::JoinSet::new();
        let c = || (s.client.clone(), s.base.clone(), token.clone());
        for g in &goals {
            let (client, base, token) = c();
            writers.spawn(goal_writer(
                client,
                base,
                token,
                g.clone(),
                frame.clone(),
                ledger.clone(),
                salt,
            ));
        }
        let (client, base, t) = c();
        writers.spawn(goal_creator(
            client,
            base,
            t,
            frame.clone(),
            ledger.clone(),
            salt,
        ));
        let (client, base, t) = c();
        writers.spawn(frame_writer(
            client,
            base,
            t,
            camera.clone(),
            ledger.clone(),
            salt,
        ));
        let (client, base, t) = c();
        writers.spawn(demo_writer(
            client,
            base,
            t,
            camera.clone(),
            ledger.clone(),
            salt,
        ));
        // Somewhere between 20 ms and 600 ms into the writing.
        let after = Duration::from_millis(20 + schedule.next_u64() % 580);
        tokio::time::sleep(after).await;
        s.kill();
        while let Some(done) = writers.join_next().await {
            if let Err(e) = done
                && e.is_panic()
            {
                std::panic::resume_unwind(e.into_panic());
            }
        }
        s = Server::start(&db.url, &db.data_dir, &[]);
        let acks: Vec<Ack> = ledger.lock().expect("ledger").clone();
        let failures: Vec<String> = futures_util::stream::iter(acks.iter())
            .map(|a| check(&s, &token, a))
            .buffer_unordered(8)
            .filter_map(|r| async move { r.err() })
            .collect()
            .await;
        assert!(
            failures.is_empty(),
            "after kill {} (seed {seed}), {} acknowledged writes are not as acknowledged: {:?}",
            round + 1,
            failures.len(),
            &failures[..failures.len().min(5)]
        );
        let goal_count = revision_numbers_run_on(&s, &token).await;
        println!(
            "kill {:2} at {:3} ms: {} acknowledged writes checked, {goal_count} goals",
            round + 1,
            after.as_millis(),
            acks.len()
        );
    }
    for a in ledger.lock().expect("ledger").iter() {
        *tally
            .entry(match a {
                Ack::Revision { .. } => "revisions",
                Ack::Frame { .. } => "frames",
                Ack::Demo { .. } => "demos",
            })
            .or_default() += 1;
    }
    println!("acknowledged over {KILLS} kills: {tally:?}");
    for kind in ["revisions", "frames", "demos"] {
        assert!(
            tally.get(kind).copied().unwrap_or(0) > 0,
            "some {kind} were written"
        );
    }
}

#[tokio::test(flavor = "multi_thread", worker_threads = 4)]
async fn acknowledged_writes_survive_twenty_kills_sqlite() {
    crash_test(Db::Sqlite).await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 4)]
async fn acknowledged_writes_survive_twenty_kills_postgres() {
    crash_test(Db::Postgres).await;
}
