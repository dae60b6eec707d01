//! A tiny bitmap font (our own hand-made 5×7 glyphs) for numbering overlay terms.
//!
//! Each glyph is 5 cells wide and 7 tall above the baseline; g, j, p, q and y hang 2 cells
//! below it. A cell is `scale` pixels square. Characters without a glyph draw as a hollow box.

use super::image::{Color, Rgba8Image};
use super::raster::{Patch, finite};

/// Glyph width in cells.
pub const GLYPH_WIDTH: usize = 5;
/// Glyph height above the baseline in cells.
pub const GLYPH_HEIGHT: usize = 7;
/// Rows below the baseline for descenders.
const DESCENT: usize = 2;
/// Horizontal advance from one glyph to the next, in cells (one blank column).
pub const ADVANCE: usize = 6;
/// Vertical advance from one line to the next, in cells.
pub const LINE_HEIGHT: usize = 10;

/// Rows of a glyph, top to bottom, `#` for an inked cell. 7 rows, or 9 with a descender.
type Rows = &'static [&'static str];

#[rustfmt::skip]
const GLYPHS: &[(char, Rows)] = &[
    ('0', &[".###.", "#...#", "#..##", "#.#.#", "##..#", "#...#", ".###."]),
    ('1', &["..#..", ".##..", "..#..", "..#..", "..#..", "..#..", ".###."]),
    ('2', &[".###.", "#...#", "....#", "...#.", "..#..", ".#...", "#####"]),
    ('3', &["#####", "...#.", "..#..", "...#.", "....#", "#...#", ".###."]),
    ('4', &["...#.", "..##.", ".#.#.", "#..#.", "#####", "...#.", "...#."]),
    ('5', &["#####", "#....", "####.", "....#", "....#", "#...#", ".###."]),
    ('6', &["..##.", ".#...", "#....", "####.", "#...#", "#...#", ".###."]),
    ('7', &["#####", "....#", "...#.", "..#..", ".#...", ".#...", ".#..."]),
    ('8', &[".###.", "#...#", "#...#", ".###.", "#...#", "#...#", ".###."]),
    ('9', &[".###.", "#...#", "#...#", ".####", "....#", "...#.", ".##.."]),
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
    ('a', &[".....", ".....", ".###.", "....#", ".####", "#...#", ".####"]),
    ('b', &["#....", "#....", "#.##.", "##..#", "#...#", "#...#", "####."]),
    ('c', &[".....", ".....", ".###.", "#....", "#....", "#...#", ".###."]),
    ('d', &["....#", "....#", ".##.#", "#..##", "#...#", "#...#", ".####"]),
    ('e', &[".....", ".....", ".###.", "#...#", "#####", "#....", ".###."]),
    ('f', &["..##.", ".#..#", ".#...", "###..", ".#...", ".#...", ".#..."]),
    ('g', &[".....", ".....", ".####", "#...#", "#...#", "#...#", ".####", "....#", ".###."]),
    ('h', &["#....", "#....", "#.##.", "##..#", "#...#", "#...#", "#...#"]),
    ('i', &["..#..", ".....", ".##..", "..#..", "..#..", "..#..", ".###."]),
    ('j', &["...#.", ".....", "..##.", "...#.", "...#.", "...#.", "...#.", "#..#.", ".##.."]),
    ('k', &["#....", "#....", "#..#.", "#.#..", "##...", "#.#..", "#..#."]),
    ('l', &[".##..", "..#..", "..#..", "..#..", "..#..", "..#..", ".###."]),
    ('m', &[".....", ".....", "##.#.", "#.#.#", "#.#.#", "#.#.#", "#.#.#"]),
    ('n', &[".....", ".....", "#.##.", "##..#", "#...#", "#...#", "#...#"]),
    ('o', &[".....", ".....", ".###.", "#...#", "#...#", "#...#", ".###."]),
    ('p', &[".....", ".....", "####.", "#...#", "#...#", "#...#", "####.", "#....", "#...."]),
    ('q', &[".....", ".....", ".####", "#...#", "#...#", "#...#", ".####", "....#", "....#"]),
    ('r', &[".....", ".....", "#.##.", "##..#", "#....", "#....", "#...."]),
    ('s', &[".....", ".....", ".####", "#....", ".###.", "....#", "####."]),
    ('t', &[".#...", ".#...", "###..", ".#...", ".#...", ".#..#", "..##."]),
    ('u', &[".....", ".....", "#...#", "#...#", "#...#", "#..##", ".##.#"]),
    ('v', &[".....", ".....", "#...#", "#...#", "#...#", ".#.#.", "..#.."]),
    ('w', &[".....", ".....", "#...#", "#...#", "#.#.#", "#.#.#", ".#.#."]),
    ('x', &[".....", ".....", "#...#", ".#.#.", "..#..", ".#.#.", "#...#"]),
    ('y', &[".....", ".....", "#...#", "#...#", "#...#", "#...#", ".####", "....#", ".###."]),
    ('z', &[".....", ".....", "#####", "...#.", "..#..", ".#...", "#####"]),
    (' ', &[".....", ".....", ".....", ".....", ".....", ".....", "....."]),
    ('.', &[".....", ".....", ".....", ".....", ".....", ".##..", ".##.."]),
    (',', &[".....", ".....", ".....", ".....", ".##..", "..#..", ".#..."]),
    (':', &[".....", ".##..", ".##..", ".....", ".##..", ".##..", "....."]),
    (';', &[".....", ".##..", ".##..", ".....", ".##..", "..#..", ".#..."]),
    ('-', &[".....", ".....", ".....", "#####", ".....", ".....", "....."]),
    ('+', &[".....", "..#..", "..#..", "#####", "..#..", "..#..", "....."]),
    ('_', &[".....", ".....", ".....", ".....", ".....", ".....", "#####"]),
    ('=', &[".....", ".....", "#####", ".....", "#####", ".....", "....."]),
    ('/', &["....#", "....#", "...#.", "..#..", ".#...", "#....", "#...."]),
    ('|', &["..#..", "..#..", "..#..", "..#..", "..#..", "..#..", "..#.."]),
    ('(', &["...#.", "..#..", ".#...", ".#...", ".#...", "..#..", "...#."]),
    (')', &[".#...", "..#..", "...#.", "...#.", "...#.", "..#..", ".#..."]),
    ('[', &[".###.", ".#...", ".#...", ".#...", ".#...", ".#...", ".###."]),
    (']', &[".###.", "...#.", "...#.", "...#.", "...#.", "...#.", ".###."]),
    ('<', &["...#.", "..#..", ".#...", "#....", ".#...", "..#..", "...#."]),
    ('>', &[".#...", "..#..", "...#.", "....#", "...#.", "..#..", ".#..."]),
    ('!', &["..#..", "..#..", "..#..", "..#..", "..#..", ".....", "..#.."]),
    ('?', &[".###.", "#...#", "....#", "...#.", "..#..", ".....", "..#.."]),
    ('#', &[".#.#.", ".#.#.", "#####", ".#.#.", "#####", ".#.#.", ".#.#."]),
    ('%', &["##...", "##..#", "...#.", "..#..", ".#...", "#..##", "...##"]),
    ('*', &[".....", "..#..", "#.#.#", ".###.", "#.#.#", "..#..", "....."]),
    ('&', &[".##..", "#..#.", "#.#..", ".#...", "#.#.#", "#..#.", ".##.#"]),
    ('@', &[".###.", "#...#", "#.###", "#.#.#", "#.###", "#....", ".####"]),
    ('~', &[".....", ".....", ".#...", "#.#.#", "...#.", ".....", "....."]),
    ('\'', &["..#..", "..#..", ".#...", ".....", ".....", ".....", "....."]),
    ('"', &[".#.#.", ".#.#.", ".....", ".....", ".....", ".....", "....."]),
    ('°', &[".##..", "#..#.", ".##..", ".....", ".....", ".....", "....."]),
];

const MISSING: Rows = &[
    "#####", "#...#", "#...#", "#...#", "#...#", "#...#", "#####",
];

fn glyph(c: char) -> Rows {
    GLYPHS
        .iter()
        .find(|(g, _)| *g == c)
        .map_or(MISSING, |(_, rows)| *rows)
}

/// Whether the font has a glyph for `c` (others draw as a hollow box).
pub fn has_glyph(c: char) -> bool {
    GLYPHS.iter().any(|(g, _)| *g == c)
}

/// How to draw text: the cell size, the ink and a dark halo around the strokes.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TextStyle {
    /// Pixels per glyph cell (1 gives 5×7-pixel letters).
    pub scale: usize,
    /// Ink colour.
    pub color: Color,
    /// Halo width around each inked cell in pixels; 0 for none.
    pub halo: f64,
    /// Halo colour.
    pub halo_color: Color,
}

/// Where drawn text lies: the box `min..max` in frame coordinates, halo included.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TextBox {
    /// Top-left corner.
    pub min: [f64; 2],
    /// Bottom-right corner.
    pub max: [f64; 2],
}

/// Width and height in pixels of `text` (lines split at `\n`) at `scale`, halo excluded:
/// every line is as tall as a glyph with a descender.
pub fn text_size(text: &str, scale: usize) -> (usize, usize) {
    let lines: Vec<&str> = text.split('\n').collect();
    let cols = lines.iter().map(|l| l.chars().count()).max().unwrap_or(0);
    let w = if cols == 0 {
        0
    } else {
        (cols * ADVANCE - 1) * scale
    };
    let h = ((lines.len() - 1) * LINE_HEIGHT + GLYPH_HEIGHT + DESCENT) * scale;
    (w, h)
}

impl Rgba8Image {
    /// Draws `text` with its top-left corner at `origin` (a point in frame coordinates; use
    /// `(i − ½, j − ½)` to align glyph cells with pixel `(i, j)` for crisp letters) and returns
    /// the box it occupies, halo included; `None` when the origin is not finite or the scale 0.
    pub fn draw_text(
        &mut self,
        origin: [f64; 2],
        text: &str,
        style: &TextStyle,
    ) -> Option<TextBox> {
        if !finite(origin) || style.scale == 0 || style.scale > 64 {
            return None;
        }
        let s = style.scale as f64;
        let halo = if style.halo.is_finite() {
            style.halo.clamp(0.0, 4.0 * s)
        } else {
            0.0
        };
        let (w, h) = text_size(text, style.scale);
        let bounds = TextBox {
            min: [origin[0] - halo, origin[1] - halo],
            max: [origin[0] + w as f64 + halo, origin[1] + h as f64 + halo],
        };
        let mut cells = Vec::new();
        for (row, line) in text.split('\n').enumerate() {
            for (col, c) in line.chars().enumerate() {
                let gx = origin[0] + (col * ADVANCE) as f64 * s;
                let gy = origin[1] + (row * LINE_HEIGHT) as f64 * s;
                for (r, bits) in glyph(c).iter().enumerate() {
                    for (k, b) in bits.bytes().enumerate() {
                        if b == b'#' {
                            cells.push([gx + k as f64 * s, gy + r as f64 * s]);
                        }
                    }
                }
            }
        }
        if halo > 0.0
            && let Some(mut p) = Patch::over(self, bounds.min, bounds.max)
        {
            for c in &cells {
                p.max_box(
                    [c[0] - halo, c[1] - halo],
                    [c[0] + s + halo, c[1] + s + halo],
                );
            }
            self.blend_patch(&p, style.halo_color);
        }
        if let Some(mut p) = Patch::over(self, bounds.min, bounds.max) {
            for c in &cells {
                p.add_box(*c, [c[0] + s, c[1] + s]);
            }
            self.blend_patch(&p, style.color);
        }
        Some(bounds)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_glyph_is_well_formed() {
        let mut seen = std::collections::HashSet::new();
        for (c, rows) in GLYPHS {
            assert!(seen.insert(*c), "{c:?} twice");
            let descends = matches!(c, 'g' | 'j' | 'p' | 'q' | 'y');
            let want = if descends {
                GLYPH_HEIGHT + DESCENT
            } else {
                GLYPH_HEIGHT
            };
            assert_eq!(rows.len(), want, "{c:?}");
            for r in rows.iter() {
                assert_eq!(r.len(), GLYPH_WIDTH, "{c:?}");
                assert!(r.bytes().all(|b| b == b'#' || b == b'.'), "{c:?}");
            }
            if *c != ' ' {
                assert!(rows.iter().any(|r| r.contains('#')), "{c:?} is blank");
            }
        }
        for c in ('0'..='9').chain('A'..='Z').chain('a'..='z') {
            assert!(has_glyph(c), "{c:?}");
        }
        // No two glyphs look the same.
        for (i, (a, ra)) in GLYPHS.iter().enumerate() {
            for (b, rb) in &GLYPHS[i + 1..] {
                assert_ne!(ra, rb, "{a:?} and {b:?} look alike");
            }
        }
    }

    #[test]
    fn text_size_counts_cells() {
        assert_eq!(text_size("1", 1), (5, 9));
        assert_eq!(text_size("2a", 2), (22, 18));
        assert_eq!(text_size("ab\nc", 1), (11, 19));
        assert_eq!(text_size("", 3), (0, 27));
    }

    #[test]
    fn label_stays_inside_its_box_and_is_crisp() {
        let bg = Color::rgb(120, 130, 140);
        let mut img = Rgba8Image::new(40, 30, bg).unwrap();
        let style = TextStyle {
            scale: 2,
            color: Color::rgb(255, 255, 255),
            halo: 1.0,
            halo_color: Color::rgb(0, 0, 0),
        };
        // Cells aligned with pixel (10, 5).
        let b = img.draw_text([9.5, 4.5], "1", &style).unwrap();
        assert_eq!(b.min, [8.5, 3.5]);
        assert_eq!(b.max, [20.5, 23.5]);
        let mut inked = 0;
        for j in 0..30 {
            for i in 0..40 {
                let p = img.pixel(i, j).unwrap();
                let (x, y) = (i as f64, j as f64);
                let inside = x > b.min[0] && x < b.max[0] && y > b.min[1] && y < b.max[1];
                if !inside {
                    assert_eq!(p, bg, "({i},{j}) outside the box was touched");
                }
                if p == Color::rgb(255, 255, 255) {
                    inked += 1;
                }
                // Crisp: only ink, halo or background, nothing in between.
                assert!(p == bg || p == Color::rgb(255, 255, 255) || p == Color::rgb(0, 0, 0));
            }
        }
        // "1" has 10 inked cells, 4 pixels each at scale 2.
        assert_eq!(inked, 40);
        // The top cell of "1" is column 2 of row 0: pixels x 14..=15, y 5..=6.
        assert_eq!(img.pixel(14, 5), Some(Color::rgb(255, 255, 255)));
        assert_eq!(img.pixel(13, 5), Some(Color::rgb(0, 0, 0)));
    }

    #[test]
    fn text_off_the_image_or_odd_is_harmless() {
        let mut img = Rgba8Image::new(10, 10, Color::rgb(0, 0, 0)).unwrap();
        let style = TextStyle {
            scale: 3,
            color: Color::rgb(255, 255, 255),
            halo: f64::NAN,
            halo_color: Color::rgb(0, 0, 0),
        };
        assert!(img.draw_text([f64::NAN, 0.0], "x", &style).is_none());
        assert!(img.draw_text([1e12, -1e12], "far", &style).is_some());
        assert!(
            img.draw_text([-3.0, -3.0], "Zz9?\u{1F600}", &style)
                .is_some()
        );
        let zero = TextStyle { scale: 0, ..style };
        assert!(img.draw_text([0.0, 0.0], "1", &zero).is_none());
    }
}
