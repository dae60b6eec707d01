//! The recovery curve of the reward fits: how well maximum-entropy inverse RL (Ziebart, Maas,
//! Bagnell & Dey, AAAI 2008; each demo scored for its own horizon, Snoswell, Singh & Ye 2020)
//! finds a known reward from 2 to 100 demos sampled from that reward's soft-optimal policy.
//!
//! The scene is the recovery test's (`tests/irl.rs`): a 120 × 90 frame in 10 px cells (12 × 9),
//! the distance to a goal at (95, 25) (cell (9, 2)) and a penalised rectangle, true weights
//! (−3, −1.5) on the standardised features. For each number of demos N and each of
//! [`SEEDS_PER_COUNT`] seeds, [`goalsmith_core::irl::sample::sample_paths`] draws N demos of
//! 6–15 moves and [`irl::fit_reward`] fits them with the default settings. Each run records the
//! cosine between the fitted and the true weights, how many cells the fitted reward's argmax
//! lies from the goal (Chebyshev distance), the log-likelihood per move on the demos, its
//! leave-one-out value (none below 3 demos, where `leave_one_out` makes no folds), the uniform
//! random walk's and the true weights' own on the same demos.
//!
//! Writes `docs/figures/irl_recovery.json` (settings, seeds, every run, per-N median, min and
//! max) and `docs/figures/irl_recovery.svg` (the plot in the README). The output depends on
//! nothing but the code: `tests/irl.rs` recomputes one run of the committed JSON.
//!
//! Run: `cargo run --release -p goalsmith-core --example irl_recovery`.

use goalsmith_core::geometry::{PixelPoint, Polygon};
use goalsmith_core::irl::{
    self, Control, Feature, Features, FitSettings, Grid, GridSpec, MaxEnt, RewardFitInput, sample,
};
use goalsmith_core::rng::SplitMix64;
use serde_json::{Value, json};
use std::fmt::Write as _;
use std::time::Instant;

/// The numbers of demos on the curve.
const DEMO_COUNTS: [usize; 6] = [2, 5, 10, 20, 50, 100];
/// Seeds per number of demos; run i (1-based) of N demos uses seed 1000·N + i.
const SEEDS_PER_COUNT: u64 = 20;
/// The true weights of the standardised features (distance to the goal, inside the rectangle).
const W_TRUE: [f64; 2] = [-3.0, -1.5];
/// Moves per demo, uniform in this range.
const MOVES: std::ops::RangeInclusive<usize> = 6..=15;
const GOAL: [f64; 2] = [95.0, 25.0];
/// The penalised rectangle, x0, y0, x1, y1.
const PENALISED: [f64; 4] = [38.0, 28.0, 72.0, 80.0];

fn seed(n: usize, i: u64) -> u64 {
    1000 * n as u64 + i
}

fn rectangle() -> Vec<[f64; 2]> {
    let [x0, y0, x1, y1] = PENALISED;
    vec![[x0, y0], [x1, y0], [x1, y1], [x0, y1]]
}

fn scene() -> (GridSpec, Vec<Feature>) {
    let polygon = Polygon::new(
        rectangle()
            .iter()
            .map(|p| PixelPoint::new(p[0], p[1]).unwrap())
            .collect(),
    )
    .unwrap();
    (
        GridSpec {
            width: 120,
            height: 90,
            cell_px: 10,
            no_go: Vec::new(),
            remove_no_go: false,
        },
        vec![
            Feature::DistanceTo { point: GOAL },
            Feature::Inside { polygon },
        ],
    )
}

fn cosine(a: &[f64], b: &[f64]) -> f64 {
    let dot = |a: &[f64], b: &[f64]| a.iter().zip(b).map(|(x, y)| x * y).sum::<f64>();
    dot(a, b) / (dot(a, a).sqrt() * dot(b, b).sqrt())
}

/// One fit of N demos drawn with one seed.
struct Run {
    demos: usize,
    seed: u64,
    weights: Vec<f64>,
    cosine: f64,
    argmax_cell: (usize, usize),
    argmax_cells_from_goal: usize,
    iterations: usize,
    converged: bool,
    moves: usize,
    log_likelihood_per_step: f64,
    uniform_log_likelihood_per_step: f64,
    true_log_likelihood_per_step: f64,
    held_out: Option<irl::HeldOut>,
}

fn run(spec: &GridSpec, feats: &[Feature], n: usize, seed: u64) -> Run {
    let grid = Grid::new(spec).unwrap();
    let features = Features::new(&grid, feats).unwrap();
    let demos =
        sample::sample_paths(&grid, &features, &W_TRUE, n, MOVES, &mut SplitMix64(seed)).unwrap();
    let states: Vec<Vec<usize>> = demos
        .iter()
        .map(|d| irl::path_states(&grid, d, false, "demo").unwrap())
        .collect();
    let truth = MaxEnt::new(&grid, &features, states)
        .unwrap()
        .evaluate(&W_TRUE, 0.0)
        .log_likelihood_per_step;
    let input = RewardFitInput {
        grid: spec.clone(),
        features: feats.to_vec(),
        demos,
        collapse_repeats: false,
    };
    let fit = irl::fit_reward(&input, &FitSettings::default(), &mut |_| Control::Continue).unwrap();
    let goal = grid.cell_of_point(GOAL[0], GOAL[1]).unwrap();
    let (c, r) = fit.reward_map.argmax_cell;
    Run {
        demos: n,
        seed,
        cosine: cosine(&fit.fit.weights, &W_TRUE),
        argmax_cell: (c, r),
        argmax_cells_from_goal: c.abs_diff(goal.0).max(r.abs_diff(goal.1)),
        iterations: fit.fit.iterations,
        converged: fit.fit.converged,
        moves: fit.moves,
        log_likelihood_per_step: fit.fit.log_likelihood_per_step,
        uniform_log_likelihood_per_step: fit.uniform_log_likelihood_per_step,
        true_log_likelihood_per_step: truth,
        held_out: fit.held_out,
        weights: fit.fit.weights,
    }
}

impl Run {
    fn to_json(&self) -> Value {
        json!({
            "demos": self.demos,
            "seed": self.seed,
            "weights": self.weights,
            "cosine": self.cosine,
            "argmax_cell": [self.argmax_cell.0, self.argmax_cell.1],
            "argmax_cells_from_goal": self.argmax_cells_from_goal,
            "iterations": self.iterations,
            "converged": self.converged,
            "moves": self.moves,
            "log_likelihood_per_step": self.log_likelihood_per_step,
            "uniform_log_likelihood_per_step": self.uniform_log_likelihood_per_step,
            "true_log_likelihood_per_step": self.true_log_likelihood_per_step,
            "held_out_log_likelihood_per_step": self.held_out.as_ref().map(|h| h.log_likelihood_per_step),
            "held_out_uniform_log_likelihood_per_step":
                self.held_out.as_ref().map(|h| h.uniform_log_likelihood_per_step),
            "held_out_folds": self.held_out.as_ref().map_or(0, |h| h.folds),
        })
    }
}

/// Median (the mean of the middle two for an even count), minimum and maximum.
#[derive(Debug, Clone, Copy)]
struct Spread {
    median: f64,
    min: f64,
    max: f64,
}

fn spread(values: &[f64]) -> Option<Spread> {
    if values.is_empty() {
        return None;
    }
    let mut v = values.to_vec();
    v.sort_by(f64::total_cmp);
    let m = v.len() / 2;
    let median = if v.len() % 2 == 1 {
        v[m]
    } else {
        (v[m - 1] + v[m]) / 2.0
    };
    Some(Spread {
        median,
        min: v[0],
        max: v[v.len() - 1],
    })
}

fn spread_json(s: Option<Spread>) -> Value {
    s.map_or(
        Value::Null,
        |s| json!({"median": s.median, "min": s.min, "max": s.max}),
    )
}

/// The spreads of one number of demos.
struct Summary {
    demos: usize,
    cosine: Spread,
    argmax_cells_from_goal: Spread,
    log_likelihood: Spread,
    held_out: Option<Spread>,
    uniform: Spread,
    truth: Spread,
    converged: usize,
}

fn summarise(n: usize, runs: &[&Run]) -> Summary {
    let of = |f: &dyn Fn(&Run) -> f64| spread(&runs.iter().map(|r| f(r)).collect::<Vec<_>>());
    let held: Vec<f64> = runs
        .iter()
        .filter_map(|r| r.held_out.as_ref().map(|h| h.log_likelihood_per_step))
        .collect();
    Summary {
        demos: n,
        cosine: of(&|r| r.cosine).unwrap(),
        argmax_cells_from_goal: of(&|r| r.argmax_cells_from_goal as f64).unwrap(),
        log_likelihood: of(&|r| r.log_likelihood_per_step).unwrap(),
        held_out: spread(&held),
        uniform: of(&|r| r.uniform_log_likelihood_per_step).unwrap(),
        truth: of(&|r| r.true_log_likelihood_per_step).unwrap(),
        converged: runs.iter().filter(|r| r.converged).count(),
    }
}

impl Summary {
    fn to_json(&self, runs: usize) -> Value {
        json!({
            "demos": self.demos,
            "runs": runs,
            "converged": self.converged,
            "cosine": spread_json(Some(self.cosine)),
            "argmax_cells_from_goal": spread_json(Some(self.argmax_cells_from_goal)),
            "log_likelihood_per_step": spread_json(Some(self.log_likelihood)),
            "held_out_log_likelihood_per_step": spread_json(self.held_out),
            "uniform_log_likelihood_per_step": spread_json(Some(self.uniform)),
            "true_log_likelihood_per_step": spread_json(Some(self.truth)),
        })
    }
}

/// The settings, in reading order.
fn settings() -> Vec<(&'static str, Value)> {
    let fit = FitSettings::default();
    let seeds: Vec<Value> = DEMO_COUNTS
        .iter()
        .map(|&n| {
            let s: Vec<u64> = (1..=SEEDS_PER_COUNT).map(|i| seed(n, i)).collect();
            json!({"demos": n, "seeds": s})
        })
        .collect();
    vec![
        ("frame", json!([120, 90])),
        ("cell_px", json!(10)),
        (
            "features",
            json!([
                {"kind": "distance_to", "point": GOAL},
                {"kind": "inside", "polygon": rectangle()},
            ]),
        ),
        ("true_weights", json!(W_TRUE)),
        ("moves_per_demo", json!([MOVES.start(), MOVES.end()])),
        ("collapse_repeats", json!(false)),
        ("l2", json!(fit.l2)),
        (
            "lbfgs",
            json!({
                "memory": fit.lbfgs.memory,
                "max_iterations": fit.lbfgs.max_iterations,
                "grad_tol": fit.lbfgs.grad_tol,
            }),
        ),
        ("demo_counts", json!(DEMO_COUNTS)),
        (
            "seed_rule",
            json!("run i = 1, 2, ... of N demos uses SplitMix64 seed 1000 N + i"),
        ),
        ("seeds", json!(seeds)),
    ]
}

/// The document: one line per setting, per summary and per run.
fn json_document(summaries: &[Value], runs: &[Run]) -> String {
    let about = json!(
        "Recovery of a known reward by maximum-entropy inverse RL (Ziebart et al. 2008, \
         per-demo horizons as in Snoswell et al. 2020) against the number of demos. \
         Log-likelihoods are natural logs per move. Written by \
         `cargo run --release -p goalsmith-core --example irl_recovery`."
    );
    let settings: Vec<String> = settings()
        .iter()
        .map(|(k, v)| format!("{}: {v}", json!(k)))
        .collect();
    let doc = format!(
        "{{\n  \"about\": {about},\n  \"settings\": {{\n    {}\n  }},\n  \"summary\": [\n    {}\n  ],\n  \
         \"runs\": [\n    {}\n  ]\n}}\n",
        settings.join(",\n    "),
        summaries
            .iter()
            .map(Value::to_string)
            .collect::<Vec<_>>()
            .join(",\n    "),
        runs.iter()
            .map(|r| r.to_json().to_string())
            .collect::<Vec<_>>()
            .join(",\n    "),
    );
    let _: Value = serde_json::from_str(&doc).expect("the document is JSON");
    doc
}

// ---- The plot -------------------------------------------------------------------------------

const BLUE: &str = "#2f6b9a";
const BAND: &str = "#b9d3e6";
const GREY: &str = "#6b6b6b";
const ORANGE: &str = "#b8621b";
const AXIS: &str = "#333333";
const GRID: &str = "#e4e4e4";

/// Ticks at a step of 1, 2 or 5 × 10ᵏ giving 4 to 8 ticks over [lo, hi], and the range widened
/// to whole steps.
fn nice_ticks(lo: f64, hi: f64) -> (f64, f64, Vec<f64>) {
    let span = (hi - lo).max(1e-9);
    let mut step = 10f64.powf((span / 5.0).log10().floor());
    for m in [1.0, 2.0, 5.0, 10.0] {
        if span / (step * m) <= 7.0 {
            step *= m;
            break;
        }
    }
    let a = (lo / step + 1e-9).floor() * step;
    let b = (hi / step - 1e-9).ceil() * step;
    let count = ((b - a) / step).round() as usize;
    (a, b, (0..=count).map(|i| a + i as f64 * step).collect())
}

fn label(v: f64, step: f64) -> String {
    let decimals = (-step.log10().floor()).max(0.0) as usize;
    let s = format!("{v:.decimals$}");
    let s = if s.trim_start_matches(['-', '0', '.']).is_empty() {
        format!("{:.decimals$}", 0.0)
    } else {
        s
    };
    s.replace('-', "\u{2212}")
}

/// One panel: plot area x ∈ [x0, x1], y ∈ [y0, y1] (SVG units, y down), log₁₀ x over the demo
/// counts, linear y over [lo, hi].
struct Panel {
    x0: f64,
    x1: f64,
    y0: f64,
    y1: f64,
    lo: f64,
    hi: f64,
}

impl Panel {
    fn x(&self, n: usize) -> f64 {
        let (a, b) = (
            (DEMO_COUNTS[0] as f64).log10(),
            (DEMO_COUNTS[DEMO_COUNTS.len() - 1] as f64).log10(),
        );
        let pad = 10.0;
        self.x0 + pad + ((n as f64).log10() - a) / (b - a) * (self.x1 - self.x0 - 2.0 * pad)
    }
    fn y(&self, v: f64) -> f64 {
        self.y1 - (v - self.lo) / (self.hi - self.lo) * (self.y1 - self.y0)
    }

    /// Frame, grid lines, ticks and labels.
    fn axes(&self, svg: &mut String, ticks: &[f64], title: &str, y_label: &str) {
        let step = ticks[1] - ticks[0];
        for &t in ticks {
            let y = self.y(t);
            let _ = writeln!(
                svg,
                r#"<line x1="{:.1}" y1="{y:.1}" x2="{:.1}" y2="{y:.1}" stroke="{GRID}"/>"#,
                self.x0, self.x1
            );
            let _ = writeln!(
                svg,
                r#"<text x="{:.1}" y="{:.1}" text-anchor="end">{}</text>"#,
                self.x0 - 6.0,
                y + 4.0,
                label(t, step)
            );
        }
        for &n in &DEMO_COUNTS {
            let x = self.x(n);
            let _ = writeln!(
                svg,
                r#"<line x1="{x:.1}" y1="{:.1}" x2="{x:.1}" y2="{:.1}" stroke="{AXIS}"/>"#,
                self.y1,
                self.y1 + 5.0
            );
            let _ = writeln!(
                svg,
                r#"<text x="{x:.1}" y="{:.1}" text-anchor="middle">{n}</text>"#,
                self.y1 + 18.0
            );
        }
        let _ = writeln!(
            svg,
            r#"<rect x="{:.1}" y="{:.1}" width="{:.1}" height="{:.1}" fill="none" stroke="{AXIS}"/>"#,
            self.x0,
            self.y0,
            self.x1 - self.x0,
            self.y1 - self.y0
        );
        let _ = writeln!(
            svg,
            r#"<text x="{:.1}" y="{:.1}" text-anchor="middle">demos (log scale)</text>"#,
            (self.x0 + self.x1) / 2.0,
            self.y1 + 36.0
        );
        let _ = writeln!(
            svg,
            r#"<text x="{:.1}" y="{:.1}" font-weight="bold">{title}</text>"#,
            self.x0,
            self.y0 - 10.0
        );
        let (cx, cy) = (self.x0 - 46.0, (self.y0 + self.y1) / 2.0);
        let _ = writeln!(
            svg,
            r#"<text x="{cx:.1}" y="{cy:.1}" text-anchor="middle" transform="rotate(-90 {cx:.1} {cy:.1})">{y_label}</text>"#
        );
    }

    /// The min–max band and the median line with its points.
    fn curve(&self, svg: &mut String, points: &[(usize, Spread)]) {
        let mut band: Vec<String> = points
            .iter()
            .map(|(n, s)| format!("{:.1},{:.1}", self.x(*n), self.y(s.max)))
            .collect();
        band.extend(
            points
                .iter()
                .rev()
                .map(|(n, s)| format!("{:.1},{:.1}", self.x(*n), self.y(s.min))),
        );
        let _ = writeln!(
            svg,
            r#"<polygon points="{}" fill="{BAND}" fill-opacity="0.8"/>"#,
            band.join(" ")
        );
        self.line(
            svg,
            &points
                .iter()
                .map(|(n, s)| (*n, s.median))
                .collect::<Vec<_>>(),
            BLUE,
            "",
        );
        for (n, s) in points {
            let _ = writeln!(
                svg,
                r#"<circle cx="{:.1}" cy="{:.1}" r="3" fill="{BLUE}"/>"#,
                self.x(*n),
                self.y(s.median)
            );
        }
    }

    fn line(&self, svg: &mut String, points: &[(usize, f64)], colour: &str, dash: &str) {
        let pts: Vec<String> = points
            .iter()
            .map(|(n, v)| format!("{:.1},{:.1}", self.x(*n), self.y(*v)))
            .collect();
        let dash = if dash.is_empty() {
            String::new()
        } else {
            format!(r#" stroke-dasharray="{dash}""#)
        };
        let _ = writeln!(
            svg,
            r#"<polyline points="{}" fill="none" stroke="{colour}" stroke-width="2"{dash}/>"#,
            pts.join(" ")
        );
    }
}

fn svg_plot(summaries: &[Summary]) -> String {
    let (w, h) = (760.0, 360.0);
    let mut svg = String::new();
    let _ = writeln!(
        svg,
        r#"<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {w} {h}" width="{w}" height="{h}" font-family="Helvetica, Arial, sans-serif" font-size="12" fill="{AXIS}">"#
    );
    let _ = writeln!(
        svg,
        "<title>Recovery of a known reward by maximum-entropy inverse RL against the number of \
         demos</title>"
    );
    let _ = writeln!(
        svg,
        "<desc>Written by cargo run --release -p goalsmith-core --example irl_recovery from the \
         runs in irl_recovery.json.</desc>"
    );
    let _ = writeln!(svg, r#"<rect width="{w}" height="{h}" fill="white"/>"#);

    // Left: the cosine.
    let cos_lo = summaries
        .iter()
        .map(|s| s.cosine.min)
        .fold(0.85f64, f64::min);
    let (lo, hi, ticks) = nice_ticks(cos_lo, 1.0);
    let left = Panel {
        x0: 80.0,
        x1: 350.0,
        y0: 50.0,
        y1: 260.0,
        lo,
        hi,
    };
    left.axes(
        &mut svg,
        &ticks,
        "Direction of the fitted weights",
        "cosine to the true weights",
    );
    let y9 = left.y(0.9);
    let _ = writeln!(
        svg,
        r#"<line x1="{:.1}" y1="{y9:.1}" x2="{:.1}" y2="{y9:.1}" stroke="{GREY}" stroke-dasharray="5 4"/>"#,
        left.x0, left.x1
    );
    let _ = writeln!(
        svg,
        r#"<text x="{:.1}" y="{:.1}" text-anchor="end" fill="{GREY}">0.9</text>"#,
        left.x1 - 4.0,
        y9 + 14.0
    );
    left.curve(
        &mut svg,
        &summaries
            .iter()
            .map(|s| (s.demos, s.cosine))
            .collect::<Vec<_>>(),
    );

    // Right: the held-out log-likelihood per move.
    let held: Vec<(usize, Spread)> = summaries
        .iter()
        .filter_map(|s| s.held_out.map(|h| (s.demos, h)))
        .collect();
    let ll_lo = held
        .iter()
        .map(|(_, s)| s.min)
        .chain(
            summaries
                .iter()
                .filter(|s| s.held_out.is_some())
                .map(|s| s.uniform.median),
        )
        .fold(f64::INFINITY, f64::min);
    let ll_hi = held
        .iter()
        .map(|(_, s)| s.max)
        .chain(
            summaries
                .iter()
                .filter(|s| s.held_out.is_some())
                .map(|s| s.truth.median),
        )
        .fold(f64::NEG_INFINITY, f64::max);
    let (lo, hi, ticks) = nice_ticks(ll_lo, ll_hi);
    let right = Panel {
        x0: 460.0,
        x1: 730.0,
        y0: 50.0,
        y1: 260.0,
        lo,
        hi,
    };
    right.axes(
        &mut svg,
        &ticks,
        "Held-out log-likelihood (leave-one-out)",
        "log-likelihood per move (nats)",
    );
    // The uniform walk and the true weights on the same demos as the held-out scores.
    let with_held: Vec<&Summary> = summaries.iter().filter(|s| s.held_out.is_some()).collect();
    right.line(
        &mut svg,
        &with_held
            .iter()
            .map(|s| (s.demos, s.uniform.median))
            .collect::<Vec<_>>(),
        GREY,
        "5 4",
    );
    right.curve(&mut svg, &held);
    right.line(
        &mut svg,
        &with_held
            .iter()
            .map(|s| (s.demos, s.truth.median))
            .collect::<Vec<_>>(),
        ORANGE,
        "2 3",
    );

    // Legend: a swatch 24 wide at x, its text 30 further.
    let y = 322.0;
    let entries: [(f64, String, String); 4] = [
        (
            80.0,
            format!(
                r#"<line x1="80" y1="{y}" x2="104" y2="{y}" stroke="{BLUE}" stroke-width="2"/><circle cx="92" cy="{y}" r="3" fill="{BLUE}"/>"#
            ),
            format!("median of {SEEDS_PER_COUNT} seeds"),
        ),
        (
            230.0,
            format!(
                r#"<rect x="230" y="{}" width="24" height="12" fill="{BAND}" fill-opacity="0.8"/>"#,
                y - 6.0
            ),
            "min–max".to_string(),
        ),
        (
            325.0,
            format!(
                r#"<line x1="325" y1="{y}" x2="349" y2="{y}" stroke="{GREY}" stroke-width="2" stroke-dasharray="5 4"/>"#
            ),
            "uniform random walk".to_string(),
        ),
        (
            485.0,
            format!(
                r#"<line x1="485" y1="{y}" x2="509" y2="{y}" stroke="{ORANGE}" stroke-width="2" stroke-dasharray="2 3"/>"#
            ),
            "true weights, same demos".to_string(),
        ),
    ];
    for (x, swatch, text) in entries {
        let _ = writeln!(svg, "{swatch}");
        let _ = writeln!(
            svg,
            r#"<text x="{:.1}" y="{:.1}">{text}</text>"#,
            x + 30.0,
            y + 4.0
        );
    }
    let _ = writeln!(
        svg,
        r#"<text x="80" y="348" fill="{GREY}" font-size="11">120 × 90 px frame in 10 px cells, demos of 6–15 moves from the true reward's soft-optimal policy; no leave-one-out below 3 demos.</text>"#
    );
    svg.push_str("</svg>\n");
    svg
}

fn main() {
    let started = Instant::now();
    let (spec, feats) = scene();
    let mut runs = Vec::new();
    for &n in &DEMO_COUNTS {
        for i in 1..=SEEDS_PER_COUNT {
            runs.push(run(&spec, &feats, n, seed(n, i)));
        }
    }
    let summaries: Vec<Summary> = DEMO_COUNTS
        .iter()
        .map(|&n| {
            let of_n: Vec<&Run> = runs.iter().filter(|r| r.demos == n).collect();
            summarise(n, &of_n)
        })
        .collect();
    let summary_json: Vec<Value> = summaries
        .iter()
        .map(|s| s.to_json(SEEDS_PER_COUNT as usize))
        .collect();
    let dir = concat!(env!("CARGO_MANIFEST_DIR"), "/../../docs/figures");
    std::fs::create_dir_all(dir).unwrap();
    std::fs::write(
        format!("{dir}/irl_recovery.json"),
        json_document(&summary_json, &runs),
    )
    .unwrap();
    std::fs::write(format!("{dir}/irl_recovery.svg"), svg_plot(&summaries)).unwrap();
    for s in &summaries {
        let held = s.held_out.map_or("none".to_string(), |h| {
            format!("{:.3} [{:.3}, {:.3}]", h.median, h.min, h.max)
        });
        println!(
            "{:>3} demos: cosine {:.4} [{:.4}, {:.4}], argmax {} [{}, {}] cells from the goal, \
             held-out {held} (uniform {:.3}, true weights {:.3}), training {:.3}, {}/{} converged",
            s.demos,
            s.cosine.median,
            s.cosine.min,
            s.cosine.max,
            s.argmax_cells_from_goal.median,
            s.argmax_cells_from_goal.min,
            s.argmax_cells_from_goal.max,
            s.uniform.median,
            s.truth.median,
            s.log_likelihood.median,
            s.converged,
            SEEDS_PER_COUNT
        );
    }
    eprintln!(
        "{} fits in {:.1} s; wrote docs/figures/irl_recovery.json and .svg",
        runs.len(),
        started.elapsed().as_secs_f64()
    );
}
