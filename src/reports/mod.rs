//! What the commands report: the three-engine cross-check ([`crosscheck`]),
//! exposures and full-revaluation scenarios ([`risk`]), and the risk
//! report's CSV files and HTML page ([`risk_report`]).

pub mod crosscheck;
pub mod risk;
pub mod risk_report;
