//! Maximum Doppler shift from the pilots' time correlation, in integers: the estimator of
//! [`crate::doppler`] for cores without an FPU (Cortex-M0). Input: the Q15 FFT output and its
//! block exponent ([`crate::receiver_q15::ReceiverQ15::bins_with_exponent`]); output: `fd·Tsym`
//! and `fd·T` in Q31 with the same status and lag as the f32 estimator. No floating point is
//! reachable from [`DopplerEstimatorQ15::new`], [`DopplerEstimatorQ15::update`] or
//! [`DopplerEstimatorQ15::estimate`] ([`DopplerEstimateQ15::to_f32`] is for hosts).
//!
//! ## Per symbol
//!
//! The statistic is the f32 one (see [`crate::doppler`] for the model, the lag ratio
//! `J0(2y)/J0(y)` and the range flags): per lag `τ = u·2^j`, `Σ Z_m Z*_{m−τ}`, the powers of
//! the same pairs, and the pair count. With `Z = ±Y` (the pilot sign; the amplitude cancels):
//!
//! | value | format |
//! |---|---|
//! | pilot bins `Y` | `Cq15` with the symbol's block exponent `e` (value `Y·2^e`) |
//! | one product `Y_m Y*_{m−τ}`, `|Y_m|²` | `i16·i16` in `i32` (`≤ 2^30` each), parts summed in `i64` (`≤ 2^31`) |
//! | per-symbol sums over the pilots | exact `i64` (`≤ pilots·2^31 ≤ 2^43`), exponent `e_m + e_{m−τ}` or `2e_m` |
//! | running sums | `i64` sharing one exponent `E` (value `acc·2^E`), magnitudes kept below `2^60` |
//! | pair counts | `i64`, Q16 |
//! | forgetting `λ = 1 − 2^−k` | `s − (s >> k)` with rounding, every sum, every symbol |
//!
//! **Exponent alignment and headroom.** The reference exponent `E` of the running sums is
//! re-chosen every symbol: `E = M − 60`, with `M` the binary magnitude (bits + exponent) of
//! the largest running sum or new per-symbol sum. Every value then fits in 60 bits at `E`, so a
//! sum plus one new term stays below `2^61` (2 bits of headroom in `i64`: no overflow, no
//! saturation). A louder symbol raises `E` (the sums shift right, rounded); decaying sums or
//! quieter symbols lower it (exact left shifts), so new terms are always rounded at `2^−60` of
//! the largest sum: the relative rounding per symbol is `≤ 2^−60`, against `2^−24` in f32.
//! Terms from a symbol more than 60 bits quieter than the sums round to zero (they weigh
//! nothing in the f32 sums either). Sums that decay below `2^−4096` of the unit (all-zero
//! input under forgetting) are cleared, as f32 sums underflow.
//!
//! Block exponents must satisfy `|e| ≤` [`MAX_BLOCK_EXPONENT`] (the Q15 FFT gives about
//! `−20..=20`); any constant offset of the exponents, like the FFT's residual scale, cancels
//! in every ratio.
//!
//! ## Per estimate (once per frame)
//!
//! * Lag coefficients `c = S/sqrt(P_new·P_old)` in Q30: the product of the powers in `u128`,
//!   normalised by an even shift, [`inv_sqrt`] (better than `4·10⁻⁹`), one `i128` product.
//! * The pair ratio `Re[c(2τ)·c*(τ)²]/|c(τ)|³` in Q30 with one `i128` division and an integer
//!   square root.
//! * The inversion of `g(y) = J0(2y)/J0(y)` with the same second-order FFT-window correction
//!   as f32: `1 − g = num/den` with `num = (J0(y) − J0(2y)) + h(J0''(y) − J0''(2y))`,
//!   `den = J0(y) + h·J0''(y)`, `h = k2·y²/2`. `1 − J0(x)` and `J1(x)/x` (for
//!   `J0'' = −J0 + J1/x`, A&S 9.1.27) come from their ascending series in `u = x²/4` (A&S
//!   9.1.10; both from memory) in the nested form `1 − (u/k²)(1 − …)` with 12 factors in
//!   Q30, reciprocals of `k²` and `k(k+1)` as Q32 constants: truncation below `10⁻¹³` at the
//!   largest argument `x = 3.4`, rounding a few `2^−30` per value. Bisection over `y` in Q30
//!   on `[0, 1.7]` compares `num·2^30` with `d·den` (no division; `den ≥ 0.28`), 28 steps:
//!   `1.7·2^−28 = 6·10⁻⁹` rad. Measured against the f64 library `J0`/`J1`: the inverted `y`
//!   is within `3·10⁻⁸` rad plus `2·10⁻⁷` relative on `[0.02, 1.7]` (unit tests).
//! * The noise floor `4·sqrt(var r)` of the BelowRange flag, with the f32 formula, in Q60/Q30
//!   with checked `i128` steps (an overflow reads as an infinite variance, as f32 `inf`).
//! * Output `fd·Tsym = y/(2π·τ)` in Q31 by the constant `2^32/π` and one division by `τ`;
//!   `fd·T = fd·Tsym·N/(N + L)`.
//!
//! On the same samples the two estimators differ by their arithmetic only: the Q15 FFT's
//! rounding (73 dB below the pilots at −12 dBFS), f32 sums rounding at `2^−24` per addition
//! against `2^−60` here, and the inversion figures above. On the frames of `tests/doppler.rs`
//! (`tests/doppler_q15.rs`, 2200 fading trials) the status and lag were the same in every
//! trial and `fd·Tsym` within `1.2·10⁻⁵` relative; the accuracy is the f32 estimator's (90th
//! percentile of the relative error 8.4–9.3 % over ten periods on an exponential profile).
//!
//! ## Cost
//!
//! Per symbol: `pilots × levels` complex multiply-adds with four `i16·i16 → i32` products
//! each (one `MULS` each on a Cortex-M0; no 64-bit multiply), `pilots` squares, one PRBS replay per lag level
//! for the partner symbol's pilot signs, and about `4·levels` `i64` shifts to keep the sums
//! aligned. Per estimate: up to three inversions of 28 steps, each step four series of 12
//! `i64` multiply-shifts; a few `i128` multiplications and divisions. Memory: `H × P` `Cq15`
//! of history (half the f32 estimator's) plus per-slot exponent, power and symbol index
//! (about 3 KB in all for `P = 16`, `H = 32`).

use crate::doppler::{DopplerEstimate, DopplerStatus, MAX_LAG_LEVELS};
use crate::error::{ConfigError, ProcessError};
use crate::fixed::Cq15;
use crate::fixed_math::inv_sqrt;
use crate::numerology::{BinKind, Numerology};
use crate::pilots::Prbs15;

/// Largest accepted magnitude of a symbol's block exponent (the Q15 FFT's are within ±20).
pub const MAX_BLOCK_EXPONENT: i32 = 64;
/// Largest forgetting shift `k` (`λ = 1 − 2^−k`, memory about `2^k` symbols).
pub const MAX_FORGETTING_SHIFT: u8 = 30;

/// 1.0 in Q30.
const ONE_Q30: i64 = 1 << 30;
/// Running sums are kept below `2^ACC_TOP_BITS` at their shared exponent.
const ACC_TOP_BITS: i32 = 60;
/// Below this shared exponent the (decayed) sums are cleared.
const ACC_EXP_MIN: i32 = -4096;
/// Fractional bits of the pair counts.
const WEIGHT_FRAC_BITS: u32 = 16;
/// Largest accepted coefficient part (1.5 in Q30; `|c| ≤ 1` up to rounding).
const COEFF_LIMIT_Q30: i64 = 3 << 29;
/// The pair ratio is clamped to ±4 (Q30); only `r ≥ 1` (y = 0) and `r < g(1.7) ≈ −0.92`
/// (no inversion) are decided beyond ±1.
const RATIO_LIMIT_Q30: i128 = 4 << 30;
/// `RHO_MIN² = 0.45² = 81/400` in Q60 (the f32 main-lobe threshold, squared).
const RHO_MIN_SQ_Q60: i64 = 233_466_604_682_886_513;
/// `1.6095` rad (the f32 range limit, `J0 = 0.45`) in Q30.
const SPAN_AT_RHO_MIN_Q30: i64 = 1_728_187_466;
/// `1.7` rad (largest inverted `y`) in Q30.
const SPAN_MAX_Q30: i64 = 1_825_361_101;
/// `0.9` rad (preferred `y` of the final pair) in Q30.
const SPAN_TARGET_Q30: i64 = 966_367_642;
/// Standard deviations of noise the decorrelation must exceed.
const NOISE_SIGMAS: i64 = 4;
/// Bisection steps of the inversion (`1.7·2⁻²⁸` rad).
const BISECTION_STEPS: u32 = 28;
/// `round(2^32/π)`.
const INV_PI_Q32: u64 = 1_367_130_551;
/// `round(2^32/k²)` for `k = 2..=13`: the ratios of successive terms of the `1 − J0` series.
const RECIP_SQ_Q32: [i64; 12] = [
    1_073_741_824,
    477_218_588,
    268_435_456,
    171_798_692,
    119_304_647,
    87_652_394,
    67_108_864,
    53_024_288,
    42_949_673,
    35_495_597,
    29_826_162,
    25_414_008,
];
/// `round(2^32/(k(k+1)))` for `k = 1..=12`: the ratios of successive terms of `J1(x)/x`.
const RECIP_PAIR_Q32: [i64; 12] = [
    2_147_483_648,
    715_827_883,
    357_913_941,
    214_748_365,
    143_165_577,
    102_261_126,
    76_695_845,
    59_652_324,
    47_721_859,
    39_045_157,
    32_537_631,
    27_531_842,
];

/// Settings of the integer Doppler estimator.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct DopplerConfigQ15 {
    /// Forgetting per symbol `λ = 1 − 2^−k` given as `k` (`1..=`[`MAX_FORGETTING_SHIFT`];
    /// memory about `2^k` symbols); `None`: plain sums until [`DopplerEstimatorQ15::reset`].
    pub forgetting_shift: Option<u8>,
}

impl Default for DopplerConfigQ15 {
    /// `k = 11` (`λ = 1 − 2⁻¹¹`), the f32 default.
    fn default() -> Self {
        Self {
            forgetting_shift: Some(11),
        }
    }
}

/// An integer Doppler estimate (the numbers mean what [`DopplerStatus`] says).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct DopplerEstimateQ15 {
    /// `fd·Tsym` (maximum Doppler shift times the symbol period with CP) × 2^31; at most
    /// `0.271·2^31`.
    pub fd_tsym_q31: i32,
    /// `fd·T = fd/Δf` (useful symbol time) × 2^31.
    pub fd_t_q31: i32,
    /// Valid, or which side of the range.
    pub status: DopplerStatus,
    /// Lag `τ` of the pair `(τ, 2τ)` the value comes from, symbols.
    pub lag_symbols: u32,
}

impl DopplerEstimateQ15 {
    /// The same estimate in f32 (host use; floating point).
    pub fn to_f32(&self) -> DopplerEstimate {
        let q31 = 2147483648.0f32;
        DopplerEstimate {
            fd_tsym: self.fd_tsym_q31 as f32 / q31,
            fd_t: self.fd_t_q31 as f32 / q31,
            status: self.status,
            lag_symbols: self.lag_symbols,
        }
    }
}

/// Streaming integer Doppler estimator: FFT size `N`, at most `P` pilots per symbol, `H`
/// symbols of pilot history (lags up to the largest `u·2^j < H`).
#[derive(Clone, Debug)]
pub struct DopplerEstimatorQ15<const N: usize, const P: usize, const H: usize> {
    numerology: Numerology,
    /// Forgetting shift `k` (`None`: plain sums).
    shift: Option<u32>,
    /// Lag unit `u` (pilot pattern period), symbols.
    unit: u32,
    /// Lag levels held (`u·2^j < H`).
    levels: usize,
    /// Raw pilot bins (signs not applied) per history slot (`symbol mod H`).
    history: [[Cq15; P]; H],
    slot_exp: [i8; H],
    slot_symbol: [u32; H],
    slot_valid: [bool; H],
    /// `Σ_k |Y_{m,k}|²` of each slot (exact; exponent `2·slot_exp`).
    slot_power: [i64; H],
    last_symbol: Option<u32>,
    /// Shared exponent of the running sums: value = sum · 2^acc_exp.
    acc_exp: i32,
    /// Per lag level: `Σ Z_m Z*_{m−τ}` (re, im), `Σ|Z_m|²`, `Σ|Z_{m−τ}|²` of the same pairs.
    lag_sum: [(i64, i64); MAX_LAG_LEVELS],
    lag_power_new: [i64; MAX_LAG_LEVELS],
    lag_power_old: [i64; MAX_LAG_LEVELS],
    /// Pilot-product count per level, Q16 (forgotten alike).
    lag_weight: [i64; MAX_LAG_LEVELS],
}

/// One lag level's terms from the current symbol: the pair sum, its exponent, the partner's
/// power and the partner's exponent.
#[derive(Clone, Copy)]
struct Terms {
    sum: (i64, i64),
    exp: i32,
    old_power: i64,
    old_exp: i32,
}

impl<const N: usize, const P: usize, const H: usize> DopplerEstimatorQ15<N, P, H> {
    /// An estimator for `numerology` (fixed or scattered pilot comb; with a pattern period
    /// `u` the lags are multiples of `u`). No floating point.
    ///
    /// Errors: FFT size not `N` ([`ConfigError::FftSizeMismatch`]); more pilots per symbol
    /// than `P`, or `H ≤ 2u` (no lag pair; [`ConfigError::CapacityTooSmall`]); a forgetting
    /// shift outside `1..=`[`MAX_FORGETTING_SHIFT`] ([`ConfigError::TrackerSetting`]).
    pub fn new(numerology: &Numerology, config: DopplerConfigQ15) -> Result<Self, ConfigError> {
        if numerology.fft_len() != N {
            return Err(ConfigError::FftSizeMismatch {
                numerology: numerology.fft_len(),
                stage: N,
            });
        }
        if numerology.max_pilots() > P {
            return Err(ConfigError::CapacityTooSmall {
                needed: numerology.max_pilots(),
                capacity: P,
            });
        }
        let unit = numerology.pattern_period();
        let needed = unit.saturating_mul(2).saturating_add(1);
        if H < needed {
            return Err(ConfigError::CapacityTooSmall {
                needed,
                capacity: H,
            });
        }
        let shift = match config.forgetting_shift {
            None => None,
            Some(k) if (1..=MAX_FORGETTING_SHIFT).contains(&k) => Some(u32::from(k)),
            Some(_) => return Err(ConfigError::TrackerSetting),
        };
        let mut levels = 0;
        while levels < MAX_LAG_LEVELS
            && unit
                .checked_shl(levels as u32)
                .is_some_and(|lag| lag < H && lag <= u32::MAX as usize)
        {
            levels += 1;
        }
        Ok(Self {
            numerology: *numerology,
            shift,
            unit: unit as u32,
            levels,
            history: [[Cq15::ZERO; P]; H],
            slot_exp: [0; H],
            slot_symbol: [0; H],
            slot_valid: [false; H],
            slot_power: [0; H],
            last_symbol: None,
            acc_exp: 0,
            lag_sum: [(0, 0); MAX_LAG_LEVELS],
            lag_power_new: [0; MAX_LAG_LEVELS],
            lag_power_old: [0; MAX_LAG_LEVELS],
            lag_weight: [0; MAX_LAG_LEVELS],
        })
    }

    /// Forgets everything (sums and history).
    pub fn reset(&mut self) {
        self.end_frame();
        self.clear_sums();
        self.lag_weight = [0; MAX_LAG_LEVELS];
    }

    fn clear_sums(&mut self) {
        self.acc_exp = 0;
        self.lag_sum = [(0, 0); MAX_LAG_LEVELS];
        self.lag_power_new = [0; MAX_LAG_LEVELS];
        self.lag_power_old = [0; MAX_LAG_LEVELS];
    }

    /// Ends a frame: keeps the sums, drops the history, so no lag pairs symbols across the
    /// gap. A symbol index not above the previous one does the same implicitly.
    pub fn end_frame(&mut self) {
        self.slot_valid = [false; H];
        self.last_symbol = None;
    }

    /// Lag of level `j`, `u·2^j` symbols (saturating; `j < levels` never saturates).
    fn lag_of(&self, j: usize) -> u32 {
        u32::try_from(j)
            .ok()
            .and_then(|j| self.unit.checked_shl(j))
            .unwrap_or(u32::MAX)
    }

    /// Lags held, symbols: `u·2^j` for `j < levels`.
    pub fn lags(&self) -> impl Iterator<Item = u32> + '_ {
        (0..self.levels).map(|j| self.lag_of(j))
    }

    /// Adds symbol `symbol` of the current frame: the Q15 FFT output in natural order and its
    /// block exponent `exponent` (the bins' value is `bins·2^exponent` times a constant, as
    /// [`crate::receiver_q15::ReceiverQ15::bins_with_exponent`] gives them). Symbols may be
    /// skipped (lags are matched by index); an index not above the previous one starts a new
    /// frame ([`Self::end_frame`]).
    ///
    /// Errors (nothing changed): `|exponent| >` [`MAX_BLOCK_EXPONENT`]
    /// ([`ProcessError::OutOfRange`] with index 1, the argument's position).
    pub fn update(
        &mut self,
        bins: &[Cq15; N],
        exponent: i32,
        symbol: u32,
    ) -> Result<(), ProcessError> {
        if !(-MAX_BLOCK_EXPONENT..=MAX_BLOCK_EXPONENT).contains(&exponent) {
            return Err(ProcessError::OutOfRange { index: 1 });
        }
        let nu = self.numerology;
        let seed = nu.params().pilots.seed;
        let mut y = [Cq15::ZERO; P];
        let mut neg = [false; P];
        let mut prbs = Prbs15::for_symbol(seed, symbol);
        let mut count = 0usize;
        for ((b, yi), ni) in nu
            .bins(symbol)
            .filter(|b| b.kind == BinKind::Pilot)
            .zip(y.iter_mut())
            .zip(neg.iter_mut())
        {
            *yi = bins.get(b.fft_index).copied().unwrap_or_default();
            *ni = prbs.next_bit() != 0;
            count += 1;
        }
        let y = y.get(..count).unwrap_or_default();
        // At most N ≤ 4096 pilots of at most 2^31 each: the i64 sums cannot overflow.
        let p0: i64 = y.iter().fold(0i64, |acc, v| acc + power(*v));
        let new_frame = self.last_symbol.is_some_and(|last| symbol <= last);

        let mut terms: [Option<Terms>; MAX_LAG_LEVELS] = [None; MAX_LAG_LEVELS];
        for (j, out) in terms.iter_mut().enumerate().take(self.levels) {
            if new_frame {
                break;
            }
            let Some(partner) = symbol.checked_sub(self.lag_of(j)) else {
                break;
            };
            let slot = (partner as usize).checked_rem(H).unwrap_or(0);
            let valid = self.slot_valid.get(slot).copied().unwrap_or(false)
                && self.slot_symbol.get(slot) == Some(&partner);
            if let (true, Some(old), Some(&old_power), Some(&old_exp)) = (
                valid,
                self.history.get(slot),
                self.slot_power.get(slot),
                self.slot_exp.get(slot),
            ) {
                let mut partner_prbs = Prbs15::for_symbol(seed, partner);
                let (mut sr, mut si) = (0i64, 0i64);
                for ((a, &na), b) in y.iter().zip(neg.iter()).zip(old.iter()) {
                    let flip = na ^ (partner_prbs.next_bit() != 0);
                    let (ar, ai) = (i32::from(a.re), i32::from(a.im));
                    let (br, bi) = (i32::from(b.re), i32::from(b.im));
                    // Each i16·i16 product is at most 2^30 in magnitude: exact in i32.
                    let re = i64::from(ar * br) + i64::from(ai * bi);
                    let im = i64::from(ai * br) - i64::from(ar * bi);
                    if flip {
                        sr -= re;
                        si -= im;
                    } else {
                        sr += re;
                        si += im;
                    }
                }
                *out = Some(Terms {
                    sum: (sr, si),
                    exp: exponent + i32::from(old_exp),
                    old_power,
                    old_exp: 2 * i32::from(old_exp),
                });
            }
        }

        // Commit.
        if new_frame {
            self.end_frame();
        }
        self.forget();
        self.accumulate(&terms, p0, 2 * exponent, count);
        let slot = (symbol as usize).checked_rem(H).unwrap_or(0);
        if let Some(row) = self.history.get_mut(slot) {
            for (d, s) in row.iter_mut().zip(y.iter()) {
                *d = *s;
            }
        }
        if let Some(s) = self.slot_symbol.get_mut(slot) {
            *s = symbol;
        }
        if let Some(s) = self.slot_power.get_mut(slot) {
            *s = p0;
        }
        if let Some(s) = self.slot_exp.get_mut(slot) {
            // |exponent| ≤ 64 was checked.
            *s = exponent as i8;
        }
        if let Some(v) = self.slot_valid.get_mut(slot) {
            *v = true;
        }
        self.last_symbol = Some(symbol);
        Ok(())
    }

    /// `s ← s − s·2^−k` on every sum and count (λ = 1 − 2^−k).
    fn forget(&mut self) {
        let Some(k) = self.shift else {
            return;
        };
        let k = -(k as i32);
        let f = |v: &mut i64| *v = v.saturating_sub(scale_pow2(*v, k));
        for j in 0..self.levels {
            if let (Some(s), Some(pn), Some(po), Some(w)) = (
                self.lag_sum.get_mut(j),
                self.lag_power_new.get_mut(j),
                self.lag_power_old.get_mut(j),
                self.lag_weight.get_mut(j),
            ) {
                f(&mut s.0);
                f(&mut s.1);
                f(pn);
                f(po);
                f(w);
            }
        }
    }

    /// Re-chooses the shared exponent for the sums and this symbol's terms (module docs),
    /// then adds the terms: pair sums, the new power `p0` (exponent `p0_exp`) and the
    /// partners' powers, and `count` pilot products per level.
    fn accumulate(
        &mut self,
        terms: &[Option<Terms>; MAX_LAG_LEVELS],
        p0: i64,
        p0_exp: i32,
        count: usize,
    ) {
        let levels = self.levels;
        let mut top: Option<i32> = None;
        let mut note = |v: i64, e: i32| {
            if v != 0 {
                let t = bit_len(v) + e;
                top = Some(top.map_or(t, |m| m.max(t)));
            }
        };
        let e = self.acc_exp;
        for j in 0..levels {
            if let (Some(s), Some(&pn), Some(&po)) = (
                self.lag_sum.get(j),
                self.lag_power_new.get(j),
                self.lag_power_old.get(j),
            ) {
                note(s.0, e);
                note(s.1, e);
                note(pn, e);
                note(po, e);
            }
        }
        for t in terms.iter().take(levels).flatten() {
            note(t.sum.0, t.exp);
            note(t.sum.1, t.exp);
            note(p0, p0_exp);
            note(t.old_power, t.old_exp);
        }
        let Some(top) = top else {
            // All sums and terms are zero: only the counts move.
            self.count_pairs(terms, count);
            return;
        };
        let new_exp = top - ACC_TOP_BITS;
        if new_exp < ACC_EXP_MIN {
            // Decayed to nothing and no new terms (all-zero bins under forgetting).
            self.clear_sums();
            self.count_pairs(terms, count);
            return;
        }
        // Every value now fits in ACC_TOP_BITS bits at new_exp: left shifts are exact.
        let d = self.acc_exp - new_exp;
        self.acc_exp = new_exp;
        for j in 0..levels {
            if let (Some(s), Some(pn), Some(po)) = (
                self.lag_sum.get_mut(j),
                self.lag_power_new.get_mut(j),
                self.lag_power_old.get_mut(j),
            ) {
                s.0 = scale_pow2(s.0, d);
                s.1 = scale_pow2(s.1, d);
                *pn = scale_pow2(*pn, d);
                *po = scale_pow2(*po, d);
            }
        }
        for (j, t) in terms.iter().enumerate().take(levels) {
            let Some(t) = t else {
                continue;
            };
            if let (Some(s), Some(pn), Some(po)) = (
                self.lag_sum.get_mut(j),
                self.lag_power_new.get_mut(j),
                self.lag_power_old.get_mut(j),
            ) {
                let at = |v: i64, ev: i32| scale_pow2(v, ev - new_exp);
                s.0 = s.0.saturating_add(at(t.sum.0, t.exp));
                s.1 = s.1.saturating_add(at(t.sum.1, t.exp));
                *pn = pn.saturating_add(at(p0, p0_exp));
                *po = po.saturating_add(at(t.old_power, t.old_exp));
            }
        }
        self.count_pairs(terms, count);
    }

    fn count_pairs(&mut self, terms: &[Option<Terms>; MAX_LAG_LEVELS], count: usize) {
        let add = i64::try_from(count)
            .unwrap_or(i64::MAX)
            .saturating_mul(1 << WEIGHT_FRAC_BITS);
        for (w, t) in self.lag_weight.iter_mut().zip(terms.iter()) {
            if t.is_some() {
                *w = w.saturating_add(add);
            }
        }
    }

    /// Correlation coefficient at lag level `j` in Q30, if any pair was accumulated, the
    /// powers are positive and each part is within ±1.5 (`|c| ≤ 1` up to rounding).
    fn coefficient(&self, j: usize) -> Option<(i64, i64)> {
        let (sr, si) = *self.lag_sum.get(j)?;
        let pn = *self.lag_power_new.get(j)?;
        let po = *self.lag_power_old.get(j)?;
        if pn <= 0 || po <= 0 {
            return None;
        }
        // Both below 2^63: the product fits in u128. Normalise it into u64 by an even shift.
        let p = u128::from(pn.unsigned_abs()) * u128::from(po.unsigned_abs());
        let bits = 128 - p.leading_zeros();
        let mut sh = bits.saturating_sub(64);
        sh += sh & 1;
        let x = u64::try_from(p >> sh).ok()?;
        // 1/sqrt(p) = r·2^(s − 30 − sh/2), so c·2^30 = S·r·2^(s − sh/2).
        let (r, s) = inv_sqrt(x)?;
        let e = s - (sh / 2) as i32;
        let scale = |v: i64| -> Option<i64> {
            // |v| < 2^63, r ≤ 2^31: the product is below 2^94.
            let c = scale_pow2_i128(i128::from(v) * i128::from(r), e)?;
            i64::try_from(c)
                .ok()
                .filter(|c| (-COEFF_LIMIT_Q30..=COEFF_LIMIT_Q30).contains(c))
        };
        Some((scale(sr)?, scale(si)?))
    }

    /// The current estimate, or None before a lag pair `(u, 2u)` has been observed (or while
    /// every pilot is zero). No floating point.
    pub fn estimate(&self) -> Option<DopplerEstimateQ15> {
        let c0 = self.coefficient(0)?;
        let c1 = self.coefficient(1)?;
        // |c0|² in Q60 (parts ≤ 1.5·2^30: below 2^62.2).
        let rho2 = c0.0 * c0.0 + c0.1 * c0.1;
        if rho2 <= 0 {
            return None;
        }
        let n = self.numerology.fft_len();
        let ns = self.numerology.symbol_len();
        let k2 = |lag: u32| window_k2_q30(n, ns, lag);
        let above = self.finish(SPAN_AT_RHO_MIN_Q30, self.unit, DopplerStatus::AboveRange);
        if rho2 < RHO_MIN_SQ_Q60 {
            return Some(above);
        }
        let first = ratio(c0, c1)?;
        let Some(y0) = invert(ONE_Q30 - first, k2(self.unit)) else {
            return Some(above);
        };
        // The longest pair whose y stays at or below the target at the first estimate:
        // y at lag u·2^(j+1) is y0·2^(j+1).
        let mut j = 0usize;
        while j + 2 < self.levels
            && self.coefficient(j + 2).is_some()
            && scale_pow2(y0, j as i32 + 1) <= SPAN_TARGET_Q30
        {
            j += 1;
        }
        // Beyond the inverted branch at that pair (the first estimate was low): step down.
        let (y, r, cj, level) = loop {
            let (Some(ca), Some(cb)) = (self.coefficient(j), self.coefficient(j + 1)) else {
                return None;
            };
            let r = ratio(ca, cb)?;
            match invert(ONE_Q30 - r, k2(self.lag_of(j))) {
                Some(y) => break (y, r, ca, j),
                None if j > 0 => j -= 1,
                None => return Some(above),
            }
        };
        let lag = self.lag_of(level);
        let floor = self.noise_floor(rho2, r, cj, level);
        let d = ONE_Q30 - r;
        if floor.is_none_or(|f| d < f) {
            // An upper bound: the y a decorrelation of `floor` would give.
            let bound = floor
                .and_then(|f| invert(f, k2(lag)))
                .unwrap_or(SPAN_MAX_Q30);
            return Some(self.finish(bound, lag, DopplerStatus::BelowRange));
        }
        Some(self.finish(y, lag, DopplerStatus::Valid))
    }

    /// `4·sqrt(var r)` in Q30 with the f32 formula `var r = (1 − κ²)/2 · (1/w_b + r²/w_a) /
    /// |c_τ|²`, `κ² = min(|c_u|², 1)`; None for an infinite variance (no counts, or an
    /// overflow).
    fn noise_floor(&self, rho2: i64, r: i64, cj: (i64, i64), level: usize) -> Option<i64> {
        let w_a = i128::from(*self.lag_weight.get(level)?);
        let w_b = i128::from(*self.lag_weight.get(level + 1)?);
        let a2 = i128::from(cj.0) * i128::from(cj.0) + i128::from(cj.1) * i128::from(cj.1);
        if w_a <= 0 || w_b <= 0 || a2 <= 0 {
            return None;
        }
        let one_q60 = 1i128 << 60;
        let one_minus_k2 = one_q60 - i128::from(rho2).min(one_q60); // Q60, ≥ 0
                                                                    // 1/w in Q60 (w in Q16).
        let inv_wa = (1i128 << (60 + WEIGHT_FRAC_BITS)).checked_div(w_a)?;
        let inv_wb = (1i128 << (60 + WEIGHT_FRAC_BITS)).checked_div(w_b)?;
        let r2 = i128::from(r) * i128::from(r); // Q60, ≤ 2^64
        let t = inv_wb.checked_add(r2.checked_mul(inv_wa)? >> 60)?; // Q60
        let half = one_minus_k2.checked_mul(t)? >> 61; // (1 − κ²)/2 · t, Q60
        let var = half.checked_mul(one_q60)?.checked_div(a2)?; // Q60
        let root = isqrt_u64(u64::try_from(var).ok()?); // Q30
        i64::try_from(root).ok()?.checked_mul(NOISE_SIGMAS)
    }

    /// The estimate from `y` (Q30, rad) at lag `lag`: `fd·Tsym = y/(2π·lag)`,
    /// `fd·T = fd·Tsym·N/(N + L)`, both Q31.
    fn finish(&self, y: i64, lag: u32, status: DopplerStatus) -> DopplerEstimateQ15 {
        let y = y.clamp(0, SPAN_MAX_Q30).unsigned_abs();
        // y/(2π·lag)·2^31 = y_q30·(2^32/π)/lag · 2^−32: below 2^62 before the division.
        let lag = u64::from(lag.max(1));
        let num = y * INV_PI_Q32;
        let per_lag = (num + lag / 2) / lag;
        let fd_tsym = (per_lag + (1 << 31)) >> 32;
        let n = self.numerology.fft_len() as u64;
        let ns = (self.numerology.symbol_len() as u64).max(1);
        let fd_t = fd_tsym.saturating_mul(n).saturating_add(ns / 2) / ns;
        DopplerEstimateQ15 {
            fd_tsym_q31: i32::try_from(fd_tsym).unwrap_or(i32::MAX),
            fd_t_q31: i32::try_from(fd_t).unwrap_or(i32::MAX),
            status,
            lag_symbols: lag as u32,
        }
    }
}

/// `|v|²` of a Q15 pair, exact (at most 2^31).
fn power(v: Cq15) -> i64 {
    let (r, i) = (i32::from(v.re), i32::from(v.im));
    i64::from(r * r) + i64::from(i * i)
}

/// Bit length of `|v|`.
fn bit_len(v: i64) -> i32 {
    64 - v.unsigned_abs().leading_zeros() as i32
}

/// `v·2^s` rounded to nearest (ties up), saturating; `s ≤ −64` gives 0.
fn scale_pow2(v: i64, s: i32) -> i64 {
    if s >= 0 {
        if v == 0 {
            return 0;
        }
        let s = s.unsigned_abs();
        if s < 63 && bit_len(v) + (s as i32) < 64 {
            v << s
        } else if v > 0 {
            i64::MAX
        } else {
            i64::MIN
        }
    } else {
        let s = s.unsigned_abs();
        if s >= 64 {
            0
        } else {
            v.saturating_add(1 << (s - 1)) >> s
        }
    }
}

/// `v·2^s` rounded in `i128`; None if a left shift would overflow.
fn scale_pow2_i128(v: i128, s: i32) -> Option<i128> {
    if s >= 0 {
        let s = s.unsigned_abs();
        let bits = 128 - v.unsigned_abs().leading_zeros();
        (v == 0 || bits + s < 127).then(|| if v == 0 { 0 } else { v << s })
    } else {
        let s = s.unsigned_abs();
        if s >= 127 {
            Some(0)
        } else {
            Some(v.saturating_add(1 << (s - 1)) >> s)
        }
    }
}

/// `round(a·b·2^−30)` (ties up), saturating.
fn mul_q30(a: i64, b: i64) -> i64 {
    scale_pow2(a.saturating_mul(b), -30)
}

/// `round(a·b·2^−32)` (ties up), saturating.
fn mul_q32(a: i64, b: i64) -> i64 {
    scale_pow2(a.saturating_mul(b), -32)
}

/// Floor of `sqrt(x)` (bit by bit, no division).
fn isqrt_u64(x: u64) -> u64 {
    let mut op = x;
    let mut res = 0u64;
    let mut one = 1u64 << 62;
    while one > op {
        one >>= 2;
    }
    while one != 0 {
        if op >= res + one {
            op -= res + one;
            res = (res >> 1) + one;
        } else {
            res >>= 1;
        }
        one >>= 2;
    }
    res
}

/// `Re[b·a*²]/|a|³` in Q30 for Q30 coefficients (parts ≤ 1.5), clamped to ±4; None if `a`
/// is 0.
fn ratio(a: (i64, i64), b: (i64, i64)) -> Option<i64> {
    let (ar, ai) = (i128::from(a.0), i128::from(a.1));
    let (br, bi) = (i128::from(b.0), i128::from(b.1));
    let a2 = ar * ar + ai * ai; // Q60, below 2^62.2
    if a2 <= 0 {
        return None;
    }
    let n = i128::from(isqrt_u64(u64::try_from(a2).ok()?)); // |a|, Q30
    if n <= 0 {
        return None;
    }
    // Re[b·a*²] = br(ar² − ai²) + bi·2·ar·ai (Q90, below 2^94).
    let num = br * (ar * ar - ai * ai) + bi * 2 * ar * ai;
    let den = a2 * n; // |a|³, Q90
    let r = (num << 30).checked_div(den)?;
    i64::try_from(r.clamp(-RATIO_LIMIT_Q30, RATIO_LIMIT_Q30)).ok()
}

/// `k2 = (N² − 1)/(6(τ·Ns)²)` in Q30 (below 1/6); 0 when `τ·Ns` is too large to matter.
fn window_k2_q30(n: usize, symbol_len: usize, lag: u32) -> i64 {
    let n = n as u64;
    let num = n
        .saturating_mul(n)
        .saturating_sub(1)
        .saturating_mul(1 << 30);
    let span = u64::from(lag).saturating_mul(symbol_len as u64);
    let den = span.checked_mul(span).and_then(|s| s.checked_mul(6));
    match den {
        Some(d) if d > 0 => i64::try_from(num.saturating_add(d / 2) / d).unwrap_or(0),
        _ => 0,
    }
}

/// `1 − J0(x)` in Q30 from `u = x²/4` (Q30, `u ≤ 2.9`): `u(1 − (u/4)(1 − (u/9)(1 − …)))`,
/// 13 terms of the power series.
fn one_minus_j0_q30(u: i64) -> i64 {
    let mut p = ONE_Q30;
    for &c in RECIP_SQ_Q32.iter().rev() {
        p = ONE_Q30 - mul_q30(mul_q32(u, c), p);
    }
    mul_q30(u, p)
}

/// `J1(x)/x` in Q30 from `u = x²/4` (Q30): `½(1 − (u/2)(1 − (u/6)(1 − …)))`, 13 terms.
fn j1_over_x_q30(u: i64) -> i64 {
    let mut p = ONE_Q30;
    for &c in RECIP_PAIR_Q32.iter().rev() {
        p = ONE_Q30 - mul_q30(mul_q32(u, c), p);
    }
    scale_pow2(p, -1)
}

/// `(num, den)` with `1 − g(y) = num/den` (both Q30) for `y` in Q30 (`0..=1.7`) and the
/// window term `k2` in Q30 (module docs; the f32 `one_minus_g`).
fn one_minus_g_parts(y: i64, k2: i64) -> (i64, i64) {
    let y2 = y.saturating_mul(y); // Q60, below 2^61.6
    let u1 = scale_pow2(y2, -32); // (y/2)², Q30
    let u2 = scale_pow2(y2, -30); // y² = (2y/2)², Q30
    let a = one_minus_j0_q30(u1);
    let b = one_minus_j0_q30(u2);
    // J0''(x) = −J0(x) + J1(x)/x = (1 − J0) − 1 + J1/x.
    let s1 = a - ONE_Q30 + j1_over_x_q30(u1);
    let s2 = b - ONE_Q30 + j1_over_x_q30(u2);
    let h = scale_pow2(k2.saturating_mul(u2), -31); // k2·y²/2, Q30
    let num = (b - a) + mul_q30(h, s1 - s2);
    let den = (ONE_Q30 - a) + mul_q30(h, s1);
    (num, den)
}

/// True when `1 − g(y) < d` (`den > 0` on the inverted branch).
fn below(y: i64, k2: i64, d: i64) -> bool {
    let (num, den) = one_minus_g_parts(y, k2);
    (i128::from(num) << 30) < i128::from(d) * i128::from(den)
}

/// The `y` (Q30) in `[0, 1.7]` with `1 − g(y) = d` (Q30) by bisection; `d ≤ 0` gives 0; None
/// when `d` exceeds `1 − g(1.7)`.
fn invert(d: i64, k2: i64) -> Option<i64> {
    if d <= 0 {
        return Some(0);
    }
    if below(SPAN_MAX_Q30, k2, d) {
        return None;
    }
    let (mut lo, mut hi) = (0i64, SPAN_MAX_Q30);
    for _ in 0..BISECTION_STEPS {
        let mid = (lo + hi) / 2;
        if below(mid, k2, d) {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    Some((lo + hi) / 2)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::doppler::{DopplerConfig, DopplerEstimator};
    use crate::numerology::NumerologyParams;
    use crate::pilots::PilotIter;
    use crate::Cf32;

    const Q30: f64 = 1073741824.0;

    /// `1 − g(y)` with the window term, in f64 from the library J0 and J1 (the formula of
    /// the module docs, evaluated independently of the series).
    fn one_minus_g_f64(y: f64, k2: f64) -> f64 {
        let j0pp = |x: f64| {
            if x.abs() < 1e-6 {
                -0.5
            } else {
                -libm::j0(x) + libm::j1(x) / x
            }
        };
        let h = 0.5 * k2 * y * y;
        let g = (libm::j0(2.0 * y) + h * j0pp(2.0 * y)) / (libm::j0(y) + h * j0pp(y));
        1.0 - g
    }

    #[test]
    fn constants_match_their_definitions() {
        // Against f64 arithmetic (IEEE 754, correctly rounded for these operations).
        assert_eq!(
            INV_PI_Q32,
            (4294967296.0 / core::f64::consts::PI).round() as u64
        );
        assert_eq!(RHO_MIN_SQ_Q60 as f64, (0.45f64 * 0.45 * Q30 * Q30).round());
        assert_eq!(SPAN_AT_RHO_MIN_Q30, (1.6095 * Q30).round() as i64);
        assert_eq!(SPAN_MAX_Q30, (1.7 * Q30).round() as i64);
        assert_eq!(SPAN_TARGET_Q30, (0.9 * Q30).round() as i64);
        for (i, c) in RECIP_SQ_Q32.iter().enumerate() {
            let k = (i + 2) as f64;
            assert_eq!(*c, (4294967296.0 / (k * k)).round() as i64);
        }
        for (i, c) in RECIP_PAIR_Q32.iter().enumerate() {
            let k = (i + 1) as f64;
            assert_eq!(*c, (4294967296.0 / (k * (k + 1.0))).round() as i64);
        }
        // J0(1.6095) = 0.45 (f64 libm), as the f32 module's range limit.
        assert!((libm::j0(1.6095) - 0.45).abs() < 1e-4);
    }

    #[test]
    fn series_match_the_library_bessel_functions() {
        // 1 − J0(x) and J1(x)/x for x in (0, 3.4] against f64 libm (x ≥ 0.3: no
        // cancellation in 1 − J0 there), and x²/4 (A&S 9.1.10, leading term, from memory)
        // below. Tolerance: 12 nested Q30 steps, each rounding ≤ 2^−31 plus the Q32
        // reciprocal's 2^−33 relative: 8·2^−30.
        let tol = 8.0 / Q30;
        for i in 1..=340 {
            let x = i as f64 * 0.01;
            let u = ((x * x / 4.0) * Q30).round() as i64;
            let got = one_minus_j0_q30(u) as f64 / Q30;
            let want = if x >= 0.3 {
                1.0 - libm::j0(x)
            } else {
                // Series to x^8 (A&S 9.1.10): exact to 1e-12 here.
                let v = x * x / 4.0;
                v - v * v / 4.0 + v * v * v / 36.0 - v * v * v * v / 576.0
            };
            assert!((got - want).abs() < tol, "1 − J0({x}): {got} vs {want}");
            let got = j1_over_x_q30(u) as f64 / Q30;
            let want = libm::j1(x) / x;
            assert!((got - want).abs() < tol, "J1({x})/x: {got} vs {want}");
        }
    }

    #[test]
    fn inversion_matches_the_f64_formula() {
        // y recovered from d = 1 − g(y) computed in f64 from libm J0/J1, for the strongest
        // window term (k2 → 1/6), N = 64 with CP 8 at lag 1, and none. Error budget (module
        // docs): the bisection's 6e-9 rad plus the Q30 rounding of num and den (≈ 2^−28 on
        // 1 − g, whose slope is about 1.5y): within 3e-8 rad + 2e-7 relative.
        for k2 in [0.0, 4095.0 / (6.0 * 72.0 * 72.0), 1.0 / 6.0] {
            let k2_q30 = (k2 * Q30).round() as i64;
            for i in 2..170 {
                let y = i as f64 * 0.01;
                let d = one_minus_g_f64(y, k2);
                let got = invert((d * Q30).round() as i64, k2_q30).unwrap() as f64 / Q30;
                let slope = (one_minus_g_f64(y + 1e-5, k2) - one_minus_g_f64(y - 1e-5, k2)) / 2e-5;
                // Plus the Q30 rounding of d itself, through the slope.
                let tol = 3e-8 + 2e-7 * y + 0.5 / Q30 / slope;
                assert!((got - y).abs() < tol, "k2={k2} y={y}: {got}");
            }
            assert_eq!(invert(0, k2_q30), Some(0));
            assert_eq!(invert(-5, k2_q30), Some(0));
            let beyond = one_minus_g_f64(1.75, k2);
            assert_eq!(invert((beyond * Q30) as i64, k2_q30), None);
            // den > 0 all along the inverted branch.
            for i in 0..=1700 {
                let (_, den) = one_minus_g_parts((i as f64 * 1e-3 * Q30) as i64, k2_q30);
                assert!(den > ONE_Q30 / 4, "k2={k2} y={}", i as f64 * 1e-3);
            }
        }
    }

    #[test]
    fn helpers_are_exact_and_saturate() {
        for x in [0u64, 1, 2, 3, 4, 15, 16, 17, 1 << 40, u64::MAX] {
            let r = isqrt_u64(x);
            assert!(u128::from(r) * u128::from(r) <= u128::from(x));
            assert!(u128::from(r + 1) * u128::from(r + 1) > u128::from(x));
        }
        assert_eq!(scale_pow2(5, -1), 3);
        assert_eq!(scale_pow2(-5, -1), -2);
        assert_eq!(scale_pow2(3, 2), 12);
        assert_eq!(scale_pow2(1, 63), i64::MAX);
        assert_eq!(scale_pow2(-1, 70), i64::MIN);
        assert_eq!(scale_pow2(i64::MIN, -70), 0);
        assert_eq!(scale_pow2(i64::MIN, -1), i64::MIN / 2);
        assert_eq!(
            window_k2_q30(64, 72, 1),
            (4095.0 / (6.0 * 5184.0) * Q30).round() as i64
        );
        assert_eq!(window_k2_q30(64, 72, u32::MAX), 0);
    }

    fn numerology() -> Numerology {
        Numerology::new(NumerologyParams::default()).unwrap()
    }

    /// Noise-free pilot bins `h·x` in Q15 at scale `scale`.
    fn pilot_bins(nu: &Numerology, symbol: u32, h: Cf32, scale: f32) -> [Cq15; 64] {
        let mut b = [Cq15::ZERO; 64];
        for (i, x) in PilotIter::new(nu, symbol) {
            if let Some(v) = b.get_mut(i) {
                *v = Cq15::from_cf32(h * x * scale);
            }
        }
        b
    }

    #[test]
    fn memory_is_as_documented() {
        // Module docs: about 3 KB for P = 16, H = 32 (measured 2968 bytes on x86-64).
        let size = core::mem::size_of::<DopplerEstimatorQ15<64, 16, 32>>();
        assert!((2800..=3100).contains(&size), "{size}");
    }

    #[test]
    fn construction_checks() {
        let nu = numerology();
        assert!(matches!(
            DopplerEstimatorQ15::<32, 16, 32>::new(&nu, DopplerConfigQ15::default()),
            Err(ConfigError::FftSizeMismatch { .. })
        ));
        assert_eq!(
            DopplerEstimatorQ15::<64, 8, 32>::new(&nu, DopplerConfigQ15::default()).err(),
            Some(ConfigError::CapacityTooSmall {
                needed: 15,
                capacity: 8
            })
        );
        assert_eq!(
            DopplerEstimatorQ15::<64, 16, 2>::new(&nu, DopplerConfigQ15::default()).err(),
            Some(ConfigError::CapacityTooSmall {
                needed: 3,
                capacity: 2
            })
        );
        for k in [0u8, 31] {
            assert_eq!(
                DopplerEstimatorQ15::<64, 16, 32>::new(
                    &nu,
                    DopplerConfigQ15 {
                        forgetting_shift: Some(k)
                    }
                )
                .err(),
                Some(ConfigError::TrackerSetting)
            );
        }
        let e = DopplerEstimatorQ15::<64, 16, 32>::new(&nu, DopplerConfigQ15::default()).unwrap();
        let lags: [u32; 5] = [1, 2, 4, 8, 16];
        assert!(e.lags().eq(lags.iter().copied()));
    }

    #[test]
    fn static_and_cfo_channels_read_near_zero() {
        // A static channel, and a constant phase step per symbol (residual CFO): |R(τ)| = P
        // at every lag, so no Doppler (as the f32 unit tests).
        let nu = numerology();
        for step in [0.0f32, 0.37] {
            let mut e =
                DopplerEstimatorQ15::<64, 16, 32>::new(&nu, DopplerConfigQ15::default()).unwrap();
            assert!(e.estimate().is_none());
            for m in 0..60u32 {
                let ph = step * m as f32;
                let h = Cf32::new(0.6 * libm::cosf(ph), 0.6 * libm::sinf(ph));
                e.update(&pilot_bins(&nu, m, h, 1.0), 0, m).unwrap();
            }
            let est = e.estimate().unwrap();
            assert_ne!(est.status, DopplerStatus::AboveRange);
            assert!(est.to_f32().fd_tsym < 2e-3, "{est:?}");
        }
    }

    #[test]
    fn block_exponents_are_aligned() {
        // The same channel with the bins halved and the exponent raised by one on every
        // other symbol: the integer values are exact multiples, so the aligned sums and the
        // estimate are identical; and a constant exponent offset changes nothing.
        let nu = numerology();
        let h = |m: u32| Cf32::new(libm::cosf(0.2 * m as f32), 0.3);
        let run = |shift_odd: bool, offset: i32| {
            let mut e =
                DopplerEstimatorQ15::<64, 16, 32>::new(&nu, DopplerConfigQ15::default()).unwrap();
            for m in 0..80u32 {
                // Even Q15 values (×2 of an integer) so halving is exact.
                let mut b = pilot_bins(&nu, m, h(m), 0.25);
                for v in b.iter_mut() {
                    *v = Cq15::new(v.re & !1, v.im & !1);
                }
                let (b, ex) = if shift_odd && m % 2 == 1 {
                    let mut half = b;
                    for v in half.iter_mut() {
                        *v = Cq15::new(v.re / 2, v.im / 2);
                    }
                    (half, offset + 1)
                } else {
                    (b, offset)
                };
                e.update(&b, ex, m).unwrap();
            }
            e.estimate().unwrap()
        };
        let plain = run(false, 0);
        assert_eq!(run(true, 0), plain);
        assert_eq!(run(false, -17), plain);
        assert_eq!(run(true, 40), plain);
        assert!(plain.fd_tsym_q31 > 0 && plain.status != DopplerStatus::AboveRange);
    }

    #[test]
    fn agrees_with_the_f32_estimator_on_the_same_values() {
        // A deterministic time-varying channel (two Doppler lines), the same bin values to
        // both estimators (Q15 integers; f32 gets them exactly as value/32768), forgetting
        // λ = 1 − 2^−5 in both: same status and lag, fd·Tsym within 1e-4 relative (f32
        // sums of ~100 terms round at ≤ 100·2^−24 = 6e-6 relative; the ratio magnifies that
        // by ≲ 10 at these decorrelations).
        let nu = numerology();
        let mut q = DopplerEstimatorQ15::<64, 16, 32>::new(
            &nu,
            DopplerConfigQ15 {
                forgetting_shift: Some(5),
            },
        )
        .unwrap();
        let mut f = DopplerEstimator::<64, 16, 32>::new(
            &nu,
            DopplerConfig {
                forgetting: Some(1.0 - 1.0 / 32.0),
            },
        )
        .unwrap();
        for m in 0..150u32 {
            let t = m as f32;
            let h = Cf32::new(libm::cosf(0.05 * t), libm::sinf(0.05 * t)) * 0.7
                + Cf32::new(libm::cosf(-0.04 * t + 1.0), libm::sinf(-0.04 * t + 1.0)) * 0.5;
            let b = pilot_bins(&nu, m, h, 0.5);
            let mut bf = [Cf32::new(0.0, 0.0); 64];
            for (o, v) in bf.iter_mut().zip(b.iter()) {
                *o = v.to_cf32();
            }
            q.update(&b, -3, m).unwrap();
            f.update(&bf, m).unwrap();
        }
        let (a, b) = (q.estimate().unwrap().to_f32(), f.estimate().unwrap());
        assert_eq!((a.status, a.lag_symbols), (b.status, b.lag_symbols));
        assert!((a.fd_tsym / b.fd_tsym - 1.0).abs() < 1e-4, "{a:?} {b:?}");
        assert!((a.fd_t / b.fd_t - 1.0).abs() < 1e-4, "{a:?} {b:?}");
    }

    #[test]
    fn scattered_pilots_pair_the_same_bins_and_signs() {
        // Spacing 4, shift 1: the comb repeats every u = 4 symbols, lags 4, 8, 16. A static
        // frequency-selective channel (delay 3 samples, H_k = e^{−j2πk·3/64}) has zero Doppler
        // only if each product pairs a bin with itself and its own pilot sign (as the f32
        // unit test); then a time-varying one on the same comb agrees with f32.
        let mut p = NumerologyParams::default();
        p.pilots.shift_per_symbol = 1;
        let nu = Numerology::new(p).unwrap();
        assert_eq!(nu.pattern_period(), 4);
        let bins = |m: u32, w: f32| {
            let mut b = [Cq15::ZERO; 64];
            for (i, x) in PilotIter::new(&nu, m) {
                let k = if i < 32 { i as f32 } else { i as f32 - 64.0 };
                let ph = -2.0 * core::f32::consts::PI * k * 3.0 / 64.0 + w * m as f32;
                if let Some(v) = b.get_mut(i) {
                    *v = Cq15::from_cf32(Cf32::new(libm::cosf(ph), libm::sinf(ph)) * x * 0.5);
                }
            }
            b
        };
        let mut e =
            DopplerEstimatorQ15::<64, 16, 32>::new(&nu, DopplerConfigQ15::default()).unwrap();
        let lags: [u32; 3] = [4, 8, 16];
        assert!(e.lags().eq(lags.iter().copied()));
        for m in 0..80u32 {
            e.update(&bins(m, 0.0), 0, m).unwrap();
        }
        let est = e.estimate().unwrap();
        assert_ne!(est.status, DopplerStatus::AboveRange, "{est:?}");
        assert_eq!(est.lag_symbols % 4, 0);
        assert!(est.to_f32().fd_tsym < 1e-3, "{est:?}");
        // Two lines of different Doppler on the same comb: as the f32 estimator.
        let mut q =
            DopplerEstimatorQ15::<64, 16, 32>::new(&nu, DopplerConfigQ15::default()).unwrap();
        let mut f = DopplerEstimator::<64, 16, 32>::new(&nu, DopplerConfig::default()).unwrap();
        for m in 0..200u32 {
            let (a, b) = (bins(m, 0.02), bins(m, -0.015));
            let mut sum = [Cq15::ZERO; 64];
            let mut bf = [Cf32::new(0.0, 0.0); 64];
            for (((o, of), x), y) in sum.iter_mut().zip(bf.iter_mut()).zip(&a).zip(&b) {
                *o = Cq15::new(x.re / 2 + y.re / 2, x.im / 2 + y.im / 2);
                *of = o.to_cf32();
            }
            q.update(&sum, 2, m).unwrap();
            f.update(&bf, m).unwrap();
        }
        let (a, b) = (q.estimate().unwrap().to_f32(), f.estimate().unwrap());
        assert_eq!(
            (a.status, a.lag_symbols),
            (b.status, b.lag_symbols),
            "{a:?} {b:?}"
        );
        assert!((a.fd_tsym / b.fd_tsym - 1.0).abs() < 1e-4, "{a:?} {b:?}");
    }

    #[test]
    fn extreme_inputs_never_panic() {
        let nu = numerology();
        let mut e =
            DopplerEstimatorQ15::<64, 16, 32>::new(&nu, DopplerConfigQ15::default()).unwrap();
        // All-zero bins: no power, no estimate.
        for m in 0..40u32 {
            e.update(&[Cq15::ZERO; 64], 0, m).unwrap();
        }
        assert_eq!(e.estimate(), None);
        // Exponents out of range are rejected and change nothing.
        for ex in [i32::MIN, -65, 65, i32::MAX] {
            assert_eq!(
                e.update(&[Cq15::new(1, 1); 64], ex, 41),
                Err(ProcessError::OutOfRange { index: 1 })
            );
        }
        assert_eq!(e.estimate(), None);
        // Full-scale bins at the extreme exponents, alternating: exact products, aligned.
        for (m, v) in [i16::MIN, i16::MAX].iter().cycle().take(60).enumerate() {
            let ex = if m % 2 == 0 { 64 } else { -64 };
            e.update(&[Cq15::new(*v, *v); 64], ex, 100 + m as u32)
                .unwrap();
        }
        let est = e.estimate();
        assert!(
            est.is_none_or(|x| x.status != DopplerStatus::Valid),
            "{est:?}"
        );
        // Long all-zero input under forgetting: the sums decay away (cleared), no panic.
        let mut z = DopplerEstimatorQ15::<64, 16, 32>::new(
            &nu,
            DopplerConfigQ15 {
                forgetting_shift: Some(1),
            },
        )
        .unwrap();
        for m in 0..40u32 {
            z.update(&pilot_bins(&nu, m, Cf32::new(0.9, 0.0), 1.0), 0, m)
                .unwrap();
        }
        for m in 40..5000u32 {
            z.update(&[Cq15::ZERO; 64], -64, m).unwrap();
        }
        assert_eq!(z.estimate(), None);
    }
}
