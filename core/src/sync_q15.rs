//! Integer forms of the preamble steps after detection: the even-integer CFO from symbol B and
//! the fine timing from symbol B's impulse response, on Q15 windows with the Q15 FFT and NCO.
//! Same decisions as [`crate::acquire::total_cfo`] and [`crate::acquire::first_path_offset`]
//! (Schmidl & Cox 1997 for the differential code), with no floating point.

use crate::fft::OfdmFft;
use crate::fixed::Cq15;
use crate::fixed_math::shift_round;
use crate::nco::NcoQ15;
use crate::numerology::Numerology;
use crate::preamble::{preamble_signs, PreambleSymbol};

/// NCO increment that removes a CFO of `cfo_q31` (ε·2^31, |ε| < 1) at FFT size `n`:
/// `round(−ε/N · 2^32) = round(−2·cfo_q31 / N)`.
pub fn increment_for_cfo_q31(cfo_q31: i32, n: usize) -> u32 {
    shift_round(-2 * i64::from(cfo_q31), n.trailing_zeros() as i32) as u32
}

/// Total CFO in Q16 subcarrier spacings: the fractional part `cfo_fraction_q31` (ε·2^31) plus
/// the even shift `2g`, `|2g| ≤ max_shift`, that maximises `|Σ_k X_A*(k+2g) v_k X_B(k+2g)|`
/// over the even used bins. `window_a`, `window_b`: the FFT windows of preamble symbols A and
/// B (`N + L` apart), not yet derotated. `fft` is any Q15 FFT of size `N`.
pub fn total_cfo_q15<F: OfdmFft<N, Sample = Cq15>, const N: usize>(
    numerology: &Numerology,
    fft: &mut F,
    window_a: &[Cq15; N],
    window_b: &[Cq15; N],
    cfo_fraction_q31: i32,
    max_shift: usize,
) -> i32 {
    let inc = increment_for_cfo_q31(cfo_fraction_q31, N);
    let mut xa = *window_a;
    let mut xb = *window_b;
    let mut nco = NcoQ15::new();
    nco.set_increment(inc);
    nco.derotate(&mut xa);
    nco.set_phase(0);
    nco.advance(numerology.symbol_len() as u64);
    nco.derotate(&mut xb);
    fft.forward(&mut xa);
    fft.forward(&mut xb);
    let sa = preamble_signs::<N>(numerology, PreambleSymbol::A);
    let sb = preamble_signs::<N>(numerology, PreambleSymbol::B);
    let half = (max_shift / 2) as i64;
    let mut best = (0u64, 0i64, false);
    for g in -half..=half {
        let shift = 2 * g;
        let (mut re, mut im) = (0i64, 0i64);
        for u in 0..numerology.used_len() {
            let k = i64::from(numerology.logical_bin(u));
            if k % 2 != 0 {
                continue;
            }
            let src = numerology.fft_index(u);
            let v = i64::from(sa.get(src).copied().unwrap_or(0))
                * i64::from(sb.get(src).copied().unwrap_or(0));
            let idx = (k + shift).rem_euclid(N as i64) as usize;
            let (a, b) = (
                xa.get(idx).copied().unwrap_or_default(),
                xb.get(idx).copied().unwrap_or_default(),
            );
            let (ar, ai, br, bi) = (
                i64::from(a.re),
                i64::from(a.im),
                i64::from(b.re),
                i64::from(b.im),
            );
            // conj(a)·b·v
            re += v * (ar * br + ai * bi);
            im += v * (ar * bi - ai * br);
        }
        // |acc|² on values brought under 2^31 (a common shift keeps the comparison fair).
        let (r, i) = (re >> 16, im >> 16);
        let mag = (r * r + i * i) as u64;
        if !best.2 || mag > best.0 {
            best = (mag, shift, true);
        }
    }
    (best.1 as i32) * 65536 + shift_round(i64::from(cfo_fraction_q31), 15) as i32
}

/// Fine timing on symbol B (already derotated, Q15): the earliest lag in `[−N/4, N/4)` of
/// `IFFT(Y_k B_k*)` whose power reaches `fraction_q16/65536` of the strongest. Returns 0 for
/// an empty window.
pub fn first_path_offset_q15<F: OfdmFft<N, Sample = Cq15>, const N: usize>(
    numerology: &Numerology,
    fft: &mut F,
    window_b: &[Cq15; N],
    fraction_q16: u32,
) -> i32 {
    let sb = preamble_signs::<N>(numerology, PreambleSymbol::B);
    let mut y = *window_b;
    fft.forward(&mut y);
    for (v, s) in y.iter_mut().zip(sb.iter()) {
        *v = match s {
            1 => *v,
            -1 => Cq15::new(v.re.saturating_neg(), v.im.saturating_neg()),
            _ => Cq15::ZERO,
        };
    }
    fft.inverse(&mut y);
    let q = (N / 4) as i32;
    let power = |lag: i32| {
        y.get(lag.rem_euclid(N as i32) as usize).map_or(0u64, |v| {
            (i64::from(v.re) * i64::from(v.re) + i64::from(v.im) * i64::from(v.im)) as u64
        })
    };
    let peak = (-q..q).map(power).max().unwrap_or(0);
    if peak == 0 {
        return 0;
    }
    let level = ((u128::from(peak) * u128::from(fraction_q16)) >> 16) as u64;
    (-q..q).find(|&lag| power(lag) >= level).unwrap_or(0)
}
