//! Pilot-aided channel estimation: LS at the pilots, filtering across symbols, interpolation
//! across frequency (REFERENCES item 6; Li, Cimini & Sollenberger 1998; Edfors et al. 1998).
//!
//! ## Structure
//!
//! The *lattice* is the set of used bins that carry a pilot in some symbol of the pattern: the
//! pilot comb itself for a fixed comb, the union of the shifted combs for a scattered pattern.
//! Each symbol:
//!
//! 1. **LS** at this symbol's pilots: `Z_p = Y_p X_p^* / |X_p|²` (pilots are real `±A`, so a
//!    sign flip and a scale; boost handled through `A`).
//! 2. **Time stage**, per lattice bin, over its last `M` pilot observations: `Latest` (hold the
//!    most recent), `Forgetting` (exponential average), or `Lmmse` (Wiener weights from
//!    `J0(2π fd Tsym d)` and the pilot noise, one weight set per history fill and age).
//! 3. **Frequency stage**: every used bin from its `K` nearest lattice bins, by linear
//!    interpolation (the two neighbours) or banded LMMSE (weights from the exponential-profile
//!    correlation `1/(1 + j2πτΔk/N)` and the time stage's error variance), so the per-bin cost is
//!    `O(K)`.
//!
//! All coefficients are computed here at configuration time (f64 Cholesky, [`crate::linalg`]),
//! and the per-bin mean-square error that the design model predicts is stored with them, so the
//! equalizer can weight each bin's LLRs by its SINR.
//!
//! Const generics: `N` FFT size, `K` frequency taps per bin (≥ 2), `M` history depth (≥ 1).

use crate::correlation::{freq_correlation, time_correlation, ChannelModel};
use crate::error::{ConfigError, ProcessError};
use crate::linalg::{solve_hpd, Cf64};
use crate::numerology::{BinKind, Numerology};
use crate::pilots::Prbs15;
use crate::Cf32;

/// Longest scattered-pattern period the time LMMSE stage supports, symbols.
pub const MAX_PATTERN_PERIOD: usize = 16;

/// How the frequency stage fills the bins between lattice bins.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum FreqInterpolation {
    /// Linear between the two neighbouring lattice bins (linear extrapolation at the edges).
    Linear,
    /// Banded LMMSE over the `K` nearest lattice bins.
    Lmmse,
}

/// How the time stage combines a lattice bin's pilot observations over symbols.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum TimeFilter {
    /// The most recent observation (a fixed comb: this symbol's LS).
    Latest,
    /// Exponential forgetting `Ĥ ← λĤ + (1 − λ)Z` at each observation, `0 ≤ λ < 1`.
    Forgetting {
        /// Forgetting factor λ.
        lambda: f32,
    },
    /// LMMSE over the last `M` observations with the Jakes time correlation.
    Lmmse,
}

/// Estimator configuration.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct EstimatorConfig {
    /// Frequency stage.
    pub freq: FreqInterpolation,
    /// Time stage.
    pub time: TimeFilter,
    /// The channel the LMMSE designs and the reported per-bin error assume.
    pub model: ChannelModel,
    /// Noise variance N0 per bin (unit-energy data; Es/N0 = 1/N0), > 0 and finite.
    pub noise_var: f32,
}

impl Default for EstimatorConfig {
    /// Banded LMMSE in frequency, latest pilots in time, the default channel model, 20 dB.
    fn default() -> Self {
        Self {
            freq: FreqInterpolation::Lmmse,
            time: TimeFilter::Latest,
            model: ChannelModel::default(),
            noise_var: 0.01,
        }
    }
}

const NOT_LATTICE: u16 = u16::MAX;

/// The channel estimator. Large (`N·(K + M + 4)` complex values): keep it in a `static` or
/// on the heap on a host, not on a small stack.
#[derive(Clone, Debug)]
pub struct ChannelEstimator<const N: usize, const K: usize, const M: usize> {
    numerology: Numerology,
    config: EstimatorConfig,
    used_len: usize,
    /// Used index of each lattice bin, ascending.
    lattice: [u16; N],
    lattice_len: usize,
    /// Lattice index of each used bin, or `NOT_LATTICE`.
    lattice_of: [u16; N],
    /// Lattice bins observed every symbol (period 1) versus once per pattern period.
    every_symbol: [bool; N],
    /// Observation history per lattice bin, most recent at `head`.
    history: [[Cf32; M]; N],
    head: [u8; N],
    fill: [u8; N],
    last_seen: [u32; N],
    /// Time-stage output per lattice bin.
    lattice_est: [Cf32; N],
    /// Time LMMSE weights: `[class][fill − 1][age]`, class 0 = every symbol, 1 = periodic.
    time_weights: [[[[f32; M]; M]; MAX_PATTERN_PERIOD]; 2],
    /// Frequency taps per used bin and the lattice index of the first tap.
    taps: [[Cf32; K]; N],
    first_tap: [u16; N],
    /// Predicted estimation MSE per used bin (unit mean channel power).
    mse: [f32; N],
    /// The latest estimate per used bin.
    estimate: [Cf32; N],
}

impl<const N: usize, const K: usize, const M: usize> ChannelEstimator<N, K, M> {
    /// Designs the estimator for `numerology`. Errors: FFT size not `N`; `K < 2` or more taps
    /// than lattice bins; `M` or the pattern period beyond what the time stage supports; an
    /// invalid channel model, noise variance or forgetting factor; a design that is not
    /// positive definite.
    pub fn new(numerology: &Numerology, config: EstimatorConfig) -> Result<Self, ConfigError> {
        if numerology.fft_len() != N {
            return Err(ConfigError::FftSizeMismatch {
                numerology: numerology.fft_len(),
                stage: N,
            });
        }
        if !(config.model.is_valid() && config.noise_var.is_finite() && config.noise_var > 0.0) {
            return Err(ConfigError::EstimatorModelInvalid);
        }
        if let TimeFilter::Forgetting { lambda } = config.time {
            if !(0.0..1.0).contains(&lambda) {
                return Err(ConfigError::EstimatorModelInvalid);
            }
        }
        let period = numerology.pattern_period();
        if M == 0 || M > 255 || period > MAX_PATTERN_PERIOD {
            return Err(ConfigError::EstimatorHistoryUnsupported {
                depth: M,
                pattern_period: period,
            });
        }
        let mut est = Self {
            numerology: *numerology,
            config,
            used_len: numerology.used_len(),
            lattice: [0; N],
            lattice_len: 0,
            lattice_of: [NOT_LATTICE; N],
            every_symbol: [false; N],
            history: [[Cf32::new(0.0, 0.0); M]; N],
            head: [0; N],
            fill: [0; N],
            last_seen: [0; N],
            lattice_est: [Cf32::new(0.0, 0.0); N],
            time_weights: [[[[0.0; M]; M]; MAX_PATTERN_PERIOD]; 2],
            taps: [[Cf32::new(0.0, 0.0); K]; N],
            first_tap: [0; N],
            mse: [1.0; N],
            estimate: [Cf32::new(0.0, 0.0); N],
        };
        est.build_lattice();
        if K < 2 || K > est.lattice_len {
            return Err(ConfigError::InterpolationTaps {
                taps: K,
                lattice: est.lattice_len,
            });
        }
        let time_error = est.design_time()?;
        est.design_freq(time_error)?;
        Ok(est)
    }

    /// The configuration the estimator was designed with.
    pub fn config(&self) -> &EstimatorConfig {
        &self.config
    }

    /// Number of lattice bins (pilot positions over the pattern).
    pub fn lattice_len(&self) -> usize {
        self.lattice_len
    }

    /// Forgets the history (start of a new frame).
    pub fn reset(&mut self) {
        self.fill = [0; N];
        self.head = [0; N];
        self.lattice_est = [Cf32::new(0.0, 0.0); N];
    }

    fn pilot_amplitude(&self) -> f64 {
        f64::from(self.numerology.pilot_amplitude())
    }

    fn tau_samples(&self) -> f64 {
        f64::from(self.config.model.rms_delay_s) * f64::from(self.numerology.sample_rate_hz())
    }

    fn fd_tsym(&self) -> f64 {
        f64::from(self.config.model.doppler_hz) * f64::from(self.numerology.symbol_period_s())
    }

    /// Pilot noise variance after LS: `N0 / A²`.
    fn pilot_noise(&self) -> f64 {
        let a = self.pilot_amplitude();
        f64::from(self.config.noise_var) / (a * a)
    }

    fn build_lattice(&mut self) {
        let period = self.numerology.pattern_period().max(1);
        let mut len = 0usize;
        for u in 0..self.used_len {
            let hits = (0..period)
                .filter(|&s| self.numerology.is_pilot(u, s as u32))
                .count();
            if hits > 0 {
                if let (Some(slot), Some(of), Some(every)) = (
                    self.lattice.get_mut(len),
                    self.lattice_of.get_mut(u),
                    self.every_symbol.get_mut(len),
                ) {
                    *slot = u as u16;
                    *of = len as u16;
                    *every = hits == period;
                }
                len += 1;
            }
        }
        self.lattice_len = len;
    }

    /// Designs the time stage; returns the error variance it leaves (mean over ages, full
    /// history), the noise the frequency stage is designed for.
    fn design_time(&mut self) -> Result<f64, ConfigError> {
        let sigma2 = self.pilot_noise();
        let period = self.numerology.pattern_period().max(1);
        let fd = self.fd_tsym();
        let periodic =
            (0..self.lattice_len).any(|j| !self.every_symbol.get(j).copied().unwrap_or(true));
        match self.config.time {
            TimeFilter::Latest => {
                // Error of a held LS value `a` symbols old: 2(1 − r_t(a)) + σ², averaged over
                // the ages of the periodic bins (0 for a fixed comb).
                let ages = if periodic { period } else { 1 };
                let e = (0..ages)
                    .map(|a| 2.0 * (1.0 - time_correlation(fd, a as i64)) + sigma2)
                    .sum::<f64>()
                    / ages as f64;
                Ok(e)
            }
            TimeFilter::Forgetting { lambda } => {
                // Noise of the exponential average, σ²(1 − λ)/(1 + λ) (static channel; common
                // practice); its lag under Doppler is not modelled.
                let l = f64::from(lambda);
                Ok(sigma2 * (1.0 - l) / (1.0 + l))
            }
            TimeFilter::Lmmse => {
                let mut mean_error = 0.0;
                for class in 0..2 {
                    let p = if class == 0 { 1 } else { period };
                    for fill in 1..=M {
                        for age in 0..p {
                            let (w, e) = time_lmmse::<M>(fd, sigma2, p, fill, age)?;
                            if let Some(slot) = self
                                .time_weights
                                .get_mut(class)
                                .and_then(|c| c.get_mut(age))
                                .and_then(|a| a.get_mut(fill - 1))
                            {
                                *slot = w;
                            }
                            let counts = if periodic { class == 1 } else { class == 0 };
                            if fill == M && counts {
                                mean_error += e / p as f64;
                            }
                        }
                    }
                }
                Ok(mean_error)
            }
        }
    }

    fn design_freq(&mut self, sigma2: f64) -> Result<(), ConfigError> {
        let n = N;
        let tau = self.tau_samples();
        let nu = self.numerology;
        let logical = |u: u16| i64::from(nu.logical_bin(usize::from(u)));
        let lattice = self.lattice;
        let len = self.lattice_len;
        let lat = |j: usize| lattice.get(j).copied().unwrap_or(0);
        for u in 0..self.used_len {
            let uu = u as u16;
            let k_u = logical(uu);
            // Window of K consecutive lattice bins nearest to u.
            let above = (0..len).find(|&j| lat(j) >= uu).unwrap_or(len);
            let mut j0 = above.saturating_sub(K / 2).min(len - K);
            let dist = |j: usize| (i64::from(lat(j)) - i64::from(uu)).abs();
            while j0 > 0 && dist(j0 - 1) < dist(j0 + K - 1) {
                j0 -= 1;
            }
            while j0 + K < len && dist(j0 + K) < dist(j0) {
                j0 += 1;
            }
            let mut w = [Cf64::new(0.0, 0.0); K];
            match self.config.freq {
                FreqInterpolation::Linear => {
                    // Bracketing pair (l, l + 1), extrapolating at the edges.
                    let l = above.saturating_sub(1).min(len - 2);
                    let j0l = l.min(len - K);
                    j0 = j0l;
                    let (kl, kr) = (logical(lat(l)), logical(lat(l + 1)));
                    let t = (k_u - kl) as f64 / (kr - kl) as f64;
                    if let Some(v) = w.get_mut(l - j0) {
                        *v = Cf64::new(1.0 - t, 0.0);
                    }
                    if let Some(v) = w.get_mut(l + 1 - j0) {
                        *v = Cf64::new(t, 0.0);
                    }
                }
                FreqInterpolation::Lmmse => {
                    let mut a = [[Cf64::new(0.0, 0.0); K]; K];
                    let mut c = [Cf64::new(0.0, 0.0); K];
                    for (i, row) in a.iter_mut().enumerate() {
                        let ki = logical(lat(j0 + i));
                        for (j, v) in row.iter_mut().enumerate() {
                            *v = freq_correlation(tau, n, ki - logical(lat(j0 + j)));
                            if i == j {
                                *v += sigma2;
                            }
                        }
                        // Normal equations A w* = c*, c_i = r(k_u − k_i) (see DEVELOPERS.md).
                        if let Some(ci) = c.get_mut(i) {
                            *ci = freq_correlation(tau, n, k_u - ki).conj();
                        }
                    }
                    let x = solve_hpd(&a, &c).map_err(|_| ConfigError::EstimatorDesignFailed)?;
                    for (wi, xi) in w.iter_mut().zip(x.iter()) {
                        *wi = xi.conj();
                    }
                }
            }
            // Predicted MSE of Ĥ_u = Σ w_i Z_i with Z_i = H_i + e_i, Var e_i = σ²:
            // 1 − 2 Re Σ w_i* r(k_u − k_i) + Σ_ij w_i w_j* (r(k_i − k_j) + σ² δ_ij).
            let mut mse = 1.0;
            for (i, wi) in w.iter().enumerate() {
                let ki = logical(lat(j0 + i));
                mse -= 2.0 * (wi.conj() * freq_correlation(tau, n, k_u - ki)).re;
                for (j, wj) in w.iter().enumerate() {
                    let kj = logical(lat(j0 + j));
                    let mut r = freq_correlation(tau, n, ki - kj);
                    if i == j {
                        r += sigma2;
                    }
                    mse += (*wi * wj.conj() * r).re;
                }
            }
            if let (Some(t), Some(f), Some(m)) = (
                self.taps.get_mut(u),
                self.first_tap.get_mut(u),
                self.mse.get_mut(u),
            ) {
                for (ti, wi) in t.iter_mut().zip(w.iter()) {
                    *ti = Cf32::new(wi.re as f32, wi.im as f32);
                }
                *f = j0 as u16;
                *m = mse.max(0.0) as f32;
            }
        }
        Ok(())
    }

    /// Estimates the channel of symbol `symbol` from its FFT output `bins` (natural order).
    /// Afterwards [`Self::estimate`] and [`Self::mse`] hold the result per used bin.
    ///
    /// Errors: a NaN or infinite pilot bin (the estimator's state is then unchanged).
    pub fn update(&mut self, bins: &[Cf32; N], symbol: u32) -> Result<(), ProcessError> {
        let nu = self.numerology;
        for b in nu.bins(symbol) {
            if b.kind == BinKind::Pilot {
                let y = bins.get(b.fft_index).copied().unwrap_or_default();
                if !(y.re.is_finite() && y.im.is_finite()) {
                    return Err(ProcessError::NonFinite { index: b.fft_index });
                }
            }
        }
        // 1. LS at the pilots, into the history of their lattice bins.
        let a = nu.pilot_amplitude();
        let inv_a = if a > 0.0 { 1.0 / a } else { 0.0 };
        let mut prbs = Prbs15::for_symbol(nu.params().pilots.seed, symbol);
        for b in nu.bins(symbol) {
            if b.kind != BinKind::Pilot {
                continue;
            }
            let sign = if prbs.next_bit() == 0 { inv_a } else { -inv_a };
            let z = bins.get(b.fft_index).copied().unwrap_or_default() * sign;
            let j = usize::from(
                self.lattice_of
                    .get(b.used_index)
                    .copied()
                    .unwrap_or(NOT_LATTICE),
            );
            if let (Some(h), Some(head), Some(fill), Some(seen), Some(out)) = (
                self.history.get_mut(j),
                self.head.get_mut(j),
                self.fill.get_mut(j),
                self.last_seen.get_mut(j),
                self.lattice_est.get_mut(j),
            ) {
                *head = if *head == 0 { (M - 1) as u8 } else { *head - 1 };
                if let Some(slot) = h.get_mut(usize::from(*head)) {
                    *slot = z;
                }
                if let TimeFilter::Forgetting { lambda } = self.config.time {
                    *out = if *fill == 0 {
                        z
                    } else {
                        *out * lambda + z * (1.0 - lambda)
                    };
                }
                *fill = (*fill + 1).min(M as u8);
                *seen = symbol;
            }
        }
        // 2. Time stage.
        let period = nu.pattern_period().max(1);
        for j in 0..self.lattice_len {
            let (Some(h), Some(&head), Some(&fill), Some(&seen), Some(&every), Some(out)) = (
                self.history.get(j),
                self.head.get(j),
                self.fill.get(j),
                self.last_seen.get(j),
                self.every_symbol.get(j),
                self.lattice_est.get_mut(j),
            ) else {
                continue;
            };
            if fill == 0 {
                *out = Cf32::new(0.0, 0.0);
                continue;
            }
            match self.config.time {
                TimeFilter::Latest => *out = h.get(usize::from(head)).copied().unwrap_or_default(),
                TimeFilter::Forgetting { .. } => {}
                TimeFilter::Lmmse => {
                    let p = if every { 1 } else { period };
                    let age = (symbol.wrapping_sub(seen) as usize).min(p - 1);
                    let w = self
                        .time_weights
                        .get(usize::from(!every))
                        .and_then(|c| c.get(age))
                        .and_then(|a| a.get(usize::from(fill) - 1));
                    let mut acc = Cf32::new(0.0, 0.0);
                    if let Some(w) = w {
                        for (i, wi) in w.iter().enumerate().take(usize::from(fill)) {
                            let idx = (usize::from(head) + i).checked_rem(M).unwrap_or(0);
                            acc += h.get(idx).copied().unwrap_or_default() * *wi;
                        }
                    }
                    *out = acc;
                }
            }
        }
        // 3. Frequency stage.
        for ((est, taps), &first) in self
            .estimate
            .iter_mut()
            .zip(self.taps.iter())
            .zip(self.first_tap.iter())
            .take(self.used_len)
        {
            let src = self
                .lattice_est
                .get(usize::from(first)..usize::from(first) + K)
                .unwrap_or_default();
            *est = taps
                .iter()
                .zip(src)
                .fold(Cf32::new(0.0, 0.0), |acc, (w, z)| acc + w * z);
        }
        Ok(())
    }

    /// Channel estimate per used bin (`0 .. used_len`, ascending frequency) after the latest
    /// [`Self::update`].
    pub fn estimate(&self) -> &[Cf32] {
        self.estimate.get(..self.used_len).unwrap_or_default()
    }

    /// Predicted estimation MSE per used bin under the design model (unit mean channel
    /// power), after a full history.
    pub fn mse(&self) -> &[f32] {
        self.mse.get(..self.used_len).unwrap_or_default()
    }

    /// The frequency taps of used bin `used_index`: the lattice index of the first tap and the
    /// `K` weights (for export as a table, and for analysing the estimator).
    pub fn freq_taps(&self, used_index: usize) -> Option<(usize, &[Cf32; K])> {
        Some((
            usize::from(*self.first_tap.get(used_index)?),
            self.taps.get(used_index)?,
        ))
    }

    /// The estimator seen from a pilot of a fixed comb (used bin `used_index`), in steady
    /// state, for noise measurement from pilot residuals: returns `(g, c)`.
    ///
    /// * `g` is the estimate's gain on a channel that is constant across its taps,
    ///   `g = (Σ w)(Σ t)` for frequency taps `w` and time weights `t`: LMMSE shrinks towards
    ///   zero, so `Ĥ_p/g` rather than `Ĥ_p` is compared with the pilot, or the shrinkage
    ///   `|1 − g|²|H|²` would read as noise at high SNR.
    /// * `c` is the noise factor of the residual `Z_p − Ĥ_p/g`, whose noise variance is
    ///   `c·σ²` (σ² that of one LS value) because `Ĥ_p` holds `Z_p` itself with weight
    ///   `a = w_p t₀`: `c = |1 − a/g|² + (Σ|w|²)(Σt²)/|g|² − |a/g|²` (independent LS errors;
    ///   linear estimation, common practice).
    ///
    /// None for a bin that is not on the pilot lattice or a degenerate design.
    pub fn pilot_residual_model(&self, used_index: usize) -> Option<(Cf32, f32)> {
        let j = usize::from(*self.lattice_of.get(used_index)?);
        if j == usize::from(NOT_LATTICE) {
            return None;
        }
        let (first, w) = self.freq_taps(used_index)?;
        let own = j
            .checked_sub(first)
            .and_then(|i| w.get(i))
            .copied()
            .unwrap_or_default();
        let w_sum = w.iter().fold(Cf32::new(0.0, 0.0), |acc, v| acc + v);
        let w2: f32 = w.iter().map(|v| v.norm_sqr()).sum();
        let (t0, t_sum, t2) = match self.config.time {
            TimeFilter::Latest => (1.0, 1.0, 1.0),
            TimeFilter::Forgetting { lambda } => {
                ((1.0 - lambda), 1.0, (1.0 - lambda) / (1.0 + lambda))
            }
            TimeFilter::Lmmse => {
                let every = self.every_symbol.get(j).copied().unwrap_or(true);
                let t = self.time_weights(every, M, 0)?;
                (
                    t.first().copied().unwrap_or(0.0),
                    t.iter().sum(),
                    t.iter().map(|v| v * v).sum(),
                )
            }
        };
        let g = w_sum * t_sum;
        let g2 = g.norm_sqr();
        if !(g2.is_finite() && g2 > 1e-6) {
            return None;
        }
        let a = own * t0 / g;
        let c = (Cf32::new(1.0, 0.0) - a).norm_sqr() + w2 * t2 / g2 - a.norm_sqr();
        (c.is_finite() && c > 0.0).then_some((g, c))
    }

    /// Used index of lattice bin `j`.
    pub fn lattice_bin(&self, j: usize) -> Option<usize> {
        (j < self.lattice_len).then(|| self.lattice.get(j).map(|&u| usize::from(u)))?
    }

    /// Time LMMSE weights for a lattice bin seen every symbol (`every = true`) or once per
    /// pattern period, with `fill` observations (1..=M) and the newest `age` symbols old; the
    /// weights apply to the observations newest first.
    pub fn time_weights(&self, every: bool, fill: usize, age: usize) -> Option<&[f32; M]> {
        self.time_weights
            .get(usize::from(!every))?
            .get(age)?
            .get(fill.checked_sub(1)?)
    }
}

/// Time LMMSE weights for observations at lags `age + i·period`, `i < fill`, of a process with
/// correlation `J0(2π fd_tsym d)` in noise `sigma2`; returns the weights (newest first, zero
/// beyond `fill`) and the error variance `1 − wᵀr`.
fn time_lmmse<const M: usize>(
    fd_tsym: f64,
    sigma2: f64,
    period: usize,
    fill: usize,
    age: usize,
) -> Result<([f32; M], f64), ConfigError> {
    let mut a = [[Cf64::new(0.0, 0.0); M]; M];
    let mut c = [Cf64::new(0.0, 0.0); M];
    for (i, row) in a.iter_mut().enumerate() {
        for (j, v) in row.iter_mut().enumerate() {
            *v = if i < fill && j < fill {
                let d = (i as i64 - j as i64) * period as i64;
                Cf64::new(
                    time_correlation(fd_tsym, d) + if i == j { sigma2 } else { 0.0 },
                    0.0,
                )
            } else if i == j {
                Cf64::new(1.0, 0.0) // unused observations: identity rows, zero right side
            } else {
                Cf64::new(0.0, 0.0)
            };
        }
        if i < fill {
            if let Some(ci) = c.get_mut(i) {
                *ci = Cf64::new(time_correlation(fd_tsym, (age + i * period) as i64), 0.0);
            }
        }
    }
    let x = solve_hpd(&a, &c).map_err(|_| ConfigError::EstimatorDesignFailed)?;
    let mut w = [0.0f32; M];
    let mut err = 1.0;
    for ((wi, xi), ci) in w.iter_mut().zip(x.iter()).zip(c.iter()) {
        *wi = xi.re as f32;
        err -= xi.re * ci.re;
    }
    Ok((w, err))
}
