//! Transmitter: bits → Gray constellation → grid with pilots → IFFT → cyclic prefix.
//!
//! The modem sends too. Output samples are unitary-scaled: a symbol's mean sample power is
//! `(data_len + pilot energy) / N`, below 1 when guard bins are empty. Anything that transmits
//! defers to local spectrum regulations (power, bandwidth, duty cycle).

use crate::error::{ConfigError, ProcessError};
use crate::fft::OfdmFft;
use crate::modulation::Modulation;
use crate::numerology::{BinKind, Numerology};
use crate::pilots::Prbs15;
use crate::Cf32;

/// f32 OFDM transmitter for FFT size `N`. Holds one grid of `N` bins.
#[derive(Clone, Debug)]
pub struct Transmitter<F, const N: usize> {
    numerology: Numerology,
    fft: F,
    grid: [Cf32; N],
}

impl<F: OfdmFft<N, Sample = Cf32>, const N: usize> Transmitter<F, N> {
    /// A transmitter for `numerology`; fails when its FFT size is not `N`.
    pub fn new(numerology: Numerology, fft: F) -> Result<Self, ConfigError> {
        if numerology.fft_len() != N {
            return Err(ConfigError::FftSizeMismatch {
                numerology: numerology.fft_len(),
                stage: N,
            });
        }
        Ok(Self {
            numerology,
            fft,
            grid: [Cf32::new(0.0, 0.0); N],
        })
    }

    /// The numerology this transmitter follows.
    pub fn numerology(&self) -> &Numerology {
        &self.numerology
    }

    /// Bits one OFDM symbol `symbol` carries with `modulation`.
    pub fn bits_per_ofdm_symbol(&self, modulation: Modulation, symbol: u32) -> usize {
        self.numerology.data_len(symbol) * modulation.bits_per_symbol()
    }

    /// Fills `grid` (natural FFT order) with the data of `bits` and the pilots of symbol
    /// `symbol`; unused bins are zero. `bits` must hold exactly
    /// [`bits_per_ofdm_symbol`](Self::bits_per_ofdm_symbol) values, each 0 or 1.
    pub fn map_grid(
        &self,
        modulation: Modulation,
        bits: &[u8],
        symbol: u32,
        grid: &mut [Cf32; N],
    ) -> Result<(), ProcessError> {
        fill_grid(&self.numerology, modulation, bits, symbol, grid)
    }

    /// Writes the frame preamble (symbols A and B with their cyclic prefixes, `2(N + L)`
    /// samples; see [`crate::preamble`]) into `out`.
    pub fn preamble(&mut self, out: &mut [Cf32]) -> Result<(), ProcessError> {
        crate::preamble::write_preamble(&self.numerology, &mut self.fft, out)
    }

    /// Modulates one OFDM symbol: `bits` as for [`map_grid`](Self::map_grid), into `out`
    /// (exactly `N + L` samples: cyclic prefix, then the useful part).
    pub fn modulate(
        &mut self,
        modulation: Modulation,
        bits: &[u8],
        symbol: u32,
        out: &mut [Cf32],
    ) -> Result<(), ProcessError> {
        let cp = self.numerology.cp_len();
        if out.len() != N + cp {
            return Err(ProcessError::BufferLength {
                expected: N + cp,
                actual: out.len(),
            });
        }
        fill_grid(&self.numerology, modulation, bits, symbol, &mut self.grid)?;
        self.fft.inverse(&mut self.grid);
        let (prefix, useful) = out.split_at_mut_checked(cp).unwrap_or_default();
        for (o, g) in useful.iter_mut().zip(self.grid.iter()) {
            *o = *g;
        }
        for (o, g) in prefix.iter_mut().zip(self.grid.iter().skip(N - cp)) {
            *o = *g;
        }
        Ok(())
    }
}

/// Checks a symbol's bits for both transmitters: exactly the data bins' worth for
/// `modulation`, each 0 or 1.
pub(crate) fn check_bits(
    numerology: &Numerology,
    modulation: Modulation,
    bits: &[u8],
    symbol: u32,
) -> Result<(), ProcessError> {
    let expected = numerology.data_len(symbol) * modulation.bits_per_symbol();
    if bits.len() != expected {
        return Err(ProcessError::BufferLength {
            expected,
            actual: bits.len(),
        });
    }
    match bits.iter().position(|&b| b > 1) {
        Some(index) => Err(ProcessError::InvalidBit { index }),
        None => Ok(()),
    }
}

/// Grid mapping shared by [`Transmitter::map_grid`] and [`Transmitter::modulate`].
fn fill_grid(
    numerology: &Numerology,
    modulation: Modulation,
    bits: &[u8],
    symbol: u32,
    grid: &mut [Cf32],
) -> Result<(), ProcessError> {
    check_bits(numerology, modulation, bits, symbol)?;
    grid.fill(Cf32::new(0.0, 0.0));
    let amplitude = numerology.pilot_amplitude();
    let mut prbs = Prbs15::for_symbol(numerology.params().pilots.seed, symbol);
    let mut chunks = bits.chunks_exact(modulation.bits_per_symbol());
    for bin in numerology.bins(symbol) {
        let value = match bin.kind {
            BinKind::Pilot => prbs.next_pilot(amplitude),
            BinKind::Data => chunks
                .next()
                .and_then(|c| modulation.map(c))
                .unwrap_or(Cf32::new(0.0, 0.0)),
        };
        if let Some(slot) = grid.get_mut(bin.fft_index) {
            *slot = value;
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::fft::MicroFft;
    use crate::numerology::NumerologyParams;

    #[test]
    fn bad_bits_and_buffers_are_rejected() {
        let nu = Numerology::new(NumerologyParams::default()).unwrap();
        let mut tx = Transmitter::new(nu, MicroFft::<64>::new()).unwrap();
        let n_bits = tx.bits_per_ofdm_symbol(Modulation::Qam16, 0);
        assert_eq!(n_bits, 41 * 4); // 41 data bins (counted in numerology tests) × 4 bits
        let mut bits = [0u8; 164];
        let mut out = [Cf32::new(0.0, 0.0); 72];
        bits[9] = 2;
        assert_eq!(
            tx.modulate(Modulation::Qam16, &bits, 0, &mut out),
            Err(ProcessError::InvalidBit { index: 9 })
        );
        bits[9] = 1;
        assert_eq!(
            tx.modulate(Modulation::Qam16, &bits[..163], 0, &mut out),
            Err(ProcessError::BufferLength {
                expected: 164,
                actual: 163
            })
        );
        assert_eq!(
            tx.modulate(Modulation::Qam16, &bits, 0, &mut out[..70]),
            Err(ProcessError::BufferLength {
                expected: 72,
                actual: 70
            })
        );
        assert!(tx.modulate(Modulation::Qam16, &bits, 0, &mut out).is_ok());
    }

    #[test]
    fn symbol_power_follows_unitary_scaling() {
        // Unitary IFFT (Parseval): mean power of the useful part = Σ|X_k|² / N. With 0 dB
        // pilots on a QPSK grid every used bin has unit energy: 56 / 64.
        let nu = Numerology::new(NumerologyParams::default()).unwrap();
        let mut tx = Transmitter::new(nu, MicroFft::<64>::new()).unwrap();
        let bits = [0u8, 1].repeat(41);
        let mut out = [Cf32::new(0.0, 0.0); 72];
        tx.modulate(Modulation::Qpsk, &bits, 0, &mut out).unwrap();
        let p: f32 = out[8..].iter().map(|v| v.norm_sqr()).sum::<f32>() / 64.0;
        assert!((p - 56.0 / 64.0).abs() < 1e-5, "{p}");
    }
}
