//! What the commands report: the three-engine cross-check ([`crosscheck`]),
//! exposures and full-revaluation scenarios ([`risk`]), the risk
//! report's CSV files and HTML page ([`risk_report`]), and a calibration's
//! parameters, residuals and HTML page ([`calibration_report`]), the daily
//! P&L explain ([`explain`]) and its page ([`explain_report`]); [`html`]
//! (page frame, escaping, tables), [`chart`] (SVG charts, heat maps, colour
//! key) and [`format`] (one number format for tables and axes) hold what
//! the pages share; [`user_scenarios`] reads the risk command's scenario
//! file.

pub mod calibration_report;
pub mod chart;
pub mod crosscheck;
pub mod explain;
pub mod explain_report;
pub mod format;
pub mod html;
pub mod risk;
pub mod risk_report;
pub mod user_scenarios;
