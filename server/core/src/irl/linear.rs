//! The fast path of [`MaxEnt::evaluate`](super::MaxEnt::evaluate): the backward and forward
//! passes of the shifted recursion of [`super::backward`] done on the exponentials of the
//! shifted values, rescaled at every step (as the scaled forward–backward recursion of a
//! hidden Markov model is), so that a state needs no `exp` or `ln` in a step.
//!
//! With a(s) = exp(r(s) − max r), Eₖ = exp Ṽₖ and Zₖ = exp Q̃ₖ (see [`super::Table`]):
//!
//! - backward: E₀ = a, Z₀ = 1, and for k ≥ 1 Zₖ(s) = Σ_{s′ ∈ N(s)} Eₖ₋₁(s′) (a 3 × 3 box sum),
//!   mₖ = maxₛ a(s)·Zₖ(s), Eₖ = a·(Zₖ/mₖ). Then topₖ = max r + ln mₖ and Vₖ(s) = r(s) +
//!   ln Zₖ(s) + offsetₖ as in log space: one `ln` a step, none a state.
//! - forward: with Dₖ the visit mass with k moves left and Gₖ = Dₖ/Zₖ, the move Dₖ₋₁(s′) =
//!   Eₖ₋₁(s′)·Σ_{s ∈ N(s′)} Gₖ(s) gives Gₖ₋₁ = a·(box sum of Gₖ)/mₖ₋₁: Z cancels, and only the
//!   visits Dₖ = Gₖ·Zₖ and the start masses (c/Zₖ(s₀)) read it.
//!
//! Every per-state array is kept in the padded (rows + 2) × (cols + 2) layout of
//! [`super::BoxSum`], zero in the padding and in removed cells (a = 0 there), and the table
//! row of step k in state order; the kept cells of a grid row that are consecutive states form
//! a run, so the loops over the states are contiguous and branch-free.
//!
//! Deep states. A state whose Zₖ is under e^LOG_FLOOR (all its moves far below the best state:
//! far corners at long horizons, say) is handled as the log-space pass handles it: its Q̃ₖ is
//! the log-sum-exp of Ṽₖ₋₁ over its moves shifted by their own maximum (the exponentials of
//! all the step's deep states computed together), kept in the table as the negative number
//! Q̃ₖ (a Z entry is positive), and its Eₖ is the exponential of its Ṽₖ; in the forward pass
//! its mass Dₖ is kept as such (Gₖ could overflow) and pushed move by move with πₖ(t | s) =
//! exp(Ṽₖ₋₁(t) − Q̃ₖ(s)).
//!
//! Exactness. Every a(s) ≥ e^LOG_FLOOR (the rewards span less than 600), so a is normal, mₖ ≥
//! a(argmax Eₖ₋₁) ≥ e^LOG_FLOOR keeps Zₖ/mₖ finite, and an E is either a·(Z/m), to a few
//! roundings, or the exponential of an exact log value; a term lost to underflow (under
//! e^−708) is under e^−108 of every sum that is not deep, as in the log-space pass. When the
//! rewards span more (or are not finite), [`Linear::backward`] returns false and the
//! evaluation runs the log-space passes.

use super::{Grid, LOG_FLOOR, exp_nonpositive};

/// A run of kept cells in one grid row that are consecutive states.
#[derive(Debug, Clone, Copy)]
struct Run {
    /// First state.
    state: usize,
    /// Its index in the padded layout.
    pad: usize,
    /// Number of cells.
    len: usize,
}

/// Buffers and per-step scales of the linear passes.
#[derive(Debug, Clone)]
pub(super) struct Linear {
    /// Padded row length, cols + 2.
    stride: usize,
    /// Padded rows, rows + 2.
    padded_rows: usize,
    runs: Vec<Run>,
    /// a(s) = exp(r(s) − max r), padded (0 off the states).
    a: Vec<f64>,
    /// Eₖ in the backward pass, Gₖ in the forward pass, padded (0 off the states).
    e: Vec<f64>,
    /// The horizontal three-term sums of `e`, padded (the padding rows stay 0).
    h: Vec<f64>,
    /// 1 / mₖ.
    inv_m: Vec<f64>,
    /// topₖ = max r + ln mₖ.
    top: Vec<f64>,
    /// offsetₖ = Σ_{j<k} topⱼ.
    offset: Vec<f64>,
    /// The deep states of step k (Zₖ < e^LOG_FLOOR) are `deep[deep_at[k]..deep_at[k + 1]]`.
    pub(super) deep: Vec<u32>,
    deep_at: Vec<usize>,
    /// The visit mass Dₖ of the deep states of step k, in state order (0 elsewhere), and
    /// that of step k − 1 being made.
    dd: Vec<f64>,
    dd_next: Vec<f64>,
    /// Scratch for the deep states: exponents (9 a state), shifts, sources.
    buf: Vec<f64>,
    lm: Vec<f64>,
    src: Vec<u32>,
}

/// Q̃ from a table entry: ln Z when positive, else Q̃ itself (a deep state's).
#[inline(always)]
fn log_z(x: f64) -> f64 {
    if x > 0.0 { x.ln() } else { x }
}

impl Linear {
    pub(super) fn new(grid: &Grid, t_max: usize) -> Self {
        let mut runs: Vec<Run> = Vec::new();
        for (s, &p) in grid.pad.iter().enumerate() {
            let p = p as usize;
            match runs.last_mut() {
                Some(run) if run.pad + run.len == p => run.len += 1,
                _ => runs.push(Run {
                    state: s,
                    pad: p,
                    len: 1,
                }),
            }
        }
        let len = (grid.rows + 2) * (grid.cols + 2);
        let n = grid.states();
        Self {
            stride: grid.cols + 2,
            padded_rows: grid.rows + 2,
            runs,
            a: vec![0.0; len],
            e: vec![0.0; len],
            h: vec![0.0; len],
            inv_m: vec![1.0; t_max + 1],
            top: vec![0.0; t_max + 1],
            offset: vec![0.0; t_max + 1],
            deep: Vec::new(),
            deep_at: Vec::with_capacity(t_max + 2),
            dd: vec![0.0; n],
            dd_next: vec![0.0; n],
            buf: Vec::new(),
            lm: Vec::new(),
            src: Vec::new(),
        }
    }

    /// The backward pass for rewards `r` to horizon `t_max`: row k of `z` (`z[k·n..(k + 1)·n]`)
    /// gets Zₖ(s), or Q̃ₖ(s) < 0 for a deep state. False when the path does not apply (see the
    /// module's notes); `z` is then partly written.
    pub(super) fn backward(&mut self, grid: &Grid, r: &[f64], t_max: usize, z: &mut [f64]) -> bool {
        #[cfg(target_arch = "x86_64")]
        if super::has_avx2() {
            #[target_feature(enable = "avx2")]
            fn avx2(me: &mut Linear, grid: &Grid, r: &[f64], t_max: usize, z: &mut [f64]) -> bool {
                me.backward_portable(grid, r, t_max, z)
            }
            // SAFETY: the CPU has AVX2 (checked just above).
            return unsafe { avx2(self, grid, r, t_max, z) };
        }
        self.backward_portable(grid, r, t_max, z)
    }

    #[inline(always)]
    fn backward_portable(&mut self, grid: &Grid, r: &[f64], t_max: usize, z: &mut [f64]) -> bool {
        let n = r.len();
        let floor = LOG_FLOOR.exp();
        let rmax = r.iter().copied().fold(f64::NEG_INFINITY, f64::max);
        if !rmax.is_finite() {
            return false;
        }
        for run in &self.runs {
            let dst = &mut self.a[run.pad..run.pad + run.len];
            for (a, &x) in dst.iter_mut().zip(&r[run.state..run.state + run.len]) {
                // A NaN reward gives exp(−708), under the floor.
                *a = exp_nonpositive(x - rmax);
            }
            if min_lanes(dst) < floor {
                return false;
            }
        }
        self.e.copy_from_slice(&self.a);
        z[..n].fill(1.0);
        self.inv_m[0] = 1.0;
        self.top[0] = rmax;
        self.offset[0] = 0.0;
        self.deep.clear();
        self.deep_at.clear();
        self.deep_at.extend([0, 0]);
        let w = self.stride;
        let (lo, hi) = (w, (self.padded_rows - 1) * w);
        for k in 1..=t_max {
            box_rows(&self.e, &mut self.h, lo, hi);
            let (done, rest) = z.split_at_mut(k * n);
            let (zp, zk) = (&done[(k - 1) * n..], &mut rest[..n]);
            let (mut low, mut mk) = (false, [0.0; LANES]);
            for run in &self.runs {
                let (p, len) = (run.pad, run.len);
                let zr = &mut zk[run.state..run.state + len];
                let (up, mid, down) = (
                    &self.h[p - w..p - w + len],
                    &self.h[p..p + len],
                    &self.h[p + w..p + w + len],
                );
                for ((zs, &u), (&c, &d)) in zr.iter_mut().zip(up).zip(mid.iter().zip(down)) {
                    *zs = u + c + d;
                }
                max_product_lanes(&mut mk, &self.a[p..p + len], zr);
                low |= min_lanes(zr) < floor;
            }
            let m = mk.iter().copied().fold(0.0, f64::max);
            if low {
                // The deep states: Q̃ₖ(s) by their own log-sum-exp over Ṽₖ₋₁ of their moves.
                let top_prev = self.top[k - 1];
                for run in &self.runs {
                    let zr = &zk[run.state..run.state + run.len];
                    if min_lanes(zr) < floor {
                        let first = run.state as u32;
                        self.deep.extend(
                            (first..)
                                .zip(zr)
                                .filter(|&(_, &zs)| zs < floor)
                                .map(|(s, _)| s),
                        );
                    }
                }
                // One row of 9 exponents per deep state (−∞ past its last move), their
                // exponentials at once (vectorised), then the sums.
                let deep = &self.deep[self.deep_at[k]..];
                self.buf.clear();
                self.buf.resize(9 * deep.len(), f64::NEG_INFINITY);
                self.lm.clear();
                for (row, &s) in self.buf.chunks_exact_mut(9).zip(deep) {
                    move_values(grid, r, zp, top_prev, s as usize, row);
                    let lm = row.iter().copied().fold(f64::NEG_INFINITY, f64::max);
                    for x in row.iter_mut() {
                        *x -= lm;
                    }
                    self.lm.push(lm);
                }
                exp_all(&mut self.buf);
                for ((row, &lm), &s) in self.buf.chunks_exact(9).zip(&self.lm).zip(deep) {
                    let q = lm + row.iter().sum::<f64>().ln();
                    if q.is_nan() || q >= 0.0 {
                        return false;
                    }
                    zk[s as usize] = q;
                }
            }
            self.deep_at.push(self.deep.len());
            if !(m >= floor && m.is_finite()) {
                return false;
            }
            let top = rmax + m.ln();
            let inv = 1.0 / m;
            // Eₖ = a·(Zₖ/mₖ): Zₖ/mₖ ≤ 9/e^LOG_FLOOR, and the product underflows only where Eₖ
            // does. (At a deep state this writes a wrong value, replaced just below.)
            for run in &self.runs {
                let (p, len) = (run.pad, run.len);
                let (ar, er) = (&self.a[p..p + len], &mut self.e[p..p + len]);
                for ((e, &a), &zs) in er.iter_mut().zip(ar).zip(&zk[run.state..run.state + len]) {
                    *e = a * (zs * inv);
                }
            }
            let deep = &self.deep[self.deep_at[k]..];
            self.buf.clear();
            for &s in deep {
                let v = r[s as usize] + zk[s as usize] - top;
                if v > 0.0 {
                    return false;
                }
                self.buf.push(v);
            }
            exp_all(&mut self.buf);
            for (&s, &e) in deep.iter().zip(&self.buf) {
                self.e[grid.pad[s as usize] as usize] = e;
            }
            self.inv_m[k] = inv;
            self.top[k] = top;
            self.offset[k] = self.offset[k - 1] + self.top[k - 1];
        }
        true
    }

    /// Vₖ(s) from the table of the last successful [`backward`](Self::backward).
    pub(super) fn value(&self, r: &[f64], z: &[f64], k: usize, s: usize) -> f64 {
        r[s] + log_z(z[k * r.len() + s]) + self.offset[k]
    }

    /// The forward pass over the table `z` of the last successful backward pass for rewards
    /// `r`: the expected visits of demos starting at `starts[k]` (state, count) with k moves,
    /// into `visits`.
    pub(super) fn forward(
        &mut self,
        grid: &Grid,
        r: &[f64],
        z: &[f64],
        starts: &[Vec<(u32, f64)>],
        visits: &mut [f64],
    ) {
        #[cfg(target_arch = "x86_64")]
        if super::has_avx2() {
            #[target_feature(enable = "avx2")]
            fn avx2(
                me: &mut Linear,
                grid: &Grid,
                r: &[f64],
                z: &[f64],
                starts: &[Vec<(u32, f64)>],
                visits: &mut [f64],
            ) {
                me.forward_portable(grid, r, z, starts, visits);
            }
            // SAFETY: the CPU has AVX2 (checked just above).
            return unsafe { avx2(self, grid, r, z, starts, visits) };
        }
        self.forward_portable(grid, r, z, starts, visits);
    }

    #[inline(always)]
    fn forward_portable(
        &mut self,
        grid: &Grid,
        r: &[f64],
        z: &[f64],
        starts: &[Vec<(u32, f64)>],
        visits: &mut [f64],
    ) {
        let n = visits.len();
        let w = self.stride;
        let (lo, hi) = (w, (self.padded_rows - 1) * w);
        self.e.fill(0.0);
        visits.fill(0.0);
        for k in (1..starts.len()).rev() {
            let (zp, zk) = (&z[(k - 1) * n..k * n], &z[k * n..(k + 1) * n]);
            for &(s, c) in &starts[k] {
                let s = s as usize;
                if zk[s] > 0.0 {
                    self.e[grid.pad[s] as usize] += c / zk[s];
                } else {
                    self.dd[s] += c;
                }
            }
            let deep_k = &self.deep[self.deep_at[k]..self.deep_at[k + 1]];
            let deep_prev = &self.deep[self.deep_at[k - 1]..self.deep_at[k]];
            for &s in deep_k {
                visits[s as usize] += self.dd[s as usize];
            }
            // The visits with k moves left, Dₖ = Gₖ·Zₖ (Gₖ = 0 at a deep state, whose own were
            // just added), and one move: Gₖ₋₁ = a·(box sum of Gₖ) / mₖ₋₁ (made Dₖ₋₁ =
            // Eₖ₋₁·(box sum) below at a state deep at step k − 1).
            box_rows(&self.e, &mut self.h, lo, hi);
            let inv = self.inv_m[k - 1];
            for run in &self.runs {
                let (p, len) = (run.pad, run.len);
                let states = run.state..run.state + len;
                let (vr, zr) = (&mut visits[states.clone()], &zk[states]);
                let (up, mid, down) = (
                    &self.h[p - w..p - w + len],
                    &self.h[p..p + len],
                    &self.h[p + w..p + w + len],
                );
                let (ar, gr) = (&self.a[p..p + len], &mut self.e[p..p + len]);
                for (((gs, &a), (v, &zs)), ((&u, &c), &d)) in gr
                    .iter_mut()
                    .zip(ar)
                    .zip(vr.iter_mut().zip(zr))
                    .zip(up.iter().zip(mid).zip(down))
                {
                    *v += *gs * zs;
                    *gs = (a * (u + c + d)) * inv;
                }
            }
            let top_prev = self.top[k - 1];
            self.buf.clear();
            self.buf.extend(
                deep_prev
                    .iter()
                    .map(|&s| r[s as usize] + zp[s as usize] - top_prev),
            );
            exp_all(&mut self.buf);
            for (&s, &e) in deep_prev.iter().zip(&self.buf) {
                let (s, p) = (s as usize, grid.pad[s as usize] as usize);
                self.dd_next[s] = e * (self.h[p - w] + self.h[p] + self.h[p + w]);
                self.e[p] = 0.0;
            }
            // The deep states of step k push their mass move by move, πₖ(t | s) =
            // exp(Ṽₖ₋₁(t) − Q̃ₖ(s)), into Gₖ₋₁(t) = Dₖ₋₁(t) / Zₖ₋₁(t), or into Dₖ₋₁(t) at a
            // state deep at step k − 1.
            self.src.clear();
            self.src
                .extend(deep_k.iter().filter(|&&s| self.dd[s as usize] != 0.0));
            self.buf.clear();
            self.buf.resize(9 * self.src.len(), f64::NEG_INFINITY);
            for (row, &s) in self.buf.chunks_exact_mut(9).zip(&self.src) {
                move_values(grid, r, zp, top_prev, s as usize, row);
                let q = zk[s as usize];
                for x in row.iter_mut() {
                    *x -= q;
                }
            }
            exp_all(&mut self.buf);
            for (row, &s) in self.buf.chunks_exact(9).zip(&self.src) {
                let d = self.dd[s as usize];
                for (&pi, &t) in row.iter().zip(grid.neighbours(s as usize)) {
                    let (t, flow) = (t as usize, d * pi);
                    let x = zp[t];
                    if x > 0.0 {
                        self.e[grid.pad[t] as usize] += flow / x;
                    } else {
                        self.dd_next[t] += flow;
                    }
                }
            }
            for &s in deep_k {
                self.dd[s as usize] = 0.0;
            }
            std::mem::swap(&mut self.dd, &mut self.dd_next);
        }
        if let Some(first) = starts.first() {
            for &(s, c) in first {
                self.e[grid.pad[s as usize] as usize] += c;
            }
        }
        // Z₀ = 1: D₀ = G₀.
        for run in &self.runs {
            let vr = &mut visits[run.state..run.state + run.len];
            for (v, &gs) in vr.iter_mut().zip(&self.e[run.pad..run.pad + run.len]) {
                *v += gs;
            }
        }
    }
}

/// Ṽₖ₋₁ of the moves from `s` into `row` (in the order of [`Grid::neighbours`]), from row
/// k − 1 of the table (`zp`) and topₖ₋₁; the rest of `row` is left as it is.
#[inline(always)]
fn move_values(grid: &Grid, r: &[f64], zp: &[f64], top_prev: f64, s: usize, row: &mut [f64]) {
    for (v, &t) in row.iter_mut().zip(grid.neighbours(s)) {
        let t = t as usize;
        *v = (r[t] - top_prev) + log_z(zp[t]);
    }
}

/// x ← exp(x) for x ≤ 0 (0 for −∞), in a loop that vectorises.
#[inline(always)]
fn exp_all(x: &mut [f64]) {
    for v in x {
        *v = exp_nonpositive(*v);
    }
}

/// `h[i] = x[i − 1] + x[i] + x[i + 1]` for i in lo..hi (1 ≤ lo, hi < len).
#[inline(always)]
fn box_rows(x: &[f64], h: &mut [f64], lo: usize, hi: usize) {
    let (a, b, c) = (&x[lo - 1..hi - 1], &x[lo..hi], &x[lo + 1..hi + 1]);
    for (((h, &a), &b), &c) in h[lo..hi].iter_mut().zip(a).zip(b).zip(c) {
        *h = a + b + c;
    }
}

const LANES: usize = 4;

/// `m[j] ← max(m[j], a[i]·z[i])` over the lanes j = i mod LANES (products that are NaN are
/// passed over), in lanes that vectorise.
#[inline(always)]
fn max_product_lanes(m: &mut [f64; LANES], a: &[f64], z: &[f64]) {
    let (ca, cz) = (a.chunks_exact(LANES), z.chunks_exact(LANES));
    let (ra, rz) = (ca.remainder(), cz.remainder());
    for (x, y) in ca.zip(cz) {
        for j in 0..LANES {
            let p = x[j] * y[j];
            m[j] = if p > m[j] { p } else { m[j] };
        }
    }
    for (j, (x, y)) in ra.iter().zip(rz).enumerate() {
        let p = x * y;
        m[j] = if p > m[j] { p } else { m[j] };
    }
}

/// The smallest of `x` (+∞ when empty; NaN is passed over), in lanes that vectorise.
#[inline(always)]
fn min_lanes(x: &[f64]) -> f64 {
    let mut m = [f64::INFINITY; LANES];
    let chunks = x.chunks_exact(LANES);
    let rest = chunks.remainder();
    for c in chunks {
        for j in 0..LANES {
            m[j] = if c[j] < m[j] { c[j] } else { m[j] };
        }
    }
    rest.iter().chain(&m).copied().fold(f64::INFINITY, f64::min)
}

#[cfg(test)]
mod tests {
    use super::super::{Features, Grid, MaxEnt};

    /// The run-time chosen build of the passes (AVX2 where the CPU has it) and the portable
    /// one agree bit for bit (table, scales, visits), with deep states and without.
    #[test]
    fn pass_builds_agree_bit_for_bit() {
        let (spec, feats, cells) = crate::bench::irl_bench_problem();
        let grid = Grid::new(&spec).expect("a grid");
        let features = Features::new(&grid, &feats).expect("features");
        let demos: Vec<Vec<usize>> = cells
            .iter()
            .map(|d| d.iter().filter_map(|&(c, r)| grid.state(c, r)).collect())
            .collect();
        let mut me = MaxEnt::new(&grid, &features, demos).expect("a problem");
        for w in [
            [0.5, 0.2, -0.1, -0.4, -0.7, -1.0],
            [-13.2, -2.4, -0.66, -3.6, -9.4, 0.0],
        ] {
            features.rewards_into(&w, &mut me.r);
            let mut other = me.linear.clone();
            let mut z_other = me.table.q.clone();
            let mut visits_other = me.visits.clone();
            assert!(me.linear.backward(&grid, &me.r, me.t_max, &mut me.table.q));
            assert!(other.backward_portable(&grid, &me.r, me.t_max, &mut z_other));
            me.linear
                .forward(&grid, &me.r, &me.table.q, &me.starts, &mut me.visits);
            other.forward_portable(&grid, &me.r, &z_other, &me.starts, &mut visits_other);
            let bits = |x: &[f64]| x.iter().map(|v| v.to_bits()).collect::<Vec<_>>();
            assert_eq!(bits(&me.table.q), bits(&z_other));
            assert_eq!(bits(&me.visits), bits(&visits_other));
            assert_eq!(bits(&me.linear.top), bits(&other.top));
            assert_eq!(bits(&me.linear.inv_m), bits(&other.inv_m));
            assert_eq!(me.linear.deep, other.deep);
        }
    }
}
