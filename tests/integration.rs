//! Integration tests, built as one binary. Each module checks one area
//! against an outside reference named beside each check.

mod common;
mod identities;
mod price_cli;
mod reference;
