//! The f32 receiver for one OFDM symbol: front (CP, FFT) → channel estimation → common phase
//! correction → one-tap equalization → SINR-weighted max-log LLRs, all into caller buffers.

use crate::demap::llr_max_log;
use crate::equalize::{common_phase, equalize, Equalizer};
use crate::error::{ConfigError, ProcessError};
use crate::estimate::{ChannelEstimator, EstimatorConfig};
use crate::fft::OfdmFft;
use crate::front::Front;
use crate::modulation::Modulation;
use crate::numerology::{BinKind, Numerology};
use crate::pilots::Prbs15;
use crate::Cf32;

/// Receiver configuration.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct ReceiverConfig {
    /// Channel estimator design.
    pub estimator: EstimatorConfig,
    /// Equalizer kind.
    pub equalizer: Equalizer,
    /// Correct the common phase error measured on each symbol's pilots.
    pub cpe: bool,
}

impl Default for ReceiverConfig {
    /// Default estimator, MMSE equalizer, CPE correction on.
    fn default() -> Self {
        Self {
            estimator: EstimatorConfig::default(),
            equalizer: Equalizer::Mmse,
            cpe: true,
        }
    }
}

/// What [`Receiver::receive`] wrote: the number of data bins (symbols, SINRs) and of LLRs.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct SymbolCounts {
    /// Data bins written to `equalized` and `sinr`.
    pub data_bins: usize,
    /// LLRs written to `llrs`.
    pub llrs: usize,
}

/// One-symbol receiver. `N` FFT size, `K` frequency taps per bin, `M` time history depth.
#[derive(Clone, Debug)]
pub struct Receiver<F, const N: usize, const K: usize, const M: usize> {
    numerology: Numerology,
    front: Front<F, N>,
    estimator: ChannelEstimator<N, K, M>,
    config: ReceiverConfig,
    bins: [Cf32; N],
    /// Noise-plus-interference variance per used bin (the LLR weighting's N0).
    noise: [f32; N],
    /// The common phase applied to the latest symbol's estimate.
    rot: Cf32,
}

impl<F: OfdmFft<N, Sample = Cf32>, const N: usize, const K: usize, const M: usize>
    Receiver<F, N, K, M>
{
    /// Builds the receiver; all design work (estimator coefficients) happens here.
    pub fn new(
        numerology: &Numerology,
        fft: F,
        config: ReceiverConfig,
    ) -> Result<Self, ConfigError> {
        Ok(Self {
            numerology: *numerology,
            front: Front::new(numerology, fft)?,
            estimator: ChannelEstimator::new(numerology, config.estimator)?,
            config,
            bins: [Cf32::new(0.0, 0.0); N],
            noise: [config.estimator.noise_var; N],
            rot: Cf32::new(1.0, 0.0),
        })
    }

    /// Sets the noise-plus-interference variance of each used bin (ascending frequency, at
    /// least `used_len` values, unit-energy data: N0 per bin) that weights the LLRs from now
    /// on, e.g. from [`crate::noise_track::NoiseTracker::bin_noise`]. Errors (nothing changed):
    /// too short, or a value that is not finite and positive.
    pub fn set_bin_noise(&mut self, per_used_bin: &[f32]) -> Result<(), ProcessError> {
        let used = self.numerology.used_len();
        let v = per_used_bin.get(..used).ok_or(ProcessError::BufferLength {
            expected: used,
            actual: per_used_bin.len(),
        })?;
        if let Some(index) = v.iter().position(|x| !(x.is_finite() && *x > 0.0)) {
            return Err(ProcessError::NonFinite { index });
        }
        for (d, s) in self.noise.iter_mut().zip(v) {
            *d = *s;
        }
        Ok(())
    }

    /// Back to one noise variance for every bin (the configured `noise_var`).
    pub fn clear_bin_noise(&mut self) {
        self.noise = [self.config.estimator.noise_var; N];
    }

    /// The noise-plus-interference variance per used bin in use.
    pub fn bin_noise(&self) -> &[f32] {
        self.noise
            .get(..self.numerology.used_len())
            .unwrap_or_default()
    }

    /// The common phase (unit phasor) applied to the channel estimate of the latest symbol
    /// (1 when CPE correction is off).
    pub fn common_phase(&self) -> Cf32 {
        self.rot
    }

    /// The channel estimator (its latest estimate and predicted MSE per used bin).
    pub fn estimator(&self) -> &ChannelEstimator<N, K, M> {
        &self.estimator
    }

    /// The FFT output of the latest symbol (natural order).
    pub fn bins(&self) -> &[Cf32; N] {
        &self.bins
    }

    /// Forgets the estimator's history (new frame).
    pub fn reset(&mut self) {
        self.estimator.reset();
    }

    /// Receives symbol `symbol` from its `N + L` samples. Writes the equalized data symbols
    /// (ascending frequency), their SINR (linear) and `bits_per_symbol` LLRs per data bin.
    /// Buffers may be longer than needed.
    ///
    /// Errors: wrong sample count, NaN/Inf input, or output buffers too short; nothing is
    /// written and the estimator state is unchanged on error.
    pub fn receive(
        &mut self,
        samples: &[Cf32],
        symbol: u32,
        modulation: Modulation,
        equalized: &mut [Cf32],
        sinr: &mut [f32],
        llrs: &mut [f32],
    ) -> Result<SymbolCounts, ProcessError> {
        self.check_outputs(symbol, modulation, equalized, sinr, llrs)?;
        let mut bins = self.bins;
        self.front.demodulate(samples, &mut bins)?;
        self.bins = bins;
        self.process(symbol, modulation, equalized, sinr, llrs)
    }

    /// As [`Self::receive`], from FFT output (natural order, unitary scale) instead of samples.
    pub fn receive_bins(
        &mut self,
        bins: &[Cf32; N],
        symbol: u32,
        modulation: Modulation,
        equalized: &mut [Cf32],
        sinr: &mut [f32],
        llrs: &mut [f32],
    ) -> Result<SymbolCounts, ProcessError> {
        self.check_outputs(symbol, modulation, equalized, sinr, llrs)?;
        if let Some(index) = bins
            .iter()
            .position(|v| !(v.re.is_finite() && v.im.is_finite()))
        {
            return Err(ProcessError::NonFinite { index });
        }
        self.bins = *bins;
        self.process(symbol, modulation, equalized, sinr, llrs)
    }

    fn check_outputs(
        &self,
        symbol: u32,
        modulation: Modulation,
        equalized: &[Cf32],
        sinr: &[f32],
        llrs: &[f32],
    ) -> Result<(), ProcessError> {
        let d = self.numerology.data_len(symbol);
        let need = [
            (equalized.len(), d),
            (sinr.len(), d),
            (llrs.len(), d * modulation.bits_per_symbol()),
        ];
        for (actual, expected) in need {
            if actual < expected {
                return Err(ProcessError::BufferLength { expected, actual });
            }
        }
        Ok(())
    }

    fn process(
        &mut self,
        symbol: u32,
        modulation: Modulation,
        equalized: &mut [Cf32],
        sinr: &mut [f32],
        llrs: &mut [f32],
    ) -> Result<SymbolCounts, ProcessError> {
        let bins = &self.bins;
        self.estimator.update(bins, symbol)?;
        let nu = &self.numerology;
        let h = self.estimator.estimate();
        let mse = self.estimator.mse();
        // Common phase error against the (possibly older) estimate, from this symbol's pilots.
        let rot = if self.config.cpe {
            let a = nu.pilot_amplitude();
            let mut prbs = Prbs15::for_symbol(nu.params().pilots.seed, symbol);
            common_phase(
                nu.bins(symbol)
                    .filter(|b| b.kind == BinKind::Pilot)
                    .map(|b| {
                        let x = prbs.next_pilot(a);
                        (
                            bins.get(b.fft_index).copied().unwrap_or_default(),
                            h.get(b.used_index).copied().unwrap_or_default(),
                            x,
                        )
                    }),
            )
        } else {
            Cf32::new(1.0, 0.0)
        };
        self.rot = rot;
        let bits = modulation.bits_per_symbol();
        let mut count = 0usize;
        for b in nu.bins(symbol).filter(|b| b.kind == BinKind::Data) {
            let y = bins.get(b.fft_index).copied().unwrap_or_default();
            let hk = h.get(b.used_index).copied().unwrap_or_default() * rot;
            let e = mse.get(b.used_index).copied().unwrap_or(1.0);
            let n0 = self
                .noise
                .get(b.used_index)
                .copied()
                .unwrap_or(self.config.estimator.noise_var);
            let (x, s) = equalize(self.config.equalizer, y, hk, n0, e);
            if let (Some(xo), Some(so)) = (equalized.get_mut(count), sinr.get_mut(count)) {
                *xo = x;
                *so = s;
            }
            if let Some(out) = llrs.get_mut(count * bits..(count + 1) * bits) {
                llr_max_log(modulation, x, s, out)?;
            }
            count += 1;
        }
        Ok(SymbolCounts {
            data_bins: count,
            llrs: count * bits,
        })
    }
}
