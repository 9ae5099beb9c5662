//! Link simulation: the core's transmitter and receiver joined through a simulated channel,
//! counting bit errors until a stop rule is met.
//!
//! This first version runs the AWGN link with an ideal channel (H = 1, no equalizer needed):
//! transmit → add noise → CP removal and FFT → max-log LLRs weighted by `1/N0` → sign
//! decisions. Later issues add fading, estimation and equalization between FFT and demapper.

use anyhow::Result;
use flatbin::demap::llr_max_log;
use flatbin::fft::MicroFft;
use flatbin::front::Front;
use flatbin::transmit::Transmitter;
use flatbin::{Cf32, Modulation, Numerology};
use rand::RngExt;
use serde::Serialize;

use crate::noise::{add_awgn, n0_for_es_n0_db};
use crate::rng::HarnessRng;

/// When to stop counting at one point: after `min_errors` bit errors, or after `max_bits`
/// bits, whichever comes first.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
pub struct StopRule {
    /// Bit errors after which the point is precise enough.
    pub min_errors: u64,
    /// Upper bound on the bits simulated at one point.
    pub max_bits: u64,
}

/// Bit errors counted at one point.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
pub struct ErrorCount {
    /// Bits compared.
    pub bits: u64,
    /// Bits in error.
    pub errors: u64,
    /// OFDM symbols simulated.
    pub symbols: u64,
}

impl ErrorCount {
    /// Measured bit error rate (0 when no bits were compared).
    pub fn ber(&self) -> f64 {
        if self.bits == 0 {
            0.0
        } else {
            self.errors as f64 / self.bits as f64
        }
    }
}

/// Half-width of the acceptance interval for a measured error rate around the expected rate
/// `p` after `n` bits: `4·sqrt(p(1-p)/n)` (REFERENCES.md tolerance rule for Monte Carlo error
/// rates; binomial standard error, common practice).
pub fn ber_tolerance(p: f64, n: u64) -> f64 {
    if n == 0 {
        return f64::INFINITY;
    }
    4.0 * (p * (1.0 - p) / n as f64).sqrt()
}

/// Runs `f::<N>(args)` with the const FFT size equal to the runtime `fft_len`.
#[macro_export]
macro_rules! with_fft_len {
    ($fft_len:expr, $f:ident ( $($arg:expr),* $(,)? )) => {
        match $fft_len {
            16 => $f::<16>($($arg),*),
            32 => $f::<32>($($arg),*),
            64 => $f::<64>($($arg),*),
            128 => $f::<128>($($arg),*),
            256 => $f::<256>($($arg),*),
            512 => $f::<512>($($arg),*),
            1024 => $f::<1024>($($arg),*),
            2048 => $f::<2048>($($arg),*),
            4096 => $f::<4096>($($arg),*),
            n => Err(anyhow::anyhow!(flatbin::ConfigError::FftSizeUnsupported { fft_len: n })),
        }
    };
}

/// Counts bit errors of `modulation` over AWGN at `es_n0_db` (Es/N0 per data subcarrier)
/// with an ideal channel, drawing bits and noise from `rng`, until `stop` is met.
pub fn awgn_errors(
    numerology: &Numerology,
    modulation: Modulation,
    es_n0_db: f64,
    rng: &mut HarnessRng,
    stop: StopRule,
) -> Result<ErrorCount> {
    let mut unit = |_: &mut HarnessRng| Cf32::new(1.0, 0.0);
    with_fft_len!(
        numerology.fft_len(),
        count_errors(numerology, modulation, es_n0_db, rng, stop, &mut unit)
    )
    .map(|(count, _)| count)
}

/// Bit errors of `modulation` over flat Rayleigh block fading with ideal channel knowledge:
/// every OFDM symbol sees one independent gain `h` (a fresh [`SosFading`] tap at a random
/// time, constant over the symbol), AWGN at `es_n0_db` (mean Es/N0 per data subcarrier), and
/// the receiver divides by the true `h` and weights its LLRs by `|h|²/N0`.
///
/// Returns the count and the standard deviation of the per-symbol BER (errors are correlated
/// inside a symbol; the number of independent draws is the number of symbols).
///
/// [`SosFading`]: crate::channel::sos::SosFading
pub fn flat_rayleigh_errors(
    numerology: &Numerology,
    modulation: Modulation,
    es_n0_db: f64,
    rng: &mut HarnessRng,
    stop: StopRule,
) -> Result<(ErrorCount, f64)> {
    use crate::channel::sos::{FadingParams, SosFading};
    let fading = FadingParams::rayleigh(
        100.0,
        f64::from(numerology.sample_rate_hz()),
        numerology.fft_len(),
    );
    let mut draw = |rng: &mut HarnessRng| {
        let h = SosFading::new(&fading, rng).gain_exact(rng.random_range(0..1_000_000));
        Cf32::new(h.re as f32, h.im as f32)
    };
    with_fft_len!(
        numerology.fft_len(),
        count_errors(numerology, modulation, es_n0_db, rng, stop, &mut draw)
    )
}

/// The link loop shared by the error counters: per OFDM symbol, random bits → transmitter →
/// the flat gain `gain(rng)` → AWGN → receiver front → division by the gain (ideal channel
/// knowledge) → max-log LLRs weighted by `|h|²/N0` → sign decisions. Returns the count and the
/// standard deviation of the per-symbol BER.
// Not inlined: `with_fft_len!` calls every size's instance from one function, and inlined
// they would share one stack frame sized for N = 4096 (a rayon worker has 2 MiB).
#[inline(never)]
fn count_errors<const N: usize>(
    numerology: &Numerology,
    modulation: Modulation,
    es_n0_db: f64,
    rng: &mut HarnessRng,
    stop: StopRule,
    gain: &mut dyn FnMut(&mut HarnessRng) -> Cf32,
) -> Result<(ErrorCount, f64)> {
    let mut tx = Transmitter::new(*numerology, MicroFft::<N>::new())?;
    let mut front = Front::new(numerology, MicroFft::<N>::new())?;
    let n0 = n0_for_es_n0_db(es_n0_db);
    let k = modulation.bits_per_symbol();
    let mut samples = vec![Cf32::new(0.0, 0.0); numerology.symbol_len()];
    let mut bins: Box<[Cf32; N]> = Box::new([Cf32::new(0.0, 0.0); N]);
    let mut bits = Vec::with_capacity(numerology.max_data_len() * k);
    let mut llrs = [0.0f32; 8];
    let mut count = ErrorCount {
        bits: 0,
        errors: 0,
        symbols: 0,
    };
    let (mut sum, mut sum_sq) = (0.0f64, 0.0f64);
    let mut symbol: u32 = 0;
    while count.errors < stop.min_errors && count.bits < stop.max_bits {
        bits.clear();
        bits.extend(
            (0..tx.bits_per_ofdm_symbol(modulation, symbol)).map(|_| rng.random::<u8>() & 1),
        );
        tx.modulate(modulation, &bits, symbol, &mut samples)?;
        let h = gain(rng);
        samples.iter_mut().for_each(|s| *s *= h);
        add_awgn(rng, &mut samples, n0);
        front.demodulate(&samples, &mut bins)?;
        let weight = (f64::from(h.norm_sqr()) / n0) as f32;
        let mut errors = 0u64;
        for (fft_index, sent) in numerology.data_bins(symbol).zip(bits.chunks_exact(k)) {
            llr_max_log(modulation, bins[fft_index] / h, weight, &mut llrs)?;
            for (l, b) in llrs.iter().zip(sent) {
                errors += u64::from(u8::from(*l < 0.0) != *b);
            }
        }
        let ber = errors as f64 / bits.len().max(1) as f64;
        sum += ber;
        sum_sq += ber * ber;
        count.errors += errors;
        count.bits += bits.len() as u64;
        count.symbols += 1;
        symbol = symbol.wrapping_add(1);
    }
    let n = count.symbols as f64;
    let sd = if n > 1.0 {
        ((sum_sq - sum * sum / n) / (n - 1.0)).max(0.0).sqrt()
    } else {
        f64::INFINITY
    };
    Ok((count, sd))
}
