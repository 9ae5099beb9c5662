//! NCO derotation before the FFT: removes a carrier frequency offset by multiplying the
//! samples with `e^{jφ[n]}`, the phase coming from a wrapping 32-bit accumulator.
//!
//! ## Phase accumulator (both formats)
//!
//! The phase is a `u32` read as a fraction of a turn: one turn is `2^32`, so wrapping addition
//! is exact modular phase arithmetic. Sample `n` of a call is multiplied by `e^{jφ}` with
//! `φ = 2π·phase/2^32`, then the phase advances by the increment. A CFO of `ε` subcarrier
//! spacings (the signal rotates by `e^{+j2πεn/N}`) is removed by the increment
//! `round(−ε/N · 2^32)` (see [`increment_for_cfo`]; a step of `2^-32` turn per sample, so the
//! residual frequency error is below `N·2^-33` subcarrier spacings). The phase continues across
//! calls: a symbol split into chunks is derotated exactly as in one call, and
//! [`NcoQ15::advance`] / [`NcoF32::advance`] move the phase over samples that are not
//! derotated (a cyclic prefix that is discarded), so the frame receiver keeps one phase
//! across symbols and prefixes. [`NcoQ15::phase`] reads it back.
//!
//! ## f32 ([`NcoF32`])
//!
//! `e^{jφ}` from `libm::sincosf` of the phase converted to radians (an angle error below
//! `2^-24·π` rad from the conversion, plus `sincosf`'s own error of about one f32 ulp):
//! one `sincosf` and one complex multiply per sample.
//!
//! ## Q15 ([`NcoQ15`]): table, interpolation, rounding
//!
//! `cos φ` and `sin φ` come from [`SINE_QUARTER_Q15`], a quarter-wave sine table of
//! `2^8 = 256` intervals (257 entries including `sin(π/2)`, 514 bytes of flash) generated at
//! compile time by a `const fn` Taylor series evaluated in 128-bit integers (Q62), rounded to
//! Q15. No floating point runs on the device and nothing is computed at start-up.
//!
//! From the phase, the top 2 bits choose the quadrant, the next 8 bits the table interval and
//! the low 22 bits `f` interpolate linearly between its two entries:
//! `s = t[i] + ((t[i+1] − t[i])·f + 2^21) >> 22` (rounded, ties upward); `cos` reads the
//! mirrored position `2^30 − p` of the same table. The result is Q15 in `[−32768, 32768]` held
//! in `i32` ([`cos_sin_q15`]).
//!
//! The derotated sample is `y = x·(c + js)` with `i32` products and sums (bounded by
//! `|x|·|c + js| < 1.52·2^30`, no overflow), rounded once to Q15 as `(v + 2^14) >> 15`
//! (nearest, ties upward), saturated to `i16` (only a sample beyond the unit circle, e.g.
//! `(−1, −1)` turned by 45°, can saturate; [`NcoQ15::derotate`] counts them). No division,
//! no floating point: every target computes the same bits.
//!
//! ## Error of the Q15 path (stated; measured in `tests/tests/nco.rs` against f64 `sin`/`cos`)
//!
//! * Phasor `ĉ + jŝ` against `e^{jφ}`. Bound per component: ½ LSB table rounding,
//!   `h²/8 = 0.154` LSB interpolation (`h = π/512`), ½ LSB final rounding, so ≤ 1.16 LSB.
//!   Measured over 2^22 phases: maximum **1.02 LSB** per component; maximum `|ĉ + jŝ − e^{jφ}|`
//!   **1.35 LSB** (`4.1·10^-5`, the table's floor of **−87.7 dBc**); RMS **0.53 LSB**
//!   (−95.9 dB); maximum phase error `3.9·10^-5` rad; maximum amplitude error `3.8·10^-5`
//!   (0.0003 dB).
//! * Output rounding adds `2·(2^-15)²/12` per sample: −98.1 dBFS, absolute.
//! * So a signal at `P` dBFS leaves the derotation with an error power of at most
//!   `10·log10(10^-8.77 + 10^((−98.1 − P)/10))` dBc: **−83.8 dBc at −12 dBFS**.
//! * A constant derotated into a tone (65 536-point spectrum): spurious-free dynamic range
//!   **102.7 dBc** at full scale (error −93.9 dB) and 115.0 dBc at −12 dBFS (error −85.7 dB).
//! * A tone at a CFO of 0.3 subcarrier (N = 256, −12 dBFS): the NCO's own error leaves
//!   −85.7 dB of ICI (floor −83.8 dB), against −4.5 dB without derotation. Through the Q15
//!   FFT the off-bin level is −61.9 dB, the FFT's own rounding of a tone (−62.0 dB after an
//!   exact derotation): the NCO's error is invisible behind it.

use crate::fixed::{sat16, Cq15};
use crate::fixed_math::shift_round;
use crate::Cf32;

/// log2 of the number of table intervals per quarter turn.
pub const TABLE_BITS: u32 = 8;
/// Table intervals per quarter turn (`2^TABLE_BITS`).
pub const QUARTER_LEN: usize = 1 << TABLE_BITS;
/// Bits of the phase below the table index, used for the interpolation (`32 − 2 −
/// TABLE_BITS`).
const FRAC_BITS: u32 = 30 - TABLE_BITS;
/// One quarter turn in phase units.
const QUARTER_TURN: u32 = 1 << 30;

/// `π/2 · 2^62`, rounded (π to 30 digits, 3.14159265358979323846264338327…).
const HALF_PI_Q62: i128 = 7_244_019_458_077_122_842;

/// `sin a` for `a` in Q62, `0 ≤ a ≤ π/2`, in Q62: the Taylor series to the `a^27` term (the
/// next term is below `10^-23`), in 128-bit integers (products of two Q62 values stay below
/// `2^127`).
const fn sin_q62(a: i128) -> i128 {
    let a2 = (a * a) >> 62;
    let mut term = a;
    let mut sum = a;
    let mut k: i128 = 1;
    while k <= 13 {
        term = -((term * a2) >> 62) / ((2 * k) * (2 * k + 1));
        sum += term;
        k += 1;
    }
    sum
}

/// The quarter-wave table: entry `i` is `round(sin(π/2 · i/256) · 2^15)`, `i = 0 ..= 256`.
const fn sine_table() -> [u16; QUARTER_LEN + 1] {
    let mut t = [0u16; QUARTER_LEN + 1];
    let mut i = 0;
    while i <= QUARTER_LEN {
        let a = HALF_PI_Q62 * i as i128 / QUARTER_LEN as i128;
        let s = sin_q62(a);
        // Const evaluation: an out-of-range index is a compile error, never a panic.
        #[allow(clippy::indexing_slicing)]
        {
            t[i] = ((s + (1i128 << 46)) >> 47) as u16;
        }
        i += 1;
    }
    t
}

/// Quarter-wave sine table, Q15: `SINE_QUARTER_Q15[i] = round(2^15 · sin(π/2 · i/256))`,
/// `i = 0 ..= 256` (the last entry is `32768`). Computed at compile time in integers.
pub const SINE_QUARTER_Q15: [u16; QUARTER_LEN + 1] = sine_table();

/// `sin(π/2 · p/2^30)` for `p` in `0 ..= 2^30`, Q15, by linear interpolation in the table.
#[inline(always)]
fn quarter_sin(p: u32) -> i32 {
    let i = (p >> FRAC_BITS) as usize;
    let f = (p & ((1 << FRAC_BITS) - 1)) as i32;
    let a = SINE_QUARTER_Q15.get(i).copied().map_or(0, i32::from);
    let b = SINE_QUARTER_Q15.get(i + 1).copied().map_or(a, i32::from);
    // b − a is in 0..=202 and f < 2^22: the product stays below 2^30.
    a + (((b - a) * f + (1 << (FRAC_BITS - 1))) >> FRAC_BITS)
}

/// `(cos φ, sin φ)` of `φ = 2π·phase/2^32` in Q15 (values in `[−32768, 32768]`), from the
/// quarter-wave table with linear interpolation; see the module docs for the error
/// (at most 1.02 LSB per component and 1.35 LSB in magnitude, measured).
#[inline]
pub fn cos_sin_q15(phase: u32) -> (i32, i32) {
    let p = phase & (QUARTER_TURN - 1);
    let s = quarter_sin(p);
    let c = quarter_sin(QUARTER_TURN - p);
    match phase >> 30 {
        0 => (c, s),
        1 => (-s, c),
        2 => (-c, -s),
        _ => (s, -c),
    }
}

/// The accumulator increment (phase units of `2^-32` turn per sample) that removes a CFO of
/// `cfo` subcarrier spacings at FFT size `fft_len`: `round(−cfo/N · 2^32)` after reducing
/// `−cfo/N` to the nearest fraction of a turn in `[−½, ½]`. Evaluated in f64 (IEEE
/// arithmetic and `libm::round`: the same bits on every target); once per frame. A NaN or
/// infinite CFO, or `fft_len = 0`, gives 0.
pub fn increment_for_cfo(cfo: f32, fft_len: usize) -> u32 {
    let turns = -f64::from(cfo) / fft_len as f64;
    let frac = turns - libm::round(turns);
    let v = libm::round(frac * 4_294_967_296.0);
    // `as i64` maps NaN to 0; the value is within ±2^31, and `as u32` wraps it into a phase.
    (v as i64) as u32
}

/// The same increment from a CFO in Q16 subcarrier spacings (`cfo_q16 / 65536`) with no
/// floating point: `round(−cfo_q16 · 2^16 / N)` (nearest, ties away from zero), wrapped into
/// a phase. `fft_len` must be a power of two (every [`crate::Numerology`] is); otherwise its
/// lowest set bit is used.
pub fn increment_for_cfo_q16(cfo_q16: i32, fft_len: usize) -> u32 {
    let log2_n = fft_len.trailing_zeros() as i32;
    let v = -(i64::from(cfo_q16) << 16);
    shift_round(v, log2_n) as u32
}

/// The CFO, in subcarrier spacings at FFT size `fft_len`, that `increment` removes (the
/// inverse of [`increment_for_cfo`], within `±N/2`). For reports; f32.
pub fn cfo_of_increment(increment: u32, fft_len: usize) -> f32 {
    (-(f64::from(increment as i32)) / 4_294_967_296.0 * fft_len as f64) as f32
}

macro_rules! accumulator_api {
    () => {
        /// An NCO at phase 0 with increment 0 (no derotation until a CFO is set).
        pub const fn new() -> Self {
            Self {
                phase: 0,
                increment: 0,
            }
        }

        /// An NCO at phase 0 removing a CFO of `cfo` subcarrier spacings at FFT size
        /// `fft_len` (see [`increment_for_cfo`]).
        pub fn with_cfo(cfo: f32, fft_len: usize) -> Self {
            Self {
                phase: 0,
                increment: increment_for_cfo(cfo, fft_len),
            }
        }

        /// Sets the frequency to remove a CFO of `cfo` subcarrier spacings at FFT size
        /// `fft_len`; the phase is kept (no phase jump).
        pub fn set_cfo(&mut self, cfo: f32, fft_len: usize) {
            self.increment = increment_for_cfo(cfo, fft_len);
        }

        /// Sets the increment directly, `2^-32` turn per sample (e.g. from
        /// [`increment_for_cfo_q16`]); the phase is kept.
        pub fn set_increment(&mut self, increment: u32) {
            self.increment = increment;
        }

        /// The increment, `2^-32` turn per sample.
        pub fn increment(&self) -> u32 {
            self.increment
        }

        /// The phase the next sample will be multiplied by, `2^-32` turn (`e^{j2π·phase/2^32}`).
        pub fn phase(&self) -> u32 {
            self.phase
        }

        /// Sets the phase of the next sample, `2^-32` turn.
        pub fn set_phase(&mut self, phase: u32) {
            self.phase = phase;
        }

        /// Sets the phase back to 0, keeping the frequency (start of a new frame).
        pub fn reset(&mut self) {
            self.phase = 0;
        }

        /// Advances the phase over `samples` samples that are not derotated (e.g. a
        /// discarded cyclic prefix): exactly as if they had been (`phase += samples ·
        /// increment` modulo 2^32).
        pub fn advance(&mut self, samples: u64) {
            self.phase = self
                .phase
                .wrapping_add(self.increment.wrapping_mul(samples as u32));
        }
    };
}

/// f32 NCO: a wrapping 32-bit phase accumulator and `libm::sincosf` per sample.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct NcoF32 {
    phase: u32,
    increment: u32,
}

impl NcoF32 {
    accumulator_api!();

    /// Multiplies each sample by `e^{j2π·phase/2^32}` and advances the phase, in place
    /// (samples as fractions of full scale; any length, phase continues across calls).
    pub fn derotate(&mut self, samples: &mut [Cf32]) {
        // 2π / 2^32 radians per phase unit.
        const RAD_PER_UNIT: f32 = core::f32::consts::TAU / 4_294_967_296.0;
        for x in samples.iter_mut() {
            let angle = (self.phase as i32) as f32 * RAD_PER_UNIT;
            let (s, c) = libm::sincosf(angle);
            *x *= Cf32::new(c, s);
            self.phase = self.phase.wrapping_add(self.increment);
        }
    }
}

/// Q15 NCO: a wrapping 32-bit phase accumulator and the quarter-wave table with linear
/// interpolation ([`cos_sin_q15`]); integer arithmetic only, bit-exact across targets.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct NcoQ15 {
    phase: u32,
    increment: u32,
}

impl NcoQ15 {
    accumulator_api!();

    /// Multiplies each Q15 sample by the table's `e^{j2π·phase/2^32}` and advances the phase,
    /// in place; rounds each part once to Q15 (nearest, ties upward) and saturates. Returns
    /// how many I or Q components saturated (only samples beyond the unit circle can).
    pub fn derotate(&mut self, samples: &mut [Cq15]) -> usize {
        let mut saturated = 0usize;
        for x in samples.iter_mut() {
            let (c, s) = cos_sin_q15(self.phase);
            let (xr, xi) = (i32::from(x.re), i32::from(x.im));
            // |x|·|c + js| < 2^15·√2 · 2^15·(1 + 2^-14): both sums fit in i32.
            let re = (xr * c - xi * s + (1 << 14)) >> 15;
            let im = (xr * s + xi * c + (1 << 14)) >> 15;
            let (yr, yi) = (sat16(re), sat16(im));
            saturated += usize::from(i32::from(yr) != re) + usize::from(i32::from(yi) != im);
            *x = Cq15::new(yr, yi);
            self.phase = self.phase.wrapping_add(self.increment);
        }
        saturated
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn table_end_points_and_quadrants() {
        // sin 0 = 0, sin π/2 = 1, sin π/6 = 1/2 (entry 256/3 is not integral; check π/4 ≈
        // 0.70710678 instead: round(23170.475) = 23170).
        assert_eq!(SINE_QUARTER_Q15[0], 0);
        assert_eq!(SINE_QUARTER_Q15[256], 32768);
        assert_eq!(SINE_QUARTER_Q15[128], 23170);
        assert_eq!(cos_sin_q15(0), (32768, 0));
        assert_eq!(cos_sin_q15(1 << 30), (0, 32768));
        assert_eq!(cos_sin_q15(1 << 31), (-32768, 0));
        assert_eq!(cos_sin_q15(3 << 30), (0, -32768));
        assert_eq!(cos_sin_q15(1 << 29), (23170, 23170));
    }

    #[test]
    fn increments() {
        // −0.25/256 turn per sample is −2^22 units.
        assert_eq!(increment_for_cfo(0.25, 256), (-(1i64 << 22)) as u32);
        assert_eq!(increment_for_cfo_q16(1 << 14, 256), (-(1i64 << 22)) as u32);
        assert_eq!(increment_for_cfo(f32::NAN, 64), 0);
        assert!((cfo_of_increment(increment_for_cfo(0.3, 64), 64) - 0.3).abs() < 1e-6);
    }

    #[test]
    fn derotating_one_sample_at_each_quadrant() {
        let mut nco = NcoQ15::new();
        nco.set_increment(1 << 30);
        let mut x = [Cq15::new(16384, 0); 4];
        assert_eq!(nco.derotate(&mut x), 0);
        assert_eq!(
            x,
            [
                Cq15::new(16384, 0),
                Cq15::new(0, 16384),
                Cq15::new(-16384, 0),
                Cq15::new(0, -16384)
            ]
        );
        assert_eq!(nco.phase(), 0);
        // (−1, −1) turned by 45° has a part of −√2: saturates.
        let mut nco = NcoQ15::new();
        nco.set_phase(1 << 29);
        let mut y = [Cq15::new(i16::MIN, i16::MIN)];
        assert_eq!(nco.derotate(&mut y), 1);
        assert_eq!(y[0].im, i16::MIN);
    }
}
