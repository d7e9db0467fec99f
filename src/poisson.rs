//! The Poisson law: an accurate probability mass function and rigorous tail bounds.
//!
//! The mass function uses Loader's saddle-point form
//! `p(n; mu) = exp(-stirlerr(n) - bd0(n, mu)) / sqrt(2 pi n)`,
//! which keeps close to full double precision for `mu` and `n` in the
//! thousands, where the naive `exp(-mu + n ln mu - lnGamma(n+1))` loses
//! digits to cancellation between three numbers of size `mu`.[^1]
//! Neighbouring masses then follow from the exact ratio
//! `p(n+1)/p(n) = mu/(n+1)`, which is how the series engine walks outward
//! from the mode.
//!
//! [^1]: C. Loader (2000), "Fast and accurate computation of binomial probabilities".

/// `ln(sqrt(2 pi))`.
const LN_SQRT_2PI: f64 = 0.918_938_533_204_672_8;

/// Error of Stirling's approximation, `ln n! - [(n + 1/2) ln n - n + ln sqrt(2 pi)]`.
fn stirlerr(n: f64) -> f64 {
    if n <= 15.0 {
        // ln n! is at most ~28 here, so the direct difference keeps ~1e-15 absolute.
        libm::lgamma(n + 1.0) - (n + 0.5) * n.ln() + n - LN_SQRT_2PI
    } else {
        // Stirling series with Bernoulli-number coefficients 1/12, 1/360, 1/1260,
        // 1/1680, 1/1188; the first omitted term is below 2e-16 for n > 15.
        let nn = n * n;
        (1.0 / 12.0
            - (1.0 / 360.0 - (1.0 / 1260.0 - (1.0 / 1680.0 - 1.0 / (1188.0 * nn)) / nn) / nn) / nn)
            / n
    }
}

/// Deviance term `bd0(x, m) = x ln(x/m) + m - x`, computed without cancellation.
fn bd0(x: f64, m: f64) -> f64 {
    if (x - m).abs() < 0.1 * (x + m) {
        let mut v = (x - m) / (x + m);
        let mut s = (x - m) * v;
        let mut ej = 2.0 * x * v;
        v *= v;
        let mut j = 1.0;
        loop {
            ej *= v;
            let s1 = s + ej / (2.0 * j + 1.0);
            if s1 == s {
                return s1;
            }
            s = s1;
            j += 1.0;
        }
    }
    x * (x / m).ln() + m - x
}

/// Poisson probability mass `P(N = n)` for `N ~ Poisson(mu)`, `mu >= 0`.
///
/// # Example
/// ```
/// use saltus::poisson::pmf;
/// assert!((pmf(3, 2.0) - 4.0 / 3.0 * (-2.0f64).exp()).abs() < 1e-16);
/// ```
pub fn pmf(n: u64, mu: f64) -> f64 {
    if mu == 0.0 {
        return if n == 0 { 1.0 } else { 0.0 };
    }
    if n == 0 {
        return (-mu).exp();
    }
    if n <= 30 && mu < 700.0 {
        // Few factors: the plain product keeps (n + 1) ulp relative accuracy,
        // better than the saddle-point form far from the mode.
        let mut p = (-mu).exp();
        for j in 1..=n {
            p *= mu / j as f64;
        }
        return p;
    }
    let x = n as f64;
    (-stirlerr(x) - bd0(x, mu)).exp() / (2.0 * std::f64::consts::PI * x).sqrt()
}

/// Rigorous bound on the upper tail `P(N >= m)` given `p_m = P(N = m)`.
///
/// For `j >= m` the ratio `p(j+1)/p(j) = mu/(j+1) <= mu/(m+1)`, so the tail is
/// bounded by a geometric series. Returns `+inf` when the ratio is not below 1.
#[inline]
pub fn upper_tail_bound(m: u64, p_m: f64, mu: f64) -> f64 {
    let ratio = mu / (m as f64 + 1.0);
    if ratio < 1.0 {
        p_m / (1.0 - ratio)
    } else {
        f64::INFINITY
    }
}

/// Rigorous bound on the lower tail `P(N <= m)` given `p_m = P(N = m)`.
///
/// For `j <= m` the ratio `p(j-1)/p(j) = j/mu <= m/mu`. Returns `+inf` when
/// the ratio is not below 1.
#[inline]
pub fn lower_tail_bound(m: u64, p_m: f64, mu: f64) -> f64 {
    let ratio = m as f64 / mu;
    if ratio < 1.0 {
        p_m / (1.0 - ratio)
    } else {
        f64::INFINITY
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn small_cases_match_the_definition() {
        for &mu in &[0.1f64, 1.0, 2.5, 10.0] {
            let mut direct = (-mu).exp();
            for n in 0..30u64 {
                if n > 0 {
                    direct *= mu / n as f64;
                }
                let p = pmf(n, mu);
                assert!(
                    (p - direct).abs() <= 1e-14 * direct,
                    "n={n} mu={mu} {p} {direct}"
                );
            }
        }
    }

    #[test]
    fn mass_sums_to_one_for_large_mean() {
        // sum_n p(n; 1000) = 1; walk outward from the mode with the exact ratio.
        let mu = 1000.0;
        let mut total = 0.0;
        let mut p = pmf(1000, mu);
        let mut n = 1000u64;
        while p > 1e-300 {
            total += p;
            n += 1;
            p *= mu / n as f64;
        }
        let mut p = pmf(1000, mu);
        let mut n = 1000u64;
        while n > 0 && p > 1e-300 {
            p *= n as f64 / mu;
            n -= 1;
            total += p;
        }
        assert!((total - 1.0).abs() < 2e-14, "{total}");
    }

    #[test]
    fn tail_bounds_are_upper_bounds() {
        let mu = 3.0;
        let tail: f64 = (8..200).map(|n| pmf(n, mu)).sum();
        let b = upper_tail_bound(8, pmf(8, mu), mu);
        assert!(b >= tail && b < 2.0 * tail);
        let low: f64 = (0..=1).map(|n| pmf(n, mu)).sum();
        let b = lower_tail_bound(1, pmf(1, mu), mu);
        assert!(b >= low && b < 2.0 * low);
    }
}
