//! The price and its sensitivities, as one value type shared by every engine.
//!
//! All fields are raw partial derivatives per unit of the input (vega per
//! unit of vol, theta per year, rho per unit of rate). [`Greeks::desk_units`]
//! converts to the per-point / per-day units a desk quotes; the CSV writer
//! renames those columns so the two can never be confused.
//! Bump-and-reprice versions live in [`finite_diff`].

pub mod american;
pub mod finite_diff;

/// Price and Greeks of one option. Raw partial derivatives, per unit.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct Greeks {
    /// Present value.
    pub price: f64,
    /// dV/dS.
    pub delta: f64,
    /// d2V/dS2.
    pub gamma: f64,
    /// dV/dsigma (diffusion vol only), per unit of vol.
    pub vega: f64,
    /// -dV/dT, per year.
    pub theta: f64,
    /// dV/dr, per unit of rate.
    pub rho: f64,
    /// dV/dq, per unit of dividend yield.
    pub div_rho: f64,
    /// dV/dlambda, per unit of jump intensity (jumps per year).
    pub d_jump_rate: f64,
    /// dV/dmu_J, per unit of mean log jump.
    pub d_jump_mean: f64,
    /// dV/ddelta, per unit of log jump vol.
    pub d_jump_vol: f64,
    /// d2V/dS dsigma.
    pub vanna: f64,
    /// d2V/dsigma2.
    pub volga: f64,
}

/// Days per year used for theta per day (calendar days).
pub const DAYS_PER_YEAR: f64 = 365.0;

/// Names of the ten columns the `price` command writes, in raw units.
pub const RAW_COLUMNS: [&str; 10] = [
    "price",
    "delta",
    "gamma",
    "vega",
    "theta",
    "rho",
    "div_rho",
    "d_jump_rate",
    "d_jump_mean",
    "d_jump_vol",
];

/// The same ten columns in desk units: vega per vol point, theta per calendar
/// day, rho and div_rho per percentage point, jump rate per 1 jump/yr (raw),
/// jump mean and jump vol per 1% of log jump.
pub const DESK_COLUMNS: [&str; 10] = [
    "price",
    "delta",
    "gamma",
    "vega_1pt",
    "theta_1d",
    "rho_1pct",
    "div_rho_1pct",
    "d_jump_rate",
    "d_jump_mean_1pct",
    "d_jump_vol_1pct",
];

/// The eleven sensitivities (everything but the price), in the order of
/// [`Greeks::sensitivities`]: the columns of `saltus greeks`.
pub const SENSITIVITY_NAMES: [&str; 11] = [
    "delta",
    "gamma",
    "vega",
    "theta",
    "rho",
    "div_rho",
    "d_jump_rate",
    "d_jump_mean",
    "d_jump_vol",
    "vanna",
    "volga",
];

impl Greeks {
    /// The eleven sensitivities in [`SENSITIVITY_NAMES`] order.
    pub fn sensitivities(&self) -> [f64; 11] {
        [
            self.delta,
            self.gamma,
            self.vega,
            self.theta,
            self.rho,
            self.div_rho,
            self.d_jump_rate,
            self.d_jump_mean,
            self.d_jump_vol,
            self.vanna,
            self.volga,
        ]
    }

    /// The ten headline values in [`RAW_COLUMNS`] order.
    pub fn headline(&self) -> [f64; 10] {
        [
            self.price,
            self.delta,
            self.gamma,
            self.vega,
            self.theta,
            self.rho,
            self.div_rho,
            self.d_jump_rate,
            self.d_jump_mean,
            self.d_jump_vol,
        ]
    }

    /// The ten headline values converted to desk units ([`DESK_COLUMNS`] order).
    pub fn desk_units(&self) -> [f64; 10] {
        [
            self.price,
            self.delta,
            self.gamma,
            self.vega * 0.01,
            self.theta / DAYS_PER_YEAR,
            self.rho * 0.01,
            self.div_rho * 0.01,
            self.d_jump_rate,
            self.d_jump_mean * 0.01,
            self.d_jump_vol * 0.01,
        ]
    }

    /// `self * w`, field by field (for aggregating positions).
    pub fn scaled(&self, w: f64) -> Greeks {
        Greeks {
            price: self.price * w,
            delta: self.delta * w,
            gamma: self.gamma * w,
            vega: self.vega * w,
            theta: self.theta * w,
            rho: self.rho * w,
            div_rho: self.div_rho * w,
            d_jump_rate: self.d_jump_rate * w,
            d_jump_mean: self.d_jump_mean * w,
            d_jump_vol: self.d_jump_vol * w,
            vanna: self.vanna * w,
            volga: self.volga * w,
        }
    }

    /// `self + o`, field by field.
    pub fn add(&self, o: &Greeks) -> Greeks {
        Greeks {
            price: self.price + o.price,
            delta: self.delta + o.delta,
            gamma: self.gamma + o.gamma,
            vega: self.vega + o.vega,
            theta: self.theta + o.theta,
            rho: self.rho + o.rho,
            div_rho: self.div_rho + o.div_rho,
            d_jump_rate: self.d_jump_rate + o.d_jump_rate,
            d_jump_mean: self.d_jump_mean + o.d_jump_mean,
            d_jump_vol: self.d_jump_vol + o.d_jump_vol,
            vanna: self.vanna + o.vanna,
            volga: self.volga + o.volga,
        }
    }
}
