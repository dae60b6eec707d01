//! The HTTP cost route against a bare socket that reads the same bytes, in one run.
//!
//! ```sh
//! cargo build --release && cargo run --release --example bench_route [-- REPEATS]
//! ```
//!
//! Starts `target/release/goalsmith serve` on a fresh SQLite database, makes a goal with two
//! source points, and POSTs the standard batch (N=200 candidates, T=10 steps, P=2 points, 64×64
//! probability maps, as an NPY body) to `…/cost`, once as float32 (65 MB) and once as float16
//! (33 MB). The reference is a bare HTTP sink in this process that reads the request and its
//! body through one reused 1 MiB buffer and answers a fixed 200: what moving the bytes over
//! loopback costs with no work at all.
//! Both are driven by the same client code (one new connection per request, like curl), and the
//! requests alternate route / sink / route / sink … so that load on the machine hits both alike.
//! Prints one JSON line per dtype with the best and median times and the route/sink ratios.

use std::io::{BufRead, BufReader, Read, Write};
use std::net::TcpListener;

use std::time::Instant;

#[path = "support/http.rs"]
mod http;
use http::{Error, field, json, request};

/// A bare HTTP sink: reads the request line, headers and Content-Length bytes, answers 200.
fn sink() -> Result<String, Error> {
    let listener = TcpListener::bind("127.0.0.1:0")?;
    let addr = listener.local_addr()?.to_string();
    std::thread::spawn(move || {
        for conn in listener.incoming().flatten() {
            let _ = (|| -> Result<(), Error> {
                conn.set_nodelay(true)?;
                let mut r = BufReader::with_capacity(1 << 16, conn.try_clone()?);
                let mut len = 0usize;
                loop {
                    let mut line = String::new();
                    r.read_line(&mut line)?;
                    if line == "\r\n" || line.is_empty() {
                        break;
                    }
                    if let Some((k, v)) = line.split_once(':')
                        && k.eq_ignore_ascii_case("content-length")
                    {
                        len = v.trim().parse()?;
                    }
                }
                // Read the body through one small reused buffer and drop it: the least any
                // server must do to take the bytes off the socket.
                let mut buf = vec![0u8; 1 << 20];
                let mut left = len;
                while left > 0 {
                    let k = r.read(&mut buf[..left.min(1 << 20)])?;
                    if k == 0 {
                        return Err("body ended early".into());
                    }
                    std::hint::black_box(&buf[..k]);
                    left -= k;
                }
                let reply = b"{\"ok\":true}";
                let mut w = conn;
                w.write_all(
                    format!(
                        "HTTP/1.1 200 OK\r\nContent-Length: {}\r\nConnection: close\r\n\r\n",
                        reply.len()
                    )
                    .as_bytes(),
                )?;
                w.write_all(reply)?;
                Ok(())
            })();
        }
    });
    Ok(addr)
}

fn stats(mut v: Vec<f64>) -> (f64, f64) {
    v.sort_by(f64::total_cmp);
    (v[0], v[v.len() / 2])
}

fn main() -> Result<(), Error> {
    let repeats: usize = std::env::args()
        .nth(1)
        .and_then(|a| a.parse().ok())
        .unwrap_or(15);
    let served = http::Served::start()?;
    let (addr, token) = (served.addr.clone(), served.token.clone());
    let result = (|| -> Result<(), Error> {
        let cam = json(
            &addr,
            &token,
            "POST",
            "/api/cameras",
            r#"{"name": "bench overhead", "width": 640, "height": 480}"#,
        )?;
        let cam = field(&cam, "id")?;
        let frame_png = {
            let img = image::RgbImage::from_fn(640, 480, |x, y| {
                image::Rgb([(x % 251) as u8, (y % 241) as u8, 90])
            });
            let mut out = std::io::Cursor::new(Vec::new());
            img.write_to(&mut out, image::ImageFormat::Png)?;
            out.into_inner()
        };
        let auth = format!("Bearer {token}");
        let (st, frame) = request(
            &addr,
            "POST",
            &format!("/api/cameras/{cam}/frames"),
            &[("Authorization", &auth), ("Content-Type", "image/png")],
            &frame_png,
        )?;
        if st != 201 {
            return Err(format!("frame upload: {st}").into());
        }
        let frame = field(std::str::from_utf8(&frame)?, "id")?;
        let goal = json(
            &addr,
            &token,
            "POST",
            "/api/goals",
            &format!(
                r#"{{"name": "tray onto the mat", "frame_id": "{frame}", "terms": [
                    {{"kind": "point", "source": [100, 380], "target": [480, 260]}},
                    {{"kind": "region", "source": [200, 100],
                      "polygon": [[420, 200], [560, 200], [560, 320], [420, 320]]}}]}}"#
            ),
        )?;
        let goal = field(&goal, "goal_id")?;
        let path = format!("/api/goals/{goal}/revisions/1/cost");
        let (n, t, p, h, w) = (200usize, 10usize, 2usize, 64usize, 64usize);
        let len = n * t * p * h * w;
        let probs: Vec<f32> = (0..len)
            .map(|i| ((i % 4099) as f32) / (4099.0 * (h * w) as f32))
            .collect();
        let shape = [n, t, p, h, w];
        let bodies = [
            ("f32", goalsmith_core::npy::write_f32(&shape, &probs)?),
            ("f16", {
                let halves: Vec<half::f16> =
                    probs.iter().map(|&v| half::f16::from_f32(v)).collect();
                goalsmith_core::npy::write_f16(&shape, &halves)?
            }),
        ];
        let sink_addr = sink()?;
        let headers = [
            ("Authorization", auth.as_str()),
            ("Content-Type", "application/x-npy"),
        ];
        for (dtype, body) in &bodies {
            // Warm both (first request builds the cached model, first connections warm up).
            for _ in 0..2 {
                let (st, out) = request(&addr, "POST", &path, &headers, body)?;
                if st != 200 {
                    return Err(
                        format!("cost route: {st} {}", String::from_utf8_lossy(&out)).into(),
                    );
                }
                request(&sink_addr, "POST", "/", &headers, body)?;
            }
            let (mut route, mut bare) = (Vec::new(), Vec::new());
            for _ in 0..repeats {
                let t0 = Instant::now();
                let (st, _) = request(&addr, "POST", &path, &headers, body)?;
                route.push(t0.elapsed().as_secs_f64() * 1e3);
                if st != 200 {
                    return Err(format!("cost route: {st}").into());
                }
                let t0 = Instant::now();
                request(&sink_addr, "POST", "/", &headers, body)?;
                bare.push(t0.elapsed().as_secs_f64() * 1e3);
            }
            let (rb, rm) = stats(route);
            let (bb, bm) = stats(bare);
            println!(
                "{}",
                serde_json::json!({
                    "bench": "cost_route",
                    "params": {"n": n, "t": t, "p": p, "h": h, "w": w, "dtype": dtype,
                               "body_bytes": body.len(), "repeats": repeats},
                    "route_best_ms": (rb * 100.0).round() / 100.0,
                    "route_median_ms": (rm * 100.0).round() / 100.0,
                    "bare_best_ms": (bb * 100.0).round() / 100.0,
                    "bare_median_ms": (bm * 100.0).round() / 100.0,
                    "ratio_best": (rb / bb * 100.0).round() / 100.0,
                    "ratio_median": (rm / bm * 100.0).round() / 100.0,
                })
            );
        }
        // Points: the same 10 000 × 10 × 2 candidates as JSON and as an NPY body.
        let (pn, pt) = (10_000usize, 10usize);
        let pts: Vec<f32> = (0..pn * pt * p * 2)
            .map(|i| ((i * 7919) % 640) as f32 * 0.75)
            .collect();
        let as_json = {
            let mut out = String::from("{\"points\":[");
            for c in 0..pn {
                out.push_str(if c == 0 { "[" } else { ",[" });
                for s in 0..pt {
                    out.push_str(if s == 0 { "[" } else { ",[" });
                    for q in 0..p {
                        let k = ((c * pt + s) * p + q) * 2;
                        if q > 0 {
                            out.push(',');
                        }
                        out.push_str(&format!("[{},{}]", pts[k], pts[k + 1]));
                    }
                    out.push(']');
                }
                out.push(']');
            }
            out.push_str("]}");
            out.into_bytes()
        };
        let as_npy = goalsmith_core::npy::write_f32(&[pn, pt, p, 2], &pts)?;
        let json_headers = [
            ("Authorization", auth.as_str()),
            ("Content-Type", "application/json"),
        ];
        let (mut tj, mut tn) = (Vec::new(), Vec::new());
        for _ in 0..repeats.min(7) + 1 {
            let t0 = Instant::now();
            let (st, a) = request(&addr, "POST", &path, &json_headers, &as_json)?;
            tj.push(t0.elapsed().as_secs_f64() * 1e3);
            let t0 = Instant::now();
            let (st2, b) = request(&addr, "POST", &path, &headers, &as_npy)?;
            tn.push(t0.elapsed().as_secs_f64() * 1e3);
            if st != 200 || st2 != 200 || a != b {
                return Err("JSON and NPY points disagree".into());
            }
        }
        let (jb, jm) = stats(tj);
        let (nb, nm) = stats(tn);
        println!(
            "{}",
            serde_json::json!({
                "bench": "cost_route_points",
                "params": {"n": pn, "t": pt, "p": p, "json_bytes": as_json.len(),
                           "npy_bytes": as_npy.len(), "repeats": repeats.min(7) + 1},
                "json_best_ms": (jb * 100.0).round() / 100.0,
                "json_median_ms": (jm * 100.0).round() / 100.0,
                "npy_best_ms": (nb * 100.0).round() / 100.0,
                "npy_median_ms": (nm * 100.0).round() / 100.0,
            })
        );
        Ok(())
    })();
    drop(served);
    result
}
