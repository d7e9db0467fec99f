//! Fourier engine: the Lewis (2001) single-integral formula with a
//! Black-Scholes control, integrated by adaptive Gauss-Legendre panels.
//! Shares no code with the series engine.
//!
//! # Formula
//! With `F = S e^{(r-q)T}`, `X = ln(S_T / F)` (so `E[e^X] = 1`),
//! `kappa = ln(K/F)` and `phi(u) = E[e^{iuX}]`, Lewis's formula gives
//! `C = e^{-rT} F [1 - (e^{kappa/2}/pi) int_0^inf Re(e^{-iu kappa} phi(u - i/2)) / (u^2 + 1/4) du]`.
//! Subtracting the same formula for Black-Scholes at a reference vol
//! `s^2 = sigma^2 + lambda (mu_J^2 + delta^2)` (the Merton variance rate)
//! leaves
//! `V = BS(s) - e^{-rT} F (e^{kappa/2}/pi) int_0^inf Re(e^{-iu kappa} [phi_M - phi_BS](u - i/2)) / (u^2 + 1/4) du`,
//! valid for calls and puts alike (both models share the forward, so parity
//! cancels). The difference decays fast and carries no large cancellation.
//! At `z = u - i/2`:
//! `phi_BS = exp(-s^2 T (u^2 + 1/4) / 2)`,
//! `phi_M = exp(-sigma^2 T (u^2 + 1/4)/2 + lambda T (e^{mu_J/2 + delta^2/8 - delta^2 u^2/2 + iu(mu_J + delta^2/2)} - 1 - k/2 - iuk))`.
//!
//! # Zero-jump atom
//! Without diffusion (`sigma = 0`) the no-jump state is an atom of the
//! terminal law (mass `p0 = e^{-lambda T}` at `x0 = -lambda k T`), so
//! `phi_M` does not decay and the integral above converges only like
//! `1/u^2`. When the no-jump part is much narrower than one jump
//! (`sigma^2 T < delta^2 / 16`, [`ATOM_SEPARATION_RATIO`]) it is taken out
//! analytically: `I[phi] = E[min(e^X, e^kappa)]` is linear in the law, so
//! with `phi_M = p0 phi_0 + phi_R` (`phi_0` the no-jump law, normal with
//! variance `sigma^2 T`, a point mass when `sigma = 0`; `phi_R` the rest, of
//! mass `m = 1 - p0` and first moment `m1 = 1 - p0 e^{x0}`)
//! `V = p0 BS(S e^{x0}, sigma) + m BS(S m1/m, sqrt(w/T)) - e^{-rT} F (e^{kappa/2}/pi) int Re(e^{-iu kappa} [phi_R - phi_C](u - i/2)) / (u^2 + 1/4) du`,
//! where the control `phi_C` is a normal law of mass `m`, the same first
//! moment and variance `w = sigma^2 T + (lambda T / m)(mu_J^2 + delta^2)`
//! (at least the variance of one jump), and `BS(S, sigma)` at `sigma = 0` is
//! the discounted intrinsic value of the forward. Every conditional law
//! given `N = n >= 1` is normal with variance at least `v1 = sigma^2 T + delta^2`,
//! so `|phi_R(u - i/2)| <= sqrt(m m1) e^{-v1 u^2 / 2}`, and the
//! remainder decays like a Gaussian. `phi_R` is computed as
//! `p0 phi_0 (e^{lambda T psi_J} - 1)` with a complex `expm1` while
//! `lambda T |psi_J| < 1`, so it keeps its relative accuracy where it is small.
//! With `sigma = 0` and `delta = 0` as well (and jumps of size other than 1)
//! the law is a lattice of point masses: that is outside this engine's
//! claim and it says so ([`FourierError::Lattice`]).
//!
//! # Error estimate
//! Each panel is integrated by 24-point Gauss-Legendre on the panel and on
//! its two halves; the difference is the panel's error estimate, and panels
//! are bisected until it is small. The integral is cut at `U` where a
//! Gaussian-tail bound on the rest is negligible; without diffusion
//! (`sigma = 0`) and without the atom separated (a jump vol that is tiny too)
//! the integrand decays only like `1/u^2`, `U` is capped, and the bound on
//! the omitted tail is reported. The returned error estimate is
//! the sum of panel estimates, the tail bound and a rounding allowance, in
//! price units.

use crate::black_scholes;
use crate::model::{Contract, OptionKind, Short};
use gauss_quad::GaussLegendre;
use num_complex::Complex64;
use std::f64::consts::PI;
use std::sync::OnceLock;

/// Quadrature tolerance relative to the control price (a proxy for the price)...
pub const FOURIER_REL_TOL: f64 = 1e-12;
/// ... bounded to this range of fractions of `e^{-rT} F`.
pub const FOURIER_ABS_TOL_RANGE: (f64, f64) = (1e-16, 1e-13);
/// Largest integration limit (reached only with little or no diffusion).
pub const FOURIER_MAX_U: f64 = 1e5;
/// The zero-jump state is separated ([module docs](self)) when its variance
/// `sigma^2 T` is below this fraction of one jump's variance `delta^2`.
pub const ATOM_SEPARATION_RATIO: f64 = 1.0 / 16.0;
/// Bisection depth limit per initial panel.
const MAX_DEPTH: u32 = 10;
/// Most quadrature panels per price (each one 72 integrand evaluations:
/// 24-point Gauss-Legendre on the panel and on its halves). Ordinary rows
/// need a few dozen to a few hundred; the budget bounds the work of any row
/// (about 1.4 million evaluations, a fraction of a second) and a row that
/// exhausts it before reaching the tolerance is reported as not converged.
pub const FOURIER_MAX_PANELS: usize = 20_000;

/// The Fourier engine could not reach its tolerance.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[non_exhaustive]
pub enum FourierError {
    /// The panel budget ([`FOURIER_MAX_PANELS`]) ran out first.
    #[error(
        "fourier quadrature did not reach tolerance within {panels} panels \
         (error estimate {estimate:.1e}, tolerance {tolerance:.1e})"
    )]
    NotConverged {
        /// Panels integrated.
        panels: usize,
        /// Error estimate reached, price units.
        estimate: f64,
        /// Tolerance, price units.
        tolerance: f64,
    },
    /// The integral or its error estimate is not a finite number (inputs
    /// whose scale is outside double precision).
    #[error("fourier result is not a finite number; this row is outside the supported range")]
    NotFinite {
        /// Price reached.
        price: f64,
        /// Error estimate reached.
        estimate: f64,
    },
    /// The error estimate exceeds the whole range the price can lie in, so
    /// the result says nothing about the price (far from the money, where
    /// the integral's rounding, which grows with `sqrt(F K)`, swamps it).
    #[error(
        "fourier error estimate {estimate:.1e} exceeds the whole range of this option's price \
         (0 to {}); this row is too far from the money for the Fourier engine",
        Short(*.range)
    )]
    Unresolved {
        /// Error estimate reached, price units.
        estimate: f64,
        /// Upper end of the price range: discounted spot (call) or strike (put).
        range: f64,
    },
    /// No diffusion and no jump-size dispersion: the terminal law is a
    /// lattice of point masses, whose characteristic function does not
    /// decay; outside this engine's claim.
    #[error(
        "zero diffusion vol and zero jump vol: the terminal law is a lattice of point masses \
         (its characteristic function does not decay), outside the Fourier engine's claim"
    )]
    Lattice,
}

/// A Fourier price and its estimated absolute error.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FourierResult {
    /// Price.
    pub price: f64,
    /// Estimated absolute error (quadrature plus truncated tail).
    pub error_estimate: f64,
    /// Integrand evaluations.
    pub evaluations: usize,
}

fn rule() -> &'static GaussLegendre {
    static RULE: OnceLock<GaussLegendre> = OnceLock::new();
    RULE.get_or_init(|| GaussLegendre::new(24).expect("24 nodes is a valid degree"))
}

struct Integrand {
    kappa: f64,
    var_ref: f64,
    var_diff: f64,
    lam_t: f64,
    /// `mu_J/2 + delta^2/8`: log of the jump factor's modulus at u = 0.
    jump_log_amp: f64,
    jump_damp: f64,
    jump_freq: f64,
    k: f64,
    /// `Some` when the zero-jump atom is separated.
    sep: Option<Separated>,
}

/// The parts of the separated integrand (module docs, "Zero-jump atom").
struct Separated {
    /// `-lambda T (1 + k/2)`: log modulus of `p0 phi_0(u - i/2)` before the diffusion factor.
    atom_log_amp: f64,
    /// `lambda T k`: frequency of `p0 phi_0`'s phase.
    atom_freq: f64,
    /// `ln m + b/2` with `b = ln(m1/m)`: log modulus of the control at `u = 0` before its decay.
    ctrl_log_amp: f64,
    /// `w`: the control's variance.
    ctrl_var: f64,
    /// `b`: the control's phase frequency.
    ctrl_freq: f64,
}

impl Integrand {
    /// The jump part `e^{g + iu theta} - 1 - k/2 - iuk` of the exponent, with
    /// `g = mu_J/2 + delta^2/8 - delta^2 u^2/2`, written with `expm1` and a
    /// half-angle sine so that it keeps its absolute accuracy when it is small
    /// (it is multiplied by `lambda T`, which may be in the thousands).
    #[inline]
    fn jump_part(&self, u: f64) -> Complex64 {
        let g = self.jump_log_amp - self.jump_damp * u * u;
        let em1 = g.exp_m1();
        let angle = u * self.jump_freq;
        let (sin, cos) = angle.sin_cos();
        let half = (0.5 * angle).sin();
        Complex64::new(
            em1 * cos - 2.0 * half * half - 0.5 * self.k,
            (1.0 + em1) * sin - u * self.k,
        )
    }

    #[inline]
    fn eval(&self, u: f64) -> f64 {
        let q = u * u + 0.25;
        if let Some(sep) = &self.sep {
            // p0 phi_0 (e^z - 1) with z = lambda T e^{g + iu theta}.
            let atom = Complex64::from_polar(
                (sep.atom_log_amp - 0.5 * self.var_diff * q).exp(),
                -u * sep.atom_freq,
            );
            let g = self.jump_log_amp - self.jump_damp * u * u;
            let z = Complex64::from_polar(self.lam_t * g.exp(), u * self.jump_freq);
            let rest = if z.norm() < 1.0 {
                let (sin, cos) = z.im.sin_cos();
                let half = (0.5 * z.im).sin();
                let em1 = z.re.exp_m1();
                atom * Complex64::new(em1 * cos - 2.0 * half * half, (1.0 + em1) * sin)
            } else {
                let expo =
                    Complex64::new(-0.5 * self.var_diff * q, 0.0) + self.lam_t * self.jump_part(u);
                expo.exp() - atom
            };
            let ctrl = Complex64::from_polar(
                (sep.ctrl_log_amp - 0.5 * sep.ctrl_var * q).exp(),
                u * sep.ctrl_freq,
            );
            let rotated = (rest - ctrl) * Complex64::from_polar(1.0, -u * self.kappa);
            return rotated.re / q;
        }
        let bs = (-0.5 * self.var_ref * q).exp();
        let expo = Complex64::new(-0.5 * self.var_diff * q, 0.0) + self.lam_t * self.jump_part(u);
        let merton = expo.exp();
        let rotated = (merton - bs) * Complex64::from_polar(1.0, -u * self.kappa);
        rotated.re / q
    }
}

/// Prices a contract by the Fourier method.
///
/// # Example
/// ```
/// use saltus::model::{Contract, JumpParams, OptionKind};
/// let c = Contract::new(OptionKind::Call, 100.0, 100.0, 0.25, 0.05, 0.0, 0.15,
///     JumpParams { rate: 0.1, mean: -0.9, vol: 0.45 }).unwrap();
/// let f = saltus::engines::fourier::price(&c).unwrap();
/// let s = saltus::engines::series::price(&c).unwrap().greeks.price;
/// assert!((f.price - s).abs() < 1e-10 * s);
/// ```
///
/// # Errors
/// [`FourierError::NotConverged`] when the quadrature does not reach its
/// tolerance within [`FOURIER_MAX_PANELS`] panels;
/// [`FourierError::NotFinite`] when the result overflows;
/// [`FourierError::Unresolved`] when the error estimate exceeds the whole
/// range the price can lie in.
pub fn price(c: &Contract) -> Result<FourierResult, FourierError> {
    let t = c.expiry;
    if t == 0.0 {
        return Ok(FourierResult {
            price: c.kind.payoff(c.spot, c.strike),
            error_estimate: 0.0,
            evaluations: 0,
        });
    }
    let j = &c.jumps;
    let k = j.k();
    let lam_t = j.rate * t;
    let s2 = c.vol * c.vol + j.rate * (j.mean * j.mean + j.vol * j.vol);
    let fwd = c.forward();
    let disc = (-c.rate * t).exp();
    // ln(K/F), also when K/F itself over- or underflows (spot 1e-308).
    let ratio = c.strike / fwd;
    let kappa = if ratio.is_normal() {
        ratio.ln()
    } else {
        c.strike.ln() - fwd.ln()
    };
    let control = black_scholes::price(c.kind, c.spot, c.strike, t, c.rate, c.div_yield, s2.sqrt());
    if lam_t == 0.0 || s2 == c.vol * c.vol {
        // No jumps (or jumps of size exactly 1): the control is the answer.
        return Ok(FourierResult {
            price: control,
            error_estimate: 0.0,
            evaluations: 0,
        });
    }
    let v = c.vol * c.vol * t;
    let jump_var = j.vol * j.vol;
    if v == 0.0 && jump_var == 0.0 {
        return Err(FourierError::Lattice);
    }
    let separated = v < ATOM_SEPARATION_RATIO * jump_var;
    let mut f = Integrand {
        kappa,
        var_ref: s2 * t,
        var_diff: v,
        lam_t,
        jump_log_amp: 0.5 * j.mean + 0.125 * jump_var,
        jump_damp: 0.5 * jump_var,
        jump_freq: j.mean + 0.5 * jump_var,
        k,
        sep: None,
    };
    // The price the integral corrects (the Black-Scholes control, or the
    // separated atom plus its control), the bound on the omitted tail of
    // the integral beyond `u`, the first guess of the integration limit and
    // the natural width of the first panels.
    let (control, tail, upper, width): (f64, Box<dyn Fn(f64) -> f64>, f64, f64) = if separated {
        // Module docs, "Zero-jump atom".
        let p0 = (-lam_t).exp();
        let m = -(-lam_t).exp_m1();
        let m1 = -(-lam_t * (1.0 + k)).exp_m1();
        let b = m1.ln() - m.ln();
        let w = v + lam_t / m * (j.mean * j.mean + jump_var);
        let atom = if p0 > 0.0 {
            p0 * black_scholes::price(
                c.kind,
                c.spot * (-lam_t * k).exp(),
                c.strike,
                t,
                c.rate,
                c.div_yield,
                c.vol,
            )
        } else {
            0.0
        };
        let ctrl = m * black_scholes::price(
            c.kind,
            c.spot * (m1 / m),
            c.strike,
            t,
            c.rate,
            c.div_yield,
            (w / t).sqrt(),
        );
        f.sep = Some(Separated {
            atom_log_amp: -lam_t * (1.0 + 0.5 * k),
            atom_freq: lam_t * k,
            ctrl_log_amp: m.ln() + 0.5 * b,
            ctrl_var: w,
            ctrl_freq: b,
        });
        let v1 = v + jump_var;
        let amp = (m * m1).sqrt();
        let tail = move |u: f64| -> f64 {
            amp * ((-0.5 * v1 * u * u).exp() / (v1 * u * u * u)
                + (-0.5 * w * u * u).exp() / (w * u * u * u))
        };
        let narrow = v1.min(w);
        (
            atom + ctrl,
            Box::new(tail),
            8.0 / narrow.sqrt(),
            1.0 / narrow.sqrt(),
        )
    } else {
        // |phi(u - i/2)| <= exp(-sigma^2 T u^2 / 2) C0 with
        // C0 = exp(lam_t (e^{jump_log_amp} + 1 + |k|/2)) bounds the Merton part (the BS
        // part decays faster); the tail beyond U is at most
        // 2 C0 exp(-v U^2/2) / (v U^3) for v = sigma^2 T > 0.
        let c0 = (lam_t * (f.jump_log_amp.exp() + 1.0 + 0.5 * k.abs()))
            .exp()
            .min(1e300);
        let var_ref = s2 * t;
        let tail = move |u: f64| -> f64 {
            if v > 0.0 {
                2.0 * c0 * (-0.5 * v * u * u).exp() / (v * u * u * u)
                    + (-0.5 * var_ref * u * u).exp() / u
            } else {
                // |phi_M| <= 1 and the BS part is negligible: the tail is below 2/U.
                2.0 / u
            }
        };
        let upper = if v > 0.0 {
            8.0 / v.sqrt()
        } else {
            100.0 / var_ref.sqrt()
        };
        (
            control,
            Box::new(tail),
            upper,
            1.0 / s2.max(1e-12).sqrt() / t.sqrt(),
        )
    };
    let scale = disc * fwd * (0.5 * kappa).exp() / PI;
    let (lo, hi) = FOURIER_ABS_TOL_RANGE;
    // Rounding: |phi(u - i/2)| <= 1 (and each part of the separated
    // integrand is below 1 too), so the integral's terms are bounded by
    // 1/(u^2 + 1/4), whose integral is pi; allow two ulps of each part.
    let rounding = 2.0 * f64::EPSILON * (control.abs() + scale * PI);
    // Never ask for less than the rounding level: far from the money (strike
    // 1e300 on spot 100, spot 1e-300) the relative target is far below it and
    // no amount of bisection reaches it. The phase u kappa carries an
    // absolute rounding error of about eps u |kappa|, which is what limits
    // the integral there (the 12 is ln(1 + 4 U^2) / 2 for U up to 1e5).
    let rounding_floor = 2.0 * f64::EPSILON * (control.abs() + scale * (PI + 12.0 * kappa.abs()));
    let tol_price = (FOURIER_REL_TOL * control)
        .clamp(lo * disc * fwd, hi * disc * fwd)
        .max(rounding_floor);
    let tol = tol_price / scale.max(f64::MIN_POSITIVE);

    let mut upper = upper;
    while tail(upper) > tol && upper < FOURIER_MAX_U {
        upper *= 1.25;
    }
    let upper = upper.min(FOURIER_MAX_U);
    let tail_bound = tail(upper);

    // Initial panels: about one per oscillation and per unit of the
    // law's natural frequency scale.
    let width = width.min(2.0 * PI / kappa.abs().max(1e-12));
    let n_panels = ((upper / width).ceil() as usize).clamp(4, 4096);
    let h = upper / n_panels as f64;
    let gl = rule();
    let mut quad = Quadrature {
        gl,
        f: &f,
        evaluations: 0,
        panels: 0,
        exhausted: false,
    };
    let mut integral = 0.0;
    let mut err = 0.0;
    for i in 0..n_panels {
        let (a, b) = (i as f64 * h, (i + 1) as f64 * h);
        let (val, e) = quad.adaptive(a, b, tol * (b - a) / upper, MAX_DEPTH);
        integral += val;
        err += e;
    }
    let error_estimate = scale * (err + tail_bound) + rounding;
    let price = control - scale * integral;
    if !(price.is_finite() && error_estimate.is_finite()) {
        return Err(FourierError::NotFinite {
            price,
            estimate: error_estimate,
        });
    }
    if quad.exhausted && err > tol {
        return Err(FourierError::NotConverged {
            panels: quad.panels,
            estimate: error_estimate,
            tolerance: tol_price,
        });
    }
    // No-arbitrage range of the price: 0 to the discounted spot (call) or
    // the discounted strike (put).
    let range = match c.kind {
        OptionKind::Call => c.spot * (-c.div_yield * t).exp(),
        OptionKind::Put => c.strike * disc,
    };
    if error_estimate > range {
        return Err(FourierError::Unresolved {
            estimate: error_estimate,
            range,
        });
    }
    Ok(FourierResult {
        price: price.max(0.0),
        error_estimate,
        evaluations: quad.evaluations,
    })
}

/// Adaptive Gauss-Legendre with a panel budget shared by the whole integral.
struct Quadrature<'a> {
    gl: &'a GaussLegendre,
    f: &'a Integrand,
    evaluations: usize,
    panels: usize,
    /// Set when a panel wanted bisecting but the budget was spent.
    exhausted: bool,
}

impl Quadrature<'_> {
    /// Integral over `[a, b]` and its error estimate, bisecting while the
    /// estimate exceeds `tol`, `depth` allows and the budget lasts. Panels are
    /// visited left to right, so the result does not depend on anything but
    /// the contract.
    fn adaptive(&mut self, a: f64, b: f64, tol: f64, depth: u32) -> (f64, f64) {
        let (gl, f) = (self.gl, self.f);
        let whole = gl.integrate(a, b, |u| f.eval(u));
        let m = 0.5 * (a + b);
        let left = gl.integrate(a, m, |u| f.eval(u));
        let right = gl.integrate(m, b, |u| f.eval(u));
        self.evaluations += 72;
        self.panels += 1;
        let halves = left + right;
        let e = (whole - halves).abs();
        // Below ~100 ulps of the panel's value, or a few ulps of the largest
        // the integrand can be on the panel (|f(u)| <= 2 / (u^2 + 1/4), as
        // |phi(u - i/2)| <= 1) times the rounding of the phase u kappa, the
        // difference is rounding noise: an oscillating integrand (far from
        // the money) cancels within a panel.
        let noise = 1e-14 * (left.abs() + right.abs())
            + 8.0 * f64::EPSILON * (1.0 + b * f.kappa.abs()) * (b - a) / (a * a + 0.25);
        if e <= tol.max(noise) || depth == 0 {
            return (halves, e);
        }
        if self.panels + 2 > FOURIER_MAX_PANELS {
            self.exhausted = true;
            return (halves, e);
        }
        let (l, el) = self.adaptive(a, m, 0.5 * tol, depth - 1);
        let (r, er) = self.adaptive(m, b, 0.5 * tol, depth - 1);
        (l + r, el + er)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::{JumpParams, OptionKind};

    #[test]
    fn lewis_formula_reproduces_black_scholes() {
        // With lambda = 0 the engine returns the control exactly; check the
        // Lewis integral itself by pricing BS(0.3) with BS(0.2) as control,
        // i.e. jumps that are a pure variance shift are not available, so
        // use tiny jumps of huge intensity: Merton -> BS with s^2 = sigma^2 + lambda delta^2.
        let c = Contract::new(
            OptionKind::Call,
            100.0,
            110.0,
            1.0,
            0.02,
            0.0,
            0.2,
            JumpParams {
                rate: 50.0,
                mean: -0.01,
                vol: 0.03,
            },
        )
        .unwrap();
        let f = price(&c).unwrap();
        let s = crate::engines::series::price(&c).unwrap().greeks.price;
        assert!((f.price - s).abs() < 1e-10 * s, "{} vs {}", f.price, s);
        assert!(f.error_estimate < 1e-10 * s);
    }
}
