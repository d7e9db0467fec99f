//! The synthetic book shared by the benchmarks: typical parameters
//! (`lambda T` below 5, expiries 1 week to 3 years, strikes 60%-150% of
//! spot, half calls and half puts), from a fixed linear-congruential
//! sequence so that every run prices the same rows.

/// A reproducible stream of uniforms in [0, 1).
pub struct Lcg(u64);

impl Lcg {
    pub fn new(seed: u64) -> Self {
        Lcg(seed)
    }

    pub fn next(&mut self) -> f64 {
        self.0 = self
            .0
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        (self.0 >> 11) as f64 / (1u64 << 53) as f64
    }
}

/// One row's parameters.
pub struct TypicalRow {
    pub call: bool,
    pub spot: f64,
    pub strike: f64,
    pub expiry: f64,
    pub rate: f64,
    pub div_yield: f64,
    pub vol: f64,
    pub jump_rate: f64,
    pub jump_mean: f64,
    pub jump_vol: f64,
}

/// Row `i` of the book, drawing from `u`.
pub fn typical_row(i: usize, u: &mut Lcg) -> TypicalRow {
    let spot = 20.0 + 480.0 * u.next();
    let expiry = 0.02 + 2.98 * u.next();
    let jump_rate = 0.05 + u.next() * (1.6f64.min(4.9 / expiry) - 0.05);
    TypicalRow {
        call: i % 2 == 1,
        spot,
        strike: spot * (0.6 + 0.9 * u.next()),
        expiry,
        rate: 0.06 * u.next(),
        div_yield: 0.03 * u.next(),
        vol: 0.1 + 0.4 * u.next(),
        jump_rate,
        jump_mean: -0.3 + 0.4 * u.next(),
        jump_vol: 0.02 + 0.38 * u.next(),
    }
}
