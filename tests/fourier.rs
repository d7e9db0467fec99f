//! Fourier (Lewis) engine against the series, Black-Scholes and the 40-digit
//! mpmath reference, and the honesty of its own error estimate.

use crate::common::{contract, merton, num, read_fixture};
use saltus::black_scholes;
use saltus::engines::{fourier, series};
use saltus::model::OptionKind::{self, Call, Put};

#[test]
fn equals_the_series_to_1e_10_across_a_sweep() {
    let mut worst = 0.0f64;
    for kind in [Call, Put] {
        for &k in &[70.0, 90.0, 100.0, 110.0, 130.0] {
            for &t in &[0.05, 0.5, 2.0] {
                for &(lam, mu, dl) in &[(0.2, -0.3, 0.2), (1.0, -0.05, 0.1), (3.0, 0.08, 0.25)] {
                    let c = merton(kind, 100.0, k, t, 0.03, 0.01, 0.2, lam, mu, dl);
                    let s = series::price(&c).unwrap().greeks.price;
                    let f = fourier::price(&c).unwrap();
                    let rel = (f.price - s).abs() / s;
                    worst = worst.max(rel);
                    assert!(
                        rel < 1e-10,
                        "{kind:?} K={k} T={t} lam={lam}: {} vs {s} ({rel:e})",
                        f.price
                    );
                    assert!(
                        f.error_estimate < 1e-10 * s + 1e-13 * 100.0,
                        "estimate {:e}",
                        f.error_estimate
                    );
                }
            }
        }
    }
    eprintln!("worst Fourier-vs-series relative gap on the sweep: {worst:e}");
}

#[test]
fn equals_black_scholes_without_jumps() {
    for kind in [Call, Put] {
        for &k in &[50.0, 100.0, 200.0] {
            let c = merton(kind, 100.0, k, 0.7, 0.02, 0.01, 0.3, 0.0, -0.2, 0.1);
            let f = fourier::price(&c).unwrap().price;
            let bs = black_scholes::price(kind, 100.0, k, 0.7, 0.02, 0.01, 0.3);
            assert!((f - bs).abs() <= 1e-13 * bs.max(1.0));
        }
    }
}

#[test]
fn error_estimate_covers_the_true_error() {
    // Against the 40-digit mpmath reference: wherever the engine claims an
    // accuracy, the true error is within it (plus rounding).
    for row in read_fixture("merton_reference.csv") {
        let c = contract(&row);
        let want = num(&row, "price");
        if c.vol == 0.0 && c.jumps.vol == 0.0 {
            // A pure lattice law: refused, see a_pure_lattice_law_is_refused_with_a_reason.
            assert_eq!(fourier::price(&c), Err(fourier::FourierError::Lattice));
            continue;
        }
        let f = fourier::price(&c).unwrap();
        let err = (f.price - want).abs();
        assert!(
            err <= f.error_estimate + 1e-13 * want + 1e-15 * c.spot,
            "{} {}: error {err:e} above estimate {:e}",
            row["case"],
            row["kind"],
            f.error_estimate
        );
    }
}

#[test]
fn expiry_zero_is_intrinsic() {
    let c = merton(
        OptionKind::Put,
        100.0,
        120.0,
        0.0,
        0.02,
        0.0,
        0.2,
        1.0,
        -0.1,
        0.1,
    );
    assert_eq!(fourier::price(&c).unwrap().price, 20.0);
}

#[test]
fn extreme_jump_books_agree_with_the_series() {
    // Regression from a randomised sweep: with lambda T |ln(1+k)| in the
    // thousands the series' moneyness recursion once overflowed and gave NaN
    // Greeks and a zero price. Two independent engines must now agree.
    let rows = [
        (
            Put,
            0.1356012124254753,
            0.04068149384845932,
            28.610710789818125,
            0.11522446191211921,
            0.04799311078153315,
            0.8031158339761331,
            28.743615274133017,
            2.8084219177446537,
            1.9139961974397341,
        ),
        (
            Put,
            12.988921087730395,
            0.16933701183688568,
            0.019230769230769232,
            -0.0866662955798706,
            0.03574564534662243,
            1.5643141286682956,
            47048.8876773914,
            1.9563759764989923,
            1.9010288590914868,
        ),
        (
            Call,
            5086.635067764155,
            168.9531311331469,
            0.0027397260273972603,
            0.07148525287703139,
            0.04611733499003483,
            0.545011914508323,
            310995.03033432044,
            2.791591457401097,
            1.418870493142516,
        ),
    ];
    for (kind, s, k, t, r, q, v, l, m, d) in rows {
        let c = merton(kind, s, k, t, r, q, v, l, m, d);
        let g = series::price(&c).unwrap().greeks;
        assert!(
            g.headline().iter().all(|x| x.is_finite()) && g.price > 0.0,
            "{g:?}"
        );
        let f = fourier::price(&c).unwrap();
        assert!(
            (f.price - g.price).abs() <= f.error_estimate + 1e-12 * g.price,
            "{} vs {}",
            f.price,
            g.price
        );
    }
}

#[test]
fn zero_diffusion_rows_match_the_mpmath_jump_count_sum() {
    // Source: tests/data/zero_diffusion_reference.csv, 40-digit mpmath values
    // of the Merton series summed over the jump count (n = 0 the zero-jump
    // atom's discounted payoff), made by scripts/make_zero_diffusion_reference.py
    // and cross-checked there against the textbook form of
    // scripts/make_reference.py. The engine separates the atom analytically
    // (docs/engines.md): 1e-10 relative, and the true error within its own
    // estimate (plus rounding) on every row.
    let rows = read_fixture("zero_diffusion_reference.csv");
    assert!(rows.len() >= 80);
    let mut worst = 0.0f64;
    let mut worst_abs = 0.0f64;
    for row in rows {
        let c = contract(&row);
        let want = num(&row, "price");
        let f =
            fourier::price(&c).unwrap_or_else(|e| panic!("{} {}: {e}", row["case"], row["kind"]));
        let err = (f.price - want).abs();
        worst_abs = worst_abs.max(err);
        let rel = err / want;
        if want > 1e-5 {
            worst = worst.max(rel);
        }
        assert!(
            rel <= 1e-10 || err <= 1e-13 * c.spot,
            "{} {}: {} vs {want} (rel {rel:e})",
            row["case"],
            row["kind"],
            f.price
        );
        assert!(
            err <= f.error_estimate + 4.0 * f64::EPSILON * want,
            "{} {}: error {err:e} above the engine's estimate {:e}",
            row["case"],
            row["kind"],
            f.error_estimate
        );
        assert!(
            f.error_estimate <= 1e-10 * want + 1e-13 * c.spot,
            "{} {}: estimate {:e} too loose for a verdict",
            row["case"],
            row["kind"],
            f.error_estimate
        );
    }
    eprintln!(
        "zero diffusion: worst relative error on prices above 1e-5 {worst:e}, worst absolute error {worst_abs:e}"
    );
}

#[test]
fn a_pure_lattice_law_is_refused_with_a_reason() {
    // sigma = 0 and delta = 0: the terminal law is the lattice
    // x0 + n mu_J with Poisson weights (docs/model.md); its characteristic
    // function is periodic and never decays, so the Lewis integral has no
    // error control. The engine says so instead of returning a number.
    let c = merton(Put, 100.0, 95.0, 0.5, 0.02, 0.0, 0.0, 2.0, -0.1, 0.0);
    let e = fourier::price(&c).unwrap_err();
    assert_eq!(e, fourier::FourierError::Lattice);
    assert!(e.to_string().contains("lattice"), "{e}");
}
