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
