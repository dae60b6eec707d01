//! Limited-memory BFGS (Nocedal 1980; Nocedal & Wright, *Numerical Optimization*, 2nd ed.,
//! algorithms 7.4 and 7.5) with a line search that satisfies the strong Wolfe conditions
//! (algorithms 3.5 and 3.6 there: bracketing, then zooming by safeguarded quadratic
//! interpolation).
//!
//! Minimises a smooth function of a few dozen variables; deterministic.

/// What the iteration callback asks for.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Control {
    /// Go on.
    Continue,
    /// Stop now and return the current point (cancellation).
    Stop,
}

/// Why [`minimize`] stopped.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum StopReason {
    /// The gradient's Euclidean norm fell to the tolerance.
    Converged,
    /// The iteration cap was reached first.
    IterationCap,
    /// The callback asked to stop.
    Cancelled,
    /// No step satisfying the Wolfe conditions was found, even along steepest descent: the
    /// current point is as good as the arithmetic allows.
    LineSearchFailed,
    /// The function stopped decreasing (relative change under 1e-15 over one iteration).
    NoProgress,
}

/// The settings of [`minimize`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct LbfgsSettings {
    /// Pairs (s, y) kept; 10 by default.
    pub memory: usize,
    /// At most this many iterations (line searches).
    pub max_iterations: usize,
    /// Stop when |∇f|₂ ≤ this.
    pub grad_tol: f64,
}

impl Default for LbfgsSettings {
    fn default() -> Self {
        Self {
            memory: 10,
            max_iterations: 200,
            grad_tol: 1e-6,
        }
    }
}

/// The state after an iteration, as passed to the callback.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Step {
    /// Completed iterations (0 for the starting point).
    pub iteration: usize,
    /// f at the current point.
    pub value: f64,
    /// |∇f|₂ at the current point.
    pub grad_norm: f64,
    /// Function evaluations so far.
    pub evaluations: usize,
}

/// The result of [`minimize`].
#[derive(Debug, Clone, PartialEq)]
pub struct Minimum {
    /// The last accepted point.
    pub x: Vec<f64>,
    /// f there.
    pub value: f64,
    /// ∇f there.
    pub gradient: Vec<f64>,
    /// |∇f|₂ there.
    pub grad_norm: f64,
    /// Completed iterations.
    pub iterations: usize,
    /// Function evaluations.
    pub evaluations: usize,
    /// Why it stopped.
    pub stop: StopReason,
}

const C1: f64 = 1e-4;
const C2: f64 = 0.9;

fn dot(a: &[f64], b: &[f64]) -> f64 {
    a.iter().zip(b).map(|(x, y)| x * y).sum()
}

fn norm(a: &[f64]) -> f64 {
    dot(a, a).sqrt()
}

struct LineSearch<'f, F> {
    f: &'f mut F,
    x0: &'f [f64],
    p: &'f [f64],
    f0: f64,
    d0: f64,
    x: Vec<f64>,
    g: Vec<f64>,
    evaluations: usize,
}

/// A point of the line search: step, value, directional derivative, point and gradient.
struct Trial {
    a: f64,
    f: f64,
    d: f64,
    x: Vec<f64>,
    g: Vec<f64>,
}

impl<F: FnMut(&[f64], &mut [f64]) -> f64> LineSearch<'_, F> {
    fn eval(&mut self, a: f64) -> Trial {
        for ((xi, x0), p) in self.x.iter_mut().zip(self.x0).zip(self.p) {
            *xi = x0 + a * p;
        }
        let mut f = (self.f)(&self.x, &mut self.g);
        self.evaluations += 1;
        let mut d = dot(&self.g, self.p);
        if !(f.is_finite() && d.is_finite()) {
            // Treated as too far: the bracket shrinks towards the origin.
            f = f64::INFINITY;
            d = f64::INFINITY;
        }
        Trial {
            a,
            f,
            d,
            x: self.x.clone(),
            g: self.g.clone(),
        }
    }

    fn armijo(&self, t: &Trial) -> bool {
        t.f <= self.f0 + C1 * t.a * self.d0
    }

    fn curvature(&self, t: &Trial) -> bool {
        t.d.abs() <= -C2 * self.d0
    }

    /// Algorithm 3.5: a step satisfying the strong Wolfe conditions, or None.
    fn search(&mut self, a_init: f64) -> Option<Trial> {
        let mut prev = Trial {
            a: 0.0,
            f: self.f0,
            d: self.d0,
            x: self.x0.to_vec(),
            g: Vec::new(),
        };
        let mut a = a_init;
        for i in 0..30 {
            let t = self.eval(a);
            if !self.armijo(&t) || (i > 0 && t.f >= prev.f) {
                return self.zoom(prev, t);
            }
            if self.curvature(&t) {
                return Some(t);
            }
            if t.d >= 0.0 {
                return self.zoom(t, prev);
            }
            a = t.a * 2.0;
            prev = t;
        }
        None
    }

    /// Algorithm 3.6: `lo` satisfies sufficient decrease and has the lower value; the
    /// minimiser lies between `lo` and `hi`.
    fn zoom(&mut self, mut lo: Trial, mut hi: Trial) -> Option<Trial> {
        for _ in 0..40 {
            let width = hi.a - lo.a;
            if width.abs() <= 1e-16 * lo.a.abs().max(1e-300) {
                break;
            }
            // Quadratic through f(lo), f'(lo), f(hi); safeguarded into the middle 80 %.
            let mut a = if hi.f.is_finite() {
                let denom = 2.0 * (hi.f - lo.f - lo.d * width);
                lo.a - lo.d * width * width / denom
            } else {
                f64::NAN
            };
            let (l, h) = (lo.a + 0.1 * width, lo.a + 0.9 * width);
            let (l, h) = (l.min(h), l.max(h));
            if !(a.is_finite() && a >= l && a <= h) {
                a = lo.a + 0.5 * width;
            }
            let t = self.eval(a);
            if !self.armijo(&t) || t.f >= lo.f {
                hi = t;
            } else {
                if self.curvature(&t) {
                    return Some(t);
                }
                if t.d * (hi.a - lo.a) >= 0.0 {
                    hi = lo;
                }
                lo = t;
            }
        }
        // Out of room: accept the best point with sufficient decrease, if it moved at all.
        if lo.a > 0.0 && lo.f < self.f0 {
            Some(lo)
        } else {
            None
        }
    }
}

/// Minimises `f` from `x0`. `f(x, g)` returns f(x) and writes ∇f(x) into `g`. `on_step` sees
/// the starting point (iteration 0) and the point after every iteration, with the point itself,
/// and may stop the run.
///
/// Stops when |∇f|₂ ≤ `grad_tol` (checked at the start and after every iteration), after
/// `max_iterations` iterations, when the callback says so, when a line search fails twice in a
/// row (the second time along steepest descent with the memory cleared), or when an iteration
/// changes f by less than 1e-15 relative.
pub fn minimize<F>(
    mut f: F,
    x0: &[f64],
    settings: &LbfgsSettings,
    on_step: &mut dyn FnMut(&Step, &[f64]) -> Control,
) -> Minimum
where
    F: FnMut(&[f64], &mut [f64]) -> f64,
{
    let n = x0.len();
    let mut x = x0.to_vec();
    let mut g = vec![0.0; n];
    let mut fx = f(&x, &mut g);
    let mut evaluations = 1;
    let mut s_hist: Vec<Vec<f64>> = Vec::new();
    let mut y_hist: Vec<Vec<f64>> = Vec::new();
    let mut rho: Vec<f64> = Vec::new();
    let mut alpha = vec![0.0; settings.memory.max(1)];
    let mut iteration = 0;
    let finish = |x: Vec<f64>, fx: f64, g: Vec<f64>, it: usize, ev: usize, stop| Minimum {
        grad_norm: norm(&g),
        x,
        value: fx,
        gradient: g,
        iterations: it,
        evaluations: ev,
        stop,
    };
    let mut step = Step {
        iteration,
        value: fx,
        grad_norm: norm(&g),
        evaluations,
    };
    if on_step(&step, &x) == Control::Stop {
        return finish(x, fx, g, iteration, evaluations, StopReason::Cancelled);
    }
    let mut retried = false;
    loop {
        if step.grad_norm <= settings.grad_tol {
            return finish(x, fx, g, iteration, evaluations, StopReason::Converged);
        }
        if iteration >= settings.max_iterations {
            return finish(x, fx, g, iteration, evaluations, StopReason::IterationCap);
        }
        // Two-loop recursion: p = −H g.
        let mut q = g.clone();
        for i in (0..s_hist.len()).rev() {
            alpha[i] = rho[i] * dot(&s_hist[i], &q);
            for (qj, yj) in q.iter_mut().zip(&y_hist[i]) {
                *qj -= alpha[i] * yj;
            }
        }
        if let (Some(s), Some(y)) = (s_hist.last(), y_hist.last()) {
            let gamma = dot(s, y) / dot(y, y);
            q.iter_mut().for_each(|v| *v *= gamma);
        }
        for i in 0..s_hist.len() {
            let beta = rho[i] * dot(&y_hist[i], &q);
            for (qj, sj) in q.iter_mut().zip(&s_hist[i]) {
                *qj += (alpha[i] - beta) * sj;
            }
        }
        let mut p: Vec<f64> = q.iter().map(|v| -v).collect();
        let mut d0 = dot(&g, &p);
        if !(d0 < 0.0 && d0.is_finite()) {
            // Not a descent direction (should not happen with positive curvature pairs):
            // restart from steepest descent.
            s_hist.clear();
            y_hist.clear();
            rho.clear();
            p = g.iter().map(|v| -v).collect();
            d0 = dot(&g, &p);
        }
        let a_init = if s_hist.is_empty() {
            (1.0 / norm(&p)).min(1.0)
        } else {
            1.0
        };
        let mut ls = LineSearch {
            f: &mut f,
            x0: &x,
            p: &p,
            f0: fx,
            d0,
            x: vec![0.0; n],
            g: vec![0.0; n],
            evaluations: 0,
        };
        let found = ls.search(a_init);
        evaluations += ls.evaluations;
        let Some(t) = found else {
            if retried || s_hist.is_empty() {
                return finish(
                    x,
                    fx,
                    g,
                    iteration,
                    evaluations,
                    StopReason::LineSearchFailed,
                );
            }
            retried = true;
            s_hist.clear();
            y_hist.clear();
            rho.clear();
            continue;
        };
        retried = false;
        let s: Vec<f64> = t.x.iter().zip(&x).map(|(a, b)| a - b).collect();
        let y: Vec<f64> = t.g.iter().zip(&g).map(|(a, b)| a - b).collect();
        let sy = dot(&s, &y);
        if sy > 1e-12 * norm(&s) * norm(&y) && sy > 0.0 {
            if s_hist.len() == settings.memory.max(1) {
                s_hist.remove(0);
                y_hist.remove(0);
                rho.remove(0);
            }
            s_hist.push(s);
            y_hist.push(y);
            rho.push(1.0 / sy);
        }
        let f_prev = fx;
        x = t.x;
        g = t.g;
        fx = t.f;
        iteration += 1;
        step = Step {
            iteration,
            value: fx,
            grad_norm: norm(&g),
            evaluations,
        };
        if on_step(&step, &x) == Control::Stop {
            return finish(x, fx, g, iteration, evaluations, StopReason::Cancelled);
        }
        if step.grad_norm > settings.grad_tol && (f_prev - fx).abs() <= 1e-15 * fx.abs().max(1.0) {
            return finish(x, fx, g, iteration, evaluations, StopReason::NoProgress);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The Rosenbrock function (the usual test of Nocedal & Wright) is minimised to (1, 1).
    #[test]
    fn rosenbrock() {
        let f = |x: &[f64], g: &mut [f64]| {
            let (a, b) = (x[0], x[1]);
            g[0] = -2.0 * (1.0 - a) - 400.0 * a * (b - a * a);
            g[1] = 200.0 * (b - a * a);
            (1.0 - a).powi(2) + 100.0 * (b - a * a).powi(2)
        };
        let settings = LbfgsSettings {
            grad_tol: 1e-10,
            ..Default::default()
        };
        let mut steps = 0;
        let m = minimize(f, &[-1.2, 1.0], &settings, &mut |_, _| {
            steps += 1;
            Control::Continue
        });
        assert_eq!(m.stop, StopReason::Converged, "{m:?}");
        assert!((m.x[0] - 1.0).abs() < 1e-8 && (m.x[1] - 1.0).abs() < 1e-8);
        assert_eq!(steps, m.iterations + 1);
    }

    #[test]
    fn stops_when_asked() {
        let f = |x: &[f64], g: &mut [f64]| {
            g[0] = 2.0 * (x[0] - 3.0);
            (x[0] - 3.0).powi(2)
        };
        let m = minimize(f, &[0.0], &LbfgsSettings::default(), &mut |s, _| {
            if s.iteration == 1 {
                Control::Stop
            } else {
                Control::Continue
            }
        });
        assert_eq!(m.stop, StopReason::Cancelled);
        assert_eq!(m.iterations, 1);
    }
}
