//! The Merton (1976) jump-diffusion model and the European contract it prices.
//!
//! Everything that reaches a pricing engine goes through [`Contract::new`],
//! which validates once and returns a typed error naming the offending
//! field, so the engines themselves never see NaN, infinity or a negative
//! volatility and never have to fail.
//!
//! # Conventions
//! Under the risk-neutral measure
//! `ln S_T = ln S + (r - q - lambda k - sigma^2/2) T + sigma W_T + sum_{i<=N_T} ln Y_i`
//! with `N_T ~ Poisson(lambda T)`, `ln Y ~ Normal(mu_J, delta^2)` and
//! `k = E[Y] - 1 = exp(mu_J + delta^2/2) - 1`. The `- lambda k` compensator
//! makes `e^{-(r-q)t} S_t` a martingale. See `docs/model.md`.

use std::fmt;
use std::str::FromStr;

/// Call or put.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum OptionKind {
    /// Pays `(S_T - K)^+`.
    Call,
    /// Pays `(K - S_T)^+`.
    Put,
}

impl OptionKind {
    /// `+1` for a call, `-1` for a put (the usual `omega` of the formulas).
    #[inline]
    pub fn sign(self) -> f64 {
        match self {
            OptionKind::Call => 1.0,
            OptionKind::Put => -1.0,
        }
    }

    /// Payoff at expiry for a terminal price `s`.
    #[inline]
    pub fn payoff(self, s: f64, strike: f64) -> f64 {
        match self {
            OptionKind::Call => (s - strike).max(0.0),
            OptionKind::Put => (strike - s).max(0.0),
        }
    }
}

impl fmt::Display for OptionKind {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            OptionKind::Call => "call",
            OptionKind::Put => "put",
        })
    }
}

impl FromStr for OptionKind {
    type Err = ();
    /// Accepts `call` or `put`, any case, surrounding spaces ignored.
    fn from_str(s: &str) -> Result<Self, ()> {
        let t = s.trim();
        if t.eq_ignore_ascii_case("call") {
            Ok(OptionKind::Call)
        } else if t.eq_ignore_ascii_case("put") {
            Ok(OptionKind::Put)
        } else {
            Err(())
        }
    }
}

/// A number as messages show it: the shortest text that reads back as the
/// same `f64`, in positional form between 1e-4 and 1e16 (`0.25`, `-1`,
/// `123456`) and in scientific form outside (`1e308`, `5e-324`, `2.5e-7`),
/// so that no message spells out hundreds of digits.
///
/// ```
/// use saltus::model::Short;
/// assert_eq!(Short(1e308).to_string(), "1e308");
/// assert_eq!(Short(-0.2).to_string(), "-0.2");
/// ```
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Short(pub f64);

impl fmt::Display for Short {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let a = self.0.abs();
        if a == 0.0 || !a.is_finite() || (1e-4..1e16).contains(&a) {
            write!(f, "{}", self.0)
        } else {
            write!(f, "{:e}", self.0)
        }
    }
}

/// Why a set of inputs was refused. Each variant names the field.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[non_exhaustive]
pub enum ModelError {
    /// A field is NaN or infinite.
    #[error("{field} is not a finite number ({})", Short(*.value))]
    NotFinite {
        /// Field name, as in the CSV schema.
        field: &'static str,
        /// The offending value.
        value: f64,
    },
    /// A field that must be strictly positive is not.
    #[error("{field} must be positive, got {}", Short(*.value))]
    NotPositive {
        /// Field name, as in the CSV schema.
        field: &'static str,
        /// The offending value.
        value: f64,
    },
    /// A field that must be non-negative is negative.
    #[error("{field} must not be negative, got {}", Short(*.value))]
    Negative {
        /// Field name, as in the CSV schema.
        field: &'static str,
        /// The offending value.
        value: f64,
    },
    /// A field is outside the range the engines are built and tested for.
    #[error("{field} = {} is outside the supported range ({range})", Short(*.value))]
    OutOfRange {
        /// Field name, as in the CSV schema.
        field: &'static str,
        /// The offending value.
        value: f64,
        /// Human-readable supported range.
        range: &'static str,
    },
}

/// Largest `lambda * T` accepted. The series is tested up to 1000; beyond
/// ~1e5 the number of terms grows past what a book pricer should spend.
pub const MAX_JUMP_INTENSITY_TIMES_EXPIRY: f64 = 1.0e5;
/// Largest `|mu_J|` and `delta` accepted: log jump sizes beyond this make
/// `k = exp(mu_J + delta^2/2) - 1` overflow-prone and are not meaningful.
pub const MAX_LOG_JUMP: f64 = 20.0;

/// Merton jump parameters: intensity and log-normal jump-size law.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct JumpParams {
    /// Jump intensity `lambda` (expected jumps per year), `>= 0`.
    pub rate: f64,
    /// Mean `mu_J` of the log jump size.
    pub mean: f64,
    /// Standard deviation `delta` of the log jump size, `>= 0`.
    pub vol: f64,
}

impl JumpParams {
    /// Mean relative jump `k = E[Y] - 1 = exp(mu_J + delta^2/2) - 1`,
    /// computed with `expm1` so tiny jumps keep their digits.
    #[inline]
    pub fn k(&self) -> f64 {
        self.log_mean_jump().exp_m1()
    }

    /// `ln(1 + k) = mu_J + delta^2 / 2`.
    #[inline]
    pub fn log_mean_jump(&self) -> f64 {
        self.mean + 0.5 * self.vol * self.vol
    }
}

/// A validated European option under Merton dynamics: everything an engine needs.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Contract {
    /// Call or put.
    pub kind: OptionKind,
    /// Spot `S > 0`.
    pub spot: f64,
    /// Strike `K > 0`.
    pub strike: f64,
    /// Time to expiry `T >= 0` in years.
    pub expiry: f64,
    /// Continuously compounded rate `r`.
    pub rate: f64,
    /// Continuous dividend / borrow yield `q`.
    pub div_yield: f64,
    /// Diffusion volatility `sigma >= 0`.
    pub vol: f64,
    /// Jump parameters.
    pub jumps: JumpParams,
}

fn finite(field: &'static str, value: f64) -> Result<f64, ModelError> {
    if value.is_finite() {
        Ok(value)
    } else {
        Err(ModelError::NotFinite { field, value })
    }
}

fn positive(field: &'static str, value: f64) -> Result<f64, ModelError> {
    finite(field, value)?;
    if value > 0.0 {
        Ok(value)
    } else {
        Err(ModelError::NotPositive { field, value })
    }
}

fn non_negative(field: &'static str, value: f64) -> Result<f64, ModelError> {
    finite(field, value)?;
    if value >= 0.0 {
        Ok(value)
    } else {
        Err(ModelError::Negative { field, value })
    }
}

impl Contract {
    /// Validates and builds a contract.
    ///
    /// # Errors
    /// A [`ModelError`] naming the first offending field: non-finite values,
    /// non-positive spot or strike, negative expiry, vol, jump rate or jump vol,
    /// rates outside `[-1, 1]`, `|jump_mean|` or `jump_vol` above
    /// [`MAX_LOG_JUMP`], or `lambda T` above [`MAX_JUMP_INTENSITY_TIMES_EXPIRY`].
    ///
    /// # Example
    /// ```
    /// use saltus::model::{Contract, JumpParams, OptionKind};
    /// let c = Contract::new(OptionKind::Call, 100.0, 100.0, 0.25, 0.05, 0.0, 0.15,
    ///     JumpParams { rate: 0.1, mean: -0.9, vol: 0.45 }).unwrap();
    /// assert!(c.jumps.k() < 0.0);
    /// ```
    #[allow(clippy::too_many_arguments)]
    pub fn new(
        kind: OptionKind,
        spot: f64,
        strike: f64,
        expiry: f64,
        rate: f64,
        div_yield: f64,
        vol: f64,
        jumps: JumpParams,
    ) -> Result<Self, ModelError> {
        positive("spot", spot)?;
        positive("strike", strike)?;
        non_negative("expiry", expiry)?;
        finite("rate", rate)?;
        finite("div_yield", div_yield)?;
        non_negative("vol", vol)?;
        non_negative("jump_rate", jumps.rate)?;
        finite("jump_mean", jumps.mean)?;
        non_negative("jump_vol", jumps.vol)?;
        if rate.abs() > 1.0 {
            return Err(ModelError::OutOfRange {
                field: "rate",
                value: rate,
                range: "-1 to 1",
            });
        }
        if div_yield.abs() > 1.0 {
            return Err(ModelError::OutOfRange {
                field: "div_yield",
                value: div_yield,
                range: "-1 to 1",
            });
        }
        if expiry > 1000.0 {
            return Err(ModelError::OutOfRange {
                field: "expiry",
                value: expiry,
                range: "0 to 1000 years",
            });
        }
        if vol > 10.0 {
            return Err(ModelError::OutOfRange {
                field: "vol",
                value: vol,
                range: "0 to 10",
            });
        }
        if jumps.mean.abs() > MAX_LOG_JUMP {
            return Err(ModelError::OutOfRange {
                field: "jump_mean",
                value: jumps.mean,
                range: "-20 to 20",
            });
        }
        if jumps.vol > MAX_LOG_JUMP {
            return Err(ModelError::OutOfRange {
                field: "jump_vol",
                value: jumps.vol,
                range: "0 to 20",
            });
        }
        if jumps.rate * expiry > MAX_JUMP_INTENSITY_TIMES_EXPIRY {
            return Err(ModelError::OutOfRange {
                field: "jump_rate",
                value: jumps.rate,
                range: "jump_rate * expiry up to 1e5",
            });
        }
        Ok(Contract {
            kind,
            spot,
            strike,
            expiry,
            rate,
            div_yield,
            vol,
            jumps,
        })
    }

    /// Expected number of jumps to expiry, `lambda T`.
    #[inline]
    pub fn jump_intensity(&self) -> f64 {
        self.jumps.rate * self.expiry
    }

    /// Risk-neutral forward `E[S_T] = S e^{(r-q)T}`.
    #[inline]
    pub fn forward(&self) -> f64 {
        self.spot * ((self.rate - self.div_yield) * self.expiry).exp()
    }

    /// A copy with one field changed, re-validated (used by bump-and-reprice).
    pub fn with(&self, param: Param, value: f64) -> Result<Self, ModelError> {
        let mut c = *self;
        match param {
            Param::Spot => c.spot = value,
            Param::Vol => c.vol = value,
            Param::Expiry => c.expiry = value,
            Param::Rate => c.rate = value,
            Param::DivYield => c.div_yield = value,
            Param::JumpRate => c.jumps.rate = value,
            Param::JumpMean => c.jumps.mean = value,
            Param::JumpVol => c.jumps.vol = value,
        }
        Contract::new(
            c.kind,
            c.spot,
            c.strike,
            c.expiry,
            c.rate,
            c.div_yield,
            c.vol,
            c.jumps,
        )
    }

    /// The value of one model input.
    pub fn get(&self, param: Param) -> f64 {
        match param {
            Param::Spot => self.spot,
            Param::Vol => self.vol,
            Param::Expiry => self.expiry,
            Param::Rate => self.rate,
            Param::DivYield => self.div_yield,
            Param::JumpRate => self.jumps.rate,
            Param::JumpMean => self.jumps.mean,
            Param::JumpVol => self.jumps.vol,
        }
    }
}

/// The model inputs a Greek can differentiate with respect to.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Param {
    /// Spot `S`.
    Spot,
    /// Diffusion vol `sigma`.
    Vol,
    /// Expiry `T`.
    Expiry,
    /// Rate `r`.
    Rate,
    /// Dividend yield `q`.
    DivYield,
    /// Jump intensity `lambda`.
    JumpRate,
    /// Mean log jump `mu_J`.
    JumpMean,
    /// Log jump vol `delta`.
    JumpVol,
}

#[cfg(test)]
mod tests {
    use super::*;

    fn jumps() -> JumpParams {
        JumpParams {
            rate: 0.5,
            mean: -0.1,
            vol: 0.2,
        }
    }

    #[test]
    fn kind_parses_case_insensitively() {
        assert_eq!(" CALL ".parse::<OptionKind>(), Ok(OptionKind::Call));
        assert_eq!("Put".parse::<OptionKind>(), Ok(OptionKind::Put));
        assert!("straddle".parse::<OptionKind>().is_err());
    }

    #[test]
    fn validation_names_the_field() {
        let e = Contract::new(OptionKind::Call, 100.0, 100.0, 1.0, 0.0, 0.0, -0.2, jumps())
            .unwrap_err();
        assert_eq!(e.to_string(), "vol must not be negative, got -0.2");
        let e = Contract::new(
            OptionKind::Put,
            f64::NAN,
            100.0,
            1.0,
            0.0,
            0.0,
            0.2,
            jumps(),
        )
        .unwrap_err();
        assert!(e.to_string().starts_with("spot is not a finite number"));
    }

    #[test]
    fn issue8_messages_show_numbers_in_short_form() {
        // 1e308 used to be written out as 309 digits.
        let e = Contract::new(
            OptionKind::Call,
            100.0,
            100.0,
            1.0,
            0.0,
            0.0,
            1e308,
            jumps(),
        )
        .unwrap_err();
        assert_eq!(
            e.to_string(),
            "vol = 1e308 is outside the supported range (0 to 10)"
        );
        let e =
            Contract::new(OptionKind::Call, -5e-324, 1.0, 1.0, 0.0, 0.0, 0.2, jumps()).unwrap_err();
        assert_eq!(e.to_string(), "spot must be positive, got -5e-324");
        for (x, s) in [
            (0.0, "0"),
            (-1.0, "-1"),
            (0.32, "0.32"),
            (1e-4, "0.0001"),
            (2.5e-7, "2.5e-7"),
            (123456.5, "123456.5"),
            (1e16, "1e16"),
            (-1.7976931348623157e308, "-1.7976931348623157e308"),
            (f64::INFINITY, "inf"),
            (f64::NAN, "NaN"),
        ] {
            assert_eq!(Short(x).to_string(), s);
            if x.is_finite() {
                assert_eq!(s.parse::<f64>().unwrap(), x, "{s} reads back");
            }
        }
    }

    #[test]
    fn k_uses_expm1() {
        let j = JumpParams {
            rate: 1.0,
            mean: 1e-12,
            vol: 0.0,
        };
        // exp(1e-12) - 1 = 1e-12 + 5e-25 (Taylor series).
        assert!((j.k() - 1.0000000000005e-12).abs() < 1e-27);
    }
}
