//! Q15 fixed-point numbers.
//!
//! A Q15 value is an `i16` read as `value / 32768`, so it spans `[-1, 1 - 2^-15]`. Complex Q15
//! samples ([`Cq15`]) pack the real part in the low and the imaginary part in the high
//! half-word of a 32-bit word, which is the layout the Cortex-M4 dual 16-bit instructions work
//! on. Conversions from float round to nearest and saturate.

use crate::Cf32;

/// One complex Q15 sample: `re` and `im` as Q15 fractions. 4-byte aligned so a sample can be
/// loaded as one 32-bit word (real part in the low half-word).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[repr(C, align(4))]
pub struct Cq15 {
    /// Real part, Q15.
    pub re: i16,
    /// Imaginary part, Q15.
    pub im: i16,
}

/// Full scale of Q15: the value 1.0 (not representable; `i16::MAX` is `1 - 2^-15`).
pub const Q15_ONE: f32 = 32768.0;

impl Cq15 {
    /// Zero.
    pub const ZERO: Cq15 = Cq15 { re: 0, im: 0 };

    /// A sample from its parts.
    pub const fn new(re: i16, im: i16) -> Self {
        Self { re, im }
    }
    /// The packed 32-bit word (real part in bits 0..16, imaginary in 16..32).
    pub const fn to_bits(self) -> u32 {
        (self.re as u16 as u32) | ((self.im as u16 as u32) << 16)
    }
    /// A sample from its packed 32-bit word.
    pub const fn from_bits(bits: u32) -> Self {
        Self {
            re: bits as u16 as i16,
            im: (bits >> 16) as u16 as i16,
        }
    }
    /// The value as complex f32 fractions (`x / 32768`).
    pub fn to_cf32(self) -> Cf32 {
        Cf32::new(f32::from(self.re) / Q15_ONE, f32::from(self.im) / Q15_ONE)
    }
    /// Nearest Q15 value of a complex fraction, saturated to `[-1, 1 - 2^-15]`; NaN gives 0.
    pub fn from_cf32(v: Cf32) -> Self {
        Self {
            re: sat_round_q15(v.re),
            im: sat_round_q15(v.im),
        }
    }
}

/// Rounds a fraction to Q15 (half away from zero) and saturates; NaN maps to 0.
pub fn sat_round_q15(x: f32) -> i16 {
    let v = (x * Q15_ONE).clamp(-32768.0, 32767.0);
    (v + if v >= 0.0 { 0.5 } else { -0.5 }) as i16
}

/// Saturates an `i32` to the `i16` range.
#[inline(always)]
pub const fn sat16(x: i32) -> i16 {
    if x > i16::MAX as i32 {
        i16::MAX
    } else if x < i16::MIN as i32 {
        i16::MIN
    } else {
        x as i16
    }
}

/// Bit length of the one's-complement magnitude of `v` (`v ^ (v >> 15)`): every `v` with
/// `magnitude_bits(v) = m` lies in `[-2^m, 2^m - 1]`. Used to choose block-floating-point
/// shifts without computing absolute values.
#[inline(always)]
pub const fn magnitude_bits(v: i16) -> u32 {
    let m = (v ^ (v >> 15)) as u16;
    16 - m.leading_zeros()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn packing_round_trips() {
        for (re, im) in [(0, 0), (-1, 1), (i16::MIN, i16::MAX), (1234, -4321)] {
            let c = Cq15::new(re, im);
            assert_eq!(Cq15::from_bits(c.to_bits()), c);
        }
        assert_eq!(Cq15::new(1, -1).to_bits(), 0xffff_0001);
    }

    #[test]
    fn conversions_round_and_saturate() {
        assert_eq!(sat_round_q15(0.5), 16384);
        assert_eq!(sat_round_q15(1.0), 32767);
        assert_eq!(sat_round_q15(-1.5), -32768);
        assert_eq!(sat_round_q15(f32::NAN), 0);
        assert_eq!(sat_round_q15(1.4 / 32768.0), 1);
        assert_eq!(sat_round_q15(-1.6 / 32768.0), -2);
    }

    #[test]
    fn magnitude_bits_bound_values() {
        // Definition: v in [-2^m, 2^m - 1] with m = magnitude_bits(v), and m is the least such.
        for v in i16::MIN..=i16::MAX {
            let m = magnitude_bits(v);
            let lo = -(1i32 << m);
            let hi = (1i32 << m) - 1;
            assert!((lo..=hi).contains(&i32::from(v)), "{v} {m}");
            if m > 0 {
                let (lo1, hi1) = (-(1i32 << (m - 1)), (1i32 << (m - 1)) - 1);
                assert!(!(lo1..=hi1).contains(&i32::from(v)), "{v} {m} not least");
            }
        }
    }
}
