//! Monte Carlo engine: measure-change identities, agreement with the series
//! within its own error bars, honest coverage, reproducibility.

use crate::common::merton;
use saltus::engines::monte_carlo::{
    self, stream_key, IntensityChoice, McConfig, MertonSampler, Work,
};
use saltus::engines::series;
use saltus::model::OptionKind::{Call, Put};

fn cfg(paths: u64) -> McConfig {
    McConfig {
        work: Work::Paths(paths),
        ..McConfig::default()
    }
}

#[test]
fn radon_nikodym_weights_average_to_one_and_keep_the_law_of_n() {
    // Measure change for a Poisson count (Glasserman 2004, sec. 4.6):
    // with N ~ Poisson(gamma lambda T) under Q and
    // w = (1/gamma)^N exp((gamma - 1) lambda T), E_Q[w] = 1 and
    // E_Q[w 1{N = n}] = P(N = n) under the original intensity.
    use rand::SeedableRng;
    let c = merton(Put, 100.0, 80.0, 2.0, 0.02, 0.0, 0.2, 0.3, -0.2, 0.1);
    let lam_t = 0.6;
    for gamma in [0.5, 3.0, 8.0] {
        let sampler = MertonSampler::new(&c, 2.0, gamma * 0.3, -0.2);
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(99);
        let n_draws = 400_000;
        let (mut sw, mut sw2, mut s_mass, mut s_n) = (0.0, 0.0, [0.0f64; 4], 0.0);
        for _ in 0..n_draws {
            let n = sampler.jump_count(&mut rng);
            let w = (1.0f64 / gamma).powi(n as i32) * ((gamma - 1.0) * lam_t).exp();
            sw += w;
            sw2 += w * w;
            s_n += w * n as f64;
            if (n as usize) < 4 {
                s_mass[n as usize] += w;
            }
        }
        let nd = n_draws as f64;
        let mean = sw / nd;
        let se = ((sw2 / nd - mean * mean) / nd).sqrt();
        assert!(
            (mean - 1.0).abs() < 4.0 * se,
            "gamma {gamma}: E[w] = {mean} +- {se}"
        );
        // E_P[N] = lambda T, up to the same kind of error.
        assert!(
            (s_n / nd - lam_t).abs() < 0.02,
            "gamma {gamma}: E[wN] = {}",
            s_n / nd
        );
        for (n, mass) in s_mass.iter().enumerate() {
            let p = saltus::poisson::pmf(n as u64, lam_t);
            assert!(
                (mass / nd - p).abs() < 0.01,
                "gamma {gamma}, n {n}: {} vs {p}",
                mass / nd
            );
        }
    }
}

#[test]
fn importance_sampling_leaves_the_price_unchanged() {
    // Any fixed gamma, with or without a shifted jump mean, is unbiased.
    let c = merton(Put, 100.0, 70.0, 0.5, 0.03, 0.0, 0.15, 0.3, -0.3, 0.1);
    let exact = series::price(&c).unwrap().greeks.price;
    for (gamma, shift) in [(0.5, 0.0), (4.0, 0.0), (4.0, -0.1), (1.0, 0.05)] {
        let e = monte_carlo::price(
            &c,
            5,
            &McConfig {
                intensity: IntensityChoice::Fixed(gamma),
                jump_mean_shift: shift,
                ..cfg(1 << 20)
            },
        );
        let z = (e.price - exact) / e.std_error;
        assert!(z.abs() < 4.0, "gamma {gamma} shift {shift}: z = {z}");
    }
}

#[test]
fn within_four_standard_errors_of_the_series() {
    // Calls, puts, short and long expiries, high and zero jump intensity.
    let cases = [
        merton(Call, 100.0, 100.0, 1.0, 0.03, 0.01, 0.2, 0.5, -0.1, 0.15),
        merton(Put, 100.0, 90.0, 1.0, 0.03, 0.01, 0.2, 0.5, -0.1, 0.15),
        merton(
            Call,
            100.0,
            105.0,
            1.0 / 365.0,
            0.02,
            0.0,
            0.3,
            2.0,
            -0.05,
            0.1,
        ),
        merton(Put, 100.0, 100.0, 10.0, 0.04, 0.02, 0.18, 0.3, -0.2, 0.25),
        merton(Put, 100.0, 100.0, 1.0, 0.02, 0.0, 0.2, 1000.0, -0.01, 0.02),
        merton(Call, 100.0, 95.0, 0.75, 0.02, 0.01, 0.25, 0.0, -0.1, 0.2),
        merton(Put, 100.0, 40.0, 0.5, 0.03, 0.0, 0.15, 0.2, -0.6, 0.1),
    ];
    for (i, c) in cases.iter().enumerate() {
        let exact = series::price(c).unwrap().greeks.price;
        let e = monte_carlo::price(c, stream_key(1, &i.to_string()), &cfg(1 << 20));
        let z = (e.price - exact) / e.std_error;
        assert!(
            z.abs() < 4.0,
            "case {i}: mc {} +- {} vs {exact} (z = {z})",
            e.price,
            e.std_error
        );
        assert!(e.ci95.0 < e.price && e.price < e.ci95.1);
    }
}

#[test]
fn confidence_intervals_cover_about_95_percent() {
    // Over 400 seeds the 95% interval must cover the series price between 92%
    // and 98% of the time (binomial sd 1.1%: a correct engine fails this about
    // once in 300 runs of this test, a biased or overconfident one reliably).
    let cases = [
        merton(Call, 100.0, 100.0, 1.0, 0.03, 0.0, 0.2, 0.5, -0.1, 0.15),
        merton(Put, 100.0, 80.0, 0.5, 0.03, 0.0, 0.2, 1.0, -0.2, 0.1),
    ];
    for c in cases {
        let exact = series::price(&c).unwrap().greeks.price;
        let seeds = 400;
        let covered = (0..seeds)
            .filter(|&s| {
                let e = monte_carlo::price(&c, stream_key(s, "coverage"), &cfg(50_000));
                e.ci95.0 <= exact && exact <= e.ci95.1
            })
            .count();
        let share = covered as f64 / seeds as f64;
        eprintln!("coverage {share:.3} for {:?} K={}", c.kind, c.strike);
        assert!((0.92..=0.98).contains(&share), "coverage {share}");
    }
}

#[test]
fn thread_count_does_not_change_the_digits() {
    let c = merton(Put, 100.0, 85.0, 0.5, 0.03, 0.0, 0.2, 0.8, -0.2, 0.15);
    let run = |threads| {
        rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .unwrap()
            .install(|| monte_carlo::price(&c, stream_key(3, "row-7"), &cfg(1 << 19)))
    };
    let (a, b, d) = (run(1), run(2), run(3));
    assert_eq!(a.price.to_bits(), b.price.to_bits());
    assert_eq!(a.std_error.to_bits(), b.std_error.to_bits());
    assert_eq!(a.price.to_bits(), d.price.to_bits());
}

#[test]
fn stream_depends_on_seed_and_id_only() {
    let c = merton(Call, 100.0, 100.0, 1.0, 0.03, 0.0, 0.2, 0.5, -0.1, 0.15);
    let a = monte_carlo::price(&c, stream_key(9, "A-1"), &cfg(1 << 16));
    let b = monte_carlo::price(&c, stream_key(9, "A-1"), &cfg(1 << 16));
    let other = monte_carlo::price(&c, stream_key(9, "A-2"), &cfg(1 << 16));
    assert_eq!(a.price.to_bits(), b.price.to_bits());
    assert_ne!(a.price.to_bits(), other.price.to_bits());
}

#[test]
fn importance_sampling_reduces_variance_on_a_crash_put() {
    // Deep out-of-the-money put (K = 40% of spot) on rare, large negative
    // jumps: almost every in-the-money path has a jump. Variance per path,
    // antithetics and control variate on in both runs.
    let c = merton(Put, 100.0, 40.0, 0.5, 0.03, 0.0, 0.15, 0.1, -0.7, 0.1);
    let exact = series::price(&c).unwrap().greeks.price;
    let plain = monte_carlo::price(
        &c,
        11,
        &McConfig {
            intensity: IntensityChoice::Fixed(1.0),
            ..cfg(1 << 20)
        },
    );
    let auto = monte_carlo::price(&c, 11, &cfg(1 << 20));
    let ratio = (plain.std_error / auto.std_error).powi(2);
    eprintln!(
        "crash put {exact:.4e}: {} gamma {} theta {}, variance ratio {ratio:.1}, VRF vs plain {:.1}, ESS {:.0}",
        auto.method.as_str(),
        auto.gamma,
        auto.theta,
        auto.variance_reduction,
        auto.ess
    );
    // The pilot picks a change of measure (jump count or Esscher tilt).
    assert!(auto.gamma > 1.0 || auto.theta != 0.0);
    assert!(ratio > 5.0, "variance ratio {ratio}");
    assert!(auto.variance_reduction > 5.0);
    assert!(((auto.price - exact) / auto.std_error).abs() < 4.0);
}

#[test]
fn target_standard_error_is_met() {
    let c = merton(Call, 100.0, 110.0, 0.5, 0.03, 0.0, 0.2, 0.5, -0.1, 0.15);
    let e = monte_carlo::price(
        &c,
        4,
        &McConfig {
            work: Work::AbsoluteSe(2e-3),
            ..McConfig::default()
        },
    );
    assert!(e.std_error <= 2e-3, "{}", e.std_error);
    let r = monte_carlo::price(
        &c,
        4,
        &McConfig {
            work: Work::RelativeSe(1e-3),
            ..McConfig::default()
        },
    );
    assert!(r.std_error <= 1e-3 * r.price);
}

#[test]
fn value_stability_of_a_fixed_seed() {
    // Regression pin, not a correctness check: detects any change of the
    // random stream (generator, seeding, block layout or draw order). Update
    // the pinned digits deliberately, with a changelog entry, if the stream
    // changes on purpose. The correctness of the value is the z-score.
    let c = merton(Call, 100.0, 100.0, 1.0, 0.03, 0.0, 0.2, 0.5, -0.1, 0.15);
    let e = monte_carlo::price(
        &c,
        stream_key(20261201, "pin"),
        &McConfig {
            intensity: IntensityChoice::Fixed(1.0),
            ..cfg(1 << 16)
        },
    );
    let exact = series::price(&c).unwrap().greeks.price;
    assert!(((e.price - exact) / e.std_error).abs() < 4.0);
    assert_eq!(format!("{:.12}", e.price), PINNED);
}

// Changed deliberately (issue 10): the call at K = 100 < forward is now
// simulated as the out-of-the-money put and converted by parity; was
// 10.607528108200.
const PINNED: &str = "10.607528108201";
