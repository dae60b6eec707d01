//! Deterministic randomness for the demo scene: a xorshift generator and value noise.

/// xorshift64* (Vigna 2016, "An experimental exploration of Marsaglia's xorshift generators,
/// scrambled"): small, fast and plenty for textures.
#[derive(Debug, Clone)]
pub(crate) struct XorShift(u64);

impl XorShift {
    pub fn new(seed: u64) -> Self {
        // Spread the seed and avoid the all-zero state.
        Self(mix64(seed ^ 0x9e37_79b9_7f4a_7c15) | 1)
    }
    pub fn next_u64(&mut self) -> u64 {
        let mut x = self.0;
        x ^= x >> 12;
        x ^= x << 25;
        x ^= x >> 27;
        self.0 = x;
        x.wrapping_mul(0x2545_f491_4f6c_dd1d)
    }
    /// Uniform in [0, 1).
    pub fn unit(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 / (1u64 << 53) as f64
    }
    /// Uniform in [lo, hi).
    pub fn range(&mut self, lo: f64, hi: f64) -> f64 {
        lo + (hi - lo) * self.unit()
    }
}

/// A 64-bit finaliser (the "splitmix64" mixing steps), used as a lattice hash.
pub(crate) fn mix64(mut z: u64) -> u64 {
    z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
    z ^ (z >> 31)
}

/// A value in [0, 1) for an integer lattice point, fixed by the seed.
pub(crate) fn lattice(seed: u64, ix: i64, iy: i64) -> f64 {
    let h = mix64(seed ^ mix64(ix as u64) ^ mix64((iy as u64).wrapping_add(0x632b_e59b_d9b4_e019)));
    (h >> 11) as f64 / (1u64 << 53) as f64
}

/// Smooth value noise in [0, 1): lattice values blended with a quintic fade.
pub(crate) fn value_noise(seed: u64, x: f64, y: f64) -> f64 {
    let (fx, fy) = (x.floor(), y.floor());
    let (ix, iy) = (fx as i64, fy as i64);
    let fade = |t: f64| t * t * t * (t * (t * 6.0 - 15.0) + 10.0);
    let (u, v) = (fade(x - fx), fade(y - fy));
    let a = lattice(seed, ix, iy);
    let b = lattice(seed, ix + 1, iy);
    let c = lattice(seed, ix, iy + 1);
    let d = lattice(seed, ix + 1, iy + 1);
    let top = a + (b - a) * u;
    let bottom = c + (d - c) * u;
    top + (bottom - top) * v
}

/// Fractal sum of `octaves` layers of value noise, each twice the frequency and half the
/// amplitude of the one before; normalised to about [0, 1).
pub(crate) fn fbm(seed: u64, x: f64, y: f64, octaves: u32) -> f64 {
    let (mut sum, mut amp, mut freq, mut norm) = (0.0, 1.0, 1.0, 0.0);
    for k in 0..octaves {
        sum += amp * value_noise(seed.wrapping_add(u64::from(k) * 7919), x * freq, y * freq);
        norm += amp;
        amp *= 0.5;
        freq *= 2.0;
    }
    sum / norm
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn generator_is_deterministic_and_spread() {
        let mut a = XorShift::new(7);
        let mut b = XorShift::new(7);
        let xs: Vec<f64> = (0..1000).map(|_| a.unit()).collect();
        assert!(
            xs.iter()
                .zip((0..1000).map(|_| b.unit()))
                .all(|(x, y)| *x == y)
        );
        let mean = xs.iter().sum::<f64>() / 1000.0;
        assert!((mean - 0.5).abs() < 0.05, "{mean}");
        assert!(xs.iter().all(|x| (0.0..1.0).contains(x)));
        assert_ne!(XorShift::new(8).next_u64(), XorShift::new(7).next_u64());
    }

    #[test]
    fn noise_is_continuous_and_in_range() {
        for k in 0..500 {
            let x = k as f64 * 0.137 - 20.0;
            let y = k as f64 * 0.071 + 3.0;
            let v = value_noise(3, x, y);
            assert!((0.0..1.0).contains(&v));
            assert!((value_noise(3, x + 1e-6, y) - v).abs() < 1e-4);
            let f = fbm(3, x, y, 4);
            assert!((0.0..1.0).contains(&f));
        }
        // At lattice points the noise equals the lattice value.
        assert_eq!(value_noise(5, 2.0, -3.0), lattice(5, 2, -3));
    }
}
