//! The delay-spread estimator of [`crate::delay_spread`] in integers, for cores without an
//! FPU: Q15 FFT output with its block exponent in, the same windowed pilot LS, the same
//! inverse transform (the Q15 block-floating-point FFT, [`Q15Fft`]), power-delay-profile sums
//! in `u64` and moments in `i128`; delays out in Q16.
//!
//! ## Per symbol (no floating point)
//!
//! Per pilot, `y·w` (bin parts `i16` times the Hann weight in Q15, exact in `i32`) is rounded
//! to at most 15 bits by one shift `s` chosen from the symbol's largest product, signed by the
//! pilot PRBS and placed at its bin; the `N`-point inverse Q15 FFT returns its block exponent
//! `e_i`. With the bins' exponent `e` (unitary DFT = `bins·2^e·R`,
//! [`ReceiverQ15::bins_with_exponent`](crate::receiver_q15::ReceiverQ15::bins_with_exponent)),
//! the delay profile of the symbol is
//!
//! ```text
//! |g(n)|² = |out(n)|² · 2^E · R⁴/A²,   E = 2(e_i + s + e − 15) − 30
//! ```
//!
//! (`|out|²` exact in `u32`, `A` the pilot amplitude, `R` the FFT's residual scale). The
//! constant `R⁴/A²` is common to every symbol and enters only the channel power. Symbols are
//! summed per delay bin in `u64` against one reference exponent `E_ref` (block floating
//! point): a symbol adds `|out|²·2^(E − E_ref)`, with `E − E_ref` at most 16. The first
//! symbol sets `E_ref = E − 16`, so later symbols from 16 bits of power quieter up to as loud
//! add exactly; a louder one first rounds the sums down to make room, a quieter one is
//! rounded (it weighs `2^(E − E_ref)` relative to the others, as in the f32 sums), and when a
//! sum reaches `2^62` every sum is halved (rounded) and `E_ref` grows by one. Nothing
//! saturates and no count limits the averaging.
//!
//! Cost per symbol: two passes over the pilots, one `N`-point Q15 inverse FFT and one
//! multiply-add per delay bin of the moment window and the noise region.
//!
//! ## Per report ([`DelaySpreadEstimatorQ15::estimate`])
//!
//! The floor-subtracted moments `m_j = Σ_n d^j (P(n)·M − F)` are exact `i128` sums (`M` the
//! number of noise bins and `F` their sum for a measured floor, so no division; `M = 2^8` and
//! `F` the known floor for a given one). After a common normalisation to 62 bits, one `i128`
//! division gives `2^100/m₀`, from which the mean `m₁/m₀` and the second moment `m₂/m₀` follow
//! in Q32 by multiplication; the variance and the kernel's mean and variance are subtracted in
//! Q32, and the spread is an integer square root (Q16). The channel power, the floor ratio and
//! the noise level of the maximum delay use the Newton reciprocal and inverse square root of
//! [`crate::fixed_math`]. The per-report rounding is below 2^-16 sample.
//!
//! ## Kernel and window (construction)
//!
//! The Hann weights come from the NCO's integer sine table ([`crate::nco::cos_sin_q15`];
//! `w = sin²(πx)` in Q15, within about 2 LSB of the exact window), and the kernel's moments
//! are measured by running those weights through the same Q15 inverse FFT and integer
//! moments, so the data and the correction see the same quantised aperture. The only floating
//! point in construction is the channel-power constant (`1/A²`, from the numerology's f32 pilot
//! amplitude) and [`DelaySpreadConfigQ15::from_f32`], a configuration-time conversion.
//!
//! ## Agreement with the f32 estimator
//!
//! The Q15 path adds its rounding (FFT output, LS products, inverse FFT) as a floor of a few
//! LSB² per delay bin, about 70 dB below the profile's peak, which the measured floor removes
//! on average. On the f32 tests' frames through Q15 at −12 dBFS (N = 256, 20 dB, 50 draws ×
//! 16 symbols per estimate) the two estimators differ by at most 1.1e-3 samples² in `τ²`
//! (3.4e-4 sample at a spread of 1 sample) and 1e-4 sample in the mean delay, against a
//! derived bound of 5–6e-3 samples² (`tests/delay_spread_q15.rs`).

use crate::delay_spread::{DelaySpread, DelaySpreadConfig, NoiseFloor};
use crate::error::{ConfigError, ProcessError};
use crate::fft::OfdmFft;
use crate::fft_q15::Q15Fft;
use crate::fixed::Cq15;
use crate::fixed_math::{inv_sqrt, reciprocal, shift_round, Scaled};
use crate::nco::cos_sin_q15;
use crate::numerology::{BinKind, Numerology};
use crate::pilots::Prbs15;

/// Largest magnitude of a block exponent [`DelaySpreadEstimatorQ15::update`] (and
/// [`crate::iq_image_q15`]) accept; a Q15 FFT's exponents stay within a few tens.
pub const MAX_BLOCK_EXPONENT: i32 = 256;
/// Default maximum-delay threshold, 20 dB below the peak, as a power ratio in Q24
/// (`round(0.01·2^24)`).
pub const DEFAULT_MAX_DELAY_THRESHOLD_Q24: u32 = 167_772;
/// Largest magnitude of a known floor's exponent ([`Scaled::exp`]) accepted.
pub const MAX_FLOOR_EXPONENT: i32 = 512;

/// Headroom of a symbol's placement above the reference exponent, bits of power.
const GUARD_BITS: i32 = 16;
/// A PDP sum at or above this halves every sum.
const ACC_LIMIT: u64 = 1 << 62;
/// Fractional bits of a known floor in the moment sums (`M = 2^8`).
const KNOWN_FLOOR_BITS: i32 = 8;

/// Where the noise floor of the power delay profile comes from (integer form).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum NoiseFloorQ15 {
    /// Known noise variance per bin in the units of the bins given to
    /// [`DelaySpreadEstimatorQ15::update`] (power of the unitary DFT of the gained input,
    /// Q15 fractions squared: `α²·N0` for a channel scale `α`), as a [`Scaled`] with
    /// `|exp| ≤` [`MAX_FLOOR_EXPONENT`]; zero mantissa for no noise.
    Known {
        /// N0 per bin, in bin units.
        noise_per_bin: Scaled,
    },
    /// Measured as the mean PDP over delays `from_samples .. to_samples`, as in
    /// [`NoiseFloor::Measured`].
    Measured {
        /// First delay of the noise region, samples.
        from_samples: usize,
        /// One past the last delay of the noise region, samples.
        to_samples: usize,
    },
}

/// Delay windows, noise floor and maximum-delay threshold of a [`DelaySpreadEstimatorQ15`]
/// (the fields of [`DelaySpreadConfig`] in integers).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct DelaySpreadConfigQ15 {
    /// Delays before 0 in the moment window, samples.
    pub lead_samples: usize,
    /// Delays from 0 in the moment window, samples.
    pub span_samples: usize,
    /// The noise floor.
    pub noise: NoiseFloorQ15,
    /// Maximum significant delay threshold as a power ratio below the peak, Q24, in
    /// `1 ..= 2^24` (20 dB: [`DEFAULT_MAX_DELAY_THRESHOLD_Q24`]).
    pub max_delay_threshold_q24: u32,
}

impl DelaySpreadConfigQ15 {
    /// The windows of [`DelaySpreadConfig::measured`] with the default 20 dB threshold (no
    /// floating point). Errors as that function.
    pub fn measured(numerology: &Numerology) -> Result<Self, ConfigError> {
        let c = DelaySpreadConfig::measured(numerology)?;
        let (from_samples, to_samples) = match c.noise {
            NoiseFloor::Measured {
                from_samples,
                to_samples,
            } => (from_samples, to_samples),
            NoiseFloor::Known { .. } => return Err(ConfigError::TrackerSetting),
        };
        Ok(Self {
            lead_samples: c.lead_samples,
            span_samples: c.span_samples,
            noise: NoiseFloorQ15::Measured {
                from_samples,
                to_samples,
            },
            max_delay_threshold_q24: DEFAULT_MAX_DELAY_THRESHOLD_Q24,
        })
    }

    /// The windows of [`DelaySpreadConfig::known`] with a known noise per bin in bin units
    /// and the default 20 dB threshold (no floating point).
    pub fn known(numerology: &Numerology, noise_per_bin: Scaled) -> Self {
        let c = DelaySpreadConfig::known(numerology, 0.0);
        Self {
            lead_samples: c.lead_samples,
            span_samples: c.span_samples,
            noise: NoiseFloorQ15::Known { noise_per_bin },
            max_delay_threshold_q24: DEFAULT_MAX_DELAY_THRESHOLD_Q24,
        }
    }

    /// Converts an f32 configuration (configuration time, floating point). A known `N0`
    /// (relative to unit channel power, as in [`NoiseFloor::Known`]) becomes noise per bin in
    /// bin units for an FFT input at `signal_dbfs` with unit-energy symbols through a
    /// unit-power channel (the convention of
    /// [`ReceiverQ15Config::signal_dbfs`](crate::receiver_q15::ReceiverQ15Config)): `α²·N0`,
    /// `α² = N·10^(dBFS/10)/(data + A²·pilots)` (symbol 0). Errors
    /// ([`ConfigError::TrackerSetting`]) on a non-finite level or threshold, or a threshold
    /// that rounds outside `1 ..= 2^24`.
    pub fn from_f32(
        config: &DelaySpreadConfig,
        numerology: &Numerology,
        signal_dbfs: f32,
    ) -> Result<Self, ConfigError> {
        let t = f64::from(config.max_delay_threshold_db);
        if !(t.is_finite() && t > 0.0 && signal_dbfs.is_finite()) {
            return Err(ConfigError::TrackerSetting);
        }
        let thr = libm::round(libm::pow(10.0, -t / 10.0) * 16_777_216.0);
        if !(1.0..=16_777_216.0).contains(&thr) {
            return Err(ConfigError::TrackerSetting);
        }
        let noise = match config.noise {
            NoiseFloor::Known { noise_var } => {
                let a = f64::from(numerology.pilot_amplitude());
                let a2 = a * a;
                let per_symbol =
                    numerology.data_len(0) as f64 + a2 * numerology.pilot_len(0) as f64;
                if !(noise_var.is_finite() && noise_var >= 0.0 && per_symbol > 0.0) {
                    return Err(ConfigError::TrackerSetting);
                }
                let alpha2 = numerology.fft_len() as f64
                    * libm::pow(10.0, f64::from(signal_dbfs) / 10.0)
                    / per_symbol;
                NoiseFloorQ15::Known {
                    noise_per_bin: Scaled::from_f64(f64::from(noise_var) * alpha2),
                }
            }
            NoiseFloor::Measured {
                from_samples,
                to_samples,
            } => NoiseFloorQ15::Measured {
                from_samples,
                to_samples,
            },
        };
        Ok(Self {
            lead_samples: config.lead_samples,
            span_samples: config.span_samples,
            noise,
            max_delay_threshold_q24: thr as u32,
        })
    }
}

/// A delay-spread report in fixed point.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct DelaySpreadQ15 {
    /// Mean delay of the power delay profile from the start of the FFT window, samples ×
    /// 2^16 (Q16).
    pub mean_delay_q16: i32,
    /// RMS delay spread, samples × 2^16 (Q16; 0 when not resolved).
    pub rms_delay_q16: u32,
    /// Maximum significant delay, samples (as [`DelaySpread::max_delay_samples`]).
    pub max_delay_samples: i32,
    /// Mean channel power `E|Ĥ|²` in bin units (power of the unitary DFT of the gained input
    /// per unit pilot energy, Q15 fractions squared: `α²·Σ p_l` for a channel scale `α`).
    pub channel_power: Scaled,
    /// Noise floor per delay bin relative to the floor-subtracted profile's power, Q24
    /// (saturated at `u32::MAX`).
    pub floor_to_power_q24: u32,
    /// False when the measured variance is below the kernel's own (spread reported as 0).
    pub resolved: bool,
    /// Pilot bin parts at the Q15 limits (`−32768` or `32767`) in the averaged symbols: a
    /// nonzero count flags an FFT output that may have saturated.
    pub saturated_parts: u32,
    /// Symbols averaged.
    pub symbols: u32,
}

impl DelaySpreadQ15 {
    /// The report as the f32 [`DelaySpread`] (host convenience, floating point); its
    /// `channel_power` stays in bin units.
    pub fn to_f32(&self) -> DelaySpread {
        DelaySpread {
            mean_delay_samples: self.mean_delay_q16 as f32 / 65_536.0,
            rms_delay_samples: self.rms_delay_q16 as f32 / 65_536.0,
            max_delay_samples: self.max_delay_samples,
            channel_power: libm::ldexpf(
                self.channel_power.mant as f32,
                self.channel_power.exp - 15,
            ),
            floor_to_power: self.floor_to_power_q24 as f32 / 16_777_216.0,
            resolved: self.resolved,
            symbols: self.symbols,
        }
    }
}

/// The kernel's moments and the constants of a report.
#[derive(Clone, Copy, Debug, Default)]
struct KernelQ15 {
    /// Mean and variance of the kernel after the floor procedure, samples (²) × 2^32.
    mean_q32: i64,
    var_q32: i64,
    /// Delay beyond 0 within the threshold of the kernel's peak, samples.
    extent: i32,
    /// Channel power per unit of `m₀·2^(E_ref)/S` in the moment units (see `estimate`).
    power: Scaled,
    /// Known floor per symbol in moment units: `floor_mant · 2^(floor_exp − E_ref)`.
    floor_mant: u64,
    floor_exp: i32,
}

/// Streaming integer delay-spread estimator for FFT size `N` (Q15 FFT).
///
/// Memory: the FFT (one `N`-word scratch), a scratch of `N` [`Cq15`], the window (`N` × `u16`)
/// and the PDP sums (`N` × `u64`): `18·N` bytes plus a few words.
#[derive(Clone, Debug)]
pub struct DelaySpreadEstimatorQ15<const N: usize> {
    numerology: Numerology,
    config: DelaySpreadConfigQ15,
    fft: Q15Fft<N>,
    scratch: [Cq15; N],
    /// Hann weight per used bin, Q15.
    window: [u16; N],
    /// Σ |out|²·2^(E − E_ref) over symbols, by delay mod N.
    pdp: [u64; N],
    /// `E_ref`: the PDP sums are `pdp · 2^E_ref` (times `R⁴/A²`).
    pdp_exp: i32,
    /// No symbol placed since the last reset (the next one sets `E_ref`).
    fresh: bool,
    symbols: u32,
    saturated: u32,
    kernel: KernelQ15,
}

impl<const N: usize> DelaySpreadEstimatorQ15<N> {
    /// Builds the estimator and measures its kernel (integer, except the channel-power
    /// constant). Errors: FFT size not `N` ([`ConfigError::FftSizeMismatch`]); windows, noise
    /// region, threshold or known floor outside their documented ranges, or a moment window and
    /// noise region that do not fit the alias period `N/D` with `lead_samples` to spare
    /// ([`ConfigError::TrackerSetting`]).
    pub fn new(numerology: &Numerology, config: DelaySpreadConfigQ15) -> Result<Self, ConfigError> {
        crate::preamble::check_size::<N>(numerology)?;
        let alias = DelaySpreadConfig::alias_period_samples(numerology);
        let lead = config.lead_samples;
        let span = config.span_samples;
        let far = match config.noise {
            NoiseFloorQ15::Known { noise_per_bin: s } => {
                let mant_ok = s.mant == 0 || (16_384..32_768).contains(&s.mant);
                if !mant_ok || s.exp.unsigned_abs() > MAX_FLOOR_EXPONENT.unsigned_abs() {
                    return Err(ConfigError::TrackerSetting);
                }
                span
            }
            NoiseFloorQ15::Measured {
                from_samples,
                to_samples,
            } => {
                if from_samples < span || to_samples <= from_samples {
                    return Err(ConfigError::TrackerSetting);
                }
                to_samples
            }
        };
        let t = config.max_delay_threshold_q24;
        if span == 0 || far.saturating_add(lead) > alias || !(1..=1 << 24).contains(&t) {
            return Err(ConfigError::TrackerSetting);
        }
        let mut est = Self {
            numerology: *numerology,
            config,
            fft: Q15Fft::new(),
            scratch: [Cq15::ZERO; N],
            window: [0; N],
            pdp: [0; N],
            pdp_exp: 0,
            fresh: true,
            symbols: 0,
            saturated: 0,
            kernel: KernelQ15::default(),
        };
        est.build_window();
        est.measure_kernel()?;
        Ok(est)
    }

    /// The configuration.
    pub fn config(&self) -> &DelaySpreadConfigQ15 {
        &self.config
    }

    /// Forgets every symbol averaged so far.
    pub fn reset(&mut self) {
        self.pdp = [0; N];
        self.pdp_exp = 0;
        self.fresh = true;
        self.symbols = 0;
        self.saturated = 0;
    }

    /// Symbols averaged since the last reset.
    pub fn symbols(&self) -> u32 {
        self.symbols
    }

    /// The kernel's own RMS width σ_K, samples × 2^16.
    pub fn kernel_rms_q16(&self) -> u32 {
        u32::try_from(isqrt_u128(self.kernel.var_q32.max(0).unsigned_abs().into())).unwrap_or(0)
    }

    /// How far beyond its own delay a single path stays within the max-delay threshold of its
    /// peak, samples (the smear included in [`DelaySpreadQ15::max_delay_samples`]).
    pub fn kernel_extent_samples(&self) -> i32 {
        self.kernel.extent
    }

    /// Hann weights in Q15 from the integer sine table, as in the f32 estimator.
    fn build_window(&mut self) {
        let nu = self.numerology;
        let used = nu.used_len();
        let lo = i64::from(nu.logical_bin(0));
        let hi = i64::from(nu.logical_bin(used.saturating_sub(1)));
        let dc_null = nu.params().dc_null;
        for (u, w) in self.window.iter_mut().enumerate().take(used) {
            let k = i64::from(nu.logical_bin(u));
            let (num, den) = if !dc_null {
                (k - lo + 1, hi - lo + 2)
            } else if k < 0 {
                (k - lo + 1, 1 - lo)
            } else {
                (k, hi + 1)
            };
            // sin(πx) with x = num/den in (0, 1): phase x/2 of a turn, × 2^32.
            let phase = (num << 31).checked_div(den).unwrap_or(0);
            let (_, s) = cos_sin_q15(u32::try_from(phase).unwrap_or(0));
            let sq = (i64::from(s) * i64::from(s) + (1 << 14)) >> 15;
            *w = sq.clamp(0, 32_767) as u16;
        }
    }

    /// Delays of the moment window, `-lead .. span`, with their buffer indices.
    fn moment_delays(&self) -> impl Iterator<Item = (i64, usize)> {
        let lead = self.config.lead_samples as i64;
        let span = self.config.span_samples as i64;
        (-lead..span).map(|d| (d, d.rem_euclid(N as i64) as usize))
    }

    /// Delays of the noise region (empty for a known floor).
    fn noise_delays(&self) -> core::ops::Range<usize> {
        match self.config.noise {
            NoiseFloorQ15::Known { .. } => 0..0,
            NoiseFloorQ15::Measured {
                from_samples,
                to_samples,
            } => from_samples..to_samples,
        }
    }

    /// Adds `|scratch|²·2^(e_s − E_ref)` to the PDP sums of the tracked delays (see the
    /// module docs for the alignment).
    fn accumulate(&mut self, e_s: i32) {
        if self.fresh {
            self.pdp_exp = e_s.saturating_sub(GUARD_BITS);
            self.fresh = false;
        }
        let mut d = e_s.saturating_sub(self.pdp_exp);
        if d > GUARD_BITS {
            self.rescale(d - GUARD_BITS);
            d = GUARD_BITS;
        }
        let lead = self.config.lead_samples as i64;
        let span = self.config.span_samples as i64;
        let moments = (-lead..span).map(|d| d.rem_euclid(N as i64) as usize);
        let mut top = 0u64;
        for i in moments.chain(self.noise_delays()) {
            if let (Some(acc), Some(v)) = (self.pdp.get_mut(i), self.scratch.get(i)) {
                let (re, im) = (i64::from(v.re), i64::from(v.im));
                let p = (re * re + im * im).unsigned_abs();
                *acc = acc.saturating_add(shift_u64(p, d));
                top = top.max(*acc);
            }
        }
        if top >= ACC_LIMIT {
            self.rescale(1);
        }
    }

    /// Rounds every PDP sum down by `2^s` and raises `E_ref` by `s`.
    fn rescale(&mut self, s: i32) {
        let s_u = s.unsigned_abs();
        for a in self.pdp.iter_mut() {
            *a = shr_round_u128(u128::from(*a), s_u) as u64;
        }
        self.pdp_exp = self.pdp_exp.saturating_add(s);
    }

    /// `(M, F)` of the floor procedure: each delay contributes `P(n)·M − F`. `known`: whether
    /// a known floor applies (the kernel is measured without it).
    fn floor_terms(&self, known: bool) -> (i128, i128) {
        match self.config.noise {
            NoiseFloorQ15::Measured { .. } => {
                let r = self.noise_delays();
                let m = r.len() as i128;
                let f = r
                    .filter_map(|i| self.pdp.get(i))
                    .fold(0i128, |a, &v| a.saturating_add(i128::from(v)));
                (m, f)
            }
            NoiseFloorQ15::Known { .. } if known => {
                let base = u128::from(self.kernel.floor_mant) * u128::from(self.symbols);
                let s = self.kernel.floor_exp.saturating_sub(self.pdp_exp);
                (1 << KNOWN_FLOOR_BITS, shift_sat_u128(base, s))
            }
            NoiseFloorQ15::Known { .. } => (1, 0),
        }
    }

    /// `P(n)·M − F` at buffer index `i`.
    fn net(&self, i: usize, (m, f): (i128, i128)) -> i128 {
        let p = i128::from(self.pdp.get(i).copied().unwrap_or(0));
        p.saturating_mul(m).saturating_sub(f)
    }

    /// Moments `Σ d^j (P(n)·M − F)` over the moment window, `j = 0, 1, 2` (exact: each term
    /// below 2^100, at most N terms).
    fn moments(&self, terms: (i128, i128)) -> (i128, i128, i128) {
        self.moment_delays()
            .fold((0i128, 0i128, 0i128), |(m0, m1, m2), (d, i)| {
                let v = self.net(i, terms);
                let d = i128::from(d);
                (
                    m0.saturating_add(v),
                    m1.saturating_add(v.saturating_mul(d)),
                    m2.saturating_add(v.saturating_mul(d * d)),
                )
            })
    }

    /// Runs the floor-and-moments procedure on the window's kernel through the Q15 inverse
    /// FFT, averaged over the pilot pattern's phases; the PDP sums are cleared afterwards.
    fn measure_kernel(&mut self) -> Result<(), ConfigError> {
        let nu = self.numerology;
        let period = nu.pattern_period().max(1);
        let mut w2: u64 = 0;
        self.reset();
        for phase in 0..period {
            self.scratch.fill(Cq15::ZERO);
            for b in nu.bins(phase as u32).filter(|b| b.kind == BinKind::Pilot) {
                let w = self.window.get(b.used_index).copied().unwrap_or(0);
                if let Some(s) = self.scratch.get_mut(b.fft_index) {
                    *s = Cq15::new(w as i16, 0);
                }
                w2 = w2.saturating_add(u64::from(w) * u64::from(w));
            }
            // |K(n)|² = |out|²·2^(2e_i − 30)·R².
            let e_i = self.fft.inverse(&mut self.scratch);
            self.accumulate(2 * e_i - 30);
        }
        let terms = self.floor_terms(false);
        let (m0, m1, m2) = self.moments(terms);
        let r = ratios(m0, m1, m2).ok_or(ConfigError::TrackerSetting)?;
        let var = r.second_q32 - shr_round_i128(r.mean_q32.saturating_mul(r.mean_q32), 32);
        let level = shr_round_i128(
            self.net(0, (terms.0, 0))
                .saturating_mul(i128::from(self.config.max_delay_threshold_q24)),
            24,
        );
        let extent = self
            .moment_delays()
            .filter(|&(d, i)| d >= 0 && self.net(i, terms) >= level)
            .map(|(d, _)| d)
            .max()
            .unwrap_or(0);
        // Channel power (see `estimate`): m₀ᵈ·2^(E_ref)·R⁴/(A²·Mᵈ·S) over the kernel's
        // m₀ᴷ·2^(E_K)·R²/(Mᴷ·period), so the constant is R²·Mᴷ·period/(A²·Mᵈ·m₀ᴷ)·2^(−E_K).
        let odd = (Q15Fft::<N>::LOG2_N % 2) as i32;
        let a = f64::from(nu.pilot_amplitude());
        let m_data = match self.config.noise {
            NoiseFloorQ15::Known { .. } => f64::from(1u32 << KNOWN_FLOOR_BITS),
            NoiseFloorQ15::Measured { .. } => terms.0 as f64,
        };
        let c = libm::ldexp(terms.0 as f64 * period as f64, -odd) / (a * a * m_data * m0 as f64);
        let mut power = Scaled::from_f64(c);
        power.exp = power.exp.saturating_sub(self.pdp_exp);
        // Known floor per symbol in data moment units (module docs): mant·W2/period ·
        // 2^(exp − 45 − log2 N + 2·odd + 8 − E_ref).
        let (floor_mant, floor_exp) = match self.config.noise {
            NoiseFloorQ15::Known { noise_per_bin: s } => {
                let fw = (u128::from(s.mant.unsigned_abs()) * u128::from(w2))
                    .checked_div(period as u128)
                    .unwrap_or(0);
                (
                    u64::try_from(fw).unwrap_or(u64::MAX),
                    s.exp - 45 - Q15Fft::<N>::LOG2_N as i32 + 2 * odd + KNOWN_FLOOR_BITS,
                )
            }
            NoiseFloorQ15::Measured { .. } => (0, 0),
        };
        self.kernel = KernelQ15 {
            mean_q32: i64::try_from(r.mean_q32).map_err(|_| ConfigError::TrackerSetting)?,
            var_q32: i64::try_from(var).map_err(|_| ConfigError::TrackerSetting)?,
            extent: i32::try_from(extent).unwrap_or(0),
            power,
            floor_mant,
            floor_exp,
        };
        self.reset();
        Ok(())
    }

    /// Adds symbol `symbol`: its FFT output `bins` (natural order) with block `exponent`
    /// (unitary DFT = `bins·2^exponent·R`, as
    /// [`ReceiverQ15::bins_with_exponent`](crate::receiver_q15::ReceiverQ15::bins_with_exponent)
    /// gives). Errors when `|exponent| >` [`MAX_BLOCK_EXPONENT`]
    /// ([`ProcessError::OutOfRange`] with index 1, the exponent argument); nothing is
    /// accumulated then. No floating point.
    pub fn update(
        &mut self,
        bins: &[Cq15; N],
        exponent: i32,
        symbol: u32,
    ) -> Result<(), ProcessError> {
        if exponent.unsigned_abs() > MAX_BLOCK_EXPONENT.unsigned_abs() {
            return Err(ProcessError::OutOfRange { index: 1 });
        }
        let nu = self.numerology;
        let window = &self.window;
        let product = |b: &crate::numerology::Bin| {
            let y = bins.get(b.fft_index).copied().unwrap_or_default();
            let w = i32::from(window.get(b.used_index).copied().unwrap_or(0));
            (i32::from(y.re) * w, i32::from(y.im) * w, y)
        };
        // Pass 1: bit length of the largest |y·w| part; parts at the Q15 limits.
        let (mut bits, mut sat) = (0u32, 0u32);
        for b in nu.bins(symbol).filter(|b| b.kind == BinKind::Pilot) {
            let (pr, pi, y) = product(&b);
            bits |= pr.unsigned_abs() | pi.unsigned_abs();
            for v in [y.re, y.im] {
                sat += u32::from(v == i16::MIN || v == i16::MAX);
            }
        }
        // |y·w| < 2^bits; after the shift below 2^14 (rounding cannot reach 2^15).
        let shift = (32 - bits.leading_zeros()).saturating_sub(14) as i32;
        // Pass 2: LS (sign of the BPSK pilot), windowed, at its own bin.
        self.scratch.fill(Cq15::ZERO);
        let mut prbs = Prbs15::for_symbol(nu.params().pilots.seed, symbol);
        for b in nu.bins(symbol).filter(|b| b.kind == BinKind::Pilot) {
            let neg = prbs.next_bit() != 0;
            let (pr, pi, _) = product(&b);
            let (mut re, mut im) = (
                shift_round(i64::from(pr), shift),
                shift_round(i64::from(pi), shift),
            );
            if neg {
                (re, im) = (-re, -im);
            }
            if let Some(s) = self.scratch.get_mut(b.fft_index) {
                *s = Cq15::new(
                    re.clamp(-32_767, 32_767) as i16,
                    im.clamp(-32_767, 32_767) as i16,
                );
            }
        }
        let e_i = self.fft.inverse(&mut self.scratch);
        // |g(n)|² = |out|²·2^(2(e_i + s + e − 15) − 30)·R⁴/A² (module docs).
        self.accumulate(2 * (e_i + shift + exponent - 15) - 30);
        self.symbols = self.symbols.saturating_add(1);
        self.saturated = self.saturated.saturating_add(sat);
        Ok(())
    }

    /// The estimate from every symbol since the last reset; `None` before the first symbol,
    /// when no power stands above the noise floor, or when a moment falls outside the
    /// representable range (a spread beyond 2^12 samples). No floating point; one `i128`
    /// division.
    pub fn estimate(&self) -> Option<DelaySpreadQ15> {
        if self.symbols == 0 {
            return None;
        }
        let terms = self.floor_terms(true);
        let (m0, m1, m2) = self.moments(terms);
        let r = ratios(m0, m1, m2)?;
        let var = r.second_q32
            - shr_round_i128(r.mean_q32.saturating_mul(r.mean_q32), 32)
            - i128::from(self.kernel.var_q32);
        let resolved = var > 0;
        let mean_q16 = i32::try_from(shr_round_i128(
            r.mean_q32 - i128::from(self.kernel.mean_q32),
            16,
        ))
        .ok()?;
        let rms_q16 = if resolved {
            u32::try_from(isqrt_u128(var.unsigned_abs())).ok()?
        } else {
            0
        };
        // Maximum significant delay: within the threshold of the peak and 4σ above the
        // averaged noise (f/√S, in sums: F·4/√S).
        let peak = self
            .moment_delays()
            .map(|(_, i)| self.net(i, terms))
            .fold(0i128, i128::max);
        let by_peak = shr_round_i128(
            peak.saturating_mul(i128::from(self.config.max_delay_threshold_q24)),
            24,
        );
        let by_noise = match inv_sqrt(u64::from(self.symbols)) {
            Some((g, s)) => shr_round_i128(
                terms.1.saturating_mul(i128::from(g) * 4),
                (30 - s).unsigned_abs(),
            ),
            None => 0,
        };
        let level = by_peak.max(by_noise);
        let last = self
            .moment_delays()
            .filter(|&(_, i)| self.net(i, terms) >= level)
            .map(|(d, _)| d)
            .max()
            .unwrap_or(0);
        // Channel power: m₀ (normalised: m0n·2^shift) · 2^E_ref · constant / S.
        let (rs, ss) = reciprocal(self.symbols)?;
        let top = (128 - r.m0n.leading_zeros()).saturating_sub(32);
        let m0t = (r.m0n >> top).unsigned_abs();
        let prod =
            m0t * u128::from(self.kernel.power.mant.unsigned_abs()) * rs.unsigned_abs() as u128;
        let e2 = r.shift as i32 + top as i32 + self.pdp_exp + self.kernel.power.exp - 15 + ss - 30;
        let channel_power = scaled_of(prod, e2);
        // Floor over the moment power, Q24: (F >> shift)·recip >> 76.
        let f = terms.1 >> r.shift;
        let floor_to_power_q24 = f
            .checked_mul(r.recip)
            .map(|v| shr_round_i128(v, 76))
            .and_then(|v| u32::try_from(v.max(0)).ok())
            .unwrap_or(u32::MAX);
        Some(DelaySpreadQ15 {
            mean_delay_q16: mean_q16,
            rms_delay_q16: rms_q16,
            max_delay_samples: i32::try_from(last).unwrap_or(0),
            channel_power,
            floor_to_power_q24,
            resolved,
            saturated_parts: self.saturated,
            symbols: self.symbols,
        })
    }
}

/// Normalised moments and their ratios.
struct Ratios {
    /// `m₁/m₀` and `m₂/m₀`, × 2^32.
    mean_q32: i128,
    second_q32: i128,
    /// `m₀ >> shift` (positive, below 2^62) and `2^100 / m0n`.
    m0n: i128,
    shift: u32,
    recip: i128,
}

/// `m₁/m₀` and `m₂/m₀` in Q32 with one division: the three moments are shifted so the largest
/// is below 2^62, then `2^100/m₀` multiplies the other two. `None` when `m₀ ≤ 0` or a ratio
/// exceeds the `i128` range (a mean beyond 2^26 or a second moment beyond 2^26 samples²).
fn ratios(m0: i128, m1: i128, m2: i128) -> Option<Ratios> {
    let big = m0
        .unsigned_abs()
        .max(m1.unsigned_abs())
        .max(m2.unsigned_abs());
    let shift = (128 - big.leading_zeros()).saturating_sub(62);
    let (m0n, m1n, m2n) = (m0 >> shift, m1 >> shift, m2 >> shift);
    if m0n <= 0 {
        return None;
    }
    let recip = (1i128 << 100).checked_div(m0n)?;
    Some(Ratios {
        mean_q32: shr_round_i128(m1n.checked_mul(recip)?, 68),
        second_q32: shr_round_i128(m2n.checked_mul(recip)?, 68),
        m0n,
        shift,
        recip,
    })
}

/// `v · 2^s` (left shifts saturate at `u64::MAX`; right shifts round to nearest).
fn shift_u64(v: u64, s: i32) -> u64 {
    if s >= 0 {
        let s = s.unsigned_abs();
        v.checked_shl(s)
            .filter(|r| r.checked_shr(s) == Some(v))
            .unwrap_or(u64::MAX)
    } else {
        shr_round_u128(u128::from(v), s.unsigned_abs()) as u64
    }
}

/// `v · 2^s` as `i128`: left shifts saturate at 2^120, right shifts round to nearest.
fn shift_sat_u128(v: u128, s: i32) -> i128 {
    const CAP: u128 = 1 << 120;
    let r = if s >= 0 {
        let s = s.unsigned_abs();
        if s >= 120 || (v != 0 && v.leading_zeros() <= s + 8) {
            if v == 0 {
                0
            } else {
                CAP
            }
        } else {
            v << s
        }
    } else {
        shr_round_u128(v, s.unsigned_abs())
    };
    r.min(CAP) as i128
}

/// `v / 2^s` rounded to nearest (ties up).
pub(crate) fn shr_round_u128(v: u128, s: u32) -> u128 {
    match s {
        0 => v,
        1..=127 => (v >> s) + ((v >> (s - 1)) & 1),
        128 => v >> 127,
        _ => 0,
    }
}

/// `v / 2^s` rounded to nearest, ties away from zero.
pub(crate) fn shr_round_i128(v: i128, s: u32) -> i128 {
    let m = shr_round_u128(v.unsigned_abs(), s) as i128;
    if v < 0 {
        -m
    } else {
        m
    }
}

/// `floor(sqrt(v))` by the bit-by-bit method (exact; at most 64 steps).
pub(crate) fn isqrt_u128(v: u128) -> u64 {
    let mut rem = v;
    let mut root: u128 = 0;
    let mut bit: u128 = 1 << 126;
    while bit > v {
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
    root as u64
}

/// The [`Scaled`] nearest `v·2^e2` (zero for `v = 0`).
pub(crate) fn scaled_of(v: u128, e2: i32) -> Scaled {
    if v == 0 {
        return Scaled { mant: 0, exp: 0 };
    }
    let bits = 128 - v.leading_zeros() as i32;
    // mant·2^(exp − 15) = v·2^e2 with mant = v·2^(15 − bits) in [2^14, 2^15).
    let mut mant = if bits > 15 {
        shr_round_u128(v, (bits - 15).unsigned_abs())
    } else {
        v << (15 - bits).unsigned_abs()
    };
    let mut exp = e2.saturating_add(bits);
    if mant >= 1 << 15 {
        mant >>= 1;
        exp = exp.saturating_add(1);
    }
    Scaled {
        mant: mant as i32,
        exp,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::numerology::{NumerologyParams, PilotParams};

    fn nu256() -> Numerology {
        Numerology::new(NumerologyParams {
            fft_len: 256,
            cp_len: 32,
            sample_rate_hz: 1.0e6,
            guard_low_bins: 12,
            guard_high_bins: 11,
            dc_null: true,
            pilots: PilotParams::default(),
        })
        .unwrap()
    }

    #[test]
    fn integer_helpers_match_f64() {
        // Against f64 sqrt (IEEE 754, correctly rounded) and the definitions.
        for v in [
            0u128,
            1,
            2,
            3,
            4,
            99,
            1 << 40,
            (1 << 64) - 1,
            12_345_678_901_234_567,
        ] {
            let r = u128::from(isqrt_u128(v));
            assert!(r * r <= v && (r + 1) * (r + 1) > v, "{v}");
        }
        assert_eq!(shr_round_u128(5, 1), 3);
        assert_eq!(shr_round_i128(-5, 1), -3);
        assert_eq!(shr_round_u128(u128::MAX, 128), 1);
        for (v, e) in [(1u128, 0), (3, -2), (1 << 100, -90), (0x7fff_ffff, 4)] {
            let s = scaled_of(v, e);
            let want = v as f64 * 2f64.powi(e);
            let got = f64::from(s.mant) * 2f64.powi(s.exp - 15);
            assert!((got / want - 1.0).abs() < 4e-5, "{v} {e}: {got} {want}");
            assert!((16_384..32_768).contains(&s.mant));
        }
        assert_eq!(shift_u64(3, 2), 12);
        assert_eq!(shift_u64(u64::MAX, 1), u64::MAX);
        assert_eq!(shift_u64(6, -2), 2);
    }

    #[test]
    fn window_is_the_hann_of_the_f32_estimator() {
        // sin²(πx) on each half band (f32 estimator's definition), within 2 LSB of Q15.
        let nu = nu256();
        let cfg = DelaySpreadConfigQ15::measured(&nu).unwrap();
        let est = DelaySpreadEstimatorQ15::<256>::new(&nu, cfg).unwrap();
        let lo = nu.logical_bin(0);
        let hi = nu.logical_bin(nu.used_len() - 1);
        for u in 0..nu.used_len() {
            let k = nu.logical_bin(u);
            let x = if k < 0 {
                f64::from(k - lo + 1) / f64::from(1 - lo)
            } else {
                f64::from(k) / f64::from(hi + 1)
            };
            let want = (core::f64::consts::PI * x).sin().powi(2) * 32768.0;
            assert!((f64::from(est.window[u]) - want).abs() <= 2.0, "{u}");
        }
    }

    /// Pilot bins of a single tap at delay `d` (DFT shift theorem), amplitude 8000 (Q15).
    fn single_tap(nu: &Numerology, s: u32, d: f64) -> [Cq15; 256] {
        let mut bins = [Cq15::ZERO; 256];
        let mut prbs = Prbs15::for_symbol(nu.params().pilots.seed, s);
        for b in nu.bins(s).filter(|b| b.kind == BinKind::Pilot) {
            let x = if prbs.next_bit() == 0 { 1.0 } else { -1.0 };
            let k = f64::from(nu.logical_bin(b.used_index));
            let ph = -2.0 * core::f64::consts::PI * k * d / 256.0;
            bins[b.fft_index] = Cq15::new(
                (8000.0 * x * ph.cos()).round() as i16,
                (8000.0 * x * ph.sin()).round() as i16,
            );
        }
        bins
    }

    #[test]
    fn single_tap_gives_its_delay() {
        // One tap at delay 5, no noise, floor given as 0: mean 5, spread 0 (definitions), as
        // the f32 estimator's unit test; |H|² = (8000/32768)²·2^6 (exponent 3, R = 1, A = 1).
        let nu = nu256();
        let cfg = DelaySpreadConfigQ15::known(&nu, Scaled::default());
        let mut est = DelaySpreadEstimatorQ15::<256>::new(&nu, cfg).unwrap();
        for s in 0..4u32 {
            est.update(&single_tap(&nu, s, 5.0), 3, s).unwrap();
        }
        let r = est.estimate().unwrap();
        let mean = f64::from(r.mean_delay_q16) / 65536.0;
        assert!((mean - 5.0).abs() < 1e-3, "{r:?}");
        assert!(f64::from(r.rms_delay_q16) / 65536.0 < 0.05, "{r:?}");
        assert_eq!(r.max_delay_samples, 5 + est.kernel_extent_samples());
        let p = f64::from(r.channel_power.mant) * 2f64.powi(r.channel_power.exp - 15);
        let want = (8000.0f64 / 32768.0).powi(2) * 64.0;
        assert!((p / want - 1.0).abs() < 1e-3, "{p} vs {want}");
    }

    #[test]
    fn measured_floor_follows_the_f32_estimator() {
        // With the floor measured, the procedure itself leaves a small variance for a single
        // tap (the kernel's alias tail reaches the noise region, differently for the kernel
        // and for a delayed tap): the f32 estimator reads 0.083 sample here. The Q15 estimator
        // must read the same within the effect of a white floor 80 dB below full scale
        // relative to a peak ≥ 2^13 (1.6e-7 per delay bin), times Σ (n − 5)² over the window
        // (14 504), for the data and for the kernel: |Δτ²| ≤ 4.7e-3 samples².
        let nu = nu256();
        let cfg = DelaySpreadConfigQ15::measured(&nu).unwrap();
        let mut est = DelaySpreadEstimatorQ15::<256>::new(&nu, cfg).unwrap();
        let fcfg = DelaySpreadConfig::measured(&nu).unwrap();
        let mut f = crate::delay_spread::DelaySpreadEstimator::new(
            &nu,
            fcfg,
            crate::fft::MicroFft::<256>::new(),
        )
        .unwrap();
        for s in 0..4u32 {
            let bins = single_tap(&nu, s, 5.0);
            est.update(&bins, 0, s).unwrap();
            let fb: [crate::Cf32; 256] = core::array::from_fn(|i| bins[i].to_cf32());
            f.update(&fb, s).unwrap();
        }
        let (r, rf) = (est.estimate().unwrap(), f.estimate().unwrap());
        let tau = f64::from(r.rms_delay_q16) / 65536.0;
        let tau_f = f64::from(rf.rms_delay_samples);
        assert!((tau * tau - tau_f * tau_f).abs() <= 4.7e-3, "{r:?} {rf:?}");
        let mean = f64::from(r.mean_delay_q16) / 65536.0;
        assert!((mean - f64::from(rf.mean_delay_samples)).abs() < 1e-3);
        assert_eq!(r.max_delay_samples, rf.max_delay_samples);
    }
}
