//! Gray-mapped constellations with unit mean energy: BPSK, QPSK, 16-, 64- and 256-QAM.
//!
//! Square QAM is two independent Gray-coded PAM axes. On an axis with `m` bits, level index
//! `i` (0 = most negative) carries the bits `gray(i) = i ^ (i >> 1)`, most significant bit
//! first, at amplitude `a·(2i - (2^m - 1))`. The in-phase bits come first, then the
//! quadrature bits. For 16-QAM this gives `00 → -3, 01 → -1, 11 → +1, 10 → +3` per axis
//! (the mapping of REFERENCES item 10). The scale `a = sqrt(3 / (2 (M - 1)))` gives
//! `E|x|² = 1`. BPSK uses the in-phase axis only: bit 0 → -1, bit 1 → +1.

/// A constellation order.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Modulation {
    /// 1 bit per symbol, real axis.
    Bpsk,
    /// 2 bits per symbol (Gray, 1 per axis).
    Qpsk,
    /// 4 bits per symbol.
    Qam16,
    /// 6 bits per symbol.
    Qam64,
    /// 8 bits per symbol.
    Qam256,
}

impl Modulation {
    /// All orders, smallest first.
    pub const ALL: [Modulation; 5] = [
        Modulation::Bpsk,
        Modulation::Qpsk,
        Modulation::Qam16,
        Modulation::Qam64,
        Modulation::Qam256,
    ];

    /// Bits carried per constellation symbol.
    pub const fn bits_per_symbol(self) -> usize {
        match self {
            Self::Bpsk => 1,
            Self::Qpsk => 2,
            Self::Qam16 => 4,
            Self::Qam64 => 6,
            Self::Qam256 => 8,
        }
    }
    /// Bits per axis (BPSK: 1 on the in-phase axis, none on quadrature).
    pub const fn bits_per_axis(self) -> usize {
        match self {
            Self::Bpsk => 1,
            _ => self.bits_per_symbol() / 2,
        }
    }
    /// Amplitude `a` of the unit grid step (levels are `a·(±1, ±3, …)`), unit mean energy.
    pub const fn axis_scale(self) -> f32 {
        // sqrt(3 / (2 (M - 1))): BPSK 1, QPSK 1/sqrt 2, 16-QAM 1/sqrt 10, 64-QAM 1/sqrt 42,
        // 256-QAM 1/sqrt 170.
        match self {
            Self::Bpsk => 1.0,
            Self::Qpsk => core::f32::consts::FRAC_1_SQRT_2,
            Self::Qam16 => 0.316_227_77,
            Self::Qam64 => 0.154_303_35,
            Self::Qam256 => 0.076_696_5,
        }
    }
    /// Short lower-case name, e.g. `"16qam"`.
    pub const fn name(self) -> &'static str {
        match self {
            Self::Bpsk => "bpsk",
            Self::Qpsk => "qpsk",
            Self::Qam16 => "16qam",
            Self::Qam64 => "64qam",
            Self::Qam256 => "256qam",
        }
    }

    /// Maps `bits_per_symbol()` bits (each 0 or 1, I bits first) to a constellation point.
    /// Returns `None` when `bits` has the wrong length or holds a value other than 0/1.
    pub fn map(self, bits: &[u8]) -> Option<crate::Cf32> {
        if bits.len() != self.bits_per_symbol() || bits.iter().any(|&b| b > 1) {
            return None;
        }
        let m = self.bits_per_axis();
        let a = self.axis_scale();
        let (i_bits, q_bits) = bits.split_at_checked(m)?;
        let re = a * pam_level(i_bits);
        let im = if self == Self::Bpsk {
            0.0
        } else {
            a * pam_level(q_bits)
        };
        Some(crate::Cf32::new(re, im))
    }
}

impl Modulation {
    /// The constellation point nearest to `x` (hard decision; unit-energy grid).
    pub fn slice(self, x: crate::Cf32) -> crate::Cf32 {
        let a = self.axis_scale();
        let top = ((1usize << self.bits_per_axis()) - 1) as f32;
        // Nearest odd integer level in [−top, top], in grid units.
        let level = |v: f32| -> f32 {
            let u = if v.is_finite() { v / a } else { 0.0 };
            let odd = 2.0 * libm::floorf(u * 0.5) + 1.0;
            odd.clamp(-top, top) * a
        };
        if self == Self::Bpsk {
            crate::Cf32::new(level(x.re), 0.0)
        } else {
            crate::Cf32::new(level(x.re), level(x.im))
        }
    }
}

/// Gray code of `i`.
pub(crate) const fn gray(i: usize) -> usize {
    i ^ (i >> 1)
}

/// Inverse Gray code for up to 8-bit values.
pub(crate) const fn gray_inverse(g: usize) -> usize {
    let mut b = g;
    b ^= b >> 1;
    b ^= b >> 2;
    b ^= b >> 4;
    b
}

/// Integer-grid PAM level (±1, ±3, …) of the Gray label `bits` (MSB first).
fn pam_level(bits: &[u8]) -> f32 {
    let label = bits
        .iter()
        .fold(0usize, |acc, &b| (acc << 1) | usize::from(b));
    let index = gray_inverse(label);
    let levels = 1usize << bits.len();
    (2 * index) as f32 - (levels - 1) as f32
}

#[cfg(test)]
mod tests {

    #[test]
    fn slicing_returns_the_nearest_constellation_point() {
        // Every point, nudged by less than half the grid step in each direction, slices back
        // to itself; far outside the grid it slices to the corner (nearest-point rule; common
        // practice).
        for m in Modulation::ALL {
            let a = m.axis_scale();
            let bits = m.bits_per_symbol();
            for word in 0..1usize << bits {
                let b: [u8; 8] = core::array::from_fn(|i| ((word >> i) & 1) as u8);
                let p = m.map(&b[..bits]).unwrap();
                for (dx, dy) in [(0.9, 0.9), (-0.9, 0.3), (0.2, -0.95)] {
                    let q = p + crate::Cf32::new(
                        dx * a,
                        if m == Modulation::Bpsk { 0.0 } else { dy * a },
                    );
                    assert_eq!(m.slice(q), p, "{m:?} word {word}");
                }
            }
        }
        let far = Modulation::Qam16.slice(crate::Cf32::new(10.0, -10.0));
        let c = 3.0 * Modulation::Qam16.axis_scale();
        assert_eq!(far, crate::Cf32::new(c, -c));
    }
    use super::*;

    #[test]
    fn mean_energy_is_one() {
        // Unit mean energy, the convention of DESIGN.md and REFERENCES item 10.
        for m in Modulation::ALL {
            let k = m.bits_per_symbol();
            let mut sum = 0.0f64;
            for v in 0..(1usize << k) {
                let bits: heapless::Vec<u8, 8> =
                    (0..k).map(|j| ((v >> (k - 1 - j)) & 1) as u8).collect();
                sum += f64::from(m.map(&bits).unwrap().norm_sqr());
            }
            let mean = sum / (1u64 << k) as f64;
            assert!((mean - 1.0).abs() < 1e-6, "{m:?} mean energy {mean}");
        }
    }

    #[test]
    fn gray_tables_of_references_item_10() {
        // REFERENCES item 10 (16-QAM table confirmed; 64-QAM from the same sheet):
        // 16-QAM per axis 00→-3, 01→-1, 11→+1, 10→+3;
        // 64-QAM 000→-7, 001→-5, 011→-3, 010→-1, 110→+1, 111→+3, 101→+5, 100→+7.
        let t16 = [([0, 0], -3.0), ([0, 1], -1.0), ([1, 1], 1.0), ([1, 0], 3.0)];
        for (b, l) in t16 {
            assert_eq!(pam_level(&b), l);
        }
        let t64 = [
            ([0, 0, 0], -7.0),
            ([0, 0, 1], -5.0),
            ([0, 1, 1], -3.0),
            ([0, 1, 0], -1.0),
            ([1, 1, 0], 1.0),
            ([1, 1, 1], 3.0),
            ([1, 0, 1], 5.0),
            ([1, 0, 0], 7.0),
        ];
        for (b, l) in t64 {
            assert_eq!(pam_level(&b), l);
        }
        // Worked example of item 10: bits 1011 → a(3 + 1j).
        let x = Modulation::Qam16.map(&[1, 0, 1, 1]).unwrap();
        assert!((x.re - 0.948_683).abs() < 1e-6 && (x.im - 0.316_228).abs() < 1e-6);
    }

    #[test]
    fn bad_bits_rejected() {
        assert_eq!(Modulation::Qpsk.map(&[0, 2]), None);
        assert_eq!(Modulation::Qpsk.map(&[0]), None);
    }
}
