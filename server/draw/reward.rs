//! The reward map of a fit laid over its frame, with the demonstrations it was fitted to.
//!
//! The heat is the `learned` term's own cost, `r_max − r(cell)`, coloured with the editor's
//! cost heat ([`super::palette::heat`]): where the reward is highest (cost 0) the frame wears
//! the heat's sky blue, and it sinks into the dark casing colour, more transparent, where the
//! reward is lowest. So a fit's picture and the cost preview of the goal term made from it read
//! the same way. Each pixel takes the value of the cell its centre falls in, the rule the cost
//! engine uses (`goalsmith_core::cost::RewardGrid`), so the cells' edges are where the cost
//! steps.
//!
//! Over the heat: each demonstration as a cased path in the demo page's track colours (a gap
//! where samples were lost), a source disc at its start, and the best cell (`reward_argmax`) as
//! a target mark in the learned terms' slate, labelled "best".

use super::canvas::{Canvas, Pen, polyline};
use super::marks::{self, Rgba, SIZES, SOURCE, TARGET, TRACK_COLOURS, TRACK_SIZES};
use super::overlay::unit_for_frame;
use super::palette::heat;
use super::text::{Line, box_size, draw_label};
use goalsmith_core::cost::RewardGrid;

/// A demonstration as drawn: its samples in order, `None` where a sample was lost.
pub type DemoPath = Vec<Option<[f64; 2]>>;

/// Draws the reward heat of `grid`, the `demos` and the best cell at `argmax` over a copy of
/// `frame`.
pub fn render_reward_map(
    frame: &image::RgbaImage,
    grid: &RewardGrid,
    demos: &[DemoPath],
    argmax: [f64; 2],
) -> image::RgbaImage {
    let Some(mut canvas) = Canvas::from_frame(frame) else {
        return frame.clone();
    };
    let u = unit_for_frame(canvas.width(), canvas.height());
    // The cost per cell, normalised to [0, 1] by its range (all 0 for a flat reward).
    let (lo, hi) = grid
        .values()
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), &v| {
            (lo.min(f64::from(v)), hi.max(f64::from(v)))
        });
    let range = hi - lo;
    let colours: Vec<Rgba> = grid
        .values()
        .iter()
        .map(|&v| {
            let t = if range > 0.0 {
                (hi - f64::from(v)) / range
            } else {
                0.0
            };
            Rgba(heat(t, false))
        })
        .collect();
    let (cols, rows, cell) = (grid.cols(), grid.rows(), grid.cell_px() as usize);
    canvas.pixel_layer(|i, j| {
        let c = (i as usize / cell).min(cols - 1);
        let r = (j as usize / cell).min(rows - 1);
        colours.get(r * cols + c).copied()
    });
    for (k, demo) in demos.iter().enumerate() {
        let colour = TRACK_COLOURS[k % TRACK_COLOURS.len()];
        let pen = Pen {
            width: TRACK_SIZES.path * u,
            colour,
            dash: None,
        };
        for run in demo.split(Option::is_none) {
            let pts: Vec<[f64; 2]> = run.iter().flatten().copied().collect();
            if let Some(path) = polyline(&pts, false) {
                canvas.cased(&path, pen, SIZES.casing * u);
            }
        }
        if let Some(start) = demo.iter().flatten().next() {
            canvas.mark(SOURCE, *start, u, 0.0, colour);
        }
    }
    if argmax.iter().all(|v| v.is_finite()) {
        canvas.mark(TARGET, argmax, u, 0.0, marks::LEARNED);
        // Above and to the right of the mark, or where that leaves the frame, on the other side.
        let line = Line::new("best");
        if let Some((bw, bh)) = box_size(&line, u) {
            let off = SIZES.label_offset * u;
            let (w, h) = (f64::from(canvas.width()), f64::from(canvas.height()));
            let x = if argmax[0] + off + bw <= w - 0.5 {
                argmax[0] + off
            } else {
                argmax[0] - off - bw
            };
            let y = if argmax[1] - off - bh >= -0.5 {
                argmax[1] - off - bh
            } else {
                argmax[1] + off
            };
            draw_label(&mut canvas, &line, [x.max(-0.5), y.min(h - 0.5 - bh)], u);
        }
    }
    canvas.into_image().unwrap_or_else(|| frame.clone())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn grid() -> RewardGrid {
        // 4 × 3 cells of 10 px; the best cell is (3, 0), the worst (0, 2).
        let values = (0..12)
            .map(|k| {
                let (c, r) = (k % 4, k / 4);
                c as f32 - r as f32
            })
            .collect();
        match RewardGrid::new(10, 4, 3, values) {
            Ok(g) => g,
            Err(e) => panic!("{e}"),
        }
    }

    #[test]
    fn heat_follows_the_cells_and_the_learned_cost() {
        let frame = image::RgbaImage::from_pixel(40, 30, image::Rgba([255, 255, 255, 255]));
        let out = render_reward_map(&frame, &grid(), &[], [f64::NAN, f64::NAN]);
        // A pixel is the heat of its cell blended over white: every pixel of a cell alike, the
        // best cell the sky end of the heat and the worst the casing end.
        let blend = |[r, g, b, a]: [u8; 4]| {
            let a = f64::from(a) / 255.0;
            let mix = |c: u8| (f64::from(c) * a + 255.0 * (1.0 - a)).round() as i32;
            [mix(r), mix(g), mix(b)]
        };
        let near =
            |p: [u8; 4], want: [i32; 3]| (0..3).all(|k| (i32::from(p[k]) - want[k]).abs() <= 1);
        assert!(near(out.get_pixel(35, 5).0, blend(heat(0.0, false))));
        assert!(near(out.get_pixel(30, 0).0, blend(heat(0.0, false))));
        assert!(near(out.get_pixel(5, 25).0, blend(heat(1.0, false))));
        // Cell (1, 1) has reward 0 of the range −2..3: cost t = 3/5.
        assert!(near(out.get_pixel(15, 15).0, blend(heat(0.6, false))));
        assert_eq!(out.get_pixel(10, 10), out.get_pixel(19, 19));
        assert_ne!(out.get_pixel(19, 19), out.get_pixel(20, 19));
    }

    #[test]
    fn demos_and_the_best_cell_are_drawn() {
        let frame = image::RgbaImage::from_pixel(200, 150, image::Rgba([255, 255, 255, 255]));
        let g = match RewardGrid::new(50, 4, 3, vec![0.0; 12]) {
            Ok(g) => g,
            Err(e) => panic!("{e}"),
        };
        let demo = vec![
            Some([20.0, 75.0]),
            Some([60.0, 75.0]),
            None,
            Some([180.0, 75.0]),
        ];
        let out = render_reward_map(&frame, &g, &[demo], [175.0, 25.0]);
        // The start disc in the first track colour, the path along y = 75 up to the lost
        // sample, nothing drawn across the gap, and the best cell's mark.
        assert_eq!(out.get_pixel(20, 75).0[..3], TRACK_COLOURS[0].0[..3]);
        assert_eq!(out.get_pixel(45, 75).0[..3], TRACK_COLOURS[0].0[..3]);
        let flat = render_reward_map(&frame, &g, &[], [f64::NAN, f64::NAN]);
        assert_eq!(out.get_pixel(120, 75), flat.get_pixel(120, 75));
        assert_ne!(out.get_pixel(175, 25), flat.get_pixel(175, 25));
    }
}
