//! What the commands report: the three-engine cross-check ([`crosscheck`]),
//! exposures and full-revaluation scenarios ([`risk`]), the risk
//! report's CSV files and HTML page ([`risk_report`]), and a calibration's
//! parameters, residuals and HTML page ([`calibration_report`]), the daily
//! P&L explain ([`explain`]) and its page ([`explain_report`]); [`html`]
//! holds what the pages share.

pub mod calibration_report;
pub mod crosscheck;
pub mod explain;
pub mod explain_report;
pub mod html;
pub mod risk;
pub mod risk_report;
