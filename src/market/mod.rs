//! From market quotes to model parameters: the quotes file ([`quotes`]),
//! Black-Scholes implied volatility ([`implied_vol`]) and the Merton
//! calibration with its diagnostics ([`calibrate`], solved by [`lm`]).

pub mod calibrate;
pub mod diagnostics;
pub mod implied_vol;
pub mod lm;
pub mod quotes;
