//! Shared by the benchmarks: a fixed-seed generator for invented data.

/// splitmix64: a small, fixed-seed generator, enough for benchmark data.
pub struct SplitMix(pub u64);

impl SplitMix {
    /// A uniform draw in [0, 1).
    pub fn unit(&mut self) -> f64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        ((z ^ (z >> 31)) >> 11) as f64 / (1u64 << 53) as f64
    }
}
