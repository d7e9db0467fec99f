//! A small reproducible generator (xorshift64) for the unit tests' random
//! inputs, so that they need no extra crate and every run sees the same cases.

pub(crate) struct TestRng(u64);

impl TestRng {
    /// A generator from a non-zero seed.
    pub(crate) fn new(seed: u64) -> Self {
        TestRng(seed)
    }

    pub(crate) fn next_u64(&mut self) -> u64 {
        self.0 ^= self.0 << 13;
        self.0 ^= self.0 >> 7;
        self.0 ^= self.0 << 17;
        self.0
    }

    /// Roughly uniform in `0..k`.
    pub(crate) fn below(&mut self, k: u64) -> u64 {
        self.next_u64() % k
    }

    /// Uniform in [0, 1).
    pub(crate) fn unit(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 / (1u64 << 53) as f64
    }
}
