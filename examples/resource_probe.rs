//! The heavy requests a probe once used to hold gigabytes, sent all at once, with the server's
//! peak memory and the answers of `/healthz` meanwhile.
//!
//! ```sh
//! cargo build --release && cargo run --release --example resource_probe
//! ```
//!
//! Starts `target/release/goalsmith serve` on a fresh SQLite database with its default limits,
//! then sends in parallel: four cost-map requests at the size limit (2 points × 4096 × 4096,
//! 128 MiB each) and one past it (8192 × 8192), a 100 MB JSON cost body, a 524 MB float64 NPY of
//! points, two bundles of a goal at the vertex limit (4 regions × 1024 vertices), the first
//! scoring of a goal at the mask limit (4 masks of 4096 × 4096), and eight uploads of distinct
//! 16-bit 8192 × 8192 PNG frames. A thread asks `/healthz` every 20 ms throughout. Prints one
//! JSON line: the status codes per case, the server's peak resident memory (VmHWM) and the
//! `/healthz` latencies. It measures; it asserts nothing.

#[path = "support/http.rs"]
mod http;
use http::{Error, field, json, request};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, Mutex};
use std::time::Instant;

fn png_rgb16(w: u32, h: u32, seed: u16) -> Result<Vec<u8>, Error> {
    let mut raw = vec![0u8; (w * h * 6) as usize];
    // A flat frame with a seed-dependent first pixel: tiny when compressed, full size decoded.
    raw[0..2].copy_from_slice(&seed.to_be_bytes());
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

fn mask_png_b64(w: u32, h: u32) -> Result<String, Error> {
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

fn vm_kib(pid: u32, key: &str) -> u64 {
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

fn main() -> Result<(), Error> {
    let served = http::Served::start()?;
    run(&served.addr, &served.token, served.pid())
}

fn run(addr: &str, token: &str, pid: u32) -> Result<(), Error> {
    let auth = format!("Bearer {token}");
    // Set-up (not measured): a small camera with a 2-point goal and a goal at the vertex limit,
    // and a 4096² camera with a goal at the mask limit.
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
    let big = png_rgb16(4096, 4096, 1)?;
    let (_bcam, bframe) = camera_with_frame(addr, token, 4096, 4096, &big)?;
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
            r#"{{"name": "onto the mat", "frame_id": "{bframe}", "terms": [{}]}}"#,
            masks.join(",")
        ),
    )?;
    let masked = field(&masked, "goal_id")?;
    let huge = json(
        addr,
        token,
        "POST",
        "/api/cameras",
        r#"{"name": "probe 8192", "width": 8192, "height": 8192}"#,
    )?;
    let huge = field(&huge, "id")?;
    let uploads: Vec<Vec<u8>> = (0..8)
        .map(|k| png_rgb16(8192, 8192, 100 + k))
        .collect::<Result<_, _>>()?;
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
    let base_rss = vm_kib(pid, "VmRSS:");

    // The burst.
    let stop = Arc::new(AtomicBool::new(false));
    let lat = Arc::new(Mutex::new(Vec::<(u16, f64)>::new()));
    let poller = {
        let (stop, lat, addr) = (stop.clone(), lat.clone(), addr.to_string());
        std::thread::spawn(move || {
            while !stop.load(Ordering::Relaxed) {
                let t0 = Instant::now();
                let st = request(&addr, "GET", "/healthz", &[], &[]).map_or(0, |r| r.0);
                if let Ok(mut l) = lat.lock() {
                    l.push((st, t0.elapsed().as_secs_f64() * 1e3));
                }
                std::thread::sleep(std::time::Duration::from_millis(20));
            }
        })
    };
    let mut jobs: Vec<(String, std::thread::JoinHandle<u16>)> = Vec::new();
    let mut go =
        |name: &str, method: &'static str, path: String, ct: &'static str, body: Vec<u8>| {
            let (addr, auth) = (addr.to_string(), auth.clone());
            jobs.push((
                name.to_string(),
                std::thread::spawn(move || {
                    request(
                        &addr,
                        method,
                        &path,
                        &[("Authorization", &auth), ("Content-Type", ct)],
                        &body,
                    )
                    .map_or(0, |r| r.0)
                }),
            ));
        };
    let maps =
        |w: u32| format!("/api/goals/{points}/revisions/1/cost-maps.npy?width={w}&height={w}");
    for _ in 0..4 {
        go(
            "cost-maps 2 × 4096²",
            "GET",
            maps(4096),
            "application/json",
            Vec::new(),
        );
    }
    go(
        "cost-maps 2 × 8192²",
        "GET",
        maps(8192),
        "application/json",
        Vec::new(),
    );
    let cost = format!("/api/goals/{points}/revisions/1/cost");
    go(
        "100 MB JSON points",
        "POST",
        cost.clone(),
        "application/json",
        json_body,
    );
    go(
        "524 MB f64 NPY points",
        "POST",
        cost,
        "application/x-npy",
        npy_f64,
    );
    for _ in 0..2 {
        go(
            "bundle, 4096 vertices",
            "GET",
            format!("/api/goals/{vertices}/revisions/1/bundle.zip"),
            "application/json",
            Vec::new(),
        );
    }
    go(
        "first score of 4 masks of 4096²",
        "POST",
        format!("/api/goals/{masked}/revisions/1/cost"),
        "application/json",
        br#"{"points": [[[[1, 1], [2, 2], [3, 3], [4, 4]]]]}"#.to_vec(),
    );
    for body in uploads {
        go(
            "upload 16-bit 8192² PNG",
            "POST",
            format!("/api/cameras/{huge}/frames"),
            "image/png",
            body,
        );
    }
    let t0 = Instant::now();
    let mut statuses: std::collections::BTreeMap<String, Vec<u16>> = Default::default();
    for (name, j) in jobs {
        statuses
            .entry(name)
            .or_default()
            .push(j.join().unwrap_or(0));
    }
    let burst_s = t0.elapsed().as_secs_f64();
    stop.store(true, Ordering::Relaxed);
    let _ = poller.join();
    let peak = vm_kib(pid, "VmHWM:");
    let after = vm_kib(pid, "VmRSS:");
    let mut l: Vec<f64> = lat
        .lock()
        .map(|l| l.iter().map(|x| x.1).collect())
        .unwrap_or_default();
    let healthy = lat
        .lock()
        .map(|l| l.iter().all(|x| x.0 == 200))
        .unwrap_or(false);
    l.sort_by(f64::total_cmp);
    let pct = |q: f64| {
        l.get(((l.len() as f64 - 1.0) * q).round() as usize)
            .copied()
            .unwrap_or(0.0)
    };
    println!(
        "{}",
        serde_json::json!({
            "bench": "resource_probe",
            "statuses": statuses,
            "burst_s": (burst_s * 10.0).round() / 10.0,
            "rss_before_burst_mib": base_rss / 1024,
            "peak_rss_mib": peak / 1024,
            "rss_after_mib": after / 1024,
            "healthz": {"polls": l.len(), "all_200": healthy,
                        "median_ms": (pct(0.5) * 10.0).round() / 10.0,
                        "p99_ms": (pct(0.99) * 10.0).round() / 10.0,
                        "max_ms": (pct(1.0) * 10.0).round() / 10.0},
        })
    );
    Ok(())
}
