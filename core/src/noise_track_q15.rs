//! The noise / SNR / per-bin interference tracker of [`crate::noise_track`] in integers, fed
//! from the Q15 receiver ([`crate::receiver_q15::ReceiverQ15`]).
//!
//! Same observations and the same logic as the f32 tracker (see its module documentation):
//! null-bin powers; pilot residuals `|Y_p − c(Ĥ_p/g_p)X_p|²/(A²κ_p)` with the estimator's
//! shrinkage `g_p` and self-weight factor `κ_p` quantised on the host; decision-directed
//! errors on the data bins, averaged per bin in the equalized and in the received domain and
//! read through an integer table of the decision-directed bias `ε(σ²)` ([`crate::dd_bias`],
//! same 1.5 cap), less the estimator's predicted MSE; per-bin forgotten means; interferer
//! flags against `max(N0, local median)`; the thermal N0 pooled from null bins and pilots
//! under the same consistency test and carried over frames; SNR, EVM and MER per frame.
//!
//! ## Fixed-point formats
//!
//! | value | format |
//! |---|---|
//! | powers (per-bin variances, N0, sums) | `u64`, FFT-output power × 2^[`POWER_FRAC_BITS`] |
//! | amplitudes (pilot residuals) | `i64`, FFT-output amplitude × 2^[`AMP_FRAC_BITS`] |
//! | decision-directed errors (equalized) | `u64`, unit-energy domain × 2^[`EPS_FRAC_BITS`] |
//! | forgetting per symbol | `λ = 1 − 2^−k` (a right shift by `k`) |
//! | forgetting per frame | `μ` in Q16 |
//! | detection ratio | Q8 |
//! | SNR, MER | dB in Q8 (`i32`, value × 256), by an integer log2 |
//! | EVM | RMS ratio in Q16 |
//!
//! **Reference exponent.** "FFT-output power" is the squared magnitude of the unitary DFT of
//! the gained input (Q15 fractions) divided by `F::RESIDUAL_SCALE²`: a bin `b` of block
//! exponent `e` ([`crate::receiver_q15::ReceiverQ15::bins_with_exponent`]) has power
//! `|b|²·2^(2e − 30)`, stored as `|b|²·2^(2e + 14)`. Every symbol's block exponents (bins,
//! channel estimate) are aligned to this one reference before anything is added, so powers of
//! symbols scaled differently by the block-floating-point FFT compare directly.
//!
//! **Headroom.** One LSB is 2^−44 of FFT-output power (−132 dB; the quantisation noise of Q15
//! input, 2^−30/6 per sample and so per bin, lies 11 bits above it). Every stored power is
//! capped at [`POWER_MAX`] = 2^62 − 1, i.e. FFT-output power 2^18; a full-scale tone at
//! N = 4096 has power 2^12. A data bin at −12 dBFS carries about 2^41, so per-frame sums hold
//! about 2^21 observations before they saturate. Anything that clips sets
//! [`STAT_SATURATED`] in the frame statistics.
//!
//! ## Choices where integers differ from the f32 tracker
//!
//! * `λ = 1 − 2^−k` per symbol, default `k = 6` (λ = 0.984, a memory of 64 symbols, the
//!   nearest shift to the f32 default 0.98 with its 50; the next shorter, 0.969, halves the
//!   averaging that the 3× detection threshold relies on). The running mean of the first
//!   `2^k` symbols divides by the count (integer division, warm-up only).
//! * `μ` per frame in Q16, default 0.8 exactly (52429/65536): it is applied once per frame
//!   to four numbers, so a multiplier costs nothing and the noise-floor memory — which sets
//!   the SNR estimate — equals the f32 tracker's; `1 − 2^−2` would shorten it to 4 frames.
//! * The DD bias correction interpolates the ratio `σ²/ε` linearly in `ε` between the 64
//!   table points (the f32 interpolates `log σ²`; the two differ by second-order terms over
//!   a 24 % step in σ²).
//!
//! ## Measured (tests/noise_track_q15.rs, N = 64, −12 dBFS, frames of 20 symbols)
//!
//! Against the f32 tracker with the same settings on the same Q15 samples, 0–30 dB, AWGN and
//! exponential 0.5-sample fading: SNR within 0.006 dB per frame, except 2 of 4200 frames at
//! 30 dB where the pilot/null pooling gate (a hard threshold) went the other way (0.27 dB);
//! on its own: SNR bias within ±0.29 dB, sd ≤ 0.62 dB per frame. With the per-bin weights in
//! [`crate::receiver_q15::ReceiverQ15::set_bin_noise`], 16-QAM at 20 dB with a CW or a 3-bin
//! burst 10 dB over the noise: bitwise MI of the i8 LLRs on the hit bins within 0.005 bit of
//! true N+I weighting, 0.7–0.9 bit above flat weighting.
//!
//! **Memory.** Tracker state about `38·N` bytes plus its design (`24·N` bytes and 5 KiB of
//! DD tables, which firmware can keep in flash).
//!
//! Configuration ([`NoiseTrackDesignQ15::new`], [`DdTableQ15::new`]) and the test-side
//! conversion [`NoiseStatsQ15::to_f32`] use floating point on the host; everything per
//! symbol ([`NoiseTrackerQ15::update`], [`NoiseTrackerQ15::start_frame`],
//! [`NoiseTrackerQ15::frame_stats`], [`NoiseTrackerQ15::bin_noise`]) is integer only.

use core::borrow::Borrow;

use crate::dd_bias::dd_error;
use crate::error::{ConfigError, ProcessError};
use crate::estimate::ChannelEstimator;
use crate::fft::OfdmFft;
use crate::fixed::Cq15;
use crate::fixed_math::{shift_round, Scaled};
use crate::modulation::Modulation;
use crate::noise_track::{NoiseStats, FLOOR_HALF_WIDTH};
use crate::numerology::{BinKind, Numerology};
use crate::pilots::Prbs15;
use crate::receiver_q15::{ReceiverQ15, ReceiverQ15Config};

/// Fractional bits of stored powers: FFT-output power × 2^44.
pub const POWER_FRAC_BITS: u32 = 44;
/// Fractional bits of amplitudes: FFT-output amplitude × 2^22 (squares are powers).
pub const AMP_FRAC_BITS: i32 = 22;
/// Ceiling of every stored power (2^62 − 1: sums of two and `i64` differences cannot wrap).
pub const POWER_MAX: u64 = (1 << 62) - 1;
/// Fractional bits of decision-directed errors (unit-energy equalized domain): Q24.
pub const EPS_FRAC_BITS: u32 = 24;
/// Fractional bits of the pilot coefficients `A/g_p` (Q20, `i32`).
pub const PILOT_COEF_FRAC_BITS: i32 = 20;
/// Fractional bits of the DD bias ratio `σ²/ε` (Q16).
pub const RATIO_FRAC_BITS: u32 = 16;
/// Points of the DD bias table, log-spaced in σ² from 1e-4 to 1e2 (unit-energy domain).
pub const DD_POINTS: usize = 64;

/// Frame statistics flag: no noise was measured (N0 is 0: all-zero input, or no null bins
/// and pilots yet); SNR reads −300 dB and EVM/MER are not meaningful.
pub const STAT_NO_NOISE: u8 = 1;
/// Frame statistics flag: a power, amplitude or sum reached its ceiling in this frame.
pub const STAT_SATURATED: u8 = 2;
/// Frame statistics flag: no data bins in the frame yet (SNR and EVM are 0).
pub const STAT_NO_DATA: u8 = 4;

/// Largest amplitude kept (2^30 at [`AMP_FRAC_BITS`]: FFT-output amplitude 256).
const AMP_MAX: i64 = 1 << 30;
/// [`crate::dd_bias::MAX_CORRECTION`] (1.5) in Q16.
const RATIO_CAP_Q16: u64 = 98_304;
/// `10·log10(2)` in Q16.
const DB_PER_LOG2_Q16: i64 = 197_283;
/// Block exponents are clamped to ±this before use (far beyond any FFT's range).
const EXP_LIMIT: i32 = 256;

/// Tracker settings (integer forms of [`crate::noise_track::NoiseTrackConfig`]).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct NoiseTrackConfigQ15 {
    /// `k` of the per-symbol forgetting factor `λ = 1 − 2^−k`, `0..=15` (6: λ = 0.984, a
    /// memory of 64 symbols).
    pub lambda_shift: u8,
    /// A bin is flagged when its variance exceeds this multiple of its local floor, Q8
    /// (`> 256`; 768 = 3×).
    pub detect_ratio_q8: u16,
    /// Forgetting factor per frame of the thermal noise floor, Q16, `< 65536` (0: each frame
    /// on its own).
    pub frame_lambda_q16: u32,
}

impl Default for NoiseTrackConfigQ15 {
    /// λ = 1 − 2^−6, flag at 3× the local floor, μ = 0.8 per frame (see the module docs).
    fn default() -> Self {
        Self {
            lambda_shift: 6,
            detect_ratio_q8: 768,
            frame_lambda_q16: 52_429,
        }
    }
}

/// One point of [`DdTableQ15`].
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct DdPointQ15 {
    /// Decision-directed error `ε` at this point's σ², Q24 (unit-energy domain).
    pub eps_q24: u32,
    /// `σ²/ε` at this point, Q16 (≥ 1: wrong decisions only shorten the error).
    pub ratio_q16: u32,
    /// Slope of the ratio to the next point:
    /// `Δratio_q16 = (Δeps_q24 · slope_mant) · 2^−slope_shift`.
    pub slope_mant: i32,
    /// Right shift of the slope (may be negative).
    pub slope_shift: i32,
}

/// The decision-directed bias `ε(σ²)` of one modulation as integers: 64 points log-spaced
/// in σ² from 1e-4 to 1e2, built on the host from [`crate::dd_bias::dd_error`].
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct DdTableQ15 {
    /// The points, `eps_q24` increasing.
    pub points: [DdPointQ15; DD_POINTS],
}

impl DdTableQ15 {
    /// The table of `modulation`. Host side: floating point (`libm`).
    pub fn new(modulation: Modulation) -> Self {
        let mut eps = [0.0f64; DD_POINTS];
        let mut ratio = [0.0f64; DD_POINTS];
        for (i, (e, r)) in eps.iter_mut().zip(ratio.iter_mut()).enumerate() {
            let s2 = libm::pow(10.0, -4.0 + 6.0 * i as f64 / (DD_POINTS - 1) as f64);
            let v = f64::from(dd_error(modulation, s2 as f32));
            *e = libm::round(v * f64::from(1u32 << EPS_FRAC_BITS)).clamp(0.0, f64::from(u32::MAX));
            *r = if v > 0.0 {
                libm::round(s2 / v * f64::from(1u32 << RATIO_FRAC_BITS))
                    .clamp(0.0, f64::from(u32::MAX))
            } else {
                f64::from(1u32 << RATIO_FRAC_BITS)
            };
        }
        let mut points = [DdPointQ15::default(); DD_POINTS];
        for (i, p) in points.iter_mut().enumerate() {
            let (e0, r0) = (
                eps.get(i).copied().unwrap_or(0.0),
                ratio.get(i).copied().unwrap_or(0.0),
            );
            p.eps_q24 = e0 as u32;
            p.ratio_q16 = r0 as u32;
            if let (Some(&e1), Some(&r1)) = (eps.get(i + 1), ratio.get(i + 1)) {
                let slope = if e1 > e0 { (r1 - r0) / (e1 - e0) } else { 0.0 };
                if slope != 0.0 && slope.is_finite() {
                    // |mant| in [2^14, 2^15).
                    let shift = 14 - libm::floor(libm::log2(slope.abs())) as i32;
                    let mut mant = libm::round(slope * libm::pow(2.0, f64::from(shift))) as i64;
                    let mut sh = shift;
                    if mant.abs() >= 1 << 15 {
                        mant /= 2;
                        sh -= 1;
                    }
                    p.slope_mant = mant as i32;
                    p.slope_shift = sh;
                }
            }
        }
        Self { points }
    }

    /// `σ²/ε` (Q16) for a measured `ε` (Q24), at most [`crate::dd_bias::MAX_CORRECTION`]:
    /// 1 below the table, the top point's ratio above it, linear in `ε` between points.
    /// Integer only.
    pub fn ratio_q16(&self, eps_q24: u64) -> u64 {
        let one = 1u64 << RATIO_FRAC_BITS;
        let cap = RATIO_CAP_Q16;
        let Some(first) = self.points.first() else {
            return one;
        };
        if eps_q24 <= u64::from(first.eps_q24) {
            return one;
        }
        let Some(top) = self.points.last() else {
            return one;
        };
        if eps_q24 >= u64::from(top.eps_q24) {
            return u64::from(top.ratio_q16).min(cap);
        }
        // Largest lo with eps[lo] <= eps (the table is increasing).
        let (mut lo, mut hi) = (0usize, DD_POINTS - 1);
        while hi - lo > 1 {
            let mid = (lo + hi) / 2;
            let e = self.points.get(mid).map_or(u32::MAX, |p| p.eps_q24);
            if u64::from(e) <= eps_q24 {
                lo = mid;
            } else {
                hi = mid;
            }
        }
        let p = self.points.get(lo).copied().unwrap_or_default();
        // eps − eps[lo] < 2^32; |mant| < 2^15: the product fits i64.
        let d = eps_q24
            .saturating_sub(u64::from(p.eps_q24))
            .min(u64::from(u32::MAX)) as i64;
        let inc = shift_round(d * i64::from(p.slope_mant), p.slope_shift);
        let r = i64::from(p.ratio_q16).saturating_add(inc);
        (r.max(0) as u64).min(cap)
    }
}

/// Host-built integer constants of the tracker for FFT size `N`, per used bin.
#[derive(Clone, Debug)]
pub struct NoiseTrackDesignQ15<const N: usize> {
    /// Pilot coefficient `A/g_u` (pilot amplitude over the estimator's shrinkage at used bin
    /// `u`), Q20 `(re, im)`; `(A, 0)` where the estimator has no model for the bin.
    pub pilot_coef: [(i32, i32); N],
    /// `1/(A²·κ_u)`: scales a pilot residual power to N0 (unit-energy data).
    pub pilot_scale: [Scaled; N],
    /// `1/A²`: scales `|A·Ĥ/g|²` to the channel power.
    pub inv_pilot_power: Scaled,
    /// The estimator's predicted MSE per used bin in power units
    /// (`mse_u·α²/R²` × 2^[`POWER_FRAC_BITS`]).
    pub estimator_mse: [u64; N],
    /// FFT-output power of a unit-energy symbol through a unit-power channel at the
    /// configured input level, `α²/R²` × 2^[`POWER_FRAC_BITS`]: divides powers into
    /// unit-energy N0.
    pub unit_power: u64,
    /// DD bias tables, indexed as [`Modulation::ALL`].
    pub dd: [DdTableQ15; 5],
}

impl<const N: usize> NoiseTrackDesignQ15<N> {
    /// The constants for `numerology` and the Q15 receiver configuration `config` (whose
    /// estimator is rebuilt here with `K` taps and history `M`, as
    /// [`crate::receiver_q15::DesignQ15::new`] does), with an FFT of residual scale
    /// `residual_scale`. Host side: floating point. Errors: FFT size not `N`, the estimator's
    /// own configuration errors, a residual scale or input level not finite and positive.
    pub fn new<const K: usize, const M: usize>(
        numerology: &Numerology,
        config: &ReceiverQ15Config,
        residual_scale: f32,
    ) -> Result<Self, ConfigError> {
        if numerology.fft_len() != N {
            return Err(ConfigError::FftSizeMismatch {
                numerology: numerology.fft_len(),
                stage: N,
            });
        }
        if !(residual_scale.is_finite() && residual_scale > 0.0 && config.signal_dbfs.is_finite()) {
            return Err(ConfigError::TrackerSetting);
        }
        let est = ChannelEstimator::<N, K, M>::new(numerology, config.estimator)?;
        let a = f64::from(numerology.pilot_amplitude());
        // α² as in DesignQ15::new: unit-energy symbols at the configured FFT input level.
        let p = libm::pow(10.0, f64::from(config.signal_dbfs) / 10.0);
        let energy = numerology.data_len(0) as f64 + a * a * numerology.pilot_len(0) as f64;
        let alpha2 = numerology.fft_len() as f64 * p / energy;
        let unit = alpha2 / (f64::from(residual_scale) * f64::from(residual_scale));
        let to_power = |v: f64| {
            libm::round(v * libm::pow(2.0, f64::from(POWER_FRAC_BITS))).clamp(0.0, POWER_MAX as f64)
                as u64
        };
        let q20 = |v: f64| {
            libm::round(v * f64::from(1u32 << PILOT_COEF_FRAC_BITS))
                .clamp(f64::from(i32::MIN), f64::from(i32::MAX)) as i32
        };
        let mut d = Self {
            pilot_coef: [(0, 0); N],
            pilot_scale: [Scaled::default(); N],
            inv_pilot_power: Scaled::from_f64(1.0 / (a * a)),
            estimator_mse: [0; N],
            unit_power: to_power(unit),
            dd: Modulation::ALL.map(DdTableQ15::new),
        };
        for u in 0..numerology.used_len() {
            let (g, kappa) = est
                .pilot_residual_model(u)
                .map_or(((1.0, 0.0), 1.0), |(g, k)| {
                    ((f64::from(g.re), f64::from(g.im)), f64::from(k))
                });
            let g2 = g.0 * g.0 + g.1 * g.1;
            // A/g = A·conj(g)/|g|².
            let c = (a * g.0 / g2, -a * g.1 / g2);
            if let (Some(pc), Some(ps), Some(m), Some(&mse)) = (
                d.pilot_coef.get_mut(u),
                d.pilot_scale.get_mut(u),
                d.estimator_mse.get_mut(u),
                est.mse().get(u),
            ) {
                *pc = (q20(c.0), q20(c.1));
                *ps = Scaled::from_f64(1.0 / (a * a * kappa));
                *m = to_power(f64::from(mse) * unit);
            }
        }
        Ok(d)
    }
}

/// What the tracker reads of one received symbol (all from the Q15 receiver).
#[derive(Clone, Copy, Debug)]
pub struct SymbolViewQ15<'a, const N: usize> {
    /// FFT output, natural order ([`ReceiverQ15::bins_with_exponent`]).
    pub bins: &'a [Cq15; N],
    /// Block exponent of `bins`.
    pub bins_exp: i32,
    /// Channel estimate per used bin ([`ReceiverQ15::estimate`]), before the common phase.
    pub estimate: &'a [Cq15],
    /// Block exponent of `estimate`.
    pub estimate_exp: i32,
    /// The common-phase rotation applied to the estimate (Q15 unit phasor), `None` if none.
    pub common_phase: Option<Cq15>,
}

/// Frame statistics of [`NoiseTrackerQ15::frame_stats`], in fixed point.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct NoiseStatsQ15 {
    /// Thermal N0 per bin, power units (FFT-output power × 2^[`POWER_FRAC_BITS`]).
    pub noise_power: u64,
    /// Null-bin observations only (this frame), power units; 0 when there are none.
    pub null_noise_power: u64,
    /// Pilot residuals only (this frame, bias-corrected), power units; 0 when there are none.
    pub pilot_noise_power: u64,
    /// Es·|H|²/N0 over the frame's data bins, dB × 256 (−60 dB floor; −300 dB with
    /// [`STAT_NO_NOISE`]).
    pub snr_db_q8: i32,
    /// Decision-directed EVM on the data bins, RMS ratio × 65536.
    pub evm_data_q16: u32,
    /// Modulation error ratio on the data bins, dB × 256 (0 when the EVM is 0).
    pub mer_db_q8: i32,
    /// Data-aided EVM on the pilots, RMS ratio × 65536.
    pub evm_pilot_q16: u32,
    /// Bins flagged as interfered now.
    pub interfered_bins: u16,
    /// Symbols in the frame so far.
    pub symbols: u32,
    /// [`STAT_NO_NOISE`], [`STAT_SATURATED`], [`STAT_NO_DATA`] or'ed.
    pub flags: u8,
}

impl NoiseStatsQ15 {
    /// The same statistics as the f32 tracker's [`NoiseStats`], with the noise powers
    /// divided by `unit_power` ([`NoiseTrackDesignQ15::unit_power`]) into unit-energy N0.
    /// Host side (tests, logs): floating point, not for the per-symbol path.
    pub fn to_f32(&self, unit_power: u64) -> NoiseStats {
        let u = if unit_power > 0 {
            unit_power as f64
        } else {
            1.0
        };
        let q16 = 65536.0f32;
        NoiseStats {
            noise_var: (self.noise_power as f64 / u) as f32,
            null_noise_var: (self.null_noise_power as f64 / u) as f32,
            pilot_noise_var: (self.pilot_noise_power as f64 / u) as f32,
            snr_db: self.snr_db_q8 as f32 / 256.0,
            evm_data: self.evm_data_q16 as f32 / q16,
            mer_db: self.mer_db_q8 as f32 / 256.0,
            evm_pilot: self.evm_pilot_q16 as f32 / q16,
            interfered_bins: self.interfered_bins,
            symbols: self.symbols,
        }
    }
}

/// Integer per-bin noise-plus-interference tracker for FFT size `N`.
///
/// `D` holds the design: the design itself (the default: the tracker owns it, about
/// `24·N` bytes + 5 KiB), or a reference to one kept elsewhere, e.g.
/// `&'static NoiseTrackDesignQ15<N>` in flash, so that RAM holds only the tracker's own state
/// (about `38·N` bytes; what a 16 KiB Cortex-M0 needs).
#[derive(Clone, Debug)]
pub struct NoiseTrackerQ15<const N: usize, D = NoiseTrackDesignQ15<N>>
where
    D: Borrow<NoiseTrackDesignQ15<N>>,
{
    numerology: Numerology,
    design: D,
    config: NoiseTrackConfigQ15,
    /// Per FFT index: forgotten mean (power units) and symbols seen (saturating).
    var: [u64; N],
    seen: [u16; N],
    /// Per FFT index: used (data or pilot) rather than null; flagged as interfered.
    used: [bool; N],
    flagged: [bool; N],
    /// Frame sums per FFT index of the known-symbol observations (null bins and pilots).
    frame_sum: [u64; N],
    frame_n: [u16; N],
    /// Per FFT index (data bins): forgotten means of the DD error, equalized domain (Q24)
    /// and received domain (power units).
    dd_eps: [u64; N],
    dd_h2: [u64; N],
    data_power: u64,
    data_n: u32,
    dd_err: u64,
    dd_ref: u64,
    pilot_gain: u64,
    pilot_n: u32,
    symbols: u32,
    /// Thermal N0 after the latest symbol, power units.
    n0: u64,
    /// Earlier frames' null and pilot sums `(sum, count Q16)`, forgotten by μ per frame.
    null_memory: (u64, u64),
    pilot_memory: (u64, u64),
    /// Something clipped in this frame.
    saturated: bool,
}

impl<const N: usize, D: Borrow<NoiseTrackDesignQ15<N>>> NoiseTrackerQ15<N, D> {
    /// A tracker for `numerology` with its host-built `design` (owned, or a reference). No
    /// floating point. Errors: FFT size not `N`, `lambda_shift > 15`, a detection ratio not
    /// above 1, `μ ≥ 1`.
    pub fn new(
        numerology: &Numerology,
        design: D,
        config: NoiseTrackConfigQ15,
    ) -> Result<Self, ConfigError> {
        if numerology.fft_len() != N {
            return Err(ConfigError::FftSizeMismatch {
                numerology: numerology.fft_len(),
                stage: N,
            });
        }
        if config.lambda_shift > 15 || config.detect_ratio_q8 <= 256 {
            return Err(ConfigError::TrackerSetting);
        }
        if config.frame_lambda_q16 >= 1 << 16 {
            return Err(ConfigError::TrackerSetting);
        }
        let mut used = [false; N];
        for u in 0..numerology.used_len() {
            if let Some(x) = used.get_mut(numerology.fft_index(u)) {
                *x = true;
            }
        }
        Ok(Self {
            numerology: *numerology,
            design,
            config,
            var: [0; N],
            seen: [0; N],
            used,
            flagged: [false; N],
            frame_sum: [0; N],
            frame_n: [0; N],
            dd_eps: [0; N],
            dd_h2: [0; N],
            data_power: 0,
            data_n: 0,
            dd_err: 0,
            dd_ref: 0,
            pilot_gain: 0,
            pilot_n: 0,
            symbols: 0,
            n0: 0,
            null_memory: (0, 0),
            pilot_memory: (0, 0),
            saturated: false,
        })
    }

    /// The design in use.
    pub fn design(&self) -> &NoiseTrackDesignQ15<N> {
        self.design.borrow()
    }

    /// Forgets everything (a new link).
    pub fn reset(&mut self) {
        self.var = [0; N];
        self.seen = [0; N];
        self.dd_eps = [0; N];
        self.dd_h2 = [0; N];
        self.flagged = [false; N];
        self.n0 = 0;
        self.null_memory = (0, 0);
        self.pilot_memory = (0, 0);
        self.clear_frame();
    }

    /// Starts the frame statistics over with the receive gain unchanged; the per-bin
    /// variances and the noise-floor memory carry on.
    pub fn start_frame(&mut self) {
        self.start_frame_with_gain(Scaled::default());
    }

    /// As [`Self::start_frame`], when the new frame's power gain is `power_gain` times the
    /// previous one's: the memory and the per-bin variances are rescaled by it (zero: 1).
    pub fn start_frame_with_gain(&mut self, power_gain: Scaled) {
        let g = (power_gain.mant > 0).then_some(power_gain);
        let mu = u64::from(self.config.frame_lambda_q16);
        let ((ns, nn), (ps, pn)) = self.known_sums();
        let scale = |v: u64| g.map_or(v, |g| mul_scaled(v, g));
        self.null_memory = (
            mul_shr(scale(self.null_memory.0.saturating_add(ns)), mu, 16),
            mul_shr(self.null_memory.1.saturating_add(nn << 16), mu, 16),
        );
        self.pilot_memory = (
            mul_shr(scale(self.pilot_memory.0.saturating_add(ps)), mu, 16),
            mul_shr(self.pilot_memory.1.saturating_add(pn << 16), mu, 16),
        );
        if let Some(g) = g {
            for v in self.var.iter_mut().chain(self.dd_h2.iter_mut()) {
                *v = mul_scaled(*v, g);
            }
            self.n0 = mul_scaled(self.n0, g);
        }
        self.clear_frame();
    }

    fn clear_frame(&mut self) {
        self.frame_sum = [0; N];
        self.frame_n = [0; N];
        self.data_power = 0;
        self.data_n = 0;
        self.dd_err = 0;
        self.dd_ref = 0;
        self.pilot_gain = 0;
        self.pilot_n = 0;
        self.symbols = 0;
        self.saturated = false;
    }

    /// [`Self::update`] with the symbol `receiver` just processed.
    pub fn update_from_receiver<F, const K: usize, const M: usize>(
        &mut self,
        symbol: u32,
        receiver: &ReceiverQ15<F, N, K, M>,
        equalized: &[Cq15],
        modulation: Modulation,
    ) -> Result<(), ProcessError>
    where
        F: OfdmFft<N, Sample = Cq15>,
    {
        let (bins, bins_exp) = receiver.bins_with_exponent();
        let (estimate, estimate_exp) = receiver.estimate();
        let view = SymbolViewQ15 {
            bins,
            bins_exp,
            estimate,
            estimate_exp,
            common_phase: receiver.applied_common_phase(),
        };
        self.update(symbol, &view, equalized, modulation)
    }

    /// Adds symbol `symbol`: what the receiver saw (`view`), the equalized data symbols
    /// (Q3.12, ascending frequency, as the receiver wrote them) and their modulation.
    ///
    /// Errors (nothing changed): fewer equalized symbols than data bins, or fewer estimate
    /// values than used bins.
    pub fn update(
        &mut self,
        symbol: u32,
        view: &SymbolViewQ15<'_, N>,
        equalized: &[Cq15],
        modulation: Modulation,
    ) -> Result<(), ProcessError> {
        let nu = self.numerology;
        let d = nu.data_len(symbol);
        if equalized.len() < d {
            return Err(ProcessError::BufferLength {
                expected: d,
                actual: equalized.len(),
            });
        }
        if view.estimate.len() < nu.used_len() {
            return Err(ProcessError::BufferLength {
                expected: nu.used_len(),
                actual: view.estimate.len(),
            });
        }
        let e_b = view.bins_exp.clamp(-EXP_LIMIT, EXP_LIMIT);
        let e_h = view.estimate_exp.clamp(-EXP_LIMIT, EXP_LIMIT);
        let mut sat = false;
        // Null bins: |Y|².
        for k in 0..N {
            if self.used.get(k).copied().unwrap_or(true) {
                continue;
            }
            let y = view.bins.get(k).copied().unwrap_or_default();
            let o = power_at(y, e_b, &mut sat);
            self.observe_known(k, o);
        }
        // Pilots and data.
        let table = modulation_index(modulation);
        let mut prbs = Prbs15::for_symbol(nu.params().pilots.seed, symbol);
        let mut count = 0usize;
        for b in nu.bins(symbol) {
            let y = view.bins.get(b.fft_index).copied().unwrap_or_default();
            let h = view.estimate.get(b.used_index).copied().unwrap_or_default();
            match b.kind {
                BinKind::Pilot => {
                    let neg = prbs.next_bit() != 0;
                    let (o, gain) = self.pilot_observation(
                        b.used_index,
                        y,
                        e_b,
                        h,
                        e_h,
                        view.common_phase,
                        neg,
                        &mut sat,
                    );
                    self.pilot_gain = sat_add(self.pilot_gain, gain, &mut sat);
                    self.pilot_n = self.pilot_n.saturating_add(1);
                    self.observe_known(b.fft_index, o);
                }
                BinKind::Data => {
                    let xe = equalized.get(count).copied().unwrap_or_default();
                    count += 1;
                    let (err, refp) = dd_error_q24(xe, modulation);
                    self.dd_err = sat_add(self.dd_err, err, &mut sat);
                    self.dd_ref = sat_add(self.dd_ref, refp, &mut sat);
                    let py = power_at(y, e_b, &mut sat);
                    self.data_power = sat_add(self.data_power, py, &mut sat);
                    self.data_n = self.data_n.saturating_add(1);
                    let dh = power_at(h, e_h, &mut sat);
                    self.observe_data(b.fft_index, b.used_index, err, dh, table);
                }
            }
        }
        self.saturated |= sat;
        self.symbols = self.symbols.saturating_add(1);
        self.n0 = self.thermal_n0();
        self.update_flags();
        Ok(())
    }

    /// The pilot observation `|Y − s·(A/g)·c·Ĥ|²/(A²κ)` and the channel power `|c·Ĥ/g|²`,
    /// power units.
    #[allow(clippy::too_many_arguments)]
    fn pilot_observation(
        &self,
        u: usize,
        y: Cq15,
        e_b: i32,
        h: Cq15,
        e_h: i32,
        rot: Option<Cq15>,
        neg: bool,
        sat: &mut bool,
    ) -> (u64, u64) {
        let (hr, hi) = (i64::from(h.re), i64::from(h.im));
        // c·Ĥ as value × 2^30 at exponent e_h: |.| ≤ 2^31.
        let (pr, pi) = match rot {
            Some(c) => {
                let (cr, ci) = (i64::from(c.re), i64::from(c.im));
                (hr * cr - hi * ci, hr * ci + hi * cr)
            }
            None => (hr << 15, hi << 15),
        };
        // To amplitude units: value·2^22 = p·2^(e_h − 30 + 22).
        let hk = (
            clamp_amp(shift_round(pr, 8 - e_h), sat),
            clamp_amp(shift_round(pi, 8 - e_h), sat),
        );
        let (cr, ci) = self
            .design
            .borrow()
            .pilot_coef
            .get(u)
            .copied()
            .unwrap_or((1 << 20, 0));
        let (cr, ci) = (i64::from(cr), i64::from(ci));
        // |hk| ≤ 2^30, |c| < 2^31: each product < 2^61.
        let ahu = (
            clamp_amp(
                shift_round(hk.0 * cr - hk.1 * ci, PILOT_COEF_FRAC_BITS),
                sat,
            ),
            clamp_amp(
                shift_round(hk.0 * ci + hk.1 * cr, PILOT_COEF_FRAC_BITS),
                sat,
            ),
        );
        // Y in amplitude units: y·2^(e_b − 15 + 22).
        let ya = (
            clamp_amp(shift_round(i64::from(y.re), -(e_b + 7)), sat),
            clamp_amp(shift_round(i64::from(y.im), -(e_b + 7)), sat),
        );
        let r = if neg {
            (ya.0 + ahu.0, ya.1 + ahu.1)
        } else {
            (ya.0 - ahu.0, ya.1 - ahu.1)
        };
        let res = norm_sqr(r);
        let scale = self
            .design
            .borrow()
            .pilot_scale
            .get(u)
            .copied()
            .unwrap_or_default();
        let o = cap(mul_scaled(res, scale), sat);
        let gain = cap(
            mul_scaled(norm_sqr(ahu), self.design.borrow().inv_pilot_power),
            sat,
        );
        (o, gain)
    }

    /// Forgotten-mean step of `v` towards `o` for a bin seen `s` times (running mean for the
    /// first `2^k` symbols, then `λ = 1 − 2^−k`). `v`, `o` ≤ [`POWER_MAX`].
    fn forget(&self, v: u64, o: u64, s: u16) -> u64 {
        let k = u32::from(self.config.lambda_shift);
        let (v, o) = (v.min(POWER_MAX) as i64, o.min(POWER_MAX) as i64);
        let dlt = o - v;
        let step = if u32::from(s) < 1u32 << k {
            let s = i64::from(s.max(1));
            // Rounded division (s ≥ 1).
            let half = s / 2;
            let q = if dlt >= 0 { dlt + half } else { dlt - half };
            q.checked_div(s).unwrap_or(0)
        } else {
            shift_round(dlt, k as i32)
        };
        // v + step lies between v and o.
        (v + step).clamp(0, POWER_MAX as i64) as u64
    }

    /// A null-bin or pilot observation `o` of FFT bin `k`.
    fn observe_known(&mut self, k: usize, o: u64) {
        let s = match self.seen.get_mut(k) {
            Some(s) => {
                *s = s.saturating_add(1);
                *s
            }
            None => return,
        };
        if let Some(&v) = self.var.get(k) {
            let nv = self.forget(v, o, s);
            if let Some(v) = self.var.get_mut(k) {
                *v = nv;
            }
        }
        if let (Some(fs), Some(fnn)) = (self.frame_sum.get_mut(k), self.frame_n.get_mut(k)) {
            *fs = fs.saturating_add(o).min(POWER_MAX);
            *fnn = fnn.saturating_add(1);
        }
    }

    /// A data-bin observation: DD error `err` (Q24) and channel power `dh` (power units) of
    /// FFT bin `k`, used bin `u`, DD table `table` (index in [`Modulation::ALL`]).
    fn observe_data(&mut self, k: usize, u: usize, err: u64, dh: u64, table: usize) {
        let s = match self.seen.get_mut(k) {
            Some(s) => {
                *s = s.saturating_add(1);
                *s
            }
            None => return,
        };
        let (Some(&ae), Some(&ah)) = (self.dd_eps.get(k), self.dd_h2.get(k)) else {
            return;
        };
        let ae = self.forget(ae, err, s);
        let obs = mul_shr(err, dh, EPS_FRAC_BITS).min(POWER_MAX);
        let ah = self.forget(ah, obs, s);
        let e = self
            .design
            .borrow()
            .estimator_mse
            .get(u)
            .copied()
            .unwrap_or(0);
        let r = if ae > 0 {
            self.design
                .borrow()
                .dd
                .get(table)
                .map_or(1 << RATIO_FRAC_BITS, |t| t.ratio_q16(ae))
        } else {
            1 << RATIO_FRAC_BITS
        };
        let v = mul_shr(ah, r, RATIO_FRAC_BITS)
            .min(POWER_MAX)
            .saturating_sub(e);
        if let (Some(a), Some(b), Some(x)) = (
            self.dd_eps.get_mut(k),
            self.dd_h2.get_mut(k),
            self.var.get_mut(k),
        ) {
            *a = ae;
            *b = ah;
            *x = v;
        }
    }

    /// Flags against `max(N0, median of ±FLOOR_HALF_WIDTH used neighbours)` (N0 alone for
    /// null bins).
    fn update_flags(&mut self) {
        let n0 = self.n0;
        let ratio = u64::from(self.config.detect_ratio_q8);
        for k in 0..N {
            if self.used.get(k).copied().unwrap_or(true) {
                continue;
            }
            let v = self.var.get(k).copied().unwrap_or(0);
            if let Some(f) = self.flagged.get_mut(k) {
                *f = n0 > 0 && v > mul_shr(n0, ratio, 8);
            }
        }
        let nu = self.numerology;
        let used_len = nu.used_len();
        for u in 0..used_len {
            let lo = u.saturating_sub(FLOOR_HALF_WIDTH);
            let hi = (u + FLOOR_HALF_WIDTH + 1).min(used_len);
            let mut around = [0u64; 2 * FLOOR_HALF_WIDTH];
            let mut n = 0usize;
            for w in (lo..hi).filter(|&w| w != u) {
                if let Some(slot) = around.get_mut(n) {
                    *slot = self.var.get(nu.fft_index(w)).copied().unwrap_or(0);
                    n += 1;
                }
            }
            let floor = median(around.get_mut(..n).unwrap_or_default());
            let k = nu.fft_index(u);
            let v = self.var.get(k).copied().unwrap_or(0);
            if let Some(f) = self.flagged.get_mut(k) {
                *f = n0 > 0 && v > mul_shr(n0.max(floor), ratio, 8);
            }
        }
    }

    /// Thermal N0 of the frame so far with the memory of earlier frames (power units).
    fn thermal_n0(&self) -> u64 {
        let ((ns, nn), (ps, pn)) = self.known_sums();
        pooled_n0(
            (
                ns.saturating_add(self.null_memory.0),
                (nn << 16).saturating_add(self.null_memory.1),
            ),
            (
                ps.saturating_add(self.pilot_memory.0),
                (pn << 16).saturating_add(self.pilot_memory.1),
            ),
        )
    }

    /// Frame sums `(sum, count)` of the null-bin and pilot observations on bins not flagged
    /// and not DC.
    fn known_sums(&self) -> ((u64, u64), (u64, u64)) {
        let (mut null, mut pilot) = ((0u64, 0u64), (0u64, 0u64));
        for (k, (((&fs, &fnn), &f), &u)) in self
            .frame_sum
            .iter()
            .zip(self.frame_n.iter())
            .zip(self.flagged.iter())
            .zip(self.used.iter())
            .enumerate()
        {
            if f || k == 0 {
                continue;
            }
            let acc = if u { &mut pilot } else { &mut null };
            acc.0 = acc.0.saturating_add(fs).min(POWER_MAX);
            acc.1 = acc.1.saturating_add(u64::from(fnn));
        }
        // Counts are at most N·65535 < 2^29: `<< 16` in the callers cannot overflow.
        (null, pilot)
    }

    /// The frame statistics so far (integer only).
    pub fn frame_stats(&self) -> NoiseStatsQ15 {
        let n0 = self.n0;
        let ((null_s, null_n), (pil_s, pil_n)) = self.known_sums();
        let mean = |s: u64, n: u64| s.checked_div(n).unwrap_or(0);
        let p_data = mean(self.data_power, u64::from(self.data_n));
        let mut flags = 0u8;
        if self.saturated || n0 >= POWER_MAX || p_data >= POWER_MAX {
            flags |= STAT_SATURATED;
        }
        if self.data_n == 0 {
            flags |= STAT_NO_DATA;
        }
        let floor = -60 * 256;
        let snr_db_q8 = if n0 == 0 {
            flags |= STAT_NO_NOISE;
            -300 * 256
        } else if p_data > n0 {
            db_q8(p_data - n0, n0).max(floor)
        } else {
            floor
        };
        let (evm, mer) = if self.dd_ref > 0 && self.dd_err > 0 {
            (
                sqrt_ratio_q16(self.dd_err, self.dd_ref),
                db_q8(self.dd_ref, self.dd_err),
            )
        } else {
            (0, 0)
        };
        let g = mean(self.pilot_gain, u64::from(self.pilot_n));
        NoiseStatsQ15 {
            noise_power: n0,
            null_noise_power: mean(null_s, null_n),
            pilot_noise_power: mean(pil_s, pil_n),
            snr_db_q8,
            evm_data_q16: evm,
            mer_db_q8: mer,
            evm_pilot_q16: if g > 0 { sqrt_ratio_q16(n0, g) } else { 0 },
            interfered_bins: self.flagged.iter().filter(|&&f| f).count() as u16,
            symbols: self.symbols,
            flags,
        }
    }

    /// Noise-plus-interference variance per used bin (ascending frequency), power units,
    /// into `out` (at least `used_len` long; pilots and data alike): the format
    /// [`ReceiverQ15::set_bin_noise`] takes. Bins not yet observed read N0 (at least 1 LSB).
    /// Returns the count written.
    pub fn bin_noise(&self, out: &mut [u64]) -> usize {
        let nu = &self.numerology;
        let mut n = 0;
        for (u, o) in out.iter_mut().enumerate().take(nu.used_len()) {
            let v = self.var.get(nu.fft_index(u)).copied().unwrap_or(0);
            *o = if v > 0 { v } else { self.n0.max(1) };
            n += 1;
        }
        n
    }

    /// Whether FFT bin `fft_index` is flagged as interfered.
    pub fn is_interfered(&self, fft_index: usize) -> bool {
        self.flagged.get(fft_index).copied().unwrap_or(false)
    }

    /// FFT indices of the flagged bins, ascending, into `out`; returns the count written.
    pub fn interfered_bins(&self, out: &mut [u16]) -> usize {
        let mut n = 0;
        for (k, _) in self.flagged.iter().enumerate().filter(|(_, &f)| f) {
            if let Some(o) = out.get_mut(n) {
                *o = k as u16;
                n += 1;
            }
        }
        n
    }
}

/// Index of `m` in [`Modulation::ALL`].
fn modulation_index(m: Modulation) -> usize {
    match m {
        Modulation::Bpsk => 0,
        Modulation::Qpsk => 1,
        Modulation::Qam16 => 2,
        Modulation::Qam64 => 3,
        Modulation::Qam256 => 4,
    }
}

/// Per modulation: the grid step `a` in Q24 and `1/a` in Q16 (`a = 1/sqrt(E)`, `E` = 1, 2,
/// 10, 42, 170: `round(2^24/sqrt E)`, `round(2^16·sqrt E)`).
fn grid_step(m: Modulation) -> (i64, i64) {
    match m {
        Modulation::Bpsk => (16_777_216, 65_536),
        Modulation::Qpsk => (11_863_283, 92_682),
        Modulation::Qam16 => (5_305_422, 207_243),
        Modulation::Qam64 => (2_588_781, 424_722),
        Modulation::Qam256 => (1_286_754, 854_485),
    }
}

/// The decision-directed error `|x − slice(x)|²` and the decision's energy `|slice(x)|²` of
/// an equalized symbol `x` (Q3.12), both Q24: the f32 slicer ([`Modulation::slice`], nearest
/// odd level clamped to the grid) in integers.
fn dd_error_q24(x: Cq15, m: Modulation) -> (u64, u64) {
    let (a, inv_a) = grid_step(m);
    let top = (1i64 << m.bits_per_axis()) - 1;
    let axis = |v: i16| -> (i64, i64) {
        // u = v/a in Q28; odd level 2·floor(u/2) + 1, clamped.
        let u = i64::from(v) * inv_a;
        let level = (2 * (u >> 29) + 1).clamp(-top, top);
        let d = a * level; // Q24, |d| < 2^25
        ((i64::from(v) << 12) - d, d) // |error| < 2^28
    };
    let (ei, di) = axis(x.re);
    let (eq, dq) = if m == Modulation::Bpsk {
        (i64::from(x.im) << 12, 0)
    } else {
        axis(x.im)
    };
    let sq = |v: i64| (v.unsigned_abs() * v.unsigned_abs()) >> EPS_FRAC_BITS;
    (sq(ei) + sq(eq), sq(di) + sq(dq))
}

/// `|c|²` at block exponent `e` in power units (`|c|²·2^(2e + 14)`), capped at
/// [`POWER_MAX`] (sets `sat`).
fn power_at(c: Cq15, e: i32, sat: &mut bool) -> u64 {
    let p = norm_sqr((i64::from(c.re), i64::from(c.im)));
    let s = 2 * e + 14;
    if p == 0 {
        return 0;
    }
    if s >= 0 {
        if p.leading_zeros() <= s as u32 + 1 {
            *sat = true;
            return POWER_MAX;
        }
        cap(p << s, sat)
    } else {
        let r = (-s) as u32;
        if r >= 64 {
            0
        } else {
            (p >> r) + ((p >> (r - 1)) & 1)
        }
    }
}

/// `re² + im²` of parts with `|.| ≤ 2^31` (< 2^63).
#[inline]
fn norm_sqr((re, im): (i64, i64)) -> u64 {
    let (r, i) = (
        re.unsigned_abs().min(1 << 31),
        im.unsigned_abs().min(1 << 31),
    );
    r * r + i * i
}

#[inline]
fn clamp_amp(v: i64, sat: &mut bool) -> i64 {
    if v.unsigned_abs() > AMP_MAX.unsigned_abs() {
        *sat = true;
    }
    v.clamp(-AMP_MAX, AMP_MAX)
}

#[inline]
fn cap(v: u64, sat: &mut bool) -> u64 {
    if v >= POWER_MAX {
        *sat = true;
    }
    v.min(POWER_MAX)
}

#[inline]
fn sat_add(a: u64, b: u64, sat: &mut bool) -> u64 {
    cap(a.saturating_add(b), sat)
}

/// `round(a·b·2^−s)`, saturated to `u64`.
fn mul_shr(a: u64, b: u64, s: u32) -> u64 {
    let p = u128::from(a) * u128::from(b);
    let r = if s == 0 {
        p
    } else if s >= 128 {
        0
    } else {
        (p >> s) + ((p >> (s - 1)) & 1)
    };
    u64::try_from(r).unwrap_or(u64::MAX)
}

/// `v · mant·2^(exp − 15)`, rounded and saturated.
fn mul_scaled(v: u64, f: Scaled) -> u64 {
    let m = u64::try_from(f.mant).unwrap_or(0);
    let s = 15 - f.exp.clamp(-200, 200);
    if s >= 0 {
        mul_shr(v, m, s as u32)
    } else {
        let p = u128::from(v) * u128::from(m);
        let l = (-s) as u32;
        if p == 0 {
            0
        } else if p.leading_zeros() <= l {
            u64::MAX
        } else {
            u64::try_from(p << l).unwrap_or(u64::MAX)
        }
    }
}

/// The thermal N0 from the null-bin and pilot `(sum, count Q16)`: pooled while the pilot mean
/// exceeds the null mean by at most two standard deviations of their difference (each
/// observation exponential: relative spread `1/√n`), else the null bins alone; pilots alone
/// when there are no null bins (as [`crate::noise_track`]).
fn pooled_n0(null: (u64, u64), pilot: (u64, u64)) -> u64 {
    let mean = |(s, n): (u64, u64)| -> u64 {
        if n == 0 {
            return 0;
        }
        let q = (u128::from(s) << 16) / u128::from(n);
        u64::try_from(q).unwrap_or(u64::MAX).min(POWER_MAX)
    };
    let (mn, mp) = (mean(null), mean(pilot));
    if null.1 == 0 {
        return mp;
    }
    if pilot.1 == 0 {
        return mn;
    }
    let pooled = || {
        let n = u128::from(null.1) + u128::from(pilot.1);
        let s = (u128::from(null.0) + u128::from(pilot.0)) << 16;
        u64::try_from(s / n.max(1))
            .unwrap_or(u64::MAX)
            .min(POWER_MAX)
    };
    if mp <= mn {
        return pooled();
    }
    // (mp − mn)² ≤ 4 (mn²/nn + mp²/np): means brought below 2^30 by a common shift (both
    // sides scale alike), squares < 2^60, `· 2^16 / count` in u128.
    let sh = (64 - mp.leading_zeros()).saturating_sub(30);
    let (a, b) = (u128::from(mn >> sh), u128::from(mp >> sh));
    let var = ((a * a) << 16) / u128::from(null.1) + ((b * b) << 16) / u128::from(pilot.1);
    let d = b - a.min(b);
    if d * d <= 4 * var {
        pooled()
    } else {
        mn
    }
}

/// Median by insertion sort (the slice is reordered); the mean of the middle two (rounded)
/// for an even count; 0 for an empty slice.
fn median(v: &mut [u64]) -> u64 {
    crate::noise_track::sort_small(v);
    let n = v.len();
    if n == 0 {
        return 0;
    }
    if n % 2 == 1 {
        v.get(n / 2).copied().unwrap_or(0)
    } else {
        let a = v.get(n / 2 - 1).copied().unwrap_or(0);
        let b = v.get(n / 2).copied().unwrap_or(0);
        // Both ≤ POWER_MAX: the sum cannot wrap.
        (a.min(POWER_MAX) + b.min(POWER_MAX)).div_ceil(2)
    }
}

/// `log2(x)` in Q16 for `x > 0` (0 for 0): [`crate::fixed_math::log2_q16`].
fn log2_q16(x: u64) -> i64 {
    crate::fixed_math::log2_q16(x).map_or(0, i64::from)
}

/// `10·log10(a/b)` in dB × 256 for `a, b > 0` (0 otherwise), without the i16 saturation of
/// [`crate::fixed_math::ratio_db_q8`].
fn db_q8(a: u64, b: u64) -> i32 {
    if a == 0 || b == 0 {
        return 0;
    }
    let d = log2_q16(a) - log2_q16(b); // |d| < 2^22
    shift_round(d * DB_PER_LOG2_Q16, 24) as i32
}

/// `sqrt(a/b)` in Q16 (saturating at `u32::MAX`; 0 when `b = 0`).
fn sqrt_ratio_q16(a: u64, b: u64) -> u32 {
    if b == 0 {
        return 0;
    }
    let q = (u128::from(a) << 32) / u128::from(b);
    let q = u64::try_from(q).unwrap_or(u64::MAX);
    u32::try_from(isqrt(q)).unwrap_or(u32::MAX)
}

/// `floor(sqrt(x))`, bit by bit.
fn isqrt(x: u64) -> u64 {
    let mut rem = x;
    let mut root = 0u64;
    let mut bit = 1u64 << 62;
    while bit > rem {
        bit >>= 2;
    }
    while bit != 0 {
        if rem >= root + bit {
            rem -= root + bit;
            root = (root >> 1) + bit;
        } else {
            root >>= 1;
        }
        bit >>= 2;
    }
    root
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn integer_helpers_match_f64() {
        // Against f64 log2/sqrt (IEEE 754 library).
        for x in [1u64, 2, 3, 1000, 65_537, 1 << 40, 123_456_789_012, u64::MAX] {
            let got = log2_q16(x) as f64 / 65536.0;
            assert!((got - (x as f64).log2()).abs() < 1e-4, "log2 {x}: {got}");
            let r = isqrt(x);
            assert!(r * r <= x && (r + 1).checked_mul(r + 1).is_none_or(|s| s > x));
        }
        let db = f64::from(db_q8(1000, 1)) / 256.0;
        assert!((db - 30.0).abs() < 0.01, "{db}");
        let e = f64::from(sqrt_ratio_q16(1, 100)) / 65536.0;
        assert!((e - 0.1).abs() < 1e-4);
    }

    #[test]
    fn grid_steps_match_the_constellations() {
        for m in Modulation::ALL {
            let (a, inv) = grid_step(m);
            let af = f64::from(m.axis_scale());
            assert!((a as f64 / 16_777_216.0 / af - 1.0).abs() < 1e-6, "{m:?}");
            assert!((inv as f64 / 65536.0 * af - 1.0).abs() < 1e-5, "{m:?}");
        }
    }

    #[test]
    fn the_integer_slicer_agrees_with_the_f32_one() {
        // Modulation::slice on a grid of points (Q3.12), away from the decision boundaries
        // (where either decision is right to rounding).
        for m in Modulation::ALL {
            for i in -60..=60 {
                for q in -60..=60 {
                    let x = crate::Cf32::new(i as f32 * 0.0371 + 0.001, q as f32 * 0.0293 - 0.002);
                    let xq = Cq15::new((x.re * 4096.0) as i16, (x.im * 4096.0) as i16);
                    let xf = crate::Cf32::new(f32::from(xq.re), f32::from(xq.im)) / 4096.0;
                    let d = m.slice(xf);
                    let (err, refp) = dd_error_q24(xq, m);
                    let want = (xf - d).norm_sqr();
                    let got = err as f32 / 16_777_216.0;
                    assert!((got - want).abs() < 1e-5, "{m:?} {x}: {got} vs {want}");
                    let r = refp as f32 / 16_777_216.0;
                    assert!((r - d.norm_sqr()).abs() < 1e-5);
                }
            }
        }
    }

    #[test]
    fn dd_table_inverts_the_closed_form() {
        // The ratio σ²/ε of the integer table at σ² between its points, against the closed
        // form of crate::dd_bias::dd_error evaluated there (capped at MAX_CORRECTION), and
        // against the f32 inverse (crate::dd_bias::DdBias, which interpolates log σ²).
        assert_eq!(
            RATIO_CAP_Q16 as f32,
            crate::dd_bias::MAX_CORRECTION * 65536.0
        );
        for m in Modulation::ALL {
            let t = DdTableQ15::new(m);
            let f = crate::dd_bias::DdBias::new(m);
            for s2 in [1e-4f32, 1e-3, 0.01, 0.05, 0.1, 0.3, 1.0, 3.0] {
                let e = dd_error(m, s2);
                let exact = (s2 / e).min(crate::dd_bias::MAX_CORRECTION);
                let got = t.ratio_q16((e * 16_777_216.0) as u64) as f32 / 65536.0;
                assert!(
                    (got - exact).abs() < 3e-3 * exact,
                    "{m:?} σ² {s2}: {got} vs {exact}"
                );
                let f32_ratio = f.noise_for(e) / e;
                assert!(
                    (got - f32_ratio).abs() < 1e-2,
                    "{m:?} σ² {s2}: {got} vs {f32_ratio}"
                );
            }
        }
    }
}
