//! Painters for the things on the bench. Light comes from the top left, so shadows fall to
//! the bottom right.

use super::Geometry;
use super::canvas::{Box2, Canvas, Rgb, edge, lerp, polygon_sd, scale, smoothstep};
use crate::lettering;
use crate::noise::{XorShift, fbm, lattice, value_noise};
use crate::raster::{Image, Patch};

/// Trowel blade: distance from the tip to the shoulders and their half width (design px).
pub(crate) const SHOULDER_T: f64 = 56.0;
pub(crate) const SHOULDER_W: f64 = 23.0;
const NECK_T: f64 = 86.0;
const NECK_W: f64 = 5.0;
/// Distance from the tip to the end of the handle.
pub(crate) const HANDLE_END_T: f64 = 172.0;

/// The blade outline from a map (distance from tip, side offset) → frame point.
pub(crate) fn trowel_blade(along: &dyn Fn(f64, f64) -> [f64; 2]) -> Vec<[f64; 2]> {
    let width = |t: f64| {
        if t <= SHOULDER_T {
            SHOULDER_W
                * (std::f64::consts::FRAC_PI_2 * t / SHOULDER_T)
                    .sin()
                    .powf(0.7)
        } else {
            let k = (t - SHOULDER_T) / (NECK_T - SHOULDER_T);
            NECK_W + (SHOULDER_W - NECK_W) * (0.5 + 0.5 * (std::f64::consts::PI * k).cos())
        }
    };
    let n = 18;
    let ts: Vec<f64> = (0..=n).map(|k| NECK_T * k as f64 / n as f64).collect();
    let mut out: Vec<[f64; 2]> = ts.iter().map(|&t| along(t, width(t))).collect();
    out.extend(
        ts.iter()
            .rev()
            .skip(1)
            .take(n - 1)
            .map(|&t| along(t, -width(t))),
    );
    out
}

/// A label stake: the box with its left end drawn to a point.
pub(crate) fn stake_outline(b: &Box2) -> Vec<[f64; 2]> {
    let [a, h] = b.half;
    vec![
        b.world(-a, 0.0),
        b.world(-a + 2.2 * h, -h),
        b.world(a, -h),
        b.world(a, h),
        b.world(-a + 2.2 * h, h),
    ]
}

const WOOD: Rgb = [190.0, 142.0, 96.0];
const WOOD_LATE: Rgb = [148.0, 100.0, 62.0];
const MAT: Rgb = [54.0, 102.0, 66.0];
const MAT_EDGE: Rgb = [38.0, 74.0, 50.0];
const PLASTIC: Rgb = [44.0, 46.0, 50.0];
const SOIL: Rgb = [78.0, 56.0, 40.0];
const SOIL_WET: Rgb = [58.0, 40.0, 30.0];
const PERLITE: Rgb = [214.0, 210.0, 198.0];
const LEAF: Rgb = [112.0, 172.0, 70.0];
const LEAF_DARK: Rgb = [66.0, 120.0, 46.0];
const CLAY: Rgb = [198.0, 108.0, 70.0];
const CLAY_DARK: Rgb = [136.0, 66.0, 42.0];
const STEEL: Rgb = [172.0, 176.0, 182.0];
const BRASS: Rgb = [180.0, 146.0, 78.0];
const HANDLE: Rgb = [132.0, 70.0, 40.0];
const STAKE: Rgb = [238.0, 236.0, 226.0];

/// A soft shadow of a shape given by its signed distance, moved by `off` and blurred by `blur`.
fn shadow(
    cv: &mut Canvas,
    lo: [f64; 2],
    hi: [f64; 2],
    off: [f64; 2],
    blur: f64,
    strength: f32,
    sd: impl Fn(f64, f64) -> f64,
) {
    let m = blur + 1.0;
    let lo = [lo[0] + off[0] - m, lo[1] + off[1] - m];
    let hi = [hi[0] + off[0] + m, hi[1] + off[1] + m];
    cv.shade(lo, hi, |x, y| {
        let d = sd(x - off[0], y - off[1]);
        strength * (1.0 - smoothstep(-blur, blur, d)) as f32
    });
}

pub(crate) fn paint(g: &Geometry, seed: u64) -> Image {
    letter(g, paint_canvas(g, seed, None).into_image())
}

/// A part of the bench that can be left out of a painting (to be painted moving on top).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Part {
    /// The tray of this index.
    Tray(usize),
    /// The pot of this index.
    Pot(usize),
}

/// Everything on the bench but its lettering, with `omit` left out.
pub(crate) fn paint_canvas(g: &Geometry, seed: u64, omit: Option<Part>) -> Canvas {
    let l = &g.layout;
    let mut cv = Canvas::new(l.width, l.height);
    let s = g.fit.s;
    paint_wood(&mut cv, s, seed);
    paint_mat(&mut cv, &g.mat, s, seed);
    for (k, (b, _)) in g.trays.iter().enumerate() {
        if omit == Some(Part::Tray(k)) {
            continue;
        }
        paint_tray_at(&mut cv, g, k, b, None, seed);
    }
    paint_stake(&mut cv, &g.stake, &l.stake.outline, s);
    paint_trowel(&mut cv, g, s, seed);
    let mut rng = XorShift::new(seed ^ 0x5eed);
    let mut scratch = Canvas::new(1, 1);
    for k in 0..l.pots.len() {
        // A pot left out is painted where nothing shows, so the pots after it draw the same
        // leaves from the generator.
        let on = if omit == Some(Part::Pot(k)) {
            &mut scratch
        } else {
            &mut cv
        };
        paint_pot_at(on, g, k, l.pots[k].center, seed, &mut rng);
    }
    cv
}

/// Paints tray `k` as the box `b` (its place on the bench, or where it has been slid to). With
/// `home`, the tray's textures are those of the tray at `home`, carried along with it; without,
/// they are sampled where the tray lies.
pub(crate) fn paint_tray_at(
    cv: &mut Canvas,
    g: &Geometry,
    k: usize,
    b: &Box2,
    home: Option<&Box2>,
    seed: u64,
) {
    let t = &g.layout.trays[k];
    let cell = g.trays[k].1;
    let seedlings: Vec<[f64; 2]> = match home {
        None => t.seedlings.clone(),
        Some(h) => t
            .seedlings
            .iter()
            .map(|p| {
                let [u, v] = h.local(p[0], p[1]);
                b.world(u, v)
            })
            .collect(),
    };
    paint_tray(
        cv,
        b,
        home,
        cell,
        t.rows,
        t.cols,
        &seedlings,
        g.fit.s,
        seed + k as u64,
    );
}

/// Paints pot `k` with its centre at `center`; `rng` draws its leaves.
pub(crate) fn paint_pot_at(
    cv: &mut Canvas,
    g: &Geometry,
    k: usize,
    center: [f64; 2],
    seed: u64,
    rng: &mut XorShift,
) {
    let p = &g.layout.pots[k];
    let leaves = match p.name.as_str() {
        "pot_large" => 7,
        "pot_medium" => 5,
        _ => 0,
    };
    paint_pot(
        cv,
        center,
        p.radius,
        p.soil_radius,
        leaves,
        g.fit.s,
        seed + 31 * k as u64,
        rng,
    );
}

/// Writes the stake's lettering on a finished painting.
pub(crate) fn letter(g: &Geometry, mut img: Image) -> Image {
    let l = &g.layout;
    let s = g.fit.s;
    // The stake's writing, in marker pen: letter cells on whole pixels, so they stay crisp.
    let (w, h) = lettering::text_size(&l.stake.text, 2);
    let scale = ((2.0 * s).round() as usize).max(1);
    let c = g.stake.world(g.stake.half[0] * 0.22, 0.0);
    let (w, h) = (w as f64 * scale as f64 / 2.0, h as f64 * scale as f64 / 2.0);
    let x0 = (c[0] - w / 2.0).round() as i64;
    let y0 = (c[1] - h / 2.0 + scale as f64).round() as i64;
    lettering::write(&mut img, x0, y0, &l.stake.text, scale, [52, 56, 72, 235]);
    img
}

fn paint_wood(cv: &mut Canvas, s: f64, seed: u64) {
    let plank = 96.0;
    let shift = 14.0;
    let (w, h) = (cv.w as f64, cv.h as f64);
    cv.layer([0.0, 0.0], [w, h], |x, y, _| {
        let (u, v) = (x / s, y / s);
        let p = ((v + shift) / plank).floor();
        let pv = v + shift - p * plank;
        let pk = p as i64;
        let pseed = seed.wrapping_add(pk as u64 * 1013);
        let tone = 0.9 + 0.16 * lattice(seed, pk, 7) as f32;
        // Long streaks along the boards, and growth rings bent by a slow warp.
        let streak = fbm(pseed, u / 60.0, pv / 3.0, 3) as f32;
        let warp = fbm(pseed ^ 0xabc, u / 150.0, pv / 40.0, 3) * 30.0;
        let phase = lattice(seed, pk, 3) * 50.0;
        let ring = ((pv + warp + phase) * 0.42).sin();
        let ring = smoothstep(0.82, 1.0, ring) as f32;
        let fine = value_noise(pseed ^ 0x51, u / 1.6, v / 1.6) as f32;
        let mut c = scale(WOOD, tone * (0.86 + 0.22 * streak + 0.0 * fine));
        c = lerp(c, scale(WOOD_LATE, tone), 0.55 * ring);
        // Knots: a few dark eyes with rings around them.
        for k in 0..2 {
            let kx = lattice(seed, pk, 11 + k) * 620.0 + 10.0;
            let ky = 30.0 + lattice(seed, pk, 21 + k) * 36.0;
            let (dx, dy) = ((u - kx) / 2.6, pv - ky);
            let d = dx.hypot(dy);
            if d < 16.0 && lattice(seed, pk, 31 + k) < 0.6 {
                let eye = 1.0 - smoothstep(2.5, 5.0, d);
                let rings = (smoothstep(0.6, 1.0, (d * 1.3).sin())
                    * (1.0 - smoothstep(5.0, 16.0, d))) as f32;
                c = lerp(c, [92.0, 58.0, 36.0], eye as f32 * 0.85);
                c = lerp(c, WOOD_LATE, rings * 0.5);
            }
        }
        // Gaps between boards, and their soft edges.
        let gap = pv.min(plank - pv);
        if gap < 1.2 {
            c = [62.0, 44.0, 32.0];
        } else if gap < 4.0 {
            c = scale(c, 0.78 + 0.22 * smoothstep(1.2, 4.0, gap) as f32);
        }
        // Screw heads near both ends of each board.
        for sx in [26.0, 614.0] {
            let d = (u - sx).hypot(pv - plank / 2.0);
            if d < 4.5 {
                // A countersunk head: a dull steel disc, lit top-left, with a slot.
                let k = edge((d - 3.4) * s);
                let (du, dv) = (u - sx, pv - plank / 2.0);
                let lit = (1.0 - 0.12 * (du + dv) as f32).clamp(0.7, 1.2);
                let slot = (du * 0.35 - dv).abs() < 0.6 && d < 3.0;
                let head = if slot {
                    [62.0, 60.0, 58.0]
                } else {
                    scale([150.0, 146.0, 138.0], lit)
                };
                c = lerp(c, head, k);
            }
        }
        Some((c, 1.0))
    });
}

fn paint_mat(cv: &mut Canvas, mat: &Box2, s: f64, seed: u64) {
    let r = 12.0 * s;
    let (lo, hi) = mat.bounds(2.0);
    shadow(cv, lo, hi, [2.0 * s, 3.0 * s], 3.0 * s, 0.35, |x, y| {
        mat.sd(x, y, r)
    });
    let border = 7.0 * s;
    cv.layer(lo, hi, |x, y, _| {
        let sd = mat.sd(x, y, r);
        let a = edge(sd);
        if a <= 0.0 {
            return None;
        }
        let (u, v) = (x / s, y / s);
        let fibre = fbm(seed ^ 0x3a7, u / 2.0, v / 2.0, 2) as f32;
        let wet = smoothstep(0.45, 0.75, fbm(seed ^ 0x77, u / 90.0, v / 90.0, 3)) as f32;
        let mut c = scale(MAT, 0.96 + 0.07 * fibre);
        c = scale(c, 1.0 - 0.22 * wet);
        let inset = -sd;
        if inset < border {
            c = scale(MAT_EDGE, 0.92 + 0.16 * fibre);
            // Stitches along the binding.
            let [lu, lv] = mat.local(x, y);
            let along = if mat.half[0] - lu.abs() < mat.half[1] - lv.abs() {
                lv
            } else {
                lu
            };
            let on = (along / s / 7.0).rem_euclid(1.0) < 0.55;
            if on && (inset - border * 0.5).abs() < 0.8 * s {
                c = [150.0, 170.0, 140.0];
            }
            if inset < 1.5 * s {
                c = scale(c, 1.15);
            }
        }
        Some((c, a))
    });
}

#[allow(clippy::too_many_arguments)]
fn paint_tray(
    cv: &mut Canvas,
    b: &Box2,
    home: Option<&Box2>,
    cell: f64,
    rows: usize,
    cols: usize,
    seedlings: &[[f64; 2]],
    s: f64,
    seed: u64,
) {
    let r = 6.0 * s;
    let (lo, hi) = b.bounds(2.0);
    shadow(cv, lo, hi, [4.0 * s, 5.0 * s], 4.0 * s, 0.45, |x, y| {
        b.sd(x, y, r)
    });
    let (gw, gh) = (cols as f64 * cell / 2.0, rows as f64 * cell / 2.0);
    let wall = 2.2 * s;
    let sown = !seedlings.is_empty();
    cv.layer(lo, hi, |x, y, _| {
        let sd = b.sd(x, y, r);
        let a = edge(sd);
        if a <= 0.0 {
            return None;
        }
        let [u, v] = b.local(x, y);
        // Where the textures are sampled: here, or on the tray at home.
        let (x, y) = match home {
            None => (x, y),
            Some(h) => {
                let p = h.world(u, v);
                (p[0], p[1])
            }
        };
        let grain = value_noise(seed ^ 0x91, x / (2.0 * s), y / (2.0 * s)) as f32;
        // Outer rim: lit on the top and left edges.
        if u.abs() > gw || v.abs() > gh {
            let lit = if -v > gh || -u > gw { 1.25 } else { 0.8 };
            let lip = if -sd < 1.5 * s { 1.2 } else { 1.0 };
            return Some((scale(PLASTIC, lit * lip * (0.98 + 0.04 * grain)), a));
        }
        let (cu, cvv) = ((u + gw).rem_euclid(cell), (v + gh).rem_euclid(cell));
        let to_wall = cu.min(cell - cu).min(cvv).min(cell - cvv);
        if to_wall < wall {
            let lit = if cu < wall || cvv < wall { 0.85 } else { 1.3 };
            return Some((scale(PLASTIC, lit * (0.98 + 0.04 * grain)), a));
        }
        // Soil in the cell, darker down by the walls and in the shadow of the top-left walls.
        let depth = smoothstep(0.0, 7.0 * s, to_wall - wall) as f32;
        let shade_tl = smoothstep(0.0, 6.0 * s, cu.min(cvv) - wall) as f32;
        let n = fbm(seed ^ 0x50, x / (3.0 * s), y / (3.0 * s), 3) as f32;
        let mut c = lerp(SOIL_WET, SOIL, n * 1.3 - 0.1);
        if sown {
            c = scale(c, 1.08);
        }
        let speck = value_noise(seed ^ 0x9e, x / (1.3 * s), y / (1.3 * s));
        if speck > 0.86 {
            c = lerp(c, PERLITE, smoothstep(0.86, 0.93, speck) as f32);
        }
        let k = (0.55 + 0.45 * depth) * (0.7 + 0.3 * shade_tl);
        Some((scale(c, k), a))
    });
    let mut rng = XorShift::new(seed ^ 0x1eaf);
    for p in seedlings {
        let angle = rng.range(0.0, std::f64::consts::PI);
        let size = rng.range(0.75, 1.2) * s;
        paint_seedling(cv, *p, angle, size, &mut rng);
    }
}

/// Two seed leaves on a short stem, seen from above.
fn paint_seedling(cv: &mut Canvas, c: [f64; 2], angle: f64, size: f64, rng: &mut XorShift) {
    let len = 7.5 * size;
    let wid = 3.6 * size;
    let jitter = [rng.range(-2.0, 2.0) * size, rng.range(-2.0, 2.0) * size];
    let c = [c[0] + jitter[0], c[1] + jitter[1]];
    for side in [-1.0, 1.0] {
        let a = angle + rng.range(-0.25, 0.25);
        let (sa, ca) = a.sin_cos();
        let leaf = Box2 {
            center: [c[0] + side * ca * len * 0.55, c[1] + side * sa * len * 0.55],
            half: [len * 0.55, wid],
            angle: a,
        };
        let (lo, hi) = leaf.bounds(2.0);
        shadow(
            cv,
            lo,
            hi,
            [1.5 * size, 2.0 * size],
            1.2 * size,
            0.4,
            |x, y| leaf_sd(&leaf, x, y),
        );
        cv.layer(lo, hi, |x, y, _| {
            let sd = leaf_sd(&leaf, x, y);
            let a = edge(sd);
            (a > 0.0).then(|| {
                let [u, v] = leaf.local(x, y);
                let vein = 1.0 - smoothstep(0.0, 0.9 * size, v.abs()) as f32;
                let light = 0.9 + 0.25 * (-v / wid).clamp(-1.0, 1.0) as f32;
                let tip = smoothstep(-leaf.half[0], leaf.half[0], u * side) as f32;
                let mut col = lerp(LEAF, LEAF_DARK, 0.25 * tip);
                col = lerp(col, [150.0, 200.0, 110.0], 0.35 * vein);
                (scale(col, light), a)
            })
        });
    }
}

/// An ellipse-ish leaf: a rounded box pinched to points at both ends.
fn leaf_sd(b: &Box2, x: f64, y: f64) -> f64 {
    let [u, v] = b.local(x, y);
    let k = (u / b.half[0]).clamp(-1.0, 1.0);
    let half_w = b.half[1] * (1.0 - k * k).max(0.0).sqrt();
    (v.abs() - half_w).max(u.abs() - b.half[0])
}

fn paint_stake(cv: &mut Canvas, b: &Box2, outline: &[[f64; 2]], s: f64) {
    let (lo, hi) = Patch::bounds(outline, 2.0);
    shadow(cv, lo, hi, [2.0 * s, 2.5 * s], 1.8 * s, 0.4, |x, y| {
        polygon_sd(outline, x, y)
    });
    cv.layer(lo, hi, |x, y, _| {
        let sd = polygon_sd(outline, x, y);
        let a = edge(sd);
        (a > 0.0).then(|| {
            let [_, v] = b.local(x, y);
            let light = 1.0 - 0.08 * (v / b.half[1]) as f32;
            let rim = if -sd < 1.2 * s { 0.9 } else { 1.0 };
            (scale(STAKE, light * rim), a)
        })
    });
}

fn paint_trowel(cv: &mut Canvas, g: &Geometry, s: f64, seed: u64) {
    let (tip, dir) = g.trowel_axis;
    let angle = dir[1].atan2(dir[0]);
    let at = |t: f64| [tip[0] + dir[0] * t * s, tip[1] + dir[1] * t * s];
    let part = |t0: f64, t1: f64, half: f64| Box2 {
        center: at((t0 + t1) / 2.0),
        half: [(t1 - t0) / 2.0 * s, half * s],
        angle,
    };
    let tang = part(NECK_T - 2.0, 100.0, 2.6);
    let ferrule = part(100.0, 109.0, 7.5);
    let handle = part(108.0, HANDLE_END_T, 9.0);
    let blade = &g.layout.trowel.blade;
    // One shadow for the whole tool; the handle stands higher than the blade.
    let (lo, hi) = Patch::bounds(&[tip, at(HANDLE_END_T)], 26.0 * s);
    shadow(cv, lo, hi, [3.0 * s, 4.0 * s], 2.5 * s, 0.42, |x, y| {
        polygon_sd(blade, x, y)
            .min(tang.sd(x, y, 1.0))
            .min(ferrule.sd(x, y, 2.0 * s))
            .min(handle.sd(x, y, 8.0 * s) - 1.5 * s)
    });
    let (blo, bhi) = Patch::bounds(blade, 2.0);
    let blade_box = part(0.0, NECK_T, SHOULDER_W);
    cv.layer(blo, bhi, |x, y, _| {
        let sd = polygon_sd(blade, x, y);
        let a = edge(sd);
        (a > 0.0).then(|| {
            let [u, v] = blade_box.local(x, y);
            // A dished blade: bright ridge along the middle, darker towards the edges.
            let across = (v / (SHOULDER_W * s)).clamp(-1.0, 1.0) as f32;
            let ridge = 1.0 - across.abs();
            let brushed = value_noise(seed ^ 0x7a, u / (5.0 * s), v / (0.6 * s)) as f32;
            let k = 0.78 + 0.3 * ridge + 0.08 * brushed - 0.1 * across;
            let rim = if -sd < 1.3 * s { 0.82 } else { 1.0 };
            (scale(STEEL, k * rim), a)
        })
    });
    for (b, col, r) in [
        (tang, scale(STEEL, 0.7), 1.0),
        (ferrule, BRASS, 2.0 * s),
        (handle, HANDLE, 8.0 * s),
    ] {
        let (lo, hi) = b.bounds(2.0);
        cv.layer(lo, hi, |x, y, _| {
            let sd = b.sd(x, y, r);
            let a = edge(sd);
            (a > 0.0).then(|| {
                let [u, v] = b.local(x, y);
                let across = (v / b.half[1]).clamp(-1.0, 1.0) as f32;
                let round = (1.0 - across * across).sqrt();
                let grain = if col == HANDLE {
                    fbm(seed ^ 0x4d, u / (14.0 * s), v / (1.2 * s), 3) as f32
                } else {
                    0.5
                };
                let k = 0.55 + 0.5 * round - 0.15 * across + 0.2 * (grain - 0.5);
                (scale(col, k), a)
            })
        });
    }
}

#[allow(clippy::too_many_arguments)]
fn paint_pot(
    cv: &mut Canvas,
    c: [f64; 2],
    r: f64,
    soil_r: f64,
    leaves: usize,
    s: f64,
    seed: u64,
    rng: &mut XorShift,
) {
    let disc = |x: f64, y: f64| (x - c[0]).hypot(y - c[1]) - r;
    let lo = [c[0] - r, c[1] - r];
    let hi = [c[0] + r, c[1] + r];
    shadow(
        cv,
        lo,
        hi,
        [0.3 * r + 2.0 * s, 0.38 * r + 2.0 * s],
        0.2 * r + 2.0 * s,
        0.5,
        disc,
    );
    let light = [-0.6f64, -0.8f64];
    let lip_in = r * 0.86;
    cv.layer(lo, hi, |x, y, _| {
        let (dx, dy) = (x - c[0], y - c[1]);
        let d = dx.hypot(dy);
        let a = edge(d - r);
        if a <= 0.0 {
            return None;
        }
        let (nx, ny) = if d > 1e-9 {
            (dx / d, dy / d)
        } else {
            (0.0, 0.0)
        };
        let facing = (nx * light[0] + ny * light[1]) as f32; // 1 where the rim faces the light
        let mottle = fbm(seed ^ 0xc1a, dx / (7.0 * s), dy / (7.0 * s), 3) as f32;
        let bloom = smoothstep(
            0.62,
            0.8,
            fbm(seed ^ 0x5a1, dx / (16.0 * s), dy / (16.0 * s), 2),
        ) as f32;
        let clay = lerp(
            scale(CLAY, 0.92 + 0.16 * mottle),
            [214.0, 190.0, 170.0],
            0.3 * bloom,
        );
        if d > lip_in {
            // The lip: a rounded top, lit on the side facing the light.
            let t = ((d - lip_in) / (r - lip_in)) as f32; // 0 inner edge, 1 outer edge
            let round = 1.0 - (2.0 * t - 1.0).powi(2);
            let k = 0.78 + 0.22 * round + 0.14 * facing * t;
            return Some((scale(clay, k), a));
        }
        if d > soil_r {
            // Inner wall going down: lit on the far side from the light.
            let t = ((d - soil_r) / (lip_in - soil_r)) as f32; // 0 at the soil, 1 at the lip
            let k = 0.55 + 0.25 * t - 0.28 * facing;
            return Some((lerp(scale(CLAY_DARK, k), scale(clay, k), 0.4 * t), a));
        }
        // Soil, with the rim's shadow along the side towards the light.
        let n = fbm(seed ^ 0x501, dx / (2.5 * s), dy / (2.5 * s), 3) as f32;
        let mut col = lerp(SOIL_WET, SOIL, n * 1.4 - 0.2);
        let speck = value_noise(seed ^ 0x9f, dx / (1.3 * s), dy / (1.3 * s));
        if speck > 0.87 {
            col = lerp(col, PERLITE, smoothstep(0.87, 0.94, speck) as f32 * 0.8);
        }
        let sx = c[0] + light[0] * soil_r * 0.22;
        let sy = c[1] + light[1] * soil_r * 0.22;
        let in_shadow = (x - sx).hypot(y - sy) > soil_r * 0.96;
        let k = if in_shadow { 0.55 } else { 0.95 };
        Some((scale(col, k), 1.0))
    });
    // A small plant: leaves radiating from the middle. (Textures here and above are in the
    // pot's own coordinates, so they move with it when it slides.)
    let start = rng.range(0.0, std::f64::consts::TAU);
    for k in 0..leaves {
        let a = start + k as f64 * std::f64::consts::TAU / leaves as f64 + rng.range(-0.3, 0.3);
        let len = soil_r * rng.range(0.5, 0.75);
        let (sa, ca) = a.sin_cos();
        let leaf = Box2 {
            center: [c[0] + ca * len * 0.55, c[1] + sa * len * 0.55],
            half: [len * 0.55, len * 0.26],
            angle: a,
        };
        let (lo, hi) = leaf.bounds(2.0);
        shadow(cv, lo, hi, [2.0 * s, 2.6 * s], 1.6 * s, 0.45, |x, y| {
            leaf_sd(&leaf, x, y)
        });
        cv.layer(lo, hi, |x, y, _| {
            let sd = leaf_sd(&leaf, x, y);
            let al = edge(sd);
            (al > 0.0).then(|| {
                let [u, v] = leaf.local(x, y);
                let vein = 1.0 - smoothstep(0.0, 0.9 * s, v.abs()) as f32;
                let side = 0.88 + 0.22 * (-v / leaf.half[1]).clamp(-1.0, 1.0) as f32;
                let outer = smoothstep(-leaf.half[0], leaf.half[0], u) as f32;
                let mut col = lerp(LEAF_DARK, LEAF, 0.4 + 0.5 * outer);
                col = lerp(col, [160.0, 206.0, 120.0], 0.3 * vein);
                (scale(col, side), al)
            })
        });
    }
}
