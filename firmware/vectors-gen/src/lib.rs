//! Deterministic Q15 test signals, generated bit-identically on the host and on the targets.
//!
//! The firmware (`firmware/src/bin/vectors.rs`, `cost.rs`) and the host checker (`xtask`) both
//! call [`for_each_sample`]; every floating-point step goes through the `libm` crate (never the
//! host's `std` float methods), so the i16 values are the same bits on x86-64, Cortex-M4F and
//! Cortex-M0. The firmware prints an FNV-1a hash of its input ([`fnv1a32`]) so the host can
//! confirm this before it compares outputs.
//!
//! Levels are in dBFS: total complex power (re² + im²) relative to a full-scale complex
//! sinusoid, i.e. power 1.0 with Q15 samples read as fractions `v / 32768`.
//!
//! Its checks live in `xtask/src/generator_tests.rs` (a host workspace member, so CI runs them).

#![no_std]
#![deny(missing_docs)]

pub mod coding;
pub mod rx;
pub mod sync;
pub mod track;

/// Q15 full scale in LSB: a Q15 fraction `v` is `v / FULL_SCALE`.
pub const FULL_SCALE: f64 = 32768.0;
/// Largest magnitude produced; samples are clipped to `±CLIP`.
pub const CLIP: f64 = 32767.0;

/// What a test vector contains.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Kind {
    /// Circular complex Gaussian noise with the given total complex power, dBFS (clipped at ±CLIP).
    Gaussian {
        /// Total complex power, dBFS.
        dbfs: i32,
    },
    /// Complex tone `CLIP · e^{j2π·bin·n/N}` (full scale), landing exactly on `bin`.
    Tone {
        /// FFT bin of the tone.
        bin: usize,
    },
}

/// A named input kind.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Case {
    /// Label printed by the firmware and the host (no spaces).
    pub label: &'static str,
    /// The signal.
    pub kind: Kind,
}

/// The input kinds of the bit-exact vector check.
pub const CASES: [Case; 6] = [
    Case {
        label: "gauss-12dBFS",
        kind: Kind::Gaussian { dbfs: -12 },
    },
    // -20 and -26 dBFS: inputs whose first stage shifts by 1 and 0 (every first-stage path).
    Case {
        label: "gauss-20dBFS",
        kind: Kind::Gaussian { dbfs: -20 },
    },
    Case {
        label: "gauss-26dBFS",
        kind: Kind::Gaussian { dbfs: -26 },
    },
    Case {
        label: "gauss-40dBFS",
        kind: Kind::Gaussian { dbfs: -40 },
    },
    Case {
        label: "gauss0dBFS",
        kind: Kind::Gaussian { dbfs: 0 },
    },
    Case {
        label: "tone-bin3",
        kind: Kind::Tone { bin: 3 },
    },
];

/// Seed of case `case_index` at size `n`: distinct per case and size, fixed forever.
pub fn seed(case_index: usize, n: usize) -> u64 {
    0x9e37_79b9_7f4a_7c15 ^ ((case_index as u64) << 32) ^ (n as u64)
}

/// Marsaglia's xorshift64 (G. Marsaglia, "Xorshift RNGs", J. Stat. Softw. 8(14), 2003; the
/// shift triple 13, 7, 17 is one listed there). Never yields 0 from a nonzero state.
#[derive(Clone, Debug)]
pub struct XorShift64(u64);

impl XorShift64 {
    /// A generator; a zero seed is replaced by a fixed nonzero one.
    pub fn new(seed: u64) -> Self {
        Self(if seed == 0 {
            0x2545_f491_4f6c_dd1d
        } else {
            seed
        })
    }

    /// Next 64-bit output.
    pub fn next_u64(&mut self) -> u64 {
        let mut x = self.0;
        x ^= x << 13;
        x ^= x >> 7;
        x ^= x << 17;
        self.0 = x;
        x
    }

    /// Uniform in (0, 1], 53-bit resolution.
    pub fn open_unit(&mut self) -> f64 {
        ((self.next_u64() >> 11) + 1) as f64 * (1.0 / 9_007_199_254_740_992.0)
    }

    /// Uniform in [0, 1), 53-bit resolution.
    pub fn unit(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 * (1.0 / 9_007_199_254_740_992.0)
    }
}

/// Rounds half away from zero and clips to `±CLIP`.
pub(crate) fn to_q15(v: f64) -> i16 {
    let r = libm::round(v);
    if r >= CLIP {
        CLIP as i16
    } else if r <= -CLIP {
        -(CLIP as i16)
    } else {
        r as i16
    }
}

/// Calls `emit(index, re, im)` for the `n` samples of `kind` from `seed`.
///
/// Gaussian: Box–Muller (G. E. P. Box and M. E. Muller, Ann. Math. Statist. 29(2), 1958),
/// one complex sample per pair of uniforms: `r = sqrt(-2 ln u1)`, `θ = 2π u2`,
/// `(re, im) = σ r (cos θ, sin θ)` with `σ = FULL_SCALE · sqrt(P / 2)` per component and
/// `P = 10^(dBFS/10)` the total complex power.
pub fn for_each_sample(kind: Kind, seed: u64, n: usize, mut emit: impl FnMut(usize, i16, i16)) {
    match kind {
        Kind::Gaussian { dbfs } => {
            let power = libm::pow(10.0, f64::from(dbfs) / 10.0);
            let sigma = FULL_SCALE * libm::sqrt(power / 2.0);
            let mut rng = XorShift64::new(seed);
            for i in 0..n {
                let r = libm::sqrt(-2.0 * libm::log(rng.open_unit()));
                let theta = 2.0 * core::f64::consts::PI * rng.unit();
                emit(
                    i,
                    to_q15(sigma * r * libm::cos(theta)),
                    to_q15(sigma * r * libm::sin(theta)),
                );
            }
        }
        Kind::Tone { bin } => {
            for i in 0..n {
                // Integer phase index keeps the argument in [0, 2π): exact for any n.
                let k = (bin.wrapping_mul(i)).checked_rem(n).unwrap_or(0);
                let theta = 2.0 * core::f64::consts::PI * k as f64 / n as f64;
                emit(
                    i,
                    to_q15(CLIP * libm::cos(theta)),
                    to_q15(CLIP * libm::sin(theta)),
                );
            }
        }
    }
}

/// FNV-1a, 32 bit (the published offset basis 0x811c9dc5 and prime 0x01000193), over the
/// little-endian bytes of `words`.
#[derive(Clone, Copy, Debug)]
pub struct Fnv1a32(u32);

impl Default for Fnv1a32 {
    fn default() -> Self {
        Self(0x811c_9dc5)
    }
}

impl Fnv1a32 {
    /// Feeds one 16-bit word (little-endian bytes).
    pub fn push_i16(&mut self, v: i16) {
        for b in v.to_le_bytes() {
            self.0 = (self.0 ^ u32::from(b)).wrapping_mul(0x0100_0193);
        }
    }

    /// The hash so far.
    pub fn finish(&self) -> u32 {
        self.0
    }
}
