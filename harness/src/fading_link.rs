//! The link over a multipath fading channel, with ideal channel knowledge or with the core's
//! receiver (pilot estimation, equalization, SINR-weighted LLRs).
//!
//! Frames of `symbols_per_frame` OFDM symbols go through a fresh tapped delay line each (so
//! frames are independent channel draws), then AWGN at the Es/N0 per data subcarrier, then:
//!
//! * [`Csi::Ideal`]: the receiver front, division by the true frequency response of the held
//!   channel, LLRs weighted by `|H|²/N0`. Needs [`Variation::HeldPerBlock`] of one symbol, where
//!   the true response of each symbol is exact (no ICI).
//! * [`Csi::Estimated`]: the core's [`Receiver`] (`K = 4` frequency taps, `M = 4` history).
//!
//! Besides bit errors it measures the estimator's MSE against the true response (held channel
//! only) per used bin, the quantity REFERENCES item 6 predicts.

use anyhow::{bail, Result};
use flatbin::demap::llr_max_log;
use flatbin::fft::MicroFft;
use flatbin::front::Front;
use flatbin::receiver::{Receiver, ReceiverConfig};
use flatbin::transmit::Transmitter;
use flatbin::{Cf32, Modulation, Numerology};
use rand::RngExt;
use serde::Serialize;

use crate::channel::sos::FadingParams;
use crate::channel::tdl::{Tdl, Variation};
use crate::link::{ErrorCount, StopRule};
use crate::noise::{add_awgn, n0_for_es_n0_db};
use crate::rng::HarnessRng;

/// Frequency taps per bin of the harness's receiver.
pub const RX_TAPS: usize = 4;
/// Time history depth of the harness's receiver.
pub const RX_HISTORY: usize = 4;

/// Channel knowledge at the receiver.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Csi {
    /// The true frequency response (held channel only).
    Ideal,
    /// The core receiver with this configuration.
    Estimated(ReceiverConfig),
}

/// The fading channel of a link.
#[derive(Clone, Debug, PartialEq)]
pub struct FadingChannel {
    /// Taps `(delay, power)` on the sample grid, powers summing to 1.
    pub taps: Vec<(usize, f64)>,
    /// Maximum Doppler shift, Hz (classical spectrum on every tap).
    pub doppler_hz: f64,
    /// Per-sample variation, or held per symbol.
    pub held: bool,
    /// OFDM symbols per frame (one channel draw per frame).
    pub symbols_per_frame: usize,
    /// First symbol of each frame whose estimation error counts towards the MSE (skip the
    /// time filter's warm-up).
    pub mse_from_symbol: usize,
    /// Fewest frames (independent channel draws) before the stop rule may end a point: errors
    /// in fading come in bursts, so the error count alone says little about precision.
    pub min_frames: u64,
}

/// What [`fading_errors`] counted.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct FadingCount {
    /// Bit errors.
    pub count: ErrorCount,
    /// Frames (independent channel draws).
    pub frames: u64,
    /// Standard deviation of the per-frame BER (for tolerances from the number of draws).
    pub frame_ber_sd: f64,
    /// Mean squared estimation error per used bin over all symbols (held channel and
    /// estimated CSI only; `None` otherwise).
    pub mse: Option<f64>,
    /// The same, over each symbol's pilot bins only.
    pub mse_pilots: Option<f64>,
}

/// Counts bit errors of `modulation` at `es_n0_db` over `channel` with `csi`, until `stop`.
pub fn fading_errors(
    numerology: &Numerology,
    modulation: Modulation,
    es_n0_db: f64,
    channel: &FadingChannel,
    csi: Csi,
    rng: &mut HarnessRng,
    stop: StopRule,
) -> Result<FadingCount> {
    crate::with_fft_len!(
        numerology.fft_len(),
        run(numerology, modulation, es_n0_db, channel, csi, rng, stop)
    )
}

/// True frequency response of the held channel, natural FFT order, at unitary scale (the
/// gain a bin sees): `H_k = Σ_l g_l e^{−j2πk d_l/N}`.
fn true_response<const N: usize>(line: &Tdl, out: &mut [Cf32; N]) {
    let taps = line.held_taps();
    for (k, h) in out.iter_mut().enumerate() {
        *h = taps.iter().fold(Cf32::new(0.0, 0.0), |acc, &(d, g)| {
            let ph = -2.0 * std::f64::consts::PI * ((k * d) % N) as f64 / N as f64;
            acc + g * Cf32::new(ph.cos() as f32, ph.sin() as f32)
        });
    }
}

#[allow(clippy::too_many_arguments)]
// Not inlined: `with_fft_len!` calls every size's instance from one function, and inlined
// they would share one stack frame sized for N = 4096 (a rayon worker has 2 MiB).
#[inline(never)]
fn run<const N: usize>(
    numerology: &Numerology,
    modulation: Modulation,
    es_n0_db: f64,
    channel: &FadingChannel,
    csi: Csi,
    rng: &mut HarnessRng,
    stop: StopRule,
) -> Result<FadingCount> {
    if matches!(csi, Csi::Ideal) && !channel.held {
        bail!("ideal channel knowledge needs a channel held over each symbol");
    }
    let fs = f64::from(numerology.sample_rate_hz());
    let sym_len = numerology.symbol_len();
    let params = FadingParams::rayleigh(channel.doppler_hz, fs, N);
    let variation = if channel.held {
        Variation::HeldPerBlock(sym_len)
    } else {
        Variation::Continuous
    };
    let mut tx = Transmitter::new(*numerology, MicroFft::<N>::new())?;
    let mut front = Front::new(numerology, MicroFft::<N>::new())?;
    let mut receiver = match csi {
        Csi::Estimated(cfg) => Some(Box::new(
            Receiver::<MicroFft<N>, N, RX_TAPS, RX_HISTORY>::new(
                numerology,
                MicroFft::<N>::new(),
                cfg,
            )?,
        )),
        Csi::Ideal => None,
    };
    let n0 = n0_for_es_n0_db(es_n0_db);
    let k = modulation.bits_per_symbol();
    let d_max = numerology.max_data_len();
    let mut bits = Vec::with_capacity(d_max * k);
    let mut samples = vec![Cf32::new(0.0, 0.0); sym_len];
    let mut rx = vec![Cf32::new(0.0, 0.0); sym_len];
    let mut bins: Box<[Cf32; N]> = Box::new([Cf32::new(0.0, 0.0); N]);
    let mut h_true: Box<[Cf32; N]> = Box::new([Cf32::new(0.0, 0.0); N]);
    let (mut eq, mut sinr, mut llrs) = (
        vec![Cf32::new(0.0, 0.0); d_max],
        vec![0.0f32; d_max],
        vec![0.0f32; d_max * k],
    );
    let mut count = ErrorCount {
        bits: 0,
        errors: 0,
        symbols: 0,
    };
    let (mut frames, mut sum, mut sum_sq) = (0u64, 0.0f64, 0.0f64);
    let (mut se, mut se_n, mut sp, mut sp_n) = (0.0f64, 0u64, 0.0f64, 0u64);
    while (count.errors < stop.min_errors || frames < channel.min_frames)
        && count.bits < stop.max_bits
    {
        let mut line = Tdl::new(&channel.taps, &params, variation, rng);
        if let Some(r) = receiver.as_mut() {
            r.reset();
        }
        let (mut frame_errors, mut frame_bits) = (0u64, 0u64);
        for s in 0..channel.symbols_per_frame {
            let symbol = s as u32;
            bits.clear();
            bits.extend(
                (0..tx.bits_per_ofdm_symbol(modulation, symbol)).map(|_| rng.random::<u8>() & 1),
            );
            tx.modulate(modulation, &bits, symbol, &mut samples)?;
            line.process(&samples, &mut rx);
            add_awgn(rng, &mut rx, n0);
            if channel.held {
                true_response(&line, &mut h_true);
            }
            let mut errors = 0u64;
            match receiver.as_mut() {
                None => {
                    front.demodulate(&rx, &mut bins)?;
                    let mut out = [0.0f32; 8];
                    for (idx, sent) in numerology.data_bins(symbol).zip(bits.chunks_exact(k)) {
                        let h = h_true[idx];
                        let w = (f64::from(h.norm_sqr()) / n0) as f32;
                        let y = if h.norm_sqr() > 0.0 {
                            bins[idx] / h
                        } else {
                            Cf32::new(0.0, 0.0)
                        };
                        llr_max_log(modulation, y, w, &mut out)?;
                        for (l, b) in out.iter().zip(sent) {
                            errors += u64::from(u8::from(*l < 0.0) != *b);
                        }
                    }
                }
                Some(r) => {
                    let c = r.receive(&rx, symbol, modulation, &mut eq, &mut sinr, &mut llrs)?;
                    for (l, b) in llrs[..c.llrs].iter().zip(&bits) {
                        errors += u64::from(u8::from(*l < 0.0) != *b);
                    }
                    if channel.held && s >= channel.mse_from_symbol {
                        for (u, e) in r.estimator().estimate().iter().enumerate() {
                            let err = f64::from((e - h_true[numerology.fft_index(u)]).norm_sqr());
                            se += err;
                            se_n += 1;
                            if numerology.is_pilot(u, symbol) {
                                sp += err;
                                sp_n += 1;
                            }
                        }
                    }
                }
            }
            frame_errors += errors;
            frame_bits += bits.len() as u64;
            count.errors += errors;
            count.bits += bits.len() as u64;
            count.symbols += 1;
        }
        let ber = frame_errors as f64 / frame_bits.max(1) as f64;
        sum += ber;
        sum_sq += ber * ber;
        frames += 1;
    }
    let n = frames as f64;
    let frame_ber_sd = if n > 1.0 {
        ((sum_sq - sum * sum / n) / (n - 1.0)).max(0.0).sqrt()
    } else {
        f64::INFINITY
    };
    Ok(FadingCount {
        count,
        frames,
        frame_ber_sd,
        mse: (se_n > 0).then(|| se / se_n as f64),
        mse_pilots: (sp_n > 0).then(|| sp / sp_n as f64),
    })
}
