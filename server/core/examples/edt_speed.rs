//! Times `distance::edt` on the 1280 × 720 benchmark mask of `bench::edt_bench_mask` (pixel k
//! painted when its SplitMix64 draw is below 1 %, seed 20261201), on one thread.
//!
//! Run: `cargo run -p goalsmith-core --release --example edt_speed [-- --edt-only]` prints
//! JSON lines (median, minimum and median CPU time of 41 runs) for `edt` and, unless
//! `--edt-only`, for `edt_at` on the same grid and on a half-size map.
//!
//! `-- --serve` is the timing server that `tests/reference/bench_edt_compare.py` drives, so
//! that goalsmith, scipy and OpenCV can take turns on the same machine in one command. It
//! reads commands from stdin, one a line, and answers each with one JSON line:
//! - `info` → `{"width": …, "height": …, "painted": …}`;
//! - `time K` → `{"times_ms": [...]}`, the wall times of K runs of `edt`;
//! - `dump PATH` → writes the distances to PATH as little-endian float32, row-major, and
//!   answers `{"written": PATH}`.

use std::io::{BufRead, Write};
use std::time::Instant;

use goalsmith_core::bench::edt_bench_mask;
use goalsmith_core::distance::{Mask, edt, edt_at};

const REPEATS: usize = 41;

/// CPU time this process has run, in ms (Linux: first field of /proc/self/schedstat, ns), so
/// that time spent waiting for a shared, busy machine is not counted; None elsewhere.
fn cpu_ms() -> Option<f64> {
    let s = std::fs::read_to_string("/proc/self/schedstat").ok()?;
    let ns: f64 = s.split_whitespace().next()?.parse().ok()?;
    Some(ns / 1e6)
}

/// Median wall time, minimum wall time and median CPU time (ms) over REPEATS runs after one
/// warm-up.
fn time_ms(mut run: impl FnMut()) -> (f64, f64, f64) {
    run();
    let mut wall = Vec::with_capacity(REPEATS);
    let mut cpu = Vec::with_capacity(REPEATS);
    for _ in 0..REPEATS {
        let (t, c) = (Instant::now(), cpu_ms());
        run();
        wall.push(t.elapsed().as_secs_f64() * 1e3);
        cpu.push(cpu_ms().zip(c).map_or(f64::NAN, |(b, a)| b - a));
    }
    wall.sort_by(f64::total_cmp);
    cpu.sort_by(f64::total_cmp);
    (wall[REPEATS / 2], wall[0], cpu[REPEATS / 2])
}

/// A JSON string literal (paths may hold quotes or backslashes).
fn json_string(s: &str) -> String {
    let mut out = String::from('"');
    for c in s.chars() {
        match c {
            '"' | '\\' => {
                out.push('\\');
                out.push(c);
            }
            c if (c as u32) < 0x20 => out.push_str(&format!("\\u{:04x}", c as u32)),
            c => out.push(c),
        }
    }
    out.push('"');
    out
}

/// The `--serve` loop; see the module docs.
fn serve(mask: &Mask, painted: usize) -> Result<(), Box<dyn std::error::Error>> {
    let stdout = std::io::stdout();
    let mut out = stdout.lock();
    for line in std::io::stdin().lock().lines() {
        let line = line?;
        let (cmd, arg) = line.trim().split_once(' ').unwrap_or((line.trim(), ""));
        let reply = match cmd {
            "info" => format!(
                r#"{{"width": {}, "height": {}, "painted": {painted}}}"#,
                mask.width(),
                mask.height()
            ),
            "time" => {
                let k: usize = arg.parse().map_err(|_| format!("bad count {arg:?}"))?;
                let times: Vec<String> = (0..k)
                    .map(|_| {
                        let t = Instant::now();
                        std::hint::black_box(edt(std::hint::black_box(mask)));
                        format!("{:.4}", t.elapsed().as_secs_f64() * 1e3)
                    })
                    .collect();
                format!(r#"{{"times_ms": [{}]}}"#, times.join(", "))
            }
            "dump" => {
                let bytes: Vec<u8> = edt(mask).iter().flat_map(|v| v.to_le_bytes()).collect();
                std::fs::write(arg, bytes)?;
                format!(r#"{{"written": {}}}"#, json_string(arg))
            }
            other => return Err(format!("unknown command {other:?}").into()),
        };
        writeln!(out, "{reply}")?;
        out.flush()?;
    }
    Ok(())
}

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let mask = edt_bench_mask()?;
    let painted = mask.data().iter().filter(|&&b| b).count();
    if std::env::args().any(|a| a == "--serve") {
        return serve(&mask, painted);
    }
    let (width, height) = (mask.width(), mask.height());
    let params = format!(
        r#"{{"width": {width}, "height": {height}, "density": 0.01, "seed": 20261201, "painted": {painted}, "repeats": {REPEATS}, "threads": 1}}"#
    );

    let (ms, min, cpu) = time_ms(|| {
        std::hint::black_box(edt(std::hint::black_box(&mask)));
    });
    println!(
        r#"{{"bench": "edt_goalsmith", "median_ms": {ms:.3}, "min_ms": {min:.3}, "cpu_median_ms": {cpu:.3}, "params": {params}}}"#
    );

    if std::env::args().any(|a| a == "--edt-only") {
        return Ok(());
    }
    // The same grid through the general query-point transform, for comparison.
    let xs: Vec<f64> = (0..width).map(|i| i as f64).collect();
    let ys: Vec<f64> = (0..height).map(|j| j as f64).collect();
    let (ms, min, cpu) = time_ms(|| {
        std::hint::black_box(edt_at(std::hint::black_box(&mask), &xs, &ys));
    });
    println!(
        r#"{{"bench": "edt_at_goalsmith_full_grid", "median_ms": {ms:.3}, "min_ms": {min:.3}, "cpu_median_ms": {cpu:.3}, "params": {params}}}"#
    );

    // A half-size map, sampled as `cost` samples maps: pixel centre (i, j) ↔ frame point
    // ((i + 0.5)·W/w − 0.5, (j + 0.5)·H/h − 0.5).
    let (w, h) = (width / 2, height / 2);
    let xs: Vec<f64> = (0..w).map(|i| (i as f64 + 0.5) * 2.0 - 0.5).collect();
    let ys: Vec<f64> = (0..h).map(|j| (j as f64 + 0.5) * 2.0 - 0.5).collect();
    let (ms, min, cpu) = time_ms(|| {
        std::hint::black_box(edt_at(std::hint::black_box(&mask), &xs, &ys));
    });
    println!(
        r#"{{"bench": "edt_at_goalsmith_half_size", "median_ms": {ms:.3}, "min_ms": {min:.3}, "cpu_median_ms": {cpu:.3}, "params": {params}}}"#
    );
    Ok(())
}
