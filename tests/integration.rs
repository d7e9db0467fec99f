//! Integration tests, built as one binary. Each module checks one area
//! against an outside reference named beside each check.

mod american_cli;
mod book_contract_cli;
mod calibrate;
mod calibrate_cli;
mod common;
mod crosscheck_cli;
mod dates_cli;
mod engine_limits_cli;
mod explain_cli;
mod finite_diff;
mod fourier;
mod fuzz_cli;
mod fuzz_regressions;
mod greeks_cli;
mod identities;
mod implied_vol;
mod implied_vol_cli;
mod mc_rare;
mod monte_carlo;
#[cfg(target_os = "linux")] // /dev/full, kill(1), ulimit
mod output_safety_cli;
mod params_cli;
mod pide;
mod price_cli;
mod properties;
mod reference;
mod risk_cli;
mod risk_page_browser;
mod risk_scenarios_cli;
mod series_domain;
