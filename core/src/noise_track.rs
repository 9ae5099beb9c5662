//! Noise, SNR, EVM and MER, and per-bin noise-plus-interference tracking (f32).
//!
//! Three kinds of bin observe the noise, each in its own way (per FFT bin `k` of symbol `m`):
//!
//! * **null bins** (guards, DC): `|Y_k|²` — noise plus whatever leaks there (ICI, an
//!   interferer), with no channel in it;
//! * **pilots**: the residual `|Y_p − c (Ĥ_p/g_p) X_p|² / (A² κ_p)`, `c` the common phase, `A`
//!   the pilot amplitude, and `g_p`, `κ_p` the estimator's own bias
//!   ([`crate::estimate::ChannelEstimator::pilot_residual_model`]): LMMSE shrinks the estimate
//!   by `g_p`, and `Ĥ_p` was built from `Y_p` itself, which makes the raw residual too small by
//!   `κ_p` (data-aided);
//! * **data bins**: the decision-directed error `|x_eq − x̂|²` of the equalized symbol against
//!   its hard decision, averaged per bin in the received domain (`|c Ĥ_k|²·|x_eq − x̂|²`) and
//!   in the equalized domain (`ε̄_k`). Wrong decisions make it too small at low SINR (Mahmoud
//!   & Arslan 2009) — exactly on the bins an interferer hits — so it is scaled by the exact
//!   decision-directed bias of the constellation at `ε̄_k` ([`crate::dd_bias`], at most 2×):
//!   `v_k = (σ²(ε̄_k)/ε̄_k)·mean(|Ĥ|²ε) − σ_e²`, `σ_e²` the estimator's predicted MSE (the
//!   estimation error is not noise; the equalizer adds it back).
//!
//! Each bin keeps an exponentially forgotten mean (`λ` per symbol, with a running mean until
//! `1/(1 − λ)` symbols are in, so a fresh tracker is unbiased from its first symbol): that is
//! the per-bin noise-plus-interference variance handed to the LLR weighting
//! ([`crate::receiver::Receiver::set_bin_noise`]). A bin whose variance exceeds
//! `detect_ratio` × its local floor (the thermal N0, or the median of its neighbours when
//! estimator mismatch or ICI lifts the floor) is flagged as interfered.
//!
//! Per frame (since [`NoiseTracker::start_frame`]): the **thermal N0** is the mean of the
//! null and pilot observations on bins not flagged (so a narrowband interferer does not raise
//! it), pooled only while the pilots agree with the null bins (at high SNR the pilot residuals
//! carry the estimator's model mismatch), and carried over frames with a forgetting factor
//! (thermal noise belongs to the receiver, not to the frame); the **SNR** is `(mean |Y|² over data bins − N0) / N0` — the frame's own Es·|H|²/N0,
//! what a link layer needs; **EVM** (decision-directed, RMS of `x_eq − x̂` over RMS `x̂`) and
//! **MER** (its inverse, dB); the data-aided EVM on the pilots, `sqrt(N0 / (mean |Ĥ_p|²))`
//! (REFERENCES item 9: EVM = 1/sqrt(SNR) for an unbiased equalizer).

use crate::dd_bias::DdBias;
use crate::error::{ConfigError, ProcessError};
use crate::estimate::ChannelEstimator;
use crate::modulation::Modulation;
use crate::numerology::{BinKind, Numerology};
use crate::pilots::Prbs15;
use crate::Cf32;

/// Half-width, in used bins, of the neighbourhood whose median is the local floor an
/// interfered bin must stand out from (design choice: wide enough that a 3-bin interferer and
/// the channel-estimate corruption it spreads around an interfered pilot leave the median to
/// clean bins; ±4 missed the 3-bin burst of `tests/noise_track.rs` at 13 % of frame ends).
pub const FLOOR_HALF_WIDTH: usize = 8;

/// Tracker settings.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct NoiseTrackConfig {
    /// Forgetting factor per symbol of the per-bin variances, `0 ≤ λ < 1` (0.98: a memory of
    /// about 50 symbols).
    pub lambda: f32,
    /// A bin is flagged as interfered when its variance exceeds this multiple of the thermal
    /// N0 (linear, > 1).
    pub detect_ratio: f32,
    /// Forgetting factor per frame of the thermal noise floor, `0 ≤ μ < 1` (0: each frame on
    /// its own). Thermal noise is a property of the receiver, not of the frame, so its
    /// estimate may carry over frames while the signal power is measured per frame.
    pub frame_lambda: f32,
}

impl Default for NoiseTrackConfig {
    /// λ = 0.98 (a persistent interferer is averaged over the channel states of several
    /// frames: with λ = 0.9 the CW case of `tests/noise_track.rs` lost 0.02 bit of MI against
    /// true weighting), flag at 3× the local floor (4.8 dB): with the ≈ 99 symbols' worth of
    /// averaging λ = 0.98 gives, a noise-only bin passes 3× its mean with probability far
    /// below 1e-6 (a Gamma tail; common practice); μ = 0.8 per frame for the noise floor.
    fn default() -> Self {
        Self {
            lambda: 0.98,
            detect_ratio: 3.0,
            frame_lambda: 0.8,
        }
    }
}

/// Frame statistics ([`NoiseTracker::frame_stats`]); linear ratios unless named `_db`.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct NoiseStats {
    /// Thermal noise variance N0 per bin (unit-energy data), from null bins and pilots.
    pub noise_var: f32,
    /// Null-bin observations only (noise + leakage), N0 per bin; 0 when there are none.
    pub null_noise_var: f32,
    /// Pilot residuals only (bias-corrected), N0 per bin; 0 when there are none.
    pub pilot_noise_var: f32,
    /// Es·|H|²/N0 over the frame's data bins (dB).
    pub snr_db: f32,
    /// Decision-directed EVM on the data bins, RMS ratio.
    pub evm_data: f32,
    /// Modulation error ratio on the data bins (dB), `−20 log10(evm_data)`.
    pub mer_db: f32,
    /// Data-aided EVM on the pilots, RMS ratio.
    pub evm_pilot: f32,
    /// Bins flagged as interfered now.
    pub interfered_bins: u16,
    /// Symbols in the frame so far.
    pub symbols: u32,
}

/// Per-bin noise-plus-interference tracker for FFT size `N`.
#[derive(Clone, Debug)]
pub struct NoiseTracker<const N: usize> {
    numerology: Numerology,
    config: NoiseTrackConfig,
    /// Per FFT index: forgotten mean of the observations, and the symbols seen (saturating).
    var: [f32; N],
    seen: [u16; N],
    /// Per FFT index: used (data or pilot) rather than null.
    used: [bool; N],
    /// Per FFT index: flagged as interfered.
    flagged: [bool; N],
    /// Frame sums per FFT index of the known-symbol observations (null bins and pilots), and
    /// their count.
    frame_sum: [f32; N],
    frame_n: [u16; N],
    data_power: f32,
    data_n: u32,
    dd_err: f32,
    dd_ref: f32,
    pilot_gain: f32,
    pilot_n: u32,
    symbols: u32,
    /// The thermal N0 of the latest symbol (for the flags and the anchoring).
    n0: f32,
    /// Per FFT index (data bins): forgotten means of the decision-directed error in the
    /// equalized domain (which sets the bias correction) and in the received domain
    /// (`|Ĥ|²·|x_eq − x̂|²`, which is corrected: noise does not change when the channel does).
    dd_eps: [f32; N],
    dd_h2: [f32; N],
    /// Used index per FFT index (`u16::MAX` for null bins).
    used_index: [u16; N],
    /// The decision-directed bias model of the modulation in use.
    dd: DdBias,
    /// Earlier frames' null and pilot sums `(sum, count)`, forgotten by μ per frame.
    null_memory: (f32, f32),
    pilot_memory: (f32, f32),
}

impl<const N: usize> NoiseTracker<N> {
    /// A tracker for `numerology`. Errors: FFT size not `N`, `λ` outside `[0, 1)`, a detection
    /// ratio not above 1.
    pub fn new(numerology: &Numerology, config: NoiseTrackConfig) -> Result<Self, ConfigError> {
        if numerology.fft_len() != N {
            return Err(ConfigError::FftSizeMismatch {
                numerology: numerology.fft_len(),
                stage: N,
            });
        }
        if !(config.lambda >= 0.0 && config.lambda < 1.0) {
            return Err(ConfigError::TrackerSetting);
        }
        if !(config.frame_lambda >= 0.0 && config.frame_lambda < 1.0) {
            return Err(ConfigError::TrackerSetting);
        }
        if !(config.detect_ratio > 1.0 && config.detect_ratio.is_finite()) {
            return Err(ConfigError::TrackerSetting);
        }
        let mut used = [false; N];
        let mut used_index = [u16::MAX; N];
        for u in 0..numerology.used_len() {
            let k = numerology.fft_index(u);
            if let (Some(x), Some(i)) = (used.get_mut(k), used_index.get_mut(k)) {
                *x = true;
                *i = u as u16;
            }
        }
        Ok(Self {
            numerology: *numerology,
            config,
            var: [0.0; N],
            seen: [0; N],
            used,
            flagged: [false; N],
            frame_sum: [0.0; N],
            frame_n: [0; N],
            data_power: 0.0,
            data_n: 0,
            dd_err: 0.0,
            dd_ref: 0.0,
            pilot_gain: 0.0,
            pilot_n: 0,
            symbols: 0,
            n0: 0.0,
            dd_eps: [0.0; N],
            dd_h2: [0.0; N],
            used_index,
            dd: DdBias::new(Modulation::Qpsk),
            null_memory: (0.0, 0.0),
            pilot_memory: (0.0, 0.0),
        })
    }

    /// Forgets everything (a new link).
    pub fn reset(&mut self) {
        self.var = [0.0; N];
        self.seen = [0; N];
        self.dd_eps = [0.0; N];
        self.dd_h2 = [0.0; N];
        self.flagged = [false; N];
        self.n0 = 0.0;
        self.null_memory = (0.0, 0.0);
        self.pilot_memory = (0.0, 0.0);
        self.clear_frame();
    }

    /// Starts the frame statistics over; the per-bin variances and the noise-floor memory
    /// carry on. `power_gain` is the ratio of the new frame's power gain to the previous one
    /// (1 when the front-end and digital gains did not change): the memory is rescaled by it.
    pub fn start_frame(&mut self, power_gain: f32) {
        let g = if power_gain.is_finite() && power_gain > 0.0 {
            power_gain
        } else {
            1.0
        };
        let mu = self.config.frame_lambda;
        let ((ns, nn), (ps, pn)) = self.known_sums();
        self.null_memory = (
            mu * g * (self.null_memory.0 + ns),
            mu * (self.null_memory.1 + nn as f32),
        );
        self.pilot_memory = (
            mu * g * (self.pilot_memory.0 + ps),
            mu * (self.pilot_memory.1 + pn as f32),
        );
        for v in self.var.iter_mut().chain(self.dd_h2.iter_mut()) {
            *v *= g;
        }
        self.n0 *= g;
        self.clear_frame();
    }

    fn clear_frame(&mut self) {
        self.frame_sum = [0.0; N];
        self.frame_n = [0; N];
        self.data_power = 0.0;
        self.data_n = 0;
        self.dd_err = 0.0;
        self.dd_ref = 0.0;
        self.pilot_gain = 0.0;
        self.pilot_n = 0;
        self.symbols = 0;
    }

    /// Adds symbol `symbol`: its FFT output `bins` (natural order, unitary scale), the
    /// estimator that just processed it, the common phase `rot` the receiver applied
    /// ([`crate::receiver::Receiver::common_phase`]), the equalized data symbols
    /// (ascending frequency, as the receiver wrote them) and their modulation.
    ///
    /// Errors (nothing changed): a NaN/Inf bin, or fewer equalized symbols than data bins.
    pub fn update<const K: usize, const M: usize>(
        &mut self,
        symbol: u32,
        bins: &[Cf32; N],
        estimator: &ChannelEstimator<N, K, M>,
        rot: Cf32,
        equalized: &[Cf32],
        modulation: Modulation,
    ) -> Result<(), ProcessError> {
        let nu = self.numerology;
        if let Some(index) = bins
            .iter()
            .position(|v| !(v.re.is_finite() && v.im.is_finite()))
        {
            return Err(ProcessError::NonFinite { index });
        }
        let d = nu.data_len(symbol);
        if equalized.len() < d {
            return Err(ProcessError::BufferLength {
                expected: d,
                actual: equalized.len(),
            });
        }
        let h = estimator.estimate();
        let mse = estimator.mse();
        let a = nu.pilot_amplitude();
        let a2 = a * a;
        let mut obs = [0.0f32; N];
        let mut known = [false; N];
        // Data bins: decision-directed error (equalized domain) and channel power.
        let mut dd_obs = [0.0f32; N];
        let mut h_obs = [0.0f32; N];
        if self.dd.modulation() != modulation {
            self.dd = DdBias::new(modulation);
        }
        // Null bins.
        for (k, (o, &u)) in obs.iter_mut().zip(self.used.iter()).enumerate() {
            if !u {
                *o = bins.get(k).map_or(0.0, |v| v.norm_sqr());
                if let Some(kn) = known.get_mut(k) {
                    *kn = true;
                }
            }
        }
        // Pilots and data.
        let mut prbs = Prbs15::for_symbol(nu.params().pilots.seed, symbol);
        let mut count = 0usize;
        let mut is_data = [false; N];
        for b in nu.bins(symbol) {
            let y = bins.get(b.fft_index).copied().unwrap_or_default();
            let hk = h.get(b.used_index).copied().unwrap_or_default() * rot;
            let v = match b.kind {
                BinKind::Pilot => {
                    let x = prbs.next_pilot(a);
                    let (g, kappa) = estimator
                        .pilot_residual_model(b.used_index)
                        .unwrap_or((Cf32::new(1.0, 0.0), 1.0));
                    let hu = hk / g;
                    self.pilot_gain += hu.norm_sqr();
                    self.pilot_n += 1;
                    let v = (y - hu * x).norm_sqr() / (a2 * kappa).max(f32::MIN_POSITIVE);
                    if let Some(kn) = known.get_mut(b.fft_index) {
                        *kn = true;
                    }
                    v
                }
                BinKind::Data => {
                    let xe = equalized.get(count).copied().unwrap_or_default();
                    count += 1;
                    let xd = modulation.slice(xe);
                    self.dd_err += (xe - xd).norm_sqr();
                    self.dd_ref += xd.norm_sqr();
                    self.data_power += y.norm_sqr();
                    self.data_n += 1;
                    if let (Some(de), Some(dh), Some(d)) = (
                        dd_obs.get_mut(b.fft_index),
                        h_obs.get_mut(b.fft_index),
                        is_data.get_mut(b.fft_index),
                    ) {
                        *de = (xe - xd).norm_sqr();
                        *dh = hk.norm_sqr();
                        *d = true;
                    }
                    0.0
                }
            };
            if let Some(o) = obs.get_mut(b.fft_index) {
                *o = v;
            }
        }
        // Per-bin forgotten means and frame sums. Data bins: the decision-directed error and
        // the channel power are averaged, and the noise is read through the DD bias model.
        let lambda = self.config.lambda;
        let used_index = self.used_index;
        let dd = &self.dd;
        for k in 0..N {
            let (Some(o), Some(&kn), Some(&dt), Some(v), Some(s), Some(fs), Some(fnn)) = (
                obs.get(k),
                known.get(k),
                is_data.get(k),
                self.var.get_mut(k),
                self.seen.get_mut(k),
                self.frame_sum.get_mut(k),
                self.frame_n.get_mut(k),
            ) else {
                continue;
            };
            *s = s.saturating_add(1);
            let w = (1.0 / f32::from(*s)).max(1.0 - lambda);
            if dt {
                let (Some(de), Some(dh), Some(ae), Some(ah)) = (
                    dd_obs.get(k),
                    h_obs.get(k),
                    self.dd_eps.get_mut(k),
                    self.dd_h2.get_mut(k),
                ) else {
                    continue;
                };
                *ae += w * (*de - *ae);
                *ah += w * (*de * *dh - *ah);
                let e = used_index
                    .get(k)
                    .filter(|&&u| u != u16::MAX)
                    .and_then(|&u| mse.get(usize::from(u)))
                    .copied()
                    .unwrap_or(0.0);
                let r = if *ae > 0.0 {
                    dd.noise_for(*ae) / *ae
                } else {
                    1.0
                };
                *v = (r * *ah - e).max(0.0);
            } else {
                *v += w * (*o - *v);
            }
            if kn {
                *fs += *o;
                *fnn = fnn.saturating_add(1);
            }
        }
        self.symbols = self.symbols.saturating_add(1);
        self.n0 = self.thermal_n0();
        // The reference a narrowband interferer must stand out from: the thermal N0, or the
        // median of the neighbouring used bins (±FLOOR_HALF_WIDTH, the bin itself excluded)
        // where a broad floor lies above it (estimator mismatch at the band edges, ICI).
        let nu = self.numerology;
        let used_len = nu.used_len();
        let mut flags = [false; N];
        for (k, (f, &v)) in flags.iter_mut().zip(self.var.iter()).enumerate() {
            if !self.used.get(k).copied().unwrap_or(false) {
                *f = self.n0 > 0.0 && v > self.config.detect_ratio * self.n0;
            }
        }
        for u in 0..used_len {
            let lo = u.saturating_sub(FLOOR_HALF_WIDTH);
            let hi = (u + FLOOR_HALF_WIDTH + 1).min(used_len);
            let mut around = [0.0f32; 2 * FLOOR_HALF_WIDTH];
            let mut n = 0usize;
            for w in (lo..hi).filter(|&w| w != u) {
                if let Some(slot) = around.get_mut(n) {
                    *slot = self.var.get(nu.fft_index(w)).copied().unwrap_or(0.0);
                    n += 1;
                }
            }
            let floor = median(around.get_mut(..n).unwrap_or_default());
            let k = nu.fft_index(u);
            let v = self.var.get(k).copied().unwrap_or(0.0);
            if let Some(f) = flags.get_mut(k) {
                *f = self.n0 > 0.0 && v > self.config.detect_ratio * self.n0.max(floor);
            }
        }
        self.flagged = flags;
        Ok(())
    }

    /// Thermal N0 of the frame so far: the mean of the null (DC excepted: it holds any DC
    /// offset) and pilot observations on bins not flagged.
    fn thermal_n0(&self) -> f32 {
        let ((ns, nn), (ps, pn)) = self.known_sums();
        pooled_n0(
            (ns + self.null_memory.0, nn as f32 + self.null_memory.1),
            (ps + self.pilot_memory.0, pn as f32 + self.pilot_memory.1),
        )
    }

    /// Frame sums `(sum, count)` of the null-bin and of the pilot observations, on bins not
    /// flagged and not DC.
    fn known_sums(&self) -> ((f32, u32), (f32, u32)) {
        let (mut null, mut pilot) = ((0.0f32, 0u32), (0.0f32, 0u32));
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
            acc.0 += fs;
            acc.1 += u32::from(fnn);
        }
        (null, pilot)
    }

    /// The frame statistics so far.
    pub fn frame_stats(&self) -> NoiseStats {
        let n0 = self.n0;
        let ((null_s, null_n), (pil_s, pil_n)) = self.known_sums();
        let ratio = |a: f32, b: u32| if b > 0 { a / b as f32 } else { 0.0 };
        let p_data = ratio(self.data_power, self.data_n);
        let snr = if n0 > 0.0 {
            ((p_data - n0) / n0).max(1e-6)
        } else {
            0.0
        };
        let evm = if self.dd_ref > 0.0 {
            libm::sqrtf(self.dd_err / self.dd_ref)
        } else {
            0.0
        };
        let g = ratio(self.pilot_gain, self.pilot_n);
        NoiseStats {
            noise_var: n0,
            null_noise_var: ratio(null_s, null_n),
            pilot_noise_var: ratio(pil_s, pil_n),
            snr_db: db(snr),
            evm_data: evm,
            mer_db: if evm > 0.0 { -2.0 * db(evm) } else { 0.0 },
            evm_pilot: if g > 0.0 { libm::sqrtf(n0 / g) } else { 0.0 },
            interfered_bins: self.flagged.iter().filter(|&&f| f).count() as u16,
            symbols: self.symbols,
        }
    }

    /// Noise-plus-interference variance per used bin (ascending frequency), into `out`
    /// (at least `used_len` long); pilots and data alike. Returns the count written.
    pub fn bin_noise(&self, out: &mut [f32]) -> usize {
        let nu = &self.numerology;
        let mut n = 0;
        for (u, o) in out.iter_mut().enumerate().take(nu.used_len()) {
            let v = self.var.get(nu.fft_index(u)).copied().unwrap_or(0.0);
            *o = if v > 0.0 {
                v
            } else {
                self.n0.max(f32::MIN_POSITIVE)
            };
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

/// The thermal N0 from the null-bin and pilot sums `(sum, count)`: the null bins hold no
/// channel, so they are unbiased; the pilot residuals add the estimator's model mismatch
/// (the channel's curvature between pilots), which dominates at high SNR. The two are pooled
/// when they agree within twice the standard deviation of their difference (each observation
/// is exponential: relative spread `1/√n`), otherwise the null bins alone are used; pilots
/// alone when there are no null bins.
fn pooled_n0(null: (f32, f32), pilot: (f32, f32)) -> f32 {
    let mean = |(s, n): (f32, f32)| if n > 0.0 { s / n } else { 0.0 };
    let (mn, mp) = (mean(null), mean(pilot));
    if null.1 <= 0.0 {
        return mp;
    }
    if pilot.1 <= 0.0 {
        return mn;
    }
    let sd = libm::sqrtf(mn * mn / null.1 + mp * mp / pilot.1);
    if mp - mn <= 2.0 * sd {
        (null.0 + pilot.0) / (null.1 + pilot.1)
    } else {
        mn
    }
}

/// 10·log10(x) for x > 0 (−300 otherwise).
fn db(x: f32) -> f32 {
    if x > 0.0 {
        10.0 * libm::log10f(x)
    } else {
        -300.0
    }
}

/// Sorts a short slice in place, ascending (insertion sort: no allocation, no recursion;
/// shared with the integer tracker).
pub(crate) fn sort_small<T: Copy + PartialOrd>(v: &mut [T]) {
    for i in 1..v.len() {
        let mut j = i;
        while j > 0 {
            let (Some(&a), Some(&b)) = (v.get(j - 1), v.get(j)) else {
                break;
            };
            if a <= b {
                break;
            }
            v.swap(j - 1, j);
            j -= 1;
        }
    }
}

/// Median by insertion sort (the slice is reordered); 0 for an empty slice.
fn median(v: &mut [f32]) -> f32 {
    sort_small(v);
    let n = v.len();
    if n == 0 {
        return 0.0;
    }
    if n % 2 == 1 {
        v.get(n / 2).copied().unwrap_or(0.0)
    } else {
        let a = v.get(n / 2 - 1).copied().unwrap_or(0.0);
        let b = v.get(n / 2).copied().unwrap_or(0.0);
        0.5 * (a + b)
    }
}
