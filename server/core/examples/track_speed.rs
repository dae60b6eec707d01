//! Times point tracking (`goalsmith_core::track`) on a synthetic demonstration: 300 frames of
//! 640 × 480, a smooth random texture moving along a circle (about 2.5 px per frame), 20
//! points tracked with the forward–backward check and the default parameters, on one thread.
//!
//! Each frame's pyramid is built once, when the frame arrives, and the tracker keeps only the
//! two it needs (as a server tracking a long demonstration would). Making the frames is not
//! timed.
//!
//! Run: `cargo run -p goalsmith-core --release --example track_speed` prints one JSON line:
//! milliseconds per frame for the pyramid and for the tracking step, frames per second for
//! both together, and, as a check that the work was real, the mean and largest distance of the
//! tracked points from the true motion and how many were lost.

use std::time::{Duration, Instant};

use goalsmith_core::track::{GrayFrame, Pyramid, TrackParams, TrackSample, track_step};

const WIDTH: usize = 640;
const HEIGHT: usize = 480;
const FRAMES: usize = 300;
const POINTS: usize = 20;
/// Canvas the frames are cut from: room for the motion around the frame.
const PAD: usize = 24;

/// CPU time this process has run, in ms (Linux: first field of /proc/self/schedstat, ns), so
/// that time spent waiting for a shared, busy machine is not counted; None elsewhere.
fn cpu_ms() -> Option<f64> {
    let s = std::fs::read_to_string("/proc/self/schedstat").ok()?;
    let ns: f64 = s.split_whitespace().next()?.parse().ok()?;
    Some(ns / 1e6)
}

/// SplitMix64 in [0, 1).
fn splitmix(state: &mut u64) -> f64 {
    *state = state.wrapping_add(0x9E37_79B9_7F4A_7C15);
    let mut z = *state;
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    ((z ^ (z >> 31)) >> 11) as f64 / (1u64 << 53) as f64
}

/// Random values, box-blurred three times each way (radius 3): a smooth texture.
fn canvas(w: usize, h: usize) -> Vec<f32> {
    let mut s = 20261207;
    let mut a: Vec<f32> = (0..w * h)
        .map(|_| (splitmix(&mut s) * 255.0) as f32)
        .collect();
    let mut b = vec![0.0f32; w * h];
    let r = 3isize;
    let n = (2 * r + 1) as f32;
    for _ in 0..3 {
        for y in 0..h {
            for x in 0..w {
                let mut sum = 0.0;
                for d in -r..=r {
                    let xx = (x as isize + d).clamp(0, w as isize - 1) as usize;
                    sum += a[y * w + xx];
                }
                b[y * w + x] = sum / n;
            }
        }
        for y in 0..h {
            for x in 0..w {
                let mut sum = 0.0;
                for d in -r..=r {
                    let yy = (y as isize + d).clamp(0, h as isize - 1) as usize;
                    sum += b[yy * w + x];
                }
                a[y * w + x] = sum / n;
            }
        }
    }
    // Stretch the contrast the blur took away.
    for v in &mut a {
        *v = (128.0 + (*v - 127.5) * 6.0).clamp(0.0, 255.0);
    }
    a
}

/// The motion of frame k: texture point u is at u + shift(k).
fn shift(k: usize) -> [f64; 2] {
    let t = k as f64 * 0.12;
    [16.0 * t.cos() - 16.0, 16.0 * t.sin()]
}

/// Frame k: the canvas seen shifted, bilinear.
fn frame(canvas: &[f32], cw: usize, k: usize) -> GrayFrame {
    let [sx, sy] = shift(k);
    let mut data = Vec::with_capacity(WIDTH * HEIGHT);
    for y in 0..HEIGHT {
        for x in 0..WIDTH {
            let (u, v) = (x as f64 - sx + PAD as f64, y as f64 - sy + PAD as f64);
            let (iu, iv) = (u.floor() as usize, v.floor() as usize);
            let (a, b) = ((u - u.floor()) as f32, (v - v.floor()) as f32);
            let p = |i: usize, j: usize| canvas[j * cw + i];
            data.push(
                (1.0 - a) * (1.0 - b) * p(iu, iv)
                    + a * (1.0 - b) * p(iu + 1, iv)
                    + (1.0 - a) * b * p(iu, iv + 1)
                    + a * b * p(iu + 1, iv + 1),
            );
        }
    }
    GrayFrame::new(WIDTH, HEIGHT, data).expect("a finite frame of the stated size")
}

fn main() {
    let (cw, ch) = (WIDTH + 2 * PAD + 40, HEIGHT + 2 * PAD + 40);
    let canvas = canvas(cw, ch);
    let params = TrackParams::default();
    let levels = params.lk.levels;
    let seeds: Vec<[f64; 2]> = (0..POINTS)
        .map(|i| {
            let (c, r) = (i % 5, i / 5);
            [
                80.0 + 120.0 * c as f64 + 0.37,
                70.0 + 110.0 * r as f64 + 0.61,
            ]
        })
        .collect();

    let (mut pyr_time, mut track_time) = (Duration::ZERO, Duration::ZERO);
    let (mut pyr_cpu, mut track_cpu) = (0.0, 0.0);
    let first = frame(&canvas, cw, 0);
    let (t, c) = (Instant::now(), cpu_ms());
    let mut prev = Pyramid::build(&first, levels);
    pyr_time += t.elapsed();
    pyr_cpu += cpu_ms().zip(c).map_or(f64::NAN, |(b, a)| b - a);
    let mut samples: Vec<TrackSample> = seeds
        .iter()
        .map(|&p| TrackSample::seed(&prev, p).expect("finite seeds"))
        .collect();
    let (mut err_sum, mut err_max, mut err_n) = (0.0f64, 0.0f64, 0usize);
    for k in 1..FRAMES {
        let f = frame(&canvas, cw, k);
        let (t, c) = (Instant::now(), cpu_ms());
        let next = Pyramid::build(&f, levels);
        pyr_time += t.elapsed();
        pyr_cpu += cpu_ms().zip(c).map_or(f64::NAN, |(b, a)| b - a);
        let (t, c) = (Instant::now(), cpu_ms());
        samples = track_step(&prev, &next, &samples, &params).expect("valid parameters");
        track_time += t.elapsed();
        track_cpu += cpu_ms().zip(c).map_or(f64::NAN, |(b, a)| b - a);
        let [sx, sy] = shift(k);
        let [s0x, s0y] = shift(0);
        for (s, p) in samples.iter().zip(&seeds) {
            if !s.lost {
                let e = (s.x - (p[0] + sx - s0x)).hypot(s.y - (p[1] + sy - s0y));
                err_sum += e;
                err_max = err_max.max(e);
                err_n += 1;
            }
        }
        prev = next;
    }
    let per = |d: Duration| d.as_secs_f64() * 1e3 / FRAMES as f64;
    let lost = samples.iter().filter(|s| s.lost).count();
    let total = pyr_time + track_time;
    println!(
        concat!(
            r#"{{"width": {}, "height": {}, "frames": {}, "points": {}, "levels": {}, "#,
            r#""window": {}, "pyramid_ms_per_frame": {:.3}, "track_ms_per_frame": {:.3}, "#,
            r#""pyramid_cpu_ms_per_frame": {:.3}, "track_cpu_ms_per_frame": {:.3}, "#,
            r#""frames_per_s": {:.1}, "mean_error_px": {:.4}, "max_error_px": {:.4}, "#,
            r#""lost": {}}}"#
        ),
        WIDTH,
        HEIGHT,
        FRAMES,
        POINTS,
        levels,
        params.lk.window,
        per(pyr_time),
        per(track_time),
        pyr_cpu / FRAMES as f64,
        track_cpu / FRAMES as f64,
        FRAMES as f64 / total.as_secs_f64(),
        err_sum / err_n.max(1) as f64,
        err_max,
        lost
    );
}
