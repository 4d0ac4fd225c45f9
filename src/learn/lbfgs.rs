//! Limited-memory BFGS (Nocedal & Wright, *Numerical Optimization*, 2nd ed., Alg. 7.4
//! and 7.5) with a backtracking Armijo line search.
//!
//! Written here rather than taken from argmin because the objective works on one flat
//! `Vec<f64>` (weights then biases): the two-loop recursion and the line search then run
//! without any allocation per iteration, and every step is deterministic. The problems
//! flipmend solves (softmax regression with an L2 penalty and its corrected losses) are
//! smooth, so Armijo backtracking with a curvature check before each memory update is
//! enough: pairs with sᵀy ≤ 0 are skipped, keeping the inverse-Hessian estimate positive
//! definite.

/// When to stop.
#[derive(Debug, Clone, PartialEq)]
pub struct LbfgsOptions {
    /// Stop after this many iterations.
    pub max_iter: usize,
    /// Stop when the largest absolute gradient entry is at most this.
    pub grad_tol: f64,
    /// Stop when an iteration lowers the objective by less than this relative amount
    /// (scipy's L-BFGS-B default `ftol` is 2.2e-9).
    pub rel_decrease_tol: f64,
    /// Number of correction pairs kept.
    pub memory: usize,
}

impl Default for LbfgsOptions {
    fn default() -> Self {
        LbfgsOptions {
            max_iter: 500,
            grad_tol: 1e-5,
            rel_decrease_tol: 2.2e-9,
            memory: 10,
        }
    }
}

/// Why the minimiser stopped.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Stop {
    /// The gradient is below `grad_tol`.
    Gradient,
    /// The objective stopped decreasing.
    Stalled,
    /// `max_iter` was reached.
    MaxIter,
    /// The caller asked to stop (e.g. a cancel button).
    Cancelled,
}

/// The result of a minimisation.
#[derive(Debug, Clone)]
pub struct Outcome {
    /// The final point.
    pub x: Vec<f64>,
    /// The objective there.
    pub value: f64,
    /// The largest absolute gradient entry there.
    pub grad_norm: f64,
    /// Iterations done.
    pub iterations: usize,
    /// Objective evaluations done.
    pub evaluations: usize,
    /// Why it stopped.
    pub stop: Stop,
}

/// Minimises `f`, which returns the objective at `x` and writes its gradient into the
/// second argument. `keep_going` is asked once per iteration.
pub fn minimize<F>(
    mut f: F,
    x0: Vec<f64>,
    options: &LbfgsOptions,
    mut keep_going: impl FnMut(usize) -> bool,
) -> Outcome
where
    F: FnMut(&[f64], &mut [f64]) -> f64,
{
    let n = x0.len();
    let mut x = x0;
    let mut g = vec![0.0; n];
    let mut value = f(&x, &mut g);
    let mut evaluations = 1;
    let mut memory = Memory::new(options.memory.max(1), n);
    let (mut d, mut x_new, mut g_new) = (vec![0.0; n], vec![0.0; n], vec![0.0; n]);
    let mut iterations = 0;
    let stop = loop {
        if max_abs(&g) <= options.grad_tol {
            break Stop::Gradient;
        }
        if iterations >= options.max_iter {
            break Stop::MaxIter;
        }
        if !keep_going(iterations) {
            break Stop::Cancelled;
        }
        memory.direction(&g, &mut d);
        let mut slope = dot(&g, &d);
        if slope >= 0.0 || !slope.is_finite() {
            memory.clear();
            d.iter_mut().zip(&g).for_each(|(di, gi)| *di = -gi);
            slope = -dot(&g, &g);
        }
        let first_step = if memory.is_empty() {
            (1.0 / norm2(&g)).min(1.0)
        } else {
            1.0
        };
        let search = line_search(
            &mut f, &x, value, slope, &d, first_step, &mut x_new, &mut g_new,
        );
        evaluations += search.evaluations;
        let Some(new_value) = search.value else {
            break Stop::Stalled;
        };
        memory.push(&x_new, &x, &g_new, &g);
        let decrease = value - new_value;
        std::mem::swap(&mut x, &mut x_new);
        std::mem::swap(&mut g, &mut g_new);
        value = new_value;
        iterations += 1;
        if decrease <= options.rel_decrease_tol * value.abs().max(1.0) {
            break if max_abs(&g) <= options.grad_tol {
                Stop::Gradient
            } else {
                Stop::Stalled
            };
        }
    };
    Outcome {
        grad_norm: max_abs(&g),
        x,
        value,
        iterations,
        evaluations,
        stop,
    }
}

struct Search {
    value: Option<f64>,
    evaluations: usize,
}

/// Backtracking until the Armijo condition f(x+αd) ≤ f(x) + c₁·α·gᵀd holds, shrinking α
/// by safeguarded quadratic interpolation. Leaves the accepted point in `x_new`/`g_new`.
#[allow(clippy::too_many_arguments)]
fn line_search<F>(
    f: &mut F,
    x: &[f64],
    value: f64,
    slope: f64,
    d: &[f64],
    first_step: f64,
    x_new: &mut [f64],
    g_new: &mut [f64],
) -> Search
where
    F: FnMut(&[f64], &mut [f64]) -> f64,
{
    const C1: f64 = 1e-4;
    const MAX_TRIES: usize = 40;
    let mut step = first_step;
    for tries in 1..=MAX_TRIES {
        for ((xn, xi), di) in x_new.iter_mut().zip(x).zip(d) {
            *xn = xi + step * di;
        }
        let trial = f(x_new, g_new);
        if trial.is_finite() && trial <= value + C1 * step * slope {
            return Search {
                value: Some(trial),
                evaluations: tries,
            };
        }
        let quadratic = if trial.is_finite() {
            -slope * step * step / (2.0 * (trial - value - slope * step))
        } else {
            0.1 * step
        };
        step = quadratic.clamp(0.1 * step, 0.5 * step);
    }
    Search {
        value: None,
        evaluations: MAX_TRIES,
    }
}

/// The stored correction pairs (s = Δx, y = Δg) as a ring.
struct Memory {
    s: Vec<Vec<f64>>,
    y: Vec<Vec<f64>>,
    rho: Vec<f64>,
    alpha: Vec<f64>,
    len: usize,
    next: usize,
}

impl Memory {
    fn new(capacity: usize, n: usize) -> Self {
        Memory {
            s: vec![vec![0.0; n]; capacity],
            y: vec![vec![0.0; n]; capacity],
            rho: vec![0.0; capacity],
            alpha: vec![0.0; capacity],
            len: 0,
            next: 0,
        }
    }

    fn is_empty(&self) -> bool {
        self.len == 0
    }

    fn clear(&mut self) {
        self.len = 0;
        self.next = 0;
    }

    /// Stores the pair unless its curvature sᵀy is not clearly positive.
    fn push(&mut self, x_new: &[f64], x: &[f64], g_new: &[f64], g: &[f64]) {
        let slot = self.next;
        for i in 0..x.len() {
            self.s[slot][i] = x_new[i] - x[i];
            self.y[slot][i] = g_new[i] - g[i];
        }
        let sy = dot(&self.s[slot], &self.y[slot]);
        let yy = dot(&self.y[slot], &self.y[slot]);
        if sy <= 1e-12 * yy || !sy.is_finite() {
            return;
        }
        self.rho[slot] = 1.0 / sy;
        self.next = (slot + 1) % self.s.len();
        self.len = (self.len + 1).min(self.s.len());
    }

    /// d = −H·g by the two-loop recursion, with H₀ = (sᵀy / yᵀy)·I from the newest pair.
    fn direction(&mut self, g: &[f64], d: &mut [f64]) {
        d.iter_mut().zip(g).for_each(|(di, gi)| *di = -gi);
        let cap = self.s.len();
        let newest_first = |k: usize| (self.next + cap - 1 - k) % cap;
        for j in (0..self.len).map(newest_first) {
            self.alpha[j] = self.rho[j] * dot(&self.s[j], d);
            axpy(-self.alpha[j], &self.y[j], d);
        }
        if self.len > 0 {
            let newest = newest_first(0);
            let gamma = 1.0 / (self.rho[newest] * dot(&self.y[newest], &self.y[newest]));
            d.iter_mut().for_each(|di| *di *= gamma);
        }
        for j in (0..self.len).rev().map(newest_first) {
            let beta = self.rho[j] * dot(&self.y[j], d);
            axpy(self.alpha[j] - beta, &self.s[j], d);
        }
    }
}

fn dot(a: &[f64], b: &[f64]) -> f64 {
    a.iter().zip(b).map(|(x, y)| x * y).sum()
}

fn axpy(a: f64, x: &[f64], y: &mut [f64]) {
    y.iter_mut().zip(x).for_each(|(yi, xi)| *yi += a * xi);
}

fn norm2(v: &[f64]) -> f64 {
    dot(v, v).sqrt()
}

fn max_abs(v: &[f64]) -> f64 {
    v.iter().fold(0.0, |m, x| m.max(x.abs()))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn minimises_the_rosenbrock_function() {
        // Rosenbrock (1960): minimum 0 at (1, 1); a standard hard test for quasi-Newton methods.
        let f = |x: &[f64], g: &mut [f64]| {
            let (a, b) = (x[0], x[1]);
            g[0] = -2.0 * (1.0 - a) - 400.0 * a * (b - a * a);
            g[1] = 200.0 * (b - a * a);
            (1.0 - a).powi(2) + 100.0 * (b - a * a).powi(2)
        };
        let options = LbfgsOptions {
            grad_tol: 1e-8,
            rel_decrease_tol: 0.0,
            ..Default::default()
        };
        let out = minimize(f, vec![-1.2, 1.0], &options, |_| true);
        assert_eq!(out.stop, Stop::Gradient);
        assert!(
            (out.x[0] - 1.0).abs() < 1e-6 && (out.x[1] - 1.0).abs() < 1e-6,
            "{:?}",
            out.x
        );
    }

    #[test]
    fn solves_a_quadratic_exactly() {
        // f = ½ xᵀAx − bᵀx with A = diag(1..10): minimiser x = b / diag.
        let f = |x: &[f64], g: &mut [f64]| {
            let mut v = 0.0;
            for i in 0..x.len() {
                let a = (i + 1) as f64;
                g[i] = a * x[i] - 1.0;
                v += 0.5 * a * x[i] * x[i] - x[i];
            }
            v
        };
        let options = LbfgsOptions {
            grad_tol: 1e-7,
            rel_decrease_tol: 0.0,
            ..Default::default()
        };
        let out = minimize(f, vec![0.0; 10], &options, |_| true);
        assert_eq!(out.stop, Stop::Gradient);
        for (i, xi) in out.x.iter().enumerate() {
            assert!((xi - 1.0 / (i + 1) as f64).abs() < 1e-7);
        }
    }

    #[test]
    fn stops_when_asked_and_at_max_iter() {
        let f = |x: &[f64], g: &mut [f64]| {
            g[0] = 2.0 * x[0];
            x[0] * x[0]
        };
        assert_eq!(
            minimize(f, vec![5.0], &LbfgsOptions::default(), |_| false).stop,
            Stop::Cancelled
        );
        let rosen = |x: &[f64], g: &mut [f64]| {
            g[0] = -2.0 * (1.0 - x[0]) - 400.0 * x[0] * (x[1] - x[0] * x[0]);
            g[1] = 200.0 * (x[1] - x[0] * x[0]);
            (1.0 - x[0]).powi(2) + 100.0 * (x[1] - x[0] * x[0]).powi(2)
        };
        let options = LbfgsOptions {
            max_iter: 3,
            rel_decrease_tol: 0.0,
            ..Default::default()
        };
        let out = minimize(rosen, vec![-1.2, 1.0], &options, |_| true);
        assert_eq!((out.stop, out.iterations), (Stop::MaxIter, 3));
    }
}
