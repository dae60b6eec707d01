//! Built-in benchmarks on synthetic data (`goalsmith bench cost|edt`).
//!
//! Each benchmark returns rows of a median time and named parameters; [`BenchRow::to_json`]
//! prints the contract's line `{"bench": NAME, "median_ms": …, "params": {…}}`. Sizes are
//! numbers and `threads` is always the number of threads the kernel ran on.
//!
//! `cost` times the map kernel (N=200, T=10, P=2 at 64×64 and 128×128, steps `all`, float32
//! and float16, on one thread and on all cores), the point kernel (N=10000, T=10, P=4) and,
//! as the yardstick for a memory-bound kernel, one thread summing a 512 MiB float32 buffer
//! (`memory_read`, read as one stream with the same wide registers and prefetching as the
//! kernel, which also reads its maps one after another, so the ratio compares like with like). Map rows
//! carry `gb_per_s` (bytes of maps read per second), `memory_ratio` = their `gb_per_s` ÷
//! the 512 MiB `memory_read` rate, and `vs_f32` = their median ÷ the float32 median of the
//! same size and threads; the float32 and float16 runs of one size and thread count take
//! turns, so that `vs_f32` compares them under the same load on a shared machine. A second `memory_read` row over 64 MiB shows the rate when
//! the data fits in the last-level cache, which on machines with a large cache is the fairer
//! yardstick for the 64×64 batch (65 MB). Every repeat re-reads the same batch (as
//! `tests/reference/bench_cost_compare.py` does for numpy), so with a last-level cache near
//! the 128×128 float32 batch's 262 MB part of it may stay cached between repeats; the
//! `bench_cost cold` example alternates two such batches to rule that out.
//!
//! `track` times point tracking on 30 frames of 640×480 (see [`track_bench_frame`]), one
//! thread: building a frame's pyramid from its 8-bit pixels (4 levels with gradients), in fresh
//! memory (`memory: fresh`, each pyramid allocated and dropped) and into the previous pyramid's
//! memory (`memory: reused`, [`crate::track::Pyramid::rebuild_from_u8`]), the two in turns, and
//! one frame step of 16 and of 100 points with the forward–backward check (two Lucas–Kanade
//! runs per point) on pyramids built before, each per frame. `tests/reference/bench_track_compare.py` times OpenCV on the
//! same frames in turns with it.
//!
//! `irl` times a reward fit (maximum-entropy inverse RL, [`crate::irl`]) on one thread: an
//! 80×60 grid (640×480 frame, 8 px cells), 6 features, 10 demos of 100 moves each (see
//! [`irl_bench_problem`]); one evaluation of the objective with its gradient (a backward and a
//! forward pass) and a full fit from w = 0 with the default settings.
//! `tests/reference/bench_irl_compare.py` times the numpy implementation of
//! `tests/reference/gen_irl.py` on the same problem.
//!
//! `edt` times [`crate::distance::edt`] on a 1280×720 mask, one thread. The mask recipe is
//! shared with `tests/reference/bench_edt_compare.py`: pixel k (row-major) is painted when
//! u_k < 1 %, u_k = (z_k >> 11)·2⁻⁵³, z_k the k-th output of SplitMix64 seeded with 20261201
//! (Steele, Lea & Flood 2014).

use crate::cost::{CostModel, CostPoint, CostSettings, MapBatch, Metric, Mode, Steps, TargetShape};
use crate::distance::{self, Mask};
use crate::geometry::{PixelPoint, Polygon};
use crate::rng::SplitMix64;
use half::f16;
use half::slice::HalfFloatSliceExt;
use std::hint::black_box;
use std::sync::{Arc, Mutex};
use std::time::{Duration, Instant};

/// A parameter value: a number (sizes, rates) or a text (dtype, steps).
#[derive(Debug, Clone, PartialEq)]
pub enum ParamValue {
    /// A number; integral values print without a fraction.
    Num(f64),
    /// A string.
    Text(String),
}

/// One measurement.
#[derive(Debug, Clone, PartialEq)]
pub struct BenchRow {
    /// Benchmark name, e.g. `cost`, `memory_read`, `edt`.
    pub bench: String,
    /// Median wall time of one run, milliseconds.
    pub median_ms: f64,
    /// Named parameters in print order; always includes `threads`.
    pub params: Vec<(String, ParamValue)>,
}

impl BenchRow {
    /// The value of a parameter, if present.
    pub fn param(&self, name: &str) -> Option<&ParamValue> {
        self.params.iter().find(|(k, _)| k == name).map(|(_, v)| v)
    }

    /// One JSON object on one line: `{"bench": …, "median_ms": …, "params": {…}}`.
    pub fn to_json(&self) -> String {
        let params: Vec<String> = self
            .params
            .iter()
            .map(|(k, v)| {
                let v = match v {
                    ParamValue::Num(x) => json_number(*x),
                    ParamValue::Text(s) => json_string(s),
                };
                format!("{}: {v}", json_string(k))
            })
            .collect();
        format!(
            "{{\"bench\": {}, \"median_ms\": {}, \"params\": {{{}}}}}",
            json_string(&self.bench),
            json_number(self.median_ms),
            params.join(", ")
        )
    }
}

fn json_number(x: f64) -> String {
    if !x.is_finite() {
        "null".into()
    } else if x.fract() == 0.0 && x.abs() < 9.0e15 {
        format!("{}", x as i64)
    } else {
        format!("{x}")
    }
}

fn json_string(s: &str) -> String {
    let mut out = String::with_capacity(s.len() + 2);
    out.push('"');
    for c in s.chars() {
        match c {
            '"' => out.push_str("\\\""),
            '\\' => out.push_str("\\\\"),
            c if (c as u32) < 0x20 => out.push_str(&format!("\\u{:04x}", c as u32)),
            c => out.push(c),
        }
    }
    out.push('"');
    out
}

/// The benchmarks [`run`] knows.
pub const NAMES: [&str; 4] = ["cost", "edt", "irl", "track"];

/// Runs the named benchmark (`cost`, `edt`, `irl` or `track`) and returns its rows.
pub fn run(name: &str) -> Result<Vec<BenchRow>, String> {
    match name {
        "cost" => cost_bench(),
        "edt" => edt_bench(),
        "irl" => irl_bench(),
        "track" => track_bench(),
        other => Err(format!(
            "unknown benchmark {other:?}; known: {}",
            NAMES.join(", ")
        )),
    }
}

/// Median of repeated runs of `f`: at least `min_reps`, and until ~`budget` has passed.
fn median_ms(min_reps: usize, budget: Duration, mut f: impl FnMut()) -> f64 {
    interleaved_median_ms(min_reps, budget, &mut [&mut f])[0]
}

/// Median of repeated runs of each of `fs`, taken in turns (one run of each per round) so that
/// a change in the machine's load affects all alike and their ratio holds: at least
/// `min_reps` rounds, and until ~`budget` has passed.
fn interleaved_median_ms(
    min_reps: usize,
    budget: Duration,
    fs: &mut [&mut dyn FnMut()],
) -> Vec<f64> {
    for f in fs.iter_mut() {
        f(); // warm up caches, page tables and the thread pool
    }
    let start = Instant::now();
    let mut times = vec![Vec::new(); fs.len()];
    while times[0].len() < min_reps || (start.elapsed() < budget && times[0].len() < 200) {
        for (f, t) in fs.iter_mut().zip(&mut times) {
            let t0 = Instant::now();
            f();
            t.push(t0.elapsed().as_secs_f64() * 1e3);
        }
    }
    times
        .iter_mut()
        .map(|t| {
            t.sort_by(f64::total_cmp);
            t[t.len() / 2]
        })
        .collect()
}

fn round4(x: f64) -> f64 {
    (x * 1e4).round() / 1e4
}

fn num(k: &str, v: f64) -> (String, ParamValue) {
    (k.to_string(), ParamValue::Num(v))
}

fn text(k: &str, v: &str) -> (String, ParamValue) {
    (k.to_string(), ParamValue::Text(v.to_string()))
}

fn pool(threads: usize) -> Result<rayon::ThreadPool, String> {
    rayon::ThreadPoolBuilder::new()
        .num_threads(threads)
        .build()
        .map_err(|e| format!("cannot start a thread pool: {e}"))
}

fn memory_read_row(bytes: usize) -> BenchRow {
    let mut rng = SplitMix64(7);
    let buf: Vec<f32> = (0..bytes / 4).map(|_| rng.next_f64() as f32).collect();
    let ms = median_ms(5, Duration::from_secs(2), || {
        black_box(crate::cost::streaming_sum(black_box(&buf)));
    });
    BenchRow {
        bench: "memory_read".into(),
        median_ms: round4(ms),
        params: vec![
            num("bytes", bytes as f64),
            text("dtype", "f32"),
            num("threads", 1.0),
            num("gb_per_s", round4(bytes as f64 / (ms * 1e-3) / 1e9)),
        ],
    }
}

/// Greenhouse potting bench on a 1280×720 frame: a pot's target spot, a seed-tray region,
/// a painted bench area and a label's target spot.
fn bench_points(count: usize) -> Result<Vec<CostPoint>, String> {
    let p = |x, y| PixelPoint::new(x, y).map_err(|e| e.to_string());
    let tray = Polygon::new(vec![
        p(700.0, 380.0)?,
        p(980.0, 370.0)?,
        p(1000.0, 560.0)?,
        p(720.0, 575.0)?,
    ])
    .map_err(|e| e.to_string())?;
    let (w, h) = (1280usize, 720usize);
    let mut painted = vec![false; w * h];
    for j in 100..220 {
        for i in 150..400 {
            painted[j * w + i] = (i - 150) * (i - 150) / 250 + (j - 100) * (j - 100) / 120 < 140;
        }
    }
    let mask = Mask::new(w, h, painted).map_err(|e| e.to_string())?;
    let all = [
        CostPoint {
            target: TargetShape::Point(p(412.5, 300.25)?),
            weight: 1.0,
            tolerance_px: 5.0,
        },
        CostPoint {
            target: TargetShape::Region(tray),
            weight: 1.0,
            tolerance_px: 5.0,
        },
        CostPoint {
            target: TargetShape::Mask(Arc::new(mask)),
            weight: 1.0,
            tolerance_px: 5.0,
        },
        CostPoint {
            target: TargetShape::Point(p(1100.0, 620.0)?),
            weight: 0.5,
            tolerance_px: 5.0,
        },
    ];
    Ok(all.into_iter().take(count).collect())
}

fn cost_bench() -> Result<Vec<BenchRow>, String> {
    let all_threads = rayon::current_num_threads().max(1);
    let mut thread_counts = vec![1];
    if all_threads > 1 {
        thread_counts.push(all_threads);
    }
    let mut rows = vec![memory_read_row(512 << 20), memory_read_row(64 << 20)];
    let memory_gbps = match rows[0].param("gb_per_s") {
        Some(ParamValue::Num(v)) => *v,
        _ => f64::NAN,
    };

    let settings = CostSettings::new(Metric::Euclidean, Steps::All, Mode::Expected)
        .map_err(|e| e.to_string())?;
    let model = CostModel::new(1280, 720, bench_points(2)?, settings).map_err(|e| e.to_string())?;
    let (n, t, p) = (200usize, 10usize, 2usize);
    for side in [64usize, 128] {
        let prepared = model.prepare_maps(side, side).map_err(|e| e.to_string())?;
        let len = n * t * p * side * side;
        let mut rng = SplitMix64(side as u64);
        let scale = 2.0 / (side * side) as f64;
        let maps32: Vec<f32> = (0..len).map(|_| (rng.next_f64() * scale) as f32).collect();
        let mut maps16 = vec![f16::ZERO; len];
        maps16.convert_from_f32_slice(&maps32);
        let batches = [
            ("f32", MapBatch::F32(&maps32), len * 4),
            ("f16", MapBatch::F16(&maps16), len * 2),
        ];
        for &threads in &thread_counts {
            // Both dtypes in turns, so that `vs_f32` compares them under the same load.
            let pool = pool(threads)?;
            let failed = Mutex::new(None);
            let ms = pool.install(|| {
                let mut runs: Vec<_> = batches
                    .iter()
                    .map(|&(_, batch, _)| {
                        let (prepared, failed) = (&prepared, &failed);
                        move || {
                            if let Err(e) = prepared.evaluate(batch, n, t) {
                                *failed.lock().unwrap_or_else(|p| p.into_inner()) =
                                    Some(e.to_string());
                            }
                        }
                    })
                    .collect();
                let mut fs: Vec<&mut dyn FnMut()> =
                    runs.iter_mut().map(|f| f as &mut dyn FnMut()).collect();
                interleaved_median_ms(5, Duration::from_secs(4), &mut fs)
            });
            if let Some(e) = failed.into_inner().unwrap_or_else(|p| p.into_inner()) {
                return Err(e);
            }
            for (&(dtype, _, bytes), &ms_d) in batches.iter().zip(&ms) {
                let gbps = bytes as f64 / (ms_d * 1e-3) / 1e9;
                rows.push(BenchRow {
                    bench: "cost".into(),
                    median_ms: round4(ms_d),
                    params: vec![
                        text("kind", "maps"),
                        num("n", n as f64),
                        num("t", t as f64),
                        num("p", p as f64),
                        num("h", side as f64),
                        num("w", side as f64),
                        text("dtype", dtype),
                        text("steps", "all"),
                        text("mode", "expected"),
                        num("threads", threads as f64),
                        num("bytes", bytes as f64),
                        num("gb_per_s", round4(gbps)),
                        num("memory_ratio", round4(gbps / memory_gbps)),
                        num("vs_f32", round4(ms_d / ms[0])),
                    ],
                });
            }
        }
    }

    // Points: N=10000, T=10 over a point, a region, a mask and a point, partly off the frame.
    let model = CostModel::new(1280, 720, bench_points(4)?, settings).map_err(|e| e.to_string())?;
    let (n, t, p) = (10_000usize, 10usize, 4usize);
    let mut rng = SplitMix64(99);
    let pts: Vec<f64> = (0..n * t * p)
        .flat_map(|_| {
            [
                rng.next_f64() * 1400.0 - 60.0,
                rng.next_f64() * 800.0 - 40.0,
            ]
        })
        .collect();
    for &threads in &thread_counts {
        let pool = pool(threads)?;
        let mut failed = None;
        let ms = pool.install(|| {
            median_ms(5, Duration::from_secs(2), || {
                if let Err(e) = model.evaluate_points(&pts, n, t) {
                    failed = Some(e.to_string());
                }
            })
        });
        if let Some(e) = failed {
            return Err(e);
        }
        rows.push(BenchRow {
            bench: "cost".into(),
            median_ms: round4(ms),
            params: vec![
                text("kind", "points"),
                num("n", n as f64),
                num("t", t as f64),
                num("p", p as f64),
                text("targets", "point,region,mask,point"),
                text("dtype", "f64"),
                text("steps", "all"),
                text("mode", "expected"),
                num("threads", threads as f64),
                num("points_per_s", round4((n * t * p) as f64 / (ms * 1e-3))),
            ],
        });
    }
    Ok(rows)
}

/// The shared 1280×720 benchmark mask (see the module docs for the recipe).
pub fn edt_bench_mask() -> Result<Mask, String> {
    let (w, h) = (1280usize, 720usize);
    let mut rng = SplitMix64(20261201);
    let painted: Vec<bool> = (0..w * h).map(|_| rng.next_f64() < 0.01).collect();
    Mask::new(w, h, painted).map_err(|e| e.to_string())
}

fn edt_bench() -> Result<Vec<BenchRow>, String> {
    let mask = edt_bench_mask()?;
    let painted = mask.data().iter().filter(|&&b| b).count();
    let pool = pool(1)?;
    let ms = pool.install(|| {
        median_ms(11, Duration::from_secs(2), || {
            black_box(distance::edt(black_box(&mask)));
        })
    });
    Ok(vec![BenchRow {
        bench: "edt".into(),
        median_ms: round4(ms),
        params: vec![
            num("width", mask.width() as f64),
            num("height", mask.height() as f64),
            num("density", 0.01),
            num("seed", 20261201.0),
            num("painted", painted as f64),
            num("threads", 1.0),
        ],
    }])
}

/// Frame `k` of the tracking benchmark: a smooth texture shifted by (0.37 k, 0.21 k) px,
/// rounded to 8 bits. The formula is repeated in `tests/reference/bench_track_compare.py`.
pub fn track_bench_frame(k: usize) -> Vec<u8> {
    let (w, h) = (640usize, 480usize);
    let (dx, dy) = (0.37 * k as f64, 0.21 * k as f64);
    let mut out = Vec::with_capacity(w * h);
    for j in 0..h {
        for i in 0..w {
            let (x, y) = (i as f64 - dx, j as f64 - dy);
            let v = 128.0
                + 40.0 * (0.11 * x + 0.07 * y).sin()
                + 30.0 * (0.05 * x - 0.13 * y + 1.3).sin()
                + 25.0 * (0.17 * x).cos() * (0.19 * y).sin();
            out.push(v.round().clamp(0.0, 255.0) as u8);
        }
    }
    out
}

/// `n` points on a grid over the middle of the 640×480 frame.
pub fn track_bench_points(n: usize) -> Vec<[f64; 2]> {
    let side = (n as f64).sqrt().ceil() as usize;
    (0..n)
        .map(|k| {
            let (i, j) = ((k % side) as f64, (k / side) as f64);
            let step = 400.0 / side as f64;
            [120.0 + (i + 0.5) * step, 90.0 + (j + 0.5) * step * 0.75]
        })
        .collect()
}

fn track_bench() -> Result<Vec<BenchRow>, String> {
    use crate::track::{Pyramid, TrackParams, TrackSample, track_step};
    let (w, h, frames, levels) = (640usize, 480usize, 30usize, 4usize);
    let pixels: Vec<Vec<u8>> = (0..frames).map(track_bench_frame).collect();
    let build = |p: &[u8]| Pyramid::from_u8(w, h, p, levels).map_err(|e| e.to_string());
    let pool = pool(1)?;
    let common = |stage: &str| {
        vec![
            (String::from("stage"), ParamValue::Text(stage.into())),
            num("width", w as f64),
            num("height", h as f64),
            num("frames", frames as f64),
            num("levels", levels as f64),
        ]
    };
    let mut rows = Vec::new();
    // Fresh: every pyramid in new memory, dropped after (the system hands out new pages each
    // time). Reused: each frame's pyramid built into the previous one's memory.
    let mut reused = build(&pixels[0])?;
    let pyr_ms = pool.install(|| {
        let mut fresh = || {
            for p in &pixels {
                black_box(build(black_box(p)).ok());
            }
        };
        let mut again = || {
            for p in &pixels {
                black_box(reused.rebuild_from_u8(w, h, black_box(p), levels).ok());
            }
        };
        interleaved_median_ms(5, Duration::from_secs(3), &mut [&mut fresh, &mut again])
    });
    for (memory, ms) in ["fresh", "reused"].into_iter().zip(pyr_ms) {
        let mut params = common("pyramid");
        params.push(text("memory", memory));
        params.push(num("threads", 1.0));
        rows.push(BenchRow {
            bench: "track".into(),
            median_ms: round4(ms / frames as f64),
            params,
        });
    }
    let pyramids = pixels
        .iter()
        .map(|p| build(p))
        .collect::<Result<Vec<_>, _>>()?;
    let track_params = TrackParams::default();
    for n in [16usize, 100] {
        let seeds: Vec<TrackSample> = track_bench_points(n)
            .into_iter()
            .map(|[x, y]| TrackSample {
                x,
                y,
                confidence: 1.0,
                lost: false,
            })
            .collect();
        let ms = pool.install(|| {
            median_ms(5, Duration::from_secs(3), || {
                let mut at = seeds.clone();
                for pair in pyramids.windows(2) {
                    if let Ok(next) = track_step(&pair[0], &pair[1], &at, &track_params) {
                        at = next;
                    }
                }
                black_box(&at);
            })
        }) / (frames - 1) as f64;
        let mut params = common("track");
        params.push(num("points", n as f64));
        params.push(num("threads", 1.0));
        rows.push(BenchRow {
            bench: "track".into(),
            median_ms: round4(ms),
            params,
        });
    }
    Ok(rows)
}

/// A frame with its cells, features, and demos as (column, row) cells.
pub type IrlBenchProblem = (
    crate::irl::GridSpec,
    Vec<crate::irl::Feature>,
    Vec<Vec<(usize, usize)>>,
);

/// The reward-fit benchmark's problem: a 640×480 frame in 8 px cells (80×60), six features
/// (distance to a goal at cell (60, 15)'s centre, a region, two bumps, distance to a second
/// point, the no-go cells of one zone), and 10 demos of 101 cells each. Demo i starts at cell
/// (2 + 5i, 58 − 2i), heads for the waypoint (40, 10 + 3i) and then for the goal (60, 15), each
/// move changing column and row by the sign of what is left, and stays at the goal.
pub fn irl_bench_problem() -> IrlBenchProblem {
    use crate::irl::{Feature, GridSpec};
    let rect = |x0: f64, y0: f64, x1: f64, y1: f64| {
        Polygon::new(
            [[x0, y0], [x1, y0], [x1, y1], [x0, y1]]
                .iter()
                .map(|p| PixelPoint::new(p[0], p[1]).expect("finite"))
                .collect(),
        )
        .expect("a rectangle")
    };
    let spec = GridSpec {
        width: 640,
        height: 480,
        cell_px: 8,
        no_go: vec![rect(520.0, 320.0, 600.0, 420.0)],
        remove_no_go: false,
    };
    let features = vec![
        Feature::DistanceTo {
            point: [483.5, 123.5],
        },
        Feature::Inside {
            polygon: rect(200.0, 160.0, 320.0, 300.0),
        },
        Feature::Rbf {
            centre: [120.0, 360.0],
            sigma_px: 40.0,
        },
        Feature::Rbf {
            centre: [400.0, 300.0],
            sigma_px: 60.0,
        },
        Feature::DistanceTo {
            point: [100.0, 80.0],
        },
        Feature::NoGo,
    ];
    let demos = (0..10i64)
        .map(|i| {
            let mut at = (2 + 5 * i, 58 - 2 * i);
            let (waypoint, goal) = ((40, 10 + 3 * i), (60i64, 15i64));
            let mut reached = false;
            let mut path = vec![(at.0 as usize, at.1 as usize)];
            while path.len() < 101 {
                reached |= at == waypoint;
                let to = if reached { goal } else { waypoint };
                at = (at.0 + (to.0 - at.0).signum(), at.1 + (to.1 - at.1).signum());
                path.push((at.0 as usize, at.1 as usize));
            }
            path
        })
        .collect();
    (spec, features, demos)
}

fn irl_bench() -> Result<Vec<BenchRow>, String> {
    use crate::irl::{Control, Features, FitSettings, Grid, MaxEnt, fit};
    let (spec, feats, cells) = irl_bench_problem();
    let grid = Grid::new(&spec).map_err(|e| e.to_string())?;
    let features = Features::new(&grid, &feats).map_err(|e| e.to_string())?;
    let demos = cells
        .iter()
        .map(|d| {
            d.iter()
                .map(|&(c, r)| grid.state(c, r).ok_or("a demo leaves the grid"))
                .collect::<Result<Vec<_>, _>>()
        })
        .collect::<Result<Vec<_>, _>>()?;
    let mut problem = MaxEnt::new(&grid, &features, demos).map_err(|e| e.to_string())?;
    let settings = FitSettings::default();
    let w: Vec<f64> = (0..features.len()).map(|j| 0.5 - 0.3 * j as f64).collect();
    let horizon = problem.max_horizon();
    let common = |stage: &str| {
        vec![
            text("stage", stage),
            num("cols", grid.cols() as f64),
            num("rows", grid.rows() as f64),
            num("demos", cells.len() as f64),
            num("horizon", horizon as f64),
            num("features", features.len() as f64),
        ]
    };
    let mut rows = Vec::new();
    let eval_params = common("evaluate");
    let ms = pool(1)?.install(|| {
        median_ms(10, Duration::from_secs(3), || {
            black_box(problem.evaluate(black_box(&w), settings.l2));
        })
    });
    let mut params = eval_params;
    params.push(num("threads", 1.0));
    rows.push(BenchRow {
        bench: "irl".into(),
        median_ms: round4(ms),
        params,
    });
    let mut fit_params = common("fit");
    let mut iterations = 0;
    let ms = pool(1)?.install(|| {
        median_ms(3, Duration::from_secs(5), || {
            let f = fit(&mut problem, &settings, &mut |_| Control::Continue);
            iterations = f.iterations;
            black_box(f);
        })
    });
    fit_params.push(num("iterations", iterations as f64));
    fit_params.push(num("threads", 1.0));
    rows.push(BenchRow {
        bench: "irl".into(),
        median_ms: round4(ms),
        params: fit_params,
    });
    Ok(rows)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The tracking benchmark's points lie inside the frame, away from its edges by more than
    /// half a window, and its frames are the texture moved by the stated shift: frame 10 at
    /// (x, y) is frame 0 at (x − 3.7, y − 2.1), checked where both land on whole pixels.
    #[test]
    fn track_bench_data() {
        for n in [16, 100] {
            let p = track_bench_points(n);
            assert_eq!(p.len(), n);
            assert!(
                p.iter()
                    .all(|q| (11.0..629.0).contains(&q[0]) && (11.0..469.0).contains(&q[1]))
            );
        }
        let (f0, f100) = (track_bench_frame(0), track_bench_frame(100));
        // 100 frames shift by exactly (37, 21) px.
        for (x, y) in [(100usize, 80usize), (300, 200), (500, 400)] {
            assert_eq!(f100[y * 640 + x], f0[(y - 21) * 640 + (x - 37)]);
        }
    }

    /// The reward-fit benchmark's demos are chains of moves of 100 moves that end at the goal.
    #[test]
    fn irl_bench_demos() {
        let (_, _, demos) = irl_bench_problem();
        assert_eq!(demos.len(), 10);
        for d in &demos {
            assert_eq!(d.len(), 101);
            assert_eq!(*d.last().unwrap(), (60, 15));
            assert!(
                d.windows(2)
                    .all(|p| { p[0].0.abs_diff(p[1].0) <= 1 && p[0].1.abs_diff(p[1].1) <= 1 })
            );
        }
    }

    #[test]
    fn rows_print_as_json_lines() {
        let row = BenchRow {
            bench: "cost".into(),
            median_ms: 1.25,
            params: vec![
                num("n", 200.0),
                text("dtype", "f\"16"),
                num("gb_per_s", 12.5),
                num("threads", 1.0),
            ],
        };
        let line = row.to_json();
        assert_eq!(
            line,
            r#"{"bench": "cost", "median_ms": 1.25, "params": {"n": 200, "dtype": "f\"16", "gb_per_s": 12.5, "threads": 1}}"#
        );
        let v: serde_json::Value = serde_json::from_str(&line).unwrap();
        assert_eq!(v["params"]["n"], 200);
        assert!(run("nope").is_err());
    }

    #[test]
    fn splitmix_matches_the_reference_stream() {
        // First outputs of SplitMix64 seeded with 0 (reference values, from memory; the painted
        // count below cross-checks the stream against bench_edt_compare.py).
        let mut r = SplitMix64(0);
        assert_eq!(r.next_u64(), 0xE220_A839_7B1D_CDAF);
        assert_eq!(r.next_u64(), 0x6E78_9E6A_A1B9_65F4);
    }

    #[test]
    fn shared_mask_has_about_one_percent_painted() {
        let m = edt_bench_mask().unwrap();
        let painted = m.data().iter().filter(|&&b| b).count();
        // 9309 is what bench_edt_compare.py's numpy version of the recipe paints.
        assert_eq!(painted, 9309);
    }
}
