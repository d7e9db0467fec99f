//! The pricing engines and their common interface, so that bump-and-reprice
//! Greeks and cross-checks work with any of them: [`series`] (the closed
//! form), [`fourier`] and [`monte_carlo`] (the independent engines).

pub mod fourier;
pub mod mc_measure;
pub mod monte_carlo;
pub mod pide;
pub mod series;

use crate::model::Contract;
use monte_carlo::McConfig;

/// A price with the engine's own error measure.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Priced {
    /// Price.
    pub price: f64,
    /// Error measure in price units: the truncation bound (series), the
    /// quadrature error estimate (Fourier) or the standard error (Monte Carlo).
    pub error: f64,
}

/// Anything that prices a validated contract.
pub trait PricingEngine: Sync {
    /// Short name (`series`, `fourier`, `mc`).
    fn name(&self) -> &'static str;
    /// Prices one contract.
    ///
    /// # Errors
    /// A message when the engine cannot price the contract.
    fn price(&self, c: &Contract) -> Result<Priced, String>;
    /// True when prices carry sampling noise (bumps must use common random numbers).
    fn is_stochastic(&self) -> bool {
        false
    }
}

/// The closed-form series.
#[derive(Debug, Clone, Copy, Default)]
pub struct SeriesEngine;

impl PricingEngine for SeriesEngine {
    fn name(&self) -> &'static str {
        "series"
    }
    fn price(&self, c: &Contract) -> Result<Priced, String> {
        let r = series::price(c).map_err(|e| e.to_string())?;
        Ok(Priced {
            price: r.greeks.price,
            error: r.truncation_bound,
        })
    }
}

/// The Fourier (Lewis) engine.
#[derive(Debug, Clone, Copy, Default)]
pub struct FourierEngine;

impl PricingEngine for FourierEngine {
    fn name(&self) -> &'static str {
        "fourier"
    }
    fn price(&self, c: &Contract) -> Result<Priced, String> {
        let r = fourier::price(c).map_err(|e| e.to_string())?;
        Ok(Priced {
            price: r.price,
            error: r.error_estimate,
        })
    }
}

/// The Monte Carlo engine with a fixed stream key. Pricing several bumped
/// contracts with the same engine value uses common random numbers.
#[derive(Debug, Clone)]
pub struct MonteCarloEngine {
    /// Settings (set `sampling_count_mean` for smooth bumps of lambda and T).
    pub config: McConfig,
    /// Stream key ([`monte_carlo::stream_key`]).
    pub key: u64,
}

impl PricingEngine for MonteCarloEngine {
    fn name(&self) -> &'static str {
        "mc"
    }
    fn price(&self, c: &Contract) -> Result<Priced, String> {
        let r = monte_carlo::price(c, self.key, &self.config);
        Ok(Priced {
            price: r.price,
            error: r.std_error,
        })
    }
    fn is_stochastic(&self) -> bool {
        true
    }
}
