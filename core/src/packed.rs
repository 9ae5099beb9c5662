//! Dual 16-bit operations on packed complex Q15 words (real part low, imaginary part high).
//!
//! [`Packed`] defines the arithmetic of the Q15 kernels once, as exact integer operations on
//! packed words; [`Portable`] is the reference implementation. On cores with the DSP extension
//! (`cfg(arm_dsp)`, set by `build.rs` for ARMv7E-M) the FFT's hand-scheduled loops perform
//! each operation with the matching instruction (QADD16, SHADD16, SHASX, SMUAD, SMUSD,
//! PKHTB …); the portable kernels compute the same operations on i32 parts (tested against
//! [`Portable`]). The kernels keep operands in the ranges where an instruction's truncation
//! cannot act, so all paths give the same bits.

use crate::fixed::Cq15;

/// Packed-word operations used by the Q15 kernels. Each half-word is an i16.
pub trait Packed {
    /// Saturating per-half addition.
    fn qadd16(a: u32, b: u32) -> u32;
    /// Saturating per-half subtraction.
    fn qsub16(a: u32, b: u32) -> u32;
    /// Per-half `(a + b) >> 1` (floor).
    fn shadd16(a: u32, b: u32) -> u32;
    /// Per-half `(a - b) >> 1` (floor).
    fn shsub16(a: u32, b: u32) -> u32;
    /// Halving `a − j·b`: `((a.re + b.im) >> 1, (a.im − b.re) >> 1)`.
    fn shsax(a: u32, b: u32) -> u32;
    /// Halving `a + j·b`: `((a.re − b.im) >> 1, (a.im + b.re) >> 1)`.
    fn shasx(a: u32, b: u32) -> u32;
    /// Squared magnitude `re² + im²` (wrapping u32; exact below 2^32).
    fn mag2(a: u32) -> u32;
    /// Complex product `x·w` (`w` Q15) rounded once at `2^-(14+S)`:
    /// `(Σ + 2^(13+S)) >> (14+S)` per part, `S` in `0..=3`.
    fn cmul<const S: u32>(x: u32, w: u32) -> u32;
    /// Scale with one guard bit: `S = 0`: `sat(sat(2a) + p)`; `S = 1`: `sat(a + p)`;
    /// `S ≥ 2`: `(a + 2^(S−2) + p·2^(S−1)) >> (S−1)`, where `p = 1` when `PLUS1` (the
    /// rounding constant of a later halving add) and 0 otherwise.
    fn guard<const S: u32, const PLUS1: bool>(a: u32) -> u32;
    /// Scale up: `a·2^k + p` per half (`p` 1 or 0), for blocks quiet enough that the
    /// result fits (`k ≤ 15`).
    fn up(a: u32, k: u32, p: u32) -> u32;
}

/// Views complex Q15 samples as packed words.
pub fn as_words_mut<const N: usize>(buf: &mut [Cq15; N]) -> &mut [u32; N] {
    // SAFETY: `Cq15` is `repr(C, align(4))` with two i16 fields: size 4, alignment 4, no
    // padding, every bit pattern valid; so `[Cq15; N]` and `[u32; N]` have the same layout.
    unsafe { &mut *(buf as *mut [Cq15; N]).cast::<[u32; N]>() }
}

/// Views complex Q15 samples as packed words (shared).
pub fn as_words<const N: usize>(buf: &[Cq15; N]) -> &[u32; N] {
    // SAFETY: as for `as_words_mut`.
    unsafe { &*(buf as *const [Cq15; N]).cast::<[u32; N]>() }
}

#[inline(always)]
const fn lo(w: u32) -> i32 {
    w as u16 as i16 as i32
}
#[inline(always)]
const fn hi(w: u32) -> i32 {
    (w >> 16) as u16 as i16 as i32
}
#[inline(always)]
const fn pack(re: i32, im: i32) -> u32 {
    (re as u16 as u32) | ((im as u16 as u32) << 16)
}
#[inline(always)]
const fn sat(x: i32) -> i32 {
    if x > i16::MAX as i32 {
        i16::MAX as i32
    } else if x < i16::MIN as i32 {
        i16::MIN as i32
    } else {
        x
    }
}

/// Plain-Rust implementation (every target).
#[derive(Clone, Copy, Debug)]
pub struct Portable;

impl Packed for Portable {
    #[inline(always)]
    fn qadd16(a: u32, b: u32) -> u32 {
        pack(sat(lo(a) + lo(b)), sat(hi(a) + hi(b)))
    }
    #[inline(always)]
    fn qsub16(a: u32, b: u32) -> u32 {
        pack(sat(lo(a) - lo(b)), sat(hi(a) - hi(b)))
    }
    #[inline(always)]
    fn shadd16(a: u32, b: u32) -> u32 {
        pack((lo(a) + lo(b)) >> 1, (hi(a) + hi(b)) >> 1)
    }
    #[inline(always)]
    fn shsub16(a: u32, b: u32) -> u32 {
        pack((lo(a) - lo(b)) >> 1, (hi(a) - hi(b)) >> 1)
    }
    #[inline(always)]
    fn shsax(a: u32, b: u32) -> u32 {
        pack((lo(a) + hi(b)) >> 1, (hi(a) - lo(b)) >> 1)
    }
    #[inline(always)]
    fn shasx(a: u32, b: u32) -> u32 {
        pack((lo(a) - hi(b)) >> 1, (hi(a) + lo(b)) >> 1)
    }
    #[inline(always)]
    fn mag2(a: u32) -> u32 {
        ((lo(a) * lo(a)) as u32).wrapping_add((hi(a) * hi(a)) as u32)
    }
    #[inline(always)]
    fn cmul<const S: u32>(x: u32, w: u32) -> u32 {
        let sh = 14 + S;
        let round = 1i32 << (sh - 1);
        let re = (lo(x) * lo(w))
            .wrapping_sub(hi(x) * hi(w))
            .wrapping_add(round)
            >> sh;
        let im = (lo(x) * hi(w))
            .wrapping_add(hi(x) * lo(w))
            .wrapping_add(round)
            >> sh;
        pack(re, im)
    }
    #[inline(always)]
    fn guard<const S: u32, const PLUS1: bool>(a: u32) -> u32 {
        let p = i32::from(PLUS1);
        let f = |v: i32| match S {
            0 => sat(sat(2 * v) + p),
            1 => sat(v + p),
            _ => (v + (1 << (S - 2)) + (p << (S - 1))) >> (S - 1),
        };
        pack(f(lo(a)), f(hi(a)))
    }
    #[inline(always)]
    fn up(a: u32, k: u32, p: u32) -> u32 {
        let c = 1i32 << (k & 15);
        pack(sat(lo(a) * c + p as i32), sat(hi(a) * c + p as i32))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn guard_scaling_rounds_as_documented() {
        // (a + 2^(S-2)) >> (S-1), worked by hand: S=2: (5+1)>>1 = 3, (-5+1)>>1 = -2;
        // S=3: (5+2)>>2 = 1, (-6+2)>>2 = -1; S=0: 2a; with PLUS1 one more.
        let w = pack(5, -5);
        assert_eq!(Portable::guard::<2, false>(w), pack(3, -2));
        assert_eq!(Portable::guard::<2, true>(w), pack(4, -1));
        assert_eq!(Portable::guard::<3, false>(pack(5, -6)), pack(1, -1));
        assert_eq!(Portable::guard::<0, true>(w), pack(11, -9));
    }

    #[test]
    fn cmul_rounds_once() {
        // x = 0.5 + 0.25j (16384, 8192), w = j (0, 32767): x·w = -0.25 + 0.5j (1 - 2^-15
        // scaled); at S = 1 (2^-15): re = round(-8192·32767 / 2^15) = -8192,
        // im = round(16384·32767 / 2^15) = 16384 (16383.5 rounds up).
        let y = Portable::cmul::<1>(pack(16384, 8192), pack(0, 32767));
        assert_eq!((lo(y), hi(y)), (-8192, 16384));
    }
}
