//! Times `distance::edt` on the 1280 × 720 mask of tests/reference/bench_edt_compare.py
//! (pixel k painted when its SplitMix64 draw is below 1 %, seed 20261201), on one thread.
//!
//! Run: `cargo run -p goalsmith-core --release --example edt_speed [-- --edt-only]`
//! Prints one JSON line like the Python script: {"bench": "edt_goalsmith", "median_ms": ...}.

use std::time::Instant;

use goalsmith_core::distance::{Mask, edt, edt_at};

const WIDTH: usize = 1280;
const HEIGHT: usize = 720;
const DENSITY: f64 = 0.01;
const SEED: u64 = 20261201;
const REPEATS: usize = 41;

/// SplitMix64 (Steele, Lea & Flood 2014), the same generator as the Python script's.
fn splitmix64(state: &mut u64) -> u64 {
    *state = state.wrapping_add(0x9E37_79B9_7F4A_7C15);
    let mut z = *state;
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

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

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let mut state = SEED;
    let inside: Vec<bool> = (0..WIDTH * HEIGHT)
        .map(|_| ((splitmix64(&mut state) >> 11) as f64) * (-53f64).exp2() < DENSITY)
        .collect();
    let painted = inside.iter().filter(|&&b| b).count();
    let mask = Mask::new(WIDTH, HEIGHT, inside)?;
    let params = format!(
        r#"{{"width": {WIDTH}, "height": {HEIGHT}, "density": {DENSITY}, "seed": {SEED}, "painted": {painted}, "repeats": {REPEATS}, "threads": 1}}"#
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
    let xs: Vec<f64> = (0..WIDTH).map(|i| i as f64).collect();
    let ys: Vec<f64> = (0..HEIGHT).map(|j| j as f64).collect();
    let (ms, min, cpu) = time_ms(|| {
        std::hint::black_box(edt_at(std::hint::black_box(&mask), &xs, &ys));
    });
    println!(
        r#"{{"bench": "edt_at_goalsmith_full_grid", "median_ms": {ms:.3}, "min_ms": {min:.3}, "cpu_median_ms": {cpu:.3}, "params": {params}}}"#
    );

    // A half-size map (DESIGN.md: map pixel centre (i, j) ↔ frame point ((i+0.5)·W/w − 0.5, …)).
    let (w, h) = (WIDTH / 2, HEIGHT / 2);
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
