//! Integration tests, built as one binary. Each module checks one area
//! against an outside reference named beside each check.

mod book_contract_cli;
mod common;
mod crosscheck_cli;
mod engine_limits_cli;
mod finite_diff;
mod fourier;
// The fuzz harness is not wired in yet: its oracle predates the merged reader (open-quote recovery, CR lines); issue 8 notes.
// mod fuzz_cli;
// mod fuzz_regressions;
mod identities;
mod implied_vol;
mod implied_vol_cli;
mod monte_carlo;
#[cfg(target_os = "linux")] // /dev/full, kill(1), ulimit
mod output_safety_cli;
mod price_cli;
// mod properties;
mod reference;
mod risk_cli;
mod series_domain;
