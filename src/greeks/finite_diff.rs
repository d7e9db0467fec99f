//! Bump-and-reprice Greeks for any pricing engine.
//!
//! Central differences for first and second order, one-sided (second-order
//! accurate) where a parameter sits at the edge of its domain (`sigma`,
//! `lambda`, `delta` below one bump from zero, short expiries), optional
//! Richardson extrapolation `(4 D(h/2) - D(h)) / 3`, which cancels the
//! leading `h^2` error term. For the Monte Carlo engine every bumped
//! contract is priced with the same stream key and the same sampling law of
//! the jump count ([`crn_monte_carlo`]), so the differences are taken on
//! common random numbers and a bump of `lambda` or `T` only re-weights paths.
//!
//! Alongside each Greek a noise estimate is returned: the engine's own error
//! measure (at least four ulps of spot plus strike) propagated through the difference formula (`4 err / h` for first
//! order, `4 err / h^2` for second), which is what a comparison tolerance
//! must allow for on top of the truncation error.

use crate::engines::monte_carlo::{self, McConfig};
use crate::engines::{MonteCarloEngine, PricingEngine};
use crate::greeks::Greeks;
use crate::model::{Contract, Param};

/// Bump sizes: the spot bump is relative to the one-standard-deviation move
/// `S min(1, s sqrt T)` with `s^2 = sigma^2 + lambda (mu_J^2 + delta^2)`, so
/// short expiries get proportionally smaller bumps; the others are absolute
/// (years for expiry).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BumpSizes {
    /// Spot bump as a fraction of the one-standard-deviation move.
    pub spot_rel: f64,
    /// Vol bump.
    pub vol: f64,
    /// Expiry bump (capped at a quarter of the expiry).
    pub expiry: f64,
    /// Rate bump.
    pub rate: f64,
    /// Dividend-yield bump.
    pub div_yield: f64,
    /// Jump-rate bump, relative to the jump rate...
    pub jump_rate_rel: f64,
    /// ... but at least this much.
    pub jump_rate_min: f64,
    /// Jump-mean bump.
    pub jump_mean: f64,
    /// Jump-vol bump.
    pub jump_vol: f64,
}

impl BumpSizes {
    /// For smooth deterministic engines (series): small bumps, where the
    /// `h^4` Richardson truncation error and the `eps / h^2` rounding error
    /// are both near 1e-9 relative.
    pub fn smooth() -> Self {
        BumpSizes {
            spot_rel: 1e-3,
            vol: 1e-3,
            expiry: 1e-3,
            rate: 1e-4,
            div_yield: 1e-4,
            jump_rate_rel: 1e-3,
            jump_rate_min: 1e-4,
            jump_mean: 1e-3,
            jump_vol: 1e-3,
        }
    }

    /// For engines with a small but non-smooth numerical error (Fourier with
    /// adaptive quadrature, about 1e-13 relative): a few times larger, so
    /// the error divided by `h^2` stays near 1e-7 relative.
    pub fn quadrature() -> Self {
        BumpSizes {
            spot_rel: 3e-3,
            vol: 3e-3,
            expiry: 3e-3,
            rate: 3e-4,
            div_yield: 3e-4,
            jump_rate_rel: 3e-3,
            jump_rate_min: 3e-4,
            jump_mean: 3e-3,
            jump_vol: 3e-3,
        }
    }

    /// For Monte Carlo on common random numbers: large enough that the
    /// payoff kink does not dominate the second differences.
    pub fn monte_carlo() -> Self {
        BumpSizes {
            spot_rel: 0.2,
            vol: 1e-2,
            expiry: 1e-2,
            rate: 1e-3,
            div_yield: 1e-3,
            jump_rate_rel: 5e-2,
            jump_rate_min: 1e-2,
            jump_mean: 1e-2,
            jump_vol: 1e-2,
        }
    }

    /// For grid engines (the PIDE), whose price carries a discretisation
    /// error near its tolerance (`1e-6` of spot): bumps large enough that
    /// this error divided by the bump stays small against the Greek (vol,
    /// jump mean and jump vol `1e-2`, rate and yield `1e-3`, jump rate 1%
    /// but at least `1e-3`), while the `h^2` truncation error of a central
    /// difference stays near `1e-4` relative. No Richardson step: it would
    /// amplify the grid error by 5/3 for a truncation error already below it.
    pub fn grid() -> Self {
        BumpSizes {
            spot_rel: 1e-2,
            vol: 1e-2,
            expiry: 1e-2,
            rate: 1e-3,
            div_yield: 1e-3,
            jump_rate_rel: 1e-2,
            jump_rate_min: 1e-3,
            jump_mean: 1e-2,
            jump_vol: 1e-2,
        }
    }

    fn step(&self, p: Param, c: &Contract) -> f64 {
        match p {
            Param::Spot => {
                let j = &c.jumps;
                let s2 = c.vol * c.vol + j.rate * (j.mean * j.mean + j.vol * j.vol);
                let sd = (s2 * c.expiry).sqrt();
                self.spot_rel * c.spot * if sd > 0.0 { sd.min(1.0) } else { 1.0 }
            }
            Param::Vol => self.vol,
            Param::Expiry => self.expiry.min(0.25 * c.expiry),
            Param::Rate => self.rate,
            Param::DivYield => self.div_yield,
            Param::JumpRate => (self.jump_rate_rel * c.jumps.rate).max(self.jump_rate_min),
            Param::JumpMean => self.jump_mean,
            Param::JumpVol => self.jump_vol,
        }
    }
}

/// Finite-difference settings.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FdConfig {
    /// Bump sizes.
    pub bumps: BumpSizes,
    /// Richardson extrapolation on `h` and `h/2`.
    pub richardson: bool,
}

impl FdConfig {
    /// The recommended settings for an engine.
    pub fn for_engine(engine: &dyn PricingEngine) -> Self {
        match engine.name() {
            "mc" => FdConfig {
                bumps: BumpSizes::monte_carlo(),
                richardson: false,
            },
            "fourier" => FdConfig {
                bumps: BumpSizes::quadrature(),
                richardson: true,
            },
            "pide" => FdConfig {
                bumps: BumpSizes::grid(),
                richardson: false,
            },
            _ => FdConfig {
                bumps: BumpSizes::smooth(),
                richardson: true,
            },
        }
    }
}

/// Finite-difference Greeks and the noise each carries from the engine's error.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FdGreeks {
    /// The Greeks (price is the engine's price at the base point).
    pub greeks: Greeks,
    /// Propagated engine error, field by field (price: the engine's error).
    pub noise: Greeks,
}

/// A Monte Carlo engine set up for bumping `c`: the intensity multiplier is
/// chosen once for the base contract and the sampling law's mean jump count
/// is frozen (at least one jump-rate bump times `T`, so that bumping
/// `lambda` up from 0 still sees jump paths).
pub fn crn_monte_carlo(c: &Contract, key: u64, cfg: &McConfig) -> MonteCarloEngine {
    let gamma = monte_carlo::choose_intensity(c, key, cfg);
    let floor = BumpSizes::monte_carlo().jump_rate_min * c.expiry;
    let count_mean = (gamma * c.jump_intensity()).max(floor);
    MonteCarloEngine {
        config: McConfig {
            sampling_count_mean: Some(count_mean),
            ..cfg.clone()
        },
        key,
    }
}

/// Lower edge of a parameter's domain (one-sided differences below it).
fn lower_edge(p: Param) -> Option<f64> {
    match p {
        Param::Vol | Param::JumpRate | Param::JumpVol | Param::Expiry | Param::Spot => Some(0.0),
        _ => None,
    }
}

/// Smallest and largest relative bump the command line accepts
/// (`--spot-bump`, `--vol-bump`): below 1e-10 the difference of two prices
/// is mostly rounding (relative error about 1e-16 / h for a first and
/// 1e-16 / h^2 for a second derivative), above 0.5 it no longer measures a
/// derivative.
pub const BUMP_RANGE: (f64, f64) = (1e-10, 0.5);

/// Where the points of a difference formula lie.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Stencil {
    /// `x - h, x, x + h`.
    Central,
    /// `x, x + h, x + 2h (, x + 3h)`: at the lower edge of the domain
    /// (right-derivative, the analytic convention there).
    Forward,
    /// `x, x - h, x - 2h (, x - 3h)`: at the upper edge of the domain
    /// (`expiry` 1000, `vol` 10, `jump_mean` 20, `lambda T` 1e5, ...), where the
    /// price is smooth but a bumped copy would leave the validated domain.
    Backward,
}

fn param_name(p: Param) -> &'static str {
    match p {
        Param::Spot => "spot",
        Param::Vol => "vol",
        Param::Expiry => "expiry",
        Param::Rate => "rate",
        Param::DivYield => "div_yield",
        Param::JumpRate => "jump_rate",
        Param::JumpMean => "jump_mean",
        Param::JumpVol => "jump_vol",
    }
}

struct Bumper<'a> {
    engine: &'a dyn PricingEngine,
    base: Contract,
    base_price: f64,
    error: f64,
}

impl Bumper<'_> {
    fn at(&self, p: Param, x: f64) -> Result<f64, String> {
        let c = self
            .base
            .with(p, x)
            .map_err(|e| format!("bumped contract refused: {e}"))?;
        Ok(self.engine.price(&c)?.price)
    }

    fn at2(&self, p: Param, x: f64, q: Param, y: f64) -> Result<f64, String> {
        let c = self
            .base
            .with(p, x)
            .and_then(|c| c.with(q, y))
            .map_err(|e| format!("bumped contract refused: {e}"))?;
        Ok(self.engine.price(&c)?.price)
    }

    fn valid(&self, p: Param, x: f64) -> bool {
        self.base.with(p, x).is_ok()
    }

    /// The stencil for a difference in `p` with step `h` and `points` points
    /// beyond the base on the one-sided forms: central inside the domain,
    /// forward within one step of the lower edge, backward where a step up
    /// would leave the domain.
    ///
    /// # Errors
    /// When the step is below the resolution of the value (the bumped value
    /// equals the base) or no stencil fits in the domain.
    fn stencil(&self, p: Param, h: f64, points: usize) -> Result<Stencil, String> {
        let x = self.base.get(p);
        if !(h.is_finite() && h > 0.0) || x + h == x || x - h == x {
            return Err(format!(
                "{} bump {h:e} is below the double-precision resolution of {} = {x:e}; \
                 no finite difference possible",
                param_name(p),
                param_name(p)
            ));
        }
        let reach = points as f64 * h;
        let above_lower = lower_edge(p).is_none_or(|lo| x - h > lo);
        if above_lower && self.valid(p, x - h) && self.valid(p, x + h) {
            Ok(Stencil::Central)
        } else if !above_lower || self.valid(p, x + reach) {
            if self.valid(p, x + reach) {
                Ok(Stencil::Forward)
            } else {
                Err(format!(
                    "cannot bump {} by {h:e} inside the model's domain",
                    param_name(p)
                ))
            }
        } else if self.valid(p, x - reach) && lower_edge(p).is_none_or(|lo| x - reach > lo) {
            Ok(Stencil::Backward)
        } else {
            Err(format!(
                "cannot bump {} by {h:e} inside the model's domain",
                param_name(p)
            ))
        }
    }

    /// First derivative with step h: central, or one-sided second-order
    /// `(-3 V0 + 4 V(x+h) - V(x+2h)) / 2h` (with `h` negated for backward).
    fn first_h(&self, p: Param, h: f64, st: Stencil) -> Result<f64, String> {
        let x = self.base.get(p);
        match st {
            Stencil::Central => Ok((self.at(p, x + h)? - self.at(p, x - h)?) / (2.0 * h)),
            Stencil::Forward | Stencil::Backward => {
                let s = if st == Stencil::Forward { h } else { -h };
                Ok(
                    (-3.0 * self.base_price + 4.0 * self.at(p, x + s)?
                        - self.at(p, x + 2.0 * s)?)
                        / (2.0 * s),
                )
            }
        }
    }

    /// Second derivative with step h: central, or one-sided
    /// `(2 V0 - 5 V1 + 4 V2 - V3) / h^2` (second-order accurate). Divided by
    /// `h` twice so that a tiny `h` does not underflow `h^2`.
    fn second_h(&self, p: Param, h: f64, st: Stencil) -> Result<f64, String> {
        let x = self.base.get(p);
        match st {
            Stencil::Central => {
                Ok((self.at(p, x + h)? - 2.0 * self.base_price + self.at(p, x - h)?) / h / h)
            }
            Stencil::Forward | Stencil::Backward => {
                let s = if st == Stencil::Forward { h } else { -h };
                Ok((2.0 * self.base_price - 5.0 * self.at(p, x + s)?
                    + 4.0 * self.at(p, x + 2.0 * s)?
                    - self.at(p, x + 3.0 * s)?)
                    / h
                    / h)
            }
        }
    }

    fn extrapolate(
        &self,
        f: impl Fn(f64) -> Result<f64, String>,
        h: f64,
        richardson: bool,
    ) -> Result<f64, String> {
        if richardson {
            let coarse = f(h)?;
            let fine = f(0.5 * h)?;
            Ok((4.0 * fine - coarse) / 3.0)
        } else {
            f(h)
        }
    }
}

/// Bump-and-reprice Greeks of `c` with `engine`.
///
/// # Errors
/// A message when the engine fails or a bumped contract leaves the model's
/// validated domain.
pub fn greeks(
    engine: &dyn PricingEngine,
    c: &Contract,
    cfg: &FdConfig,
) -> Result<FdGreeks, String> {
    let base = engine.price(c)?;
    // The engine's own error, but never below the rounding of the price,
    // which is a difference of terms of the size of spot and strike.
    let rounding = 4.0 * f64::EPSILON * (base.price.abs() + c.spot + c.strike);
    let b = Bumper {
        engine,
        base: *c,
        base_price: base.price,
        error: base.error.max(rounding),
    };
    let r = cfg.richardson;
    let h = |p: Param| cfg.bumps.step(p, c);
    // The stencil is chosen once for the coarse step and used for both
    // Richardson steps (the same leading error term then cancels).
    let d1 = |p: Param| {
        let st = b.stencil(p, h(p), 2)?;
        b.extrapolate(|hh| b.first_h(p, hh, st), h(p), r)
    };
    let d2 = |p: Param| {
        let st = b.stencil(p, h(p), 3)?;
        b.extrapolate(|hh| b.second_h(p, hh, st), h(p), r)
    };
    let n1 = |p: Param| 4.0 * b.error / h(p);
    let n2 = |p: Param| 4.0 * b.error / (h(p) * h(p));

    let zero_expiry = c.expiry == 0.0;
    let theta = if zero_expiry {
        0.0
    } else {
        -d1(Param::Expiry)?
    };
    let (hs, hv) = (h(Param::Spot), h(Param::Vol));
    let vanna = if zero_expiry {
        0.0
    } else {
        // d/dsigma of the central spot difference, on the vol stencil.
        b.stencil(Param::Spot, hs, 1)?;
        let vol_stencil = b.stencil(Param::Vol, hv, 2)?;
        let mixed = |k: f64| -> Result<f64, String> {
            let (s, v) = (c.spot, c.vol);
            let (s_up, s_dn) = (s + k * hs, s - k * hs);
            let delta_at = |vv: f64| -> Result<f64, String> {
                Ok((b.at2(Param::Spot, s_up, Param::Vol, vv)?
                    - b.at2(Param::Spot, s_dn, Param::Vol, vv)?)
                    / (2.0 * k * hs))
            };
            match vol_stencil {
                Stencil::Central => {
                    Ok((delta_at(v + k * hv)? - delta_at(v - k * hv)?) / (2.0 * k * hv))
                }
                Stencil::Forward | Stencil::Backward => {
                    let sh = if vol_stencil == Stencil::Forward {
                        k * hv
                    } else {
                        -k * hv
                    };
                    Ok(
                        (-3.0 * delta_at(v)? + 4.0 * delta_at(v + sh)? - delta_at(v + 2.0 * sh)?)
                            / (2.0 * sh),
                    )
                }
            }
        };
        if r {
            (4.0 * mixed(0.5)? - mixed(1.0)?) / 3.0
        } else {
            mixed(1.0)?
        }
    };
    let greeks = Greeks {
        price: base.price,
        delta: d1(Param::Spot)?,
        gamma: d2(Param::Spot)?,
        vega: d1(Param::Vol)?,
        theta,
        rho: d1(Param::Rate)?,
        div_rho: d1(Param::DivYield)?,
        d_jump_rate: d1(Param::JumpRate)?,
        d_jump_mean: d1(Param::JumpMean)?,
        d_jump_vol: d1(Param::JumpVol)?,
        vanna,
        volga: d2(Param::Vol)?,
    };
    let noise = Greeks {
        price: base.error,
        delta: n1(Param::Spot),
        gamma: n2(Param::Spot),
        vega: n1(Param::Vol),
        theta: if zero_expiry { 0.0 } else { n1(Param::Expiry) },
        rho: n1(Param::Rate),
        div_rho: n1(Param::DivYield),
        d_jump_rate: n1(Param::JumpRate),
        d_jump_mean: n1(Param::JumpMean),
        d_jump_vol: n1(Param::JumpVol),
        vanna: 4.0 * b.error / (hs * hv),
        volga: n2(Param::Vol),
    };
    // A non-finite difference is a row error, never a value (e.g. a Greek
    // that overflows for spot 1e-308).
    let named = greeks
        .sensitivities()
        .into_iter()
        .zip(crate::greeks::SENSITIVITY_NAMES)
        .chain([(greeks.price, "price")]);
    for (v, name) in named {
        if !v.is_finite() {
            return Err(format!(
                "finite-difference {name} is not a finite number ({v}): the difference \
                 overflows double precision for this row"
            ));
        }
    }
    Ok(FdGreeks { greeks, noise })
}

/// Why bump-and-reprice Greeks are not defined for `c` with these bumps,
/// or `None` when they are.
///
/// When the terminal law has no spread — the row is expired (`T = 0`), or
/// has neither diffusion nor jumps that move it (`sigma = 0` and
/// `lambda = 0`, or jumps of size exactly 1) — the price is the discounted
/// payoff of the forward, and with `sigma = 0` and `delta = 0` but jumps it
/// is a sum of such payoffs over the lattice of jump counts. Each has a kink
/// where that point of the law meets the strike; a difference whose bumps
/// straddle the kink measures the kink, not a derivative (the analytic
/// convention there is one-sided). This returns the reason when a point of
/// the law lies within the reach of the bumps of the strike, in log terms:
/// three steps of the spot bump (relative), of the rate and yield bumps
/// times `T`, of the expiry bump times `|r - q|`, of the jump-rate bump
/// times `|k| T` (all doubled for safety), or six standard deviations
/// `3 h_vol sqrt(T)` of the largest vol bump, whichever is larger.
pub fn undefined_reason(c: &Contract, cfg: &FdConfig) -> Option<String> {
    let j = &c.jumps;
    let t = c.expiry;
    let point_mass =
        t == 0.0 || (c.vol == 0.0 && (j.rate == 0.0 || (j.mean == 0.0 && j.vol == 0.0)));
    let lattice = !point_mass && c.vol == 0.0 && j.vol == 0.0;
    if !point_mass && !lattice {
        return None;
    }
    let b = &cfg.bumps;
    let k = j.k();
    let mut reach = 3.0 * b.spot_rel;
    if t > 0.0 {
        reach = reach
            .max(3.0 * b.rate * t)
            .max(3.0 * b.div_yield * t)
            .max(3.0 * b.expiry.min(0.25 * t) * (c.rate - c.div_yield).abs())
            .max(3.0 * (b.jump_rate_rel * j.rate).max(b.jump_rate_min) * k.abs() * t);
    }
    // The moves of the law's points are doubled for safety; a vol bump from
    // 0 spreads them instead, and six standard deviations of the largest
    // bump leave a kink's effect below e^-18.
    reach = (2.0 * reach).max(6.0 * 3.0 * b.vol * t.sqrt());
    // ln(K/F) and the points of the law relative to F.
    let fwd = c.forward();
    let ratio = c.strike / fwd;
    let x = if ratio.is_normal() {
        ratio.ln()
    } else {
        c.strike.ln() - fwd.ln()
    };
    let x0 = if t > 0.0 { -j.rate * k * t } else { 0.0 };
    let distance = if lattice && j.mean != 0.0 {
        let n = ((x - x0) / j.mean).round().max(0.0);
        (x - x0 - n * j.mean).abs()
    } else {
        (x - x0).abs()
    };
    if distance > reach {
        return None;
    }
    Some(if t == 0.0 {
        "not defined: expired row at the strike (the payoff's kink lies within the bumps)"
            .to_string()
    } else if lattice {
        "not defined: zero diffusion and jump vol put a point of the terminal law at the strike \
         (the price has a kink within the bumps)"
            .to_string()
    } else {
        "not defined: zero variance with the forward at the strike (the price has a kink within \
         the bumps)"
            .to_string()
    })
}

/// First derivatives of `c`'s price in each of `params` only, by the same
/// difference rules and noise propagation as [`greeks`] (central inside
/// the domain, one-sided at its edges; noise `4 err / h` from the
/// engine's error `err`), for a caller that has the other Greeks from
/// elsewhere (the PIDE grid gives delta, gamma and theta) and the base
/// price `base` already.
///
/// # Errors
/// A message when the engine fails, a bumped contract leaves the model's
/// domain, or a difference is not finite.
pub fn first_derivatives(
    engine: &dyn PricingEngine,
    c: &Contract,
    base: crate::engines::Priced,
    cfg: &FdConfig,
    params: &[Param],
) -> Result<Vec<(f64, f64)>, String> {
    let rounding = 4.0 * f64::EPSILON * (base.price.abs() + c.spot + c.strike);
    let b = Bumper {
        engine,
        base: *c,
        base_price: base.price,
        error: base.error.max(rounding),
    };
    params
        .iter()
        .map(|&p| {
            let h = cfg.bumps.step(p, c);
            let st = b.stencil(p, h, 2)?;
            let d = b.extrapolate(|hh| b.first_h(p, hh, st), h, cfg.richardson)?;
            if !d.is_finite() {
                return Err(format!(
                    "finite-difference d/d{} is not a finite number ({d})",
                    param_name(p)
                ));
            }
            Ok((d, 4.0 * b.error / h))
        })
        .collect()
}
