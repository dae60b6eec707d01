//! The demo scene: an invented top-down view of a greenhouse potting bench.
//!
//! A wooden bench with grain, a green capillary watering mat, two seed trays (one with
//! seedlings, one just sown), four terracotta pots, a hand trowel and a plant label stake.
//! Everything is procedural and deterministic from the seed (xorshift + value noise), textured
//! enough for optical-flow tracking, and laid out on a 640 × 480 design grid that is stretched
//! to the requested size. [`bench_layout`] tells where everything is, in frame pixels, so demo
//! goals can be written against the same picture.

mod canvas;
pub mod motion;
mod objects;

use serde::Serialize;

use crate::raster::{BadSize, Image, check_size};
use canvas::Box2;

/// Where a seed tray lies.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Tray {
    /// Short name, e.g. "tray_1".
    pub name: String,
    /// Outer corners, clockwise on screen starting top-left.
    pub corners: [[f64; 2]; 4],
    /// Centre of the tray.
    pub center: [f64; 2],
    /// Turn from the frame's x axis, degrees (clockwise on screen).
    pub angle_deg: f64,
    /// Cell rows and columns.
    pub rows: usize,
    /// Cell columns.
    pub cols: usize,
    /// Centres of the cells that hold a seedling.
    pub seedlings: Vec<[f64; 2]>,
}

/// Where a pot stands: the centre and outer rim radius, and the radius of the soil inside.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Pot {
    /// Short name, e.g. "pot_small".
    pub name: String,
    /// Centre of the rim.
    pub center: [f64; 2],
    /// Outer radius of the rim.
    pub radius: f64,
    /// Radius of the soil surface.
    pub soil_radius: f64,
    /// Whether the pot stands on the watering mat.
    pub on_mat: bool,
}

/// The hand trowel: four landmarks on it and its outline.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Trowel {
    /// Point of the blade.
    pub tip: [f64; 2],
    /// Widest point of the blade on its left (seen from the handle towards the tip).
    pub shoulder_left: [f64; 2],
    /// Widest point of the blade on its right.
    pub shoulder_right: [f64; 2],
    /// End of the handle.
    pub handle_end: [f64; 2],
    /// Blade outline.
    pub blade: Vec<[f64; 2]>,
}

/// A circular spot.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Spot {
    /// Centre.
    pub center: [f64; 2],
    /// Radius.
    pub radius: f64,
}

/// The plant label stake lying on the bench.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Stake {
    /// Outline (a strip with a pointed end).
    pub outline: Vec<[f64; 2]>,
    /// What is written on it.
    pub text: String,
}

/// Where everything is in a painted bench, in frame pixel coordinates.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct BenchLayout {
    /// Frame width.
    pub width: usize,
    /// Frame height.
    pub height: usize,
    /// Texture seed.
    pub seed: u64,
    /// Corners of the watering mat (its corners are slightly rounded in the picture).
    pub mat: [[f64; 2]; 4],
    /// The two seed trays.
    pub trays: Vec<Tray>,
    /// The pots, smallest first.
    pub pots: Vec<Pot>,
    /// The trowel.
    pub trowel: Trowel,
    /// The label stake.
    pub stake: Stake,
    /// A free spot on the mat where the small pot fits.
    pub spare_spot: Spot,
}

/// Design grid size; layouts are stretched from it.
const DESIGN: [f64; 2] = [640.0, 480.0];

/// Maps design coordinates to the frame.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Fit {
    sx: f64,
    sy: f64,
    /// Length scale (the smaller of the two axis scales).
    pub s: f64,
}

impl Fit {
    fn new(w: usize, h: usize) -> Self {
        let (sx, sy) = (w as f64 / DESIGN[0], h as f64 / DESIGN[1]);
        Self {
            sx,
            sy,
            s: sx.min(sy),
        }
    }
    /// A design point in frame pixels (design pixel centres map to frame pixel centres).
    pub fn p(&self, x: f64, y: f64) -> [f64; 2] {
        [(x + 0.5) * self.sx - 0.5, (y + 0.5) * self.sy - 0.5]
    }
    pub fn l(&self, v: f64) -> f64 {
        v * self.s
    }
}

/// Full geometry, including what painting needs beyond the public layout.
pub(crate) struct Geometry {
    pub layout: BenchLayout,
    pub fit: Fit,
    pub mat: Box2,
    pub trays: Vec<(Box2, f64)>, // box and cell size
    pub stake: Box2,
    pub trowel_axis: ([f64; 2], [f64; 2]), // tip and unit direction tip → handle
}

pub(crate) fn geometry(w: usize, h: usize, seed: u64) -> Geometry {
    let f = Fit::new(w, h);
    let deg = |d: f64| d.to_radians();
    let mat = Box2 {
        center: f.p(458.0, 178.0),
        half: [f.l(152.0), f.l(140.0)],
        angle: deg(-1.5),
    };
    let tray_specs = [
        ("tray_1", [140.0, 112.0], -3.0, 4usize, 6usize, true),
        ("tray_2", [132.0, 338.0], 4.0, 3, 5, false),
    ];
    let cell = f.l(33.0);
    let rim = f.l(7.0);
    let mut rng = crate::noise::XorShift::new(seed ^ 0x7e11);
    let mut trays = Vec::new();
    let mut tray_boxes = Vec::new();
    for (name, c, a, rows, cols, sown) in tray_specs {
        let b = Box2 {
            center: f.p(c[0], c[1]),
            half: [
                cols as f64 * cell / 2.0 + rim,
                rows as f64 * cell / 2.0 + rim,
            ],
            angle: deg(a),
        };
        let mut seedlings = Vec::new();
        for r in 0..rows {
            for k in 0..cols {
                let u = (k as f64 + 0.5) * cell - cols as f64 * cell / 2.0;
                let v = (r as f64 + 0.5) * cell - rows as f64 * cell / 2.0;
                let keep = rng.unit();
                if sown && keep < 0.8 {
                    seedlings.push(b.world(u, v));
                }
            }
        }
        trays.push(Tray {
            name: name.into(),
            corners: b.corners(),
            center: b.center,
            angle_deg: a,
            rows,
            cols,
            seedlings,
        });
        tray_boxes.push((b, cell));
    }
    let pot = |name: &str, x: f64, y: f64, r: f64, on_mat: bool| Pot {
        name: name.into(),
        center: f.p(x, y),
        radius: f.l(r),
        soil_radius: f.l(r * 0.74),
        on_mat,
    };
    let mut small = pot("pot_small", 318.0, 380.0, 26.0, false);
    small.on_mat = mat.sd(small.center[0], small.center[1], 0.0) < -small.radius;
    let pots = vec![
        small,
        pot("pot_wide", 590.0, 410.0, 36.0, false),
        pot("pot_medium", 394.0, 142.0, 41.0, true),
        pot("pot_large", 532.0, 104.0, 55.0, true),
    ];
    // Trowel: tip to the left, handle to the right, a little turned.
    let tip = f.p(356.0, 452.0);
    let dir = {
        let a = deg(-12.0);
        [a.cos(), a.sin()]
    };
    let along = |t: f64, side: f64| {
        let (t, side) = (f.l(t), f.l(side));
        [
            tip[0] + dir[0] * t - dir[1] * side,
            tip[1] + dir[1] * t + dir[0] * side,
        ]
    };
    let blade = objects::trowel_blade(&along);
    let trowel = Trowel {
        tip,
        // Looking from the handle to the tip, "left" is the side at negative `side`... see
        // `trowel_blade`: +side is down-screen here, which is the left seen from the handle.
        shoulder_left: along(objects::SHOULDER_T, objects::SHOULDER_W),
        shoulder_right: along(objects::SHOULDER_T, -objects::SHOULDER_W),
        handle_end: along(objects::HANDLE_END_T, 0.0),
        blade,
    };
    let stake = Box2 {
        center: f.p(138.0, 226.0),
        half: [f.l(62.0), f.l(11.0)],
        angle: deg(1.0),
    };
    let stake_outline = objects::stake_outline(&stake);
    let layout = BenchLayout {
        width: w,
        height: h,
        seed,
        mat: mat.corners(),
        trays,
        pots,
        trowel,
        stake: Stake {
            outline: stake_outline,
            text: "BASIL".into(),
        },
        spare_spot: Spot {
            center: f.p(484.0, 262.0),
            radius: f.l(34.0),
        },
    };
    Geometry {
        layout,
        fit: f,
        mat,
        trays: tray_boxes,
        stake,
        trowel_axis: (tip, dir),
    }
}

/// Where everything is on a `width × height` bench painted with `seed`.
pub fn bench_layout(width: usize, height: usize, seed: u64) -> Result<BenchLayout, BadSize> {
    check_size(width, height)?;
    Ok(geometry(width, height, seed).layout)
}

/// Paints the potting bench (640 × 480 is the designed size).
pub fn paint_potting_bench(width: usize, height: usize, seed: u64) -> Result<Image, BadSize> {
    check_size(width, height)?;
    Ok(objects::paint(&geometry(width, height, seed), seed))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn layout_is_inside_the_frame_and_consistent() {
        let l = bench_layout(640, 480, 1).unwrap();
        let inside = |p: [f64; 2]| p[0] > -0.5 && p[0] < 639.5 && p[1] > -0.5 && p[1] < 479.5;
        assert!(l.mat.iter().all(|p| inside(*p)));
        for t in &l.trays {
            assert!(t.corners.iter().all(|p| inside(*p)), "{}", t.name);
        }
        for p in &l.pots {
            assert!(
                inside([p.center[0] - p.radius, p.center[1] - p.radius]),
                "{}",
                p.name
            );
            assert!(
                inside([p.center[0] + p.radius, p.center[1] + p.radius]),
                "{}",
                p.name
            );
        }
        assert_eq!(l.pots[0].name, "pot_small");
        assert!(!l.pots[0].on_mat);
        // Pots do not overlap each other, and the spare spot is free.
        let spots: Vec<([f64; 2], f64)> = l
            .pots
            .iter()
            .map(|p| (p.center, p.radius))
            .chain([(l.spare_spot.center, l.spare_spot.radius)])
            .collect();
        for (a, &(ca, ra)) in spots.iter().enumerate() {
            for &(cb, rb) in &spots[a + 1..] {
                let d = (ca[0] - cb[0]).hypot(ca[1] - cb[1]);
                assert!(d > ra + rb, "{ca:?} {cb:?}");
            }
        }
        assert!(l.trays[0].seedlings.len() > 10);
        assert!(l.trays[1].seedlings.is_empty());
        // The spare spot lies on the mat.
        let g = geometry(640, 480, 1);
        let c = l.spare_spot.center;
        assert!(g.mat.sd(c[0], c[1], 0.0) < -l.spare_spot.radius);
    }

    #[test]
    fn painting_is_deterministic_and_checks_its_size() {
        let a = paint_potting_bench(160, 120, 5).unwrap();
        let b = paint_potting_bench(160, 120, 5).unwrap();
        let c = paint_potting_bench(160, 120, 6).unwrap();
        assert_eq!(a, b);
        assert_ne!(a, c);
        assert!(paint_potting_bench(0, 10, 1).is_err());
        assert!(bench_layout(10, 0, 1).is_err());
    }
}
