//! Receive front: strip the cyclic prefix and transform one OFDM symbol to bins.
//!
//! The front checks its input once per symbol (length, finite values) before it writes
//! anything, so a rejected symbol leaves the caller's bins untouched.

use crate::error::{ConfigError, ProcessError};
use crate::fft::OfdmFft;
use crate::numerology::Numerology;
use crate::Cf32;

/// CP removal and FFT for one symbol of `N + L` f32 samples.
#[derive(Clone, Debug)]
pub struct Front<F, const N: usize> {
    fft: F,
    cp_len: usize,
}

impl<F: OfdmFft<N, Sample = Cf32>, const N: usize> Front<F, N> {
    /// A front for `numerology`; fails when the numerology's FFT size is not `N`.
    pub fn new(numerology: &Numerology, fft: F) -> Result<Self, ConfigError> {
        if numerology.fft_len() != N {
            return Err(ConfigError::FftSizeMismatch {
                numerology: numerology.fft_len(),
                stage: N,
            });
        }
        Ok(Self {
            fft,
            cp_len: numerology.cp_len(),
        })
    }

    /// Samples per symbol this front expects, `N + L`.
    pub fn symbol_len(&self) -> usize {
        N + self.cp_len
    }

    /// Transforms `samples` (exactly `N + L`, CP first) into `bins` (natural FFT order,
    /// unitary scale). Returns the block exponent of `bins` (0 for f32).
    ///
    /// Errors: wrong length; a NaN or infinite sample (its index is reported). On error
    /// `bins` is unchanged.
    pub fn demodulate(
        &mut self,
        samples: &[Cf32],
        bins: &mut [Cf32; N],
    ) -> Result<i32, ProcessError> {
        if samples.len() != N + self.cp_len {
            return Err(ProcessError::BufferLength {
                expected: N + self.cp_len,
                actual: samples.len(),
            });
        }
        if let Some(index) = samples
            .iter()
            .position(|v| !(v.re.is_finite() && v.im.is_finite()))
        {
            return Err(ProcessError::NonFinite { index });
        }
        for (b, s) in bins.iter_mut().zip(samples.iter().skip(self.cp_len)) {
            *b = *s;
        }
        Ok(self.fft.forward(bins))
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::fft::MicroFft;
    use crate::numerology::NumerologyParams;

    #[test]
    fn bad_input_is_rejected_and_bins_stay_untouched() {
        let nu = Numerology::new(NumerologyParams::default()).unwrap();
        let mut front = Front::new(&nu, MicroFft::<64>::new()).unwrap();
        let mut bins = [Cf32::new(7.0, 7.0); 64];
        let mut samples = [Cf32::new(0.1, 0.0); 72];
        samples[40] = Cf32::new(f32::NAN, 0.0);
        assert_eq!(
            front.demodulate(&samples, &mut bins),
            Err(ProcessError::NonFinite { index: 40 })
        );
        samples[40] = Cf32::new(0.0, f32::INFINITY);
        assert_eq!(
            front.demodulate(&samples, &mut bins),
            Err(ProcessError::NonFinite { index: 40 })
        );
        assert_eq!(
            front.demodulate(&samples[..71], &mut bins),
            Err(ProcessError::BufferLength {
                expected: 72,
                actual: 71
            })
        );
        assert!(bins.iter().all(|b| *b == Cf32::new(7.0, 7.0)));
    }

    #[test]
    fn size_mismatch_is_a_config_error() {
        let nu = Numerology::new(NumerologyParams::default()).unwrap();
        assert_eq!(
            Front::new(&nu, MicroFft::<128>::new()).err(),
            Some(ConfigError::FftSizeMismatch {
                numerology: 64,
                stage: 128
            })
        );
    }
}
