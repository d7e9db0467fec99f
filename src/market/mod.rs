//! The market side: calendar dates ([`dates`]), fitted parameter sets read
//! for `--params` ([`params`]), the quotes file ([`quotes`]), Black-Scholes
//! implied volatility ([`implied_vol`]) and the Merton calibration with its
//! diagnostics ([`calibrate`], [`diagnostics`], solved by [`lm`]).

pub mod calibrate;
pub mod dates;
pub mod diagnostics;
pub mod implied_vol;
pub mod lm;
pub mod params;
pub mod quotes;
