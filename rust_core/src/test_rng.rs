//! One seeded generator for the unit tests: Marsaglia's xorshift64 (13, 7, 17), the same
//! stream wherever a test needs reproducible random numbers without a dependency.

/// The generator's state; a zero seed is mapped to one, since xorshift stays at zero.
pub(crate) struct XorShift(u64);

impl XorShift {
    pub(crate) fn new(seed: u64) -> Self {
        XorShift(seed.max(1))
    }

    pub(crate) fn next_u64(&mut self) -> u64 {
        let mut s = self.0;
        s ^= s << 13;
        s ^= s >> 7;
        s ^= s << 17;
        self.0 = s;
        s
    }

    /// Uniform in `[0, 1)`, from the top 53 bits.
    pub(crate) fn unit(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 / (1u64 << 53) as f64
    }

    /// Uniform-ish in `[0, below)` (modulo bias is irrelevant for tests).
    pub(crate) fn below(&mut self, below: u64) -> u64 {
        self.next_u64() % below
    }
}
