//! The fast path of [`MaxEnt::evaluate`](super::MaxEnt::evaluate): the backward and forward
//! passes of the shifted log-space recursion of [`super::backward`] done on the exponentials
//! of the shifted values, rescaled at every step (as the scaled forward–backward recursion of
//! a hidden Markov model is), so that no state needs an `exp` or a `ln` in any step.
//!
//! With a(s) = exp(r(s) − max r), Eₖ = exp Ṽₖ and Zₖ = exp Q̃ₖ (see [`super::Table`]):
//!
//! - backward: E₀ = a, Z₀ = 1, and for k ≥ 1 Zₖ(s) = Σ_{s′ ∈ N(s)} Eₖ₋₁(s′) (a 3 × 3 box sum),
//!   mₖ = maxₛ a(s)·Zₖ(s), Eₖ = a·Zₖ / mₖ. Then topₖ = max r + ln mₖ, and Vₖ(s) = r(s) + ln Zₖ(s)
//!   + offsetₖ as before: one `ln` per step, none per state.
//! - forward: with Dₖ the visit mass with k moves left and Gₖ = Dₖ / Zₖ, the move
//!   Dₖ₋₁(s′) = Eₖ₋₁(s′)·Σ_{s ∈ N(s′)} Gₖ(s) gives Gₖ₋₁ = a·(box sum of Gₖ) / mₖ₋₁: Z cancels,
//!   and only the visits Dₖ = Gₖ·Zₖ and the start masses (c / Zₖ(s₀)) read it.
//!
//! Every per-state array is kept in the padded (rows + 2) × (cols + 2) layout of
//! [`super::BoxSum`], zero in the padding and in removed cells (a = 0 there), and the table
//! row of step k in state order; the kept cells of one grid row that are consecutive states
//! form a run, so every loop is contiguous and branch-free.
//!
//! The path is taken only while nothing in it can underflow to a wrong result: every state's
//! a(s) ≥ e^LOG_FLOOR (the rewards span less than 600) and every Zₖ(s) ≥ e^LOG_FLOOR. Then a
//! term lost to underflow (under e^−708) is below e^−108 of every sum it belongs to, as in the
//! log-space pass, and mₖ ≥ a(argmax Eₖ₋₁) ≥ e^LOG_FLOOR keeps 1/mₖ finite. Otherwise
//! [`Linear::backward`] returns false and the evaluation runs the log-space passes.

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
            let mut low = false;
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
                let (ar, er) = (&self.a[p..p + len], &mut self.e[p..p + len]);
                for ((e, &a), &zs) in er.iter_mut().zip(ar).zip(zr.iter()) {
                    *e = a * zs;
                }
                low |= min_lanes(zr) < floor;
            }
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
                for &s in &self.deep[self.deep_at[k]..] {
                    let s = s as usize;
                    let nb = grid.neighbours(s);
                    let mut v = [f64::NEG_INFINITY; 9];
                    for (vj, &t) in v.iter_mut().zip(nb) {
                        let t = t as usize;
                        *vj = (r[t] - top_prev) + log_z(zp[t]);
                    }
                    let lm = v.iter().copied().fold(f64::NEG_INFINITY, f64::max);
                    let sum: f64 = v.iter().map(|&x| exp_nonpositive(x - lm)).sum();
                    let q = lm + sum.ln();
                    if q.is_nan() || q >= 0.0 {
                        return false;
                    }
                    zk[s] = q;
                    self.e[grid.pad[s] as usize] = 0.0;
                }
            }
            self.deep_at.push(self.deep.len());
            let m = max_lanes(&self.e[lo..hi]);
            if !(m >= floor && m.is_finite()) {
                return false;
            }
            let top = rmax + m.ln();
            let inv = 1.0 / m;
            for e in &mut self.e[lo..hi] {
                *e *= inv;
            }
            for &s in &self.deep[self.deep_at[k]..self.deep_at[k + 1]] {
                let s = s as usize;
                let v = r[s] + zk[s] - top;
                if v > 0.0 {
                    return false;
                }
                self.e[grid.pad[s] as usize] = exp_nonpositive(v);
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
            // Visits with k moves left: Dₖ = Gₖ·Zₖ (Gₖ = 0 at a deep state), and the deep
            // states' own.
            for run in &self.runs {
                let states = run.state..run.state + run.len;
                let (vr, zr) = (&mut visits[states.clone()], &zk[states]);
                let gr = &self.e[run.pad..run.pad + run.len];
                for ((v, &gs), &zs) in vr.iter_mut().zip(gr).zip(zr) {
                    *v += gs * zs;
                }
            }
            let deep_k = &self.deep[self.deep_at[k]..self.deep_at[k + 1]];
            let deep_prev = &self.deep[self.deep_at[k - 1]..self.deep_at[k]];
            for &s in deep_k {
                visits[s as usize] += self.dd[s as usize];
            }
            // One move: Gₖ₋₁ = a·(box sum of Gₖ) / mₖ₋₁, or Dₖ₋₁ = Eₖ₋₁·(box sum) at a state
            // deep at step k − 1.
            box_rows(&self.e, &mut self.h, lo, hi);
            let inv = self.inv_m[k - 1];
            for run in &self.runs {
                let (p, len) = (run.pad, run.len);
                let (up, mid, down) = (
                    &self.h[p - w..p - w + len],
                    &self.h[p..p + len],
                    &self.h[p + w..p + w + len],
                );
                let (ar, gr) = (&self.a[p..p + len], &mut self.e[p..p + len]);
                for ((gs, &a), ((&u, &c), &d)) in
                    gr.iter_mut().zip(ar).zip(up.iter().zip(mid).zip(down))
                {
                    *gs = (a * (u + c + d)) * inv;
                }
            }
            let top_prev = self.top[k - 1];
            for &s in deep_prev {
                let (s, p) = (s as usize, grid.pad[s as usize] as usize);
                let u = self.h[p - w] + self.h[p] + self.h[p + w];
                self.dd_next[s] = exp_nonpositive(r[s] + zp[s] - top_prev) * u;
                self.e[p] = 0.0;
            }
            // The deep states of step k push their mass move by move: πₖ(t | s) =
            // exp(Ṽₖ₋₁(t) − Q̃ₖ(s)), which is Gₖ₋₁(t) += D·exp(r(t) − topₖ₋₁ − Q̃ₖ(s)) at a
            // state t that is not deep at step k − 1.
            for &s in deep_k {
                let s = s as usize;
                let d = self.dd[s];
                if d == 0.0 {
                    continue;
                }
                let q = zk[s];
                for &t in grid.neighbours(s) {
                    let t = t as usize;
                    let x = zp[t];
                    if x > 0.0 {
                        self.e[grid.pad[t] as usize] += d * (r[t] - top_prev - q).exp();
                    } else {
                        self.dd_next[t] += d * exp_nonpositive(r[t] - top_prev + x - q);
                    }
                }
                self.dd[s] = 0.0;
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

/// h[i] = x[i − 1] + x[i] + x[i + 1] for i in lo..hi (1 ≤ lo, hi < len).
#[inline(always)]
fn box_rows(x: &[f64], h: &mut [f64], lo: usize, hi: usize) {
    let (a, b, c) = (&x[lo - 1..hi - 1], &x[lo..hi], &x[lo + 1..hi + 1]);
    for (((h, &a), &b), &c) in h[lo..hi].iter_mut().zip(a).zip(b).zip(c) {
        *h = a + b + c;
    }
}

const LANES: usize = 4;

/// The largest of `x` (−∞ when empty; NaN is passed over), in lanes that vectorise.
#[inline(always)]
fn max_lanes(x: &[f64]) -> f64 {
    let mut m = [f64::NEG_INFINITY; LANES];
    let chunks = x.chunks_exact(LANES);
    let rest = chunks.remainder();
    for c in chunks {
        for j in 0..LANES {
            m[j] = if c[j] > m[j] { c[j] } else { m[j] };
        }
    }
    rest.iter()
        .chain(&m)
        .copied()
        .fold(f64::NEG_INFINITY, f64::max)
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
