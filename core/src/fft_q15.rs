//! Q15 block-floating-point FFT: mixed radix-4/2, decimation in time, in place.
//!
//! ## Algorithm
//!
//! Bit-reversal permutation, then (when log2 N is odd) one radix-2 stage, then radix-4 stages.
//! A radix-4 stage merges four consecutive sub-transforms `A0..A3` of length `L` into one of
//! length `4L` (`W = e^{-j2π/4L}`):
//!
//! ```text
//! a = A0[k],  b = W^2k·A1[k],  c = W^k·A2[k],  d = W^3k·A3[k]
//! X[k] = (a+b) + (c+d)      X[k+L]  = (a−b) − j(c−d)
//! X[k+2L] = (a+b) − (c+d)   X[k+3L] = (a−b) + j(c−d)
//! ```
//!
//! ## Scaling and rounding (block floating point)
//!
//! Before each stage the block's magnitude bits `m` (see [`magnitude_bits`]) give a bound
//! `|v| ≤ 2^m` on every component, and the stage shifts right by the least `s` that keeps its
//! worst-case output inside Q15: radix-2 `s = m − 14`, twiddle-free radix-4 `s = m − 13`,
//! radix-4 with twiddles `s = m − 12` (a rotated value is bounded by `√2·2^m`, four of them by
//! `4√2·2^m < 2^(m+3)`), never negative. Data that do not need scaling are not scaled, so a
//! quiet block keeps its precision (−40 dBFS input keeps the SQNR of −12 dBFS input).
//!
//! * Twiddle products are exact 32-bit values rounded once: `(Σ + 2^(14+s)) >> (15+s)`.
//! * The untwiddled input is scaled with rounding: `(a + 2^(s−1)) >> s`.
//! * Sums are exact; every output is saturated to i16. The bound above makes saturation
//!   unreachable, so full-scale input never wraps (and is never clipped).
//!
//! The sum of the shifts is the block exponent. With `log2 N = 2h + r` (`r` 0 or 1) the
//! unitary DFT equals `out · 2^(shifts − h) · RESIDUAL_SCALE`, `RESIDUAL_SCALE = 2^(−r/2)`, with
//! `out` read as Q15 fractions.
//!
//! Twiddles are computed at compile time in f64 (`const fn`, IEEE arithmetic evaluated by the
//! compiler), rounded to Q15 and stored in flash: identical bits on every target.

use crate::fft::OfdmFft;
use crate::fixed::{magnitude_bits, sat16, Cq15};

/// Q15 block-floating-point FFT of size `N` (power of two, 16..=4096). Zero-sized: twiddles
/// live in flash.
#[derive(Clone, Copy, Debug, Default)]
pub struct Q15Fft<const N: usize>;

impl<const N: usize> Q15Fft<N> {
    const SIZE_OK: () = assert!(
        N.is_power_of_two() && N >= 16 && N <= 4096,
        "FFT size must be a power of two in 16..=4096"
    );
    /// log2 N.
    pub const LOG2_N: u32 = N.trailing_zeros();
    /// `e^{-j2πm/N}` in Q15, packed (re low, im high), `m = 0..N` (the stages use `m < 3N/4`).
    const TWIDDLES: [u32; N] = twiddle_table::<N>();

    /// A transform of size `N` (checked at compile time).
    pub const fn new() -> Self {
        #[allow(clippy::let_unit_value)]
        let () = Self::SIZE_OK;
        Self
    }

    /// Forward transform, unnormalised and scaled by `2^-shifts`; returns `shifts`.
    pub fn forward_raw(buf: &mut [Cq15; N]) -> u32 {
        bit_reverse(buf);
        let tw: &[u32; N] = &Self::TWIDDLES;
        let mut mag = block_magnitude_bits(buf);
        let mut shifts = 0;
        let mut span = 1usize;
        if Self::LOG2_N % 2 == 1 {
            let s = mag.saturating_sub(14);
            mag = radix2_stage(buf, s);
            shifts += s;
            span = 2;
        }
        while span < N {
            let s = if span == 1 {
                mag.saturating_sub(13)
            } else {
                mag.saturating_sub(12)
            };
            mag = radix4_stage(buf, tw, span, s);
            shifts += s;
            span *= 4;
        }
        shifts
    }
}

impl<const N: usize> OfdmFft<N> for Q15Fft<N> {
    type Sample = Cq15;
    const RESIDUAL_SCALE: f32 = if N.trailing_zeros() % 2 == 1 {
        core::f32::consts::FRAC_1_SQRT_2
    } else {
        1.0
    };

    fn forward(&mut self, buf: &mut [Cq15; N]) -> i32 {
        Self::forward_raw(buf) as i32 - (Self::LOG2_N / 2) as i32
    }

    fn inverse(&mut self, buf: &mut [Cq15; N]) -> i32 {
        // IDFT(x) = swap(DFT(swap(x))), swap exchanging real and imaginary parts (exact).
        for v in buf.iter_mut() {
            *v = Cq15::new(v.im, v.re);
        }
        let e = self.forward(buf);
        for v in buf.iter_mut() {
            *v = Cq15::new(v.im, v.re);
        }
        e
    }
}

/// Magnitude bits of a whole block (max over all components).
fn block_magnitude_bits(buf: &[Cq15]) -> u32 {
    let mut acc: i16 = 0;
    for v in buf {
        acc |= (v.re ^ (v.re >> 15)) | (v.im ^ (v.im >> 15));
    }
    magnitude_bits(acc)
}

/// In-place bit-reversal permutation (reversed counter; no table, no division).
fn bit_reverse<const N: usize>(buf: &mut [Cq15; N]) {
    let mut j = 0usize;
    for i in 0..N {
        if i < j {
            if let (Some(&a), Some(&b)) = (buf.get(i), buf.get(j)) {
                if let Some(x) = buf.get_mut(i) {
                    *x = b;
                }
                if let Some(y) = buf.get_mut(j) {
                    *y = a;
                }
            }
        }
        let mut bit = N >> 1;
        while bit != 0 && j & bit != 0 {
            j ^= bit;
            bit >>= 1;
        }
        j |= bit;
    }
}

/// `(x + 2^(s−1)) >> s`: scale with rounding (round half up).
#[inline(always)]
fn scale(x: i16, s: u32) -> i32 {
    (i32::from(x) + ((1 << s) >> 1)) >> s
}

/// `x · w` rounded once to Q15 and scaled by `2^-s`.
#[inline(always)]
fn twiddle_mul(x: Cq15, w: u32, s: u32) -> (i32, i32) {
    let (wr, wi) = (i32::from(w as u16 as i16), i32::from((w >> 16) as u16 as i16));
    let (xr, xi) = (i32::from(x.re), i32::from(x.im));
    let round = 1i32 << (14 + s);
    let re = (xr * wr - xi * wi).wrapping_add(round) >> (15 + s);
    let im = (xr * wi + xi * wr).wrapping_add(round) >> (15 + s);
    (re, im)
}

/// Stores a computed output and folds its magnitude into `acc`.
#[inline(always)]
fn store(slot: &mut Cq15, re: i32, im: i32, acc: &mut i16) {
    let v = Cq15::new(sat16(re), sat16(im));
    *acc |= (v.re ^ (v.re >> 15)) | (v.im ^ (v.im >> 15));
    *slot = v;
}

/// Radix-2 stage on adjacent pairs (first stage only: trivial twiddles). Returns the
/// magnitude bits of its output.
fn radix2_stage(buf: &mut [Cq15], s: u32) -> u32 {
    let mut acc = 0i16;
    for pair in buf.chunks_exact_mut(2) {
        if let [x0, x1] = pair {
            let (ar, ai) = (scale(x0.re, s), scale(x0.im, s));
            let (br, bi) = (scale(x1.re, s), scale(x1.im, s));
            store(x0, ar + br, ai + bi, &mut acc);
            store(x1, ar - br, ai - bi, &mut acc);
        }
    }
    magnitude_bits(acc)
}

/// One radix-4 stage merging sub-transforms of length `span`. Returns the magnitude bits of
/// its output.
fn radix4_stage<const N: usize>(buf: &mut [Cq15; N], tw: &[u32; N], span: usize, s: u32) -> u32 {
    let mut acc = 0i16;
    let span = span.max(1);
    let stride = (N / (4 * span)).max(1);
    for block in buf.chunks_exact_mut(4 * span) {
        let (q01, q23) = block.split_at_mut(2 * span);
        let (q0, q1) = q01.split_at_mut(span);
        let (q2, q3) = q23.split_at_mut(span);
        let w1 = tw.iter().step_by(stride);
        let w2 = tw.iter().step_by(2 * stride);
        let w3 = tw.iter().step_by(3 * stride);
        let quarters = q0.iter_mut().zip(q1.iter_mut()).zip(q2.iter_mut()).zip(q3.iter_mut());
        for ((((x0, x1), x2), x3), ((&t1, &t2), &t3)) in quarters.zip(w1.zip(w2).zip(w3)) {
            let (ar, ai) = (scale(x0.re, s), scale(x0.im, s));
            let ((br, bi), (cr, ci), (dr, di)) = if span == 1 {
                (
                    (scale(x1.re, s), scale(x1.im, s)),
                    (scale(x2.re, s), scale(x2.im, s)),
                    (scale(x3.re, s), scale(x3.im, s)),
                )
            } else {
                (twiddle_mul(*x1, t2, s), twiddle_mul(*x2, t1, s), twiddle_mul(*x3, t3, s))
            };
            let (t0r, t0i) = (ar + br, ai + bi);
            let (t1r, t1i) = (ar - br, ai - bi);
            let (t2r, t2i) = (cr + dr, ci + di);
            let (t3r, t3i) = (cr - dr, ci - di);
            store(x0, t0r + t2r, t0i + t2i, &mut acc);
            store(x2, t0r - t2r, t0i - t2i, &mut acc);
            store(x1, t1r + t3i, t1i - t3r, &mut acc);
            store(x3, t1r - t3i, t1i + t3r, &mut acc);
        }
    }
    magnitude_bits(acc)
}

/// `e^{-j2πm/N}` in Q15 for `m = 0..N`, packed (re low, im high), from a compile-time f64
/// evaluation; values round to nearest and saturate at `32767`.
const fn twiddle_table<const N: usize>() -> [u32; N] {
    let mut t = [0u32; N];
    let mut m = 0;
    while m < N {
        let (c, s) = cos_sin_turn(m, N);
        t[m] = Cq15::new(q15_const(c), q15_const(-s)).to_bits();
        m += 1;
    }
    t
}

/// Q15 rounding of a fraction in const context (half away from zero, saturating).
const fn q15_const(x: f64) -> i16 {
    let v = x * 32768.0;
    let r = if v >= 0.0 { v + 0.5 } else { v - 0.5 };
    if r >= 32767.0 {
        32767
    } else if r <= -32768.0 {
        -32768
    } else {
        r as i16
    }
}

/// `(cos, sin)` of `2π m / n` for `n` divisible by 4: quadrant reduction, then Taylor series
/// on `[0, π/2)` to full f64 accuracy (terms to order 27; textbook series).
const fn cos_sin_turn(m: usize, n: usize) -> (f64, f64) {
    let r = m % n;
    let quarter = n / 4;
    let q = r / quarter;
    let rem = r - q * quarter;
    let phi = 2.0 * core::f64::consts::PI * (rem as f64) / (n as f64);
    let (c, s) = taylor_cos_sin(phi);
    match q {
        0 => (c, s),
        1 => (-s, c),
        2 => (-c, -s),
        _ => (s, -c),
    }
}

const fn taylor_cos_sin(x: f64) -> (f64, f64) {
    let x2 = x * x;
    let mut c = 1.0;
    let mut s = x;
    let mut tc = 1.0;
    let mut ts = x;
    let mut k = 1;
    while k <= 13 {
        tc = -tc * x2 / (((2 * k - 1) * (2 * k)) as f64);
        ts = -ts * x2 / (((2 * k) * (2 * k + 1)) as f64);
        c += tc;
        s += ts;
        k += 1;
    }
    (c, s)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn twiddles_match_libm_to_q15_rounding() {
        // The compile-time table against libm's cos/sin (independent implementation):
        // identical after Q15 rounding except where the value sits on a rounding boundary.
        let tw = Q15Fft::<256>::TWIDDLES;
        for (m, w) in tw.iter().enumerate() {
            let th = 2.0 * core::f64::consts::PI * m as f64 / 256.0;
            let c = Cq15::from_bits(*w);
            assert!((i32::from(c.re) - i32::from(q15_const(libm::cos(th)))).abs() <= 1, "m={m}");
            assert!((i32::from(c.im) - i32::from(q15_const(-libm::sin(th)))).abs() <= 1, "m={m}");
        }
        assert_eq!(Cq15::from_bits(tw[0]), Cq15::new(32767, 0));
        assert_eq!(Cq15::from_bits(tw[64]), Cq15::new(0, -32768));
    }

    #[test]
    fn impulse_gives_flat_spectrum() {
        // DFT of an impulse of amplitude A is flat at A (unnormalised; textbook identity).
        let mut buf = [Cq15::ZERO; 64];
        buf[0] = Cq15::new(8192, 0);
        let shifts = Q15Fft::<64>::forward_raw(&mut buf);
        for v in buf {
            assert_eq!(i32::from(v.re) << shifts, 8192, "shifts {shifts}");
            assert_eq!(v.im, 0);
        }
    }
}
