//! Monte Carlo engine: exact simulation of the terminal price, with
//! antithetic variates, a control variate and importance sampling of the
//! jump count. Shares no code with the series engine.
//!
//! # Simulation
//! Given the jump count `N`, the log-return over `[0, T]` is exactly normal:
//! `ln S_T = ln S + (r - q - lambda k - sigma^2/2) T + sigma sqrt(T) Z1 + N mu_J + sqrt(N) delta Z2`.
//! So a European payoff needs one Poisson draw and one or two normals per
//! path, with no time-stepping bias. [`MertonSampler::increment`] draws the
//! same increment over any interval, which is what a path-dependent payoff
//! on a time grid would call step by step.
//!
//! # Importance sampling (change of jump intensity)
//! Paths are drawn with intensity `lambda~ = gamma lambda` (and, optionally,
//! jump-size mean `mu~ = mu_J + shift`) and weighted by the Radon-Nikodym
//! derivative of the original law with respect to the sampling law,
//! `dP/dQ = (lambda/lambda~)^N exp((lambda~ - lambda) T)`
//! times, when the mean is shifted, the normal likelihood ratio of the jump
//! sum `J = sum ln Y_i`: `exp((mu_J - mu~) J / delta^2 - N (mu_J^2 - mu~^2) / (2 delta^2))`.
//! Only the sampling law changes: the drift keeps the original compensator
//! `lambda k`, so `E_Q[w X] = E_P[X]` for every payoff `X`. Glasserman (2004),
//! *Monte Carlo Methods in Financial Engineering*, section 4.6.
//!
//! # Reproducibility
//! Work is cut into blocks of [`BLOCK_PAIRS`] antithetic pairs. Block `i`
//! of a row draws from `ChaCha8Rng` seeded by the row's stream key (from the
//! seed and the row id, [`stream_key`]) with `set_stream(i)`. Block results
//! are merged in block order, so the digits do not depend on the number of
//! threads, on the order of the book or on how it is split.

use crate::model::Contract;
use rand::{Rng, RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, StandardNormal};
use rayon::prelude::*;
use std::time::Instant;

/// Antithetic pairs per block (the unit of parallel work and of streams).
pub const BLOCK_PAIRS: u64 = 8192;
/// Most paths per row, for a fixed number of paths and for the cap of the
/// target-standard-error modes (2^30, about a minute per row on one core).
pub const MAX_PATHS: u64 = 1 << 30;
/// Range of a fixed jump-intensity multiplier `gamma` (the pilot's
/// candidates span 0.25 to 40).
pub const GAMMA_RANGE: (f64, f64) = (1e-3, 1e3);
/// Largest `|jump_mean_shift|` (the model's own bound on `|mu_J|`).
pub const MAX_JUMP_MEAN_SHIFT: f64 = crate::model::MAX_LOG_JUMP;
/// Stream reserved for the pilot run that chooses the intensity multiplier.
const PILOT_STREAM: u64 = u64::MAX;
/// Pairs in the pilot run.
const PILOT_PAIRS: u64 = 16_384;
/// Intensity multipliers tried by the pilot.
const GAMMA_CANDIDATES: [f64; 13] = [
    0.25, 0.5, 0.8, 1.0, 1.25, 1.5, 2.0, 3.0, 5.0, 8.0, 12.0, 20.0, 40.0,
];
/// A pilot candidate needs this many non-zero payoffs to be trusted.
const PILOT_MIN_HITS: u64 = 20;
/// Largest admissible `ln E_Q[w^2] = lambda T (gamma - 1)^2 / gamma`: the
/// second moment of the likelihood weight, which must stay moderate for the
/// weights (and the pilot's variance estimate) to be trustworthy. At 4 the
/// effective sample size is at least `e^-4`, about 2% of the paths.
const MAX_LOG_WEIGHT_SECOND_MOMENT: f64 = 4.0;
/// Above this mean the Poisson draw switches from inversion to rand_distr's sampler.
const INVERSION_MAX_MEAN: f64 = 30.0;
/// Jump counts with precomputed `sqrt(n)` and likelihood weight.
const TABLE_N: usize = 128;

/// How the jump-intensity multiplier `gamma` is chosen.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum IntensityChoice {
    /// Chosen by a short pilot run minimising the estimator's variance.
    Auto,
    /// Fixed by the user (`1` is plain sampling of the jump count).
    Fixed(f64),
}

/// The requested precision.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Work {
    /// A fixed number of paths.
    Paths(u64),
    /// Add batches until the standard error is below this absolute value.
    AbsoluteSe(f64),
    /// Add batches until the standard error is below this fraction of the price.
    RelativeSe(f64),
}

/// Monte Carlo settings.
#[derive(Debug, Clone, PartialEq)]
pub struct McConfig {
    /// Work to do.
    pub work: Work,
    /// Path cap for the target-standard-error modes.
    pub max_paths: u64,
    /// Seed of every stream.
    pub seed: u64,
    /// Antithetic variates (negate both normals, keep the jump count).
    pub antithetic: bool,
    /// Control variate: the weighted discounted terminal price, mean `S e^{-qT}`.
    pub control_variate: bool,
    /// Importance sampling of the jump count.
    pub intensity: IntensityChoice,
    /// Shift of the jump-size mean under the sampling law (0: none).
    pub jump_mean_shift: f64,
    /// Fixes the mean jump count `lambda~ T` of the sampling law, overriding
    /// `intensity`. Bump-and-reprice uses it so that bumped contracts share
    /// the same jump counts (common random numbers) and a change of `lambda`
    /// or `T` only changes the likelihood weights, smoothly.
    pub sampling_count_mean: Option<f64>,
}

impl McConfig {
    /// Checks the settings against the documented ranges ([`MAX_PATHS`],
    /// [`GAMMA_RANGE`], [`MAX_JUMP_MEAN_SHIFT`]), so that no setting can make
    /// [`price`] run away or fail.
    ///
    /// # Errors
    /// A message naming the field and the accepted range.
    pub fn validate(&self) -> Result<(), String> {
        let in_range = |x: f64, lo: f64, hi: f64| x.is_finite() && x >= lo && x <= hi;
        match self.work {
            Work::Paths(p) if !(2..=MAX_PATHS).contains(&p) => {
                return Err(format!("paths must be between 2 and {MAX_PATHS}, got {p}"));
            }
            Work::AbsoluteSe(x) | Work::RelativeSe(x) if !(x.is_finite() && x > 0.0) => {
                return Err(format!("target standard error must be positive, got {x}"));
            }
            _ => {}
        }
        if !(2..=MAX_PATHS).contains(&self.max_paths) {
            return Err(format!(
                "max paths must be between 2 and {MAX_PATHS}, got {}",
                self.max_paths
            ));
        }
        if let IntensityChoice::Fixed(g) = self.intensity {
            let (lo, hi) = GAMMA_RANGE;
            if !in_range(g, lo, hi) {
                return Err(format!("gamma must be between {lo:e} and {hi:e}, got {g}"));
            }
        }
        let shift = self.jump_mean_shift;
        if !in_range(shift, -MAX_JUMP_MEAN_SHIFT, MAX_JUMP_MEAN_SHIFT) {
            return Err(format!(
                "jump mean shift must be between -{MAX_JUMP_MEAN_SHIFT} and {MAX_JUMP_MEAN_SHIFT}, got {shift}"
            ));
        }
        if let Some(m) = self.sampling_count_mean {
            if !in_range(m, 0.0, 1e12) {
                return Err(format!(
                    "sampling mean jump count must be between 0 and 1e12, got {m}"
                ));
            }
        }
        Ok(())
    }
}

impl Default for McConfig {
    fn default() -> Self {
        McConfig {
            work: Work::Paths(1 << 20),
            max_paths: 1 << 26,
            seed: 20_261_201,
            antithetic: true,
            control_variate: true,
            intensity: IntensityChoice::Auto,
            jump_mean_shift: 0.0,
            sampling_count_mean: None,
        }
    }
}

/// Which estimator produced a Monte Carlo price (the `mc_method` column).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[non_exhaustive]
pub enum McMethod {
    /// No simulation: the payoff at `T = 0`, exact.
    Exact,
    /// Plain sampling of the jump count (intensity multiplier 1, no shift).
    Plain,
    /// Importance sampling of the jump count (and, optionally, of the jump-size mean).
    JumpCount,
}

impl McMethod {
    /// The name written in reports.
    pub fn as_str(self) -> &'static str {
        match self {
            McMethod::Exact => "exact",
            McMethod::Plain => "plain",
            McMethod::JumpCount => "jump-count",
        }
    }
}

/// A Monte Carlo price with its error bars and diagnostics.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct McEstimate {
    /// The estimator used.
    pub method: McMethod,
    /// The estimate.
    pub price: f64,
    /// Its standard error.
    pub std_error: f64,
    /// 95% confidence interval `price -/+ 1.96 std_error`.
    pub ci95: (f64, f64),
    /// Paths simulated (each antithetic pair counts as two).
    pub paths: u64,
    /// Wall time, seconds (pilot included).
    pub seconds: f64,
    /// Intensity multiplier used.
    pub gamma: f64,
    /// Control-variate coefficient used (0 without control variate).
    pub beta: f64,
    /// Variance-reduction factor: per-path variance of plain sampling (no
    /// antithetics, no control, no importance sampling, estimated from the
    /// same paths) divided by `paths * std_error^2`.
    pub variance_reduction: f64,
    /// Effective sample size of the likelihood weights, `(sum w)^2 / sum w^2`.
    pub ess: f64,
    /// Paths that ended in the money (non-zero payoff).
    pub hits: u64,
    /// Martingale test: `(mean of w e^{-rT} S_T - S e^{-qT}) / its standard error`.
    /// Far from 0 (beyond 5) the sample misses the paths that carry the
    /// forward (extremely heavy tails) and the error bars are not trustworthy;
    /// the control variate is then not applied.
    pub martingale_z: f64,
}

/// Derives a row's stream key from the seed and the row id (FNV-1a of the id,
/// mixed with the seed by SplitMix64), so a row's draws do not depend on its
/// position in the book.
pub fn stream_key(seed: u64, id: &str) -> u64 {
    let mut h: u64 = 0xcbf2_9ce4_8422_2325;
    for b in id.as_bytes() {
        h ^= *b as u64;
        h = h.wrapping_mul(0x0000_0100_0000_01b3);
    }
    splitmix64(seed ^ splitmix64(h))
}

fn splitmix64(mut z: u64) -> u64 {
    z = z.wrapping_add(0x9e37_79b9_7f4a_7c15);
    z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
    z ^ (z >> 31)
}

/// Exact sampler of Merton log-increments under a (possibly changed) jump law.
#[derive(Debug, Clone)]
pub struct MertonSampler {
    /// sigma sqrt(dt).
    sigma_sqrt_dt: f64,
    /// Risk-neutral drift of ln S over the interval, with the *original* compensator.
    drift_dt: f64,
    jump_vol: f64,
    /// Jump mean of the sampling law.
    sample_mean: f64,
    poisson_large: Option<rand_distr::Poisson<f64>>,
    /// Cumulative Poisson probabilities for the inversion draw, up to the
    /// count whose upper tail is below the 2^-53 resolution of a uniform.
    cdf: Vec<f64>,
    sqrt_n: Vec<f64>,
}

/// Cumulative Poisson probabilities `P(N <= n)` until the tail is below 1e-17.
fn poisson_cdf_table(mean: f64) -> Vec<f64> {
    let mut cdf = Vec::new();
    let mut p = (-mean).exp();
    let mut total = p;
    let mut n = 0u64;
    loop {
        cdf.push(total);
        // Tail bound P(N > n) <= p_{n+1} / (1 - mean/(n+2)) once n + 2 > mean.
        let next = p * mean / (n + 1) as f64;
        let ratio = mean / (n + 2) as f64;
        if (ratio < 1.0 && next / (1.0 - ratio) < 1e-17) || cdf.len() > 10_000 {
            break;
        }
        n += 1;
        p = next;
        total += p;
    }
    cdf
}

impl MertonSampler {
    /// A sampler for increments over `dt` years with sampling intensity
    /// `sample_rate` and sampling jump mean `sample_mean`.
    pub fn new(c: &Contract, dt: f64, sample_rate: f64, sample_mean: f64) -> Self {
        let mean = sample_rate * dt;
        let poisson_large = if mean > INVERSION_MAX_MEAN {
            rand_distr::Poisson::new(mean).ok()
        } else {
            None
        };
        MertonSampler {
            sigma_sqrt_dt: c.vol * dt.sqrt(),
            drift_dt: (c.rate - c.div_yield - c.jumps.rate * c.jumps.k() - 0.5 * c.vol * c.vol)
                * dt,
            jump_vol: c.jumps.vol,
            sample_mean,
            // (A table whenever there is no large-mean sampler, so the draw
            // never indexes an empty table; `McConfig::validate` keeps the
            // mean in the large sampler's range.)
            cdf: if poisson_large.is_none() {
                poisson_cdf_table(mean)
            } else {
                Vec::new()
            },
            poisson_large,
            sqrt_n: (0..TABLE_N).map(|n| (n as f64).sqrt()).collect(),
        }
    }

    /// Draws the jump count over the interval: inversion of a precomputed
    /// cumulative table for small means, rand_distr's sampler above.
    #[inline]
    pub fn jump_count<R: Rng>(&self, rng: &mut R) -> u64 {
        if let Some(p) = &self.poisson_large {
            return p.sample(rng) as u64;
        }
        let u: f64 = rng.random();
        let mut n = 0;
        let last = self.cdf.len() - 1;
        while n < last && u > self.cdf[n] {
            n += 1;
        }
        n as u64
    }

    #[inline]
    fn sqrt_of(&self, n: u64) -> f64 {
        if (n as usize) < TABLE_N {
            self.sqrt_n[n as usize]
        } else {
            (n as f64).sqrt()
        }
    }

    /// One log-increment over the interval: `(diffusion part + drift, jump sum, N)`
    /// for normals `z1, z2` (so antithetic partners can reuse the draws).
    #[inline]
    pub fn increment_from(&self, n: u64, z1: f64, z2: f64) -> (f64, f64) {
        let diffusion = self.drift_dt + self.sigma_sqrt_dt * z1;
        let jumps = if n == 0 {
            0.0
        } else {
            n as f64 * self.sample_mean + self.sqrt_of(n) * self.jump_vol * z2
        };
        (diffusion, jumps)
    }

    /// Draws one log-increment of `ln S` over the interval and its jump count.
    pub fn increment<R: Rng>(&self, rng: &mut R) -> (f64, u64) {
        let n = self.jump_count(rng);
        let z1: f64 = StandardNormal.sample(rng);
        let z2: f64 = if n > 0 {
            StandardNormal.sample(rng)
        } else {
            0.0
        };
        let (d, j) = self.increment_from(n, z1, z2);
        (d + j, n)
    }
}

/// Sums over one block, shifted by a per-block reference to keep digits.
#[derive(Debug, Clone, Copy, Default)]
struct Moments {
    n: f64,
    mean_x: f64,
    mean_c: f64,
    m2_x: f64,
    m2_c: f64,
    c_xc: f64,
    /// Sum over paths of w f^2 and of w (plain-variance and ESS diagnostics).
    sum_wf2: f64,
    sum_w: f64,
    sum_w2: f64,
    paths: f64,
    hits: u64,
}

impl Moments {
    /// Chan-Golub-LeVeque merge of two sets of bivariate moments.
    fn merge(&self, o: &Moments) -> Moments {
        if self.n == 0.0 {
            return *o;
        }
        if o.n == 0.0 {
            return *self;
        }
        let n = self.n + o.n;
        let dx = o.mean_x - self.mean_x;
        let dc = o.mean_c - self.mean_c;
        let f = self.n * o.n / n;
        Moments {
            n,
            mean_x: self.mean_x + dx * o.n / n,
            mean_c: self.mean_c + dc * o.n / n,
            m2_x: self.m2_x + o.m2_x + dx * dx * f,
            m2_c: self.m2_c + o.m2_c + dc * dc * f,
            c_xc: self.c_xc + o.c_xc + dx * dc * f,
            sum_wf2: self.sum_wf2 + o.sum_wf2,
            sum_w: self.sum_w + o.sum_w,
            sum_w2: self.sum_w2 + o.sum_w2,
            paths: self.paths + o.paths,
            hits: self.hits + o.hits,
        }
    }
}

/// Everything needed to simulate one contract under one sampling law.
struct Simulation {
    sampler: MertonSampler,
    log_spot: f64,
    strike: f64,
    sign: f64,
    discount: f64,
    /// Likelihood weight per jump count: (lambda/lambda~)^n exp((lambda~-lambda)T).
    weight_table: Vec<f64>,
    log_ratio: f64,
    weight_const: f64,
    /// Normal likelihood-ratio coefficients for a shifted jump mean.
    shift: Option<(f64, f64)>,
    antithetic: bool,
    /// exp(ln S + drift + n mu~) for small jump counts.
    exp_a: Vec<f64>,
}

impl Simulation {
    /// `count_mean` is the mean jump count `lambda~ T` of the sampling law.
    fn new(c: &Contract, count_mean: f64, shift: f64, antithetic: bool) -> Self {
        let t = c.expiry;
        let lam_t = c.jump_intensity();
        let mu_s = c.jumps.mean + shift;
        // Weight of n jumps: (lambda T / M)^n exp(M - lambda T).
        let (log_ratio, weight_const) = if count_mean == 0.0 {
            (0.0, 0.0)
        } else if lam_t == 0.0 {
            (f64::NEG_INFINITY, count_mean)
        } else {
            ((lam_t / count_mean).ln(), count_mean - lam_t)
        };
        let lam_s = if t > 0.0 { count_mean / t } else { 0.0 };
        let weight_of = move |n: f64| {
            if n == 0.0 {
                weight_const.exp()
            } else {
                (n * log_ratio + weight_const).exp()
            }
        };
        let weight_table = (0..TABLE_N).map(|n| weight_of(n as f64)).collect();
        let shift = if shift != 0.0 && c.jumps.vol > 0.0 {
            let d2 = c.jumps.vol * c.jumps.vol;
            Some((
                (c.jumps.mean - mu_s) / d2,
                (c.jumps.mean.powi(2) - mu_s * mu_s) / (2.0 * d2),
            ))
        } else {
            None
        };
        let sampler = MertonSampler::new(c, t, lam_s, mu_s);
        let exp_a = (0..TABLE_N)
            .map(|n| (c.spot.ln() + sampler.drift_dt + n as f64 * mu_s).exp())
            .collect();
        Simulation {
            exp_a,
            sampler,
            log_spot: c.spot.ln(),
            strike: c.strike,
            sign: c.kind.sign(),
            discount: (-c.rate * t).exp(),
            weight_table,
            log_ratio,
            weight_const,
            shift,
            antithetic,
        }
    }

    #[inline]
    fn weight(&self, n: u64, jumps: f64) -> f64 {
        let base = if (n as usize) < TABLE_N {
            self.weight_table[n as usize]
        } else {
            (n as f64 * self.log_ratio + self.weight_const).exp()
        };
        // (n >= TABLE_N > 0 here, so log_ratio = -inf gives exp(-inf) = 0.)
        match self.shift {
            Some((a, b)) => base * (a * jumps - n as f64 * b).exp(),
            None => base,
        }
    }

    /// Simulates `pairs` samples (antithetic pairs or single paths) from `rng`.
    fn run_block<R: Rng>(&self, rng: &mut R, pairs: u64) -> Moments {
        let mut m = Moments::default();
        // Shift references: the first sample of the block.
        let (mut kx, mut kc) = (f64::NAN, f64::NAN);
        let (mut sx, mut sc, mut sxx, mut scc, mut sxc) = (0.0, 0.0, 0.0, 0.0, 0.0);
        for _ in 0..pairs {
            let n = self.sampler.jump_count(rng);
            let z1: f64 = StandardNormal.sample(rng);
            let z2: f64 = if n > 0 {
                StandardNormal.sample(rng)
            } else {
                0.0
            };
            // ln S_T = a_n + b and, for the antithetic partner, a_n - b.
            let nf = n as f64;
            let b = self.sampler.sigma_sqrt_dt * z1
                + if n > 0 {
                    self.sampler.sqrt_of(n) * self.sampler.jump_vol * z2
                } else {
                    0.0
                };
            let ea = if (n as usize) < TABLE_N {
                self.exp_a[n as usize]
            } else {
                (self.log_spot + self.sampler.drift_dt + nf * self.sampler.sample_mean).exp()
            };
            let eb = b.exp();
            let st = ea * eb;
            let jump_mean_part = nf * self.sampler.sample_mean;
            let j = jump_mean_part + (b - self.sampler.sigma_sqrt_dt * z1);
            let w = self.weight(n, j);
            let f = self.discount * (self.sign * (st - self.strike)).max(0.0);
            let (x, cv, wf2, ws, w2, hits) = if self.antithetic {
                let st2 = ea / eb;
                let j2 = 2.0 * jump_mean_part - j;
                let w_2 = if self.shift.is_some() {
                    self.weight(n, j2)
                } else {
                    w
                };
                let f2 = self.discount * (self.sign * (st2 - self.strike)).max(0.0);
                (
                    0.5 * (w * f + w_2 * f2),
                    0.5 * self.discount * (w * st + w_2 * st2),
                    w * f * f + w_2 * f2 * f2,
                    w + w_2,
                    w * w + w_2 * w_2,
                    (f > 0.0) as u64 + (f2 > 0.0) as u64,
                )
            } else {
                (
                    w * f,
                    self.discount * w * st,
                    w * f * f,
                    w,
                    w * w,
                    (f > 0.0) as u64,
                )
            };
            if kx.is_nan() {
                kx = x;
                kc = cv;
            }
            let (ux, uc) = (x - kx, cv - kc);
            sx += ux;
            sc += uc;
            sxx += ux * ux;
            scc += uc * uc;
            sxc += ux * uc;
            m.sum_wf2 += wf2;
            m.sum_w += ws;
            m.sum_w2 += w2;
            m.hits += hits;
        }
        let n = pairs as f64;
        m.n = n;
        m.paths = if self.antithetic { 2.0 * n } else { n };
        m.mean_x = kx + sx / n;
        m.mean_c = kc + sc / n;
        m.m2_x = sxx - sx * sx / n;
        m.m2_c = scc - sc * sc / n;
        m.c_xc = sxc - sx * sc / n;
        m
    }

    fn run_blocks(&self, key: u64, first: u64, count: u64) -> Moments {
        let blocks: Vec<Moments> = (first..first + count)
            .into_par_iter()
            .map(|b| {
                let mut rng = ChaCha8Rng::seed_from_u64(key);
                rng.set_stream(b);
                self.run_block(&mut rng, BLOCK_PAIRS)
            })
            .collect();
        blocks
            .iter()
            .fold(Moments::default(), |acc, m| acc.merge(m))
    }
}

/// `(sample mean of the control - its known mean) / standard error`.
fn martingale_z(m: &Moments, control_mean: f64) -> f64 {
    if m.n < 2.0 {
        return 0.0;
    }
    let se = (m.m2_c / (m.n - 1.0) / m.n).sqrt();
    let d = m.mean_c - control_mean;
    if se > 0.0 {
        d / se
    } else if d.abs() <= 1e-12 * control_mean.abs() {
        0.0
    } else {
        f64::INFINITY.copysign(d)
    }
}

/// Turns merged moments into an estimate.
fn estimate(m: &Moments, control_mean: f64, use_cv: bool) -> (f64, f64, f64) {
    let n = m.n;
    if n < 2.0 {
        return (m.mean_x, f64::INFINITY, 0.0);
    }
    let var_x = m.m2_x / (n - 1.0);
    let var_c = m.m2_c / (n - 1.0);
    let cov = m.c_xc / (n - 1.0);
    // The control is only used when its sample mean is consistent with its
    // known mean (within 5 standard errors, common practice for a sanity
    // check): with very heavy-tailed terminal prices (huge jump intensity and
    // large jumps) the sample misses the paths that carry E[S_T], and the
    // adjustment would then add error instead of removing it.
    let control_consistent = martingale_z(m, control_mean).abs() <= 5.0;
    if use_cv && var_c > 0.0 && control_consistent {
        let beta = cov / var_c;
        let price = m.mean_x - beta * (m.mean_c - control_mean);
        let var = (var_x - cov * cov / var_c).max(0.0);
        (price, (var / n).sqrt(), beta)
    } else {
        (m.mean_x, (var_x.max(0.0) / n).sqrt(), 0.0)
    }
}

/// Prices one contract by Monte Carlo.
///
/// `key` is the row's stream key ([`stream_key`]). For `T = 0` the payoff is
/// returned exactly with zero error.
pub fn price(c: &Contract, key: u64, cfg: &McConfig) -> McEstimate {
    let start = Instant::now();
    if c.expiry == 0.0 {
        let p = c.kind.payoff(c.spot, c.strike);
        return McEstimate {
            method: McMethod::Exact,
            price: p,
            std_error: 0.0,
            ci95: (p, p),
            paths: 0,
            seconds: 0.0,
            gamma: 1.0,
            beta: 0.0,
            variance_reduction: 1.0,
            ess: 0.0,
            hits: 0,
            martingale_z: 0.0,
        };
    }
    let control_mean = c.spot * (-c.div_yield * c.expiry).exp();
    let lam_t = c.jump_intensity();
    let (gamma, count_mean) = match cfg.sampling_count_mean {
        Some(m) => (if lam_t > 0.0 { m / lam_t } else { 1.0 }, m),
        None => {
            let g = choose_intensity(c, key, cfg);
            (g, g * lam_t)
        }
    };
    let sim = Simulation::new(c, count_mean, cfg.jump_mean_shift, cfg.antithetic);
    let paths_per_block = if cfg.antithetic {
        2 * BLOCK_PAIRS
    } else {
        BLOCK_PAIRS
    };
    let blocks_for = |paths: u64| paths.div_ceil(paths_per_block).max(1);
    let mut done = 0u64;
    let mut m = Moments::default();
    match cfg.work {
        Work::Paths(p) => {
            m = sim.run_blocks(key, 0, blocks_for(p));
        }
        Work::AbsoluteSe(_) | Work::RelativeSe(_) => {
            let cap = blocks_for(cfg.max_paths);
            let mut next = 8.min(cap);
            loop {
                m = m.merge(&sim.run_blocks(key, done, next - done));
                done = next;
                let (p, se, _) = estimate(&m, control_mean, cfg.control_variate);
                let target = match cfg.work {
                    Work::AbsoluteSe(x) => x,
                    Work::RelativeSe(x) => x * p.abs(),
                    Work::Paths(_) => unreachable!(),
                };
                if se <= target || done >= cap {
                    break;
                }
                // Paths needed scale with (se/target)^2; grow by at most 8x per round.
                let ratio = if target > 0.0 {
                    (se / target).powi(2) * 1.1
                } else {
                    8.0
                };
                let want = ((done as f64) * ratio.clamp(1.25, 8.0)).ceil() as u64;
                next = want.min(cap).max(done + 1);
            }
        }
    }
    let (p, se, beta) = estimate(&m, control_mean, cfg.control_variate);
    let plain_var = (m.sum_wf2 / m.paths - p * p).max(0.0);
    let vrf = if se > 0.0 {
        plain_var / (m.paths * se * se)
    } else {
        f64::INFINITY
    };
    let method = if gamma == 1.0 && cfg.jump_mean_shift == 0.0 {
        McMethod::Plain
    } else {
        McMethod::JumpCount
    };
    McEstimate {
        method,
        price: p,
        std_error: se,
        ci95: (p - 1.96 * se, p + 1.96 * se),
        paths: m.paths as u64,
        seconds: start.elapsed().as_secs_f64(),
        gamma,
        beta,
        variance_reduction: vrf,
        ess: if m.sum_w2 > 0.0 {
            m.sum_w * m.sum_w / m.sum_w2
        } else {
            0.0
        },
        hits: m.hits,
        martingale_z: martingale_z(&m, control_mean),
    }
}

/// The intensity multiplier `gamma` that [`price`] would use for this
/// contract: the fixed one, 1 without jumps, or the pilot run's choice.
pub fn choose_intensity(c: &Contract, key: u64, cfg: &McConfig) -> f64 {
    match cfg.intensity {
        IntensityChoice::Fixed(g) => g,
        IntensityChoice::Auto if c.jumps.rate == 0.0 => 1.0,
        IntensityChoice::Auto => {
            choose_gamma(c, key, cfg, c.spot * (-c.div_yield * c.expiry).exp())
        }
    }
}

/// Pilot run: the intensity multiplier with the smallest estimated variance
/// per path among candidates whose pilot saw enough non-zero payoffs and
/// whose weights have a moderate second moment
/// ([`MAX_LOG_WEIGHT_SECOND_MOMENT`]). All candidates use the same random
/// numbers (common random numbers). `gamma = 1` is always admissible.
fn choose_gamma(c: &Contract, key: u64, cfg: &McConfig, control_mean: f64) -> f64 {
    let mut best = (f64::INFINITY, 1.0);
    let mut most_hits = (0u64, 1.0);
    let lam_t = c.jump_intensity();
    for &g in &GAMMA_CANDIDATES {
        if lam_t * (g - 1.0).powi(2) / g > MAX_LOG_WEIGHT_SECOND_MOMENT {
            continue;
        }
        let sim = Simulation::new(c, g * lam_t, cfg.jump_mean_shift, cfg.antithetic);
        let mut rng = ChaCha8Rng::seed_from_u64(key);
        rng.set_stream(PILOT_STREAM);
        let m = sim.run_block(&mut rng, PILOT_PAIRS);
        if m.hits > most_hits.0 {
            most_hits = (m.hits, g);
        }
        if m.hits < PILOT_MIN_HITS {
            continue;
        }
        let (_, se, _) = estimate(&m, control_mean, cfg.control_variate);
        if se * se < best.0 {
            best = (se * se, g);
        }
    }
    if best.0.is_finite() {
        best.1
    } else {
        most_hits.1
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::{JumpParams, OptionKind};

    #[test]
    fn stream_key_depends_on_id_and_seed() {
        assert_ne!(stream_key(1, "a"), stream_key(1, "b"));
        assert_ne!(stream_key(1, "a"), stream_key(2, "a"));
        assert_eq!(stream_key(7, "row-9"), stream_key(7, "row-9"));
    }

    #[test]
    fn zero_expiry_is_exact() {
        let c = Contract::new(
            OptionKind::Put,
            90.0,
            100.0,
            0.0,
            0.0,
            0.0,
            0.2,
            JumpParams {
                rate: 1.0,
                mean: 0.0,
                vol: 0.1,
            },
        )
        .unwrap();
        let e = price(&c, 1, &McConfig::default());
        assert_eq!((e.price, e.std_error), (10.0, 0.0));
    }
}
