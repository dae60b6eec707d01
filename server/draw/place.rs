//! Where labels go: beside their mark, in the first corner that stays inside the frame and
//! covers no mark, no arrow and no label placed before it (or, when every corner covers
//! something, the one that covers least: an arrow rather than a label, a label rather than a
//! mark, the rim of a mark rather than its middle).
//!
//! The browser follows the same rule (`drawLabel` in web/static/view.js), so labels sit in the
//! same corners in the editor as in the overlay.

use super::marks::SIZES;

/// Where a label belongs.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) enum Anchor {
    /// Beside a mark at `at`. The first choice is the corner facing away from `away` (where
    /// the mark's arrow heads, if it has one): left of the mark when the arrow runs right,
    /// below it when the arrow runs up; with no arrow, up and to the right. Then the other
    /// corner on the same level, the one on the same side, and the opposite one.
    Beside {
        /// The mark.
        at: [f64; 2],
        /// Where its arrow heads.
        away: Option<[f64; 2]>,
    },
    /// Centred on this point (zone labels).
    Centred([f64; 2]),
}

impl Anchor {
    /// The point the label belongs to.
    pub fn point(self) -> [f64; 2] {
        match self {
            Anchor::Beside { at, .. } | Anchor::Centred(at) => at,
        }
    }
}

/// What a label should not cover: marks (discs), arrows (segments with a half width) and the
/// labels already placed (boxes), in frame coordinates.
#[derive(Debug, Clone, Default)]
pub(crate) struct Obstacles {
    discs: Vec<([f64; 2], f64)>,
    segments: Vec<([f64; 2], [f64; 2], f64)>,
    boxes: Vec<([f64; 2], [f64; 2])>,
}

impl Obstacles {
    pub fn disc(&mut self, c: [f64; 2], r: f64) {
        self.discs.push((c, r));
    }

    pub fn segment(&mut self, a: [f64; 2], b: [f64; 2], half_width: f64) {
        self.segments.push((a, b, half_width));
    }

    pub fn add_box(&mut self, min: [f64; 2], max: [f64; 2]) {
        self.boxes.push((min, max));
    }

    /// How bad it is to put a label box at `min..max`, 0 when it is free: for each mark it
    /// covers, 4 times how far into the mark it reaches (as a share of the mark's radius, 1
    /// over its centre); 2 for each earlier label it overlaps; 1 for each arrow it crosses.
    pub fn cost(&self, min: [f64; 2], max: [f64; 2]) -> f64 {
        let marks: f64 = self
            .discs
            .iter()
            .map(|&(c, r)| {
                let dx = c[0] - c[0].clamp(min[0], max[0]);
                let dy = c[1] - c[1].clamp(min[1], max[1]);
                ((r - dx.hypot(dy)) / r).max(0.0)
            })
            .sum();
        let labels = self
            .boxes
            .iter()
            .filter(|&&(lo, hi)| {
                lo[0] < max[0] && min[0] < hi[0] && lo[1] < max[1] && min[1] < hi[1]
            })
            .count();
        let arrows = self
            .segments
            .iter()
            .filter(|&&(a, b, hw)| {
                segment_meets_box(a, b, [min[0] - hw, min[1] - hw], [max[0] + hw, max[1] + hw])
            })
            .count();
        4.0 * marks + 2.0 * labels as f64 + arrows as f64
    }
}

/// Whether the segment `a`–`b` meets the box `min..max` (Liang–Barsky clipping).
fn segment_meets_box(a: [f64; 2], b: [f64; 2], min: [f64; 2], max: [f64; 2]) -> bool {
    let (mut t0, mut t1) = (0.0f64, 1.0f64);
    let d = [b[0] - a[0], b[1] - a[1]];
    for k in 0..2 {
        for (p, q) in [(-d[k], a[k] - min[k]), (d[k], max[k] - a[k])] {
            if p == 0.0 {
                if q < 0.0 {
                    return false;
                }
            } else {
                let t = q / p;
                if p < 0.0 {
                    t0 = t0.max(t);
                } else {
                    t1 = t1.min(t);
                }
            }
        }
    }
    t0 <= t1
}

/// The top-left corner of a `bw × bh` label box at `anchor` in a `w × h` frame: of the
/// candidate corners that fit in the frame, the one of least [`Obstacles::cost`] (the earlier
/// on a tie); when none fits, the first choice moved inside the frame. Then put on whole
/// pixels.
pub(crate) fn place(
    anchor: Anchor,
    bw: f64,
    bh: f64,
    unit: f64,
    w: u32,
    h: u32,
    obstacles: &Obstacles,
) -> Option<[f64; 2]> {
    let (lo, hi) = ([-0.5, -0.5], [f64::from(w) - 0.5, f64::from(h) - 0.5]);
    let fits = |[x, y]: [f64; 2]| x >= lo[0] && x + bw <= hi[0] && y >= lo[1] && y + bh <= hi[1];
    let (first, chosen) = match anchor {
        Anchor::Beside { at: [x, y], away } => {
            let off = SIZES.label_offset * unit;
            let (right, above) = away.map_or((true, true), |[ax, ay]| (ax <= x, ay >= y));
            let corner = |right: bool, above: bool| {
                [
                    if right { x + off } else { x - off - bw },
                    if above { y - off - bh } else { y + off },
                ]
            };
            let candidates = [
                corner(right, above),
                corner(!right, above),
                corner(right, !above),
                corner(!right, !above),
            ];
            // The least cost, the earlier candidate on a tie (`min_by` keeps the first).
            let best = candidates
                .iter()
                .filter(|&&c| fits(c))
                .map(|&c| (c, obstacles.cost(c, [c[0] + bw, c[1] + bh])))
                .min_by(|a, b| a.1.total_cmp(&b.1))
                .map(|(c, _)| c);
            (candidates[0], best)
        }
        Anchor::Centred([x, y]) => {
            let c = [x - bw / 2.0, y - bh / 2.0];
            (c, None)
        }
    };
    let [left, top] = chosen.unwrap_or(first);
    if !(left.is_finite() && top.is_finite()) {
        return None;
    }
    // Inside the frame, whose edges are at −½ and W − ½; a label wider than the frame starts at
    // its left edge.
    let inside = |v: f64, size: f64, lo: f64, hi: f64| {
        if hi - size < lo {
            lo
        } else {
            v.clamp(lo, hi - size)
        }
    };
    let left = (inside(left, bw, lo[0], hi[0]) + 0.5).round() - 0.5;
    let top = (inside(top, bh, lo[1], hi[1]) + 0.5).round() - 0.5;
    Some([left, top])
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn segments_meet_boxes_they_cross_and_no_others() {
        let (lo, hi) = ([0.0, 0.0], [10.0, 4.0]);
        assert!(segment_meets_box([-5.0, 2.0], [15.0, 2.0], lo, hi));
        assert!(segment_meets_box([5.0, -3.0], [5.0, 1.0], lo, hi));
        assert!(segment_meets_box([2.0, 1.0], [3.0, 2.0], lo, hi), "inside");
        assert!(!segment_meets_box([-5.0, 6.0], [15.0, 6.0], lo, hi));
        assert!(!segment_meets_box([-5.0, -1.0], [1.0, -9.0], lo, hi));
        assert!(!segment_meets_box([11.0, 0.0], [20.0, 4.0], lo, hi));
    }

    #[test]
    fn a_label_takes_the_first_free_corner() {
        let at = [50.0, 50.0];
        let (bw, bh) = (30.0, 20.0);
        let off = SIZES.label_offset;
        // Arrow to the upper right: first choice is below and to the left.
        let anchor = Anchor::Beside {
            at,
            away: Some([90.0, 20.0]),
        };
        let none = Obstacles::default();
        let c = place(anchor, bw, bh, 1.0, 200, 100, &none).unwrap();
        assert_eq!(c, [(50.0 - off - bw + 0.5f64).round() - 0.5, 59.5]);
        // Something there: the next corner, below and to the right.
        let mut busy = Obstacles::default();
        busy.disc([20.0, 70.0], 5.0);
        let c = place(anchor, bw, bh, 1.0, 200, 100, &busy).unwrap();
        assert_eq!(c, [59.5, 59.5]);
        // Every corner under an earlier label: the one that covers no mark.
        busy.add_box([0.0, 0.0], [200.0, 100.0]);
        let c = place(anchor, bw, bh, 1.0, 200, 100, &busy).unwrap();
        assert_eq!(c, [59.5, 59.5]);
        // An arrow is better covered than a label.
        let mut crowded = Obstacles::default();
        crowded.add_box([0.0, 55.0], [45.0, 90.0]);
        crowded.add_box([0.0, 0.0], [200.0, 45.0]);
        crowded.segment([55.0, 55.0], [95.0, 95.0], 1.0);
        let c = place(anchor, bw, bh, 1.0, 200, 100, &crowded).unwrap();
        assert_eq!(c, [59.5, 59.5]);
        // Near the top-left corner nothing fits: moved inside.
        let c = place(
            Anchor::Beside {
                at: [1.0, 1.0],
                away: None,
            },
            500.0,
            20.0,
            1.0,
            200,
            100,
            &none,
        )
        .unwrap();
        assert_eq!(c, [-0.5, -0.5]);
    }
}
