//! SplitMix64 (Steele, Lea & Flood, "Fast splittable pseudorandom number generators", OOPSLA
//! 2014): the one small deterministic generator the benchmarks and tests draw synthetic data
//! from, so a seed names the same data everywhere. Not for anything that must be unpredictable.

/// SplitMix64 seeded with its field: the k-th call to [`SplitMix64::next_u64`] returns output k
/// of the seed.
#[derive(Debug, Clone)]
pub struct SplitMix64(pub u64);

impl SplitMix64 {
    /// The next 64 random bits.
    pub fn next_u64(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }

    /// Uniform in [0, 1) with 53 random bits.
    pub fn next_f64(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 * (1.0 / (1u64 << 53) as f64)
    }

    /// An index below `n` (≥ 1), from [`SplitMix64::next_f64`].
    pub fn below(&mut self, n: usize) -> usize {
        (self.next_f64() * n as f64) as usize % n
    }
}
