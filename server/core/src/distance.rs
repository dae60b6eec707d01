//! Exact Euclidean distance transforms of painted masks
//! (Felzenszwalb & Huttenlocher, "Distance Transforms of Sampled Functions", 2012).

use thiserror::Error;

/// What is wrong with a mask.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum MaskError {
    /// Width or height is zero.
    #[error("a mask must be at least 1x1 pixels")]
    Empty,
    /// The data length is not width × height.
    #[error("mask data has {got} entries, expected {expected}")]
    WrongLength {
        /// Entries given.
        got: usize,
        /// width × height.
        expected: usize,
    },
    /// No pixel is inside, so distances are undefined.
    #[error("the mask has no painted pixel")]
    NothingPainted,
}

/// A binary mask of width × height pixels, row-major, with at least one inside pixel.
#[derive(Debug, Clone, PartialEq)]
pub struct Mask {
    width: usize,
    height: usize,
    inside: Vec<bool>,
}

impl Mask {
    /// Checks and builds a mask; `inside[j * width + i]` is pixel (x = i, y = j).
    pub fn new(width: usize, height: usize, inside: Vec<bool>) -> Result<Self, MaskError> {
        if width == 0 || height == 0 {
            return Err(MaskError::Empty);
        }
        if inside.len() != width * height {
            return Err(MaskError::WrongLength {
                got: inside.len(),
                expected: width * height,
            });
        }
        if !inside.iter().any(|&b| b) {
            return Err(MaskError::NothingPainted);
        }
        Ok(Self {
            width,
            height,
            inside,
        })
    }
    /// The mean of the painted pixel centres; `None` when nothing is painted.
    pub fn centroid(&self) -> Option<[f64; 2]> {
        let (mut sx, mut sy, mut n) = (0.0, 0.0, 0.0);
        for (k, _) in self
            .inside
            .iter()
            .enumerate()
            .filter(|(_, inside)| **inside)
        {
            sx += (k % self.width) as f64;
            sy += (k / self.width) as f64;
            n += 1.0;
        }
        (n > 0.0).then(|| [sx / n, sy / n])
    }

    /// Width in pixels.
    pub fn width(&self) -> usize {
        self.width
    }
    /// Height in pixels.
    pub fn height(&self) -> usize {
        self.height
    }
    /// Whether pixel (x = i, y = j) is painted.
    pub fn is_inside(&self, i: usize, j: usize) -> bool {
        self.inside[j * self.width + i]
    }
    /// The row-major painted flags.
    pub fn data(&self) -> &[bool] {
        &self.inside
    }
}

/// Marks "no painted pixel in this direction" in `edt_at`'s per-pixel tables.
const NONE: u32 = u32::MAX;

/// Distance from every pixel centre to the nearest painted pixel centre, row-major (H, W), 0 inside.
///
/// Exact: every value is the correctly rounded square root of the exact integer squared
/// distance, for distances below 4096 px (beyond that, within f32 rounding). Linear time: first
/// the vertical distance to the nearest painted pixel of the same column (two sweeps over the
/// rows), then, per row, the lower envelope of the parabolas `g(i)² + (x − i)²`
/// (Felzenszwalb & Huttenlocher 2012, section 3), built and evaluated in exact integer
/// arithmetic. Runs on the calling thread; callers that need many maps parallelise over maps.
pub fn edt(mask: &Mask) -> Vec<f32> {
    let side = mask.width.max(mask.height);
    if side <= SMALL_SIDE {
        edt_small(mask)
    } else if side <= 1 << 20 {
        edt_large(mask)
    } else {
        edt_wide(mask)
    }
}

/// Largest mask side for [`edt_small`]: every squared distance on such a mask is at most
/// 2·(2^15 − 1)² < 2^31, so i32 lanes hold them all exactly.
const SMALL_SIDE: usize = 1 << 15;
/// [`edt_small`]'s "no painted pixel in this direction": real column distances are below
/// [`SMALL_SIDE`], so any value from this up means none; counting up from it over at most
/// 2^15 rows stays below 2^16, and clamping to it turns every "none" into one value.
const SMALL_FAR: u32 = 1 << 15;
/// f = g² of a column without a painted pixel in [`edt_small`]: `SMALL_FAR²`, above every real
/// g² (< 2^30), with room in i32 to add the prefilter's r² ≤ SMALL_REACH².
const SMALL_HUGE: i32 = 1 << 30;
/// Pixels written at a time when [`SmallRow::run`] fills a parabola's run: two AVX2 registers
/// of i32. A run's last write may spill past its end into the next run's pixels, which that
/// run then overwrites. Nearly all runs are shorter than this, so the fill loop nearly always
/// takes one turn and its exit is predicted (8 at a time mispredicted the exit for about one
/// run in two on the benchmark mask, and the whole transform took a third longer).
const FILL: usize = 16;

/// Masks up to [`SMALL_SIDE`] px on a side, the common case: the same scheme as [`edt_large`]
/// (and bit-identical to it, since both are exact), with the envelope held in i32 (products in
/// i64) and every per-pixel loop written so that it vectorises. Compiled twice, for baseline
/// x86-64 and for AVX2 (same source, integer arithmetic and IEEE square roots, so the same
/// bits), the AVX2 build chosen at run time.
fn edt_small(mask: &Mask) -> Vec<f32> {
    #[cfg(target_arch = "x86_64")]
    if std::arch::is_x86_feature_detected!("avx2") {
        // SAFETY: the CPU has AVX2 (checked just above).
        return unsafe { edt_small_avx2(mask) };
    }
    edt_small_body(mask)
}

/// [`edt_small_body`] compiled for AVX2.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
fn edt_small_avx2(mask: &Mask) -> Vec<f32> {
    edt_small_body(mask)
}

#[inline(always)]
fn edt_small_body(mask: &Mask) -> Vec<f32> {
    let (w, h) = (mask.width, mask.height);
    let inside = &mask.inside;
    // As in `edt_large`: `out` first holds each pixel's distance up to the nearest painted pixel
    // of its column at or above it (u32 bits), and row j becomes final only after its own
    // up-distances are read. All-ones where the pixel is not painted, zero where it is.
    let keep = |p: bool| u32::from(p).wrapping_sub(1);
    let mut out = vec![0.0f32; w * h];
    for (o, &p) in out[..w].iter_mut().zip(&inside[..w]) {
        *o = f32::from_bits(SMALL_FAR & keep(p));
    }
    for j in 1..h {
        let (above, rest) = out.split_at_mut(j * w);
        let above = &above[(j - 1) * w..];
        let ins = &inside[j * w..(j + 1) * w];
        for ((o, a), &p) in rest[..w].iter_mut().zip(above).zip(ins) {
            *o = f32::from_bits((a.to_bits() + 1) & keep(p));
        }
    }
    let mut down = vec![SMALL_FAR; w];
    let mut env = SmallRow::new(w);
    for j in (0..h).rev() {
        let row = &mut out[j * w..(j + 1) * w];
        let ins = &inside[j * w..(j + 1) * w];
        column_f(env.f_row(), &mut down, row, ins);
        env.run(row);
    }
    out
}

/// One row of [`edt_small`]'s bottom-up sweep: `down` becomes the distance down to the nearest
/// painted pixel at or below, and `f` the square of the nearer of it and `up`, clamped so that
/// "none" squares to [`SMALL_HUGE`]. A function of its own because slices passed as arguments
/// are known not to overlap, which lets the loop vectorise without run-time overlap checks.
#[inline(always)]
fn column_f(f: &mut [i32], down: &mut [u32], up: &[f32], inside: &[bool]) {
    let w = f.len();
    // Indexed over slices of one known length, so that the bounds checks go.
    let (down, up, inside) = (&mut down[..w], &up[..w], &inside[..w]);
    for i in 0..w {
        let dn = (down[i] + 1) & u32::from(inside[i]).wrapping_sub(1);
        down[i] = dn;
        let g = dn.min(up[i].to_bits()).min(SMALL_FAR);
        f[i] = (g * g) as i32;
    }
}

/// One parabola of [`SmallRow`]'s envelope: apex column v, A = f + v², and where it takes over
/// from its left neighbour, x ≥ num / (2·den). All fit i32 on a small mask: |num| < 2^31.
#[derive(Clone, Copy, Default)]
struct Piece {
    v: i32,
    a: i32,
    num: i32,
    den: i32,
}

/// How many neighbours on each side [`SmallRow`]'s prefilter compares a column with.
const SMALL_REACH: usize = 8;

/// Scratch for [`edt_small`]'s rows, reused across rows.
struct SmallRow {
    /// Mask width.
    w: usize,
    /// f = g² per column (`SMALL_HUGE`: none), after SMALL_REACH `SMALL_HUGE` columns of
    /// padding and followed by enough of them to end on a whole [`CHUNK`] plus SMALL_REACH.
    f: Vec<i32>,
    /// 1 where a column survives the prefilter, over whole [`CHUNK`]s.
    kept: Vec<u8>,
    /// The envelope, left to right (a stack while it is built).
    stack: Vec<Piece>,
    /// The row's exact squared distances, with [`FILL`] columns of room for the last spill.
    sq: Vec<i32>,
}

/// Columns per prefilter pass of [`SmallRow::run`]: the survivors of one pass are one u64.
const CHUNK: usize = 64;

impl SmallRow {
    fn new(w: usize) -> Self {
        Self {
            w,
            f: vec![SMALL_HUGE; w.div_ceil(CHUNK) * CHUNK + 2 * SMALL_REACH],
            kept: vec![0; w.div_ceil(CHUNK) * CHUNK],
            stack: vec![Piece::default(); w],
            sq: vec![0; w + FILL],
        }
    }

    /// The row's f values, to be filled before [`SmallRow::run`].
    #[inline(always)]
    fn f_row(&mut self) -> &mut [i32] {
        &mut self.f[SMALL_REACH..SMALL_REACH + self.w]
    }

    /// `out[x] = sqrt(min_i f[i] + (x − i)²)`, as [`Envelope::row`] computes it.
    #[inline(always)]
    fn run(&mut self, out: &mut [f32]) {
        const R: usize = SMALL_REACH;
        let w = self.w;
        let f = &self.f;
        let stack = &mut self.stack[..w];
        // The prefilter of `Envelope::row` (drop q when a column within R on each side is no
        // larger at q), reaching further since it is cheap here: a branch-free pass over whole
        // chunks, one slice per neighbour offset (all of one length, so no bounds checks),
        // which vectorises. Reach 8 leaves about a fifth of the columns of the benchmark mask,
        // against over a third for reach 3, and so fewer mispredicted pops below.
        let n = self.kept.len();
        let kept = &mut self.kept[..];
        let centre = &f[R..R + n];
        let near: [[&[i32]; 2]; R] =
            std::array::from_fn(|k| [&f[R - 1 - k..][..n], &f[R + 1 + k..][..n]]);
        for q in 0..n {
            let fq = centre[q];
            let mut left = false;
            let mut right = false;
            for (k, [l, r]) in near.iter().enumerate() {
                let rr = ((k + 1) * (k + 1)) as i32;
                left |= l[q] + rr <= fq;
                right |= r[q] + rr <= fq;
            }
            kept[q] = u8::from((fq != SMALL_HUGE) & !(left & right));
        }
        // The envelope as in `Envelope::row`: pop while the new parabola takes over no later
        // than the top one does, cross-multiplied in i64; `len` is the stack's size. The
        // survivors are visited as the set bits of one u64 per chunk, which costs a few
        // instructions per survivor instead of a store per column.
        let mut len = 0usize;
        let (chunks, _) = kept.as_chunks::<CHUNK>();
        for (c, chunk) in chunks.iter().enumerate() {
            // Eight bytes of 0/1 at a time: the product gathers byte i's bit into bit 56 + i.
            let (bytes, _) = chunk.as_chunks::<8>();
            let mut bits = 0u64;
            for (i, b) in bytes.iter().enumerate() {
                let gathered = u64::from_le_bytes(*b).wrapping_mul(0x0102_0408_1020_4080) >> 56;
                bits |= gathered << (8 * i);
            }
            while bits != 0 {
                let q = c * CHUNK + bits.trailing_zeros() as usize;
                bits &= bits - 1;
                let v = q as i32;
                // num = −1, den = 0 for the bottom of the stack: every test against it keeps
                // it (0 > −den, den ≥ 1), so the loop needs no "last one" test.
                let mut next = Piece {
                    v,
                    a: f[q + R] + v * v,
                    num: -1,
                    den: 0,
                };
                while len > 0 {
                    let p = stack[len - 1];
                    next.num = next.a - p.a;
                    next.den = next.v - p.v;
                    if i64::from(next.num) * i64::from(p.den)
                        > i64::from(p.num) * i64::from(next.den)
                    {
                        break;
                    }
                    len -= 1;
                }
                stack[len] = next;
                len += 1;
            }
        }
        // Parabola k owns the whole pixels from ⌈num_k / (2 den_k)⌉ up to where k + 1 takes
        // over; the f64 quotient has the exact ceiling (|num| < 2^31, den < 2^15, so a
        // quotient that is not whole is at least 2^-16 from one, far beyond the rounding).
        // The mask has a painted pixel, so every row has a column with a parabola, and the
        // column with the least f survives the prefilter (domination needs a smaller f).
        let sq = &mut self.sq[..w + FILL];
        let wf = w as f64;
        let start_of = |p: &Piece| {
            let t = (f64::from(p.num) / f64::from(2 * p.den)).clamp(0.0, wf);
            let c = t as u32;
            (c + u32::from(f64::from(c) < t)) as usize
        };
        let mut start = 0usize;
        for (k, p) in stack[..len].iter().enumerate() {
            let end = stack[..len].get(k + 1).map_or(w, start_of);
            let f = p.a - p.v * p.v;
            let mut x = start;
            while x < end {
                // Pixels past `end` get values of the wrong parabola (possibly wrapped), which
                // the next run overwrites; pixels before `end` are exact.
                for (l, o) in sq[x..x + FILL].iter_mut().enumerate() {
                    let d = (x + l) as i32 - p.v;
                    *o = d.wrapping_mul(d).wrapping_add(f);
                }
                x += FILL;
            }
            start = start.max(end);
        }
        // i32 → f32 rounds to nearest like the f64 → f32 of `Envelope::row`.
        for (o, &s) in out.iter_mut().zip(&sq[..w]) {
            *o = (s as f32).sqrt();
        }
    }
}

/// "No painted pixel in this direction" for [`edt_large`]'s column distances: counting up
/// from it stays below 2^32 for masks up to 2^20 px tall, so no saturation is needed.
const FAR: u32 = 1 << 31;

/// Masks up to 2^20 px on a side: u32 column distances, i64 envelope. Plain code, the
/// reference that the tests hold [`edt_small`] to (bit for bit) on small masks.
fn edt_large(mask: &Mask) -> Vec<f32> {
    let (w, h) = (mask.width, mask.height);
    let inside = &mask.inside;
    // All-ones where the pixel is not painted, zero where it is: branch-free, vectorisable.
    let keep = |p: bool| u32::from(p).wrapping_sub(1);
    // The output buffer first holds each pixel's distance up to the nearest painted pixel of
    // its column at or above it (u32 bits); row j becomes final distances only after its own
    // up-distances are read, so no second H×W buffer is needed.
    let mut out = vec![0.0f32; w * h];
    for (o, &p) in out[..w].iter_mut().zip(&inside[..w]) {
        *o = f32::from_bits(FAR & keep(p));
    }
    for j in 1..h {
        let (above, rest) = out.split_at_mut(j * w);
        let above = &above[(j - 1) * w..];
        let ins = &inside[j * w..(j + 1) * w];
        for ((o, a), &p) in rest[..w].iter_mut().zip(above).zip(ins) {
            *o = f32::from_bits((a.to_bits() + 1) & keep(p));
        }
    }
    // Bottom-up: `down` is the distance down to the nearest painted pixel at or below; the
    // nearer of up and down is the column's 1-D transform g, and f = g² feeds the envelope.
    let mut down = vec![FAR; w];
    let mut g = vec![0u32; w];
    let mut env = Envelope::<i64>::new(w);
    for j in (0..h).rev() {
        let row = &mut out[j * w..(j + 1) * w];
        let ins = &inside[j * w..(j + 1) * w];
        for (((gi, dn), o), &p) in g.iter_mut().zip(down.iter_mut()).zip(row.iter()).zip(ins) {
            *dn = (*dn + 1) & keep(p);
            *gi = (*dn).min(o.to_bits());
        }
        for (fi, &gi) in env.f_row().iter_mut().zip(&g) {
            *fi = if gi >= FAR {
                i64::HUGE
            } else {
                i64::from(gi) * i64::from(gi)
            };
        }
        env.row(row);
    }
    out
}

/// Masks over 2^20 px on a side (one very long row or column): u64 column distances, i128
/// envelope. Plain code; such masks are rare and big anyway.
fn edt_wide(mask: &Mask) -> Vec<f32> {
    let (w, h) = (mask.width, mask.height);
    let none = u64::MAX;
    let mut up = vec![none; w * h];
    for k in 0..w * h {
        up[k] = if mask.inside[k] {
            0
        } else if k >= w {
            up[k - w].saturating_add(1)
        } else {
            none
        };
    }
    let mut out = vec![0.0f32; w * h];
    let mut down = vec![none; w];
    let mut env = Envelope::<i128>::new(w);
    for j in (0..h).rev() {
        for (i, (dn, fi)) in down.iter_mut().zip(env.f_row().iter_mut()).enumerate() {
            *dn = if mask.inside[j * w + i] {
                0
            } else {
                dn.saturating_add(1)
            };
            let g = (*dn).min(up[j * w + i]);
            *fi = if g == none {
                i128::HUGE
            } else {
                i128::from(g) * i128::from(g)
            };
        }
        env.row(&mut out[j * w..(j + 1) * w]);
    }
    out
}

/// Integer type for the envelope: i64 is exact for masks up to 2^20 px on a side (squared
/// distances stay below 2^41 and the cross-multiplied comparisons below 2^62); i128 beyond.
trait Exact:
    Copy
    + Ord
    + From<i64>
    + std::ops::Add<Output = Self>
    + std::ops::Sub<Output = Self>
    + std::ops::Mul<Output = Self>
{
    /// Marks "no parabola": larger than any real g² yet safe to add small squares to.
    const HUGE: Self;
    /// Whether f64 division of the envelope's numerators by their denominators always has the
    /// exact ceiling (true for i64 here: |quotient| ≤ 2^20, denominators ≤ 2^21).
    const EXACT_QUOTIENT: bool;
    fn to_f64(self) -> f64;
}

impl Exact for i64 {
    const HUGE: Self = 1 << 61;
    const EXACT_QUOTIENT: bool = true;
    fn to_f64(self) -> f64 {
        self as f64
    }
}

impl Exact for i128 {
    const HUGE: Self = 1 << 100;
    const EXACT_QUOTIENT: bool = false;
    fn to_f64(self) -> f64 {
        self as f64
    }
}

/// One parabola f + (x − v)² on the lower envelope, with A = f + v², and where it takes over
/// from its left neighbour on the envelope: from x ≥ num / (2·den) on (num, den unused for the
/// first parabola).
#[derive(Clone, Copy)]
struct Parabola<T> {
    v: T,
    f: T,
    a: T,
    num: T,
    den: T,
}

/// How many neighbours on each side the envelope's prefilter compares a column with.
const DOMINATION_REACH: usize = 3;

/// Scratch for the exact lower envelope of one row, reused across rows.
struct Envelope<T> {
    /// f = g² per column (`T::HUGE`: no painted pixel in the column), with DOMINATION_REACH
    /// `HUGE` columns of padding on each side.
    f: Vec<T>,
    /// Columns that survive the prefilter, left to right.
    candidates: Vec<u32>,
    /// The parabolas of the envelope, left to right (a stack while it is built).
    stack: Vec<Parabola<T>>,
    /// `x as f64` for x in 0..w, so the per-pixel loop has no integer-to-float conversion.
    xs: Vec<f64>,
}

impl<T: Exact> Envelope<T> {
    fn new(w: usize) -> Self {
        Self {
            f: vec![T::HUGE; w + 2 * DOMINATION_REACH],
            candidates: vec![0; w],
            stack: Vec::with_capacity(w),
            xs: (0..w).map(|x| x as f64).collect(),
        }
    }

    /// The row's f values, to be filled before [`Envelope::row`].
    fn f_row(&mut self) -> &mut [T] {
        let w = self.xs.len();
        &mut self.f[DOMINATION_REACH..DOMINATION_REACH + w]
    }

    /// `out[x] = sqrt(min_i f[i] + (x − i)²)` over the columns with a parabola (at least one,
    /// since the mask has a painted pixel).
    fn row(&mut self, out: &mut [f32]) {
        const R: usize = DOMINATION_REACH;
        let f = &self.f;
        // Prefilter: parabola q can be left out when, at every whole x, another parabola is no
        // larger. A column p dominates q on the whole side of q that p lies on exactly when
        // f_p + (p − q)² ≤ f_q (their difference is linear in x, so checking x = q suffices);
        // so q is dropped when some column within DOMINATION_REACH on each side does that.
        // This removes about half the columns of a typical row before the (branchy) stack
        // pass. Kept columns are compacted without branches.
        let cand = &mut self.candidates;
        let mut n = 0usize;
        for (q, win) in f.windows(2 * R + 1).enumerate() {
            let fq = win[R];
            let mut left = false;
            let mut right = false;
            for r in 1..=R {
                let rr = T::from((r * r) as i64);
                left |= win[R - r] + rr <= fq;
                right |= win[R + r] + rr <= fq;
            }
            cand[n] = q as u32;
            n += usize::from((fq != T::HUGE) & !(left & right));
        }
        let stack = &mut self.stack;
        stack.clear();
        let zero = T::from(0);
        for &q in &cand[..n] {
            let fq = f[q as usize + R];
            let q = T::from(i64::from(q));
            let a = fq + q * q;
            // Pop the top parabola p while the new one q takes over from it no later than p
            // takes over from its own left neighbour: (A_q − A_p)/(q − v_p) <= num_p/den_p,
            // cross-multiplied (both denominators are positive).
            let mut entry = Parabola {
                v: q,
                f: fq,
                a,
                num: zero,
                den: zero,
            };
            while let Some(p) = stack.last() {
                entry.num = a - p.a;
                entry.den = q - p.v;
                if stack.len() == 1 || entry.num * p.den > p.num * entry.den {
                    break;
                }
                stack.pop();
            }
            stack.push(entry);
        }
        // Parabola k owns the whole pixels from ⌈num_k / (2 den_k)⌉ up to where k+1 takes over.
        // Fill each run with the exact squared distance (as f32, exact below 2^24), then take
        // all square roots of the row in one vectorised pass.
        let w = out.len();
        let mut start = 0usize;
        for (k, p) in stack.iter().enumerate() {
            let end = stack
                .get(k + 1)
                .map_or(w, |n| takeover(n.num, n.den + n.den, w));
            if end > start {
                let (v, f) = (p.v.to_f64(), p.f.to_f64());
                for (o, &x) in out[start..end].iter_mut().zip(&self.xs[start..end]) {
                    let d = x - v;
                    *o = (d * d + f) as f32;
                }
                start = end;
            }
        }
        for o in out.iter_mut() {
            *o = o.sqrt();
        }
    }
}

/// The smallest whole x in [0, w] with x · den ≥ num (den > 0): ⌈num / den⌉, clamped.
fn takeover<T: Exact>(num: T, den: T, w: usize) -> usize {
    let t = num.to_f64() / den.to_f64();
    if t <= 0.0 {
        return 0;
    }
    if t >= w as f64 {
        return w;
    }
    // Ceiling by hand (f64::ceil is a library call on baseline x86-64); 0 < t < w here.
    let mut c = t as i64;
    if (c as f64) < t {
        c += 1;
    }
    if !T::EXACT_QUOTIENT {
        // The rounded quotient can be one off near a whole number: settle it exactly.
        while c > 0 && T::from(c - 1) * den >= num {
            c -= 1;
        }
        while T::from(c) * den < num {
            c += 1;
        }
    }
    (c.max(0) as usize).min(w)
}

/// Exact distance from each query point `(xs[i], ys[j])` to the nearest painted pixel centre;
/// the result is row-major (ys.len(), xs.len()). Query points may lie anywhere, also off the grid.
///
/// The same separable scheme as [`edt`], at arbitrary positions: for each mask column the
/// squared vertical distance from each query y to the nearest painted pixel of that column
/// (found in O(1) from per-pixel "nearest painted at or above / at or below" tables), then for
/// each query row the lower envelope of the parabolas `f_i + (x − i)²` over the columns,
/// evaluated at every query x. `xs` may be in any order; ascending `xs` take a linear walk,
/// others a binary search per point. Exact up to f64 rounding. A NaN coordinate gives NaN, an
/// infinite one infinity. Cost O(W·H + ys.len()·(W + xs.len())) on the calling thread.
pub fn edt_at(mask: &Mask, xs: &[f64], ys: &[f64]) -> Vec<f64> {
    let (w, h) = (mask.width, mask.height);
    let mut out = vec![0.0f64; xs.len() * ys.len()];
    if out.is_empty() {
        return out;
    }
    // above[j*w+i]: the largest painted row ≤ j in column i; below: the smallest ≥ j.
    let mut above = vec![NONE; w * h];
    let mut below = vec![NONE; w * h];
    for k in 0..w * h {
        above[k] = if mask.inside[k] {
            (k / w) as u32
        } else if k >= w {
            above[k - w]
        } else {
            NONE
        };
    }
    for k in (0..w * h).rev() {
        below[k] = if mask.inside[k] {
            (k / w) as u32
        } else if k + w < w * h {
            below[k + w]
        } else {
            NONE
        };
    }
    // Only columns with a painted pixel carry a parabola, for every query row alike.
    let cols: Vec<usize> = (0..w).filter(|&i| below[i] != NONE).collect();
    let m = cols.len();
    let colx: Vec<f64> = cols.iter().map(|&i| i as f64).collect();
    let ascending = xs.windows(2).all(|p| p[0] <= p[1]);
    const R: usize = DOMINATION_REACH;
    // f per painted column, padded with R infinite entries on each side for the prefilter.
    let mut f = vec![f64::INFINITY; m + 2 * R];
    let mut cand: Vec<usize> = vec![0; m];
    let mut stack: Vec<Parabola<f64>> = Vec::with_capacity(m);
    let mut z: Vec<f64> = Vec::with_capacity(m);
    let last_row = (h - 1) as f64;
    for (&y, row) in ys.iter().zip(out.chunks_mut(xs.len())) {
        if y.is_nan() || y.is_infinite() {
            row.fill(if y.is_nan() { f64::NAN } else { f64::INFINITY });
            continue;
        }
        // Rows of the nearest candidates: at or above y, and at or below y.
        let (up_row, down_row) = if y < 0.0 {
            (None, Some(0))
        } else if y > last_row {
            (Some(h - 1), None)
        } else {
            (Some(y.floor() as usize), Some(y.ceil() as usize))
        };
        for (fk, &i) in f[R..R + m].iter_mut().zip(&cols) {
            let mut best = f64::INFINITY;
            if let Some(r) = up_row {
                let p = above[r * w + i];
                if p != NONE {
                    let d = y - f64::from(p);
                    best = d * d;
                }
            }
            if let Some(r) = down_row {
                let p = below[r * w + i];
                if p != NONE {
                    let d = f64::from(p) - y;
                    best = best.min(d * d);
                }
            }
            *fk = best;
        }
        // Prefilter as in `edt`: drop parabolas that a neighbour on each side is no larger than
        // everywhere on that side (f_p + (x_p − x_q)² ≤ f_q).
        let mut n = 0usize;
        for k in 0..m {
            let (fq, xq) = (f[R + k], colx[k]);
            let mut left = false;
            let mut right = false;
            for r in 1..=R.min(k) {
                let d = xq - colx[k - r];
                left |= f[R + k - r] + d * d <= fq;
            }
            for r in 1..=R.min(m - 1 - k) {
                let d = colx[k + r] - xq;
                right |= f[R + k + r] + d * d <= fq;
            }
            cand[n] = k;
            n += usize::from(!(left & right));
        }
        // Lower envelope (F&H 2012, algorithm DT(f)), popping by cross-multiplication; the
        // take-over points z are divided out once at the end.
        stack.clear();
        for &k in &cand[..n] {
            let (q, fq) = (colx[k], f[R + k]);
            let a = fq + q * q;
            let mut entry = Parabola {
                v: q,
                f: fq,
                a,
                num: 0.0,
                den: 0.0,
            };
            while let Some(p) = stack.last() {
                entry.num = a - p.a;
                entry.den = q - p.v;
                if stack.len() == 1 || entry.num * p.den > p.num * entry.den {
                    break;
                }
                stack.pop();
            }
            stack.push(entry);
        }
        z.clear();
        z.push(f64::NEG_INFINITY);
        z.extend(stack[1..].iter().map(|p| p.num / (2.0 * p.den)));
        let eval = |k: usize, x: f64| {
            let d = x - stack[k].v;
            (d * d + stack[k].f).sqrt()
        };
        if ascending {
            let mut k = 0usize;
            for (o, &x) in row.iter_mut().zip(xs) {
                while k + 1 < z.len() && z[k + 1] <= x {
                    k += 1;
                }
                *o = eval(k, x);
            }
        } else {
            for (o, &x) in row.iter_mut().zip(xs) {
                *o = eval(z[1..].partition_point(|&b| b <= x), x);
            }
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;
    use serde_json::Value;

    /// The centroid is the mean of the painted pixel centres (x = i, y = j).
    #[test]
    fn mask_centroid_is_the_mean_of_painted_centres() {
        let mut inside = vec![false; 5 * 4];
        inside[4 + 5] = true; // (4, 1)
        inside[3 * 5] = true; // (0, 3)
        let m = Mask::new(5, 4, inside).expect("mask");
        assert_eq!(m.centroid(), Some([2.0, 2.0]));
    }

    /// The obvious O(N·M) reference: nearest painted pixel centre by exhaustive search.
    fn brute(mask: &Mask, x: f64, y: f64) -> f64 {
        let mut best = f64::INFINITY;
        for j in 0..mask.height() {
            for i in 0..mask.width() {
                if mask.is_inside(i, j) {
                    best = best.min((x - i as f64).hypot(y - j as f64));
                }
            }
        }
        best
    }

    fn mask_from_rows(rows: &[&str]) -> Mask {
        let w = rows[0].len();
        let inside = rows
            .iter()
            .flat_map(|r| r.bytes().map(|b| b == b'1'))
            .collect();
        Mask::new(w, rows.len(), inside).unwrap()
    }

    fn reference() -> Value {
        serde_json::from_str(include_str!(concat!(
            env!("CARGO_MANIFEST_DIR"),
            "/../../tests/reference/edt_scipy.json"
        )))
        .unwrap()
    }

    fn case_mask(case: &Value) -> Mask {
        let rows: Vec<&str> = case["rows"]
            .as_array()
            .unwrap()
            .iter()
            .map(|r| r.as_str().unwrap())
            .collect();
        mask_from_rows(&rows)
    }

    /// Outside reference: scipy 1.17 `scipy.ndimage.distance_transform_edt(~painted)` on random
    /// masks (tests/reference/gen_geometry.py); scipy measures from nonzero entries to the nearest
    /// zero, hence the negation. Both `edt` (f32) and `edt_at` on the pixel grid (f64).
    #[test]
    fn matches_scipy_distance_transform_edt() {
        let data = reference();
        for case in data["cases"].as_array().unwrap() {
            let name = case["name"].as_str().unwrap();
            let mask = case_mask(case);
            let want: Vec<f64> = case["distance"]
                .as_array()
                .unwrap()
                .iter()
                .map(|v| v.as_f64().unwrap())
                .collect();
            let got = edt(&mask);
            let xs: Vec<f64> = (0..mask.width()).map(|i| i as f64).collect();
            let ys: Vec<f64> = (0..mask.height()).map(|j| j as f64).collect();
            let got_at = edt_at(&mask, &xs, &ys);
            assert_eq!(got.len(), want.len());
            for k in 0..want.len() {
                assert!(
                    (f64::from(got[k]) - want[k]).abs() <= 1e-4
                        && (f64::from(got[k]) - want[k]).abs() <= 1e-6 * want[k].max(1.0),
                    "{name}[{k}]: {} vs scipy {}",
                    got[k],
                    want[k]
                );
                assert!(
                    (got_at[k] - want[k]).abs() <= 1e-12 * want[k].max(1.0),
                    "{name}[{k}]: {} vs scipy {}",
                    got_at[k],
                    want[k]
                );
            }
        }
    }

    /// The worked example in the docstring of `scipy.ndimage.distance_transform_edt` (the 5×5
    /// array `a`; distances from its nonzero entries to its zeros, printed to 4 decimals), read
    /// from the installed scipy's docstring by gen_geometry.py; its zeros are our painted pixels.
    #[test]
    fn matches_scipy_docstring_example() {
        let data = reference();
        let case = &data["docstring_example"];
        let mask = case_mask(case);
        assert_eq!(
            mask_from_rows(&["10000", "11000", "10000", "10001", "10011"]),
            mask
        );
        let got = edt(&mask);
        for key in ["distance", "documented_distance"] {
            let want = case[key].as_array().unwrap();
            for (g, w) in got.iter().zip(want) {
                assert!(
                    (f64::from(*g) - w.as_f64().unwrap()).abs() <= 0.5e-4 + 1e-7,
                    "{key}: {g} vs {w}"
                );
            }
        }
        assert_eq!(got[4], 3.0);
        assert_eq!(got[3], 5f32.sqrt());
    }

    #[test]
    fn mask_errors() {
        assert_eq!(Mask::new(0, 3, vec![]), Err(MaskError::Empty));
        assert_eq!(
            Mask::new(2, 2, vec![true; 3]),
            Err(MaskError::WrongLength {
                got: 3,
                expected: 4
            })
        );
        assert_eq!(
            Mask::new(2, 1, vec![false; 2]),
            Err(MaskError::NothingPainted)
        );
    }

    #[test]
    fn single_row_and_column_and_query_edges() {
        let row = mask_from_rows(&["0001000010"]);
        let d = edt(&row);
        assert_eq!(d, vec![3.0, 2.0, 1.0, 0.0, 1.0, 2.0, 2.0, 1.0, 0.0, 1.0]);
        let col = Mask::new(1, 5, vec![false, false, false, false, true]).unwrap();
        assert_eq!(edt(&col), vec![4.0, 3.0, 2.0, 1.0, 0.0]);
        // Queries off the grid, outside the mask, empty, and non-finite.
        let got = edt_at(&row, &[-2.0, 3.5, 12.0], &[0.0, -4.0]);
        let want = [5.0, 0.5, 4.0, 41f64.sqrt(), 0.5f64.hypot(4.0), 32f64.sqrt()];
        for (g, w) in got.iter().zip(want) {
            assert!((g - w).abs() < 1e-12, "{got:?}");
        }
        assert!(edt_at(&row, &[], &[1.0]).is_empty());
        assert!(edt_at(&row, &[1.0], &[]).is_empty());
        let odd = edt_at(
            &row,
            &[f64::NAN, 1.0, f64::INFINITY],
            &[f64::NAN, 0.0, f64::NEG_INFINITY],
        );
        assert!(odd[..3].iter().all(|v| v.is_nan()));
        assert!(odd[3].is_nan() && odd[4] == 2.0 && odd[5] == f64::INFINITY);
        assert!(odd[6..].iter().all(|&v| v == f64::INFINITY));
    }

    /// Masks wider or taller than 2^20 px take the i128 envelope path.
    #[test]
    fn very_wide_and_very_tall_masks() {
        let n = (1 << 20) + 3;
        let painted = [5usize, 700_000, n - 1];
        let mut inside = vec![false; n];
        for &p in &painted {
            inside[p] = true;
        }
        let nearest = |k: usize| painted.iter().map(|&p| p.abs_diff(k)).min().unwrap() as f32;
        for (w, h) in [(n, 1), (1, n)] {
            let mask = Mask::new(w, h, inside.clone()).unwrap();
            let d = edt(&mask);
            for k in [
                0,
                5,
                6,
                350_000,
                352_502,
                352_503,
                699_999,
                1_000_000,
                n - 2,
                n - 1,
            ] {
                assert_eq!(d[k], nearest(k), "{w}x{h} at {k}");
            }
        }
    }

    /// Masks up to 2^15 px on a side take `edt_small` (i32 envelope); one more column takes
    /// `edt_large` (i64). Both at their largest distances, where i32 is nearly full.
    #[test]
    fn small_path_limits() {
        let n = SMALL_SIDE;
        for (w, h) in [(n, 2), (2, n), (n + 1, 1), (1, n + 1)] {
            let mut inside = vec![false; w * h];
            inside[0] = true;
            let mask = Mask::new(w, h, inside).unwrap();
            let d = edt(&mask);
            let far = (w - 1) * (w - 1) + (h - 1) * (h - 1);
            assert_eq!(d[w * h - 1], (far as f64).sqrt() as f32, "{w}x{h}");
            assert_eq!(d[w * h / 2], edt_large(&mask)[w * h / 2], "{w}x{h}");
        }
    }

    #[test]
    fn takeover_is_the_exact_ceiling() {
        for w in [0usize, 1, 7, 40] {
            for num in -100i64..=100 {
                for den in 1i64..=30 {
                    let want = (0..=w).find(|&x| x as i64 * den >= num).unwrap_or(w);
                    assert_eq!(takeover(num, den, w), want, "{num}/{den}, w {w}");
                    assert_eq!(takeover(i128::from(num), i128::from(den), w), want);
                }
            }
        }
    }

    fn arb_mask() -> impl Strategy<Value = Mask> {
        (1usize..24, 1usize..24, 0.0f64..0.4, any::<u64>()).prop_map(|(w, h, density, seed)| {
            let mut state = seed;
            let mut inside: Vec<bool> = (0..w * h)
                .map(|_| {
                    // SplitMix64 draws, so shrinking the seed keeps masks reproducible.
                    state = state.wrapping_add(0x9E37_79B9_7F4A_7C15);
                    let mut z = state;
                    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
                    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
                    (((z ^ (z >> 31)) >> 11) as f64) * (-53f64).exp2() < density
                })
                .collect();
            if !inside.iter().any(|&b| b) {
                let k = (seed as usize) % (w * h);
                inside[k] = true;
            }
            Mask::new(w, h, inside).unwrap()
        })
    }

    /// Masks wider than the prefilter's chunks and reach and the fill's spill, from nearly
    /// empty (one painted pixel) to dense, and with painted runs and empty columns.
    fn arb_wide_mask() -> impl Strategy<Value = Mask> {
        (1usize..300, 1usize..40, 0usize..4, any::<u64>()).prop_map(|(w, h, kind, seed)| {
            let mut state = seed;
            let mut next = || {
                state = state.wrapping_add(0x9E37_79B9_7F4A_7C15);
                let mut z = state;
                z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
                z ^ (z >> 31)
            };
            let density = [0.0, 0.003, 0.05, 0.4][kind];
            let stripe = (next() % 7) as usize + 1;
            let mut inside: Vec<bool> = (0..w * h)
                .map(|k| {
                    let u = (next() >> 11) as f64 * (-53f64).exp2();
                    // Every few masks, only some columns may hold painted pixels.
                    u < density && (kind != 2 || (k % w) % stripe == 0)
                })
                .collect();
            let k = (next() as usize) % (w * h);
            inside[k] = true;
            Mask::new(w, h, inside).unwrap()
        })
    }

    proptest! {
        /// The vectorised small-mask path, in both builds, against the plain i64 one.
        #[test]
        fn small_path_is_bit_identical_to_the_plain_one(mask in arb_wide_mask()) {
            let want = edt_large(&mask);
            prop_assert_eq!(&edt_small_body(&mask), &want);
            #[cfg(target_arch = "x86_64")]
            if std::arch::is_x86_feature_detected!("avx2") {
                // SAFETY: the CPU has AVX2 (checked just above).
                prop_assert_eq!(&unsafe { edt_small_avx2(&mask) }, &want);
            }
            prop_assert_eq!(&edt(&mask), &want);
        }

        #[test]
        fn edt_matches_brute_force(mask in arb_mask()) {
            let d = edt(&mask);
            for j in 0..mask.height() {
                for i in 0..mask.width() {
                    let want = brute(&mask, i as f64, j as f64);
                    // Integer squared distances: the f32 result is the rounded exact root.
                    prop_assert_eq!(d[j * mask.width() + i], want as f32, "at ({}, {})", i, j);
                }
            }
        }

        #[test]
        fn edt_at_matches_brute_force(
            mask in arb_mask(),
            mut xs in prop::collection::vec(-8.0f64..32.0, 0..12),
            ys in prop::collection::vec(-8.0f64..32.0, 0..12),
            sort in any::<bool>(),
            whole in prop::collection::vec(-3i32..26, 0..4),
        ) {
            // Some queries exactly on pixel centres, where the envelope has its ties.
            xs.extend(whole.iter().map(|&v| f64::from(v)));
            let mut ys = ys;
            ys.extend(whole.iter().map(|&v| f64::from(v) * 0.5));
            if sort {
                xs.sort_by(f64::total_cmp);
            }
            let got = edt_at(&mask, &xs, &ys);
            prop_assert_eq!(got.len(), xs.len() * ys.len());
            for (j, &y) in ys.iter().enumerate() {
                for (i, &x) in xs.iter().enumerate() {
                    let want = brute(&mask, x, y);
                    let g = got[j * xs.len() + i];
                    prop_assert!((g - want).abs() <= 1e-9 * want.max(1.0), "({}, {}): {} vs {}", x, y, g, want);
                }
            }
        }
    }
}
