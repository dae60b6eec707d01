//! The stake's lettering: hand-made 5×7 capitals, one glyph cell `scale` pixels square.

use crate::raster::Image;

/// Glyph cells from one letter to the next (one blank column).
const ADVANCE: usize = 6;
/// Cells of a line's height: 7 above the baseline and 2 below, for descenders.
const LINE_CELLS: usize = 9;

/// Rows of a glyph, top to bottom, `#` for an inked cell.
type Rows = &'static [&'static str];

#[rustfmt::skip]
const CAPITALS: &[(char, Rows)] = &[
    ('A', &[".###.", "#...#", "#...#", "#####", "#...#", "#...#", "#...#"]),
    ('B', &["####.", "#...#", "#...#", "####.", "#...#", "#...#", "####."]),
    ('C', &[".###.", "#...#", "#....", "#....", "#....", "#...#", ".###."]),
    ('D', &["###..", "#..#.", "#...#", "#...#", "#...#", "#..#.", "###.."]),
    ('E', &["#####", "#....", "#....", "####.", "#....", "#....", "#####"]),
    ('F', &["#####", "#....", "#....", "####.", "#....", "#....", "#...."]),
    ('G', &[".###.", "#...#", "#....", "#.###", "#...#", "#...#", ".####"]),
    ('H', &["#...#", "#...#", "#...#", "#####", "#...#", "#...#", "#...#"]),
    ('I', &[".###.", "..#..", "..#..", "..#..", "..#..", "..#..", ".###."]),
    ('J', &["..###", "...#.", "...#.", "...#.", "...#.", "#..#.", ".##.."]),
    ('K', &["#...#", "#..#.", "#.#..", "##...", "#.#..", "#..#.", "#...#"]),
    ('L', &["#....", "#....", "#....", "#....", "#....", "#....", "#####"]),
    ('M', &["#...#", "##.##", "#.#.#", "#.#.#", "#...#", "#...#", "#...#"]),
    ('N', &["#...#", "#...#", "##..#", "#.#.#", "#..##", "#...#", "#...#"]),
    ('O', &[".###.", "#...#", "#...#", "#...#", "#...#", "#...#", ".###."]),
    ('P', &["####.", "#...#", "#...#", "####.", "#....", "#....", "#...."]),
    ('Q', &[".###.", "#...#", "#...#", "#...#", "#.#.#", "#..#.", ".##.#"]),
    ('R', &["####.", "#...#", "#...#", "####.", "#.#..", "#..#.", "#...#"]),
    ('S', &[".####", "#....", "#....", ".###.", "....#", "....#", "####."]),
    ('T', &["#####", "..#..", "..#..", "..#..", "..#..", "..#..", "..#.."]),
    ('U', &["#...#", "#...#", "#...#", "#...#", "#...#", "#...#", ".###."]),
    ('V', &["#...#", "#...#", "#...#", "#...#", "#...#", ".#.#.", "..#.."]),
    ('W', &["#...#", "#...#", "#...#", "#.#.#", "#.#.#", "#.#.#", ".#.#."]),
    ('X', &["#...#", "#...#", ".#.#.", "..#..", ".#.#.", "#...#", "#...#"]),
    ('Y', &["#...#", "#...#", ".#.#.", "..#..", "..#..", "..#..", "..#.."]),
    ('Z', &["#####", "....#", "...#.", "..#..", ".#...", "#....", "#####"]),
];

/// Width and height in pixels of one line of `text` at `scale`.
pub fn text_size(text: &str, scale: usize) -> (usize, usize) {
    let cols = text.chars().count();
    let w = if cols == 0 {
        0
    } else {
        (cols * ADVANCE - 1) * scale
    };
    (w, LINE_CELLS * scale)
}

/// Writes `text` with its top-left corner at pixel (x0, y0), each inked cell blended fully in
/// `colour` (straight RGBA). Characters other than capitals leave a blank.
pub fn write(img: &mut Image, x0: i64, y0: i64, text: &str, scale: usize, colour: [u8; 4]) {
    for (col, c) in text.chars().enumerate() {
        let Some((_, rows)) = CAPITALS.iter().find(|(g, _)| *g == c) else {
            continue;
        };
        let gx = x0 + (col * ADVANCE * scale) as i64;
        for (r, bits) in rows.iter().enumerate() {
            for (k, b) in bits.bytes().enumerate() {
                if b != b'#' {
                    continue;
                }
                for dy in 0..scale {
                    for dx in 0..scale {
                        let i = gx + (k * scale + dx) as i64;
                        let j = y0 + (r * scale + dy) as i64;
                        if i >= 0 && j >= 0 {
                            img.blend_pixel(i as usize, j as usize, colour);
                        }
                    }
                }
            }
        }
    }
}
