//! Demapper: hard decisions and max-log LLRs with channel-state weighting.
//!
//! Input is an equalized (ZF, or bias-removed MMSE) symbol `y` and its channel-state weight
//! `w = |H|² / N0` — the post-equalization SNR of that bin (per-bin SINR once interference is
//! tracked). The max-log LLR of bit `b` is
//!
//! ```text
//! L(b) = w · ( min_{x: b=1} |y - x|²  -  min_{x: b=0} |y - x|² )      (ln P(b=0)/P(b=1))
//! ```
//!
//! positive means bit 0 (DESIGN.md convention; REFERENCES item 10 uses the opposite sign).
//! Square QAM separates into two Gray PAM axes, so each axis is searched on its own
//! (`2^m` levels, `m ≤ 4` bits): exact max-log, not the simplified edge-free forms.
//!
//! ## i8 output
//!
//! [`llr_to_i8`] quantises `L · scale` with rounding to nearest and saturation at ±127
//! (-128 is never produced, so the range is symmetric). [`I8_LSB_PER_LLR`] is the default
//! scale: 4 LSB per unit of natural-log LLR, i.e. a resolution of 0.25 and a clip at ±31.75.

use crate::error::ProcessError;
use crate::modulation::{gray, Modulation};
use crate::Cf32;

/// Default i8 LLR scale: LSBs per unit natural-log LLR.
pub const I8_LSB_PER_LLR: f32 = 4.0;

/// Hard decision: the bits (0/1, I first) of the constellation point nearest to `y`.
/// `bits` must hold `bits_per_symbol()` values; extra entries are left untouched.
pub fn hard_decision(modulation: Modulation, y: Cf32, bits: &mut [u8]) -> Result<(), ProcessError> {
    let k = modulation.bits_per_symbol();
    if bits.len() < k {
        return Err(ProcessError::BufferLength {
            expected: k,
            actual: bits.len(),
        });
    }
    if !(y.re.is_finite() && y.im.is_finite()) {
        return Err(ProcessError::NonFinite { index: 0 });
    }
    let m = modulation.bits_per_axis();
    let a = modulation.axis_scale();
    let (i_bits, rest) = bits.split_at_mut_checked(m).unwrap_or_default();
    axis_hard(y.re / a, i_bits);
    if modulation != Modulation::Bpsk {
        axis_hard(y.im / a, rest.get_mut(..m).unwrap_or_default());
    }
    Ok(())
}

/// Max-log LLRs of one symbol: `y` equalized, `weight = |H|²/N0` (≥ 0, finite). Writes
/// `bits_per_symbol()` values to `llrs` (I bits first). Positive means bit 0.
pub fn llr_max_log(
    modulation: Modulation,
    y: Cf32,
    weight: f32,
    llrs: &mut [f32],
) -> Result<(), ProcessError> {
    let k = modulation.bits_per_symbol();
    if llrs.len() < k {
        return Err(ProcessError::BufferLength {
            expected: k,
            actual: llrs.len(),
        });
    }
    if !(y.re.is_finite() && y.im.is_finite()) {
        return Err(ProcessError::NonFinite { index: 0 });
    }
    if !(weight.is_finite() && weight >= 0.0) {
        return Err(ProcessError::InvalidWeight);
    }
    let m = modulation.bits_per_axis();
    let a = modulation.axis_scale();
    let (i_llrs, rest) = llrs.split_at_mut_checked(m).unwrap_or_default();
    axis_llr(y.re, a, weight, i_llrs);
    if modulation != Modulation::Bpsk {
        axis_llr(y.im, a, weight, rest.get_mut(..m).unwrap_or_default());
    }
    Ok(())
}

/// Max-log LLRs for a run of symbols: `ys[i]` with weight `weights[i]`; `llrs` must hold
/// `ys.len() · bits_per_symbol()` values. On error the index reported is that of the symbol.
pub fn demap_symbols(
    modulation: Modulation,
    ys: &[Cf32],
    weights: &[f32],
    llrs: &mut [f32],
) -> Result<(), ProcessError> {
    let k = modulation.bits_per_symbol();
    if weights.len() != ys.len() {
        return Err(ProcessError::BufferLength {
            expected: ys.len(),
            actual: weights.len(),
        });
    }
    if llrs.len() != ys.len() * k {
        return Err(ProcessError::BufferLength {
            expected: ys.len() * k,
            actual: llrs.len(),
        });
    }
    for (index, y) in ys.iter().enumerate() {
        if !(y.re.is_finite() && y.im.is_finite()) {
            return Err(ProcessError::NonFinite { index });
        }
    }
    for ((y, w), out) in ys.iter().zip(weights).zip(llrs.chunks_exact_mut(k)) {
        llr_max_log(modulation, *y, *w, out)?;
    }
    Ok(())
}

/// Quantises LLRs to i8: `round(L · scale)` saturated to ±127. NaN maps to 0 (no belief);
/// callers never produce NaN, since the demapper rejects non-finite input.
pub fn llr_to_i8(llrs: &[f32], scale: f32, out: &mut [i8]) -> Result<(), ProcessError> {
    if out.len() != llrs.len() {
        return Err(ProcessError::BufferLength {
            expected: llrs.len(),
            actual: out.len(),
        });
    }
    for (o, &l) in out.iter_mut().zip(llrs) {
        // Round half away from zero; `as` truncates toward zero and maps NaN to 0.
        let v = (l * scale).clamp(-127.0, 127.0);
        *o = (v + if v >= 0.0 { 0.5 } else { -0.5 }) as i8;
    }
    Ok(())
}

/// Nearest Gray PAM level on the integer grid `u`; writes its label bits (MSB first).
fn axis_hard(u: f32, bits: &mut [u8]) {
    let m = bits.len();
    let levels = 1usize << m;
    let top = (levels - 1) as f32;
    let index = (((u + top) * 0.5).clamp(0.0, top) + 0.5) as usize;
    let label = gray(index);
    for (j, b) in bits.iter_mut().enumerate() {
        *b = ((label >> (m - 1 - j)) & 1) as u8;
    }
}

/// Exact max-log LLRs of one Gray PAM axis: `x` received amplitude, `a` grid step,
/// `w` channel-state weight, `out` one LLR per axis bit (MSB first).
///
/// O(1) per bit. Bit `j` of the Gray label of level index `i` is `⌊(i + B)/2B⌋ mod 2` with
/// `B = 2^(m-1-j)`, so the levels sharing a bit value form runs of `2B` indices. The nearest
/// level overall (`i*`) settles one side of the LLR; the nearest level with the other bit
/// value is adjacent to the run holding `i*`, one index below or above it.
fn axis_llr(x: f32, a: f32, w: f32, out: &mut [f32]) {
    let m = out.len();
    let levels = 1usize << m;
    let top = (levels - 1) as f32;
    let u = x / a;
    let level = |i: usize| (2 * i) as f32 - top;
    // Non-negative after the clamp, so adding 0.5 and truncating rounds to nearest.
    let nearest = (((u + top) * 0.5).clamp(0.0, top) + 0.5) as usize;
    let d_nearest = (u - level(nearest)) * (u - level(nearest));
    let scale = w * a * a;
    for (j, o) in out.iter_mut().enumerate() {
        let block = 1usize << (m - 1 - j);
        let run = (nearest + block) >> (m - j);
        let lo = (2 * block * run).saturating_sub(block);
        let hi = (2 * block * run + block - 1).min(levels - 1);
        let mut d_other = f32::INFINITY;
        if lo >= 1 {
            let e = u - level(lo - 1);
            d_other = e * e;
        }
        if hi + 1 < levels {
            let e = u - level(hi + 1);
            d_other = d_other.min(e * e);
        }
        // L = w·a²·(d1 − d0): the nearest level's bit value takes d_nearest.
        *o = scale
            * if run & 1 == 0 {
                d_other - d_nearest
            } else {
                d_nearest - d_other
            };
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn worked_example_16qam_of_references_item_10() {
        // REFERENCES item 10, 16-QAM worked example (Tosato & Bisaglia style max-log, verified
        // there by brute force): y = 0.986063+0.005971j, scale 4a²|H|²/N0 = 2.56 → with
        // |H|² = 0.64, N0 = 0.1 the weight is 6.4. Their LLRs (ln P1/P0): 10.8452, -2.86261,
        // 0.0483412, 5.07166. Ours are negated (ln P0/P1).
        let y = Cf32::new(0.986_063, 0.005_971);
        let mut l = [0.0f32; 4];
        llr_max_log(Modulation::Qam16, y, 0.64 / 0.1, &mut l).unwrap();
        let want = [-10.8452, 2.86261, -0.0483412, -5.07166];
        for (g, w) in l.iter().zip(want) {
            assert!((g - w).abs() < 2e-4 * w.abs().max(1.0), "{l:?}");
        }
    }

    #[test]
    fn i8_saturates_symmetrically() {
        let mut out = [0i8; 5];
        llr_to_i8(&[1e9, -1e9, 0.3, -0.3, f32::NAN], 4.0, &mut out).unwrap();
        assert_eq!(out, [127, -127, 1, -1, 0]);
    }

    #[test]
    fn non_finite_input_is_an_error() {
        let mut l = [0.0f32; 2];
        assert_eq!(
            llr_max_log(Modulation::Qpsk, Cf32::new(f32::NAN, 0.0), 1.0, &mut l),
            Err(ProcessError::NonFinite { index: 0 })
        );
        assert_eq!(
            llr_max_log(Modulation::Qpsk, Cf32::new(0.0, 0.0), f32::INFINITY, &mut l),
            Err(ProcessError::InvalidWeight)
        );
    }
}
