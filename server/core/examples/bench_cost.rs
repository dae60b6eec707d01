//! Times the map cost kernel: `bench_cost` prints every `goalsmith_core::bench::run("cost")`
//! row; `bench_cost quick` times only the float32 map kernel on one thread (N=200, T=10, P=2 at
//! 64×64 and 128×128), interleaving the sizes for a few rounds; `bench_cost cold` alternates
//! two 128×128 batches (524 MB in all, more than a 300 MiB last-level cache) so that every
//! run reads its maps from memory; `bench_cost serve` is the timing server that
//! `tests/reference/bench_cost_compare.py` drives so that goalsmith and numpy take turns on the
//! same machine: it reads `time DTYPE SIDE K` lines from stdin (DTYPE `f32` or `f16`, SIDE the
//! map side, N=200, T=10, P=2, one thread) and answers each with one JSON line
//! `{"times_ms": [...]}`, the wall times of K scorings of one batch.
//! Run: `cargo run -p goalsmith-core --release --example bench_cost [quick|cold|serve]`.

use goalsmith_core::cost::TargetShape;
use goalsmith_core::cost::{CostModel, CostPoint, CostSettings, MapBatch, Metric, Mode, Steps};
use goalsmith_core::geometry::PixelPoint;
use std::time::Instant;

fn model() -> Result<CostModel, String> {
    let pt = |x, y| PixelPoint::new(x, y).map_err(|e| e.to_string());
    let points = vec![
        CostPoint {
            target: TargetShape::Point(pt(412.5, 300.25)?),
            weight: 1.0,
            tolerance_px: 5.0,
        },
        CostPoint {
            target: TargetShape::Point(pt(1100.0, 620.0)?),
            weight: 0.5,
            tolerance_px: 5.0,
        },
    ];
    let settings = CostSettings::new(Metric::Euclidean, Steps::All, Mode::Expected)
        .map_err(|e| e.to_string())?;
    CostModel::new(1280, 720, points, settings).map_err(|e| e.to_string())
}

fn cold() -> Result<(), String> {
    let (n, t, p, side) = (200usize, 10usize, 2usize, 128usize);
    let prep = model()?
        .prepare_maps(side, side)
        .map_err(|e| e.to_string())?;
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(1)
        .build()
        .map_err(|e| e.to_string())?;
    let len = n * t * p * side * side;
    let mut s = 777u64;
    let batches: Vec<Vec<f32>> = (0..2)
        .map(|_| {
            (0..len)
                .map(|_| {
                    s = s
                        .wrapping_mul(6364136223846793005)
                        .wrapping_add(1442695040888963407);
                    (s >> 40) as f32 / (1u64 << 24) as f32 * 2.0 / (side * side) as f32
                })
                .collect()
        })
        .collect();
    let mut times: Vec<f64> = pool.install(|| {
        (0..40)
            .map(|k| {
                let t0 = Instant::now();
                std::hint::black_box(prep.evaluate(MapBatch::F32(&batches[k % 2]), n, t).ok());
                t0.elapsed().as_secs_f64() * 1e3
            })
            .collect()
    });
    times.sort_by(f64::total_cmp);
    let ms = times[times.len() / 2];
    println!(
        "cold 128x128 f32 1 thread: median {ms:.3} ms, {:.2} GB/s",
        (len * 4) as f64 / (ms * 1e-3) / 1e9
    );
    Ok(())
}

/// The `serve` loop; see the module docs.
fn serve() -> Result<(), String> {
    use std::io::{BufRead, Write};
    let (n, t, p) = (200usize, 10usize, 2usize);
    let model = model()?;
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(1)
        .build()
        .map_err(|e| e.to_string())?;
    // Per side: the prepared cost maps and one batch in both dtypes, made on first use.
    let mut sides: Vec<(
        usize,
        goalsmith_core::cost::PreparedMaps,
        Vec<f32>,
        Vec<half::f16>,
    )> = Vec::new();
    let mut out = std::io::stdout().lock();
    for line in std::io::stdin().lock().lines() {
        let line = line.map_err(|e| e.to_string())?;
        let words: Vec<&str> = line.split_whitespace().collect();
        let [cmd, dtype, side, k] = words[..] else {
            return Err(format!("expected `time DTYPE SIDE K`, got {line:?}"));
        };
        let (side, k): (usize, usize) = match (side.parse(), k.parse()) {
            (Ok(side), Ok(k)) if cmd == "time" && side > 0 => (side, k),
            _ => return Err(format!("expected `time DTYPE SIDE K`, got {line:?}")),
        };
        if !sides.iter().any(|e| e.0 == side) {
            let len = n * t * p * side * side;
            let scale = 2.0 / (side * side) as f32;
            let mut s = side as u64;
            let v: Vec<f32> = (0..len)
                .map(|_| {
                    s = s
                        .wrapping_mul(6364136223846793005)
                        .wrapping_add(1442695040888963407);
                    (s >> 40) as f32 / (1u64 << 24) as f32 * scale
                })
                .collect();
            let v16: Vec<half::f16> = v.iter().map(|&x| half::f16::from_f32(x)).collect();
            let prep = model.prepare_maps(side, side).map_err(|e| e.to_string())?;
            sides.push((side, prep, v, v16));
        }
        let Some((_, prep, v, v16)) = sides.iter().find(|e| e.0 == side) else {
            return Err("not reached: the side was just prepared".into());
        };
        let batch = match dtype {
            "f32" => MapBatch::F32(v),
            "f16" => MapBatch::F16(v16),
            other => return Err(format!("dtype must be f32 or f16, got {other:?}")),
        };
        let times = pool.install(|| -> Result<Vec<String>, String> {
            (0..k)
                .map(|_| {
                    let t0 = Instant::now();
                    std::hint::black_box(prep.evaluate(batch, n, t).map_err(|e| e.to_string())?);
                    Ok(format!("{:.4}", t0.elapsed().as_secs_f64() * 1e3))
                })
                .collect()
        })?;
        writeln!(out, r#"{{"times_ms": [{}]}}"#, times.join(", ")).map_err(|e| e.to_string())?;
        out.flush().map_err(|e| e.to_string())?;
    }
    Ok(())
}

fn main() -> Result<(), String> {
    let arg = std::env::args().nth(1);
    if arg.as_deref() == Some("cold") {
        return cold();
    }
    if arg.as_deref() == Some("serve") {
        return serve();
    }
    if arg.as_deref() != Some("quick") {
        for row in goalsmith_core::bench::run("cost")? {
            println!("{}", row.to_json());
        }
        return Ok(());
    }
    let pt = |x, y| PixelPoint::new(x, y).map_err(|e| e.to_string());
    let points = vec![
        CostPoint {
            target: TargetShape::Point(pt(412.5, 300.25)?),
            weight: 1.0,
            tolerance_px: 5.0,
        },
        CostPoint {
            target: TargetShape::Point(pt(1100.0, 620.0)?),
            weight: 0.5,
            tolerance_px: 5.0,
        },
    ];
    let settings = CostSettings::new(Metric::Euclidean, Steps::All, Mode::Expected)
        .map_err(|e| e.to_string())?;
    let model = CostModel::new(1280, 720, points, settings).map_err(|e| e.to_string())?;
    let (n, t, p) = (200usize, 10usize, 2usize);
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(1)
        .build()
        .map_err(|e| e.to_string())?;
    let mut s = 12345u64;
    let data: Vec<(usize, Vec<f32>, _)> = [64usize, 128]
        .iter()
        .map(|&side| {
            let len = n * t * p * side * side;
            let scale = 2.0 / (side * side) as f32;
            let v: Vec<f32> = (0..len)
                .map(|_| {
                    s = s
                        .wrapping_mul(6364136223846793005)
                        .wrapping_add(1442695040888963407);
                    (s >> 40) as f32 / (1u64 << 24) as f32 * scale
                })
                .collect();
            (side, v, model.prepare_maps(side, side).unwrap())
        })
        .collect();
    for round in 0..3 {
        for (side, v, prep) in &data {
            let mut times: Vec<f64> = pool.install(|| {
                (0..25)
                    .map(|_| {
                        let t0 = Instant::now();
                        std::hint::black_box(prep.evaluate(MapBatch::F32(v), n, t).unwrap());
                        t0.elapsed().as_secs_f64() * 1e3
                    })
                    .collect()
            });
            times.sort_by(f64::total_cmp);
            let ms = times[times.len() / 2];
            let bytes = (v.len() * 4) as f64;
            println!(
                "round {round} {side}x{side} f32 1 thread: median {ms:.3} ms (min {:.3}), {:.2} GB/s",
                times[0],
                bytes / (ms * 1e-3) / 1e9
            );
        }
    }
    Ok(())
}
