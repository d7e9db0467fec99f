//! saltus: European option books under the Merton (1976) jump-diffusion model.
//!
//! The library is organised by concept:
//! - [`model`]: the validated contract and jump parameters (the conventions);
//! - [`normal`], [`poisson`]: the special functions everything rests on;
//! - [`black_scholes`]: the Black-Scholes kernel, and [`normalised_black`]
//!   (Jäckel's normalised Black function, accurate in every region);
//! - [`engines`]: the common engine interface and the engines behind it:
//!   [`engines::series`] (the closed-form Merton series with analytic Greeks),
//!   [`engines::fourier`] (Lewis characteristic-function price) and
//!   [`engines::monte_carlo`] (exact simulation with importance sampling);
//! - [`greeks`]: the price-and-sensitivities value type and its units, and
//!   [`greeks::finite_diff`] (bump-and-reprice Greeks on any engine);
//! - [`reports`]: the three-engine cross-check behind model validation
//!   ([`reports::crosscheck`]), exposures and scenarios ([`reports::risk`])
//!   and the risk report's CSV and HTML files ([`reports::risk_report`]);
//! - [`book`]: the CSV book schema, streaming reader and writer;
//! - [`market`]: calendar dates, fitted parameter sets, quotes, implied
//!   volatility ([`market::implied_vol`]) and calibration.
//!
//! ```
//! use saltus::model::{Contract, JumpParams, OptionKind};
//! let c = Contract::new(OptionKind::Put, 50.0, 40.0, 1.0, 0.02, 0.0, 0.25,
//!     JumpParams { rate: 0.3, mean: -0.2, vol: 0.15 }).unwrap();
//! let r = saltus::engines::series::price(&c).unwrap();
//! assert!(r.greeks.price > saltus::black_scholes::price(OptionKind::Put, 50.0, 40.0, 1.0, 0.02, 0.0, 0.25));
//! ```
#![deny(unsafe_code)] // one audited exception: the AVX2 entry point in `engines::series::lanes`
#![deny(missing_docs)]

pub mod black_scholes;
pub mod book;
pub mod engines;
pub mod greeks;
pub mod market;
pub mod model;
#[rustfmt::skip]
mod mills_table;
pub mod normal;
pub mod normalised_black;
pub mod poisson;
pub mod reports;
#[cfg(test)]
mod test_rng;
