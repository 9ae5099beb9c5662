//! Dual 16-bit operations on packed complex Q15 words (real part low, imaginary part high).
//!
//! The fixed-point kernels are written once against [`Packed`]. [`Portable`] implements it in
//! plain Rust for every target; on cores with the DSP extension (`cfg(arm_dsp)`, set by
//! `build.rs` for ARMv7E-M) [`Dsp`] maps each operation to one or a few instructions
//! (QADD16, SHADD16, SHASX, SMUAD, SMUSD, PKHTB …). Both compute the same bits: every
//! definition below is exact integer arithmetic, and the kernels keep their operands in the
//! ranges where the instructions' saturation or truncation cannot act.

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

/// The operation set for the current target.
#[cfg(arm_dsp)]
pub type Ops = Dsp;
/// The operation set for the current target.
#[cfg(not(arm_dsp))]
pub type Ops = Portable;

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

/// Cortex-M DSP-extension implementation (ARMv7E-M).
#[cfg(arm_dsp)]
#[derive(Clone, Copy, Debug)]
pub struct Dsp;

#[cfg(arm_dsp)]
macro_rules! dsp2 {
    ($name:ident, $insn:literal) => {
        #[inline(always)]
        fn $name(a: u32, b: u32) -> u32 {
            let r: u32;
            // SAFETY: one register-only DSP instruction; no memory, no stack.
            unsafe {
                core::arch::asm!(concat!($insn, " {r}, {a}, {b}"), r = lateout(reg) r,
                    a = in(reg) a, b = in(reg) b, options(pure, nomem, nostack));
            }
            r
        }
    };
}

#[cfg(arm_dsp)]
impl Packed for Dsp {
    dsp2!(qadd16, "qadd16");
    dsp2!(qsub16, "qsub16");
    dsp2!(shadd16, "shadd16");
    dsp2!(shsub16, "shsub16");
    dsp2!(shsax, "shsax");
    dsp2!(shasx, "shasx");

    #[inline(always)]
    fn mag2(a: u32) -> u32 {
        let r: u32;
        // SAFETY: register-only instruction.
        unsafe {
            core::arch::asm!("smuad {r}, {a}, {a}", r = lateout(reg) r, a = in(reg) a,
                options(pure, nomem, nostack));
        }
        r
    }

    #[inline(always)]
    fn cmul<const S: u32>(x: u32, w: u32) -> u32 {
        let (re, im): (u32, u32);
        // re: SMUSD gives x.re·w.re − x.im·w.im exactly; add the rounding constant; PKHTB
        // shifts it down by 14+S into the low half. im: SMUADX gives x.re·w.im + x.im·w.re;
        // shifting so that bit 14+S lands on bit 16 and adding 2^15 leaves the rounded value
        // in the high half.
        // SAFETY (all arms): register-only instructions.
        unsafe {
            match S {
                0 => core::arch::asm!(
                    "smusd {re}, {x}, {w}",
                    "smuadx {im}, {x}, {w}",
                    "add {re}, {re}, #0x2000",
                    "add {im}, {half}, {im}, lsl #2",
                    "pkhtb {re}, {im}, {re}, asr #14",
                    re = out(reg) re, im = out(reg) im, x = in(reg) x, w = in(reg) w,
                    half = in(reg) 0x8000u32, options(pure, nomem, nostack)),
                1 => core::arch::asm!(
                    "smusd {re}, {x}, {w}",
                    "smuadx {im}, {x}, {w}",
                    "add {re}, {re}, #0x4000",
                    "add {im}, {half}, {im}, lsl #1",
                    "pkhtb {re}, {im}, {re}, asr #15",
                    re = out(reg) re, im = out(reg) im, x = in(reg) x, w = in(reg) w,
                    half = in(reg) 0x8000u32, options(pure, nomem, nostack)),
                2 => core::arch::asm!(
                    "smusd {re}, {x}, {w}",
                    "smuadx {im}, {x}, {w}",
                    "add {re}, {re}, #0x8000",
                    "add {im}, {half}, {im}",
                    "pkhtb {re}, {im}, {re}, asr #16",
                    re = out(reg) re, im = out(reg) im, x = in(reg) x, w = in(reg) w,
                    half = in(reg) 0x8000u32, options(pure, nomem, nostack)),
                _ => core::arch::asm!(
                    "smusd {re}, {x}, {w}",
                    "smuadx {im}, {x}, {w}",
                    "add {re}, {re}, #0x10000",
                    "add {im}, {half}, {im}, asr #1",
                    "pkhtb {re}, {im}, {re}, asr #17",
                    re = out(reg) re, im = out(reg) im, x = in(reg) x, w = in(reg) w,
                    half = in(reg) 0x8000u32, options(pure, nomem, nostack)),
            }
        }
        let _ = im;
        re
    }

    #[inline(always)]
    fn guard<const S: u32, const PLUS1: bool>(a: u32) -> u32 {
        let p = u32::from(PLUS1);
        match S {
            0 => Self::qadd16(Self::qadd16(a, a), p * 0x0001_0001),
            1 => {
                if PLUS1 {
                    Self::qadd16(a, 0x0001_0001)
                } else {
                    a
                }
            }
            2 => Self::shadd16(a, (1 + 2 * p) * 0x0001_0001),
            _ => Self::shadd16(Self::shadd16(a, (2 + 4 * p) * 0x0001_0001), 0),
        }
    }

    #[inline(always)]
    fn up(a: u32, k: u32, p: u32) -> u32 {
        // The kernels call this only where a·2^k + p fits in 16 bits, so the products need
        // no saturation: SMULBB/SMULTB then PKHBT.
        let c = 1u32 << (k & 15);
        let (l, h): (u32, u32);
        // SAFETY: register-only instructions.
        unsafe {
            core::arch::asm!(
                "smulbb {l}, {a}, {c}",
                "smultb {h}, {a}, {c}",
                l = out(reg) l, h = out(reg) h, a = in(reg) a, c = in(reg) c,
                options(pure, nomem, nostack));
        }
        let (l, h) = (l.wrapping_add(p), h.wrapping_add(p));
        (l & 0xffff) | (h << 16)
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
