//! The Q15 receiver: the f32 receiver's structure ([`crate::receiver`]) in fixed point, for
//! the firmware path. One symbol of Q15 samples in; equalized symbols (Q3.12), per-bin SINR
//! weights and i8 LLRs out, into caller buffers, with no floating point per symbol.
//!
//! ## Design and processing
//!
//! [`DesignQ15`] holds every coefficient as integers: the lattice and frequency taps, the time
//! weights and one LLR weight factor per bin, quantised from the f32 design
//! ([`crate::estimate::ChannelEstimator`], f64 Cholesky). It is built on a host (or an MCU with
//! an FPU) and can be copied into firmware as a table, so a Cortex-M0 build links no
//! floating point at all.
//!
//! ## Q-formats at every interface
//!
//! | value | format |
//! |---|---|
//! | input samples | `Cq15`, fractions of ADC full scale |
//! | digital gain | [`DigitalGain`]: Q15 mantissa × 2^shift, rounded and saturated to Q15 |
//! | FFT output | `Cq15` with block exponent `e` (unitary DFT = out · 2^e · R, [`crate::fft`]) |
//! | LS values, time and frequency estimates | `Cq15` with a block exponent per symbol |
//! | filter weights (time and frequency) | Q2.13 (`i16`, ±4) |
//! | products and sums | `i32` products, `i64` sums, one rounding per stage |
//! | equalized symbols | Q3.12 (`i16` pairs, value × 4096, ±8) |
//! | LLRs | `i8`, `round(4·L)` saturated to ±127 (as [`crate::demap::llr_to_i8`] with scale 4) |
//!
//! The equalizer divides by `|Ĥ|²` through [`reciprocal`] (normalise, linear seed, three
//! Newton steps), once per data bin; the common phase through [`inv_sqrt`], once per symbol.
//! LLRs are the exact max-log form of the f32 demapper, `L = w·a²·(l_n − l_o)(2u − l_n − l_o)`
//! per bit with `u = x/a`, evaluated in integers.
//!
//! ## Scale
//!
//! The receiver must know the channel's scale to weigh LLRs by SINR: it assumes the digital
//! gain puts the FFT input at `signal_dbfs` (total complex power against a full-scale complex
//! sinusoid), so unit-energy symbols through a unit-power channel arrive with per-bin power
//! `α² = N·10^(signal_dbfs/10) / (data + A²·pilots)`. `noise_var` is N0 relative to that
//! (Es/N0 = 1/N0), as in the f32 receiver. Setting the gain from the preamble is a later stage.

use crate::demap::I8_LSB_PER_LLR;
use crate::equalize::Equalizer;
use crate::error::{ConfigError, ProcessError};
use crate::estimate::{ChannelEstimator, EstimatorConfig, TimeFilter, MAX_PATTERN_PERIOD};
use crate::fft::OfdmFft;
use crate::fixed::{sat16, Cq15};
use crate::fixed_math::{inv_sqrt, reciprocal, sat16_64, shift_round, Scaled};
use crate::modulation::Modulation;
use crate::noise_track_q15::POWER_FRAC_BITS;
use crate::numerology::{BinKind, Numerology};
use crate::pilots::Prbs15;
use crate::Cf32;

/// Fractional bits of the filter weights (Q2.13).
pub const WEIGHT_FRAC_BITS: i32 = 13;
/// Fractional bits of the equalized symbols (Q3.12).
pub const SYMBOL_FRAC_BITS: i32 = 12;

const NOT_LATTICE: u16 = u16::MAX;

/// A digital gain `mant · 2^(shift − 15)`, applied to Q15 samples with rounding and saturation.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct DigitalGain {
    /// Q15 mantissa, `[2^14, 2^15)` (or 0).
    pub mant: i32,
    /// Binary exponent.
    pub shift: i32,
}

impl DigitalGain {
    /// Unity gain.
    pub const UNITY: Self = Self {
        mant: 16384,
        shift: 1,
    };

    /// The gain of `db` decibels (amplitude `10^(db/20)`); configuration time only.
    pub fn from_db(db: f32) -> Self {
        let s = Scaled::from_f64(libm::pow(10.0, f64::from(db) / 20.0));
        Self {
            mant: s.mant,
            shift: s.exp,
        }
    }

    /// Applies the gain to `x` into `out` (same length); returns how many I or Q components
    /// saturated.
    pub fn apply(&self, x: &[Cq15], out: &mut [Cq15]) -> usize {
        // Fast paths in 32 bits (the same rounding and saturation as the general form below,
        // which they must equal bit for bit): |v·mant| ≤ 2^30 for a mantissa in [0, 2^15].
        let s = 15i32.saturating_sub(self.shift);
        if (0..=1 << 15).contains(&self.mant) {
            if (1..=30).contains(&s) {
                return self.apply_shift_right(x, out, s as u32);
            }
            if (-15..=0).contains(&s) {
                return self.apply_shift_left(x, out, (-s) as u32);
            }
        }
        let mut clipped = 0usize;
        let mut one = |v: i16| -> i16 {
            let p = shift_round(i64::from(v) * i64::from(self.mant), 15 - self.shift);
            let s = sat16_64(p);
            clipped += usize::from(i64::from(s) != p);
            s
        };
        for (o, v) in out.iter_mut().zip(x) {
            *o = Cq15::new(one(v.re), one(v.im));
        }
        clipped
    }

    /// `round(v·mant·2^−s)` (half away from zero), saturated, for `s` in `1..=30` and a
    /// mantissa in `[0, 2^15]`: the magnitude `|v·mant| + 2^(s−1)` stays below 2^31.
    fn apply_shift_right(&self, x: &[Cq15], out: &mut [Cq15], s: u32) -> usize {
        let mant = self.mant as u32;
        let half = 1u32 << (s - 1);
        let mut clipped = 0usize;
        let mut one = |v: i16| -> i16 {
            let mag = (u32::from(v.unsigned_abs()) * mant + half) >> s;
            let r = if v < 0 { -(mag as i32) } else { mag as i32 };
            let c = r.clamp(i32::from(i16::MIN), i32::from(i16::MAX));
            clipped += usize::from(c != r);
            c as i16
        };
        for (o, v) in out.iter_mut().zip(x) {
            *o = Cq15::new(one(v.re), one(v.im));
        }
        clipped
    }

    /// `v·mant·2^l`, saturated, for `l` in `0..=15` and a mantissa in `[0, 2^15]`: saturation
    /// is decided on `v·mant` (≤ 2^30 in magnitude) against `±2^15 >> l` before shifting.
    fn apply_shift_left(&self, x: &[Cq15], out: &mut [Cq15], l: u32) -> usize {
        let mant = self.mant;
        let hi = i32::from(i16::MAX) >> l;
        let lo = i32::from(i16::MIN) >> l; // exact: −2^15 is a power of two
        let mut clipped = 0usize;
        let mut one = |v: i16| -> i16 {
            let p = i32::from(v) * mant;
            if p > hi {
                clipped += 1;
                i16::MAX
            } else if p < lo {
                clipped += 1;
                i16::MIN
            } else {
                (p << l) as i16
            }
        };
        for (o, v) in out.iter_mut().zip(x) {
            *o = Cq15::new(one(v.re), one(v.im));
        }
        clipped
    }
}

/// Converts f32 samples (fractions of full scale) to Q15. Errors on the first NaN or infinite
/// component (its sample index), writing nothing; otherwise returns how many components
/// clipped at full scale.
pub fn samples_to_q15(x: &[Cf32], out: &mut [Cq15]) -> Result<usize, ProcessError> {
    if out.len() < x.len() {
        return Err(ProcessError::BufferLength {
            expected: x.len(),
            actual: out.len(),
        });
    }
    if let Some(index) = x
        .iter()
        .position(|v| !(v.re.is_finite() && v.im.is_finite()))
    {
        return Err(ProcessError::NonFinite { index });
    }
    let mut clipped = 0;
    for (o, v) in out.iter_mut().zip(x) {
        for c in [v.re, v.im] {
            clipped += usize::from(!(-1.0..32767.0 / 32768.0).contains(&c));
        }
        *o = Cq15::from_cf32(*v);
    }
    Ok(clipped)
}

/// Receiver settings of the Q15 path.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct ReceiverQ15Config {
    /// Estimator design (as for f32; `noise_var` relative to unit channel power).
    pub estimator: EstimatorConfig,
    /// Equalizer kind (one tap: both give the same unbiased symbol; see [`crate::equalize`]).
    pub equalizer: Equalizer,
    /// Correct the common phase error from the pilots.
    pub cpe: bool,
    /// Level of the FFT input after the digital gain, dBFS (the channel scale assumed).
    pub signal_dbfs: f32,
}

impl Default for ReceiverQ15Config {
    /// The f32 defaults, FFT input at −12 dBFS.
    fn default() -> Self {
        Self {
            estimator: EstimatorConfig::default(),
            equalizer: Equalizer::Mmse,
            cpe: true,
            signal_dbfs: -12.0,
        }
    }
}

/// Every coefficient of the Q15 receiver, as integers.
#[derive(Clone, Debug)]
pub struct DesignQ15<const N: usize, const K: usize, const M: usize> {
    /// Used index of each lattice bin.
    pub lattice: [u16; N],
    /// Number of lattice bins.
    pub lattice_len: usize,
    /// Lattice index of each used bin (`u16::MAX`: none).
    pub lattice_of: [u16; N],
    /// Lattice bins observed in every symbol.
    pub every_symbol: [bool; N],
    /// Frequency taps per used bin, Q2.13 `(re, im)`.
    pub taps: [[(i16, i16); K]; N],
    /// Lattice index of each used bin's first tap.
    pub first_tap: [u16; N],
    /// Time weights `[class][age][fill − 1][i]`, Q2.13.
    pub time_weights: [[[[i16; M]; M]; MAX_PATTERN_PERIOD]; 2],
    /// Time stage.
    pub time: TimeFilter,
    /// Forgetting factor λ, Q15 (forgetting only).
    pub lambda_q15: i16,
    /// Pilot reciprocal `1/A` as mantissa and exponent.
    pub inv_pilot: Scaled,
    /// Per used bin: `R²/(α²·(N0 + mse_u))`, the LLR weight per unit of `|Ĥ|²` read in FFT
    /// output units (R the FFT's residual scale).
    pub weight: [Scaled; N],
    /// CPE correction on.
    pub cpe: bool,
}

impl<const N: usize, const K: usize, const M: usize> DesignQ15<N, K, M> {
    /// Quantises the f32 design of `config` for `numerology` and an FFT of residual scale
    /// `residual_scale`. Floating point: host or FPU only.
    pub fn new(
        numerology: &Numerology,
        config: &ReceiverQ15Config,
        residual_scale: f32,
    ) -> Result<Self, ConfigError> {
        let est = ChannelEstimator::<N, K, M>::new(numerology, config.estimator)?;
        let q = |v: f32| {
            sat16((v * (1 << WEIGHT_FRAC_BITS) as f32 + if v >= 0.0 { 0.5 } else { -0.5 }) as i32)
        };
        let mut d = Self {
            lattice: [0; N],
            lattice_len: est.lattice_len(),
            lattice_of: [NOT_LATTICE; N],
            every_symbol: [false; N],
            taps: [[(0, 0); K]; N],
            first_tap: [0; N],
            time_weights: [[[[0; M]; M]; MAX_PATTERN_PERIOD]; 2],
            time: config.estimator.time,
            lambda_q15: match config.estimator.time {
                TimeFilter::Forgetting { lambda } => sat16((lambda * 32768.0 + 0.5) as i32),
                _ => 0,
            },
            inv_pilot: Scaled::from_f64(1.0 / f64::from(numerology.pilot_amplitude())),
            weight: [Scaled::default(); N],
            cpe: config.cpe,
        };
        let period = numerology.pattern_period().max(1);
        for j in 0..d.lattice_len {
            let u = est.lattice_bin(j).unwrap_or(0);
            if let (Some(l), Some(of), Some(e)) = (
                d.lattice.get_mut(j),
                d.lattice_of.get_mut(u),
                d.every_symbol.get_mut(j),
            ) {
                *l = u as u16;
                *of = j as u16;
                *e = (0..period).all(|s| numerology.is_pilot(u, s as u32));
            }
        }
        for u in 0..numerology.used_len() {
            if let (Some((first, w)), Some(t), Some(f)) =
                (est.freq_taps(u), d.taps.get_mut(u), d.first_tap.get_mut(u))
            {
                *f = first as u16;
                for (ti, wi) in t.iter_mut().zip(w.iter()) {
                    *ti = (q(wi.re), q(wi.im));
                }
            }
        }
        for (class, every) in [(0usize, true), (1, false)] {
            for age in 0..MAX_PATTERN_PERIOD {
                for fill in 1..=M {
                    if let (Some(w), Some(slot)) = (
                        est.time_weights(every, fill, age),
                        d.time_weights
                            .get_mut(class)
                            .and_then(|c| c.get_mut(age))
                            .and_then(|a| a.get_mut(fill - 1)),
                    ) {
                        for (s, v) in slot.iter_mut().zip(w.iter()) {
                            *s = q(*v);
                        }
                    }
                }
            }
        }
        // Channel scale α² of unit-energy symbols at the FFT input level.
        let a2 = f64::from(numerology.pilot_amplitude()) * f64::from(numerology.pilot_amplitude());
        let p = libm::pow(10.0, f64::from(config.signal_dbfs) / 10.0);
        let energy = numerology.data_len(0) as f64 + a2 * numerology.pilot_len(0) as f64;
        let alpha2 = numerology.fft_len() as f64 * p / energy;
        let r2 = f64::from(residual_scale) * f64::from(residual_scale);
        let n0 = f64::from(config.estimator.noise_var);
        for (w, m) in d.weight.iter_mut().zip(est.mse().iter()) {
            *w = Scaled::from_f64(r2 / (alpha2 * (n0 + f64::from(*m))));
        }
        Ok(d)
    }
}

/// The Q15 one-symbol receiver. `F` is a Q15 FFT ([`crate::fft_q15::Q15Fft`]).
#[derive(Clone, Debug)]
pub struct ReceiverQ15<F, const N: usize, const K: usize, const M: usize> {
    numerology: Numerology,
    fft: F,
    design: DesignQ15<N, K, M>,
    gain: DigitalGain,
    /// Timing correction: the window started this many samples late (Q16), undone per bin.
    timing_q16: i32,
    bins: [Cq15; N],
    /// Block exponent of `bins`.
    bins_exp: i32,
    /// LS history per lattice bin (newest at `head`) and the block exponent of each entry.
    history: [[Cq15; M]; N],
    history_exp: [[i8; M]; N],
    head: [u8; N],
    fill: [u8; N],
    last_seen: [u32; N],
    /// Time-stage output per lattice bin and its common exponent.
    lattice_est: [Cq15; N],
    lattice_exp: i32,
    /// Forgetting state per lattice bin and exponent.
    forget: [Cq15; N],
    forget_exp: [i8; N],
    /// Channel estimate per used bin and its exponent.
    estimate: [Cq15; N],
    estimate_exp: i32,
    /// Components clipped by the digital gain in the latest symbol.
    clipped: usize,
    /// Common phase applied to the latest symbol's estimate (`None`: none).
    rot: Option<Cq15>,
}

/// What [`ReceiverQ15::receive`] wrote.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct SymbolCountsQ15 {
    /// Data bins written (symbols and weights).
    pub data_bins: usize,
    /// LLRs written.
    pub llrs: usize,
    /// I/Q components the digital gain clipped.
    pub clipped: usize,
}

impl<F: OfdmFft<N, Sample = Cq15>, const N: usize, const K: usize, const M: usize>
    ReceiverQ15<F, N, K, M>
{
    /// A receiver from a design (no floating point).
    pub fn new(
        numerology: &Numerology,
        fft: F,
        design: DesignQ15<N, K, M>,
    ) -> Result<Self, ConfigError> {
        if numerology.fft_len() != N {
            return Err(ConfigError::FftSizeMismatch {
                numerology: numerology.fft_len(),
                stage: N,
            });
        }
        Ok(Self {
            numerology: *numerology,
            fft,
            design,
            gain: DigitalGain::UNITY,
            timing_q16: 0,
            bins: [Cq15::ZERO; N],
            bins_exp: 0,
            history: [[Cq15::ZERO; M]; N],
            history_exp: [[0; M]; N],
            head: [0; N],
            fill: [0; N],
            last_seen: [0; N],
            lattice_est: [Cq15::ZERO; N],
            lattice_exp: 0,
            forget: [Cq15::ZERO; N],
            forget_exp: [0; N],
            estimate: [Cq15::ZERO; N],
            estimate_exp: 0,
            clipped: 0,
            rot: None,
        })
    }

    /// Sets the timing correction for the next symbols: their FFT windows started `delay_q16`
    /// / 65536 samples late (the sub-sample drift of a fast sampling clock left after sample
    /// slips; negative: early). Each used bin `k` is rotated by `e^{−j2πk·delay/N}` (DFT shift
    /// theorem) with the NCO's sine table, before estimation.
    pub fn set_timing_offset_q16(&mut self, delay_q16: i32) {
        self.timing_q16 = delay_q16;
    }

    /// Sets the digital gain for the frame.
    pub fn set_gain(&mut self, gain: DigitalGain) {
        self.gain = gain;
    }

    /// Forgets the estimator history (new frame).
    pub fn reset(&mut self) {
        self.fill = [0; N];
        self.head = [0; N];
    }

    /// The latest channel estimate per used bin and its block exponent (value = est/32768 ·
    /// 2^exp · R in unitary FFT units of the gained input).
    pub fn estimate(&self) -> (&[Cq15], i32) {
        (
            self.estimate
                .get(..self.numerology.used_len())
                .unwrap_or_default(),
            self.estimate_exp,
        )
    }

    /// The latest symbol's FFT output (natural order, after the gain and any timing
    /// rotation); for trackers that read only phases (e.g. [`crate::sco_q15`]).
    pub fn bins(&self) -> &[Cq15; N] {
        &self.bins
    }

    /// The latest symbol's FFT output with its block exponent `e`: the unitary DFT of the
    /// gained input (Q15 fractions) is `bins[k] · 2^e · F::RESIDUAL_SCALE` (a constant for
    /// the FFT size), for trackers that compare powers across symbols.
    pub fn bins_with_exponent(&self) -> (&[Cq15; N], i32) {
        (&self.bins, self.bins_exp)
    }

    /// The design in use.
    pub fn design(&self) -> &DesignQ15<N, K, M> {
        &self.design
    }

    /// The common-phase rotation (Q15 unit phasor) applied to the latest symbol's channel
    /// estimate before equalization; `None` when CPE correction is off or found no pilots.
    pub fn applied_common_phase(&self) -> Option<Cq15> {
        self.rot
    }

    /// Sets the noise-plus-interference variance of each used bin (ascending frequency, at
    /// least `used_len` values) that weights the LLRs from now on, e.g. from
    /// [`crate::noise_track_q15::NoiseTrackerQ15::bin_noise`]: FFT-output power ×
    /// 2^[`crate::noise_track_q15::POWER_FRAC_BITS`] (u64), with the estimator's MSE per
    /// used bin in the same format
    /// ([`crate::noise_track_q15::NoiseTrackDesignQ15::estimator_mse`]) added to it as the
    /// f32 receiver does. Weight per bin: `2^44/(noise + mse)`, one [`reciprocal`] each;
    /// integer only. The weights are written over the design's own (`design().weight`; no
    /// second N-sized table: RAM is short on a Cortex-M0). Errors (nothing changed): a slice
    /// too short, or a bin whose total is 0 (`OutOfRange` with its index).
    pub fn set_bin_noise(
        &mut self,
        noise: &[u64],
        estimator_mse: &[u64],
    ) -> Result<(), ProcessError> {
        let used = self.numerology.used_len();
        for s in [noise, estimator_mse] {
            if s.len() < used {
                return Err(ProcessError::BufferLength {
                    expected: used,
                    actual: s.len(),
                });
            }
        }
        if let Some(index) = noise
            .iter()
            .zip(estimator_mse)
            .take(used)
            .position(|(&n, &m)| n.saturating_add(m) == 0)
        {
            return Err(ProcessError::OutOfRange { index });
        }
        for (w, (&n, &m)) in self
            .design
            .weight
            .iter_mut()
            .zip(noise.iter().zip(estimator_mse))
        {
            *w = inverse_power(n.saturating_add(m));
        }
        Ok(())
    }

    /// Back to one noise level on every bin: the LLR weights `weights` (per used bin), e.g.
    /// the `weight` table of the [`DesignQ15`] the receiver was built from (a static table in
    /// firmware). Extra entries are ignored; missing ones keep their value.
    pub fn clear_bin_noise(&mut self, weights: &[Scaled]) {
        for (d, s) in self.design.weight.iter_mut().zip(weights) {
            *d = *s;
        }
    }

    /// The LLR weight per used bin in use (per unit of `|Ĥ|²` in FFT output units).
    pub fn llr_weights(&self) -> &[Scaled] {
        self.design
            .weight
            .get(..self.numerology.used_len())
            .unwrap_or_default()
    }

    /// Receives symbol `symbol` from its `N + L` Q15 samples: equalized data symbols (Q3.12,
    /// ascending frequency), LLR weights (the SINR as [`Scaled`], zero in deep fades) and
    /// `bits_per_symbol` i8 LLRs per data bin. On error nothing is written.
    pub fn receive(
        &mut self,
        samples: &[Cq15],
        symbol: u32,
        modulation: Modulation,
        equalized: &mut [Cq15],
        sinr: &mut [Scaled],
        llrs: &mut [i8],
    ) -> Result<SymbolCountsQ15, ProcessError> {
        let nu = self.numerology;
        let cp = nu.cp_len();
        if samples.len() != N + cp {
            return Err(ProcessError::BufferLength {
                expected: N + cp,
                actual: samples.len(),
            });
        }
        let d = nu.data_len(symbol);
        let bits = modulation.bits_per_symbol();
        for (actual, expected) in [
            (equalized.len(), d),
            (sinr.len(), d),
            (llrs.len(), d * bits),
        ] {
            if actual < expected {
                return Err(ProcessError::BufferLength { expected, actual });
            }
        }
        // 1. Digital gain and FFT.
        self.clipped = self
            .gain
            .apply(samples.get(cp..).unwrap_or_default(), &mut self.bins);
        let e_b = self.fft.forward(&mut self.bins);
        self.bins_exp = e_b;
        if self.timing_q16 != 0 {
            self.rotate_bins();
        }
        // 2. LS into the history, 3. time stage, 4. frequency stage.
        self.ls(symbol, e_b);
        self.time_stage(symbol);
        self.freq_stage();
        // 5. Common phase, 6. equalization and LLRs.
        let rot = if self.design.cpe {
            self.common_phase(symbol)
        } else {
            None
        };
        self.rot = rot;
        let mut count = 0usize;
        let e_h = self.estimate_exp;
        for b in nu.bins(symbol).filter(|b| b.kind == BinKind::Data) {
            let y = self.bins.get(b.fft_index).copied().unwrap_or_default();
            let mut h = self.estimate.get(b.used_index).copied().unwrap_or_default();
            if let Some(c) = rot {
                h = cmul_q15(h, c);
            }
            let w = self
                .design
                .weight
                .get(b.used_index)
                .copied()
                .unwrap_or_default();
            let (x, weight) = equalize_bin(y, h, e_b - e_h, e_h, w);
            if let (Some(xo), Some(so)) = (equalized.get_mut(count), sinr.get_mut(count)) {
                *xo = x;
                *so = weight;
            }
            if let Some(out) = llrs.get_mut(count * bits..(count + 1) * bits) {
                llr_i8(modulation, x, weight, out);
            }
            count += 1;
        }
        Ok(SymbolCountsQ15 {
            data_bins: count,
            llrs: count * bits,
            clipped: self.clipped,
        })
    }

    fn rotate_bins(&mut self) {
        let nu = self.numerology;
        let log2_n = N.trailing_zeros() as i32;
        for u in 0..nu.used_len() {
            let k = i64::from(nu.logical_bin(u));
            // Phase −k·δ/N turns, ×2^32: −k·δ_q16·2^16 / N.
            let phase = shift_round(-k * i64::from(self.timing_q16) * 65536, log2_n) as u32;
            let (c, sn) = crate::nco::cos_sin_q15(phase);
            if let Some(b) = self.bins.get_mut(nu.fft_index(u)) {
                let (br, bi) = (i64::from(b.re), i64::from(b.im));
                let (c, sn) = (i64::from(c), i64::from(sn));
                *b = Cq15::new(
                    sat16_64(shift_round(br * c - bi * sn, 15)),
                    sat16_64(shift_round(br * sn + bi * c, 15)),
                );
            }
        }
    }

    fn ls(&mut self, symbol: u32, e_b: i32) {
        let nu = self.numerology;
        let inv = self.design.inv_pilot;
        let e_z = (e_b + inv.exp).clamp(i32::from(i8::MIN), i32::from(i8::MAX));
        let mut prbs = Prbs15::for_symbol(nu.params().pilots.seed, symbol);
        for b in nu.bins(symbol) {
            if b.kind != BinKind::Pilot {
                continue;
            }
            let neg = prbs.next_bit() != 0;
            let y = self.bins.get(b.fft_index).copied().unwrap_or_default();
            let m = if neg { -inv.mant } else { inv.mant };
            let z = Cq15::new(
                sat16_64(shift_round(i64::from(y.re) * i64::from(m), 15)),
                sat16_64(shift_round(i64::from(y.im) * i64::from(m), 15)),
            );
            let j = usize::from(
                self.design
                    .lattice_of
                    .get(b.used_index)
                    .copied()
                    .unwrap_or(NOT_LATTICE),
            );
            if let (Some(h), Some(he), Some(head), Some(fill), Some(seen)) = (
                self.history.get_mut(j),
                self.history_exp.get_mut(j),
                self.head.get_mut(j),
                self.fill.get_mut(j),
                self.last_seen.get_mut(j),
            ) {
                *head = if *head == 0 { (M - 1) as u8 } else { *head - 1 };
                if let (Some(slot), Some(slot_e)) = (
                    h.get_mut(usize::from(*head)),
                    he.get_mut(usize::from(*head)),
                ) {
                    *slot = z;
                    *slot_e = e_z as i8;
                }
                if matches!(self.design.time, TimeFilter::Forgetting { .. }) {
                    if let (Some(f), Some(fe)) =
                        (self.forget.get_mut(j), self.forget_exp.get_mut(j))
                    {
                        if *fill == 0 {
                            *f = z;
                            *fe = e_z as i8;
                        } else {
                            let l = i64::from(self.design.lambda_q15);
                            let e = i32::from(*fe).max(e_z);
                            let a = align(*f, i32::from(*fe), e);
                            let b = align(z, e_z, e);
                            let one = 32768i64;
                            let re = shift_round(l * a.0 + (one - l) * b.0, 15);
                            let im = shift_round(l * a.1 + (one - l) * b.1, 15);
                            *f = Cq15::new(sat16_64(re), sat16_64(im));
                            *fe = e as i8;
                        }
                    }
                }
                *fill = (*fill + 1).min(M as u8);
                *seen = symbol;
            }
        }
    }

    fn time_stage(&mut self, symbol: u32) {
        let period = self.numerology.pattern_period().max(1);
        let len = self.design.lattice_len;
        // Common exponent: the largest of the inputs, plus one bit of headroom.
        let mut e_max = i32::MIN;
        for j in 0..len {
            let fill = usize::from(self.fill.get(j).copied().unwrap_or(0));
            let head = usize::from(self.head.get(j).copied().unwrap_or(0));
            match self.design.time {
                TimeFilter::Forgetting { .. } => {
                    if fill > 0 {
                        e_max = e_max.max(i32::from(self.forget_exp.get(j).copied().unwrap_or(0)));
                    }
                }
                _ => {
                    let he = self.history_exp.get(j);
                    for i in 0..fill {
                        let idx = (head + i).checked_rem(M).unwrap_or(0);
                        e_max =
                            e_max.max(i32::from(he.and_then(|h| h.get(idx)).copied().unwrap_or(0)));
                    }
                }
            }
        }
        if e_max == i32::MIN {
            e_max = 0;
        }
        let e_out = e_max + 1;
        self.lattice_exp = e_out;
        for j in 0..len {
            let fill = usize::from(self.fill.get(j).copied().unwrap_or(0));
            let head = usize::from(self.head.get(j).copied().unwrap_or(0));
            let every = self.design.every_symbol.get(j).copied().unwrap_or(true);
            let seen = self.last_seen.get(j).copied().unwrap_or(0);
            let (mut re, mut im) = (0i64, 0i64);
            if fill > 0 {
                match self.design.time {
                    TimeFilter::Forgetting { .. } => {
                        let f = self.forget.get(j).copied().unwrap_or_default();
                        let fe = i32::from(self.forget_exp.get(j).copied().unwrap_or(0));
                        let a = align(f, fe, e_max);
                        re = a.0 << WEIGHT_FRAC_BITS;
                        im = a.1 << WEIGHT_FRAC_BITS;
                    }
                    TimeFilter::Latest => {
                        let z = self
                            .history
                            .get(j)
                            .and_then(|h| h.get(head))
                            .copied()
                            .unwrap_or_default();
                        let ze = i32::from(
                            self.history_exp
                                .get(j)
                                .and_then(|h| h.get(head))
                                .copied()
                                .unwrap_or(0),
                        );
                        let a = align(z, ze, e_max);
                        re = a.0 << WEIGHT_FRAC_BITS;
                        im = a.1 << WEIGHT_FRAC_BITS;
                    }
                    TimeFilter::Lmmse => {
                        let p = if every { 1 } else { period };
                        let age = (symbol.wrapping_sub(seen) as usize).min(p - 1);
                        let w = self
                            .design
                            .time_weights
                            .get(usize::from(!every))
                            .and_then(|c| c.get(age))
                            .and_then(|a| a.get(fill - 1));
                        if let (Some(w), Some(h), Some(he)) =
                            (w, self.history.get(j), self.history_exp.get(j))
                        {
                            for (i, wi) in w.iter().enumerate().take(fill) {
                                let idx = (head + i).checked_rem(M).unwrap_or(0);
                                let z = h.get(idx).copied().unwrap_or_default();
                                let ze = i32::from(he.get(idx).copied().unwrap_or(0));
                                let a = align(z, ze, e_max);
                                re += i64::from(*wi) * a.0;
                                im += i64::from(*wi) * a.1;
                            }
                        }
                    }
                }
            }
            // Q(15 + 13) at e_max → Q15 at e_max + 1.
            if let Some(o) = self.lattice_est.get_mut(j) {
                *o = Cq15::new(
                    sat16_64(shift_round(re, WEIGHT_FRAC_BITS + 1)),
                    sat16_64(shift_round(im, WEIGHT_FRAC_BITS + 1)),
                );
            }
        }
    }

    fn freq_stage(&mut self) {
        let used = self.numerology.used_len();
        self.estimate_exp = self.lattice_exp + 1;
        for u in 0..used {
            let first = usize::from(self.design.first_tap.get(u).copied().unwrap_or(0));
            let (mut re, mut im) = (0i64, 0i64);
            if let (Some(taps), Some(src)) = (
                self.design.taps.get(u),
                self.lattice_est.get(first..first + K),
            ) {
                for (&(wr, wi), z) in taps.iter().zip(src) {
                    let (wr, wi) = (i64::from(wr), i64::from(wi));
                    let (zr, zi) = (i64::from(z.re), i64::from(z.im));
                    re += wr * zr - wi * zi;
                    im += wr * zi + wi * zr;
                }
            }
            if let Some(o) = self.estimate.get_mut(u) {
                *o = Cq15::new(
                    sat16_64(shift_round(re, WEIGHT_FRAC_BITS + 1)),
                    sat16_64(shift_round(im, WEIGHT_FRAC_BITS + 1)),
                );
            }
        }
    }

    /// Unit phasor of `Σ Y_p (Ĥ_p X_p)*` over this symbol's pilots (Q15), `None` if zero.
    fn common_phase(&self, symbol: u32) -> Option<Cq15> {
        let nu = &self.numerology;
        let mut prbs = Prbs15::for_symbol(nu.params().pilots.seed, symbol);
        let (mut re, mut im) = (0i64, 0i64);
        for b in nu.bins(symbol).filter(|b| b.kind == BinKind::Pilot) {
            let neg = prbs.next_bit() != 0;
            let y = self.bins.get(b.fft_index).copied().unwrap_or_default();
            let h = self.estimate.get(b.used_index).copied().unwrap_or_default();
            let (yr, yi, hr, hi) = (
                i64::from(y.re),
                i64::from(y.im),
                i64::from(h.re),
                i64::from(h.im),
            );
            // y · conj(h), times the pilot's sign.
            let (pr, pi) = (yr * hr + yi * hi, yi * hr - yr * hi);
            if neg {
                re -= pr;
                im -= pi;
            } else {
                re += pr;
                im += pi;
            }
        }
        unit_phasor(re, im)
    }
}

/// `2^44/t` as [`Scaled`] for `t > 0` (zero weight for 0): `t` normalised to 32 bits,
/// one [`reciprocal`].
fn inverse_power(t: u64) -> Scaled {
    let sh = (64 - t.leading_zeros() as i32 - 32).max(0);
    let Some((r, s)) = reciprocal((t >> sh) as u32) else {
        return Scaled::default();
    };
    // 2^44/t = r·2^(s − 30 − sh + 44), r ∈ [2^30, 2^31]: mantissa r/2^16 (Q15), so the
    // exponent is s − sh + 44 + 1.
    let mant = shift_round(r, 16) as i32;
    let exp = s - sh + POWER_FRAC_BITS as i32 + 1;
    if mant >= 1 << 15 {
        Scaled {
            mant: mant >> 1,
            exp: exp + 1,
        }
    } else {
        Scaled { mant, exp }
    }
}

/// `v` (Q15 at exponent `e`) as i64 parts at exponent `target ≥ e` (rounded right shift).
#[inline]
fn align(v: Cq15, e: i32, target: i32) -> (i64, i64) {
    let s = (target - e).clamp(0, 40);
    (
        shift_round(i64::from(v.re), s),
        shift_round(i64::from(v.im), s),
    )
}

/// Q15 complex product with rounding and saturation.
#[inline]
fn cmul_q15(a: Cq15, b: Cq15) -> Cq15 {
    let (ar, ai, br, bi) = (
        i64::from(a.re),
        i64::from(a.im),
        i64::from(b.re),
        i64::from(b.im),
    );
    Cq15::new(
        sat16_64(shift_round(ar * br - ai * bi, 15)),
        sat16_64(shift_round(ar * bi + ai * br, 15)),
    )
}

/// `(re, im)/|re + j im|` as Q15, through [`inv_sqrt`]; `None` for zero.
fn unit_phasor(re: i64, im: i64) -> Option<Cq15> {
    // Bring the larger part to about 2^30 so the square fits u64 with room.
    let big = re.unsigned_abs().max(im.unsigned_abs());
    if big == 0 {
        return None;
    }
    let shift = 63 - big.leading_zeros() as i32 - 30;
    let (r, i) = (shift_round(re, shift), shift_round(im, shift));
    let p = (r * r + i * i) as u64;
    let (q, s) = inv_sqrt(p)?;
    // r·q·2^(s−30) is the unit phasor's real part; Q15 → shift by 30 − s − 15.
    let sh = 15 - s;
    Some(Cq15::new(
        sat16_64(shift_round(r * q, sh)),
        sat16_64(shift_round(i * q, sh)),
    ))
}

/// Equalizes one bin: `x = y·conj(h)/|h|² · 2^d` as Q3.12 (`d = e_y − e_h`), and its LLR
/// weight `|h|²·2^(2e_h) · w` ([`Scaled`]); zero symbol and weight when `h = 0`.
fn equalize_bin(y: Cq15, h: Cq15, d: i32, e_h: i32, w: Scaled) -> (Cq15, Scaled) {
    let (yr, yi, hr, hi) = (
        i64::from(y.re),
        i64::from(y.im),
        i64::from(h.re),
        i64::from(h.im),
    );
    let g = (hr * hr + hi * hi) as u32; // ≤ 2^31
    let Some((r, s)) = reciprocal(g) else {
        return (Cq15::ZERO, Scaled::default());
    };
    let (zr, zi) = (yr * hr + yi * hi, yi * hr - yr * hi); // |z| ≤ 2^31
                                                           // x = z · r · 2^(s − 30) · 2^d, in Q12: shift right by 30 − s − d − 12.
    let sh = 30 - s - d - SYMBOL_FRAC_BITS;
    let x = Cq15::new(
        sat16_64(shift_round(zr * r, sh)),
        sat16_64(shift_round(zi * r, sh)),
    );
    // Weight: g·2^-30 (Q30 → value) · 2^(2e_h) · w.mant·2^(w.exp − 15).
    let prod = i64::from(g >> 1) * i64::from(w.mant); // g/2 · mant: < 2^45
    let wt = if prod == 0 {
        Scaled::default()
    } else {
        // value = prod · 2^(1 − 30 + 2e_h + w.exp − 15); normalise the mantissa to [2^14, 2^15).
        let bits = 64 - prod.leading_zeros() as i32; // prod in [2^(bits−1), 2^bits)
        let mant = shift_round(prod, bits - 15) as i32;
        let (mant, extra) = if mant >= 1 << 15 {
            (mant >> 1, 1)
        } else {
            (mant, 0)
        };
        Scaled {
            mant,
            exp: bits - 15 + extra + 1 - 30 + 2 * e_h + w.exp - 15 + 15,
        }
    };
    (x, wt)
}

/// Per modulation: `1/a` in Q12 and `a²` in Q20.
fn axis_consts(m: Modulation) -> (i64, i64) {
    match m {
        Modulation::Bpsk => (4096, 1 << 20),
        Modulation::Qpsk => (5793, 524_288),
        Modulation::Qam16 => (12_953, 104_858),
        Modulation::Qam64 => (26_545, 24_966),
        Modulation::Qam256 => (53_405, 6_168),
    }
}

/// i8 LLRs of one equalized symbol (Q3.12) with weight `w` (SINR): the f32 demapper's exact
/// max-log form in integers, `round(4·L)` saturated to ±127.
fn llr_i8(m: Modulation, x: Cq15, w: Scaled, out: &mut [i8]) {
    let k = m.bits_per_axis();
    let (inv_a, a2) = axis_consts(m);
    let (i_out, q_out) = out.split_at_mut(k.min(out.len()));
    axis_llr_i8(i64::from(x.re), inv_a, a2, w, i_out);
    if m != Modulation::Bpsk {
        axis_llr_i8(i64::from(x.im), inv_a, a2, w, q_out);
    }
}

fn axis_llr_i8(x12: i64, inv_a12: i64, a2_20: i64, w: Scaled, out: &mut [i8]) {
    let m = out.len();
    if m == 0 || m > 4 {
        return;
    }
    // Ranges (32-bit arithmetic below): |x12| ≤ 2^15 (a Q3.12 i16), 1/a < 2^16 in Q12, so
    // |u| < 2^19 in Q12; levels are odd integers |l| ≤ 15, `level(i)` < 2^16 in Q12.
    let x12 = x12.clamp(-(1 << 15), 1 << 15) as i32;
    let inv_a12 = inv_a12.clamp(0, (1 << 16) - 1) as i32;
    let levels = 1i32 << m;
    let top = levels - 1;
    // u = x/a in Q12 (|x·(1/a)| < 2^31).
    let u = shift_round32(x12 * inv_a12, 12);
    let level = |i: i32| (2 * i - top) << 12;
    let nearest = shift_round32(u + (top << 12), 13).clamp(0, top);
    // Weight W = 4·w·a² = 4·mant·a2·2^(exp − 15 − 20).
    let wm = shift_round(i64::from(w.mant) * a2_20, 20); // ≤ 2^15
    let we = w.exp - 15 + 2; // ×4 (I8_LSB_PER_LLR)
    debug_assert_eq!(I8_LSB_PER_LLR, 4.0);
    let ln = 2 * nearest - top;
    for (j, o) in out.iter_mut().enumerate() {
        let block = 1i32 << (m - 1 - j);
        let run = (nearest + block) >> (m - j);
        let lo = (2 * block * run - block).max(0);
        let hi = (2 * block * run + block - 1).min(levels - 1);
        // The other bit value's nearest level: just below `lo` or just above `hi` (the
        // closer one; the lower on a tie, as |e| compares like e²).
        let below = (lo >= 1).then(|| (u - level(lo - 1)).unsigned_abs());
        let above = (hi + 1 < levels).then(|| (u - level(hi + 1)).unsigned_abs());
        let other = match (below, above) {
            (Some(b), Some(a)) => {
                if a < b {
                    hi + 1
                } else {
                    lo - 1
                }
            }
            (Some(_), None) => lo - 1,
            (None, Some(_)) => hi + 1,
            (None, None) => {
                *o = 0;
                continue;
            }
        };
        // d_other − d_nearest = (l_n − l_o)(2u − l_n − l_o), Q12 (levels are integers);
        // |l_n − l_o| ≤ 30 and |2u − …| < 2^21: |t| < 2^26.
        let lo_v = 2 * other - top;
        let t = (ln - lo_v) * (2 * u - ((ln + lo_v) << 12)); // Q12
        let t = if run & 1 == 0 { t } else { -t };
        // L8 = t·2^-12 · wm · 2^we; |t| < 2^26 and wm ≤ 2^15: the product fits i64.
        let v = shift_round(i64::from(t) * wm, 12 - we);
        *o = v.clamp(-127, 127) as i8;
    }
}

/// [`shift_round`] for 32-bit values and a shift in `1..=31` (half away from zero).
#[inline]
fn shift_round32(v: i32, s: u32) -> i32 {
    let half = 1i32 << (s - 1);
    if v >= 0 {
        (v + half) >> s
    } else {
        -((-v + half) >> s)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The gain's definition, written out in i128: `v·mant·2^(shift−15)` rounded half away
    /// from zero, saturated to i16 (common practice for fixed-point gains).
    fn reference(v: i16, mant: i32, shift: i32) -> (i16, bool) {
        let p = i128::from(v) * i128::from(mant);
        let e = shift - 15;
        let r = if e >= 0 {
            p << e.min(100)
        } else {
            let s = (-e).min(120) as u32;
            let half = 1i128 << (s - 1);
            if p >= 0 {
                (p + half) >> s
            } else {
                -((-p + half) >> s)
            }
        };
        let c = r.clamp(i128::from(i16::MIN), i128::from(i16::MAX));
        (c as i16, c != r)
    }

    /// The exact max-log axis LLR in i64 throughout (the first integer form of this
    /// demapper, kept as the reference for the 32-bit one).
    fn axis_llr_i8_wide(x12: i64, inv_a12: i64, a2_20: i64, w: Scaled, out: &mut [i8]) {
        let m = out.len();
        let levels = 1i64 << m;
        let top = levels - 1;
        let u = shift_round(x12 * inv_a12, 12);
        let level = |i: i64| (2 * i - top) << 12;
        let nearest = shift_round(u + (top << 12), 13).clamp(0, top);
        let wm = shift_round(i64::from(w.mant) * a2_20, 20);
        let we = w.exp - 15 + 2;
        for (j, o) in out.iter_mut().enumerate() {
            let block = 1i64 << (m - 1 - j);
            let run = (nearest + block) >> (m - j);
            let lo = (2 * block * run - block).max(0);
            let hi = (2 * block * run + block - 1).min(levels - 1);
            let mut best: Option<(i64, i64)> = None;
            for cand in [lo - 1, hi + 1] {
                if (0..levels).contains(&cand) {
                    let e = u - level(cand);
                    let d2 = e * e;
                    if best.is_none_or(|(bd, _)| d2 < bd) {
                        best = Some((d2, cand));
                    }
                }
            }
            let Some((_, other)) = best else {
                *o = 0;
                continue;
            };
            let ln = 2 * nearest - top;
            let lo_v = 2 * other - top;
            let t = (ln - lo_v) * (2 * u - ((ln + lo_v) << 12));
            let t = if run & 1 == 0 { t } else { -t };
            let v = shift_round(t * wm, 12 - we);
            *o = v.clamp(-127, 127) as i8;
        }
    }

    #[test]
    fn axis_llr_32_bit_form_equals_the_wide_form() {
        // Every i16 input, every modulation, weights across the receiver's range.
        for m in Modulation::ALL {
            let k = m.bits_per_axis();
            let (inv_a, a2) = axis_consts(m);
            for (mant, exp) in [
                (16_384, -10),
                (23_170, 0),
                (32_767, 5),
                (20_000, 12),
                (0, 0),
            ] {
                let w = Scaled { mant, exp };
                for x in (i16::MIN..=i16::MAX).step_by(3) {
                    let (mut a, mut b) = ([0i8; 4], [0i8; 4]);
                    axis_llr_i8(i64::from(x), inv_a, a2, w, &mut a[..k]);
                    axis_llr_i8_wide(i64::from(x), inv_a, a2, w, &mut b[..k]);
                    assert_eq!(a, b, "{m:?} x {x} w {mant}·2^{exp}");
                }
            }
        }
    }

    #[test]
    fn digital_gain_fast_paths_equal_the_definition() {
        let all: [Cq15; 32768] = core::array::from_fn(|i| {
            let a = (2 * i) as i32 - 32768;
            Cq15::new(a as i16, (a + 1) as i16)
        });
        let mut out = [Cq15::ZERO; 32768];
        for mant in [0, 1, 3, 16_384, 23_170, 32_767, 32_768] {
            for shift in -20..=40 {
                let g = DigitalGain { mant, shift };
                let clipped = g.apply(&all, &mut out);
                let mut want_clipped = 0;
                for (o, v) in out.iter().zip(&all) {
                    for (got, x) in [(o.re, v.re), (o.im, v.im)] {
                        let (w, c) = reference(x, mant, shift);
                        assert_eq!(got, w, "v {x} mant {mant} shift {shift}");
                        want_clipped += usize::from(c);
                    }
                }
                assert_eq!(clipped, want_clipped, "mant {mant} shift {shift}");
            }
        }
    }
}
