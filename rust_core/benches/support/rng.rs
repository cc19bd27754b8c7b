//! A small xorshift generator shared by the criterion benchmarks and the count probe: they
//! need reproducible uniform points and boxes, not external randomness.

pub struct Rng(pub u64);

impl Rng {
    /// A float in `[0, 1)`.
    pub fn unit(&mut self) -> f64 {
        self.0 ^= self.0 << 13;
        self.0 ^= self.0 >> 7;
        self.0 ^= self.0 << 17;
        (self.0 >> 11) as f64 / (1u64 << 53) as f64
    }

    /// `n` floats in `[0, 1)`.
    pub fn column(&mut self, n: usize) -> Vec<f64> {
        (0..n).map(|_| self.unit()).collect()
    }
}
