//! Standard normal density and distribution function, accurate in both tails.
//!
//! `norm_cdf(x)` is evaluated as `erfc(-x / sqrt 2) / 2`, so the lower tail
//! keeps full relative precision down to underflow, and the upper tail
//! `norm_sf(x) = norm_cdf(-x)` is computed directly rather than as `1 - cdf`.
//! The complementary error function comes from the `libm` crate, measured
//! against mpmath at 40 digits in `tests/reference.rs` (see
//! `scripts/make_reference.py`).

/// `1 / sqrt(2 pi)`.
pub const FRAC_1_SQRT_2PI: f64 = 0.398_942_280_401_432_7;

/// Standard normal density `phi(x) = exp(-x^2/2) / sqrt(2 pi)`.
#[inline]
pub fn norm_pdf(x: f64) -> f64 {
    FRAC_1_SQRT_2PI * (-0.5 * x * x).exp()
}

/// Standard normal distribution function `Phi(x)`.
///
/// # Formula
/// `Phi(x) = erfc(-x / sqrt 2) / 2`, accurate in relative terms for `x < 0`.
#[inline]
pub fn norm_cdf(x: f64) -> f64 {
    0.5 * libm::erfc(-x * std::f64::consts::FRAC_1_SQRT_2)
}

/// Mills ratio `M(z) = (1 - Phi(z)) / phi(z)` for `z >= 0`.
///
/// A table of 64 degree-8 polynomials in `y = 4 / (4 + z)` over `z` in
/// `[0, 40]`, fitted and checked against mpmath at 40 digits by
/// `scripts/fit_mills.py` (worst relative error 1.9e-16). The table is
/// indexed, not searched, so the cost is one division and one Horner
/// evaluation with no data-dependent branch. Beyond `z = 40` the density
/// underflows and the three-term asymptotic series is more than enough.
#[inline]
pub fn mills_ratio(z: f64) -> f64 {
    use crate::mills_table::{COEFFS, PIECES};
    const Y0: f64 = 1.0 / 11.0;
    if z > 40.0 {
        let r = 1.0 / (z * z);
        return (1.0 - r * (1.0 - 3.0 * r)) / z;
    }
    let y = 4.0 / (4.0 + z);
    let u = (y - Y0) * (PIECES as f64 / (1.0 - Y0));
    let i = (u as usize).min(PIECES - 1);
    let t = 2.0 * (u - i as f64) - 1.0;
    mills_piece(&COEFFS[i], t)
}

/// One piece of the Mills-ratio table at `t` in `[-1, 1]`, by Estrin's
/// scheme (coefficients stored highest degree first): a dependency depth of
/// four multiply-adds instead of eight. Shared with the series lane kernel
/// so that both round identically.
#[inline(always)]
pub(crate) fn mills_piece(c: &[f64; crate::mills_table::DEGREE + 1], t: f64) -> f64 {
    const _: () = assert!(crate::mills_table::DEGREE == 8);
    let t2 = t * t;
    let t4 = t2 * t2;
    let q0 = c[8] + c[7] * t;
    let q1 = c[6] + c[5] * t;
    let q2 = c[4] + c[3] * t;
    let q3 = c[2] + c[1] * t;
    let r0 = q0 + q1 * t2;
    let r1 = q2 + q3 * t2;
    (r0 + r1 * t4) + c[0] * (t4 * t4)
}

/// `Phi(x)` from a precomputed density `pdf = phi(x)`, with no further
/// exponential: `Phi(-|x|) = phi(x) M(|x|)` with the Mills ratio `M`
/// ([`mills_ratio`]). The series engine evaluates the density anyway, so
/// this saves the exponentials inside `erfc`.
#[inline]
pub fn norm_cdf_from_pdf(x: f64, pdf: f64) -> f64 {
    let tail = pdf * mills_ratio(x.abs());
    if x <= 0.0 {
        tail
    } else {
        1.0 - tail
    }
}

/// Standard normal survival function `1 - Phi(x)`, computed directly.
#[inline]
pub fn norm_sf(x: f64) -> f64 {
    norm_cdf(-x)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn symmetric_and_centred() {
        assert_eq!(norm_cdf(0.0), 0.5);
        for &x in &[0.1, 1.0, 3.0, 7.5] {
            assert!((norm_cdf(x) + norm_cdf(-x) - 1.0).abs() < 1e-16);
        }
    }

    #[test]
    fn cdf_from_pdf_agrees_with_erfc_form() {
        let mut x = -37.0;
        while x < 9.0 {
            let a = norm_cdf(x);
            let b = norm_cdf_from_pdf(x, norm_pdf(x));
            assert!((a - b).abs() <= 1e-14 * (1.0 + x * x) * a, "x={x}: {a} {b}");
            x += 0.0173;
        }
    }

    #[test]
    fn deep_lower_tail_keeps_digits() {
        // Phi(-10) = 7.619853024160526e-24 (mpmath.ncdf(-10), 40 digits).
        let v = norm_cdf(-10.0);
        assert!((v / 7.619_853_024_160_526e-24 - 1.0).abs() < 1e-14);
        // Upper tail via the survival function, not 1 - cdf.
        assert!((norm_sf(10.0) / 7.619_853_024_160_526e-24 - 1.0).abs() < 1e-14);
    }
}
