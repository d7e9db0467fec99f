//! The Merton closed form: a Poisson-weighted series of Black-Scholes terms,
//! with the price and every analytic Greek from one pass.
//!
//! # Formula
//! With `omega = +1` (call) or `-1` (put), `a_n = p(n; lambda' T)`,
//! `b_n = p(n; lambda T)`, `lambda' = lambda (1 + k)`, `m = ln(1 + k)`,
//! `x_n = ln(S/K) + (r - q - lambda k) T + n m` and `v_n^2 = sigma^2 T + n delta^2`:
//!
//! `V = omega [S e^{-qT} sum a_n N(omega d1_n) - K e^{-rT} sum b_n N(omega d2_n)]`,
//! `d1_n = x_n / v_n + v_n / 2`, `d2_n = d1_n - v_n`.
//!
//! This is the textbook sum of `p(n; lambda' T) BS(sigma_n, r_n)` rearranged
//! so that each term needs one square root, one exponential and two `erfc`
//! calls; the weights follow from the mode by the exact Poisson ratio. The
//! derivation of every Greek is in `docs/model.md`.
//!
//! # Truncation
//! Every term is non-negative and bounded: a call term by `S e^{-qT} a_n`, a
//! put term by `K e^{-rT} b_n`. Summing outward from the mode of that
//! bounding law, the omitted mass on both sides has a rigorous geometric
//! bound ([`crate::poisson`]); summation stops when that bound is below
//! [`SERIES_REL_TOL`] times the partial sum (a lower bound on the price) or
//! below [`SERIES_ABS_TOL`] times the bounding scale. The bound is returned.

use crate::greeks::{Greeks, SENSITIVITY_NAMES};
use crate::model::{Contract, OptionKind};
use crate::normal::{norm_cdf_from_pdf, norm_pdf, FRAC_1_SQRT_2PI};
use crate::poisson::pmf;
use lanes::{Block, LaneSums, LANES};

mod lanes;

/// Stop when the bound on omitted terms is below this fraction of the price.
pub const SERIES_REL_TOL: f64 = 1.0e-14;
/// ... or below this fraction of `S e^{-qT}` (calls) / `K e^{-rT}` (puts):
/// only reached when the price is zero or below ~1e-285 of the scale.
pub const SERIES_ABS_TOL: f64 = 1.0e-300;
/// Hard cap on the number of terms (never reached for validated inputs:
/// `lambda T <= 1e5` needs about 25,000, and a call whose own bounding law
/// would need more is summed on the put's walk, see [`CALL_WALK_RATIO`]).
pub const SERIES_MAX_TERMS: usize = 1_000_000;
/// A call is summed on the put's walk (the law of `b_n`, mean `lambda T`)
/// instead of its own (`a_n`, mean `lambda' T = lambda T (1 + k)`) when
/// `lambda' T` exceeds this multiple of `max(lambda T, CALL_WALK_MIN_MEAN)`:
/// its own walk would need at least four times as many terms (the width of
/// a Poisson law grows like the square root of its mean). With a large jump
/// vol `1 + k = e^{mu_J + delta^2/2}` is astronomically large (`e^50` at
/// `delta = 10`) and the call's own walk would need billions of terms.
pub const CALL_WALK_RATIO: f64 = 16.0;
/// See [`CALL_WALK_RATIO`].
pub const CALL_WALK_MIN_MEAN: f64 = 64.0;
/// Above this `lambda' T` a call is always summed on the put's walk; below
/// it only when `d1` at the mode of `a_n` exceeds [`CALL_WALK_MIN_D1`], so
/// that `Q_S(S_T > K) = 1 - sum a_n N(-d1_n)` keeps its relative digits.
const CALL_WALK_MAX_MEAN: f64 = 1.0e8;
/// See [`CALL_WALK_MAX_MEAN`].
const CALL_WALK_MIN_D1: f64 = 4.0;

/// Result of the series engine: price, analytic Greeks and truncation report.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SeriesResult {
    /// Price and Greeks, raw units.
    pub greeks: Greeks,
    /// Number of series terms evaluated.
    pub terms: usize,
    /// Rigorous upper bound on the absolute truncation error of the price.
    pub truncation_bound: f64,
}

/// The series engine could not give a trustworthy answer.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[non_exhaustive]
pub enum SeriesError {
    /// The hard cap on terms was reached.
    #[error("series did not converge within {terms} terms (truncation bound {bound:e})")]
    NotConverged {
        /// Terms evaluated.
        terms: usize,
        /// Truncation bound reached (infinite while a geometric tail bound
        /// does not hold yet; never NaN).
        bound: f64,
    },
    /// A result is not representable in double precision for these inputs
    /// (e.g. gamma of a spot near 1e-300, growth factors beyond e^709):
    /// reported instead of returning a wrong number.
    #[error("{what} overflows double precision: {why}; this row is outside the supported range")]
    Overflow {
        /// Which quantity failed (a column name).
        what: &'static str,
        /// Which inputs make it overflow, in user terms.
        why: String,
    },
}

/// Running sums over the series terms. See the module docs for the meaning.
#[derive(Default)]
struct Sums {
    /// sum a_n N1
    pa: f64,
    /// sum b_n N2
    pb: f64,
    /// sum ((1+k) a_{n-1} - a_n) N1
    ja: f64,
    /// sum (b_{n-1} - b_n) N2
    jb: f64,
    /// sum a_n N1 (n - lambda' T)
    ma: f64,
    /// sum a_n phi1 / v
    ga: f64,
    /// sum a_n phi1 n / v
    wa: f64,
    /// sum a_n phi1 d2 sigma sqrt(T) / v^2
    xa: f64,
    /// sum a_n phi1 (d1 d2 - 1) sigma^2 T / v^3
    ya: f64,
    /// right-derivative contributions of zero-variance terms at the kink
    kink_vega: f64,
    kink_jump_vol: f64,
}

/// Weights at one index: a_n, b_n, their left neighbours a_{n-1}, b_{n-1},
/// and the term's forward moneyness `F_n / K = exp(x_n)`.
#[derive(Clone, Copy)]
struct Weights {
    n: u64,
    a: f64,
    b: f64,
    a_prev: f64,
    b_prev: f64,
    fk: f64,
}

/// Below this `|x_n|` the moneyness `exp(x_n)` is carried by recursion and
/// gives `phi(d2) = phi(d1) exp(x_n)` without a second exponential.
const MONEYNESS_RECURSION_LIMIT: f64 = 600.0;

/// Everything about a contract that does not depend on `n`.
struct Setup {
    /// Sign applied to `d1` in `N(. d1)`: `omega`, or `-1` for a call summed
    /// on the put's walk (then the `a` sums are those of the put).
    w1: f64,
    /// Sign applied to `d2` in `N(. d2)` (always `omega`).
    w2: f64,
    x0: f64,
    m: f64,
    var0: f64,
    dvar: f64,
    onek: f64,
    mu_a: f64,
    sqrt_t: f64,
    /// `sigma sqrt(T)`: vanna and volga sums carry `sigma sqrt(T) / v_n <= 1`
    /// instead of `1 / v_n`, so they do not overflow for tiny `v_n`.
    sd0: f64,
}

impl Setup {
    #[inline(always)]
    fn add_term(&self, s: &mut Sums, wt: &Weights) {
        let n = wt.n as f64;
        let x = self.x0 + n * self.m;
        let var = self.var0 + n * self.dvar;
        let (w1, w2) = (self.w1, self.w2);
        if var > 0.0 {
            let v = var.sqrt();
            let inv_v = 1.0 / v;
            let d1 = x * inv_v + 0.5 * v;
            let d2 = d1 - v;
            let phi = norm_pdf(d1);
            // The recursion can start from an overflowed or underflowed
            // exp(x_n0) when lambda T is huge; then use the direct form.
            let phi2 = if x.abs() < MONEYNESS_RECURSION_LIMIT && wt.fk.is_normal() {
                phi * wt.fk
            } else {
                norm_pdf(d2)
            };
            let n1 = norm_cdf_from_pdf(w1 * d1, phi);
            let n2 = norm_cdf_from_pdf(w2 * d2, phi2);
            let a_n1 = wt.a * n1;
            s.pa += a_n1;
            s.pb += wt.b * n2;
            s.ja += (self.onek * wt.a_prev - wt.a) * n1;
            s.jb += (wt.b_prev - wt.b) * n2;
            s.ma += a_n1 * (n - self.mu_a);
            let g = wt.a * phi * inv_v;
            // (g = 0 when phi(d1) underflows; then d1 d2 may be infinite.)
            if g != 0.0 {
                let rv = self.sd0 * inv_v;
                s.ga += g;
                s.wa += g * n;
                s.xa += g * d2 * rv;
                s.ya += g * (d1 * d2 - 1.0) * rv * rv;
            }
        } else {
            // Zero variance: the term is the discounted intrinsic value of a
            // deterministic forward. At the kink (x = 0) use the symmetric
            // slope and the right-derivative in the volatilities.
            let step = |wx: f64| {
                if wx > 0.0 {
                    1.0
                } else if wx < 0.0 {
                    0.0
                } else {
                    0.5
                }
            };
            let (step1, step2) = (step(w1 * x), step(w2 * x));
            s.pa += wt.a * step1;
            s.pb += wt.b * step2;
            s.ja += (self.onek * wt.a_prev - wt.a) * step1;
            s.jb += (wt.b_prev - wt.b) * step2;
            s.ma += wt.a * step1 * (n - self.mu_a);
            if x == 0.0 {
                s.kink_vega += wt.a * FRAC_1_SQRT_2PI * self.sqrt_t;
                s.kink_jump_vol += wt.a * FRAC_1_SQRT_2PI * n.sqrt();
            }
        }
    }
}

/// Prices a contract with the Merton series and returns all analytic Greeks.
///
/// # Errors
/// [`SeriesError`] only if [`SERIES_MAX_TERMS`] is exceeded, which validated
/// contracts do not reach.
///
/// # Example
/// ```
/// use saltus::model::{Contract, JumpParams, OptionKind};
/// // d'Halluin, Forsyth & Vetzal (2005) test case: call about 4.391243.
/// let c = Contract::new(OptionKind::Call, 100.0, 100.0, 0.25, 0.05, 0.0, 0.15,
///     JumpParams { rate: 0.1, mean: -0.9, vol: 0.45 }).unwrap();
/// let r = saltus::engines::series::price(&c).unwrap();
/// assert!((r.greeks.price - 4.391243).abs() < 5e-6);
/// ```
pub fn price(c: &Contract) -> Result<SeriesResult, SeriesError> {
    let w = c.kind.sign();
    let t = c.expiry;
    if t == 0.0 {
        let x = w * (c.spot - c.strike);
        let slope = if x > 0.0 {
            w
        } else if x < 0.0 {
            0.0
        } else {
            0.5 * w
        };
        return Ok(SeriesResult {
            greeks: Greeks {
                price: x.max(0.0),
                delta: slope,
                ..Greeks::default()
            },
            terms: 0,
            truncation_bound: 0.0,
        });
    }
    let lam = c.jumps.rate;
    let k = c.jumps.k();
    let m = c.jumps.log_mean_jump();
    let onek = 1.0 + k;
    let mu_b = lam * t;
    let mu_a = mu_b * onek;
    let dq = (-c.div_yield * t).exp();
    let dr = (-c.rate * t).exp();
    if !dq.is_finite() || !dr.is_finite() {
        let (what, col, x) = if dq.is_finite() {
            ("exp(-rate x expiry)", "rate", c.rate)
        } else {
            ("exp(-div_yield x expiry)", "div_yield", c.div_yield)
        };
        return Err(SeriesError::Overflow {
            what: "price",
            why: format!(
                "{col} {} over expiry {} years makes the discount factor {what} infinite",
                short(x),
                short(t)
            ),
        });
    }
    let se = c.spot * dq;
    let kd = c.strike * dr;
    // ln(S/K), also when S/K itself over- or underflows (strike 1e-320).
    let ratio = c.spot / c.strike;
    let log_moneyness = if ratio.is_normal() {
        ratio.ln()
    } else {
        c.spot.ln() - c.strike.ln()
    };
    // (r - q - lambda k) T, also when lambda k overflows (lambda 1e300, T tiny).
    let lam_k = lam * k;
    let drift = if lam_k.is_finite() {
        (c.rate - c.div_yield - lam_k) * t
    } else {
        (c.rate - c.div_yield) * t - mu_b * k
    };
    let mut setup = Setup {
        w1: w,
        w2: w,
        x0: log_moneyness + drift,
        m,
        var0: c.vol * c.vol * t,
        dvar: c.jumps.vol * c.jumps.vol,
        onek,
        mu_a,
        sqrt_t: t.sqrt(),
        sd0: c.vol * t.sqrt(),
    };
    // A call whose own bounding law is far wider than the put's is summed on
    // the put's walk: the terms are bounded by K e^{-rT} b_n there too, and
    // the a-sums are taken with N(-d1) (see `CALL_WALK_RATIO`).
    let put_walk = c.kind == OptionKind::Call && call_on_put_walk(&setup, mu_a, mu_b);
    if put_walk {
        setup.w1 = -1.0;
    }
    // The law that bounds the terms, its mean and the price scale it carries.
    let (mu_w, scale) = match c.kind {
        OptionKind::Call if !put_walk => (mu_a, se),
        _ => (mu_b, kd),
    };
    let bounding = |wt: &Weights| {
        if put_walk || c.kind == OptionKind::Put {
            wt.b
        } else {
            wt.a
        }
    };
    // Start at the mode of the bounding law, or at 0 when the mode is inside
    // the first block anyway (then there is no downward side to sum).
    let n0 = match mu_w.floor() as u64 {
        mode if mode < LANES as u64 => 0,
        mode => mode,
    };
    let a0 = pmf(n0, mu_a);
    let b0 = pmf(n0, mu_b);
    let (a_prev0, b_prev0) = if n0 == 0 {
        (0.0, 0.0)
    } else {
        (a0 * n0 as f64 / mu_a, b0 * n0 as f64 / mu_b)
    };
    let fk0 = (setup.x0 + n0 as f64 * m).exp();
    let mut up = Weights {
        n: n0,
        a: a0,
        b: b0,
        a_prev: a_prev0,
        b_prev: b_prev0,
        fk: fk0,
    };
    let inv_onek = 1.0 / onek;
    // Only used when n0 > 0, hence mu_a, mu_b >= 1.
    let (inv_mu_a, inv_mu_b) = (1.0 / mu_a, 1.0 / mu_b);
    let step_down = |wt: &Weights| {
        let n = wt.n - 1;
        let (a_prev, b_prev) = if n == 0 {
            (0.0, 0.0)
        } else {
            (
                wt.a_prev * n as f64 * inv_mu_a,
                wt.b_prev * n as f64 * inv_mu_b,
            )
        };
        Weights {
            n,
            a: wt.a_prev,
            b: wt.b_prev,
            a_prev,
            b_prev,
            fk: wt.fk * inv_onek,
        }
    };
    // Terms go in blocks of LANES consecutive indices (see `lanes`): upward
    // from the mode, and downward from just below it.
    let wide = lanes::wide_lanes_available();
    // Fill `blk` with the LANES indices from the frontier `f` upward and
    // move `f` past them (same arithmetic as `step_up`).
    let up_block = |blk: &mut Block, f: &mut Weights| {
        let n0 = f.n as f64;
        let (mut a, mut b, mut fk) = (f.a, f.b, f.fk);
        let (mut a_prev, mut b_prev) = (f.a_prev, f.b_prev);
        for j in 0..LANES {
            let n = n0 + j as f64;
            blk.n[j] = n;
            blk.a[j] = a;
            blk.b[j] = b;
            blk.a_prev[j] = a_prev;
            blk.b_prev[j] = b_prev;
            blk.fk[j] = fk;
            blk.live[j] = true;
            let r = 1.0 / (n + 1.0);
            (a_prev, b_prev) = (a, b);
            a = a * mu_a * r;
            b = b * mu_b * r;
            fk *= onek;
        }
        *f = Weights {
            n: f.n + LANES as u64,
            a,
            b,
            a_prev,
            b_prev,
            fk,
        };
    };
    // Fill `blk` with the LANES indices from the frontier `f` downward
    // (lanes below index 0 are dead) and return the next frontier, if any.
    let down_block = |blk: &mut Block, f: &Weights| {
        *blk = Block::default();
        let mut cur = *f;
        for j in (0..LANES).rev() {
            blk.set(j, &cur);
            if cur.n == 0 {
                return None;
            }
            cur = step_down(&cur);
        }
        Some(cur)
    };
    let mut sums = Sums::default();
    let mut acc = LaneSums::default();
    let eval = |sums: &mut Sums, acc: &mut LaneSums, blk: &Block| {
        if !lanes::add_block(&setup, blk, acc, wide) {
            for j in (0..LANES).filter(|&j| blk.live[j]) {
                setup.add_term(sums, &blk.lane(j));
            }
        }
        blk.live_count()
    };
    let mut down = if n0 > 0 { Some(step_down(&up)) } else { None };
    let mut blk = Block::default();
    up_block(&mut blk, &mut up);
    let mut terms = eval(&mut sums, &mut acc, &blk);
    // Tail bounds as fractions num/den (see `crate::poisson`), compared by
    // cross-multiplication so the loop needs no division:
    // upper = p_m (m+1) / (m+1-mu), lower = p_m mu / (mu-m); den <= 0 means
    // the geometric bound does not hold yet (infinite). `up` and `down` are
    // the first indices not yet summed on each side.
    let bound = loop {
        let up_den = (up.n + 1) as f64 - mu_w;
        let up_num = bounding(&up) * (up.n + 1) as f64;
        let (lo_num, lo_den) = match &down {
            Some(d) => (bounding(d) * mu_w, mu_w - d.n as f64),
            None => (0.0, 1.0),
        };
        let (lane_pa, lane_pb) = acc.price_parts();
        let (pa, pb) = (sums.pa + lane_pa, sums.pb + lane_pb);
        // On the put's walk a call's partial sum is S e^{-qT} (1 - sum a_n N(-d1))
        // - K e^{-rT} sum b_n N(d2); the omitted terms of either sum are
        // bounded by K e^{-rT} b_n (put terms are non-negative).
        let partial = if put_walk {
            se * (1.0 - pa) - kd * pb
        } else {
            w * (se * pa - kd * pb)
        };
        let tol = (SERIES_REL_TOL * partial).max(SERIES_ABS_TOL * scale);
        if up_den > 0.0
            && lo_den > 0.0
            && scale * (up_num * lo_den + lo_num * up_den) <= tol * up_den * lo_den
        {
            break scale * (up_num / up_den + lo_num / lo_den);
        }
        if terms >= SERIES_MAX_TERMS {
            // While a geometric bound does not hold yet the bound is infinite.
            let side = |num: f64, den: f64| if den > 0.0 { num / den } else { f64::INFINITY };
            let bound = scale * (side(up_num, up_den) + side(lo_num, lo_den));
            return Err(SeriesError::NotConverged { terms, bound });
        }
        // Extend the side whose remaining bound is larger.
        let lower_larger = lo_den <= 0.0 || (up_den > 0.0 && lo_num * up_den >= up_num * lo_den);
        match down {
            Some(d) if lower_larger => {
                down = down_block(&mut blk, &d);
                terms += eval(&mut sums, &mut acc, &blk);
            }
            _ => {
                up_block(&mut blk, &mut up);
                terms += eval(&mut sums, &mut acc, &blk);
            }
        }
    };
    acc.add_into(&mut sums);
    // One more upward term: the shifted weights a_{n-1}, b_{n-1} of the jump-rate
    // and theta sums reach one index further (at lambda = 0 only this term
    // carries d/dlambda).
    setup.add_term(&mut sums, &up);
    terms += 1;

    let s = &sums;
    let sigma = c.vol;
    let delta_j = c.jumps.vol;
    let greeks = if put_walk {
        // A call from the put-side a-sums: sum a_n N(d1_n) = 1 - s.pa,
        // sum ((1+k) a_{n-1} - a_n) N(d1_n) = k - s.ja and
        // sum a_n N(d1_n) (n - lambda' T) = -s.ma (the Poisson weights sum to
        // 1, their differences to k, their centred first moment to 0). The
        // terms in `k` cancel exactly in the jump-rate and theta sums and are
        // left out rather than cancelled in floating point.
        let pa = 1.0 - s.pa;
        let raw_price = se * pa - kd * s.pb;
        if !raw_price.is_finite() {
            return Err(overflow(c, "price", raw_price));
        }
        let price = raw_price.max(0.0);
        let fwd_part = se * pa;
        // (jump_gap - k fwd_part): d_jump_rate / T.
        let jr = se * (k * s.pa - s.ja) - kd * s.jb;
        let dv_dt = lam * jr - c.rate * price
            + (c.rate - c.div_yield) * fwd_part
            + 0.5 * se * sigma * sigma * s.ga;
        let d_jump_mean = -se * s.ma;
        Greeks {
            price,
            delta: dq * pa,
            gamma: dq * s.ga / c.spot,
            vega: se * (sigma * t * s.ga + s.kink_vega),
            theta: -dv_dt,
            rho: t * kd * s.pb,
            div_rho: -t * fwd_part,
            d_jump_rate: t * jr,
            d_jump_mean,
            d_jump_vol: delta_j * d_jump_mean + se * (delta_j * s.wa + s.kink_jump_vol),
            vanna: -dq * setup.sqrt_t * s.xa,
            volga: se * t * (s.ga + s.ya),
        }
    } else {
        let raw_price = w * (se * s.pa - kd * s.pb);
        if !raw_price.is_finite() {
            return Err(overflow(c, "price", raw_price));
        }
        // Clamp only rounding below zero (the price of an option is never negative).
        let price = raw_price.max(0.0);
        let jump_gap = w * (se * s.ja - kd * s.jb);
        let fwd_part = w * se * s.pa;
        let dv_dt = lam * jump_gap - c.rate * price
            + (c.rate - c.div_yield - lam * k) * fwd_part
            + 0.5 * se * sigma * sigma * s.ga;
        let d_jump_mean = w * se * s.ma;
        Greeks {
            price,
            delta: w * dq * s.pa,
            gamma: dq * s.ga / c.spot,
            vega: se * (sigma * t * s.ga + s.kink_vega),
            theta: -dv_dt,
            rho: w * t * kd * s.pb,
            div_rho: -t * fwd_part,
            d_jump_rate: t * jump_gap - k * t * fwd_part,
            d_jump_mean,
            d_jump_vol: delta_j * d_jump_mean + se * (delta_j * s.wa + s.kink_jump_vol),
            vanna: -dq * setup.sqrt_t * s.xa,
            volga: se * t * (s.ga + s.ya),
        }
    };
    if let Some((i, &v)) = greeks
        .sensitivities()
        .iter()
        .enumerate()
        .find(|(_, x)| !x.is_finite())
    {
        return Err(overflow(c, SENSITIVITY_NAMES[i], v));
    }
    Ok(SeriesResult {
        greeks,
        terms,
        truncation_bound: bound,
    })
}

/// Should this call be summed on the put's walk? See [`CALL_WALK_RATIO`].
fn call_on_put_walk(st: &Setup, mu_a: f64, mu_b: f64) -> bool {
    if mu_a <= CALL_WALK_RATIO * mu_b.max(CALL_WALK_MIN_MEAN) {
        return false;
    }
    if mu_a > CALL_WALK_MAX_MEAN {
        return true;
    }
    // d1 at the mode of a_n: far above 0, the share measure puts almost all
    // its mass above the strike and 1 - sum a_n N(-d1_n) loses no digits.
    let x = st.x0 + mu_a * st.m;
    let var = st.var0 + mu_a * st.dvar;
    if var > 0.0 {
        let v = var.sqrt();
        x / v + 0.5 * v > CALL_WALK_MIN_D1
    } else {
        x > 0.0
    }
}

/// A number in short form for messages (`1e-320`, `0.25`).
fn short(x: f64) -> String {
    if x != 0.0 && (x.abs() >= 1e6 || x.abs() < 1e-4) {
        format!("{x:e}")
    } else {
        format!("{x}")
    }
}

/// The overflow error for quantity `what` (value `v`), naming the inputs
/// that drive it.
fn overflow(c: &Contract, what: &'static str, v: f64) -> SeriesError {
    let spread = c.vol * c.expiry.sqrt();
    let why = match what {
        "gamma" | "vanna" | "volga" | "vega" => format!(
            "it scales like 1 / (spot x vol x sqrt(expiry)) and spot {} with vol x sqrt(expiry) = {} gives {}",
            short(c.spot),
            short(spread),
            short(v)
        ),
        "theta" => format!(
            "it scales like spot x vol / sqrt(expiry) and jump_rate x spot; spot {}, expiry {}, vol {}, jump_rate {} give {}",
            short(c.spot),
            short(c.expiry),
            short(c.vol),
            short(c.jumps.rate),
            short(v)
        ),
        _ => format!(
            "spot {}, strike {} (strike/spot ratio {}), expiry {} give {}",
            short(c.spot),
            short(c.strike),
            short(c.strike / c.spot),
            short(c.expiry),
            short(v)
        ),
    };
    SeriesError::Overflow { what, why }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::black_scholes;
    use crate::model::JumpParams;

    fn contract(kind: OptionKind, k: f64, lam: f64) -> Contract {
        Contract::new(
            kind,
            100.0,
            k,
            0.5,
            0.03,
            0.01,
            0.2,
            JumpParams {
                rate: lam,
                mean: -0.1,
                vol: 0.25,
            },
        )
        .unwrap()
    }

    #[test]
    fn lambda_zero_is_black_scholes() {
        for kind in [OptionKind::Call, OptionKind::Put] {
            let c = contract(kind, 110.0, 0.0);
            let g = price(&c).unwrap().greeks;
            let bs = black_scholes::greeks(kind, 100.0, 110.0, 0.5, 0.03, 0.01, 0.2);
            assert!((g.price - bs.price).abs() < 1e-13 * 100.0);
            assert!((g.delta - bs.delta).abs() < 1e-15);
            assert!((g.vega - bs.vega).abs() < 1e-12);
            assert!((g.theta - bs.theta).abs() < 1e-12);
        }
    }

    #[test]
    fn parity_holds() {
        let c = price(&contract(OptionKind::Call, 95.0, 1.5))
            .unwrap()
            .greeks;
        let p = price(&contract(OptionKind::Put, 95.0, 1.5)).unwrap().greeks;
        let fwd = 100.0 * (-0.005f64).exp() - 95.0 * (-0.015f64).exp();
        assert!((c.price - p.price - fwd).abs() < 1e-12 * 100.0);
    }
}
