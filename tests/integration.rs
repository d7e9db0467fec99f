//! Integration tests, built as one binary. Each module checks one area
//! against an outside reference named beside each check.

mod common;
mod crosscheck_cli;
mod engine_limits_cli;
mod finite_diff;
mod fourier;
mod identities;
mod monte_carlo;
mod price_cli;
mod reference;
mod risk_cli;
mod series_domain;
