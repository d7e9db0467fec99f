//! Changes of measure for the Monte Carlo engine: the cumulant exponent of
//! the Merton log-return, the Esscher (exponential) tilt it defines, the
//! share measure as the tilt `theta = 1`, and the saddle-point choice of
//! `theta` for each payoff piece.
//!
//! # Esscher tilt
//! Let `X_T = ln(S_T / S)`. Under the pricing measure `P` its cumulant
//! exponent per unit time is
//! `psi(theta) = m theta + sigma^2 theta^2 / 2 + lambda (E[Y^theta] - 1)`,
//! `E[Y^theta] = exp(theta mu_J + theta^2 delta^2 / 2)`, with
//! `m = r - q - lambda k - sigma^2/2`. The tilted law
//! `dQ_theta / dP = exp(theta X_T - T psi(theta))` is again a Merton law:
//! Brownian drift `m + theta sigma^2`, intensity `lambda E[Y^theta]`, log
//! jump mean `mu_J + theta delta^2`, same `sigma` and `delta`; a path drawn
//! from it is weighted by `dP / dQ_theta = exp(-theta X_T + T psi(theta))`
//! (Glasserman 2004, *Monte Carlo Methods in Financial Engineering*,
//! sections 4.6 and 9.2; Glasserman, Heidelberger & Shahabuddin 1999).
//! A further change of the tilted intensity by a factor `gamma` (the
//! jump-count tilt) multiplies the weight by
//! `(1/gamma)^N exp((gamma - 1) lambda_theta T)`.
//!
//! `theta = 1` is the share measure (`psi(1) = r - q`): intensity
//! `lambda (1 + k)`, log jump mean `mu_J + delta^2`, drift raised by `sigma^2`.
//!
//! # Choice of theta (saddle point)
//! On the paying region a piece `g(X)` of the payoff times the weight is
//! bounded by `sup g(x) e^{-theta x} e^{T psi(theta)}`; minimising that
//! bound over `theta` gives the saddle-point equations
//! - vanilla option: `T psi'(theta) = x0 + ln(theta / (theta - 1))`,
//!   `theta > 1` for a call, `theta < 0` for a put (the tilted mean of
//!   `ln S_T` lies beyond `ln K`);
//! - digital pieces (`1{..}` and `e^X 1{..}`): `T psi'(theta) = x0`, the
//!   tilted mean at `ln K`, with `theta` kept on the side that bounds the
//!   weighted payoff (`theta >= 1` for `S_T 1{S_T > K}`, `>= 0` for
//!   `1{S_T > K}`, `<= 1` and `<= 0` for the put side);
//!
//! where `x0 = ln(K / S)`. On those sides the weighted payoff is bounded, so
//! its sample variance is an honest error bar once the paying paths are
//! plentiful. `psi'` is increasing, so each equation is solved by bracketing
//! and bisection; `theta` is limited so the tilted law stays inside what the
//! sampler handles ([`MAX_TILTED_COUNT_MEAN`]).

use crate::model::Contract;
use rand::Rng;
use rand_distr::{Distribution, StandardNormal};

/// Largest mean jump count `lambda E[Y^theta] T` a tilt may give.
pub const MAX_TILTED_COUNT_MEAN: f64 = 1e7;
/// Largest `|theta|` searched.
const MAX_THETA: f64 = 1e9;

/// The cumulant exponent of `X_T = ln(S_T/S)` per unit time under `P`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Cumulant {
    /// Drift `m = r - q - lambda k - sigma^2/2`.
    pub drift: f64,
    /// `sigma^2`.
    pub var: f64,
    /// `lambda`.
    pub rate: f64,
    /// `mu_J`.
    pub mean: f64,
    /// `delta^2`.
    pub jump_var: f64,
    /// `T`.
    pub expiry: f64,
}

impl Cumulant {
    /// The exponent of a contract.
    pub fn new(c: &Contract) -> Self {
        Cumulant {
            drift: c.rate - c.div_yield - c.jumps.rate * c.jumps.k() - 0.5 * c.vol * c.vol,
            var: c.vol * c.vol,
            rate: c.jumps.rate,
            mean: c.jumps.mean,
            jump_var: c.jumps.vol * c.jumps.vol,
            expiry: c.expiry,
        }
    }

    /// `ln E[Y^theta] = theta mu_J + theta^2 delta^2 / 2`.
    #[inline]
    pub fn log_jump_moment(&self, theta: f64) -> f64 {
        theta * self.mean + 0.5 * theta * theta * self.jump_var
    }

    /// `psi(theta)`.
    pub fn psi(&self, theta: f64) -> f64 {
        let jumps = if self.rate == 0.0 {
            0.0
        } else {
            self.rate * self.log_jump_moment(theta).exp_m1()
        };
        self.drift * theta + 0.5 * self.var * theta * theta + jumps
    }

    /// `psi'(theta)`.
    pub fn dpsi(&self, theta: f64) -> f64 {
        let jumps = if self.rate == 0.0 {
            0.0
        } else {
            self.rate * (self.mean + theta * self.jump_var) * self.log_jump_moment(theta).exp()
        };
        self.drift + self.var * theta + jumps
    }

    /// Intensity of the tilted law, `lambda E[Y^theta]`.
    pub fn tilted_rate(&self, theta: f64) -> f64 {
        if self.rate == 0.0 {
            0.0
        } else {
            self.rate * self.log_jump_moment(theta).exp()
        }
    }

    /// True when the tilted law is one the sampler handles: finite
    /// exponent, mean jump count at most [`MAX_TILTED_COUNT_MEAN`].
    pub fn admissible(&self, theta: f64) -> bool {
        theta.abs() <= MAX_THETA
            && (self.expiry * self.psi(theta)).is_finite()
            && self.tilted_rate(theta) * self.expiry <= MAX_TILTED_COUNT_MEAN
            && (self.expiry * self.dpsi(theta)).is_finite()
    }

    /// Solves `h(theta) = T psi'(theta) - target(theta) = 0` for an
    /// increasing `h` on `(lo, hi)` (open ends may be infinite), starting
    /// the bracket search at `start` and stepping outward geometrically.
    /// Returns the last admissible point when the root lies beyond what the
    /// sampler handles, `None` when no admissible point exists.
    fn solve(&self, h: impl Fn(f64) -> f64, lo: f64, hi: f64, start: f64) -> Option<f64> {
        if !self.admissible(start) {
            return None;
        }
        let h0 = h(start);
        if !h0.is_finite() {
            return None;
        }
        // Walk outward (up when h < 0, down when h > 0) until the sign changes.
        let up = h0 < 0.0;
        let mut inner;
        let mut outer = start;
        let mut step = 1.0f64.max(start.abs());
        loop {
            let next = if up {
                if hi.is_finite() {
                    outer + 0.5 * (hi - outer)
                } else {
                    outer + step
                }
            } else if lo.is_finite() {
                outer - 0.5 * (outer - lo)
            } else {
                outer - step
            };
            step *= 2.0;
            if !self.admissible(next) || (next - outer).abs() < 1e-15 * next.abs().max(1.0) {
                return Some(outer);
            }
            let hn = h(next);
            if !hn.is_finite() {
                return Some(outer);
            }
            inner = outer;
            outer = next;
            if (hn >= 0.0) == up {
                break;
            }
        }
        let (mut a, mut b) = if up { (inner, outer) } else { (outer, inner) };
        for _ in 0..200 {
            let mid = 0.5 * (a + b);
            if mid <= a || mid >= b {
                break;
            }
            if h(mid) < 0.0 {
                a = mid;
            } else {
                b = mid;
            }
        }
        Some(0.5 * (a + b))
    }

    /// `theta` with the tilted mean of `X_T` at `x0`: `T psi'(theta) = x0`.
    pub fn theta_mean_at(&self, x0: f64) -> Option<f64> {
        let t = self.expiry;
        self.solve(
            |th| t * self.dpsi(th) - x0,
            f64::NEG_INFINITY,
            f64::INFINITY,
            0.0,
        )
    }

    /// Saddle point of a vanilla option with log-moneyness `x0 = ln(K/S)`:
    /// `T psi'(theta) = x0 + ln(theta / (theta - 1))`, `theta > 1` for a
    /// call (`call = true`), `theta < 0` for a put.
    pub fn theta_vanilla(&self, x0: f64, call: bool) -> Option<f64> {
        let t = self.expiry;
        let h = |th: f64| t * self.dpsi(th) - x0 - (th / (th - 1.0)).ln();
        if call {
            self.solve(h, 1.0, f64::INFINITY, 2.0)
        } else {
            self.solve(h, f64::NEG_INFINITY, 0.0, -1.0)
        }
    }
}

/// One draw of `X_T` and its weight `dP/dQ` under the Esscher tilt `theta`
/// followed by the jump-count tilt `gamma`: a direct transcription of the
/// formulas in the module doc, independent of the engine's vectorised loop,
/// for tests of the identities `E_Q[w] = 1` and `E_Q[w h(X)] = E_P[h(X)]`.
#[derive(Debug, Clone, Copy)]
pub struct TiltedLaw {
    cumulant: Cumulant,
    theta: f64,
    gamma: f64,
    vol: f64,
    jump_vol: f64,
}

impl TiltedLaw {
    /// The law `Q` for a contract, tilt `theta` and intensity factor `gamma`.
    pub fn new(c: &Contract, theta: f64, gamma: f64) -> Self {
        TiltedLaw {
            cumulant: Cumulant::new(c),
            theta,
            gamma,
            vol: c.vol,
            jump_vol: c.jumps.vol,
        }
    }

    /// Draws `(X_T, dP/dQ)`.
    pub fn draw<R: Rng>(&self, rng: &mut R) -> (f64, f64) {
        let k = &self.cumulant;
        let (t, th) = (k.expiry, self.theta);
        let lam_theta_t = k.tilted_rate(th) * t;
        let count_mean = self.gamma * lam_theta_t;
        let n = if count_mean > 0.0 {
            rand_distr::Poisson::new(count_mean)
                .expect("valid mean")
                .sample(rng) as u64
        } else {
            0
        };
        let nf = n as f64;
        let z1: f64 = StandardNormal.sample(rng);
        let z2: f64 = StandardNormal.sample(rng);
        let x = (k.drift + th * k.var) * t
            + self.vol * t.sqrt() * z1
            + nf * (k.mean + th * k.jump_var)
            + nf.sqrt() * self.jump_vol * z2;
        let mut log_w = -th * x + t * k.psi(th);
        if count_mean > 0.0 {
            log_w += -nf * self.gamma.ln() + count_mean - lam_theta_t;
        }
        (x, log_w.exp())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::{JumpParams, OptionKind};

    fn contract() -> Contract {
        Contract::new(
            OptionKind::Put,
            100.0,
            60.0,
            0.5,
            0.03,
            0.01,
            0.2,
            JumpParams {
                rate: 0.8,
                mean: -0.2,
                vol: 0.3,
            },
        )
        .unwrap()
    }

    #[test]
    fn share_measure_exponent_is_the_carry() {
        // psi(1) = r - q makes e^{-(r-q)t} S_t a martingale (Merton 1976).
        let k = Cumulant::new(&contract());
        assert!((k.psi(1.0) - 0.02).abs() < 1e-15, "{}", k.psi(1.0));
        assert_eq!(k.psi(0.0), 0.0);
    }

    #[test]
    fn saddle_points_solve_their_equations() {
        let c = contract();
        let k = Cumulant::new(&c);
        let x0 = (60.0f64 / 100.0).ln();
        let th = k.theta_vanilla(x0, false).unwrap();
        assert!(th < 0.0);
        let lhs = 0.5 * k.dpsi(th);
        let rhs = x0 + (th / (th - 1.0)).ln();
        assert!((lhs - rhs).abs() < 1e-10, "{lhs} vs {rhs}");
        let tc = k.theta_vanilla(0.5, true).unwrap();
        assert!(tc > 1.0);
        let tm = k.theta_mean_at(x0).unwrap();
        assert!((0.5 * k.dpsi(tm) - x0).abs() < 1e-10);
    }
}
