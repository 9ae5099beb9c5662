//! Q15 block-floating-point FFT: mixed radix-4/2, decimation in time.
//!
//! ## Algorithm
//!
//! The first stage reads the input in bit-reversed order (so no separate permutation pass)
//! and writes a scratch block; it is radix-2 when log2 N is odd, else a twiddle-free radix-4.
//! Radix-4 stages follow in place. A radix-4 stage merges four consecutive sub-transforms
//! `A0..A3` of length `L` into one of length `4L` (`W = e^{-j2π/4L}`):
//!
//! ```text
//! a = A0[k],  b = W^2k·A1[k],  c = W^k·A2[k],  d = W^3k·A3[k]
//! X[k] = (a+b) + (c+d)      X[k+L]  = (a−b) − j(c−d)
//! X[k+2L] = (a+b) − (c+d)   X[k+3L] = (a−b) + j(c−d)
//! ```
//!
//! All arithmetic is on packed words through [`crate::packed::Packed`], so the portable path
//! and the Cortex-M4 DSP path compute the same bits.
//!
//! ## Scaling and rounding (block floating point)
//!
//! Each stage shifts right by the least `s` that keeps its worst case inside Q15, measured
//! from the data it receives:
//!
//! * first stage, from the input's component bits `m` (every part in `[-2^m, 2^m - 1]`):
//!   radix-2 `s = m − 14`, radix-4 `s = m − 13`. A negative `s` scales a quiet block *up*,
//!   so −40 dBFS input keeps the precision of −12 dBFS input;
//! * radix-4 stages with twiddles, from the squared-magnitude bits `mm` of the previous
//!   stage's output (`|x|² < 2^mm`): four rotated terms are bounded by `4·2^(mm/2)`, so
//!   `s = ceil(mm/2) − 13`, between 0 and 3 (i16 parts bound `|x| ≤ 2^15.5`).
//!
//! Rounding: the terms of a butterfly are prepared with one guard bit (twiddle products exact
//! in 32 bits, rounded once at `2^-(14+s)`; the untwiddled term scaled with rounding), summed,
//! and halved at the end with a rounding constant carried in the untwiddled term — so every
//! output is rounded, never truncated. Sums saturate (QADD16 semantics). The bounds keep
//! every value in range except, by at most one or two LSB, in adversarial corner cases
//! (all four terms at the bound with aligned phases), where the result saturates: it never
//! wraps.
//!
//! The sum of the shifts is the block exponent. With `log2 N = 2h + r` (`r` 0 or 1) the
//! unitary DFT equals `out · 2^(shifts − h) · RESIDUAL_SCALE`, `RESIDUAL_SCALE = 2^(−r/2)`,
//! with `out` read as Q15 fractions.
//!
//! Twiddles are computed at compile time in f64 (`const fn`, IEEE arithmetic evaluated by the
//! compiler), rounded to Q15 and stored in flash: identical bits on every target.

use crate::fft::OfdmFft;
use crate::fixed::Cq15;
#[cfg(doc)]
use crate::packed::Packed;

/// Q15 block-floating-point FFT of size `N` (power of two, 16..=4096). Holds one scratch
/// block of `N` words (`4·N` bytes); twiddles live in flash.
#[derive(Clone, Debug)]
pub struct Q15Fft<const N: usize> {
    scratch: [u32; N],
}

impl<const N: usize> Default for Q15Fft<N> {
    fn default() -> Self {
        Self::new()
    }
}

impl<const N: usize> Q15Fft<N> {
    const SIZE_OK: () = assert!(
        N.is_power_of_two() && N >= 16 && N <= 4096,
        "FFT size must be a power of two in 16..=4096"
    );
    /// log2 N.
    pub const LOG2_N: u32 = N.trailing_zeros();
    /// Twiddles of the radix-4 stages, stage after stage, each as triplets
    /// `(W^k, W^2k, W^3k)`, `k = 0..span`, `W = e^{-j2π/4·span}`: one sequential read per
    /// butterfly. Fewer than N words in total.
    const TWIDDLES: [u32; N] = twiddle_table::<N>();

    /// A transform of size `N` (checked at compile time).
    pub const fn new() -> Self {
        #[allow(clippy::let_unit_value)]
        let () = Self::SIZE_OK;
        Self { scratch: [0; N] }
    }

    /// Forward transform in place, unnormalised and scaled by `2^-shifts`; returns `shifts`
    /// (negative when a quiet block was scaled up). Copies `buf` to the scratch block, then
    /// runs [`forward_from`](Self::forward_from) back into `buf`.
    pub fn forward_raw(&mut self, buf: &mut [Cq15; N]) -> i32 {
        let words = crate::packed::as_words_mut(buf);
        let m = copy_and_measure(words, &mut self.scratch);
        transform::<N>(&self.scratch, words, m)
    }

    /// Out-of-place forward transform: `output` = DFT(`input`) · 2^-shifts, returns `shifts`.
    /// No copy and no scratch: the first stage gathers straight from `input` (this is the call
    /// a receiver front makes, reading the samples after the cyclic prefix).
    pub fn forward_from(input: &[Cq15; N], output: &mut [Cq15; N]) -> i32 {
        let input = crate::packed::as_words(input);
        transform::<N>(
            input,
            crate::packed::as_words_mut(output),
            component_bits(input),
        )
    }
}

/// The transform of [`Q15Fft`]: first stage `input → output`, then the radix-4 stages in
/// place on `output`; `m` is the input's [`component_bits`]. Returns the sum of the shifts.
fn transform<const N: usize>(input: &[u32; N], output: &mut [u32; N], m: u32) -> i32 {
    let mut tw_offset = 0usize;
    let m = m as i32;
    // First stage: the least shift that keeps its worst case in range; negative shifts scale
    // a quiet block up to use the whole Q15 range (block floating point).
    let (mut shifts, mut mm, mut span);
    if Q15Fft::<N>::LOG2_N % 2 == 1 {
        shifts = m - 14;
        mm = first_radix2_stage::<N>(input, output, shifts);
        span = 2;
    } else {
        shifts = m - 13;
        mm = first_radix4_stage::<N>(input, output, shifts);
        span = 4;
    }
    while span < N {
        // |x|² < 2^mm bounds |x| < 2^(mm/2), and i16 parts bound |x| ≤ 2^15.5: four rotated
        // terms stay below 2^15 after a shift of min(ceil(mm/2) − 13, 3).
        let s = mm.div_ceil(2).saturating_sub(13).min(3);
        let stage_tw = tw_offset..tw_offset + 3 * span;
        tw_offset += 3 * span;
        // The last stage's output magnitude is not needed.
        let last = 4 * span >= N;
        mm = match (s, last) {
            (0, false) => stage::<0, true, N>(output, stage_tw, span),
            (1, false) => stage::<1, true, N>(output, stage_tw, span),
            (2, false) => stage::<2, true, N>(output, stage_tw, span),
            (_, false) => stage::<3, true, N>(output, stage_tw, span),
            (0, true) => stage::<0, false, N>(output, stage_tw, span),
            (1, true) => stage::<1, false, N>(output, stage_tw, span),
            (2, true) => stage::<2, false, N>(output, stage_tw, span),
            (_, true) => stage::<3, false, N>(output, stage_tw, span),
        };
        shifts += s as i32;
        span *= 4;
    }
    shifts
}

/// Copies `src` to `dst` and returns the [`component_bits`] of the data (one pass; LDM/STM
/// blocks of eight words on the Cortex-M4).
fn copy_and_measure<const N: usize>(src: &[u32; N], dst: &mut [u32; N]) -> u32 {
    #[cfg(arm_dsp)]
    {
        let mut acc = 0u32;
        // SAFETY: N is a multiple of 8 (≥ 16); both arrays hold N words; 8 words per iteration
        // from src to dst, which are distinct borrows.
        unsafe {
            core::arch::asm!(
                "2:",
                "ldmia r0!, {{r3, r4, r5, r8, r9, r10, r11, r12}}",
                "stmia r1!, {{r3, r4, r5, r8, r9, r10, r11, r12}}",
                "eor r3, r3, r3, lsl #1",
                "eor r4, r4, r4, lsl #1",
                "eor r5, r5, r5, lsl #1",
                "eor r8, r8, r8, lsl #1",
                "eor r9, r9, r9, lsl #1",
                "eor r10, r10, r10, lsl #1",
                "eor r11, r11, r11, lsl #1",
                "eor r12, r12, r12, lsl #1",
                "orr r3, r3, r4",
                "orr r5, r5, r8",
                "orr r9, r9, r10",
                "orr r11, r11, r12",
                "orr r3, r3, r5",
                "orr r9, r9, r11",
                "orr lr, lr, r3",
                "orr lr, lr, r9",
                "cmp r0, r2",
                "bne 2b",
                inout("r0") src.as_ptr() => _, inout("r1") dst.as_mut_ptr() => _,
                in("r2") src.as_ptr().add(N), out("r3") _, out("r4") _, out("r5") _,
                out("r8") _, out("r9") _, out("r10") _, out("r11") _, out("r12") _,
                inout("lr") acc, options(nostack));
        }
        halves_bits(acc)
    }
    #[cfg(all(target_arch = "arm", not(arm_dsp)))]
    {
        let mut acc = 0u32;
        // SAFETY: N is a multiple of 4 (≥ 16); both arrays hold N words; 4 words per iteration
        // from src to dst, distinct borrows. The asm restores r6 and r7.
        unsafe {
            core::arch::asm!(
                "push {{r6, r7}}",
                "mov r8, r2",
                "2:",
                "ldm r0!, {{r4, r5, r6, r7}}",
                "stm r1!, {{r4, r5, r6, r7}}",
                "lsls r2, r4, #1",
                "eors r2, r4",
                "orrs r3, r2",
                "lsls r2, r5, #1",
                "eors r2, r5",
                "orrs r3, r2",
                "lsls r2, r6, #1",
                "eors r2, r6",
                "orrs r3, r2",
                "lsls r2, r7, #1",
                "eors r2, r7",
                "orrs r3, r2",
                "cmp r0, r8",
                "bne 2b",
                "pop {{r6, r7}}",
                inout("r0") src.as_ptr() => _, inout("r1") dst.as_mut_ptr() => _,
                inout("r2") src.as_ptr().add(N) => _, inout("r3") acc, out("r4") _,
                out("r5") _, out("r8") _);
        }
        halves_bits(acc)
    }
    #[cfg(not(target_arch = "arm"))]
    {
        for (d, s) in dst.iter_mut().zip(src.iter()) {
            *d = *s;
        }
        component_bits(src)
    }
}

/// The first radix-2 stage (odd log2 N) for first-stage shift `s`: the hand-scheduled loop for
/// the down-scaling shifts on the Cortex-M4, the generic kernel otherwise.
fn first_radix2_stage<const N: usize>(input: &[u32; N], output: &mut [u32; N], s: i32) -> u32 {
    #[cfg(arm_dsp)]
    {
        match s {
            0 => return first_radix2_dsp::<0, N>(input, output),
            1 => return first_radix2_dsp::<1, N>(input, output),
            _ => {}
        }
    }
    with_prep!(s, first_radix2::<N>(input, output))
}

/// [`first_radix2`] for shifts 0 and 1 as one ARMv7E-M loop (same operations, same bits):
/// QADD16 for the guard scaling (`sat(sat(2v) + p)`, `sat(v + p)`), SHADD16/SHSUB16 for the
/// halving sum and difference, SMUAD for the squared magnitude.
#[cfg(arm_dsp)]
fn first_radix2_dsp<const S: u32, const N: usize>(input: &[u32; N], output: &mut [u32; N]) -> u32 {
    let mut acc = 0u32;
    let rev_bits = Q15Fft::<N>::LOG2_N - 1;
    macro_rules! kernel {
        ($guard:literal) => {
            // SAFETY: g runs N/2 − 1 … 0; r = rev(g) < N/2, so the loads at r and r + N/2 are
            // inside `input`; STMDB writes words 2g, 2g+1 of `output` from its end downwards.
            unsafe {
                core::arch::asm!(
                    "2:",
                    "subs r1, r1, #1",
                    "rbit r8, r1",
                    "lsr r8, r8, r2",
                    "add r8, r3, r8, lsl #2",
                    "ldr r9, [r8]",
                    "ldr r10, [r8, r4]",
                    "mov r11, #0x00010001",
                    $guard,
                    "shadd16 r11, r9, r10",
                    "shsub16 r12, r9, r10",
                    "smuad r9, r11, r11",
                    "orr lr, lr, r9",
                    "smuad r9, r12, r12",
                    "orr lr, lr, r9",
                    "stmdb r0!, {{r11, r12}}",
                    "cmp r1, #0",
                    "bne 2b",
                    inout("r0") output.as_mut_ptr().add(N) => _, inout("r1") N / 2 => _,
                    in("r2") 32 - rev_bits, in("r3") input.as_ptr(), in("r4") 2 * N,
                    out("r8") _, out("r9") _, out("r10") _, out("r11") _, out("r12") _,
                    inout("lr") acc, options(nostack))
            }
        };
    }
    // r4 = N/2 words = 2N bytes; r11 = the rounding constant 1 in each half.
    match S {
        0 => kernel!("qadd16 r9, r9, r9\n qadd16 r10, r10, r10\n qadd16 r9, r9, r11"),
        _ => kernel!("qadd16 r9, r9, r11"),
    }
    bits(acc)
}

/// The twiddle-free first radix-4 stage for first-stage shift `s`: the hand-scheduled loop
/// for the usual down-scaling shifts on the Cortex-M4, the generic kernel otherwise.
fn first_radix4_stage<const N: usize>(input: &[u32; N], output: &mut [u32; N], s: i32) -> u32 {
    #[cfg(arm_dsp)]
    {
        match s {
            0 => return first_radix4_dsp::<0, N>(input, output),
            1 => return first_radix4_dsp::<1, N>(input, output),
            2 => return first_radix4_dsp::<2, N>(input, output),
            _ => {}
        }
    }
    #[cfg(all(target_arch = "arm", not(arm_dsp)))]
    {
        match s {
            0 => return first_radix4_thumb1::<0, N>(input, output),
            1 => return first_radix4_thumb1::<1, N>(input, output),
            2 => return first_radix4_thumb1::<2, N>(input, output),
            _ => {}
        }
    }
    with_prep!(s, first_radix4::<N>(input, output))
}

/// [`first_radix4`] for shifts 0..=2 as one ARMv7E-M loop (same operations, same bits).
/// Walks the groups downwards, so the output pointer can use STMDB.
#[cfg(arm_dsp)]
fn first_radix4_dsp<const S: u32, const N: usize>(input: &[u32; N], output: &mut [u32; N]) -> u32 {
    let mut acc = 0u32;
    let rev_bits = Q15Fft::<N>::LOG2_N - 2;
    macro_rules! kernel {
        ($guard:literal) => {
            // SAFETY: g runs N/4 − 1 … 0; r = rev(g) < N/4, so the loads at r, r + N/4,
            // r + N/2, r + 3N/4 are inside `input`; STMDB writes words 4g … 4g+3 of `output`
            // from its end downwards. Distinct borrows; no stack use.
            unsafe {
                core::arch::asm!(
                    "2:",
                    "subs r1, r1, #1",
                    "rbit r8, r1",
                    "lsr r8, r8, r2",
                    "add r8, r3, r8, lsl #2",
                    "ldr r9, [r8]",
                    "ldr r10, [r8, r5]",
                    "ldr r11, [r8, r4]",
                    "add r8, r8, r5",
                    "ldr r12, [r8, r4]",
                    $guard,
                    "qadd16 r8, r9, r10",
                    "qsub16 r9, r9, r10",
                    "qadd16 r10, r11, r12",
                    "qsub16 r11, r11, r12",
                    "shsub16 r12, r8, r10",
                    "shadd16 r8, r8, r10",
                    "shasx r10, r9, r11",
                    "shsax r9, r9, r11",
                    "mov r11, r10",
                    "mov r10, r12",
                    "smuad r12, r8, r8",
                    "orr lr, lr, r12",
                    "smuad r12, r9, r9",
                    "orr lr, lr, r12",
                    "smuad r12, r10, r10",
                    "orr lr, lr, r12",
                    "smuad r12, r11, r11",
                    "orr lr, lr, r12",
                    "stmdb r0!, {{r8, r9, r10, r11}}",
                    "cmp r1, #0",
                    "bne 2b",
                    inout("r0") output.as_mut_ptr().add(N) => _, inout("r1") N / 4 => _,
                    in("r2") 32 - rev_bits, in("r3") input.as_ptr(), in("r4") N,
                    in("r5") 2 * N, out("r8") _, out("r9") _, out("r10") _, out("r11") _,
                    out("r12") _, inout("lr") acc, options(nostack))
            }
        };
    }
    // r4 = N/4 words = N bytes, r5 = N/2 words = 2N bytes. Guards as in packed::Packed::guard:
    // x0 gets the +1 of the final halving, x1..x3 not.
    match S {
        0 => kernel!("qadd16 r10, r10, r10\n qadd16 r11, r11, r11\n qadd16 r12, r12, r12\n qadd16 r9, r9, r9\n mov r8, #0x00010001\n qadd16 r9, r9, r8"),
        1 => kernel!("mov r8, #0x00010001\n qadd16 r9, r9, r8"),
        _ => kernel!("mov r8, #0x00010001\n shadd16 r10, r10, r8\n shadd16 r11, r11, r8\n shadd16 r12, r12, r8\n mov r8, #0x00030003\n shadd16 r9, r9, r8"),
    }
    bits(acc)
}

impl<const N: usize> OfdmFft<N> for Q15Fft<N> {
    type Sample = Cq15;
    const RESIDUAL_SCALE: f32 = if N.trailing_zeros() % 2 == 1 {
        core::f32::consts::FRAC_1_SQRT_2
    } else {
        1.0
    };

    fn forward(&mut self, buf: &mut [Cq15; N]) -> i32 {
        self.forward_raw(buf) - (Self::LOG2_N / 2) as i32
    }

    fn inverse(&mut self, buf: &mut [Cq15; N]) -> i32 {
        // IDFT(x) = swap(DFT(swap(x))), swap exchanging real and imaginary parts (exact).
        for w in crate::packed::as_words_mut(buf).iter_mut() {
            *w = w.rotate_left(16);
        }
        let e = self.forward(buf);
        for w in crate::packed::as_words_mut(buf).iter_mut() {
            *w = w.rotate_left(16);
        }
        e
    }
}

/// Calls a first-stage kernel with the per-part input preparation for shift `$s`
/// ([`Packed::guard`] for `$s` 0..=2, [`Packed::up`] by `2^(1−$s)` below 0, which keeps the
/// guard bit). The closure gets the part and the rounding constant (0 or 1). A negative shift
/// is chosen only when the scaled part fits, so up-scaling needs no saturation.
macro_rules! with_prep {
    ($s:expr, $f:ident :: < $n:ident > ( $($arg:expr),* )) => {
        match $s {
            s if s < 0 => {
                let k = (1 - s) as u32;
                $f::<$n, _>($($arg,)* |v, p| (v << k) + p)
            }
            0 => $f::<$n, _>($($arg,)* |v, p| sat(sat(2 * v) + p)),
            1 => $f::<$n, _>($($arg,)* |v, p| sat(v + p)),
            _ => $f::<$n, _>($($arg,)* |v, p| (v + 1 + 2 * p) >> 1),
        }
    };
}
use with_prep;

/// Magnitude bits of the components of a block: every component lies in `[-2^m, 2^m - 1]`.
/// `w ^ (w << 1)` marks, in each half-word, the highest bit that differs from the sign; the bit
/// that crosses from the low half into bit 16 is shifted out at the end.
fn component_bits(words: &[u32]) -> u32 {
    let mut acc = 0u32;
    for &w in words {
        acc |= w ^ (w << 1);
    }
    halves_bits(acc)
}

/// Folds an OR of `w ^ (w << 1)` over packed words into the component magnitude bits.
fn halves_bits(acc: u32) -> u32 {
    let halves = ((acc & 0xffff) | (acc >> 16)) >> 1;
    32 - halves.leading_zeros()
}

/// Bit length of an OR of squared magnitudes: `|x|² < 2^mm` for every sample.
fn bits(acc: u32) -> u32 {
    32 - acc.leading_zeros()
}

/// Reversed-bit counter over `bits` bits: `rev(g)` for `g = 0, 1, 2, …`.
struct Reversed {
    #[cfg(not(arm_dsp))]
    value: usize,
    #[cfg(not(arm_dsp))]
    half: usize,
    #[cfg(arm_dsp)]
    g: u32,
    #[cfg(arm_dsp)]
    shift: u32,
}

impl Reversed {
    fn new(bits: u32) -> Self {
        Self {
            #[cfg(not(arm_dsp))]
            value: 0,
            #[cfg(not(arm_dsp))]
            half: (1usize << bits) >> 1,
            #[cfg(arm_dsp)]
            g: 0,
            #[cfg(arm_dsp)]
            shift: 32 - bits,
        }
    }
    /// The reversed index of the current count, then advance.
    #[inline(always)]
    fn next(&mut self) -> usize {
        #[cfg(arm_dsp)]
        {
            // RBIT is one instruction on ARMv7-M.
            let r = self.g.reverse_bits().checked_shr(self.shift).unwrap_or(0) as usize;
            self.g = self.g.wrapping_add(1);
            r
        }
        #[cfg(not(arm_dsp))]
        {
            let r = self.value;
            let mut bit = self.half;
            while bit != 0 && self.value & bit != 0 {
                self.value ^= bit;
                bit >>= 1;
            }
            self.value |= bit;
            r
        }
    }
}

// ---- i32 forms of the packed operations (portable kernels) ----

/// The real and imaginary parts of a packed word.
#[inline(always)]
fn parts(w: u32) -> (i32, i32) {
    (w as u16 as i16 as i32, (w as i32) >> 16)
}
/// Saturates to the i16 range.
#[inline(always)]
#[cfg(not(target_arch = "arm"))]
fn sat(x: i32) -> i32 {
    x.clamp(i16::MIN as i32, i16::MAX as i32)
}
/// Thumb: three instructions when no saturation is needed (the usual case).
#[inline(always)]
#[cfg(target_arch = "arm")]
fn sat(x: i32) -> i32 {
    let y: i32;
    // SAFETY: register-only instructions; the rare path builds ±saturation as
    // (x >> 31) ^ 0x7fff.
    unsafe {
        core::arch::asm!(
            "sxth {y}, {x}",
            "cmp {y}, {x}",
            "beq 2f",
            "asrs {y}, {x}, #31",
            "movs {t}, #127",
            "lsls {t}, {t}, #8",
            "adds {t}, #255",
            "eors {y}, {t}",
            "2:",
            x = in(reg) x, y = out(reg) y, t = out(reg) _, options(pure, nomem, nostack));
    }
    y
}
/// [`Packed::cmul`] on parts.
#[inline(always)]
fn cmul<const S: u32>(x: u32, w: u32) -> (i32, i32) {
    let ((xr, xi), (wr, wi)) = (parts(x), parts(w));
    let round = 1i32 << (13 + S);
    (
        (xr * wr - xi * wi + round) >> (14 + S),
        (xr * wi + xi * wr + round) >> (14 + S),
    )
}
/// [`Packed::guard`] with the +1 on one part.
#[inline(always)]
fn guard<const S: u32>(v: i32) -> i32 {
    match S {
        0 => sat(sat(2 * v) + 1),
        1 => sat(v + 1),
        _ => (v + (1 << (S - 2)) + (1 << (S - 1))) >> (S - 1),
    }
}
/// Packs two parts (low 16 bits each).
#[inline(always)]
fn pack(re: i32, im: i32) -> u32 {
    (re as u32 & 0xffff) | ((im as u32) << 16)
}
/// Squared magnitude as [`Packed::mag2`] computes it.
#[inline(always)]
fn mag2(re: i32, im: i32) -> u32 {
    ((re * re) as u32).wrapping_add((im * im) as u32)
}

/// First stage, radix-2 (odd log2 N): gathers bit-reversed pairs `x[r], x[r + N/2]` from
/// `input` and writes `(a + b, a − b)`, scaled as `prep` prepares the parts, to consecutive
/// words of `out`. Returns the squared-magnitude bits of the output.
fn first_radix2<const N: usize, P: Fn(i32, i32) -> i32>(
    input: &[u32; N],
    out: &mut [u32; N],
    prep: P,
) -> u32 {
    let mut acc = 0u32;
    let mask = N / 2 - 1;
    let (lo, hi) = input.split_at(N / 2);
    let mut rev = Reversed::new(Q15Fft::<N>::LOG2_N - 1);
    for pair in out.chunks_exact_mut(2) {
        let r = rev.next() & mask;
        let (ar, ai) = parts(lo.get(r).copied().unwrap_or(0));
        let (br, bi) = parts(hi.get(r).copied().unwrap_or(0));
        let (ar, ai, br, bi) = (prep(ar, 1), prep(ai, 1), prep(br, 0), prep(bi, 0));
        let (y0r, y0i) = ((ar + br) >> 1, (ai + bi) >> 1);
        let (y1r, y1i) = ((ar - br) >> 1, (ai - bi) >> 1);
        acc |= mag2(y0r, y0i) | mag2(y1r, y1i);
        if let [p0, p1] = pair {
            *p0 = pack(y0r, y0i);
            *p1 = pack(y1r, y1i);
        }
    }
    bits(acc)
}

/// First stage, radix-4 without twiddles (even log2 N): gathers `x[r], x[r + N/2],
/// x[r + N/4], x[r + 3N/4]` (the bit-reversed order of four consecutive inputs) and writes the
/// butterfly, scaled as `prep` prepares the parts, to four consecutive words of `out`.
fn first_radix4<const N: usize, P: Fn(i32, i32) -> i32>(
    input: &[u32; N],
    out: &mut [u32; N],
    prep: P,
) -> u32 {
    let mut acc = 0u32;
    let q = N / 4;
    let mask = q - 1;
    let (x01, x23) = input.split_at(N / 2);
    let (x0, x2) = x01.split_at(q);
    let (x1, x3) = x23.split_at(q);
    let mut rev = Reversed::new(Q15Fft::<N>::LOG2_N - 2);
    for group in out.chunks_exact_mut(4) {
        let r = rev.next() & mask;
        let load = |s: &[u32], p: i32| {
            let (re, im) = parts(s.get(r).copied().unwrap_or(0));
            (prep(re, p), prep(im, p))
        };
        let (ar, ai) = load(x0, 1);
        let (br, bi) = load(x1, 0);
        let (cr, ci) = load(x2, 0);
        let (dr, di) = load(x3, 0);
        let (t0r, t0i) = (sat(ar + br), sat(ai + bi));
        let (t1r, t1i) = (sat(ar - br), sat(ai - bi));
        let (t2r, t2i) = (sat(cr + dr), sat(ci + di));
        let (t3r, t3i) = (sat(cr - dr), sat(ci - di));
        let (y0r, y0i) = ((t0r + t2r) >> 1, (t0i + t2i) >> 1);
        let (y2r, y2i) = ((t0r - t2r) >> 1, (t0i - t2i) >> 1);
        let (y1r, y1i) = ((t1r + t3i) >> 1, (t1i - t3r) >> 1);
        let (y3r, y3i) = ((t1r - t3i) >> 1, (t1i + t3r) >> 1);
        acc |= mag2(y0r, y0i) | mag2(y1r, y1i) | mag2(y2r, y2i) | mag2(y3r, y3i);
        if let [o0, o1, o2, o3] = group {
            *o0 = pack(y0r, y0i);
            *o1 = pack(y1r, y1i);
            *o2 = pack(y2r, y2i);
            *o3 = pack(y3r, y3i);
        }
    }
    bits(acc)
}

/// A radix-4 stage with twiddles on this target: the hand-scheduled loop on cores with the
/// DSP extension, the generic one elsewhere (both compute the same bits).
/// `DETECT = false` skips the output magnitude (last stage).
#[inline(always)]
fn stage<const S: u32, const DETECT: bool, const N: usize>(
    data: &mut [u32; N],
    tw: core::ops::Range<usize>,
    span: usize,
) -> u32 {
    #[cfg(arm_dsp)]
    {
        let tw = Q15Fft::<N>::TWIDDLES.get(tw).unwrap_or(&[]);
        radix4_stage_dsp::<S, DETECT, N>(data, tw, span)
    }
    #[cfg(all(target_arch = "arm", not(arm_dsp)))]
    {
        struct Gauss<const N: usize>;
        impl<const N: usize> Gauss<N> {
            const TABLE: [[i32; 3]; N] = gauss_table::<N>(&Q15Fft::<N>::TWIDDLES);
        }
        let table: &[[i32; 3]; N] = &Gauss::<N>::TABLE;
        radix4_stage_thumb1::<S, DETECT, N>(data, table.get(tw).unwrap_or(&[]), span)
    }
    #[cfg(not(target_arch = "arm"))]
    {
        let tw = Q15Fft::<N>::TWIDDLES.get(tw).unwrap_or(&[]);
        radix4_stage::<S, DETECT, N>(data, tw, span)
    }
}

/// One radix-4 stage with twiddles, in place, merging sub-transforms of length `span`;
/// `tw` holds the stage's `3·span` twiddle triplets. Returns the squared-magnitude bits of
/// its output.
///
/// Portable form: each word is unpacked once and the butterfly runs on i32 parts with exactly
/// the semantics of the [`Packed`] operations (`guard`, `cmul`, saturating `qadd16`/`qsub16`,
/// halving `shadd16`/`shsub16`/`shsax`/`shasx`, `mag2`); the twiddle products need no wrap
/// because the stage shift bounds them below 2^14 (module docs).
#[cfg_attr(target_arch = "arm", allow(dead_code))]
fn radix4_stage<const S: u32, const DETECT: bool, const N: usize>(
    data: &mut [u32; N],
    tw: &[u32],
    span: usize,
) -> u32 {
    let mut acc = 0u32;
    // The caller passes spans 2·4^j or 4^j below N with their full twiddle set; anything else
    // is left untouched rather than read out of bounds.
    if span == 0 || !(4 * span).is_power_of_two() || 4 * span > N || tw.len() < 3 * span {
        return 32;
    }
    let base = data.as_mut_ptr();
    for block in 0..N / (4 * span) {
        // SAFETY: blocks of 4·span words tile [0, N): block·4·span + 3·span + k < N for
        // k < span. The twiddle pointer reads 3k, 3k+1, 3k+2 < 3·span ≤ tw.len(). `data` is
        // borrowed mutably for the whole loop and `tw` is a different allocation (flash).
        unsafe {
            let mut p = base.add(block * 4 * span);
            let end = p.add(span);
            let mut t = tw.as_ptr();
            while p < end {
                let (w1, w2, w3) = (*t, *t.add(1), *t.add(2));
                let (br, bi) = cmul::<S>(*p.add(span), w2);
                let (cr, ci) = cmul::<S>(*p.add(2 * span), w1);
                let (dr, di) = cmul::<S>(*p.add(3 * span), w3);
                let (x0r, x0i) = parts(*p);
                let (ar, ai) = (guard::<S>(x0r), guard::<S>(x0i));
                let (t0r, t0i) = (sat(ar + br), sat(ai + bi));
                let (t1r, t1i) = (sat(ar - br), sat(ai - bi));
                let (t2r, t2i) = (sat(cr + dr), sat(ci + di));
                let (t3r, t3i) = (sat(cr - dr), sat(ci - di));
                let (y0r, y0i) = ((t0r + t2r) >> 1, (t0i + t2i) >> 1);
                let (y2r, y2i) = ((t0r - t2r) >> 1, (t0i - t2i) >> 1);
                let (y1r, y1i) = ((t1r + t3i) >> 1, (t1i - t3r) >> 1);
                let (y3r, y3i) = ((t1r - t3i) >> 1, (t1i + t3r) >> 1);
                if DETECT {
                    acc |= mag2(y0r, y0i) | mag2(y1r, y1i) | mag2(y2r, y2i) | mag2(y3r, y3i);
                }
                *p = pack(y0r, y0i);
                *p.add(span) = pack(y1r, y1i);
                *p.add(2 * span) = pack(y2r, y2i);
                *p.add(3 * span) = pack(y3r, y3i);
                p = p.add(1);
                t = t.add(3);
            }
        }
    }
    bits(acc)
}

/// The radix-4 stage of [`radix4_stage`] as one hand-scheduled ARMv7E-M loop: the same
/// operations in the same order (see [`crate::packed::Dsp`] for each), so the same bits, in
/// about 46 instructions per butterfly (no spills: 12 registers).
#[cfg(arm_dsp)]
fn radix4_stage_dsp<const S: u32, const DETECT: bool, const N: usize>(
    data: &mut [u32; N],
    tw: &[u32],
    span: usize,
) -> u32 {
    if span == 0 || !(4 * span).is_power_of_two() || 4 * span > N || tw.len() < 3 * span {
        return 32;
    }
    let mut acc = 0u32;
    let base = data.as_mut_ptr();
    for block in 0..N / (4 * span) {
        // SAFETY: as in `radix4_stage`: the loop touches words p, p + span, p + 2·span,
        // p + 3·span for p in [block·4·span, block·4·span + span), all below N, and reads
        // 3·span twiddle words.
        unsafe {
            let p = base.add(block * 4 * span);
            let q = p.add(2 * span);
            let end = p.add(span);
            macro_rules! kernel {
                ($cmul_im:literal, $pk:literal, $round:literal, $guard:literal) => {
                    if DETECT {
                        kernel!($cmul_im, $pk, $round, $guard, "smuad r9, r5, r5\n orr lr, lr, r9\n smuad r9, r10, r10\n orr lr, lr, r9\n smuad r9, r8, r8\n orr lr, lr, r9\n smuad r9, r11, r11\n orr lr, lr, r9")
                    } else {
                        kernel!($cmul_im, $pk, $round, $guard, "")
                    }
                };
                ($cmul_im:literal, $pk:literal, $round:literal, $guard:literal, $detect:literal) => {
                    core::arch::asm!(
                        "2:",
                        "ldmia r3!, {{r4, r5, r8}}",
                        // b = x1·W^2k (x1 at p + span)
                        "ldr r9, [r0, r2]",
                        "smusd r10, r9, r5",
                        "smuadx r11, r9, r5",
                        concat!("add r10, r10, #", $round),
                        $cmul_im,
                        concat!("pkhtb r5, r11, r10, asr #", $pk),
                        // c = x2·W^k (x2 at q)
                        "ldr r9, [r1]",
                        "smusd r10, r9, r4",
                        "smuadx r11, r9, r4",
                        concat!("add r10, r10, #", $round),
                        $cmul_im,
                        concat!("pkhtb r4, r11, r10, asr #", $pk),
                        // d = x3·W^3k (x3 at q + span)
                        "ldr r9, [r1, r2]",
                        "smusd r10, r9, r8",
                        "smuadx r11, r9, r8",
                        concat!("add r10, r10, #", $round),
                        $cmul_im,
                        concat!("pkhtb r8, r11, r10, asr #", $pk),
                        // a = guard(x0)
                        "ldr r9, [r0]",
                        $guard,
                        "qadd16 r10, r9, r5",
                        "qsub16 r9, r9, r5",
                        "qadd16 r11, r4, r8",
                        "qsub16 r4, r4, r8",
                        "shadd16 r5, r10, r11",
                        "shsub16 r8, r10, r11",
                        "shsax r10, r9, r4",
                        "shasx r11, r9, r4",
                        "str r10, [r0, r2]",
                        "str r11, [r1, r2]",
                        "str r8, [r1], #4",
                        $detect,
                        "str r5, [r0], #4",
                        "cmp r0, r12",
                        "bne 2b",
                        inout("r0") p => _, inout("r1") q => _, in("r2") span * 4,
                        inout("r3") tw.as_ptr() => _, out("r4") _, out("r5") _, out("r8") _,
                        out("r9") _, out("r10") _, out("r11") _, in("r12") end,
                        inout("lr") acc, options(nostack))
                };
            }
            // Per S: the rounding of the imaginary part (shift so that bit 14+S lands on bit 16,
            // add 2^15), the PKHTB shift 14+S, the real part's rounding constant 2^(13+S), and the
            // guard scaling of x0 with its +1 (packed::Packed::guard).
            match S {
                0 => kernel!("lsl r11, r11, #2\n add r11, r11, #0x8000", "14", "0x2000",
                    "mov r10, #0x00010001\n qadd16 r9, r9, r9\n qadd16 r9, r9, r10"),
                1 => kernel!("lsl r11, r11, #1\n add r11, r11, #0x8000", "15", "0x4000",
                    "mov r10, #0x00010001\n qadd16 r9, r9, r10"),
                2 => kernel!("add r11, r11, #0x8000", "16", "0x8000",
                    "mov r10, #0x00030003\n shadd16 r9, r9, r10"),
                _ => kernel!("asr r11, r11, #1\n add r11, r11, #0x8000", "17", "0x10000",
                    "mov r10, #0x00060006\n shadd16 r9, r9, r10\n mov r10, #0\n shadd16 r9, r9, r10"),
            }
        }
    }
    bits(acc)
}

/// Saturation to i16 of low register `$x` (temp `$t`) as Thumb-1 text: three instructions
/// when nothing saturates.
#[cfg(all(target_arch = "arm", not(arm_dsp)))]
macro_rules! t1_sat {
    ($x:literal, $t:literal) => {
        concat!(
            "sxth ", $t, ", ", $x, "\n", "cmp ", $t, ", ", $x, "\n", "beq 1f\n", "asrs ", $x, ", ",
            $x, ", #31\n", "movs ", $t, ", #128\n", "lsls ", $t, ", ", $t, ", #8\n", "subs ", $t,
            ", #1\n", "eors ", $x, ", ", $t, "\n", "1:\n"
        )
    };
}

/// Complex product of `r2` (x) and the twiddle at byte offset `$o` of `r3` (stored as
/// `wr, wr + wi, wi − wr`), rounded at `2^-$sh` (the rounding constant is in `lr`), as Thumb-1
/// text: real part to `r7`, imaginary part to `r5`; clobbers r2, r4, r6. Three multiplies:
/// `k = wr·(xr + xi)`, `re = k − xi·(wr + wi)`, `im = k + xr·(wi − wr)` — the same integers as
/// the four-multiply form (32-bit wrap-around cancels, the results fit).
#[cfg(all(target_arch = "arm", not(arm_dsp)))]
macro_rules! t1_cmul {
    ($sh:literal, $o0:literal, $o1:literal, $o2:literal) => {
        concat!(
            "sxth r5, r2\n",
            "asrs r2, r2, #16\n",
            "adds r7, r5, r2\n",
            "ldr r4, [r3, #",
            $o0,
            "]\n",
            "muls r7, r4, r7\n",
            "ldr r4, [r3, #",
            $o1,
            "]\n",
            "muls r4, r2, r4\n",
            "ldr r6, [r3, #",
            $o2,
            "]\n",
            "muls r6, r5, r6\n",
            "adds r5, r7, r6\n",
            "subs r7, r7, r4\n",
            "add r7, lr\n",
            "asrs r7, r7, #",
            $sh,
            "\n",
            "add r5, lr\n",
            "asrs r5, r5, #",
            $sh,
            "\n"
        )
    };
}

/// The twiddle table of [`Q15Fft::TWIDDLES`] re-coded for the Thumb-1 three-multiply complex
/// product: each entry as `(wr, wr + wi, wi − wr)`.
#[cfg(all(target_arch = "arm", not(arm_dsp)))]
const fn gauss_table<const N: usize>(packed: &[u32; N]) -> [[i32; 3]; N] {
    let mut t = [[0i32; 3]; N];
    let mut i = 0;
    while i < N {
        #[allow(clippy::indexing_slicing)]
        {
            let w = packed[i];
            let (wr, wi) = (w as u16 as i16 as i32, (w >> 16) as u16 as i16 as i32);
            t[i] = [wr, wr + wi, wi - wr];
        }
        i += 1;
    }
    t
}

/// [`radix4_stage`] as one hand-scheduled ARMv6-M (Thumb-1) loop: the same operations on
/// parts, in the same order, so the same bits. Pointers live in high registers, the three
/// twiddle products in a 24-byte stack frame; r6/r7 are saved and restored inside.
#[cfg(all(target_arch = "arm", not(arm_dsp)))]
fn radix4_stage_thumb1<const S: u32, const DETECT: bool, const N: usize>(
    data: &mut [u32; N],
    tw: &[[i32; 3]],
    span: usize,
) -> u32 {
    if span == 0 || !(4 * span).is_power_of_two() || 4 * span > N || tw.len() < 3 * span {
        return 32;
    }
    let mut acc = 0u32;
    let base = data.as_mut_ptr();
    for block in 0..N / (4 * span) {
        // SAFETY: as in `radix4_stage`: words p, p + span, p + 2·span, p + 3·span for p in
        // [block·4·span, block·4·span + span), all below N; 3·span twiddle words. The asm
        // restores sp, r6 and r7 before it ends.
        unsafe {
            let p = base.add(block * 4 * span);
            let end = p.add(span);
            macro_rules! kernel {
                ($sh:literal, $rnd:literal, $guard:literal, $det1:literal, $det3:literal,
                 $det0:literal, $det2:literal, $detacc:literal) => {
                    core::arch::asm!(
                        "push {{r6, r7}}",
                        "sub sp, #24",
                        "mov r12, r0",
                        "mov r9, r1",
                        "mov r10, r2",
                        "mov r11, r3",
                        "mov r8, r4",
                        "movs r4, #1",
                        concat!("lsls r4, r4, #", $rnd),
                        "mov lr, r4",
                        "2:",
                        // b = x1·W^2k: x1 at p + L, W^2k at t + 12
                        "mov r0, r12",
                        "mov r1, r9",
                        "ldr r2, [r0, r1]",
                        "mov r3, r10",
                        t1_cmul!($sh, "12", "16", "20"),
                        "str r7, [sp, #0]",
                        "str r5, [sp, #4]",
                        // c = x2·W^k: x2 at p + 2L, W^k at t
                        "mov r0, r12",
                        "mov r1, r9",
                        "lsls r1, r1, #1",
                        "ldr r2, [r0, r1]",
                        "mov r3, r10",
                        t1_cmul!($sh, "0", "4", "8"),
                        "str r7, [sp, #8]",
                        "str r5, [sp, #12]",
                        // d = x3·W^3k: x3 at p + 3L, W^3k at t + 24
                        "mov r0, r12",
                        "mov r1, r9",
                        "adds r0, r0, r1",
                        "lsls r1, r1, #1",
                        "ldr r2, [r0, r1]",
                        "mov r3, r10",
                        t1_cmul!($sh, "24", "28", "32"),
                        "str r7, [sp, #16]",
                        "str r5, [sp, #20]",
                        // a = guard(x0): parts in r1 (re), r2 (im)
                        "mov r0, r12",
                        "ldr r2, [r0]",
                        "sxth r1, r2",
                        "asrs r2, r2, #16",
                        $guard,
                        // t0 = a + b (r5, r6), t1 = a − b (r1, r2)
                        "ldr r3, [sp, #0]",
                        "ldr r4, [sp, #4]",
                        "adds r5, r1, r3",
                        "subs r1, r1, r3",
                        "adds r6, r2, r4",
                        "subs r2, r2, r4",
                        t1_sat!("r5", "r3"),
                        t1_sat!("r1", "r3"),
                        t1_sat!("r6", "r3"),
                        t1_sat!("r2", "r3"),
                        // t2.re (r7), t3.re (r3)
                        "ldr r3, [sp, #8]",
                        "ldr r4, [sp, #16]",
                        "adds r7, r3, r4",
                        "subs r3, r3, r4",
                        t1_sat!("r7", "r4"),
                        t1_sat!("r3", "r4"),
                        // y0.re, y2.re to the frame
                        "adds r0, r5, r7",
                        "asrs r0, r0, #1",
                        "subs r5, r5, r7",
                        "asrs r5, r5, #1",
                        "str r0, [sp, #8]",
                        "str r5, [sp, #16]",
                        // y1.im = (t1.im − t3.re)/2 (r0), y3.im = (t1.im + t3.re)/2 (r2)
                        "subs r0, r2, r3",
                        "asrs r0, r0, #1",
                        "adds r2, r2, r3",
                        "asrs r2, r2, #1",
                        // t2.im (r5), t3.im (r3)
                        "ldr r3, [sp, #12]",
                        "ldr r4, [sp, #20]",
                        "adds r5, r3, r4",
                        "subs r3, r3, r4",
                        t1_sat!("r5", "r4"),
                        t1_sat!("r3", "r4"),
                        // y0.im (r4), y2.im (r6), y1.re (r5), y3.re (r1)
                        "adds r4, r6, r5",
                        "asrs r4, r4, #1",
                        "subs r6, r6, r5",
                        "asrs r6, r6, #1",
                        "adds r5, r1, r3",
                        "asrs r5, r5, #1",
                        "subs r1, r1, r3",
                        "asrs r1, r1, #1",
                        // y1: |y1|² into r3, pack to r0
                        $det1,
                        "uxth r5, r5",
                        "lsls r0, r0, #16",
                        "orrs r0, r5",
                        // y3: |y3|² or-ed into r3, pack to r2
                        $det3,
                        "uxth r1, r1",
                        "lsls r2, r2, #16",
                        "orrs r2, r1",
                        // store y1 at p + L, y3 at p + 3L
                        "mov r1, r12",
                        "mov r5, r9",
                        "str r0, [r1, r5]",
                        "adds r1, r1, r5",
                        "lsls r5, r5, #1",
                        "str r2, [r1, r5]",
                        // y0 (re from the frame, im r4) → r4; y2 (re from the frame, im r6) → r6
                        "ldr r0, [sp, #8]",
                        $det0,
                        "uxth r0, r0",
                        "lsls r4, r4, #16",
                        "orrs r4, r0",
                        "ldr r0, [sp, #16]",
                        $det2,
                        "uxth r0, r0",
                        "lsls r6, r6, #16",
                        "orrs r6, r0",
                        // store y0 at p, y2 at p + 2L
                        "mov r1, r12",
                        "str r4, [r1]",
                        "mov r5, r9",
                        "lsls r5, r5, #1",
                        "str r6, [r1, r5]",
                        $detacc,
                        // next k
                        "adds r1, #4",
                        "mov r12, r1",
                        "mov r0, r10",
                        "adds r0, #36",
                        "mov r10, r0",
                        "cmp r1, r11",
                        "beq 3f",
                        "b 2b",
                        "3:",
                        "mov r4, r8",
                        "add sp, #24",
                        "pop {{r6, r7}}",
                        inout("r0") p => _, inout("r1") span * 4 => _,
                        inout("r2") tw.as_ptr() => _, inout("r3") end => _,
                        inout("r4") acc, out("r5") _, out("r8") _, out("r9") _,
                        out("r10") _, out("r11") _, out("r12") _, out("lr") _)
                };
            }
            macro_rules! by_detect {
                ($sh:literal, $rnd:literal, $guard:literal) => {
                    if DETECT {
                        kernel!($sh, $rnd, $guard,
                            "mov r3, r5\n muls r3, r3, r3\n mov r7, r0\n muls r7, r7, r7\n adds r3, r3, r7",
                            "mov r5, r1\n muls r5, r5, r5\n mov r7, r2\n muls r7, r7, r7\n adds r5, r5, r7\n orrs r3, r5",
                            "mov r5, r0\n muls r5, r5, r5\n mov r7, r4\n muls r7, r7, r7\n adds r5, r5, r7\n orrs r3, r5",
                            "mov r5, r0\n muls r5, r5, r5\n mov r7, r6\n muls r7, r7, r7\n adds r5, r5, r7\n orrs r3, r5",
                            "mov r5, r8\n orrs r5, r3\n mov r8, r5")
                    } else {
                        kernel!($sh, $rnd, $guard, "", "", "", "", "")
                    }
                };
            }
            // Guard scaling of x0's parts with the +1 of the final halving (packed::Packed::guard):
            // S = 0: 2v + 1; S = 1: v + 1 (no saturation possible in these stages, module docs);
            // S = 2: (v + 3) >> 1; S = 3: (v + 6) >> 2.
            match S {
                0 => by_detect!(
                    "14",
                    "13",
                    "lsls r1, r1, #1\n adds r1, #1\n lsls r2, r2, #1\n adds r2, #1"
                ),
                1 => by_detect!("15", "14", "adds r1, #1\n adds r2, #1"),
                2 => by_detect!(
                    "16",
                    "15",
                    "adds r1, #3\n asrs r1, r1, #1\n adds r2, #3\n asrs r2, r2, #1"
                ),
                _ => by_detect!(
                    "17",
                    "16",
                    "adds r1, #6\n asrs r1, r1, #2\n adds r2, #6\n asrs r2, r2, #2"
                ),
            }
        }
    }
    bits(acc)
}

/// Byte offsets `4·rev(g)` of the first radix-4 stage's groups (`g < N/4`, `rev` over
/// log2(N/4) bits), for the Thumb-1 loop; the rest of the table is unused.
#[cfg(all(target_arch = "arm", not(arm_dsp)))]
const fn reversed_offsets<const N: usize>() -> [u16; N] {
    let mut t = [0u16; N];
    let bits = N.trailing_zeros() - 2;
    let mut g = 0;
    while g < N / 4 {
        let mut r = 0usize;
        let mut b = 0;
        while b < bits {
            r |= ((g >> b) & 1) << (bits - 1 - b);
            b += 1;
        }
        #[allow(clippy::indexing_slicing)]
        {
            t[g] = (4 * r) as u16;
        }
        g += 1;
    }
    t
}

/// [`first_radix4`] for shifts 0..=2 as one ARMv6-M (Thumb-1) loop (same operations on parts,
/// same bits). Pointers live in high registers; r6/r7 are saved and restored inside.
#[cfg(all(target_arch = "arm", not(arm_dsp)))]
fn first_radix4_thumb1<const S: u32, const N: usize>(
    input: &[u32; N],
    output: &mut [u32; N],
) -> u32 {
    struct Table<const N: usize>;
    impl<const N: usize> Table<N> {
        const OFFSETS: [u16; N] = reversed_offsets::<N>();
    }
    let offsets: &[u16; N] = &Table::<N>::OFFSETS;
    let mut acc = 0u32;
    macro_rules! kernel {
        ($guard_a:literal, $guard_b:literal, $guard_cd:literal) => {
            // SAFETY: the offset table gives r = rev(g) < N/4 for g < N/4, so the loads at
            // r, r + N/4, r + N/2, r + 3N/4 are inside `input`; the loop writes the 4·(N/4)
            // words of `output` in order. The asm restores sp, r6 and r7.
            unsafe {
                core::arch::asm!(
                    "push {{r6, r7}}",
                    "sub sp, #8",
                    "mov r9, r0",
                    "mov r10, r1",
                    "mov r11, r2",
                    "mov r12, r3",
                    "mov r8, r4",
                    "lsls r5, r5, #2",
                    "adds r5, r5, r3",
                    "mov lr, r5",
                    "2:",
                    // r·4 from the table; x0 = x[r], x2 = x[r + N/4], x1 = x[r + N/2],
                    // x3 = x[r + 3N/4]
                    "mov r0, r9",
                    "ldrh r1, [r0]",
                    "adds r0, #2",
                    "mov r9, r0",
                    "mov r0, r10",
                    "adds r0, r0, r1",
                    "ldr r2, [r0]",
                    "mov r1, r11",
                    "ldr r4, [r0, r1]",
                    "adds r0, r0, r1",
                    "adds r0, r0, r1",
                    "ldr r3, [r0]",
                    "ldr r5, [r0, r1]",
                    // a (r6 re, r2 im) and b (r7 re, r3 im)
                    "sxth r6, r2",
                    "asrs r2, r2, #16",
                    "sxth r7, r3",
                    "asrs r3, r3, #16",
                    $guard_a,
                    $guard_b,
                    // t0 = a + b (r0, r1), t1 = a − b (r6, r2)
                    "adds r0, r6, r7",
                    "subs r6, r6, r7",
                    "adds r1, r2, r3",
                    "subs r2, r2, r3",
                    t1_sat!("r0", "r3"),
                    t1_sat!("r6", "r3"),
                    t1_sat!("r1", "r3"),
                    t1_sat!("r2", "r3"),
                    "str r0, [sp, #0]",
                    "str r1, [sp, #4]",
                    // c (r3 re, r4 im), d (r7 re, r5 im)
                    "sxth r3, r4",
                    "asrs r4, r4, #16",
                    "sxth r7, r5",
                    "asrs r5, r5, #16",
                    $guard_cd,
                    // t2 = c + d (r0, r1), t3 = c − d (r3, r4)
                    "adds r0, r3, r7",
                    "subs r3, r3, r7",
                    "adds r1, r4, r5",
                    "subs r4, r4, r5",
                    t1_sat!("r0", "r7"),
                    t1_sat!("r3", "r7"),
                    t1_sat!("r1", "r7"),
                    t1_sat!("r4", "r7"),
                    // y1 = ((t1.re + t3.im)/2, (t1.im − t3.re)/2) → r5 re, r7 im
                    // y3 = ((t1.re − t3.im)/2, (t1.im + t3.re)/2) → r6 re, r2 im
                    "adds r5, r6, r4",
                    "asrs r5, r5, #1",
                    "subs r7, r2, r3",
                    "asrs r7, r7, #1",
                    "subs r6, r6, r4",
                    "asrs r6, r6, #1",
                    "adds r2, r2, r3",
                    "asrs r2, r2, #1",
                    // |y1|² | |y3|² into r3; pack y1 → r5, y3 → r6
                    "mov r3, r5",
                    "muls r3, r3, r3",
                    "mov r4, r7",
                    "muls r4, r4, r4",
                    "adds r3, r3, r4",
                    "uxth r5, r5",
                    "lsls r7, r7, #16",
                    "orrs r5, r7",
                    "mov r4, r6",
                    "muls r4, r4, r4",
                    "mov r7, r2",
                    "muls r7, r7, r7",
                    "adds r4, r4, r7",
                    "orrs r3, r4",
                    "uxth r6, r6",
                    "lsls r2, r2, #16",
                    "orrs r6, r2",
                    // y0 = (t0 + t2)/2, y2 = (t0 − t2)/2 from t0 (frame) and t2 (r0, r1)
                    "ldr r2, [sp, #0]",
                    "ldr r4, [sp, #4]",
                    "adds r7, r2, r0",
                    "asrs r7, r7, #1",
                    "subs r2, r2, r0",
                    "asrs r2, r2, #1",
                    "adds r0, r4, r1",
                    "asrs r0, r0, #1",
                    "subs r4, r4, r1",
                    "asrs r4, r4, #1",
                    // store y1, y3; then y0 (re r7, im r0) and y2 (re r2, im r4)
                    "mov r1, r12",
                    "str r5, [r1, #4]",
                    "str r6, [r1, #12]",
                    "mov r5, r7",
                    "muls r5, r5, r5",
                    "mov r6, r0",
                    "muls r6, r6, r6",
                    "adds r5, r5, r6",
                    "orrs r3, r5",
                    "uxth r7, r7",
                    "lsls r0, r0, #16",
                    "orrs r0, r7",
                    "str r0, [r1, #0]",
                    "mov r5, r2",
                    "muls r5, r5, r5",
                    "mov r6, r4",
                    "muls r6, r6, r6",
                    "adds r5, r5, r6",
                    "orrs r3, r5",
                    "uxth r2, r2",
                    "lsls r4, r4, #16",
                    "orrs r4, r2",
                    "str r4, [r1, #8]",
                    "mov r5, r8",
                    "orrs r5, r3",
                    "mov r8, r5",
                    "adds r1, #16",
                    "mov r12, r1",
                    "cmp r1, lr",
                    "beq 3f",
                    "b 2b",
                    "3:",
                    "mov r4, r8",
                    "add sp, #8",
                    "pop {{r6, r7}}",
                    inout("r0") offsets.as_ptr() => _, inout("r1") input.as_ptr() => _,
                    inout("r2") N => _, inout("r3") output.as_mut_ptr() => _,
                    inout("r4") acc, inout("r5") N => _, out("r8") _, out("r9") _,
                    out("r10") _, out("r11") _, out("r12") _, out("lr") _)
            }
        };
    }
    // Guards as in packed::Packed::guard (a carries the +1 of the final halving); at these
    // shifts the input bound leaves no room for saturation (module docs).
    match S {
        0 => kernel!(
            "lsls r6, r6, #1\n adds r6, #1\n lsls r2, r2, #1\n adds r2, #1",
            "lsls r7, r7, #1\n lsls r3, r3, #1",
            "lsls r3, r3, #1\n lsls r4, r4, #1\n lsls r7, r7, #1\n lsls r5, r5, #1"
        ),
        1 => kernel!("adds r6, #1\n adds r2, #1", "", ""),
        _ => kernel!(
            "adds r6, #3\n asrs r6, r6, #1\n adds r2, #3\n asrs r2, r2, #1",
            "adds r7, #1\n asrs r7, r7, #1\n adds r3, #1\n asrs r3, r3, #1",
            "adds r3, #1\n asrs r3, r3, #1\n adds r4, #1\n asrs r4, r4, #1\n adds r7, #1\n asrs r7, r7, #1\n adds r5, #1\n asrs r5, r5, #1"
        ),
    }
    bits(acc)
}

/// Radix-4 stage twiddle triplets for every stage of an `N`-point transform (see
/// [`Q15Fft::TWIDDLES`]), Q15, packed (re low, im high), from a compile-time f64 evaluation;
/// values round to nearest and saturate at `32767`.
const fn twiddle_table<const N: usize>() -> [u32; N] {
    let mut t = [0u32; N];
    let mut span = if N.trailing_zeros() % 2 == 1 { 2 } else { 4 };
    let mut at = 0;
    while span < N {
        let mut k = 0;
        while k < span {
            let mut q = 1;
            while q <= 3 {
                // W^(qk) with W = e^{-j2π/4·span} is e^{-j2π·qk/(4·span)}.
                let (c, s) = cos_sin_turn(q * k, 4 * span);
                // Const evaluation: an out-of-range index is a compile error, never a panic.
                #[allow(clippy::indexing_slicing)]
                {
                    t[at] = Cq15::new(q15_const(c), q15_const(-s)).to_bits();
                }
                at += 1;
                q += 1;
            }
            k += 1;
        }
        span *= 4;
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
    use crate::packed::{Packed, Portable};

    #[test]
    fn part_helpers_match_the_packed_reference() {
        // The portable kernels compute on i32 parts; the packed operations are the reference
        // the Cortex-M4 loops implement instruction by instruction. Pseudo-random words
        // (xorshift) in the ranges the kernels use.
        let mut x = 0x1234_5678u32;
        let mut next = || {
            x ^= x << 13;
            x ^= x >> 17;
            x ^= x << 5;
            x
        };
        for _ in 0..20_000 {
            let (a, w) = (next() & 0x3fff_3fff, next());
            let (ar, ai) = parts(a);
            macro_rules! check_s {
                ($s:literal) => {
                    let (r, i) = cmul::<$s>(a, w);
                    assert_eq!(pack(r, i), Portable::cmul::<$s>(a, w));
                    assert_eq!(
                        pack(guard::<$s>(ar), guard::<$s>(ai)),
                        Portable::guard::<$s, true>(a)
                    );
                };
            }
            check_s!(0);
            check_s!(1);
            check_s!(2);
            check_s!(3);
            let b = next();
            let (br, bi) = parts(b);
            assert_eq!(pack(sat(ar + br), sat(ai + bi)), Portable::qadd16(a, b));
            assert_eq!(pack(sat(ar - br), sat(ai - bi)), Portable::qsub16(a, b));
            assert_eq!(pack((ar + bi) >> 1, (ai - br) >> 1), Portable::shsax(a, b));
            assert_eq!(pack((ar - bi) >> 1, (ai + br) >> 1), Portable::shasx(a, b));
            assert_eq!(mag2(ar, ai), Portable::mag2(a));
        }
    }

    #[test]
    fn twiddles_match_libm_to_q15_rounding() {
        // The compile-time table against libm's cos/sin (an independent implementation):
        // equal after Q15 rounding to within one LSB (values on a rounding boundary).
        let tw = Q15Fft::<256>::TWIDDLES;
        let mut at = 0;
        for span in [4usize, 16, 64] {
            for k in 0..span {
                for q in 1..=3 {
                    let th = 2.0 * core::f64::consts::PI * (q * k) as f64 / (4 * span) as f64;
                    let c = Cq15::from_bits(tw[at]);
                    assert!((i32::from(c.re) - i32::from(q15_const(libm::cos(th)))).abs() <= 1);
                    assert!((i32::from(c.im) - i32::from(q15_const(-libm::sin(th)))).abs() <= 1);
                    at += 1;
                }
            }
        }
        assert_eq!(at, 252); // 3·(4 + 16 + 64) entries, counted by hand
        assert_eq!(Cq15::from_bits(tw[0]), Cq15::new(32767, 0));
        // span 4, k = 1, q = 2: W^2 = e^{-jπ/4}.
        assert_eq!(Cq15::from_bits(tw[4]), Cq15::new(23170, -23170));
    }

    #[test]
    fn impulse_gives_flat_spectrum() {
        // DFT of an impulse of amplitude A is flat at A (unnormalised; textbook identity).
        let mut buf = [Cq15::ZERO; 64];
        buf[0] = Cq15::new(8192, 0);
        let shifts = Q15Fft::<64>::new().forward_raw(&mut buf);
        for v in buf {
            assert_eq!(
                f64::from(v.re) * 2f64.powi(shifts),
                8192.0,
                "shifts {shifts}"
            );
            assert_eq!(v.im, 0);
        }
    }
}
