//! saltus: European option books under the Merton (1976) jump-diffusion model.
//!
//! The library is organised by concept:
//! - [`model`]: the validated contract and jump parameters (the conventions);
//! - [`normal`], [`poisson`]: the special functions everything rests on;
//! - [`black_scholes`]: the Black-Scholes kernel;
//! - [`series`]: the closed-form Merton series with analytic Greeks;
//! - [`greeks`]: the price-and-sensitivities value type and its units;
//! - [`engine`]: the common engine interface; [`finite_diff`]: bump-and-reprice Greeks on any engine;
//! - [`fourier`]: an independent price from the characteristic function (Lewis);
//! - [`monte_carlo`]: exact-simulation Monte Carlo with importance sampling;
//! - [`crosscheck`]: the three-engine comparison behind model validation;
//! - [`risk`]: exposures and full-revaluation scenarios; [`report`]: CSV and HTML output;
//! - [`book`]: the CSV book schema, streaming reader and writer.
//!
//! ```
//! use saltus::model::{Contract, JumpParams, OptionKind};
//! let c = Contract::new(OptionKind::Put, 50.0, 40.0, 1.0, 0.02, 0.0, 0.25,
//!     JumpParams { rate: 0.3, mean: -0.2, vol: 0.15 }).unwrap();
//! let r = saltus::series::price(&c).unwrap();
//! assert!(r.greeks.price > saltus::black_scholes::price(OptionKind::Put, 50.0, 40.0, 1.0, 0.02, 0.0, 0.25));
//! ```
#![deny(unsafe_code)] // one audited exception: the AVX2 entry point in `series::lanes`
#![deny(missing_docs)]

pub mod black_scholes;
pub mod book;
pub mod crosscheck;
pub mod engine;
pub mod finite_diff;
pub mod fourier;
pub mod greeks;
pub mod model;
pub mod monte_carlo;
#[rustfmt::skip]
mod mills_table;
pub mod normal;
pub mod poisson;
pub mod report;
pub mod risk;
pub mod series;
#[cfg(test)]
mod test_rng;
