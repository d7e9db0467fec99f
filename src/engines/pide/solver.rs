//! One solve of the Merton PIDE on a fixed grid and time step.
//!
//! Unknown `v(x, tau) = V / K` with `x = ln(S / K)` and `tau` the time to
//! expiry:
//!
//! `v_tau = a v_xx + nu v_x - (r + lambda) v + lambda (J v)`,
//! `a = sigma^2 / 2`, `nu = r - q - sigma^2 / 2 - lambda kappa_h`.
//!
//! Space: second-order central differences on a uniform grid (first-order
//! upwinding of the drift at a node where the cell Peclet number exceeds
//! one, which only happens for very small diffusion vols; the observed
//! order in the refinement then says so). Time: Crank-Nicolson, with the
//! first two steps replaced by four fully implicit half steps (Rannacher
//! 1984), which damps the payoff kink. The payoff is cell-averaged at
//! every node. The implicit jump term is resolved by the fixed-point
//! iteration of d'Halluin, Forsyth & Vetzal (2005): the diffusion part is
//! solved exactly (tridiagonal), the jump integral lags one iterate; the
//! iterate contracts by about `lambda dtau / (1 + (r + lambda) dtau)` per
//! pass. The first iterate's integral is extrapolated from the last two
//! steps (no FFT), each accepted value's integral is kept as the next
//! step's explicit part, and the passes stop once the iteration error bound
//! is below a share of the tolerance (`Problem::fixed_point_budget`), so a
//! step usually costs two FFTs. American exercise adds the penalty term of Forsyth & Vetzal
//! (2002): `rho (g - v)^+` with `rho = PENALTY`, the active set taken from
//! the current iterate, iterated together with the jump term.
//!
//! Boundaries: Dirichlet at both ends with the asymptotic values (deep in
//! the money the discounted forward payoff, for American exercise at least
//! the intrinsic value; deep out of the money zero); the same values stand
//! in for nodes beyond the grid that the jump integral reads.

use super::grid::Grid;
use super::jumps::{JumpOperator, OutsidePiece};
use crate::model::{Contract, OptionKind};

/// Penalty factor of the American constraint (violations are of order
/// `1 / PENALTY` of the rhs, far below the discretisation error).
pub const PENALTY: f64 = 1e9;
/// Relative change below which the fixed-point / penalty iteration stops.
pub const ITERATION_TOL: f64 = 1e-13;
/// Iteration cap per time step (the iteration has never needed more than a
/// few passes at the step sizes used; hitting the cap is an error).
pub const MAX_ITERATIONS: usize = 200;

/// Exercise style.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Exercise {
    /// Exercise at expiry only.
    European,
    /// Exercise at any time up to expiry.
    American,
}

/// The time steps `(dtau, theta)`: nodes `tau_j = T (j / M)^power` (a power
/// above one concentrates steps near expiry, where the payoff kink and the
/// early-exercise boundary move fastest), the first two intervals each
/// replaced by two fully implicit half steps (Rannacher), Crank-Nicolson after.
pub fn time_schedule(expiry: f64, steps: usize, power: f64) -> Vec<(f64, f64)> {
    let steps = steps.max(3);
    let node = |j: usize| expiry * (j as f64 / steps as f64).powf(power);
    let mut out = Vec::with_capacity(steps + 2);
    for j in 0..steps {
        let dt = node(j + 1) - node(j);
        if j < 2 {
            out.push((0.5 * dt, 1.0));
            out.push((0.5 * dt, 1.0));
        } else {
            out.push((dt, 0.5));
        }
    }
    out
}

/// Normalised values at the spot node (divide by nothing: `V = K v`).
#[derive(Debug, Clone, Copy)]
pub struct LevelValues {
    /// `v` at `x_0`.
    pub v: f64,
    /// `dv/dx` at `x_0`.
    pub v_x: f64,
    /// `d2v/dx2` at `x_0`.
    pub v_xx: f64,
    /// `dv/dtau` at `x_0` and `tau = T` (second-order backward difference).
    pub v_tau: f64,
    /// Largest number of iterations a time step needed.
    pub max_iterations: usize,
}

/// Problem data shared by all levels.
pub struct Problem {
    kind: OptionKind,
    exercise: Exercise,
    r: f64,
    q: f64,
    a: f64,
    lambda: f64,
    /// Expiry.
    pub expiry: f64,
    jump_mean: f64,
    jump_vol: f64,
    /// Exponent of the time grid map (see [`time_schedule`]).
    pub time_power: f64,
    /// Budget for the fixed-point iteration error of the jump term, in
    /// units of `v` over the whole solve (0: iterate to [`ITERATION_TOL`]).
    /// Each step stops once the active set is settled and the error bound
    /// `q / (1 - q) |J u - J v_k|` of its pass `k` (`u` the iterate whose
    /// jump integral the pass used) is below the budget divided by the
    /// number of steps, where
    /// `q = theta dtau lambda / (1 + theta dtau (r + lambda))` bounds the
    /// contraction in the max norm (the weights are non-negative and sum to
    /// one; the implicit matrix is an M-matrix with row sums at least
    /// `1 + theta dtau (r + lambda)`).
    pub fixed_point_budget: f64,
}

impl Problem {
    /// From a validated contract.
    pub fn new(c: &Contract, exercise: Exercise) -> Self {
        Problem {
            kind: c.kind,
            exercise,
            r: c.rate,
            q: c.div_yield,
            a: 0.5 * c.vol * c.vol,
            lambda: c.jumps.rate,
            expiry: c.expiry,
            jump_mean: c.jumps.mean,
            jump_vol: c.jumps.vol,
            time_power: 2.0,
            fixed_point_budget: 0.0,
        }
    }

    /// Intrinsic value at `x`.
    fn intrinsic(&self, x: f64) -> f64 {
        match self.kind {
            OptionKind::Call => x.exp_m1().max(0.0),
            OptionKind::Put => (-x.exp_m1()).max(0.0),
        }
    }

    /// Payoff averaged over the cell `[x - h/2, x + h/2]`.
    fn cell_payoff(&self, x: f64, h: f64) -> f64 {
        let (l, u) = (x - 0.5 * h, x + 0.5 * h);
        // integral of (e^s - 1)^+ (call) or (1 - e^s)^+ (put).
        let int = match self.kind {
            OptionKind::Call if l >= 0.0 => (u.exp() - l.exp()) - (u - l),
            OptionKind::Call if u <= 0.0 => 0.0,
            OptionKind::Call => u.exp_m1() - u,
            OptionKind::Put if u <= 0.0 => (u - l) - (u.exp() - l.exp()),
            OptionKind::Put if l >= 0.0 => 0.0,
            OptionKind::Put => -l + l.exp_m1(),
        };
        int / h
    }

    /// Asymptotic value far from the strike at `x` and `tau`: the
    /// discounted forward payoff on the in-the-money side (at least the
    /// intrinsic value when American), zero on the other.
    fn asymptote(&self, x: f64, tau: f64) -> f64 {
        let fwd = (x - self.q * tau).exp() - (-self.r * tau).exp();
        let itm_side = match self.kind {
            OptionKind::Call => x > 0.0,
            OptionKind::Put => x < 0.0,
        };
        if !itm_side {
            return 0.0;
        }
        let euro = (self.kind.sign() * fwd).max(0.0);
        match self.exercise {
            Exercise::European => euro,
            Exercise::American => euro.max(self.intrinsic(x)),
        }
    }

    /// Solves on `grid` with `steps` Crank-Nicolson steps (after Rannacher).
    ///
    /// # Errors
    /// When the iteration of a time step does not converge.
    pub fn solve(&self, grid: &Grid, steps: usize) -> Result<LevelValues, String> {
        let n = grid.nodes;
        let h = grid.h;
        let mut jumps =
            (self.lambda > 0.0).then(|| JumpOperator::new(self.jump_mean, self.jump_vol, h, n));
        let kappa = jumps.as_ref().map_or(0.0, |j| j.kappa_h);
        let nu = self.r - self.q - self.a - self.lambda * kappa;
        let c = self.r + self.lambda;
        let diff = self.a / (h * h);
        let (alpha, beta, gamma) = if diff >= nu.abs() / (2.0 * h) {
            (
                diff - nu / (2.0 * h),
                -2.0 * diff - c,
                diff + nu / (2.0 * h),
            )
        } else if nu > 0.0 {
            (diff, -2.0 * diff - nu / h - c, diff + nu / h)
        } else {
            (diff - nu / h, -2.0 * diff + nu / h - c, diff)
        };
        let xs: Vec<f64> = (0..n).map(|i| grid.x(i)).collect();
        let obstacle: Vec<f64> = match self.exercise {
            Exercise::American => xs.iter().map(|&x| self.intrinsic(x)).collect(),
            Exercise::European => Vec::new(),
        };
        let mut v: Vec<f64> = xs.iter().map(|&x| self.cell_payoff(x, h)).collect();
        let schedule = time_schedule(self.expiry, steps, self.time_power);
        let mut ws = Workspace::new(n);
        ws.hist1.copy_from_slice(&v);
        let eps = self.fixed_point_budget / schedule.len() as f64;
        if let Some(j) = jumps.as_mut() {
            ws.exs = xs.iter().map(|x| x.exp()).collect();
            self.outside_pieces(j, &xs, 0.0, &mut ws.pieces);
            j.apply_split(&v, &ws.exs, &ws.pieces, &mut ws.jv_cur);
            ws.jv_prev.copy_from_slice(&ws.jv_cur);
        }
        let mut tau = 0.0;
        let mut max_it = 0;
        let (mut last_dt, mut prev_dt) = (0.0, 0.0);
        for (step_dt, theta) in schedule {
            let tau_new = tau + step_dt;
            let mut ctx = StepCtx {
                xs: &xs,
                obstacle: &obstacle,
                jumps: jumps.as_mut(),
                coeffs: (alpha, beta, gamma),
                tau_new,
                dt: step_dt,
                theta,
                eps,
            };
            let it = self.step(&mut ctx, &v, &mut ws)?;
            max_it = max_it.max(it);
            // History: hist2 <- hist1 <- v <- next.
            std::mem::swap(&mut ws.hist2, &mut ws.hist1);
            std::mem::swap(&mut ws.hist1, &mut v);
            std::mem::swap(&mut v, &mut ws.next);
            tau = tau_new;
            prev_dt = last_dt;
            last_dt = step_dt;
        }
        let i = grid.i0;
        let v_x = (v[i + 1] - v[i - 1]) / (2.0 * h);
        let v_xx = (v[i + 1] - 2.0 * v[i] + v[i - 1]) / (h * h);
        // Second-order backward difference on the last two (unequal) steps.
        let (h1, h2) = (last_dt, prev_dt);
        let v_tau = v[i] * (2.0 * h1 + h2) / (h1 * (h1 + h2)) - ws.hist1[i] * (h1 + h2) / (h1 * h2)
            + ws.hist2[i] * h1 / (h2 * (h1 + h2));
        Ok(LevelValues {
            v: v[i],
            v_x,
            v_xx,
            v_tau,
            max_iterations: max_it,
        })
    }

    /// One theta-step from `tau` to `tau_new`; the result is left in
    /// `ws.next`, and with jumps its jump integral in `ws.jv_cur` (the next
    /// step's explicit part, so each step costs one FFT less).
    fn step(&self, ctx: &mut StepCtx<'_>, v: &[f64], ws: &mut Workspace) -> Result<usize, String> {
        let n = v.len();
        let (alpha, beta, gamma) = ctx.coeffs;
        let (dt, theta) = (ctx.dt, ctx.theta);
        let has_jumps = ctx.jumps.is_some();
        let lam = self.lambda;
        // Explicit part: v + (1 - theta) dt (L_D v + lambda J v), with J v
        // left by the previous step.
        for i in 1..n - 1 {
            let mut rhs = v[i];
            if theta < 1.0 {
                let ld = alpha * v[i - 1] + beta * v[i] + gamma * v[i + 1];
                let jv = if has_jumps { lam * ws.jv_cur[i] } else { 0.0 };
                rhs += (1.0 - theta) * dt * (ld + jv);
            }
            ws.rhs0[i] = rhs;
        }
        let left = self.asymptote(ctx.xs[0], ctx.tau_new);
        let right = self.asymptote(ctx.xs[n - 1], ctx.tau_new);
        // First guess: linear extrapolation in time.
        for ((g, &now), &before) in ws.guess.iter_mut().zip(v).zip(&ws.hist1) {
            *g = 2.0 * now - before;
        }
        let american = self.exercise == Exercise::American;
        if american {
            for (g, &o) in ws.guess.iter_mut().zip(ctx.obstacle) {
                *g = g.max(o);
            }
        }
        if let Some(j) = ctx.jumps.as_deref_mut() {
            // The first iterate's jump integral is extrapolated like the
            // guess, `2 J v^n - J v^(n-1)` (no FFT); the passes correct it.
            self.outside_pieces(j, ctx.xs, ctx.tau_new, &mut ws.pieces);
            for ((o, &a), &b) in ws.jv.iter_mut().zip(&ws.jv_cur).zip(&ws.jv_prev) {
                *o = 2.0 * a - b;
            }
        }
        let lo = -theta * dt * alpha;
        let up = -theta * dt * gamma;
        let d0 = 1.0 - theta * dt * beta;
        let tj = theta * dt * lam;
        // Contraction factor of the jump iteration (see `fixed_point_budget`).
        let denom = 1.0 + theta * dt * (self.r + lam);
        let q = if denom > tj {
            tj / denom
        } else {
            f64::INFINITY
        };
        let bound_factor = if q < 1.0 {
            q / (1.0 - q)
        } else {
            f64::INFINITY
        };
        // A free node becomes active when it falls below the obstacle; an
        // active node is released only when the equation with v_i = g would
        // push it up (its residual is positive). Testing the penalised value
        // itself against g would read rounding of `PENALTY * g` and can cycle.
        let is_active = |was: bool, r: f64, u: &[f64], i: usize, g: f64| {
            if was {
                r - lo * u[i - 1] - d0 * g - up * u[i + 1] <= 0.0
            } else {
                u[i] < g
            }
        };
        let mut iterations = 0;
        loop {
            iterations += 1;
            // Tridiagonal system for the interior nodes 1..n-2.
            for i in 1..n - 1 {
                let mut r = ws.rhs0[i];
                if has_jumps {
                    r += tj * ws.jv[i];
                }
                let mut d = d0;
                if american {
                    let g = ctx.obstacle[i];
                    let active = is_active(ws.active[i], r, &ws.guess, i, g);
                    ws.active[i] = active;
                    if active {
                        d += PENALTY;
                        r += PENALTY * g;
                    }
                }
                ws.diag[i] = d;
                ws.b[i] = r;
            }
            ws.b[1] -= lo * left;
            ws.b[n - 2] -= up * right;
            // Thomas algorithm (diagonally dominant: d >= 1 + dt (r + lambda) > |lo| + |up|
            // whenever the coefficients are non-negative).
            ws.next[0] = left;
            ws.next[n - 1] = right;
            // Once c' stops changing on a run of unpenalised rows it stays
            // fixed (same inputs, same rounding), so its division is skipped.
            let mut c_prime = 0.0;
            let mut d_prime = 0.0;
            let mut inv = 0.0;
            let mut steady = false;
            for i in 1..n - 1 {
                let d = ws.diag[i];
                if !(steady && d == d0) {
                    inv = 1.0 / (d - lo * c_prime);
                    let c_new = up * inv;
                    steady = d == d0 && c_new == c_prime;
                    c_prime = c_new;
                }
                d_prime = (ws.b[i] - lo * d_prime) * inv;
                ws.cp[i] = c_prime;
                ws.dp[i] = d_prime;
            }
            ws.next[n - 2] = ws.dp[n - 2];
            for i in (1..n - 2).rev() {
                ws.next[i] = ws.dp[i] - ws.cp[i] * ws.next[i + 1];
            }
            if !has_jumps && !american {
                return Ok(iterations);
            }
            let mut change: f64 = 0.0;
            let mut scale: f64 = 1e-300;
            for i in 0..n {
                change = change.max((ws.next[i] - ws.guess[i]).abs());
                scale = scale.max(ws.next[i].abs());
            }
            if let Some(j) = ctx.jumps.as_deref_mut() {
                j.apply_split(&ws.next, &ws.exs, &ws.pieces, &mut ws.jv_next);
            }
            // The active set the next pass would build from this solution:
            // unchanged (and, with jumps, the iteration error bound within
            // the budget) means the next pass would reproduce it (without
            // jumps exactly, Forsyth & Vetzal 2002), so it is accepted.
            let mut flips = 0usize;
            if american {
                for i in 1..n - 1 {
                    let r = ws.rhs0[i] + if has_jumps { tj * ws.jv_next[i] } else { 0.0 };
                    let was = ws.active[i];
                    flips += usize::from(is_active(was, r, &ws.next, i, ctx.obstacle[i]) != was);
                }
            }
            // Fixed-point error bound: with u the iterate whose integral was
            // used, |v_k - v*| <= q / (1 - q) |J u - J v_k| (max norm).
            let settled = !has_jumps || {
                let res = ws
                    .jv
                    .iter()
                    .zip(&ws.jv_next)
                    .fold(0.0f64, |m, (a, b)| m.max((a - b).abs()));
                bound_factor * res <= ctx.eps
            };
            if (settled && flips == 0) || change <= ITERATION_TOL * scale {
                if has_jumps {
                    std::mem::swap(&mut ws.jv_prev, &mut ws.jv_cur);
                    std::mem::swap(&mut ws.jv_cur, &mut ws.jv_next);
                }
                return Ok(iterations);
            }
            if iterations >= MAX_ITERATIONS {
                return Err(format!(
                    "the PIDE time step iteration did not converge in {MAX_ITERATIONS} passes \
                     (last relative change {:.1e})",
                    change / scale
                ));
            }
            std::mem::swap(&mut ws.guess, &mut ws.next);
            std::mem::swap(&mut ws.jv, &mut ws.jv_next);
        }
    }

    /// The asymptotic values at `tau` of the nodes beyond the grid that the
    /// jump integral reads (`m_lo <= j < 0` and `n <= j < n + m_hi`), as runs
    /// of the form `a + b e^{x_j}`: zero, the discounted forward payoff, or
    /// (American) the intrinsic value. Each pairwise difference of these is
    /// monotone in `e^x`, so the kind changes at most twice on each side and
    /// the runs are found by bisection.
    fn outside_pieces(&self, j: &JumpOperator, xs: &[f64], tau: f64, out: &mut Vec<OutsidePiece>) {
        out.clear();
        let n = xs.len() as i64;
        let h = xs[1] - xs[0];
        let (dq, dr) = ((-self.q * tau).exp(), (-self.r * tau).exp());
        let w = self.kind.sign();
        let kind_at = |jn: i64| -> (u8, f64, f64) {
            let x = xs[0] + jn as f64 * h;
            let itm = match self.kind {
                OptionKind::Call => x > 0.0,
                OptionKind::Put => x < 0.0,
            };
            if !itm {
                return (0, 0.0, 0.0);
            }
            let ex = x.exp();
            let euro = w * (ex * dq - dr);
            let euro_piece = if euro > 0.0 {
                (1, -w * dr, w * dq)
            } else {
                (0, 0.0, 0.0)
            };
            if self.exercise == Exercise::American && w * (ex - 1.0) > euro.max(0.0) {
                (2, -w, w)
            } else {
                euro_piece
            }
        };
        let m_hi = j.m_lo + j.weights.len() as i64 - 1;
        for (lo, hi) in [(j.m_lo.min(0), 0), (n, n + m_hi.max(0))] {
            let mut start = lo;
            while start < hi {
                let (kind, a, b) = kind_at(start);
                // First index in (start, hi) of another kind.
                let (mut l, mut r) = (start + 1, hi);
                while l < r {
                    let mid = l + (r - l) / 2;
                    if kind_at(mid).0 == kind {
                        l = mid + 1;
                    } else {
                        r = mid;
                    }
                }
                if kind != 0 {
                    out.push(OutsidePiece {
                        j_a: start,
                        j_b: l,
                        a,
                        b,
                    });
                }
                start = l;
            }
        }
    }
}

/// Per-step context.
struct StepCtx<'a> {
    xs: &'a [f64],
    obstacle: &'a [f64],
    jumps: Option<&'a mut JumpOperator>,
    coeffs: (f64, f64, f64),
    tau_new: f64,
    dt: f64,
    theta: f64,
    /// Iteration error allowed in this step (units of `v`).
    eps: f64,
}

/// Buffers reused by every step.
struct Workspace {
    /// `e^x` at the grid nodes and the outside values as pieces.
    exs: Vec<f64>,
    pieces: Vec<OutsidePiece>,
    /// Jump integral of the current iterate, of the new solution, and of
    /// the accepted values at the start of the step and one step before.
    jv: Vec<f64>,
    jv_next: Vec<f64>,
    jv_cur: Vec<f64>,
    jv_prev: Vec<f64>,
    rhs0: Vec<f64>,
    guess: Vec<f64>,
    next: Vec<f64>,
    diag: Vec<f64>,
    b: Vec<f64>,
    cp: Vec<f64>,
    dp: Vec<f64>,
    active: Vec<bool>,
    hist1: Vec<f64>,
    hist2: Vec<f64>,
}

impl Workspace {
    fn new(n: usize) -> Self {
        Workspace {
            exs: Vec::new(),
            pieces: Vec::new(),
            jv: vec![0.0; n],
            jv_next: vec![0.0; n],
            jv_cur: vec![0.0; n],
            jv_prev: vec![0.0; n],
            rhs0: vec![0.0; n],
            guess: vec![0.0; n],
            next: vec![0.0; n],
            diag: vec![0.0; n],
            b: vec![0.0; n],
            cp: vec![0.0; n],
            dp: vec![0.0; n],
            active: vec![false; n],
            hist1: vec![0.0; n],
            hist2: vec![0.0; n],
        }
    }
}
