//! Q15 transmitter: bits → Gray constellation (integer tables) → grid → Q15 IFFT → cyclic
//! prefix, with no floating point per symbol.
//!
//! ## Output scale
//!
//! The output is the unitary IFFT of the unit-energy grid scaled by [`TX_BACKOFF`] = 1/4
//! (−12.04 dB), as Q15 fractions at a fixed scale (the IFFT's block exponent is removed with
//! rounding and saturation). The mean sample power is therefore
//! `(Σ|X_k|²/N) / 16`, e.g. `10·log10(56/64) − 12.04 = −12.6 dBFS` for the default numerology,
//! leaving about 12 dB for the OFDM peak-to-average ratio; rarer peaks saturate (never wrap).
//! Anything that transmits defers to local spectrum regulations.

use crate::error::{ConfigError, ProcessError};
use crate::fft::OfdmFft;
use crate::fft_q15::Q15Fft;
use crate::fixed::{sat_round_q15, Cq15};
use crate::modulation::{gray_inverse, Modulation};
use crate::numerology::{BinKind, Numerology};
use crate::pilots::Prbs15;

/// Amplitude of the unit-energy grid at the transmitter output (1/4, i.e. −12.04 dB).
pub const TX_BACKOFF: f64 = 0.25;

/// Q15 level tables (index = PAM level index, 0 = most negative) of the unit-energy grid
/// scaled by `scale`, computed at compile time.
const fn level_table(modulation: Modulation, scale: f64) -> [i16; 16] {
    let levels = 1usize << modulation.bits_per_axis();
    let a = match modulation {
        Modulation::Bpsk => 1.0,
        Modulation::Qpsk => 0.707_106_781_186_547_5,
        Modulation::Qam16 => 0.316_227_766_016_837_94,
        Modulation::Qam64 => 0.154_303_349_962_091_9,
        Modulation::Qam256 => 0.076_696_498_884_737_04,
    };
    let mut t = [0i16; 16];
    let mut i = 0;
    while i < levels {
        let v = a * ((2 * i) as f64 - (levels - 1) as f64) * scale * 32768.0;
        let r = if v >= 0.0 { v + 0.5 } else { v - 0.5 };
        #[allow(clippy::indexing_slicing)]
        {
            t[i] = r as i16;
        }
        i += 1;
    }
    t
}

/// Level tables for one grid scale, one per modulation.
struct Levels {
    tables: [[i16; 16]; 5],
}

impl Levels {
    const fn new(scale: f64) -> Self {
        Self {
            tables: [
                level_table(Modulation::Bpsk, scale),
                level_table(Modulation::Qpsk, scale),
                level_table(Modulation::Qam16, scale),
                level_table(Modulation::Qam64, scale),
                level_table(Modulation::Qam256, scale),
            ],
        }
    }
    fn table(&self, m: Modulation) -> &[i16; 16] {
        let i = match m {
            Modulation::Bpsk => 0,
            Modulation::Qpsk => 1,
            Modulation::Qam16 => 2,
            Modulation::Qam64 => 3,
            Modulation::Qam256 => 4,
        };
        self.tables.get(i).unwrap_or(&[0; 16])
    }
}

/// Grid scale when log2 N is even: the backoff itself.
const LEVELS_EVEN: Levels = Levels::new(TX_BACKOFF);
/// Grid scale when log2 N is odd: the backoff times the IFFT's residual `1/sqrt 2`, so that
/// the output needs only a power-of-two shift.
const LEVELS_ODD: Levels = Levels::new(TX_BACKOFF * core::f64::consts::FRAC_1_SQRT_2);

/// Q15 OFDM transmitter for FFT size `N`.
#[derive(Clone, Debug)]
pub struct TransmitterQ15<const N: usize> {
    numerology: Numerology,
    fft: Q15Fft<N>,
    grid: [Cq15; N],
    pilot_level: i16,
}

impl<const N: usize> TransmitterQ15<N> {
    /// A transmitter for `numerology`; fails when its FFT size is not `N`.
    pub fn new(numerology: Numerology) -> Result<Self, ConfigError> {
        if numerology.fft_len() != N {
            return Err(ConfigError::FftSizeMismatch {
                numerology: numerology.fft_len(),
                stage: N,
            });
        }
        let residual = <Q15Fft<N> as OfdmFft<N>>::RESIDUAL_SCALE;
        let pilot = numerology.pilot_amplitude() * TX_BACKOFF as f32 * residual;
        Ok(Self {
            numerology,
            fft: Q15Fft::new(),
            grid: [Cq15::ZERO; N],
            pilot_level: sat_round_q15(pilot),
        })
    }

    /// Bits one OFDM symbol `symbol` carries with `modulation`.
    pub fn bits_per_ofdm_symbol(&self, modulation: Modulation, symbol: u32) -> usize {
        self.numerology.data_len(symbol) * modulation.bits_per_symbol()
    }

    /// Modulates one symbol into `out` (exactly `N + L` Q15 samples, CP first) at the fixed
    /// output scale of the module docs. `bits` as for the f32 transmitter (one per byte).
    pub fn modulate(
        &mut self,
        modulation: Modulation,
        bits: &[u8],
        symbol: u32,
        out: &mut [Cq15],
    ) -> Result<(), ProcessError> {
        let cp = self.numerology.cp_len();
        if out.len() != N + cp {
            return Err(ProcessError::BufferLength {
                expected: N + cp,
                actual: out.len(),
            });
        }
        crate::transmit::check_bits(&self.numerology, modulation, bits, symbol)?;
        let levels = if Q15Fft::<N>::LOG2_N % 2 == 1 {
            LEVELS_ODD.table(modulation)
        } else {
            LEVELS_EVEN.table(modulation)
        };
        let m = modulation.bits_per_axis();
        let axis = |chunk: &[u8]| {
            let label = chunk
                .iter()
                .fold(0usize, |acc, &b| (acc << 1) | usize::from(b));
            levels.get(gray_inverse(label)).copied().unwrap_or(0)
        };
        self.grid.fill(Cq15::ZERO);
        let mut prbs = Prbs15::for_symbol(self.numerology.params().pilots.seed, symbol);
        let mut chunks = bits.chunks_exact(modulation.bits_per_symbol());
        for bin in self.numerology.bins(symbol) {
            let value = match bin.kind {
                BinKind::Pilot => {
                    let p = self.pilot_level;
                    Cq15::new(
                        if prbs.next_bit() == 0 {
                            p
                        } else {
                            p.saturating_neg()
                        },
                        0,
                    )
                }
                BinKind::Data => match chunks.next() {
                    Some(c) if modulation == Modulation::Bpsk => Cq15::new(axis(c), 0),
                    Some(c) => {
                        let (i_bits, q_bits) = c.split_at_checked(m).unwrap_or((c, c));
                        Cq15::new(axis(i_bits), axis(q_bits))
                    }
                    None => Cq15::ZERO,
                },
            };
            if let Some(slot) = self.grid.get_mut(bin.fft_index) {
                *slot = value;
            }
        }
        let e = self.fft.inverse(&mut self.grid);
        let (prefix, useful) = out.split_at_mut_checked(cp).unwrap_or_default();
        for (o, g) in useful.iter_mut().zip(self.grid.iter()) {
            *o = shift_sample(*g, e);
        }
        for (o, u) in prefix.iter_mut().zip(useful.iter().skip(N - cp)) {
            *o = *u;
        }
        Ok(())
    }
}

/// `v · 2^e` with rounding (right shifts) and saturation (left shifts).
fn shift_sample(v: Cq15, e: i32) -> Cq15 {
    let f = |x: i16| -> i16 {
        let x = i32::from(x);
        let y = if e >= 16 {
            x.signum() << 16 // saturates below unless x is 0
        } else if e >= 0 {
            x << e
        } else {
            let k = (-e).min(31) as u32;
            (x + ((1 << k) >> 1)) >> k
        };
        crate::fixed::sat16(y)
    };
    Cq15::new(f(v.re), f(v.im))
}
