//! A small seeded random source and TPDF dither.
//!
//! TPDF dither is the sum of two independent uniform variables of 1 LSB each: 2 LSB peak to peak,
//! triangular density, which makes the quantization error's first two moments independent of the
//! signal and triples the noise power of an undithered quantizer (-4.77 dB in SNR). Source:
//! Lipshitz, Wannamaker, Vanderkooy, "Quantization and dither: a theoretical survey",
//! JAES 40(5), 1992.

/// SplitMix64 (Steele, Lea, Flood, "Fast splittable pseudorandom number generators", OOPSLA 2014):
/// seeded, deterministic, fast, good enough for dither and test noise.
#[derive(Debug, Clone)]
pub struct Rng(u64);

impl Rng {
    pub fn new(seed: u64) -> Self {
        Rng(seed)
    }

    pub fn next_u64(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }

    /// Uniform in [0, 1), 53 bits.
    pub fn uniform(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 * (1.0 / (1u64 << 53) as f64)
    }

    /// Standard normal (Box-Muller).
    pub fn gaussian(&mut self) -> f64 {
        let u1 = 1.0 - self.uniform();
        let u2 = self.uniform();
        (-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * u2).cos()
    }

    /// TPDF dither in LSB: triangular on (-1, 1).
    pub fn tpdf(&mut self) -> f64 {
        self.uniform() - self.uniform()
    }
}

/// Quantize `x` (full scale 1.0) to a `bits`-bit integer code with TPDF dither, clamped to the
/// code range. Exact zero stays digital silence (no dither), so a stimulus's lead and tail are
/// silent and a recorder's level meter shows where the signal starts.
pub fn quantize_tpdf(x: f64, bits: u16, rng: &mut Rng) -> i32 {
    if x == 0.0 {
        return 0;
    }
    let half = (1i64 << (bits - 1)) as f64;
    let v = (x * half + rng.tpdf()).round();
    v.clamp(-half, half - 1.0) as i32
}
