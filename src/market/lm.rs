//! Levenberg-Marquardt for small nonlinear least-squares problems
//! (a handful of parameters, a few hundred residuals), after Moré (1978):
//!
//! minimise `|r(x)|^2`; each step solves the damped linear problem
//! `min |J p + r|^2 + mu |D p|^2` by a Householder QR of the stacked matrix
//! `[J; sqrt(mu) D]` (never the normal equations, which square the
//! condition number), with Moré's scaling `D_j = max over iterations of the
//! norm of column j of J`. The damping `mu` follows the gain ratio
//! `rho = actual / predicted reduction` by Nielsen's rule (1999): accepted
//! steps scale it by `max(1/3, 1 - (2 rho - 1)^3)`, rejected ones by a
//! doubling factor.
//!
//! The caller supplies the exact Jacobian. A point where the residuals
//! cannot be evaluated is treated as a rejected step.
//!
//! References: J. J. Moré, "The Levenberg-Marquardt algorithm:
//! implementation and theory", Numerical Analysis, LNM 630 (1978);
//! H. B. Nielsen, "Damping parameter in Marquardt's method", IMM DTU (1999).

/// A least-squares problem with an exact Jacobian.
pub trait Problem {
    /// Residuals `r` (length m) and Jacobian `jac` (m x n, row-major) at
    /// `x`; `false` when the point cannot be evaluated.
    fn eval(&self, x: &[f64], r: &mut Vec<f64>, jac: &mut Vec<f64>) -> bool;
}

/// Stopping rules.
#[derive(Debug, Clone, Copy)]
pub struct LmOptions {
    /// Iteration limit (accepted or rejected steps).
    pub max_iterations: usize,
    /// Stop when an accepted step reduces the objective by less than this
    /// fraction and predicts no more.
    pub ftol: f64,
    /// Stop when every step component is below `xtol (1 + |x_j|)`.
    pub xtol: f64,
    /// Stop when the cosine between the residual and every column of `J`
    /// is below this.
    pub gtol: f64,
}

impl Default for LmOptions {
    fn default() -> Self {
        LmOptions {
            max_iterations: 300,
            ftol: 1e-15,
            xtol: 1e-13,
            gtol: 1e-12,
        }
    }
}

/// Why the iteration stopped.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum StopReason {
    /// The objective is zero to double precision.
    ZeroResidual,
    /// The relative reduction of the objective fell below `ftol`.
    SmallReduction,
    /// The step fell below `xtol`.
    SmallStep,
    /// The gradient is orthogonal to the residual within `gtol`.
    SmallGradient,
    /// The iteration limit was reached.
    IterationLimit,
    /// The starting point could not be evaluated.
    StartFailed,
}

impl StopReason {
    /// True for the reasons that mean a minimum was reached.
    pub fn converged(self) -> bool {
        !matches!(self, StopReason::IterationLimit | StopReason::StartFailed)
    }

    /// Text for the output files.
    pub fn as_str(self) -> &'static str {
        match self {
            StopReason::ZeroResidual => "zero residual",
            StopReason::SmallReduction => "objective reduction below tolerance",
            StopReason::SmallStep => "step below tolerance",
            StopReason::SmallGradient => "gradient below tolerance",
            StopReason::IterationLimit => "iteration limit",
            StopReason::StartFailed => "start point could not be evaluated",
        }
    }
}

/// The result of a minimisation.
#[derive(Debug, Clone)]
pub struct LmResult {
    /// The final point.
    pub x: Vec<f64>,
    /// `|r(x)|^2` there.
    pub objective: f64,
    /// Iterations (steps tried).
    pub iterations: usize,
    /// Why it stopped.
    pub stop: StopReason,
}

/// Least squares `min |A p - b|` for an `rows x n` row-major `a`, by
/// Householder QR; `a` and `b` are overwritten. Returns `None` when `A` is
/// rank deficient to working precision.
pub fn least_squares(a: &mut [f64], b: &mut [f64], rows: usize, n: usize) -> Option<Vec<f64>> {
    let mut diag = vec![0.0; n];
    for k in 0..n {
        let norm = (k..rows).map(|i| a[i * n + k].powi(2)).sum::<f64>().sqrt();
        if norm == 0.0 {
            return None;
        }
        let alpha = if a[k * n + k] > 0.0 { -norm } else { norm };
        // v = x - alpha e_k, stored in column k.
        a[k * n + k] -= alpha;
        let vnorm2: f64 = (k..rows).map(|i| a[i * n + k].powi(2)).sum();
        diag[k] = alpha;
        if vnorm2 == 0.0 {
            continue;
        }
        for j in k + 1..n {
            let dot: f64 = (k..rows).map(|i| a[i * n + k] * a[i * n + j]).sum();
            let f = 2.0 * dot / vnorm2;
            for i in k..rows {
                a[i * n + j] -= f * a[i * n + k];
            }
        }
        let dot: f64 = (k..rows).map(|i| a[i * n + k] * b[i]).sum();
        let f = 2.0 * dot / vnorm2;
        for i in k..rows {
            b[i] -= f * a[i * n + k];
        }
    }
    let scale = diag.iter().fold(0.0_f64, |m, d| m.max(d.abs()));
    let mut x = vec![0.0; n];
    for k in (0..n).rev() {
        if diag[k].abs() <= scale * 1e-15 {
            return None;
        }
        let s: f64 = (k + 1..n).map(|j| a[k * n + j] * x[j]).sum();
        x[k] = (b[k] - s) / diag[k];
    }
    Some(x)
}

/// Minimises `|r(x)|^2` from `x0`.
pub fn minimise<P: Problem>(p: &P, x0: &[f64], opts: &LmOptions) -> LmResult {
    let n = x0.len();
    let mut x = x0.to_vec();
    let (mut r, mut jac) = (Vec::new(), Vec::new());
    if !p.eval(&x, &mut r, &mut jac) || r.iter().any(|v| !v.is_finite()) {
        return LmResult {
            x,
            objective: f64::INFINITY,
            iterations: 0,
            stop: StopReason::StartFailed,
        };
    }
    let m = r.len();
    let mut cost: f64 = r.iter().map(|v| v * v).sum();
    let mut d = vec![0.0_f64; n];
    let mut mu: f64 = 1e-3;
    let mut nu = 2.0;
    let (mut r_new, mut jac_new) = (Vec::new(), Vec::new());
    let mut a = vec![0.0; (m + n) * n];
    let mut b = vec![0.0; m + n];
    for it in 1..=opts.max_iterations {
        if cost <= 1e-30 {
            return done(x, cost, it - 1, StopReason::ZeroResidual);
        }
        for (j, dj) in d.iter_mut().enumerate() {
            let norm = (0..m).map(|i| jac[i * n + j].powi(2)).sum::<f64>().sqrt();
            *dj = dj.max(norm);
            if *dj == 0.0 {
                *dj = 1.0;
            }
        }
        let rnorm = cost.sqrt();
        let gcos = (0..n)
            .map(|j| {
                let g: f64 = (0..m).map(|i| jac[i * n + j] * r[i]).sum();
                g.abs() / (d[j] * rnorm)
            })
            .fold(0.0, f64::max);
        if gcos <= opts.gtol {
            return done(x, cost, it - 1, StopReason::SmallGradient);
        }
        a[..m * n].copy_from_slice(&jac[..m * n]);
        for i in 0..n {
            for j in 0..n {
                a[(m + i) * n + j] = if i == j { mu.sqrt() * d[j] } else { 0.0 };
            }
        }
        for i in 0..m {
            b[i] = -r[i];
        }
        b[m..].fill(0.0);
        let Some(step) = least_squares(&mut a, &mut b, m + n, n) else {
            mu *= nu;
            nu *= 2.0;
            continue;
        };
        if step
            .iter()
            .zip(&x)
            .all(|(s, xi)| s.abs() <= opts.xtol * (1.0 + xi.abs()))
        {
            return done(x, cost, it, StopReason::SmallStep);
        }
        // Predicted objective: |r + J p|^2.
        let lin: f64 = (0..m)
            .map(|i| {
                let jp: f64 = (0..n).map(|j| jac[i * n + j] * step[j]).sum();
                (r[i] + jp).powi(2)
            })
            .sum();
        let pred = cost - lin;
        let trial: Vec<f64> = x.iter().zip(&step).map(|(a, b)| a + b).collect();
        let ok = p.eval(&trial, &mut r_new, &mut jac_new)
            && r_new.len() == m
            && r_new.iter().all(|v| v.is_finite());
        let new_cost: f64 = if ok {
            r_new.iter().map(|v| v * v).sum()
        } else {
            f64::INFINITY
        };
        let rho = if pred > 0.0 {
            (cost - new_cost) / pred
        } else {
            -1.0
        };
        if rho > 1e-4 {
            let reduction = (cost - new_cost) / cost;
            x = trial;
            std::mem::swap(&mut r, &mut r_new);
            std::mem::swap(&mut jac, &mut jac_new);
            cost = new_cost;
            mu *= (1.0 - (2.0 * rho - 1.0).powi(3)).max(1.0 / 3.0);
            nu = 2.0;
            if reduction <= opts.ftol && pred / cost.max(f64::MIN_POSITIVE) <= opts.ftol {
                return done(x, cost, it, StopReason::SmallReduction);
            }
        } else {
            mu *= nu;
            nu *= 2.0;
            if !mu.is_finite() || mu > 1e30 {
                return done(x, cost, it, StopReason::SmallStep);
            }
        }
    }
    done(x, cost, opts.max_iterations, StopReason::IterationLimit)
}

fn done(x: Vec<f64>, objective: f64, iterations: usize, stop: StopReason) -> LmResult {
    LmResult {
        x,
        objective,
        iterations,
        stop,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Rosenbrock as least squares: r = (10 (x1 - x0^2), 1 - x0), minimum
    /// at (1, 1) with zero residual (Moré, Garbow & Hillstrom 1981, problem 1).
    struct Rosenbrock;
    impl Problem for Rosenbrock {
        fn eval(&self, x: &[f64], r: &mut Vec<f64>, jac: &mut Vec<f64>) -> bool {
            *r = vec![10.0 * (x[1] - x[0] * x[0]), 1.0 - x[0]];
            *jac = vec![-20.0 * x[0], 10.0, -1.0, 0.0];
            true
        }
    }

    #[test]
    fn rosenbrock_from_the_standard_start() {
        let res = minimise(&Rosenbrock, &[-1.2, 1.0], &LmOptions::default());
        assert!(res.stop.converged(), "{:?}", res.stop);
        assert!((res.x[0] - 1.0).abs() < 1e-10 && (res.x[1] - 1.0).abs() < 1e-10);
    }

    #[test]
    fn qr_solves_an_overdetermined_line_fit() {
        // Fit y = 1 + 2 t exactly through 4 points.
        let mut a = vec![1.0, 0.0, 1.0, 1.0, 1.0, 2.0, 1.0, 3.0];
        let mut b = vec![1.0, 3.0, 5.0, 7.0];
        let x = least_squares(&mut a, &mut b, 4, 2).unwrap();
        assert!((x[0] - 1.0).abs() < 1e-14 && (x[1] - 2.0).abs() < 1e-14);
    }
}
