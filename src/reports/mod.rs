//! What the commands report: the three-engine cross-check ([`crosscheck`]),
//! its bounded book-level summary ([`crosscheck_summary`]) and validation
//! page ([`crosscheck_report`]),
//! exposures and full-revaluation scenarios ([`risk`]), the risk
//! report's CSV files and HTML page ([`risk_report`]), and a calibration's
//! parameters, residuals and HTML page ([`calibration_report`]); [`html`]
//! holds what the two pages share.

pub mod calibration_report;
pub mod crosscheck;
pub mod crosscheck_report;
pub mod crosscheck_summary;
pub mod html;
pub mod risk;
pub mod risk_report;
