//! `--pide-tol`, shared by every command that can price American rows
//! (`price`, `greeks`, `risk`; `crosscheck` has a looser default): the PIDE engine's requested
//! absolute error as a fraction of spot, validated into a [`PideConfig`]
//! before any work starts.

use anyhow::{bail, Result};
use saltus::engines::pide::{PideConfig, DEFAULT_TOL_SPOT};

/// Smallest and largest accepted `--pide-tol`. A tolerance near the
/// smallest may reach the engine's work cap on long or jump-heavy rows
/// (such a row then fails with the estimate it reached); one above the
/// largest would not be an accuracy worth reporting.
pub const PIDE_TOL_RANGE: (f64, f64) = (1e-9, 1e-2);

/// Flattened into each command that can price American rows.
#[derive(clap::Args, Debug, Clone)]
pub struct PideArgs {
    /// PIDE tolerance (American rows): absolute price error as a fraction of
    /// spot (1e-6 is 0.0001 at spot 100)
    #[arg(long, value_name = "F", default_value_t = DEFAULT_TOL_SPOT, allow_negative_numbers = true)]
    pub pide_tol: f64,
}

impl PideArgs {
    /// The validated engine settings.
    ///
    /// # Errors
    /// A tolerance outside [`PIDE_TOL_RANGE`].
    pub fn config(&self) -> Result<PideConfig> {
        pide_config(self.pide_tol)
    }
}

/// A validated `--pide-tol` (`crosscheck` has its own default).
///
/// # Errors
/// A tolerance outside [`PIDE_TOL_RANGE`].
pub fn pide_config(t: f64) -> Result<PideConfig> {
    let (lo, hi) = PIDE_TOL_RANGE;
    if !(t >= lo && t <= hi) {
        bail!("--pide-tol must be between {lo:e} and {hi:e} (a fraction of spot), got {t}");
    }
    Ok(PideConfig { tol_spot: t })
}
