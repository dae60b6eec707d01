//! Animated GIF output for the demo clips: the first frame whole, with a palette made by median
//! cut; every later frame only the box of pixels that changed, with its own palette made from
//! them, the unchanged pixels in it transparent. The bench stays still, so a clip costs about
//! one full picture plus the moving thing once per frame, and the moving thing keeps its colours
//! closely (a tracker follows it to within about a tenth of a pixel of the unreduced painting).

use std::collections::HashMap;

use crate::raster::Image;

/// Palette index kept for "unchanged" pixels.
const CLEAR: u8 = 255;

/// Up to `n` colours standing for `pixels`: boxes of colours split at the median of their
/// widest channel, the box with the most spread (range² × count) first; each colour the
/// rounded mean of its box.
pub fn median_cut(pixels: &[[u8; 3]], n: usize) -> Vec<[u8; 3]> {
    let mut boxes: Vec<Vec<[u8; 3]>> = vec![pixels.to_vec()];
    let spread = |b: &[[u8; 3]]| -> (u64, usize) {
        let mut best = (0u64, 0usize);
        for ch in 0..3 {
            let lo = b.iter().map(|p| p[ch]).min().unwrap_or(0);
            let hi = b.iter().map(|p| p[ch]).max().unwrap_or(0);
            let r = u64::from(hi - lo);
            if r * r * b.len() as u64 > best.0 {
                best = (r * r * b.len() as u64, ch);
            }
        }
        best
    };
    while boxes.len() < n {
        let (k, (score, ch)) = boxes
            .iter()
            .enumerate()
            .map(|(k, b)| (k, spread(b)))
            .max_by(|a, b| a.1.0.cmp(&b.1.0).then(b.0.cmp(&a.0)))
            .expect("at least one box");
        if score == 0 {
            break;
        }
        let mut b = boxes.swap_remove(k);
        b.sort_unstable_by_key(|p| (p[ch], *p));
        let mut mid = b.len() / 2;
        // Keep equal values together, so both halves have some spread to split later.
        while mid > 1 && b[mid - 1][ch] == b[mid][ch] {
            mid -= 1;
        }
        let upper = b.split_off(mid.max(1));
        boxes.push(b);
        boxes.push(upper);
    }
    let mut out: Vec<[u8; 3]> = boxes
        .iter()
        .filter(|b| !b.is_empty())
        .map(|b| {
            let mut sum = [0u64; 3];
            for p in b {
                for ch in 0..3 {
                    sum[ch] += u64::from(p[ch]);
                }
            }
            let n = b.len() as u64;
            [0, 1, 2].map(|ch| ((sum[ch] + n / 2) / n) as u8)
        })
        .collect();
    out.sort_unstable();
    out.dedup();
    out
}

/// Maps colours to the nearest palette entry (distance weighted towards green, as the eye and
/// grey-level conversions weigh it), remembering each answer.
pub struct Mapper {
    palette: Vec<[u8; 3]>,
    seen: HashMap<[u8; 3], u8>,
}

impl Mapper {
    pub fn new(palette: Vec<[u8; 3]>) -> Self {
        assert!(palette.len() <= CLEAR as usize);
        Self {
            palette,
            seen: HashMap::new(),
        }
    }

    pub fn index(&mut self, c: [u8; 3]) -> u8 {
        if let Some(&k) = self.seen.get(&c) {
            return k;
        }
        let d = |p: &[u8; 3]| {
            let e = |k: usize, w: i32| w * (i32::from(p[k]) - i32::from(c[k])).pow(2);
            e(0, 3) + e(1, 6) + e(2, 1)
        };
        let (k, _) = self
            .palette
            .iter()
            .enumerate()
            .min_by_key(|(k, p)| (d(p), *k))
            .expect("a palette");
        self.seen.insert(c, k as u8);
        k as u8
    }

    pub fn indices(&mut self, img: &Image) -> Vec<u8> {
        img.data
            .chunks_exact(4)
            .map(|p| self.index([p[0], p[1], p[2]]))
            .collect()
    }

    pub fn palette_bytes(&self) -> Vec<u8> {
        let mut out: Vec<u8> = self.palette.iter().flatten().copied().collect();
        out.resize(256 * 3, 0);
        out
    }
}

/// Writes an animated GIF of `frames`, `delay_cs` hundredths of a second apart, looping. The
/// first frame is whole, with a palette made from `palette_frames`; each later frame holds the
/// box of pixels that changed, with its own palette made from them (so the moving thing keeps
/// its colours closely), the unchanged pixels in the box transparent.
pub fn encode(
    frames: &[Image],
    palette_frames: &[usize],
    delay_cs: u16,
) -> Result<Vec<u8>, gif::EncodingError> {
    let (width, height) = (frames[0].width, frames[0].height);
    let (w16, h16) = (width as u16, height as u16);
    let rgb = |f: &Image, i: usize, j: usize| {
        let k = 4 * (j * width + i);
        [f.data[k], f.data[k + 1], f.data[k + 2]]
    };
    let mut sample = Vec::new();
    for &k in palette_frames {
        sample.extend(frames[k].data.chunks_exact(4).map(|p| [p[0], p[1], p[2]]));
    }
    let mut global = Mapper::new(median_cut(&sample, CLEAR as usize));
    let mut out = Vec::new();
    {
        let mut enc = gif::Encoder::new(&mut out, w16, h16, &global.palette_bytes())?;
        enc.set_repeat(gif::Repeat::Infinite)?;
        // What a decoder shows after each frame: the colours written so far.
        let mut shown: Vec<[u8; 3]> = Vec::new();
        for (k, img) in frames.iter().enumerate() {
            let mut f = gif::Frame {
                delay: delay_cs,
                dispose: gif::DisposalMethod::Keep,
                ..gif::Frame::default()
            };
            if k == 0 {
                let idx = global.indices(img);
                shown = idx.iter().map(|&c| global.palette[c as usize]).collect();
                f.width = w16;
                f.height = h16;
                f.buffer = idx.into();
                enc.write_frame(&f)?;
                continue;
            }
            let prev = &frames[k - 1];
            let (mut x0, mut y0, mut x1, mut y1) = (width, height, 0, 0);
            let mut changed = Vec::new();
            for j in 0..height {
                for i in 0..width {
                    if rgb(img, i, j) != rgb(prev, i, j) {
                        (x0, y0) = (x0.min(i), y0.min(j));
                        (x1, y1) = (x1.max(i), y1.max(j));
                        changed.push(rgb(img, i, j));
                    }
                }
            }
            if changed.is_empty() {
                // Nothing changed: one clear pixel.
                f.width = 1;
                f.height = 1;
                f.transparent = Some(CLEAR);
                f.buffer = vec![CLEAR].into();
                enc.write_frame(&f)?;
                continue;
            }
            let mut local = Mapper::new(median_cut(&changed, CLEAR as usize));
            let mut buf = Vec::with_capacity((x1 - x0 + 1) * (y1 - y0 + 1));
            for j in y0..=y1 {
                for i in x0..=x1 {
                    let c = rgb(img, i, j);
                    if c == rgb(prev, i, j) {
                        buf.push(CLEAR);
                    } else {
                        let m = local.index(c);
                        shown[j * width + i] = local.palette[m as usize];
                        buf.push(m);
                    }
                }
            }
            f.left = x0 as u16;
            f.top = y0 as u16;
            f.width = (x1 - x0 + 1) as u16;
            f.height = (y1 - y0 + 1) as u16;
            f.transparent = Some(CLEAR);
            f.palette = Some(local.palette_bytes());
            f.buffer = buf.into();
            enc.write_frame(&f)?;
        }
    }
    Ok(out)
}
