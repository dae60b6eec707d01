//! The resource probe: the heavy requests a probe once used to hold gigabytes with, sent all at
//! once to one server, with the server's peak memory and the answers of `/healthz` meanwhile.
//!
//! Shared by `examples/resource_probe.rs`, which runs it against a release build and reports the
//! figures of README.md's "Limits", and `tests/it/resources.rs`, which runs it against the test
//! build and asserts the envelope, the statuses and that `/healthz` answers. This file measures
//! and says what each case may answer; it asserts nothing.
// Each user includes this file and uses a part of it.
#![allow(dead_code)]

#[path = "http.rs"]
pub mod http;

use http::{Error, field, json, request};
use std::collections::BTreeMap;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, Mutex};
use std::time::{Duration, Instant};

/// One heavy request of the burst and the statuses its documentation allows.
pub struct Case {
    /// What it is, for reports ("cost-maps 2 × 4096²").
    pub name: &'static str,
    method: &'static str,
    path: String,
    content_type: &'static str,
    body: Vec<u8>,
    /// The statuses README.md and docs/conventions.md give for it: the success status, the
    /// refusal of a limit, and 503 `busy` where the request takes a heavy permit before its
    /// limit is checked.
    pub allowed: &'static [u16],
}

/// How one case ended: its status (0 when no HTTP answer was read at all, a reset or a
/// timeout) and its body, or what went wrong.
pub struct Outcome {
    /// The case's name.
    pub name: &'static str,
    /// The statuses it may answer.
    pub allowed: &'static [u16],
    /// The status, or 0 without an answer.
    pub status: u16,
    /// The body (for errors, the contract's JSON error body).
    pub body: Vec<u8>,
    /// The client-side failure when there was no answer.
    pub failure: Option<String>,
    /// Seconds from the start of the burst to the answer.
    pub elapsed_s: f64,
}

impl Outcome {
    /// The `error.code` of an error body, if it is one.
    pub fn error_code(&self) -> Option<String> {
        let v: serde_json::Value = serde_json::from_slice(&self.body).ok()?;
        Some(v["error"]["code"].as_str()?.to_string())
    }
}

/// The error code README.md and docs/conventions.md give for each refusal status of the burst.
pub fn documented_code(status: u16) -> Option<&'static str> {
    match status {
        413 => Some("too_large"),
        422 => Some("map_too_large"),
        503 => Some("busy"),
        _ => None,
    }
}

/// What the burst measured.
pub struct Report {
    /// Every case, in the order sent.
    pub outcomes: Vec<Outcome>,
    /// `/healthz` during the burst: status (0 when it did not answer within the client's
    /// timeout) and milliseconds.
    pub healthz: Vec<(u16, f64)>,
    /// The server's resident memory before the burst, KiB.
    pub rss_before_kib: u64,
    /// Its peak resident memory (VmHWM) after the burst, KiB: the peak over the whole life of
    /// the process, set-up included.
    pub peak_kib: u64,
    /// Its resident memory after the burst, KiB.
    pub rss_after_kib: u64,
    /// Seconds from the first request sent to the last answer.
    pub burst_s: f64,
    /// The server's own count of `/healthz` answers during the burst, and of those that took
    /// over 100 ms from arrival to response head (its latency histogram in `/metrics`, read
    /// before and after): what the server did, apart from the client's and the kernel's share
    /// of the latencies above, on machine the probe's own senders share.
    pub server_healthz: Option<(u64, u64)>,
}

impl Report {
    /// The `/healthz` latencies, sorted, ms.
    pub fn healthz_ms(&self) -> Vec<f64> {
        let mut l: Vec<f64> = self.healthz.iter().map(|x| x.1).collect();
        l.sort_by(f64::total_cmp);
        l
    }

    /// The `q` quantile (0 to 1) of the `/healthz` latencies, ms.
    pub fn healthz_quantile(&self, q: f64) -> f64 {
        let l = self.healthz_ms();
        l.get(((l.len() as f64 - 1.0) * q).round() as usize)
            .copied()
            .unwrap_or(0.0)
    }

    /// The statuses per case name.
    pub fn statuses(&self) -> BTreeMap<&'static str, Vec<u16>> {
        let mut out: BTreeMap<&'static str, Vec<u16>> = BTreeMap::new();
        for o in &self.outcomes {
            out.entry(o.name).or_default().push(o.status);
        }
        out
    }

    /// One JSON object with the figures, rounded for reading.
    pub fn summary(&self, bench: &str) -> serde_json::Value {
        let r1 = |v: f64| (v * 10.0).round() / 10.0;
        serde_json::json!({
            "bench": bench,
            "statuses": self.statuses(),
            "answered_after_s": self.outcomes.iter().map(|o| {
                serde_json::json!([o.name, o.status, r1(o.elapsed_s)])
            }).collect::<Vec<_>>(),
            "burst_s": r1(self.burst_s),
            "rss_before_burst_mib": self.rss_before_kib / 1024,
            "peak_rss_mib": self.peak_kib / 1024,
            "rss_after_mib": self.rss_after_kib / 1024,
            "healthz": {
                "polls": self.healthz.len(),
                "all_200": self.healthz.iter().all(|x| x.0 == 200),
                "median_ms": r1(self.healthz_quantile(0.5)),
                "p99_ms": r1(self.healthz_quantile(0.99)),
                "max_ms": r1(self.healthz_quantile(1.0)),
                "server_side": self.server_healthz.map(|(n, slow)| serde_json::json!({
                    "answered": n, "over_100_ms": slow,
                })),
            },
        })
    }
}

/// A flat 16-bit RGB PNG, tiny when compressed and `w · h · 6` bytes decoded.
pub fn png_rgb16(w: u32, h: u32) -> Result<Vec<u8>, Error> {
    let raw = vec![0u8; (w as usize) * (h as usize) * 6];
    let mut out = Vec::new();
    {
        let mut enc = png::Encoder::new(&mut out, w, h);
        enc.set_color(png::ColorType::Rgb);
        enc.set_depth(png::BitDepth::Sixteen);
        enc.set_compression(png::Compression::Fast);
        let mut wr = enc.write_header()?;
        wr.write_image_data(&raw)?;
    }
    Ok(out)
}

/// CRC-32/ISO-HDLC as PNG uses it (PNG specification, annex D), bitwise: only short chunks.
fn crc32(bytes: &[u8]) -> u32 {
    let mut crc = 0xFFFF_FFFFu32;
    for &b in bytes {
        crc ^= u32::from(b);
        for _ in 0..8 {
            crc = if crc & 1 != 0 {
                (crc >> 1) ^ 0xEDB8_8320
            } else {
                crc >> 1
            };
        }
    }
    !crc
}

/// `png` with a `tEXt` chunk naming `seed` after its header: other bytes (so a new frame, not a
/// repeated upload), the same pixels and the same decoding work, without encoding again.
pub fn png_variant(png: &[u8], seed: u32) -> Result<Vec<u8>, Error> {
    // Signature (8) and the IHDR chunk (4 + 4 + 13 + 4).
    const AFTER_IHDR: usize = 33;
    if png.len() < AFTER_IHDR || &png[12..16] != b"IHDR" {
        return Err("not a PNG with IHDR first".into());
    }
    let mut chunk = b"tEXt".to_vec();
    chunk.extend_from_slice(format!("Comment\0probe frame {seed}").as_bytes());
    let mut out = png[..AFTER_IHDR].to_vec();
    out.extend_from_slice(&((chunk.len() - 4) as u32).to_be_bytes());
    out.extend_from_slice(&chunk);
    out.extend_from_slice(&crc32(&chunk).to_be_bytes());
    out.extend_from_slice(&png[AFTER_IHDR..]);
    Ok(out)
}

/// A `w`×`h` mask PNG painted in a quarter of its area, base64.
pub fn mask_png_b64(w: u32, h: u32) -> Result<String, Error> {
    use base64::Engine;
    let mut raw = vec![0u8; (w * h) as usize];
    for j in h / 4..h / 2 {
        for i in w / 4..w / 2 {
            raw[(j * w + i) as usize] = 255;
        }
    }
    let mut out = Vec::new();
    {
        let mut enc = png::Encoder::new(&mut out, w, h);
        enc.set_color(png::ColorType::Grayscale);
        enc.set_depth(png::BitDepth::Eight);
        enc.set_compression(png::Compression::Fast);
        let mut wr = enc.write_header()?;
        wr.write_image_data(&raw)?;
    }
    Ok(base64::engine::general_purpose::STANDARD.encode(out))
}

/// A `key` line of /proc/<pid>/status in KiB (`VmRSS:`, `VmHWM:`); 0 if unreadable.
pub fn vm_kib(pid: u32, key: &str) -> u64 {
    std::fs::read_to_string(format!("/proc/{pid}/status"))
        .ok()
        .and_then(|s| {
            s.lines()
                .find(|l| l.starts_with(key))
                .and_then(|l| l.split_whitespace().nth(1))
                .and_then(|v| v.parse().ok())
        })
        .unwrap_or(0)
}

fn camera_with_frame(
    addr: &str,
    token: &str,
    w: u32,
    h: u32,
    frame: &[u8],
) -> Result<(String, String), Error> {
    let cam = json(
        addr,
        token,
        "POST",
        "/api/cameras",
        &format!(r#"{{"name": "probe {w}x{h}", "width": {w}, "height": {h}}}"#),
    )?;
    let cam = field(&cam, "id")?;
    let auth = format!("Bearer {token}");
    let (st, f) = request(
        addr,
        "POST",
        &format!("/api/cameras/{cam}/frames"),
        &[("Authorization", &auth), ("Content-Type", "image/png")],
        frame,
    )?;
    if st >= 300 {
        return Err(format!("frame upload {st}: {}", String::from_utf8_lossy(&f)).into());
    }
    Ok((cam, field(std::str::from_utf8(&f)?, "id")?))
}

/// A 4096² camera with a frame and a goal at the mask limit: 4 masks of 4096 × 4096 (2²⁶ mask
/// pixels), each painted in a quarter. Its cost model (the masks and their distance indexes,
/// about 580 MiB) is larger than the model cache, so every first scoring builds it.
pub fn mask_limit_goal(addr: &str, token: &str) -> Result<String, Error> {
    let big = png_rgb16(4096, 4096)?;
    let (_cam, frame) = camera_with_frame(addr, token, 4096, 4096, &big)?;
    let mask = mask_png_b64(4096, 4096)?;
    let masks: Vec<String> = (0..4)
        .map(|_| format!(r#"{{"kind": "mask", "source": [20, 20], "mask_png_base64": "{mask}"}}"#))
        .collect();
    let masked = json(
        addr,
        token,
        "POST",
        "/api/goals",
        &format!(
            r#"{{"name": "onto the mat", "frame_id": "{frame}", "terms": [{}]}}"#,
            masks.join(",")
        ),
    )?;
    field(&masked, "goal_id")
}

/// `n` scorings of one point per source against `goal` (of 4 source points), each answered 200
/// or 503 `busy`.
pub fn scorings(goal: &str, n: usize) -> Vec<Case> {
    (0..n)
        .map(|_| Case {
            name: "score 4 points",
            method: "POST",
            path: format!("/api/goals/{goal}/revisions/1/cost"),
            content_type: "application/json",
            body: br#"{"points": [[[[1, 1], [2, 2], [3, 3], [4, 4]]]]}"#.to_vec(),
            allowed: &[200, 503],
        })
        .collect()
}

/// Set-up (not measured): a small camera with a 2-point goal and a goal at the vertex limit, a
/// 4096² camera with a goal at the mask limit, an 8192² camera; then the cases: four cost-map
/// requests at the size limit (2 points × 4096 × 4096, 128 MiB each) and one past it
/// (8192 × 8192), a 100 MB JSON cost body, a 524 MB float64 NPY of points, two bundles of the
/// goal at the vertex limit (4 regions × 1024 vertices), the first scoring of the goal at the
/// mask limit (4 masks of 4096 × 4096), and eight uploads of distinct 16-bit 8192 × 8192 PNG
/// frames (402 MB each decoded).
pub fn prepare(addr: &str, token: &str) -> Result<Vec<Case>, Error> {
    let small = {
        let img = image::RgbImage::from_fn(640, 480, |x, y| {
            image::Rgb([(x % 251) as u8, (y % 241) as u8, 90])
        });
        let mut out = std::io::Cursor::new(Vec::new());
        img.write_to(&mut out, image::ImageFormat::Png)?;
        out.into_inner()
    };
    let (_cam, frame) = camera_with_frame(addr, token, 640, 480, &small)?;
    let points = json(
        addr,
        token,
        "POST",
        "/api/goals",
        &format!(
            r#"{{"name": "two pots", "frame_id": "{frame}", "terms": [
                {{"kind": "point", "source": [100, 380], "target": [480, 260]}},
                {{"kind": "point", "source": [200, 100], "target": [300, 200]}}]}}"#
        ),
    )?;
    let points = field(&points, "goal_id")?;
    let circle = |cx: f64, cy: f64, r: f64| -> String {
        let pts: Vec<String> = (0..1024)
            .map(|k| {
                let a = k as f64 * std::f64::consts::TAU / 1024.0;
                format!("[{:.3}, {:.3}]", cx + r * a.cos(), cy + r * a.sin())
            })
            .collect();
        format!("[{}]", pts.join(","))
    };
    let regions: Vec<String> = (0..4)
        .map(|k| {
            format!(
                r#"{{"kind": "region", "source": [20, 20], "polygon": {}}}"#,
                circle(100.0 + 140.0 * k as f64, 240.0, 60.0)
            )
        })
        .collect();
    let vertices = json(
        addr,
        token,
        "POST",
        "/api/goals",
        &format!(
            r#"{{"name": "four round pots", "frame_id": "{frame}", "terms": [{}]}}"#,
            regions.join(",")
        ),
    )?;
    let vertices = field(&vertices, "goal_id")?;
    let masked = mask_limit_goal(addr, token)?;
    let huge = json(
        addr,
        token,
        "POST",
        "/api/cameras",
        r#"{"name": "probe 8192", "width": 8192, "height": 8192}"#,
    )?;
    let huge = field(&huge, "id")?;
    let upload = png_rgb16(8192, 8192)?;
    let json_body = {
        let mut s = String::from("{\"points\": [");
        while s.len() < 100_000_000 {
            s.push_str("[[[480.5, 260.25], [300.125, 200.5]]],");
        }
        s.push_str("[[[1, 1], [2, 2]]]]}");
        s.into_bytes()
    };
    let npy_f64 = {
        let n = 524_000_000 / (10 * 2 * 2 * 8);
        let mut h =
            format!("{{'descr': '<f8', 'fortran_order': False, 'shape': ({n}, 10, 2, 2), }}");
        while (10 + h.len() + 1) % 64 != 0 {
            h.push(' ');
        }
        h.push('\n');
        let mut out = b"\x93NUMPY\x01\x00".to_vec();
        out.extend_from_slice(&(h.len() as u16).to_le_bytes());
        out.extend_from_slice(h.as_bytes());
        out.resize(out.len() + n * 10 * 2 * 2 * 8, 0);
        out
    };

    let mut cases = Vec::new();
    let mut case = |name, method, path, content_type, body, allowed| {
        cases.push(Case {
            name,
            method,
            path,
            content_type,
            body,
            allowed,
        })
    };
    // Heavy work takes a permit or waits in the queue; past the queue it is 503 `busy`.
    const OK_OR_BUSY: &[u16] = &[200, 503];
    let maps =
        |w: u32| format!("/api/goals/{points}/revisions/1/cost-maps.npy?width={w}&height={w}");
    for _ in 0..4 {
        case(
            "cost-maps 2 × 4096²",
            "GET",
            maps(4096),
            "application/json",
            Vec::new(),
            OK_OR_BUSY,
        );
    }
    // Refused from the query (`map_too_large`) before any permit is taken.
    case(
        "cost-maps 2 × 8192²",
        "GET",
        maps(8192),
        "application/json",
        Vec::new(),
        &[422],
    );
    let cost = format!("/api/goals/{points}/revisions/1/cost");
    // Refused from Content-Length, before a permit (JSON cost bodies: 8 MiB).
    case(
        "100 MB JSON points",
        "POST",
        cost.clone(),
        "application/json",
        json_body,
        &[413],
    );
    // NPY bodies are scored under a permit, and the header is read under it: 413 (2²² points
    // at most) or, with the queue full, 503.
    case(
        "524 MB f64 NPY points",
        "POST",
        cost,
        "application/x-npy",
        npy_f64,
        &[413, 503],
    );
    for _ in 0..2 {
        case(
            "bundle, 4096 vertices",
            "GET",
            format!("/api/goals/{vertices}/revisions/1/bundle.zip"),
            "application/json",
            Vec::new(),
            OK_OR_BUSY,
        );
    }
    case(
        "first score of 4 masks of 4096²",
        "POST",
        format!("/api/goals/{masked}/revisions/1/cost"),
        "application/json",
        br#"{"points": [[[[1, 1], [2, 2], [3, 3], [4, 4]]]]}"#.to_vec(),
        OK_OR_BUSY,
    );
    for k in 0..8 {
        case(
            "upload 16-bit 8192² PNG",
            "POST",
            format!("/api/cameras/{huge}/frames"),
            "image/png",
            png_variant(&upload, k)?,
            &[201, 503],
        );
    }
    Ok(cases)
}

/// Sends every case at once, each on its own connection and thread, while another thread asks
/// `/healthz` every 20 ms with `healthz_timeout` as the client's timeout; `request_timeout`
/// bounds each heavy request.
pub fn burst(
    addr: &str,
    token: &str,
    pid: u32,
    cases: Vec<Case>,
    healthz_timeout: Duration,
    request_timeout: Duration,
) -> Report {
    let auth = format!("Bearer {token}");
    let rss_before_kib = vm_kib(pid, "VmRSS:");
    let healthz_before = server_healthz(addr);
    let stop = Arc::new(AtomicBool::new(false));
    let lat = Arc::new(Mutex::new(Vec::<(u16, f64)>::new()));
    let poller = {
        let (stop, lat, addr) = (stop.clone(), lat.clone(), addr.to_string());
        std::thread::spawn(move || {
            while !stop.load(Ordering::Relaxed) {
                let t0 = Instant::now();
                let st = http::request_with_timeout(
                    &addr,
                    "GET",
                    "/healthz",
                    &[],
                    &[],
                    Some(healthz_timeout),
                )
                .map_or(0, |r| r.0);
                if let Ok(mut l) = lat.lock() {
                    l.push((st, t0.elapsed().as_secs_f64() * 1e3));
                }
                std::thread::sleep(Duration::from_millis(20));
            }
        })
    };
    let t0 = Instant::now();
    let jobs: Vec<_> = cases
        .into_iter()
        .map(|c| {
            let (addr, auth) = (addr.to_string(), auth.clone());
            let (name, allowed) = (c.name, c.allowed);
            let job = std::thread::spawn(move || {
                lowest_priority();
                let answer = http::request_with_timeout(
                    &addr,
                    c.method,
                    &c.path,
                    &[("Authorization", &auth), ("Content-Type", c.content_type)],
                    &c.body,
                    Some(request_timeout),
                )
                .map_err(|e| e.to_string());
                (answer, t0.elapsed().as_secs_f64())
            });
            (name, allowed, job)
        })
        .collect();
    let outcomes = jobs
        .into_iter()
        .map(|(name, allowed, job)| {
            let (status, body, failure, elapsed_s) = match job.join() {
                Ok((Ok((status, body)), s)) => (status, body, None, s),
                Ok((Err(e), s)) => (0, Vec::new(), Some(e), s),
                Err(_) => (
                    0,
                    Vec::new(),
                    Some("the client thread panicked".into()),
                    0.0,
                ),
            };
            Outcome {
                name,
                allowed,
                status,
                body,
                failure,
                elapsed_s,
            }
        })
        .collect();
    let burst_s = t0.elapsed().as_secs_f64();
    stop.store(true, Ordering::Relaxed);
    let _ = poller.join();
    let healthz = lat.lock().map(|l| l.clone()).unwrap_or_default();
    let server_healthz = healthz_before
        .zip(server_healthz(addr))
        .map(|((n0, f0), (n1, f1))| (n1 - n0, (n1 - f1) - (n0 - f0)));
    Report {
        outcomes,
        healthz,
        rss_before_kib,
        peak_kib: vm_kib(pid, "VmHWM:"),
        rss_after_kib: vm_kib(pid, "VmRSS:"),
        burst_s,
        server_healthz,
    }
}

/// Puts the calling thread at the lowest scheduling priority (nice 19; Linux, elsewhere
/// nothing). The probe's senders stand for clients on other machines: on the two cores they
/// share with the server, they must not take the CPU the measurement is about (the `/healthz`
/// poller, and the server). Without this, one poll in a few hundred waited over 100 ms for its
/// own turn on the CPU while the server had answered within a few milliseconds.
fn lowest_priority() {
    goalsmith::service::heavy::lower_this_thread_to(19);
}

/// From the server's `/metrics` (read from loopback): `/healthz` answers so far, and how many
/// of them within 100 ms (`None` when `/metrics` cannot be read).
fn server_healthz(addr: &str) -> Option<(u64, u64)> {
    let (_, body) = http::request(addr, "GET", "/metrics", &[], &[]).ok()?;
    let text = String::from_utf8(body).ok()?;
    let value = |key: &str| -> Option<u64> {
        text.lines()
            .find_map(|l| l.strip_prefix(key))
            .and_then(|v| v.trim().parse().ok())
    };
    let series = "method=\"GET\",route=\"/healthz\"";
    // No series yet: none answered so far.
    let count = value(&format!(
        "goalsmith_http_request_duration_seconds_count{{{series}}} "
    ))
    .unwrap_or(0);
    let fast = value(&format!(
        "goalsmith_http_request_duration_seconds_bucket{{{series},le=\"0.1\"}} "
    ))
    .unwrap_or(0);
    Some((count, fast))
}
