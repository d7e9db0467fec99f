//! The market side: calendar dates, quotes, Black-Scholes implied
//! volatility and the calibration of the Merton parameters to quotes.

pub mod dates;
pub mod implied_vol;
pub mod params;
