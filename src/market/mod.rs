//! market/: dates, quotes, implied vol, calibration.

pub mod dates;
pub mod params;
