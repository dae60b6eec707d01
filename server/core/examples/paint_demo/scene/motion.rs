//! The bench with one thing sliding on it, for the demo clips: the rest of the bench is painted
//! once, and each frame paints the moving thing over it at its pose. The moving thing keeps its
//! own textures (they move with it), so a point on it can be followed from frame to frame.

use super::canvas::{Box2, Canvas};
use super::objects::{self, Part};
use super::{Geometry, geometry};
use crate::noise::XorShift;
use crate::raster::{BadSize, Image, check_size};

/// Samples per pixel along each axis for the moving thing (its area is averaged, see
/// `Canvas::samples`).
const SAMPLES: usize = 4;

/// What slides in a clip.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Mover {
    /// Seed tray 2 (sown, no seedlings yet). The small pot already stands on the mat's spare
    /// spot, where a [`Mover::PotSmall`] clip leaves it; everything else is where the bench
    /// picture has it.
    Tray2,
    /// The small pot; everything else is where the bench picture has it.
    PotSmall,
}

/// Where the moving thing is in a frame: its centre in frame pixels and its turn from the
/// frame's x axis in degrees (clockwise on screen). Pots are round and do not turn.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Pose {
    pub center: [f64; 2],
    pub angle_deg: f64,
}

/// The bench without the moving thing, ready to paint frames.
pub struct Stage {
    g: Geometry,
    mover: Mover,
    background: Canvas,
    seed: u64,
}

impl Stage {
    pub fn new(width: usize, height: usize, seed: u64, mover: Mover) -> Result<Self, BadSize> {
        check_size(width, height)?;
        let mut g = geometry(width, height, seed);
        let omit = match mover {
            Mover::Tray2 => {
                g.layout.pots[0].center = g.layout.spare_spot.center;
                g.layout.pots[0].on_mat = true;
                Part::Tray(1)
            }
            Mover::PotSmall => Part::Pot(0),
        };
        let background = objects::paint_canvas(&g, seed, Some(omit));
        Ok(Self {
            g,
            mover,
            background,
            seed,
        })
    }

    /// The pose the bench picture has the moving thing in.
    pub fn home(&self) -> Pose {
        match self.mover {
            Mover::Tray2 => Pose {
                center: self.g.trays[1].0.center,
                angle_deg: self.g.layout.trays[1].angle_deg,
            },
            Mover::PotSmall => Pose {
                center: self.g.layout.pots[0].center,
                angle_deg: 0.0,
            },
        }
    }

    /// The spare spot on the mat (its centre).
    pub fn spare_spot(&self) -> [f64; 2] {
        self.g.layout.spare_spot.center
    }

    fn tray_box(&self, pose: Pose) -> Box2 {
        Box2 {
            center: pose.center,
            half: self.g.trays[1].0.half,
            angle: pose.angle_deg.to_radians(),
        }
    }

    /// Points on the moving thing worth following, named, in its own coordinates (pixels
    /// along its turned x and y axes from its centre).
    pub fn landmarks(&self) -> Vec<(&'static str, [f64; 2])> {
        match self.mover {
            Mover::Tray2 => {
                // Where the cell walls cross, and the middle of the middle cell (soil).
                let t = &self.g.layout.trays[1];
                let cell = self.g.trays[1].1;
                let (gw, gh) = (t.cols as f64 * cell / 2.0, t.rows as f64 * cell / 2.0);
                vec![
                    ("walls_cross_top_left", [-gw + cell, -gh + cell]),
                    ("walls_cross_top_right", [gw - cell, -gh + cell]),
                    ("walls_cross_bottom_right", [gw - cell, gh - cell]),
                    ("middle_cell_soil", [0.0, 0.0]),
                ]
            }
            Mover::PotSmall => {
                let p = &self.g.layout.pots[0];
                // Inside the soil, so that a tracker's window stays on the pot.
                let r = 0.5 * p.soil_radius;
                vec![
                    ("soil_centre", [0.0, 0.0]),
                    ("soil_left", [-r, 0.0]),
                    ("soil_top", [0.0, -r]),
                ]
            }
        }
    }

    /// Frame pixels of a point given in the moving thing's own coordinates.
    pub fn to_frame(&self, pose: Pose, local: [f64; 2]) -> [f64; 2] {
        match self.mover {
            Mover::Tray2 => self.tray_box(pose).world(local[0], local[1]),
            Mover::PotSmall => [pose.center[0] + local[0], pose.center[1] + local[1]],
        }
    }

    /// One frame: the moving thing at `pose` on the bench.
    pub fn frame(&self, pose: Pose) -> Image {
        let mut cv = self.background.clone();
        cv.samples = SAMPLES;
        match self.mover {
            Mover::Tray2 => {
                let home = self.g.trays[1].0;
                let b = self.tray_box(pose);
                objects::paint_tray_at(&mut cv, &self.g, 1, &b, Some(&home), self.seed);
            }
            Mover::PotSmall => {
                // The small pot is the first pot painted, so its generator is fresh.
                let mut rng = XorShift::new(self.seed ^ 0x5eed);
                objects::paint_pot_at(&mut cv, &self.g, 0, pose.center, self.seed, &mut rng);
            }
        }
        objects::letter(&self.g, cv.into_image())
    }
}

/// Shapes for checking the clips: a moving thing must not run into anything.
#[cfg(test)]
impl Stage {
    /// Signed distance to the moving thing's outline at `pose` (negative inside).
    pub fn mover_sd(&self, pose: Pose, x: f64, y: f64) -> f64 {
        match self.mover {
            Mover::Tray2 => self.tray_box(pose).sd(x, y, 6.0 * self.g.fit.s),
            Mover::PotSmall => {
                (x - pose.center[0]).hypot(y - pose.center[1]) - self.g.layout.pots[0].radius
            }
        }
    }

    /// Signed distance to the nearest other thing standing on the bench (the mat, which
    /// things slide onto, is not one).
    pub fn others_sd(&self, x: f64, y: f64) -> f64 {
        let l = &self.g.layout;
        let s = self.g.fit.s;
        let mut d = super::canvas::polygon_sd(&l.stake.outline, x, y);
        d = d.min(super::canvas::polygon_sd(&l.trowel.blade, x, y));
        d = d.min(
            crate::raster::segment_distance([x, y], l.trowel.tip, l.trowel.handle_end) - 9.5 * s,
        );
        for (k, (b, _)) in self.g.trays.iter().enumerate() {
            if !(self.mover == Mover::Tray2 && k == 1) {
                d = d.min(b.sd(x, y, 6.0 * s));
            }
        }
        for (k, p) in l.pots.iter().enumerate() {
            if !(self.mover == Mover::PotSmall && k == 0) {
                d = d.min((x - p.center[0]).hypot(y - p.center[1]) - p.radius);
            }
        }
        d
    }
}
