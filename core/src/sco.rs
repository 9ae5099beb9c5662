//! Sampling-clock offset: estimated from the pilot phase slope across subcarriers as it drifts
//! over symbols, and corrected by a per-bin phase rotation (sample slips are the caller's,
//! when the accumulated drift reaches half a sample).
//!
//! A receiver clock fast by `ζ` (e.g. 20 ppm = 2e-5) takes the symbol `m` window, which
//! starts `n_m` samples into the frame, `ζ·n_m` samples late in the transmitted signal, which
//! rotates bin `k` by `e^{+j2πkζn_m/N}` (DFT shift theorem). Against a reference symbol 0, pilot `k` of symbol `m`
//! has phase
//!
//! ```text
//! φ(m, k) = arg(Y_{m,k} X*_{m,k} · (Y_{0,k} X*_{0,k})*) = c_m + a_k + β·k·m + noise,  β = 2πζ(N + L)/N
//! ```
//!
//! with `c_m` the common phase (residual CFO, phase noise) and `a_k` the reference's own noise
//! and any channel change. The least-squares `β` with both nuisances removed (double
//! centring) is `β̂ = Σ (k − k̄)(m − m̄) φ(m, k) / (Σ(k − k̄)² · Σ(m − m̄)²)`, of variance
//! `σ²/(Σ(k − k̄)² Σ(m − m̄)²)` for independent phase noise of variance `σ²` (linear
//! regression; common practice). It is accumulated per symbol in O(pilots) with running sums.
//! Fixed pilot combs only (the same pilot bins in every symbol).
//!
//! Each pilot's phase is taken against the symbol's common phasor `Σ_k Y X* (Y₀ X₀*)*`, so
//! `c_m` may take any value (a residual CFO turns it by whole turns over a frame) without
//! wrapping some pilots and not others. Valid range: the slope term itself within ±½ turn,
//! `|ζ|·k_max·m·(N + L)/N < ½` (100 ppm, `k_max` = 28, N = 64, L = 8: 158 symbols).

use crate::error::{ConfigError, ProcessError};
use crate::numerology::{BinKind, Numerology};
use crate::pilots::Prbs15;
use crate::Cf32;

/// Streaming SCO estimator for FFT size `N`.
#[derive(Clone, Debug)]
pub struct ScoEstimator<const N: usize> {
    numerology: Numerology,
    /// Reference pilots `Y_{0,k} X*_{0,k}`, conjugated, per FFT index.
    reference: [Cf32; N],
    have_reference: bool,
    k_mean: f32,
    k_spread: f32,
    /// Symbols after the reference, and running sums of `A_m = Σ_k (k − k̄) φ(m, k)`.
    count: u32,
    sum_a: f32,
    sum_ma: f32,
    sum_m: f32,
    sum_m2: f32,
}

impl<const N: usize> ScoEstimator<N> {
    /// An estimator for `numerology` (fixed pilot comb: pattern period 1).
    pub fn new(numerology: &Numerology) -> Result<Self, ConfigError> {
        crate::preamble::check_size::<N>(numerology)?;
        if numerology.pattern_period() != 1 {
            return Err(ConfigError::EstimatorHistoryUnsupported {
                depth: 0,
                pattern_period: numerology.pattern_period(),
            });
        }
        let ks = || {
            numerology
                .bins(0)
                .filter(|b| b.kind == BinKind::Pilot)
                .map(|b| numerology.logical_bin(b.used_index) as f32)
        };
        let n = ks().count().max(1) as f32;
        let k_mean = ks().sum::<f32>() / n;
        let k_spread = ks().map(|k| (k - k_mean) * (k - k_mean)).sum::<f32>();
        Ok(Self {
            numerology: *numerology,
            reference: [Cf32::new(0.0, 0.0); N],
            have_reference: false,
            k_mean,
            k_spread,
            count: 0,
            sum_a: 0.0,
            sum_ma: 0.0,
            sum_m: 0.0,
            sum_m2: 0.0,
        })
    }

    /// Starts over: the next symbol becomes the reference.
    pub fn reset(&mut self) {
        self.have_reference = false;
        self.count = 0;
        self.sum_a = 0.0;
        self.sum_ma = 0.0;
        self.sum_m = 0.0;
        self.sum_m2 = 0.0;
    }

    /// Adds symbol `symbol` (FFT output, natural order); the first after a reset is the
    /// reference. Symbols must be consecutive in the frame (`m` counts calls). Errors on a
    /// non-finite pilot bin (its index), changing nothing.
    pub fn update(&mut self, bins: &[Cf32; N], symbol: u32) -> Result<(), ProcessError> {
        let nu = self.numerology;
        for b in nu.bins(symbol).filter(|b| b.kind == BinKind::Pilot) {
            let y = bins.get(b.fft_index).copied().unwrap_or_default();
            if !(y.re.is_finite() && y.im.is_finite()) {
                return Err(ProcessError::NonFinite { index: b.fft_index });
            }
        }
        let mut prbs = Prbs15::for_symbol(nu.params().pilots.seed, symbol);
        if !self.have_reference {
            for b in nu.bins(symbol).filter(|b| b.kind == BinKind::Pilot) {
                let x = prbs.next_pilot(1.0);
                if let (Some(r), Some(y)) =
                    (self.reference.get_mut(b.fft_index), bins.get(b.fft_index))
                {
                    *r = (y * x).conj();
                }
            }
            self.have_reference = true;
            return Ok(());
        }
        // The common phasor first (residual CFO and common phase turn every pilot alike);
        // each pilot's phase is measured against it, so a common phase near ±½ turn cannot
        // wrap some pilots and not others.
        let mut c = Cf32::new(0.0, 0.0);
        for b in nu.bins(symbol).filter(|b| b.kind == BinKind::Pilot) {
            let x = prbs.next_pilot(1.0);
            let y = bins.get(b.fft_index).copied().unwrap_or_default();
            let r = self.reference.get(b.fft_index).copied().unwrap_or_default();
            c += y * x * r;
        }
        let c = c.conj();
        let mut prbs = Prbs15::for_symbol(nu.params().pilots.seed, symbol);
        let mut a = 0.0f32;
        for b in nu.bins(symbol).filter(|b| b.kind == BinKind::Pilot) {
            let x = prbs.next_pilot(1.0);
            let y = bins.get(b.fft_index).copied().unwrap_or_default();
            let r = self.reference.get(b.fft_index).copied().unwrap_or_default();
            let z = y * x * r * c;
            let phi = libm::atan2f(z.im, z.re);
            a += (nu.logical_bin(b.used_index) as f32 - self.k_mean) * phi;
        }
        self.count += 1;
        let m = self.count as f32;
        self.sum_a += a;
        self.sum_ma += m * a;
        self.sum_m += m;
        self.sum_m2 += m * m;
        Ok(())
    }

    /// The estimated SCO `ζ` (dimensionless; 20 ppm = 2e-5), once at least two symbols
    /// followed the reference.
    pub fn estimate(&self) -> Option<f32> {
        if self.count < 2 || self.k_spread <= 0.0 {
            return None;
        }
        let c = self.count as f32;
        let m_mean = self.sum_m / c;
        let s_m = self.sum_m2 - c * m_mean * m_mean;
        let beta = (self.sum_ma - m_mean * self.sum_a) / (self.k_spread * s_m);
        let n = N as f32;
        let ns = self.numerology.symbol_len() as f32;
        Some(beta * n / (2.0 * core::f32::consts::PI * ns))
    }
}

/// Rotates the used bins of `bins` by `e^{−j2πk·delay/N}` (logical bin `k`): undoes a window
/// that started `delay` samples late (the advance of a fast sampling clock; negative for an
/// early window).
pub fn rotate_for_delay<const N: usize>(numerology: &Numerology, bins: &mut [Cf32; N], delay: f32) {
    let w = -2.0 * core::f32::consts::PI * delay / N as f32;
    for u in 0..numerology.used_len() {
        let k = numerology.logical_bin(u) as f32;
        let ph = w * k;
        if let Some(b) = bins.get_mut(numerology.fft_index(u)) {
            *b *= Cf32::new(libm::cosf(ph), libm::sinf(ph));
        }
    }
}
