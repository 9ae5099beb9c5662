//! Deterministic OFDM frames and receiver settings for the Q15 receiver checks
//! (`firmware/src/bin/rx_vectors.rs`, `rx_cost.rs`, and their host side in `xtask`).
//!
//! A frame is made of `RX_SYMBOLS` symbols of the Q15 transmitter
//! ([`flatbin::transmit_q15::TransmitterQ15`], integer per symbol) carrying bits from
//! [`XorShift64`], run through a fixed multipath channel (Q15 taps, integer convolution across
//! symbol boundaries) scaled to the case's level, plus complex Gaussian noise from
//! [`for_each_sample`] (the same `libm` Box–Muller as the FFT vectors) and, in some symbols, a
//! burst of samples clipped at full scale. Every float step goes through `libm` or is a
//! single IEEE operation, so the samples are the same bits on the host and on both cores; the
//! firmware prints an FNV-1a hash of each symbol's samples to show it.
//!
//! The receiver designs ([`RX_DESIGNS`]) are built on the host only (`DesignQ15::new` uses
//! floating point): the firmware's `build.rs` writes them out as `static` tables, and the
//! firmware prints [`design_hash`] of the table it uses so the host can check it against its
//! own design.

use flatbin::estimate::{EstimatorConfig, FreqInterpolation, TimeFilter};
use flatbin::fixed::Cq15;
use flatbin::fixed_math::Scaled;
use flatbin::receiver_q15::{DesignQ15, DigitalGain, ReceiverQ15Config};
use flatbin::transmit_q15::TransmitterQ15;
use flatbin::{Modulation, Numerology, NumerologyParams};

use crate::{for_each_sample, seed, Fnv1a32, Kind, XorShift64, FULL_SCALE};

/// Frequency taps of the receiver designs.
pub const RX_K: usize = 4;
/// Time observations of the receiver designs.
pub const RX_M: usize = 4;
/// Symbols per frame: more than `RX_M`, so the time stage's history fills and wraps.
pub const RX_SYMBOLS: u32 = 6;
/// Thermal noise of every case, dB below the signal (Es/N0 with unit-energy symbols).
pub const RX_SNR_DB: i32 = 20;
/// N0 the designs assume, `10^(-RX_SNR_DB/10)`.
pub const RX_NOISE_VAR: f32 = 0.01;

/// The numerology of the receiver checks at FFT size `n`: CP `n/8`, guards `n/16` and
/// `n/16 − 1` (`n − n/8` used bins with the DC null), the default pilot comb (every 4th used
/// bin and the last).
pub fn numerology_params(n: usize) -> NumerologyParams {
    NumerologyParams {
        fft_len: n,
        cp_len: n / 8,
        guard_low_bins: n / 16,
        guard_high_bins: (n / 16).saturating_sub(1),
        ..NumerologyParams::default()
    }
}

/// One receiver design (the coefficients depend on these, not on the modulation).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct RxDesignSpec {
    /// Name of the design (table name suffix in the firmware).
    pub label: &'static str,
    /// Time stage (the frequency stage is always the banded LMMSE).
    pub time: TimeFilter,
    /// Level the design assumes at the FFT input (after the digital gain), dBFS.
    pub signal_dbfs: f32,
}

/// The designs: frequency LMMSE with time `Latest` at −12 and −40 dBFS, and the 2-D case
/// (time LMMSE) at −12 dBFS.
pub const RX_DESIGNS: [RxDesignSpec; 3] = [
    RxDesignSpec {
        label: "LATEST_M12",
        time: TimeFilter::Latest,
        signal_dbfs: -12.0,
    },
    RxDesignSpec {
        label: "LATEST_M40",
        time: TimeFilter::Latest,
        signal_dbfs: -40.0,
    },
    RxDesignSpec {
        label: "LMMSE2D_M12",
        time: TimeFilter::Lmmse,
        signal_dbfs: -12.0,
    },
];

/// The receiver settings of design `spec` (host: `DesignQ15::new` takes them).
pub fn receiver_config(spec: &RxDesignSpec) -> ReceiverQ15Config {
    let mut estimator = EstimatorConfig {
        freq: FreqInterpolation::Lmmse,
        time: spec.time,
        noise_var: RX_NOISE_VAR,
        ..EstimatorConfig::default()
    };
    // The fixed channel below has an RMS delay of about one sample (4 µs at 250 kHz).
    estimator.model.rms_delay_s = 4.0e-6;
    ReceiverQ15Config {
        estimator,
        signal_dbfs: spec.signal_dbfs,
        ..ReceiverQ15Config::default()
    }
}

/// +28 dB as a [`DigitalGain`]: `25722 · 2^(5 − 15)` = 25.119 (`10^(28/20)` = 25.119; the
/// host checks it equals `DigitalGain::from_db(28.0)`).
pub const GAIN_28_DB: DigitalGain = DigitalGain {
    mant: 25_722,
    shift: 5,
};

/// One receiver check: a frame, the design that receives it, the digital gain.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct RxCase {
    /// Label printed by the firmware and the host (no spaces).
    pub label: &'static str,
    /// Constellation of the data bins.
    pub modulation: Modulation,
    /// Signal level at the ADC (before the digital gain), dBFS.
    pub level_dbfs: i32,
    /// Digital gain the receiver applies.
    pub gain: DigitalGain,
    /// Index into [`RX_DESIGNS`].
    pub design: usize,
}

/// The receiver cases. Symbols 1 and 4 of every frame carry a burst of clipped samples.
pub const RX_CASES: [RxCase; 6] = [
    RxCase {
        label: "qpsk-12dBFS",
        modulation: Modulation::Qpsk,
        level_dbfs: -12,
        gain: DigitalGain::UNITY,
        design: 0,
    },
    RxCase {
        label: "qam16-12dBFS",
        modulation: Modulation::Qam16,
        level_dbfs: -12,
        gain: DigitalGain::UNITY,
        design: 0,
    },
    RxCase {
        label: "qpsk-40dBFS",
        modulation: Modulation::Qpsk,
        level_dbfs: -40,
        gain: DigitalGain::UNITY,
        design: 1,
    },
    RxCase {
        label: "qam16-40dBFS",
        modulation: Modulation::Qam16,
        level_dbfs: -40,
        gain: DigitalGain::UNITY,
        design: 1,
    },
    // The +28 dB gain brings −40 dBFS to the −12 dBFS design and saturates the bursts.
    RxCase {
        label: "qam16-40dBFS-gain28",
        modulation: Modulation::Qam16,
        level_dbfs: -40,
        gain: GAIN_28_DB,
        design: 0,
    },
    RxCase {
        label: "qam16-12dBFS-2d",
        modulation: Modulation::Qam16,
        level_dbfs: -12,
        gain: DigitalGain::UNITY,
        design: 2,
    },
];

/// Taps of the fixed multipath channel: (delay in samples, power, phase in radians); powers
/// sum to 1, RMS delay about one sample, every delay inside the shortest CP (8 samples).
const CHANNEL: [(usize, f64, f64); 4] = [
    (0, 0.55, 0.0),
    (1, 0.25, 1.1),
    (2, 0.13, -2.3),
    (4, 0.07, 0.6),
];
const TAPS: usize = 5;

/// Mean power of the transmitter's output, dBFS: `10·log10(Σ|X_k|²/N) − 12.04` (the
/// transmitter's backoff is 1/4 in amplitude; unit-energy data, pilots at amplitude `A`).
pub fn tx_power_dbfs(nu: &Numerology) -> f64 {
    let a = f64::from(nu.pilot_amplitude());
    let energy = nu.data_len(0) as f64 + a * a * nu.pilot_len(0) as f64;
    10.0 * libm::log10(energy / nu.fft_len() as f64) + 20.0 * libm::log10(0.25)
}

/// Rounds to the nearest integer and saturates to Q15.
fn q15(v: f64) -> i16 {
    let r = libm::round(v);
    r.clamp(-32768.0, 32767.0) as i16
}

/// Generator of one case's frame at FFT size `N`.
pub struct RxFrame<const N: usize> {
    tx: TransmitterQ15<N>,
    modulation: Modulation,
    /// Channel taps at the case's level, Q15, indexed by delay.
    taps: [Cq15; TAPS],
    /// The last `TAPS − 1` transmitted samples of the previous symbol, oldest first.
    tail: [Cq15; TAPS - 1],
    /// Bits of the latest symbol, one per byte (16-QAM: at most 4 per bin).
    bits: [[u8; 4]; N],
    bit_count: usize,
    noise_dbfs: i32,
    case_index: usize,
}

impl<const N: usize> RxFrame<N> {
    /// The generator of case `case_index` (None for an unknown case or size).
    pub fn new(case_index: usize) -> Option<Self> {
        let case = RX_CASES.get(case_index)?;
        let nu = Numerology::new(numerology_params(N)).ok()?;
        let tx = TransmitterQ15::<N>::new(nu).ok()?;
        let gain = libm::pow(
            10.0,
            (f64::from(case.level_dbfs) - tx_power_dbfs(&nu)) / 20.0,
        );
        let mut taps = [Cq15::ZERO; TAPS];
        for (delay, power, phase) in CHANNEL {
            let a = gain * libm::sqrt(power) * FULL_SCALE;
            if let Some(t) = taps.get_mut(delay) {
                *t = Cq15::new(q15(a * libm::cos(phase)), q15(a * libm::sin(phase)));
            }
        }
        Some(Self {
            tx,
            modulation: case.modulation,
            taps,
            tail: [Cq15::ZERO; TAPS - 1],
            bits: [[0; 4]; N],
            bit_count: 0,
            noise_dbfs: case.level_dbfs - RX_SNR_DB,
            case_index,
        })
    }

    /// Samples per symbol (`N + N/8`).
    pub fn symbol_len(&self) -> usize {
        N + N / 8
    }

    /// The bits the latest symbol carries (one per byte, in transmission order).
    pub fn bits(&self) -> &[u8] {
        self.bits
            .as_flattened()
            .get(..self.bit_count)
            .unwrap_or_default()
    }

    /// Writes symbol `symbol` of the frame (`N + N/8` samples) into `out`; symbols must be
    /// asked for in order from 0 (the channel carries over). False if `out` is too short.
    pub fn symbol(&mut self, symbol: u32, out: &mut [Cq15]) -> bool {
        let len = self.symbol_len();
        let Some(out) = out.get_mut(..len) else {
            return false;
        };
        let count = self.tx.bits_per_ofdm_symbol(self.modulation, symbol);
        self.bit_count = 0;
        let mut rng = XorShift64::new(seed(0x100 + 16 * self.case_index, N) ^ u64::from(symbol));
        let bits = self.bits.as_flattened_mut();
        let Some(bits) = bits.get_mut(..count) else {
            return false;
        };
        for b in bits.iter_mut() {
            *b = (rng.next_u64() >> 63) as u8;
        }
        if self
            .tx
            .modulate(self.modulation, bits, symbol, out)
            .is_err()
        {
            return false;
        }
        self.bit_count = count;
        // Channel, in place from the last sample down; older samples come from `tail`.
        let mut next_tail = [Cq15::ZERO; TAPS - 1];
        for (t, v) in next_tail.iter_mut().zip(&out[len - (TAPS - 1)..]) {
            *t = *v;
        }
        for i in (0..len).rev() {
            let (mut re, mut im) = (0i64, 0i64);
            for (d, h) in self.taps.iter().enumerate() {
                let x = if i >= d {
                    out[i - d]
                } else {
                    self.tail[TAPS - 1 - (d - i)]
                };
                let (xr, xi, hr, hi) = (
                    i64::from(x.re),
                    i64::from(x.im),
                    i64::from(h.re),
                    i64::from(h.im),
                );
                re += xr * hr - xi * hi;
                im += xr * hi + xi * hr;
            }
            out[i] = Cq15::new(sat((re + (1 << 14)) >> 15), sat((im + (1 << 14)) >> 15));
        }
        self.tail = next_tail;
        // Thermal noise, then a burst of clipped samples in symbols 1 and 4.
        let noise_seed = seed(0x200 + 16 * self.case_index, N) ^ u64::from(symbol);
        for_each_sample(
            Kind::Gaussian {
                dbfs: self.noise_dbfs,
            },
            noise_seed,
            len,
            |i, re, im| {
                if let Some(v) = out.get_mut(i) {
                    *v = Cq15::new(v.re.saturating_add(re), v.im.saturating_add(im));
                }
            },
        );
        if symbol % 3 == 1 {
            let at = len / 3 + symbol as usize;
            for (j, v) in out.iter_mut().skip(at).take(3).enumerate() {
                *v = if j % 2 == 0 {
                    Cq15::new(32767, -32767)
                } else {
                    Cq15::new(-32767, 32767)
                };
            }
        }
        true
    }
}

fn sat(v: i64) -> i16 {
    v.clamp(i64::from(i16::MIN), i64::from(i16::MAX)) as i16
}

/// The words printed for one received symbol: the equalized symbols (`Cq15::to_bits`), the
/// SINR weights (mantissa, exponent as two words each), then the i8 LLRs four to a word, the
/// first in the low byte.
pub fn output_words<'a>(
    equalized: &'a [Cq15],
    sinr: &'a [Scaled],
    llrs: &'a [i8],
) -> impl Iterator<Item = u32> + 'a {
    equalized
        .iter()
        .map(|v| v.to_bits())
        .chain(sinr.iter().flat_map(|s| [s.mant as u32, s.exp as u32]))
        .chain(llrs.chunks(4).map(|c| {
            c.iter()
                .enumerate()
                .fold(0u32, |w, (i, &v)| w | (u32::from(v as u8) << (8 * i)))
        }))
}

/// FNV-1a hash of Q15 samples (re, im in order), as printed by the firmware.
pub fn samples_hash(x: &[Cq15]) -> u32 {
    let mut h = Fnv1a32::default();
    for v in x {
        h.push_i16(v.re);
        h.push_i16(v.im);
    }
    h.finish()
}

fn push_u32(h: &mut Fnv1a32, v: u32) {
    h.push_i16(v as u16 as i16);
    h.push_i16((v >> 16) as u16 as i16);
}

fn push_scaled(h: &mut Fnv1a32, s: Scaled) {
    push_u32(h, s.mant as u32);
    push_u32(h, s.exp as u32);
}

/// FNV-1a hash of every field of a design, in declaration order (the firmware prints it for
/// the table it uses; the host computes it for its own design).
pub fn design_hash<const N: usize, const K: usize, const M: usize>(d: &DesignQ15<N, K, M>) -> u32 {
    let mut h = Fnv1a32::default();
    for v in d.lattice {
        h.push_i16(v as i16);
    }
    push_u32(&mut h, d.lattice_len as u32);
    for v in d.lattice_of {
        h.push_i16(v as i16);
    }
    for v in d.every_symbol {
        h.push_i16(i16::from(v));
    }
    for row in &d.taps {
        for &(re, im) in row {
            h.push_i16(re);
            h.push_i16(im);
        }
    }
    for v in d.first_tap {
        h.push_i16(v as i16);
    }
    for class in &d.time_weights {
        for age in class {
            for fill in age {
                for &w in fill {
                    h.push_i16(w);
                }
            }
        }
    }
    match d.time {
        TimeFilter::Latest => h.push_i16(0),
        TimeFilter::Forgetting { lambda } => {
            h.push_i16(1);
            push_u32(&mut h, lambda.to_bits());
        }
        TimeFilter::Lmmse => h.push_i16(2),
    }
    h.push_i16(d.lambda_q15);
    push_scaled(&mut h, d.inv_pilot);
    for &w in &d.weight {
        push_scaled(&mut h, w);
    }
    h.push_i16(i16::from(d.cpe));
    h.finish()
}
