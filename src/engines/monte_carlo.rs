//! Monte Carlo engine: exact simulation of the terminal price, with
//! antithetic variates, a control variate and importance sampling for rare
//! events (the out-of-the-money side converted by put-call parity, Esscher
//! tilts of `ln S_T`, the share-measure form, jump-count tilts), one picked
//! per row by a pilot run ([`price`], rule in `pick`). Shares no code with
//! the series engine.
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
//! # Rare events (issue 10)
//! The Esscher tilt and its saddle point live in
//! [`crate::engines::mc_measure`]; here a `Simulation` draws one payoff
//! (`Vanilla`, or `Min` = `e^{-rT} min(S_T, K)` for the share-measure form)
//! under one sampling law (`Law`: tilt, mean jump count, jump-mean shift),
//! and a `Plan` turns its estimate into the price of a call or a put, which
//! parity converts to the row. Tilted laws keep the weight in log form
//! (`lw_n - theta b` per path, one extra `exp`), and a term `w f` is taken as
//! 0 off the paying region, where a tilted weight may overflow. The pick
//! rule, the Chernoff bound that skips negligible wings and the exact
//! lattice rows are described in docs/engines.md.
//!
//! # Reproducibility
//! Work is cut into blocks of [`BLOCK_PAIRS`] antithetic pairs. Block `i`
//! of a row draws from `ChaCha8Rng` seeded by the row's stream key (from the
//! seed and the row id, [`stream_key`]) with `set_stream(i)`. Block results
//! are merged in block order, so the digits do not depend on the number of
//! threads, on the order of the book or on how it is split.

use crate::engines::mc_measure::{Cumulant, MAX_TILTED_COUNT_MEAN};
use crate::model::{Contract, OptionKind};
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
/// An out-of-the-money value whose Chernoff bound is below this fraction of
/// spot is set to 0 without simulation (the cross-check's absolute floor is
/// 1e-12 of spot, a thousand times more).
pub const NEGLIGIBLE: f64 = 1e-15;
/// Stream reserved for the pilot run that chooses the intensity multiplier.
const PILOT_STREAM: u64 = u64::MAX;
/// Stream reserved for the pilot runs of the tilted estimators.
const TILT_PILOT_STREAM: u64 = u64::MAX - 1;
/// Most pairs in a pilot run ([`pilot_pairs`]).
const PILOT_PAIRS: u64 = 16_384;
/// A row is ordinary when its untilted pilot sees at least this share of
/// its paths on each side of the strike (no tilt is then tried).
const ORDINARY_SHARE: f64 = 0.05;
/// Smallest effective sample size of the weighted payoffs for an error bar
/// to be trusted (the cross-check's `MIN_MC_ESS`; common practice).
pub const MIN_ESS: f64 = 1000.0;
/// A pilot needs at least this effective sample size of its terms for its variance
/// estimate to be trusted by the pick rule.
const PILOT_MIN_ESS: f64 = 50.0;
/// The untilted estimator wins when its pilot variance per path is at most
/// this multiple of the best tilted one's (it is cheaper per path).
const PLAIN_PREFERENCE: f64 = 1.25;
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
///
/// `parity: true` means the out-of-the-money side was simulated and the
/// row's price is that estimate plus the forward intrinsic value
/// `S e^{-qT} - K e^{-rT}` (call minus put), with the same standard error.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[non_exhaustive]
pub enum McMethod {
    /// No simulation: the payoff at `T = 0`, or an out-of-the-money side
    /// that cannot pay (a lattice law whose support ends before the strike).
    Exact,
    /// Plain sampling of the jump count (intensity multiplier 1, no shift).
    Plain {
        /// Converted from the other side by put-call parity.
        parity: bool,
    },
    /// Importance sampling of the jump count (and, optionally, of the jump-size mean).
    JumpCount {
        /// Converted from the other side by put-call parity.
        parity: bool,
    },
    /// Esscher tilt of `ln S_T` at the saddle point.
    Esscher {
        /// Converted from the other side by put-call parity.
        parity: bool,
    },
    /// Esscher tilt followed by a jump-count tilt.
    EsscherJumpCount {
        /// Converted from the other side by put-call parity.
        parity: bool,
    },
    /// Share-measure form: `P^S(S_T < K)` and `P(S_T > K)` on their rare
    /// sides, from paths drawn under the Esscher tilt between `P` and `P^S`
    /// that puts the mean of `ln S_T` at `ln K`.
    ShareMeasure {
        /// Converted from the other side by put-call parity.
        parity: bool,
    },
    /// No simulation: a rigorous Chernoff bound shows the out-of-the-money
    /// value below [`NEGLIGIBLE`] times spot; it is set to 0 with the bound
    /// as its standard error.
    Bound {
        /// Converted from the other side by put-call parity.
        parity: bool,
    },
}

impl McMethod {
    /// The name written in reports (`+parity` when converted).
    pub fn as_str(self) -> &'static str {
        match self {
            McMethod::Exact => "exact",
            McMethod::Plain { parity: false } => "plain",
            McMethod::Plain { parity: true } => "plain+parity",
            McMethod::JumpCount { parity: false } => "jump-count",
            McMethod::JumpCount { parity: true } => "jump-count+parity",
            McMethod::Esscher { parity: false } => "esscher",
            McMethod::Esscher { parity: true } => "esscher+parity",
            McMethod::EsscherJumpCount { parity: false } => "esscher+jump-count",
            McMethod::EsscherJumpCount { parity: true } => "esscher+jump-count+parity",
            McMethod::ShareMeasure { parity: false } => "share-measure",
            McMethod::ShareMeasure { parity: true } => "share-measure+parity",
            McMethod::Bound { parity: false } => "chernoff-bound",
            McMethod::Bound { parity: true } => "chernoff-bound+parity",
        }
    }

    fn with_parity(self, p: bool) -> McMethod {
        match self {
            McMethod::Exact => McMethod::Exact,
            McMethod::Plain { .. } => McMethod::Plain { parity: p },
            McMethod::JumpCount { .. } => McMethod::JumpCount { parity: p },
            McMethod::Esscher { .. } => McMethod::Esscher { parity: p },
            McMethod::EsscherJumpCount { .. } => McMethod::EsscherJumpCount { parity: p },
            McMethod::ShareMeasure { .. } => McMethod::ShareMeasure { parity: p },
            McMethod::Bound { .. } => McMethod::Bound { parity: p },
        }
    }
}

/// How [`price_with`] chooses its estimator.
#[derive(Debug, Clone, Copy, PartialEq)]
#[non_exhaustive]
pub enum MethodChoice {
    /// The documented pick rule (module doc), from a pilot run.
    Auto,
    /// Plain or jump-count sampling of the out-of-the-money side (intensity
    /// from [`McConfig::intensity`]), converted by parity.
    JumpCount,
    /// Esscher tilt at the vanilla saddle point, then the jump-count factor
    /// `gamma` (1: none), on the out-of-the-money side.
    Esscher {
        /// Jump-count factor on top of the tilted intensity.
        gamma: f64,
    },
    /// Share-measure form (falls back to [`MethodChoice::JumpCount`] when
    /// the tilt that puts the mean of `ln S_T` at `ln K` is outside `(0, 1)`).
    ShareMeasure,
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
    /// Paths simulated (each antithetic pair counts as two; both
    /// simulations of the share-measure form).
    pub paths: u64,
    /// Wall time, seconds (pilot included).
    pub seconds: f64,
    /// Jump-count intensity multiplier used (on top of any Esscher tilt).
    pub gamma: f64,
    /// Esscher tilt used (0: none; the share-measure form reports its
    /// first simulation's).
    pub theta: f64,
    /// Control-variate coefficient used (0 without control variate).
    pub beta: f64,
    /// Variance-reduction factor: per-path variance of plain sampling of the
    /// simulated payoff (no antithetics, no control, no change of measure,
    /// estimated from the same paths) divided by `paths * std_error^2`.
    pub variance_reduction: f64,
    /// Effective sample size of the estimator's terms, `(sum w f)^2 / sum (w f)^2`
    /// over the simulated paths (`w` the likelihood weight, `f` the payoff):
    /// about the number of paying paths when they weigh alike, small when a
    /// few heavily weighted paths carry the estimate. For the share-measure
    /// form, the smaller of its two simulations'.
    pub ess: f64,
    /// Paths that paid (non-zero payoff), counted under the sampling law
    /// before weighting; for the share-measure form the smaller count.
    pub hits: u64,
    /// Paths on the other side of the strike (simulated paths minus
    /// [`McEstimate::hits`]; the smaller count for the share-measure form).
    /// Both sides must be seen: a sample that never leaves the paying side
    /// cannot show the variance that the other side's rare paths carry.
    pub misses: u64,
    /// Martingale test: `(mean of w e^{-rT} S_T - S e^{-qT}) / its standard error`
    /// for the untilted estimators (0 for the tilted ones, which do not use
    /// that control). Far from 0 (beyond 5) the sample misses the paths that
    /// carry the forward (extremely heavy tails) and the control variate is
    /// then not applied.
    pub martingale_z: f64,
    /// True when every term `w f` of the estimator is bounded by
    /// construction (an out-of-the-money put without a weight that grows in
    /// the jump count, or a tilt on the side that bounds the weighted
    /// payoff): the sample variance is then an honest error bar once the
    /// paying paths are plentiful, whatever the tails of `S_T`.
    pub bounded: bool,
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
    /// Sum over paths of w f^2 (plain-variance diagnostic).
    sum_wf2: f64,
    /// Sums over paths of the terms w f and of their squares (ESS).
    sum_t: f64,
    sum_t2: f64,
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
            sum_t: self.sum_t + o.sum_t,
            sum_t2: self.sum_t2 + o.sum_t2,
            paths: self.paths + o.paths,
            hits: self.hits + o.hits,
        }
    }

    /// Effective sample size of the terms (every term zero: all alike).
    fn ess(&self) -> f64 {
        if self.sum_t2 > 0.0 {
            self.sum_t * self.sum_t / self.sum_t2
        } else {
            self.paths
        }
    }
}

/// What a simulation estimates: the option itself on its paying region
/// `sign (S_T - K) > 0`, or `e^{-rT} min(S_T, K)`, the payoff of the
/// share-measure form `C = S e^{-qT} - E[e^{-rT} min(S_T, K)]`, which is
/// `S e^{-qT} P^S(S_T > K) - K e^{-rT} P(S_T > K)` with both probabilities
/// taken on their rare side (`P^S(S_T < K)` and `P(S_T > K)`).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Piece {
    Vanilla,
    Min,
}

/// A sampling law: Esscher tilt `theta`, mean jump count `count_mean` of
/// the sampling law, shift of the jump-size mean (untilted laws only).
#[derive(Debug, Clone, Copy, PartialEq)]
struct Law {
    theta: f64,
    count_mean: f64,
    shift: f64,
    /// Tilt the Brownian part only (a drift change, Girsanov), leaving the
    /// jump law to `count_mean`.
    diffusion_only: bool,
}

/// Everything needed to simulate one payoff piece under one sampling law.
struct Simulation {
    sampler: MertonSampler,
    log_spot: f64,
    strike: f64,
    sign: f64,
    piece: Piece,
    /// `e^{-rT}`.
    discount: f64,
    /// Esscher tilt (0: the untilted weight below) of the Brownian part, and
    /// of the jump sizes (`theta`, or 0 for a diffusion-only tilt).
    theta: f64,
    jump_theta: f64,
    /// Untilted: likelihood weight per jump count,
    /// (lambda/lambda~)^n exp((lambda~-lambda)T). Tilted: log weight per
    /// jump count at b = 0 (`lw0 + n lw_slope`).
    weight_table: Vec<f64>,
    log_ratio: f64,
    weight_const: f64,
    lw0: f64,
    lw_slope: f64,
    /// Normal likelihood-ratio coefficients for a shifted jump mean.
    shift: Option<(f64, f64)>,
    antithetic: bool,
    /// exp(ln S + drift + n mu~) for small jump counts.
    exp_a: Vec<f64>,
    /// Discount factor of the control `e^{-rT} w S_T` (untilted laws only).
    cv_discount: Option<f64>,
    control_mean: f64,
    bounded: bool,
}

impl Simulation {
    /// `sign`: `+1` simulates the call side, `-1` the put side.
    fn new(c: &Contract, sign: f64, piece: Piece, law: Law, antithetic: bool) -> Self {
        let t = c.expiry;
        let cum = Cumulant::new(c);
        let th = law.theta;
        let jump_theta = if law.diffusion_only { 0.0 } else { th };
        let count_mean = law.count_mean;
        let lam_t = if jump_theta == 0.0 {
            c.jump_intensity()
        } else {
            cum.tilted_rate(th) * t
        };
        let mu_s = c.jumps.mean + jump_theta * cum.jump_var + law.shift;
        // Weight of n jumps: (lambda T / M)^n exp(M - lambda T).
        let (log_ratio, weight_const) = if count_mean == 0.0 {
            (0.0, 0.0)
        } else if lam_t == 0.0 {
            (f64::NEG_INFINITY, count_mean)
        } else {
            ((lam_t / count_mean).ln(), count_mean - lam_t)
        };
        let lam_s = if t > 0.0 { count_mean / t } else { 0.0 };
        let shift = if law.shift != 0.0 && c.jumps.vol > 0.0 {
            let d2 = c.jumps.vol * c.jumps.vol;
            Some((
                (c.jumps.mean - mu_s) / d2,
                (c.jumps.mean.powi(2) - mu_s * mu_s) / (2.0 * d2),
            ))
        } else {
            None
        };
        let mut sampler = MertonSampler::new(c, t, lam_s, mu_s);
        if th != 0.0 {
            sampler.drift_dt += th * cum.var * t;
        }
        // Log weight at b = 0: full tilt -theta X + T psi(theta), diffusion
        // tilt -theta D + theta^2 sigma^2 T / 2 with D = theta sigma^2 T + sigma W.
        let (lw0, lw_slope) = if law.diffusion_only {
            (-0.5 * th * th * cum.var * t + weight_const, log_ratio)
        } else {
            (
                -th * sampler.drift_dt + t * cum.psi(th) + weight_const,
                log_ratio - th * mu_s,
            )
        };
        let weight_table = (0..TABLE_N)
            .map(|n| {
                let nf = n as f64;
                let jumps_part = if n == 0 { 0.0 } else { nf * log_ratio };
                if th == 0.0 {
                    (jumps_part + weight_const).exp()
                } else if n == 0 {
                    lw0
                } else {
                    lw0 + nf * lw_slope
                }
            })
            .collect();
        let exp_a = (0..TABLE_N)
            .map(|n| (c.spot.ln() + sampler.drift_dt + n as f64 * mu_s).exp())
            .collect();
        let discount = (-c.rate * t).exp();
        // The weighted payoff is bounded when the weight's exponent
        // -theta X does not outgrow the payoff (e^X on the call side, 1 on
        // the put side; both for min(S_T, K)) and the jump-count factor does
        // not grow with N.
        let count_bounded = count_mean == 0.0 || lam_t == 0.0 || count_mean >= lam_t;
        let bounded = shift.is_none()
            && !law.diffusion_only
            && count_bounded
            && match piece {
                Piece::Vanilla if sign > 0.0 => th >= 1.0,
                Piece::Vanilla => th <= 0.0,
                Piece::Min => (0.0..=1.0).contains(&th),
            };
        Simulation {
            exp_a,
            sampler,
            log_spot: c.spot.ln(),
            strike: c.strike,
            sign,
            piece,
            discount,
            theta: th,
            jump_theta,
            weight_table,
            log_ratio,
            weight_const,
            lw0,
            lw_slope,
            shift,
            antithetic,
            cv_discount: (jump_theta == 0.0).then_some(discount),
            control_mean: if jump_theta == 0.0 {
                c.spot * (-c.div_yield * t).exp()
            } else {
                0.0
            },
            bounded,
        }
    }

    /// Untilted likelihood weight of a path with `n` jumps summing to `jumps`.
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

    /// Tilted log weight at `b = 0` for `n` jumps.
    #[inline]
    fn log_weight(&self, n: u64) -> f64 {
        if (n as usize) < TABLE_N {
            self.weight_table[n as usize]
        } else {
            self.lw0 + n as f64 * self.lw_slope
        }
    }

    /// Payoff of the piece at terminal price `st` (0 off the paying region).
    #[inline]
    fn payoff(&self, st: f64) -> f64 {
        // (Branch-free for the vanilla payoff: the paying side is a coin
        // flip near the money, and a mispredicted branch costs more than
        // the max.)
        if self.piece == Piece::Min {
            self.discount * st.min(self.strike)
        } else {
            self.discount * (self.sign * (st - self.strike)).max(0.0)
        }
    }

    /// True when the priced option pays on this path: a non-zero payoff,
    /// or for `min(S_T, K)` (which prices the call) `S_T > K`.
    #[inline]
    fn paid(&self, st: f64, f: f64) -> bool {
        if self.piece == Piece::Min {
            st > self.strike
        } else {
            f != 0.0
        }
    }

    /// Simulates `pairs` samples (antithetic pairs or single paths) from `rng`.
    fn run_block<R: Rng>(&self, rng: &mut R, pairs: u64) -> Moments {
        if self.theta != 0.0 {
            self.run_block_impl::<true, R>(rng, pairs)
        } else {
            self.run_block_impl::<false, R>(rng, pairs)
        }
    }

    /// The loop, compiled once for tilted (log weights, terms guarded
    /// against an overflowing weight off the paying region) and once for
    /// untilted laws.
    #[inline(always)]
    fn run_block_impl<const TILTED: bool, R: Rng>(&self, rng: &mut R, pairs: u64) -> Moments {
        let mut m = Moments::default();
        // Shift references: the first sample of the block.
        let (mut kx, mut kc) = (f64::NAN, f64::NAN);
        let (mut sx, mut sc, mut sxx, mut scc, mut sxc) = (0.0, 0.0, 0.0, 0.0, 0.0);
        let (mut sum_wf2, mut sum_t, mut sum_t2, mut hits) = (0.0, 0.0, 0.0, 0u64);
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
            let jump_noise = if n > 0 {
                self.sampler.sqrt_of(n) * self.sampler.jump_vol * z2
            } else {
                0.0
            };
            let diffusion = self.sampler.sigma_sqrt_dt * z1;
            let b = diffusion + jump_noise;
            let ea = if (n as usize) < TABLE_N {
                self.exp_a[n as usize]
            } else {
                (self.log_spot + self.sampler.drift_dt + nf * self.sampler.sample_mean).exp()
            };
            let eb = b.exp();
            let st = ea * eb;
            let jump_mean_part = nf * self.sampler.sample_mean;
            let j = jump_mean_part + jump_noise;
            let (w, w_2) = if TILTED {
                let lw = self.log_weight(n);
                let tb = self.theta * diffusion + self.jump_theta * jump_noise;
                ((lw - tb).exp(), (lw + tb).exp())
            } else {
                let w = self.weight(n, j);
                let w_2 = if self.shift.is_some() {
                    self.weight(n, 2.0 * jump_mean_part - j)
                } else {
                    w
                };
                (w, w_2)
            };
            let f = self.payoff(st);
            // Terms w f, zero off the paying region (where a tilted weight
            // may overflow).
            let t1 = term::<TILTED>(w, f);
            let (x, cv) = if self.antithetic {
                let st2 = ea / eb;
                let f2 = self.payoff(st2);
                let t2 = term::<TILTED>(w_2, f2);
                sum_wf2 += t1 * f + t2 * f2;
                sum_t += t1 + t2;
                sum_t2 += t1 * t1 + t2 * t2;
                hits += self.paid(st, f) as u64 + self.paid(st2, f2) as u64;
                let cv = match self.cv_discount {
                    Some(d) => 0.5 * d * (w * st + w_2 * st2),
                    None => 0.0,
                };
                (0.5 * (t1 + t2), cv)
            } else {
                sum_wf2 += t1 * f;
                sum_t += t1;
                sum_t2 += t1 * t1;
                hits += self.paid(st, f) as u64;
                let cv = match self.cv_discount {
                    Some(d) => d * w * st,
                    None => 0.0,
                };
                (t1, cv)
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
        }
        let n = pairs as f64;
        m.n = n;
        m.paths = if self.antithetic { 2.0 * n } else { n };
        m.mean_x = kx + sx / n;
        m.mean_c = kc + sc / n;
        m.m2_x = sxx - sx * sx / n;
        m.m2_c = scc - sc * sc / n;
        m.c_xc = sxc - sx * sc / n;
        m.sum_wf2 = sum_wf2;
        m.sum_t = sum_t;
        m.sum_t2 = sum_t2;
        m.hits = hits;
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

    /// One pilot block on the reserved `stream`.
    fn pilot(&self, key: u64, stream: u64, pairs: u64) -> Moments {
        let mut rng = ChaCha8Rng::seed_from_u64(key);
        rng.set_stream(stream);
        self.run_block(&mut rng, pairs)
    }
}

/// The term `w f`: 0 where `f = 0` under a tilted law (whose weight may
/// overflow there); a plain product otherwise.
#[inline(always)]
fn term<const TILTED: bool>(w: f64, f: f64) -> f64 {
    if TILTED && f == 0.0 {
        0.0
    } else {
        w * f
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

/// The stream key of simulation `i` of a row (the share-measure form runs
/// two independent simulations; the first uses the row's key itself).
fn piece_key(key: u64, i: usize) -> u64 {
    if i == 0 {
        key
    } else {
        splitmix64(key ^ 0x7368_6172_652d_6d65_u64.wrapping_add(i as u64))
    }
}

/// An estimator: simulations whose estimates, times their coefficient,
/// plus a constant, price the option of sign `kind` (`+1` call, `-1` put).
struct Plan {
    method: McMethod,
    gamma: f64,
    kind: f64,
    constant: f64,
    sims: Vec<Simulation>,
}

impl Plan {
    /// Contribution of each simulation's estimate to the price.
    fn coefficient(&self, i: usize) -> f64 {
        match self.sims[i].piece {
            Piece::Vanilla => 1.0,
            Piece::Min => -1.0,
        }
    }

    /// Price, standard error, control coefficient and the diagnostics.
    fn combine(&self, ms: &[Moments], use_cv: bool) -> Combined {
        let mut out = Combined {
            price: self.constant,
            var: 0.0,
            beta: 0.0,
            martingale_z: 0.0,
            hits: u64::MAX,
            misses: u64::MAX,
            all_zero: false,
            ess: f64::INFINITY,
            paths: 0.0,
            plain_second_moment: 0.0,
            plain_mean: 0.0,
        };
        for (i, (s, m)) in self.sims.iter().zip(ms).enumerate() {
            let (p, se, beta) = estimate(m, s.control_mean, use_cv && s.cv_discount.is_some());
            out.price += self.coefficient(i) * p;
            out.var += se * se;
            if i == 0 {
                out.beta = beta;
                out.martingale_z = if s.cv_discount.is_some() {
                    martingale_z(m, s.control_mean)
                } else {
                    0.0
                };
            }
            out.hits = out.hits.min(m.hits);
            out.all_zero |= m.sum_t == 0.0;
            out.misses = out.misses.min(m.paths as u64 - m.hits);
            out.ess = out.ess.min(m.ess());
            out.paths += m.paths;
            // E_P[f^2] of the simulated payoff.
            out.plain_second_moment += m.sum_wf2 / m.paths;
            out.plain_mean += p;
        }
        out
    }
}

struct Combined {
    price: f64,
    var: f64,
    beta: f64,
    martingale_z: f64,
    hits: u64,
    misses: u64,
    /// Some simulation's terms are all zero.
    all_zero: bool,
    ess: f64,
    paths: f64,
    plain_second_moment: f64,
    plain_mean: f64,
}

/// Smallest effective sample size a pilot of `pilot_paths` must show: the
/// main run should reach twice [`MIN_ESS`] at the same rate, and never
/// below [`PILOT_MIN_ESS`].
fn pilot_min_ess(cfg: &McConfig, pilot_paths: f64) -> f64 {
    match cfg.work {
        Work::Paths(p) => (2.0 * MIN_ESS * pilot_paths / p as f64).max(PILOT_MIN_ESS),
        _ => PILOT_MIN_ESS,
    }
}

/// Pairs in a pilot run: a 64th of the paths asked for, between 1,024 and
/// 16,384 pairs (16,384 for the target-standard-error modes).
fn pilot_pairs(cfg: &McConfig) -> u64 {
    match cfg.work {
        Work::Paths(p) => (p / 64).clamp(1024, PILOT_PAIRS),
        _ => PILOT_PAIRS,
    }
}

/// Prices one contract by Monte Carlo with the documented pick rule.
///
/// `key` is the row's stream key ([`stream_key`]). For `T = 0` the payoff is
/// returned exactly with zero error.
pub fn price(c: &Contract, key: u64, cfg: &McConfig) -> McEstimate {
    price_with(c, key, cfg, MethodChoice::Auto)
}

/// `S e^{-qT} - K e^{-rT}`: call minus put (put-call parity).
pub fn forward_intrinsic(c: &Contract) -> f64 {
    c.spot * (-c.div_yield * c.expiry).exp() - c.strike * (-c.rate * c.expiry).exp()
}

/// True when the paying region of the `sign` side has probability zero:
/// a lattice law (`sigma = delta = 0`) whose support `mT + N mu_J` ends at
/// `mT` on the strike's side (or no jumps at all).
fn region_impossible(c: &Contract, sign: f64) -> bool {
    if c.vol != 0.0 || c.jumps.vol != 0.0 {
        return false;
    }
    let cum = Cumulant::new(c);
    let x0 = (c.strike / c.spot).ln();
    let edge = cum.drift * c.expiry;
    let jumps = c.jumps.rate > 0.0 && c.jumps.mean != 0.0;
    if sign > 0.0 {
        // sup X = mT unless jumps go up.
        !(jumps && c.jumps.mean > 0.0) && edge <= x0
    } else {
        !(jumps && c.jumps.mean < 0.0) && edge >= x0
    }
}

/// A rigorous upper bound on the value of the vanilla option `c` (Chernoff:
/// for any `theta` on the bounded side, `E[e^{-rT} g(X)] <= e^{-rT}
/// e^{T psi(theta)} sup_x g(x) e^{-theta x}`; with `g` the call payoff,
/// `sup = K/(theta-1) ((theta-1) S / (theta K))^theta`, `theta > 1`; the put
/// payoff, `sup = K/(1-theta) (-theta K / ((1-theta) S))^(-theta)`,
/// `theta < 0`), at the vanilla saddle point. `None` when no tilt is admissible.
pub fn chernoff_bound(c: &Contract) -> Option<f64> {
    let cum = Cumulant::new(c);
    let x0 = (c.strike / c.spot).ln();
    let call = c.kind.sign() > 0.0;
    let th = cum.theta_vanilla(x0, call)?;
    let ln_sup = if call {
        c.strike.ln() - (th - 1.0).ln() + th * ((th - 1.0) / th).ln() - th * x0
    } else {
        let u = -th;
        c.strike.ln() - (1.0 + u).ln() + u * (u / (1.0 + u)).ln() + u * x0
    };
    let ln_b = -c.rate * c.expiry + c.expiry * cum.psi(th) + ln_sup;
    Some(ln_b.exp()).filter(|b| b.is_finite())
}

/// Prices one contract by Monte Carlo with a given estimator choice.
pub fn price_with(c: &Contract, key: u64, cfg: &McConfig, choice: MethodChoice) -> McEstimate {
    let start = Instant::now();
    if c.expiry == 0.0 {
        let p = c.kind.payoff(c.spot, c.strike);
        return exact(p, start);
    }
    if let Some(count_mean) = cfg.sampling_count_mean {
        // Bump-and-reprice: the row's own side under a frozen jump-count
        // law, so bumped contracts share every draw (no parity switch).
        let lam_t = c.jump_intensity();
        let gamma = if lam_t > 0.0 { count_mean / lam_t } else { 1.0 };
        let law = Law {
            theta: 0.0,
            count_mean,
            shift: cfg.jump_mean_shift,
            diffusion_only: false,
        };
        let plain = gamma == 1.0 && cfg.jump_mean_shift == 0.0;
        let plan = Plan {
            method: if plain {
                McMethod::Plain { parity: false }
            } else {
                McMethod::JumpCount { parity: false }
            },
            gamma,
            kind: c.kind.sign(),
            constant: 0.0,
            sims: vec![Simulation::new(
                c,
                c.kind.sign(),
                Piece::Vanilla,
                law,
                cfg.antithetic,
            )],
        };
        return run_plan(&plan, key, cfg, 0.0, start);
    }
    // The out-of-the-money side with respect to the forward.
    let side = if c.strike > c.forward() { 1.0 } else { -1.0 };
    let otm = Contract {
        kind: if side > 0.0 {
            OptionKind::Call
        } else {
            OptionKind::Put
        },
        ..*c
    };
    let parity_shift = |s: f64| {
        if s != c.kind.sign() {
            c.kind.sign() * forward_intrinsic(c)
        } else {
            0.0
        }
    };
    // A side that cannot pay is worth exactly 0; the row by parity.
    for s in [side, -side] {
        if region_impossible(c, s) {
            let shift = if s != c.kind.sign() {
                c.kind.sign() * forward_intrinsic(c)
            } else {
                0.0
            };
            return exact(shift, start);
        }
    }
    // A side whose value a Chernoff bound puts below NEGLIGIBLE x spot.
    if let Some(bound) = chernoff_bound(&otm) {
        if bound <= NEGLIGIBLE * c.spot {
            let p = parity_shift(side);
            let mut e = exact(p, start);
            e.method = McMethod::Bound {
                parity: side != c.kind.sign(),
            };
            e.std_error = bound;
            e.ci95 = (p - 1.96 * bound, p + 1.96 * bound);
            return e;
        }
    }
    let mut plan = match choice {
        MethodChoice::Auto => pick(&otm, key, cfg),
        MethodChoice::JumpCount => jump_count_plan(&otm, choose_intensity(&otm, key, cfg), cfg),
        MethodChoice::Esscher { gamma } => esscher_plan(&otm, Tilt::Saddle, gamma, cfg)
            .unwrap_or_else(|| jump_count_plan(&otm, 1.0, cfg)),
        MethodChoice::ShareMeasure => {
            share_plan(&otm, cfg).unwrap_or_else(|| jump_count_plan(&otm, 1.0, cfg))
        }
    };
    // Put-call parity from the option the plan prices to the row's.
    let parity = plan.kind != c.kind.sign();
    let shift = if parity {
        c.kind.sign() * forward_intrinsic(c)
    } else {
        0.0
    };
    plan.method = plan.method.with_parity(parity);
    run_plan(&plan, key, cfg, shift, start)
}

fn exact(p: f64, start: Instant) -> McEstimate {
    McEstimate {
        method: McMethod::Exact,
        price: p,
        std_error: 0.0,
        ci95: (p, p),
        paths: 0,
        seconds: start.elapsed().as_secs_f64(),
        gamma: 1.0,
        theta: 0.0,
        beta: 0.0,
        variance_reduction: 1.0,
        ess: 0.0,
        hits: 0,
        misses: 0,
        martingale_z: 0.0,
        bounded: true,
    }
}

/// Runs a plan for the configured work and adds `shift` (the parity term).
fn run_plan(plan: &Plan, key: u64, cfg: &McConfig, shift: f64, start: Instant) -> McEstimate {
    let k = plan.sims.len() as u64;
    let paths_per_block = if cfg.antithetic {
        2 * BLOCK_PAIRS
    } else {
        BLOCK_PAIRS
    };
    let blocks_for = |paths: u64| paths.div_ceil(k).div_ceil(paths_per_block).max(1);
    let run = |ms: &mut Vec<Moments>, first: u64, count: u64| {
        for (i, (s, m)) in plan.sims.iter().zip(ms.iter_mut()).enumerate() {
            *m = m.merge(&s.run_blocks(piece_key(key, i), first, count));
        }
    };
    let mut ms = vec![Moments::default(); plan.sims.len()];
    match cfg.work {
        Work::Paths(p) => run(&mut ms, 0, blocks_for(p)),
        Work::AbsoluteSe(_) | Work::RelativeSe(_) => {
            let cap = blocks_for(cfg.max_paths);
            let mut done = 0u64;
            let mut next = 8.min(cap);
            loop {
                run(&mut ms, done, next - done);
                done = next;
                let r = plan.combine(&ms, cfg.control_variate);
                let se = r.var.sqrt();
                let target = match cfg.work {
                    Work::AbsoluteSe(x) => x,
                    Work::RelativeSe(x) => x * (r.price + shift).abs(),
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
    let r = plan.combine(&ms, cfg.control_variate);
    let p = r.price + shift;
    let se = r.var.sqrt();
    let plain_var = (r.plain_second_moment - r.plain_mean * r.plain_mean).max(0.0);
    let vrf = if se > 0.0 {
        plain_var / (r.paths * se * se)
    } else {
        f64::INFINITY
    };
    McEstimate {
        method: plan.method,
        price: p,
        std_error: se,
        ci95: (p - 1.96 * se, p + 1.96 * se),
        paths: r.paths as u64,
        seconds: start.elapsed().as_secs_f64(),
        gamma: plan.gamma,
        theta: plan.sims[0].theta,
        beta: r.beta,
        variance_reduction: vrf,
        ess: r.ess,
        hits: r.hits,
        misses: r.misses,
        martingale_z: r.martingale_z,
        bounded: plan.sims.iter().all(|s| s.bounded),
    }
}

/// The untilted estimator with intensity multiplier `gamma`.
fn jump_count_plan(c: &Contract, gamma: f64, cfg: &McConfig) -> Plan {
    let law = Law {
        theta: 0.0,
        count_mean: gamma * c.jump_intensity(),
        shift: cfg.jump_mean_shift,
        diffusion_only: false,
    };
    let plain = gamma == 1.0 && cfg.jump_mean_shift == 0.0;
    Plan {
        method: if plain {
            McMethod::Plain { parity: false }
        } else {
            McMethod::JumpCount { parity: false }
        },
        gamma,
        kind: c.kind.sign(),
        constant: 0.0,
        sims: vec![Simulation::new(
            c,
            c.kind.sign(),
            Piece::Vanilla,
            law,
            cfg.antithetic,
        )],
    }
}

/// Which Esscher tilt a vanilla simulation uses.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Tilt {
    /// The vanilla saddle point (tilted mean of `ln S_T` beyond `ln K`).
    Saddle,
    /// Tilted mean of `ln S_T` at `ln K`, kept on the bounded side.
    MeanAtStrike,
    /// A single jump (with the drift) lands at `ln K` on average:
    /// `theta = (x0 - mu_J - mT) / (delta^2 + sigma^2 T)`, and the mean jump
    /// count is raised to at least 1 by a jump-count factor. For wings
    /// reached by one unusual jump against the jumps' mean (an upward move
    /// on crash jumps), where the saddle point overshoots the jump size
    /// and leaves jumps rare.
    OneJump,
}

/// The Esscher estimator of the vanilla option `c` (its own side), or
/// `None` when no admissible tilt exists.
fn esscher_plan(c: &Contract, tilt: Tilt, gamma: f64, cfg: &McConfig) -> Option<Plan> {
    let cum = Cumulant::new(c);
    let x0 = (c.strike / c.spot).ln();
    let call = c.kind.sign() > 0.0;
    let mut gamma = gamma;
    let theta = match tilt {
        Tilt::Saddle => cum.theta_vanilla(x0, call)?,
        Tilt::OneJump => {
            let scale = cum.jump_var + cum.var * c.expiry;
            if scale <= 0.0 || c.jumps.rate == 0.0 {
                return None;
            }
            let t = (x0 - cum.mean - cum.drift * c.expiry) / scale;
            if (call && t < 1.0) || (!call && t > 0.0) || !cum.admissible(t) {
                return None;
            }
            // (A tilted law with many jumps is the saddle point's business:
            // this tilt assumes one jump carries the move.)
            let count = cum.tilted_rate(t) * c.expiry;
            if !(count > 0.0 && count <= 1.0) {
                return None;
            }
            gamma = (1.0 / count).max(1.0);
            t
        }
        Tilt::MeanAtStrike => {
            let t = cum.theta_mean_at(x0)?;
            if call {
                t.max(1.0)
            } else {
                t.min(0.0)
            }
        }
    };
    if theta == 0.0 || !cum.admissible(theta) {
        return None;
    }
    // The jump-count factor's weights must keep a moderate second moment
    // (as for the untilted pilot's candidates).
    let lam_theta_t = cum.tilted_rate(theta) * c.expiry;
    if gamma != 1.0 && lam_theta_t * (gamma - 1.0).powi(2) / gamma > MAX_LOG_WEIGHT_SECOND_MOMENT {
        return None;
    }
    let law = Law {
        theta,
        count_mean: (gamma * cum.tilted_rate(theta) * c.expiry).min(MAX_TILTED_COUNT_MEAN),
        shift: 0.0,
        diffusion_only: false,
    };
    Some(Plan {
        method: if gamma == 1.0 {
            McMethod::Esscher { parity: false }
        } else {
            McMethod::EsscherJumpCount { parity: false }
        },
        gamma,
        kind: c.kind.sign(),
        constant: 0.0,
        sims: vec![Simulation::new(
            c,
            c.kind.sign(),
            Piece::Vanilla,
            law,
            cfg.antithetic,
        )],
    })
}

/// The share-measure form, for a tilt `theta_m` (tilted mean of `ln S_T`
/// at `ln K`) strictly between 0 (the pricing measure) and 1 (the share
/// measure): then `P(S_T > K)` is rare under `P` and `P^S(S_T < K)` under
/// `P^S`, and `C = S e^{-qT} (1 - P^S(S_T < K)) - K e^{-rT} P(S_T > K)
/// = S e^{-qT} - E[e^{-rT} min(S_T, K)]`. Both probabilities are taken from
/// the same paths, drawn under `Q_{theta_m}`, whose weighted payoff
/// `w e^{-rT} min(S_T, K)` is bounded; the call is converted to the row by
/// parity. `None` when `theta_m` lies outside `(0, 1)` (one of the vanilla
/// tilts then covers the row) or is not admissible.
fn share_plan(c: &Contract, cfg: &McConfig) -> Option<Plan> {
    let cum = Cumulant::new(c);
    let x0 = (c.strike / c.spot).ln();
    let tm = cum.theta_mean_at(x0)?;
    if !(tm > 0.0 && tm < 1.0 && cum.admissible(tm)) {
        return None;
    }
    let law = Law {
        theta: tm,
        count_mean: cum.tilted_rate(tm) * c.expiry,
        shift: 0.0,
        diffusion_only: false,
    };
    Some(Plan {
        method: McMethod::ShareMeasure { parity: false },
        gamma: 1.0,
        kind: 1.0,
        constant: c.spot * (-c.div_yield * c.expiry).exp(),
        sims: vec![Simulation::new(c, 1.0, Piece::Min, law, cfg.antithetic)],
    })
}

/// What a pilot run says of a plan.
#[derive(Debug, Clone, Copy)]
struct PilotScore {
    /// Variance per path of the estimator.
    var: f64,
    hits: u64,
    misses: u64,
    ess: f64,
    trusted: bool,
}

fn score(plan: &Plan, key: u64, cfg: &McConfig, stream: u64, pairs: u64) -> PilotScore {
    let ms: Vec<Moments> = plan
        .sims
        .iter()
        .enumerate()
        .map(|(i, s)| s.pilot(piece_key(key, i), stream, pairs))
        .collect();
    let r = plan.combine(&ms, cfg.control_variate);
    let var = r.var * r.paths;
    let bounded = plan.sims.iter().all(|s| s.bounded);
    PilotScore {
        var,
        hits: r.hits,
        misses: r.misses,
        ess: r.ess,
        trusted: var.is_finite()
            && r.price.is_finite()
            && r.hits >= PILOT_MIN_HITS
            && r.misses >= PILOT_MIN_HITS
            // Paying paths whose weighted payoffs all underflow: the tilt
            // went where the value is not (a negligible value is caught by
            // the Chernoff bound before any pilot).
            && !r.all_zero
            && r.ess >= pilot_min_ess(cfg, r.paths)
            // A control that replicates every sampled payoff says nothing.
            && (r.beta == 0.0 || r.var.sqrt() > 1e-10 * r.price.abs())
            && (bounded || r.martingale_z.abs() <= 5.0),
    }
}

/// The pick rule (module doc). Candidates, all for the out-of-the-money
/// option `c` (with respect to the forward) or its parity partner:
/// the untilted estimator (jump-count factor from its own pilot); the
/// Esscher tilt at the vanilla saddle point (with jump-count factor 1 and
/// 2) and at the strike, on the side where the tilt `theta_m` that puts the
/// mean of `ln S_T` at `ln K` says the paying paths are rare under both `P`
/// and the share measure (call for `theta_m >= 1`, put for `theta_m <= 0`);
/// the share-measure form when `0 < theta_m < 1`; the one-jump tilt on
/// either side. Each runs a pilot on its
/// reserved stream; a pilot is trusted when at least [`PILOT_MIN_HITS`]
/// paths fell on each side of the strike, its terms' effective sample size
/// is at least [`PILOT_MIN_ESS`], a control did not replicate every payoff,
/// and an estimator that is not bounded by construction passed the
/// martingale test. Among the trusted the smallest variance per path wins,
/// the untilted estimator on a tie within [`PLAIN_PREFERENCE`]; when none is
/// trusted, the candidate with the largest effective sample size.
fn pick(c: &Contract, key: u64, cfg: &McConfig) -> Plan {
    let pairs = pilot_pairs(cfg);
    let gamma = choose_intensity_pairs(c, key, cfg, pairs);
    let base = jump_count_plan(c, gamma, cfg);
    if matches!(cfg.intensity, IntensityChoice::Fixed(_)) || cfg.jump_mean_shift != 0.0 {
        return base;
    }
    let base_score = score(&base, key, cfg, PILOT_STREAM, pairs);
    // An ordinary row: the untilted pilot is trusted and sees both sides of
    // the strike often; no tilt is tried (it would cost more pilot paths
    // than it saves).
    let share = |n: u64| n as f64 / (2 * pairs) as f64;
    if base_score.trusted
        && share(base_score.hits) >= ORDINARY_SHARE
        && share(base_score.misses) >= ORDINARY_SHARE
    {
        return base;
    }
    let cum = Cumulant::new(c);
    let x0 = (c.strike / c.spot).ln();
    let with_kind = |kind| Contract { kind, ..*c };
    let vanilla_side = match cum.theta_mean_at(x0) {
        Some(t) if t >= 1.0 => with_kind(OptionKind::Call),
        Some(t) if t <= 0.0 => with_kind(OptionKind::Put),
        _ => *c,
    };
    let mut tilted: Vec<Plan> = Vec::new();
    tilted.extend(esscher_plan(&vanilla_side, Tilt::Saddle, 1.0, cfg));
    if c.jump_intensity() > 0.0 {
        tilted.extend(esscher_plan(&vanilla_side, Tilt::Saddle, 2.0, cfg));
    }
    tilted.extend(esscher_plan(&vanilla_side, Tilt::MeanAtStrike, 1.0, cfg));
    tilted.extend(share_plan(c, cfg));
    if c.jump_intensity() > 0.0 {
        for side in [OptionKind::Call, OptionKind::Put] {
            tilted.extend(esscher_plan(&with_kind(side), Tilt::OneJump, 1.0, cfg));
        }
    }
    let scores: Vec<PilotScore> = tilted
        .iter()
        .map(|p| score(p, key, cfg, TILT_PILOT_STREAM, pairs))
        .collect();
    let best_tilted = scores
        .iter()
        .enumerate()
        .filter(|(_, s)| s.trusted)
        .min_by(|a, b| a.1.var.total_cmp(&b.1.var).then(a.0.cmp(&b.0)));
    match best_tilted {
        Some((i, s)) if !(base_score.trusted && base_score.var <= PLAIN_PREFERENCE * s.var) => {
            tilted.swap_remove(i)
        }
        Some(_) => base,
        None if base_score.trusted => base,
        None => {
            let most = scores
                .iter()
                .enumerate()
                .max_by(|a, b| a.1.ess.total_cmp(&b.1.ess).then(b.0.cmp(&a.0)));
            match most {
                Some((i, s)) if s.ess > base_score.ess && s.hits > base_score.hits => {
                    tilted.swap_remove(i)
                }
                _ => base,
            }
        }
    }
}

/// The intensity multiplier `gamma` that the untilted estimator would use
/// for this contract (its own side): the fixed one, 1 without jumps, or the
/// pilot run's choice.
pub fn choose_intensity(c: &Contract, key: u64, cfg: &McConfig) -> f64 {
    choose_intensity_pairs(c, key, cfg, pilot_pairs(cfg))
}

fn choose_intensity_pairs(c: &Contract, key: u64, cfg: &McConfig, pairs: u64) -> f64 {
    match cfg.intensity {
        IntensityChoice::Fixed(g) => g,
        IntensityChoice::Auto if c.jumps.rate == 0.0 => 1.0,
        IntensityChoice::Auto => choose_gamma(c, key, cfg, pairs),
    }
}

/// Pilot run: the intensity multiplier with the smallest estimated variance
/// per path among candidates whose pilot saw enough non-zero payoffs and
/// whose weights have a moderate second moment
/// ([`MAX_LOG_WEIGHT_SECOND_MOMENT`]). All candidates use the same random
/// numbers (common random numbers). `gamma = 1` is always admissible.
fn choose_gamma(c: &Contract, key: u64, cfg: &McConfig, pairs: u64) -> f64 {
    let control_mean = c.spot * (-c.div_yield * c.expiry).exp();
    let mut best = (f64::INFINITY, 1.0);
    let mut most_hits = (0u64, 1.0);
    let lam_t = c.jump_intensity();
    for &g in &GAMMA_CANDIDATES {
        if lam_t * (g - 1.0).powi(2) / g > MAX_LOG_WEIGHT_SECOND_MOMENT {
            continue;
        }
        let law = Law {
            theta: 0.0,
            count_mean: g * lam_t,
            shift: cfg.jump_mean_shift,
            diffusion_only: false,
        };
        let sim = Simulation::new(c, c.kind.sign(), Piece::Vanilla, law, cfg.antithetic);
        let m = sim.pilot(key, PILOT_STREAM, pairs);
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
