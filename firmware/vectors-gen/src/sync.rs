//! Deterministic captures and the check procedure of the integer synchronisation stages
//! (`firmware/src/bin/sync_vectors.rs`, `sync_cost.rs`, and their host side in `xtask`):
//! [`AcquirerQ15`], [`NcoQ15`], the Q15 gain/DC functions of [`flatbin::gain_dc`],
//! [`CpTrackerQ15`], [`ScoEstimatorQ15`], [`total_cfo_q15`] / [`first_path_offset_q15`] and the
//! whole streaming [`FrameReceiverQ15`].
//!
//! ## The captures
//!
//! A capture ([`Capture`]) is [`capture_len`]`(N)` Q15 samples: complex Gaussian noise
//! [`SYNC_SNR_DB`] below the case's level and a constant DC offset [`DC_DB`] relative to it
//! throughout; from a pseudo-random offset in `[OFFSET_MIN, OFFSET_MIN + OFFSET_SPAN)`,
//! [`FRAMES`] frames back to back, each the preamble (symbols A and B with their cyclic
//! prefixes) and [`DATA_SYMBOLS`] QPSK data symbols of the Q15 transmitter
//! ([`TransmitterQ15`], bits from [`data_bits`]), every part scaled to the case's level and
//! turned by a CFO of [`SYNC_CFO`] subcarrier spacings (continuous phase over the capture);
//! after the frames, complex Gaussian at the same level to the end (a frame followed by
//! noise alone is detected again at its falling edge, where `M = |P|²/R²` divides by the
//! energy of a noise-only half: `M ≈ SNR/L`). No multipath, no clock offset.
//!
//! The preamble waveform is an input: the host computes it with [`write_preamble_f32`]
//! (`flatbin::preamble::write_preamble`, f32 FFT) and the firmware's `build.rs` writes the
//! same host-computed samples into a `static` table, so the target never generates it. The
//! data symbols come from the integer transmitter. Everything else is `libm` f64 or single
//! IEEE operations in a fixed order: the same bits on the host and on both cores (the
//! firmware prints a hash of every stage's input, and of its preamble table).
//!
//! ## The procedure
//!
//! [`run_case`] calls the stages in order ([`stage_acq`], [`stage_preamble`], [`stage_cp`],
//! [`stage_sco`], [`stage_frame`]), each building its own objects, and hands every result to
//! `emit` as a [`Record`]. The host and the target run the same function, so they make the
//! same calls in the same order; the host build of the core is the reference for
//! bit-exactness.

use flatbin::acquire_q15::{AcquirerQ15, DetectionQ15};
use flatbin::cp_sync_q15::{CpEstimateQ15, CpTrackerQ15};
use flatbin::fft::OfdmFft;
use flatbin::fft_q15::Q15Fft;
use flatbin::fixed::Cq15;
use flatbin::fixed_math::Scaled;
use flatbin::frame_q15::{FrameConfigQ15, FrameReceiverQ15};
use flatbin::gain_dc::{
    estimate_dc_cfo_q15, estimate_dc_q15, gain_for_backoff_q15, remove_dc_q15,
    target_amplitude_q30, DcSumsQ15, PowerQ15,
};
use flatbin::nco::{increment_for_cfo_q16, NcoQ15};
use flatbin::receiver_q15::DesignQ15;
use flatbin::sco_q15::ScoEstimatorQ15;
use flatbin::sync_q15::{first_path_offset_q15, increment_for_cfo_q31, total_cfo_q15};
use flatbin::transmit_q15::TransmitterQ15;
use flatbin::{Cf32, Modulation, Numerology};

use crate::rx::{numerology_params, output_words, samples_hash, tx_power_dbfs, RX_K, RX_M};
use crate::{seed, to_q15, Fnv1a32, XorShift64, FULL_SCALE};

/// Smallest offset of the first preamble in a capture.
pub const OFFSET_MIN: usize = 384;
/// Span of the offsets (the offset is `OFFSET_MIN` plus a pseudo-random value below this).
pub const OFFSET_SPAN: u64 = 256;
/// CFO of every capture, subcarrier spacings: an even integer part (2, found from symbol B)
/// and a fractional part (0.2, from symbol A). Chosen so that the frame receiver's CFO-aware
/// DC estimate over symbol A's window to the end of B's (`S + N` samples) exists (`|D(ε)|² =
/// 3.4·10^-3 > 2^-10`; at 2.3 it is `5·10^-4` and the estimate is refused) and its integer
/// path is checked. Its noise gain `1/(W·|D|²)` is then about 2: the frame receiver's bit
/// error ratio on these captures is 2.5e-3 … 1.5e-2, against at most 2.4e-3 at CFO 2.3 or
/// 2.35 (estimate refused) and 0 at 0.2 (host, the same captures otherwise).
pub const SYNC_CFO: f64 = 2.2;
/// Noise below the signal's level, dB.
pub const SYNC_SNR_DB: i32 = 20;
/// Power of the DC offset relative to the signal's, dB (10 dB below the noise). At the noise
/// level it raises the Schmidl & Cox metric of the bare acquirer to about 1/4, above the
/// N = 256 threshold (0.14): the frame receiver's DC blocker is there for that.
pub const DC_DB: i32 = -30;
/// Frames per capture.
pub const FRAMES: usize = 2;
/// Data symbols per frame: at least `flatbin::frame_q15::MIN_SCO_SYMBOLS` (8), so each
/// frame's SCO estimate updates the frame receiver's correction.
pub const DATA_SYMBOLS: u32 = 10;
/// Modulation of the data symbols (at most 2 bits per symbol: see [`data_bits`]).
pub const SYNC_MODULATION: Modulation = Modulation::Qpsk;
/// Chunk sizes the acquisition is fed in (the detection must not depend on them).
pub const SYNC_CHUNKS: [usize; 4] = [1, 7, 64, 241];
/// Chunk sizes the CP tracker is fed in.
pub const CP_CHUNKS: [usize; 2] = [1, 61];
/// Chunk sizes the frame receiver is fed in.
pub const FRAME_CHUNKS: [usize; 2] = [1, 37];
/// Largest chunk size.
pub const MAX_CHUNK: usize = 241;
/// The gain target as an amplitude, Q30: `target_amplitude_q30(-12.0)` (the host checks it;
/// the procedure also computes it with `libm` on each core and records it).
pub const TARGET_Q30_M12: u32 = 269_711_752;
/// Largest |integer CFO| searched, subcarrier spacings.
pub const MAX_INTEGER_CFO: usize = 4;
/// First-path threshold of the fine timing: 0.1 of the strongest path's power, Q16.
pub const FIRST_PATH_Q16: u32 = 6554;
/// Weight `ρ = SNR/(SNR + 1)` of the CP tracker at [`SYNC_SNR_DB`] (100/101), Q16.
pub const CP_RHO_Q16: u32 = 64_887;
/// Index into `crate::rx::RX_DESIGNS` of the frame receiver's design (frequency LMMSE, time
/// `Latest`, −12 dBFS: the level its digital gain aims at).
pub const FRAME_DESIGN: usize = 0;
/// Phase the clipped NCO case starts from, `2^-32` turn.
pub const CLIPPED_PHASE: u32 = 0x9e37_79b9;
/// Index into `crate::CASES` of the clipped full-scale input of the NCO's saturation case.
pub const CLIPPED_CASE: usize = 4;
/// Slots for detections in an `acq` record.
pub const DETECTION_SLOTS: usize = 3;

/// The acquisition threshold, Q16, at FFT size `n` (`round(65536 ·
/// Acquirer::threshold_for(numerology, 1e-5))` with the numerology of
/// `crate::rx::numerology_params`; a constant here so the target needs no floating point for
/// it, checked on the host). Zero for an unsupported size.
pub const fn threshold_q16(n: usize) -> u32 {
    match n {
        64 => 41_806,
        256 => 9_411,
        _ => 0,
    }
}

/// Samples of one OFDM symbol with its CP (`N + N/8`).
pub const fn symbol_len(n: usize) -> usize {
    n + n / 8
}

/// Samples of the preamble at FFT size `n`: symbols A and B with their CPs.
pub const fn preamble_len(n: usize) -> usize {
    2 * symbol_len(n)
}

/// Samples of one frame: the preamble and [`DATA_SYMBOLS`] data symbols.
pub const fn frame_len(n: usize) -> usize {
    (2 + DATA_SYMBOLS as usize) * symbol_len(n)
}

/// Samples of a capture: room for the latest offset, the frames, and two symbols of tail.
pub const fn capture_len(n: usize) -> usize {
    OFFSET_MIN + OFFSET_SPAN as usize + FRAMES * frame_len(n) + 2 * symbol_len(n)
}

/// The frame receiver's ring length `R` at FFT size `n`: the smallest power of two that is
/// at least `4N` and `8 ·` the largest data-bin count (`FrameReceiverQ15::new`'s bounds; 41
/// and 167 data bins at N = 64 and 256). Zero for an unsupported size.
pub const fn ring_len(n: usize) -> usize {
    match n {
        64 => 512,
        256 => 2048,
        _ => 0,
    }
}

/// The frame receiver's DC blocker shift `k = log2 N`: its corner, about `fs/(2π·2^k)`, is
/// then `1/(2π)` = 0.16 subcarrier spacings at every N (`k = 6` at N = 64, as the core's
/// end-to-end test uses).
pub const fn dc_block_shift(n: usize) -> u8 {
    n.trailing_zeros() as u8
}

/// The frame receiver's settings at FFT size `n` (integers only).
pub const fn frame_config(n: usize) -> FrameConfigQ15 {
    FrameConfigQ15 {
        threshold_q16: threshold_q16(n),
        target_amplitude_q30: TARGET_Q30_M12,
        frame_symbols: DATA_SYMBOLS,
        modulation: SYNC_MODULATION,
        max_integer_cfo: MAX_INTEGER_CFO,
        first_path_q16: FIRST_PATH_Q16,
        dc_block_shift: dc_block_shift(n),
        sco_q32: 0,
        track_sco: true,
    }
}

/// One capture: the signal's level.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct SyncCase {
    /// Label printed by the firmware and the host (no spaces).
    pub label: &'static str,
    /// Mean power of the preamble and of the data symbols, dBFS.
    pub level_dbfs: i32,
}

/// The captures.
pub const SYNC_CASES: [SyncCase; 2] = [
    SyncCase {
        label: "cfo2.2-12dBFS",
        level_dbfs: -12,
    },
    SyncCase {
        label: "cfo2.2-40dBFS",
        level_dbfs: -40,
    },
];

/// The preamble at FFT size `N` (unit scale, as `flatbin::preamble::write_preamble` writes
/// it with the f32 FFT) into `out` (`preamble_len(N)` samples). Host and `build.rs` only.
pub fn write_preamble_f32<const N: usize>(out: &mut [Cf32]) -> bool {
    let Ok(nu) = Numerology::new(numerology_params(N)) else {
        return false;
    };
    flatbin::preamble::write_preamble(&nu, &mut flatbin::fft::MicroFft::<N>::new(), out).is_ok()
}

/// FNV-1a hash of a preamble table (the f32 bits of re and im, in order).
pub fn preamble_hash(preamble: &[Cf32]) -> u32 {
    let mut h = Fnv1a32::default();
    for v in preamble {
        for w in [v.re.to_bits(), v.im.to_bits()] {
            h.push_i16(w as u16 as i16);
            h.push_i16((w >> 16) as u16 as i16);
        }
    }
    h.finish()
}

/// The bits of data symbol `symbol` of frame `frame` in capture `case_index` at size `N`
/// (one per byte, in transmission order) into `out`; returns how many (0 when `out` is too
/// short or the size unsupported).
pub fn data_bits<const N: usize>(
    case_index: usize,
    frame: usize,
    symbol: u32,
    out: &mut [u8],
) -> usize {
    let Ok(nu) = Numerology::new(numerology_params(N)) else {
        return 0;
    };
    let count = nu.data_len(symbol) * SYNC_MODULATION.bits_per_symbol();
    let Some(out) = out.get_mut(..count) else {
        return 0;
    };
    let mut rng = XorShift64::new(
        seed(0x400 + 16 * case_index, N) ^ ((frame as u64) << 32) ^ u64::from(symbol),
    );
    for b in out.iter_mut() {
        *b = (rng.next_u64() >> 63) as u8;
    }
    count
}

/// Sequential generator of one capture (see the module docs); `S` = `N + N/8`. About
/// `4S + 100` bytes: the transmitter is built only while a data symbol is modulated, so a
/// stage's big objects and a capture fit the Cortex-M0's RAM together.
#[derive(Clone, Debug)]
pub struct Capture<'a, const N: usize, const S: usize> {
    preamble: &'a [Cf32],
    case_index: usize,
    offset: usize,
    /// Preamble amplitude factor, LSB per unit of the preamble table.
    amp: f64,
    /// Data amplitude factor, LSB per LSB of the transmitter's output.
    data_gain: f64,
    /// Noise standard deviation per component, LSB.
    sigma: f64,
    /// Standard deviation per component of the Gaussian after the frames, LSB.
    tail_sigma: f64,
    dc: (f64, f64),
    rng: XorShift64,
    index: usize,
    /// The current data symbol and which one it is (frame, symbol).
    sym: [Cq15; S],
    sym_id: Option<(usize, u32)>,
}

impl<'a, const N: usize, const S: usize> Capture<'a, N, S> {
    /// The capture of case `case_index` at FFT size `N` from `preamble` (`preamble_len(N)`
    /// samples from [`write_preamble_f32`]); None for an unknown case, a wrong length or
    /// `S ≠ N + N/8`.
    pub fn new(case_index: usize, preamble: &'a [Cf32]) -> Option<Self> {
        let case = SYNC_CASES.get(case_index)?;
        if preamble.len() != preamble_len(N) || S != symbol_len(N) {
            return None;
        }
        let nu = Numerology::new(numerology_params(N)).ok()?;
        let power = preamble
            .iter()
            .map(|v| {
                let (re, im) = (f64::from(v.re), f64::from(v.im));
                re * re + im * im
            })
            .sum::<f64>()
            / preamble.len() as f64;
        let level = libm::pow(10.0, f64::from(case.level_dbfs) / 10.0);
        let amp = FULL_SCALE * libm::sqrt(level / power);
        let tx_power = libm::pow(10.0, tx_power_dbfs(&nu) / 10.0);
        let data_gain = libm::sqrt(level / tx_power);
        let sigma = FULL_SCALE
            * libm::sqrt(libm::pow(10.0, f64::from(case.level_dbfs - SYNC_SNR_DB) / 10.0) / 2.0);
        let d = FULL_SCALE * libm::sqrt(libm::pow(10.0, f64::from(case.level_dbfs + DC_DB) / 10.0));
        let mut rng = XorShift64::new(seed(0x300 + 16 * case_index, N));
        // The high half: the low bits of the first output barely depend on the seed's high bits.
        let offset = OFFSET_MIN + ((rng.next_u64() >> 32) % OFFSET_SPAN) as usize;
        Some(Self {
            preamble,
            case_index,
            offset,
            amp,
            data_gain,
            sigma,
            tail_sigma: FULL_SCALE * libm::sqrt(level / 2.0),
            dc: (d * libm::cos(1.0), d * libm::sin(1.0)),
            rng,
            index: 0,
            sym: [Cq15::ZERO; S],
            sym_id: None,
        })
    }

    /// Stream index of the first preamble's first sample (symbol A's CP).
    pub fn offset(&self) -> usize {
        self.offset
    }

    /// Stream index of frame `frame`'s first sample.
    pub fn frame_start(&self, frame: usize) -> usize {
        self.offset + frame * frame_len(N)
    }

    /// Stream index of the next sample.
    pub fn position(&self) -> usize {
        self.index
    }

    /// Samples in the capture.
    pub fn len(&self) -> usize {
        capture_len(N)
    }

    /// Always false: a capture has samples.
    pub fn is_empty(&self) -> bool {
        false
    }

    /// Writes the next samples into `out`, up to the end of the capture; returns how many.
    pub fn fill(&mut self, out: &mut [Cq15]) -> usize {
        let mut count = 0;
        for slot in out.iter_mut() {
            if self.index >= capture_len(N) {
                break;
            }
            *slot = self.next_sample();
            count += 1;
        }
        count
    }

    /// Skips `count` samples (as if generated and dropped).
    pub fn skip(&mut self, count: usize) {
        for _ in 0..count {
            if self.index >= capture_len(N) {
                break;
            }
            self.next_sample();
        }
    }

    /// Reads `out.len()` samples from stream index `start` (skipping forward to it); false
    /// when `start` is behind the generator or the capture ends first.
    pub fn read_at(&mut self, start: u64, out: &mut [Cq15]) -> bool {
        let Some(skip) = (start as usize).checked_sub(self.index) else {
            return false;
        };
        self.skip(skip);
        self.fill(out) == out.len()
    }

    /// Modulates data symbol `symbol` of frame `frame` into `self.sym` (zeros on failure).
    #[inline(never)]
    fn modulate(&mut self, frame: usize, symbol: u32) {
        // QPSK: at most 2 bits per data bin.
        let mut bits = [[0u8; 2]; N];
        let bits = bits.as_flattened_mut();
        let count = data_bits::<N>(self.case_index, frame, symbol, bits);
        let ok = match (Numerology::new(numerology_params(N)), bits.get(..count)) {
            (Ok(nu), Some(b)) => match TransmitterQ15::<N>::new(nu) {
                Ok(mut tx) => tx
                    .modulate(SYNC_MODULATION, b, symbol, &mut self.sym)
                    .is_ok(),
                Err(_) => false,
            },
            _ => false,
        };
        if !ok {
            self.sym = [Cq15::ZERO; S];
        }
        self.sym_id = Some((frame, symbol));
    }

    fn next_sample(&mut self) -> Cq15 {
        let i = self.index;
        self.index += 1;
        // Box–Muller as `crate::for_each_sample`.
        let r = libm::sqrt(-2.0 * libm::log(self.rng.open_unit()));
        let theta = 2.0 * core::f64::consts::PI * self.rng.unit();
        let mut re = self.dc.0 + self.sigma * r * libm::cos(theta);
        let mut im = self.dc.1 + self.sigma * r * libm::sin(theta);
        if let Some(rel) = i.checked_sub(self.offset) {
            let (frame, pos) = (rel / frame_len(N), rel % frame_len(N));
            if frame < FRAMES {
                let (sr, si) = if pos < preamble_len(N) {
                    let p = self.preamble.get(pos).copied().unwrap_or_default();
                    (self.amp * f64::from(p.re), self.amp * f64::from(p.im))
                } else {
                    let d = pos - preamble_len(N);
                    let (symbol, j) = ((d / S) as u32, d % S);
                    if self.sym_id != Some((frame, symbol)) {
                        self.modulate(frame, symbol);
                    }
                    let q = self.sym.get(j).copied().unwrap_or_default();
                    (
                        self.data_gain * f64::from(q.re),
                        self.data_gain * f64::from(q.im),
                    )
                };
                // e^{j2π·ε·i/N}, the argument reduced to one turn first.
                let turns = SYNC_CFO * i as f64 / N as f64;
                let phi = 2.0 * core::f64::consts::PI * (turns - libm::floor(turns));
                let (c, s) = (libm::cos(phi), libm::sin(phi));
                re += sr * c - si * s;
                im += sr * s + si * c;
            } else {
                // After the frames: complex Gaussian at the signal's level.
                let r = libm::sqrt(-2.0 * libm::log(self.rng.open_unit()));
                let theta = 2.0 * core::f64::consts::PI * self.rng.unit();
                re += self.tail_sigma * r * libm::cos(theta);
                im += self.tail_sigma * r * libm::sin(theta);
            }
        }
        Cq15::new(to_q15(re), to_q15(im))
    }
}

/// One printed record: its words are `head`, then `samples` (`Cq15::to_bits`), then `sinr`
/// (mantissa, exponent) and `llrs` (four to a word) as `crate::rx::output_words`.
pub struct Record<'a> {
    /// Stage name (see [`run_case`]).
    pub stage: &'static str,
    /// Chunk size the stage was fed in (0 when not streamed).
    pub chunk: usize,
    /// Index of the record within its stage and chunk size (the event count for `frame`).
    pub index: u32,
    /// FNV-1a hash of the stage's input samples (0 when not applicable).
    pub input_hash: u32,
    /// Scalar results.
    pub head: &'a [u32],
    /// Output samples.
    pub samples: &'a [Cq15],
    /// SINR weights (frame events).
    pub sinr: &'a [Scaled],
    /// i8 LLRs (frame events).
    pub llrs: &'a [i8],
}

impl<'a> Record<'a> {
    /// Every word of the record.
    pub fn words(&self) -> impl Iterator<Item = u32> + '_ {
        self.head
            .iter()
            .copied()
            .chain(output_words(self.samples, self.sinr, self.llrs))
    }

    /// Number of words.
    pub fn word_count(&self) -> usize {
        self.head.len() + self.samples.len() + 2 * self.sinr.len() + self.llrs.len().div_ceil(4)
    }

    fn new(stage: &'static str, head: &'a [u32]) -> Self {
        Self {
            stage,
            chunk: 0,
            index: 0,
            input_hash: 0,
            head,
            samples: &[],
            sinr: &[],
            llrs: &[],
        }
    }
}

/// The record sink of the procedure.
pub type Emit<'e> = dyn FnMut(&Record) + 'e;

/// Result of one acquisition run over a whole capture.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct AcqRun {
    /// FNV-1a hash of the samples fed (re, im as i16, in order).
    pub input_hash: u32,
    /// Detections over the capture.
    pub detections: u32,
    /// The first [`DETECTION_SLOTS`] detections.
    pub found: [Option<DetectionQ15>; DETECTION_SLOTS],
    /// Samples fed when `push` returned the first detection (end of that chunk).
    pub returned_at: u64,
    /// `push` returned an error, or the acquirer could not be built.
    pub errors: u32,
}

impl AcqRun {
    /// The words printed for this run: detections, errors, the position the first detection
    /// was returned at (low, high), then per slot window start (low, high), CFO (ε·2^31) and
    /// metric (Q16), zeros for an empty slot.
    pub fn words(&self) -> [u32; 4 + 4 * DETECTION_SLOTS] {
        let mut w = [0u32; 4 + 4 * DETECTION_SLOTS];
        w[0] = self.detections;
        w[1] = self.errors;
        w[2] = self.returned_at as u32;
        w[3] = (self.returned_at >> 32) as u32;
        for (slot, d) in w[4..].chunks_exact_mut(4).zip(&self.found) {
            if let Some(d) = d {
                slot[0] = d.window_start as u32;
                slot[1] = (d.window_start >> 32) as u32;
                slot[2] = d.cfo_fraction_q31 as u32;
                slot[3] = d.metric_q16;
            }
        }
        w
    }
}

/// Feeds the whole `capture` to `acq` in chunks of `chunk` samples through `buf` (at least
/// `chunk` long).
pub fn acquire_capture<const N: usize, const S: usize>(
    acq: &mut AcquirerQ15<N>,
    capture: &mut Capture<N, S>,
    chunk: usize,
    buf: &mut [Cq15],
) -> AcqRun {
    let mut run = AcqRun::default();
    let mut hash = Fnv1a32::default();
    let Some(buf) = buf.get_mut(..chunk.max(1)) else {
        run.errors = 1;
        return run;
    };
    loop {
        let len = capture.fill(buf);
        if len == 0 {
            break;
        }
        let x = buf.get(..len).unwrap_or_default();
        for v in x {
            hash.push_i16(v.re);
            hash.push_i16(v.im);
        }
        match acq.push(x) {
            Ok(Some(d)) => {
                if let Some(slot) = run.found.get_mut(run.detections as usize) {
                    *slot = Some(d);
                }
                if run.detections == 0 {
                    run.returned_at = acq.position();
                }
                run.detections += 1;
            }
            Ok(None) => {}
            Err(_) => run.errors += 1,
        }
    }
    run.input_hash = hash.finish();
    run
}

/// Stage `acq`: per chunk size of [`SYNC_CHUNKS`], a fresh acquirer fed the whole capture
/// ([`acquire_capture`]); one record each, words [`AcqRun::words`]. Returns the first
/// detection of the first run.
#[inline(never)]
pub fn stage_acq<const N: usize, const S: usize>(
    case_index: usize,
    preamble: &[Cf32],
    chunk_buf: &mut [Cq15],
    emit: &mut Emit,
) -> Option<DetectionQ15> {
    let mut first = None;
    for (i, chunk) in SYNC_CHUNKS.into_iter().enumerate() {
        let run = acq_run::<N, S>(case_index, preamble, chunk, chunk_buf);
        if i == 0 {
            first = run.found[0];
        }
        let words = run.words();
        emit(&Record {
            chunk,
            input_hash: run.input_hash,
            ..Record::new("acq", &words)
        });
    }
    first
}

/// One run of [`stage_acq`]: a fresh acquirer and capture (built in this frame, each once:
/// the M0 holds an `AcquirerQ15<256>` and a capture with little room to spare).
#[inline(never)]
fn acq_run<const N: usize, const S: usize>(
    case_index: usize,
    preamble: &[Cf32],
    chunk: usize,
    chunk_buf: &mut [Cq15],
) -> AcqRun {
    let failed = AcqRun {
        errors: 1,
        ..AcqRun::default()
    };
    let Ok(nu) = Numerology::new(numerology_params(N)) else {
        return failed;
    };
    let Some(mut cap) = Capture::<N, S>::new(case_index, preamble) else {
        return failed;
    };
    match AcquirerQ15::<N>::new(&nu, threshold_q16(N)) {
        Ok(mut acq) => acquire_capture(&mut acq, &mut cap, chunk, chunk_buf),
        Err(_) => failed,
    }
}

/// What [`stage_preamble`] found: what the later stages start from.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct PreambleRun {
    /// Total CFO, Q16 subcarrier spacings.
    pub cfo_q16: i32,
    /// The NCO increment that removes it.
    pub increment: u32,
    /// The DC removed.
    pub dc: Cq15,
    /// Fine timing shift, samples.
    pub shift: i32,
    /// Stream index of symbol A's FFT window after the fine timing.
    pub origin: u64,
}

/// Stage `preamble`, from detection `det` (what `FrameReceiverQ15` does after a detection,
/// on the raw capture): reads symbol A's window to the end of symbol B's window (`S + N`
/// samples from `det.window_start`) into `span`, then records
///
/// 1. `cfo`: [`total_cfo_q15`] on A's and B's windows (words: complete read, CFO Q16, its NCO
///    increment, [`increment_for_cfo_q31`] of the fractional CFO);
/// 2. `dc`: [`DcSumsQ15`] over both windows, [`estimate_dc_q15`] over A's,
///    [`estimate_dc_cfo_q15`] over the span (as the frame receiver) and over A's window,
///    [`remove_dc_q15`] of the first CFO-aware estimate that exists (else the mean of both
///    windows); words: the four estimates (and whether each CFO-aware one exists), the
///    saturated count, the sums; then the span after removal;
/// 3. `nco`: [`NcoQ15`] derotation of A's window (in two calls, 5 samples then the rest),
///    `advance` over B's CP, derotation of B's window; words: saturated, final phase, then
///    the span;
/// 4. `timing_gain`: [`first_path_offset_q15`] on B's derotated window, [`PowerQ15`] of it and
///    [`gain_for_backoff_q15`] to [`TARGET_Q30_M12`]; words: shift, power sum (low, high),
///    count, whether there is a gain, its mantissa and shift, and
///    `target_amplitude_q30(-12.0)` computed here (`libm` f64);
/// 5. `nco_clipped`: derotation of `N + L` samples of the clipped 0 dBFS Gaussian
///    (`crate::CASES[CLIPPED_CASE]`) from [`CLIPPED_PHASE`] in two calls; words: saturated,
///    phase, then the samples.
///
/// `span` holds at least `S + N` samples. None when it is too short or the case unknown.
#[inline(never)]
pub fn stage_preamble<const N: usize, const S: usize>(
    case_index: usize,
    preamble: &[Cf32],
    det: &DetectionQ15,
    span: &mut [Cq15],
    emit: &mut Emit,
) -> Option<PreambleRun> {
    let nu = Numerology::new(numerology_params(N)).ok()?;
    let mut cap = Capture::<N, S>::new(case_index, preamble)?;
    let l = S.checked_sub(N)?;
    let x = span.get_mut(..S + N)?;
    let complete = cap.read_at(det.window_start, x);
    let input_hash = samples_hash(x);
    let mut fft = Q15Fft::<N>::new();

    let window = |x: &[Cq15], at: usize| -> [Cq15; N] {
        x.get(at..at + N)
            .and_then(|w| <[Cq15; N]>::try_from(w).ok())
            .unwrap_or([Cq15::ZERO; N])
    };
    let cfo_q16 = total_cfo_q15(
        &nu,
        &mut fft,
        &window(x, 0),
        &window(x, S),
        det.cfo_fraction_q31,
        MAX_INTEGER_CFO,
    );
    let increment = increment_for_cfo_q16(cfo_q16, N);
    let head = [
        u32::from(complete),
        cfo_q16 as u32,
        increment,
        increment_for_cfo_q31(det.cfo_fraction_q31, N),
    ];
    emit(&Record {
        input_hash,
        ..Record::new("cfo", &head)
    });

    let mut sums = DcSumsQ15::new();
    sums.add(x.get(..N).unwrap_or_default());
    sums.add(x.get(S..S + N).unwrap_or_default());
    let dc_mean = sums.mean();
    let dc_a = estimate_dc_q15(x.get(..N).unwrap_or_default());
    let dc_cfo = estimate_dc_cfo_q15(x, increment);
    let dc_cfo_a = estimate_dc_cfo_q15(x.get(..N).unwrap_or_default(), increment);
    let dc = dc_cfo.or(dc_cfo_a).unwrap_or(dc_mean);
    let saturated = remove_dc_q15(x, dc);
    let head = [
        dc_mean.to_bits(),
        dc_a.to_bits(),
        u32::from(dc_cfo.is_some()),
        dc_cfo.unwrap_or_default().to_bits(),
        u32::from(dc_cfo_a.is_some()),
        dc_cfo_a.unwrap_or_default().to_bits(),
        saturated as u32,
        sums.re as u32,
        (sums.re >> 32) as u32,
        sums.im as u32,
        (sums.im >> 32) as u32,
        sums.count as u32,
    ];
    emit(&Record {
        input_hash,
        samples: x,
        ..Record::new("dc", &head)
    });

    let dc_removed_hash = samples_hash(x);
    let mut nco = NcoQ15::new();
    nco.set_increment(increment);
    let (a, rest) = x.split_at_mut(N);
    let (a0, a1) = a.split_at_mut(5.min(N));
    let mut sat = nco.derotate(a0) + nco.derotate(a1);
    nco.advance(l as u64);
    sat += nco.derotate(rest.get_mut(l..l + N).unwrap_or_default());
    let head = [sat as u32, nco.phase()];
    emit(&Record {
        input_hash: dc_removed_hash,
        samples: x,
        ..Record::new("nco", &head)
    });

    let b = window(x, S);
    let shift = first_path_offset_q15(&nu, &mut fft, &b, FIRST_PATH_Q16);
    let mut power = PowerQ15::new();
    power.add(&b, Cq15::ZERO);
    let gain = gain_for_backoff_q15(power, TARGET_Q30_M12);
    let head = [
        shift as u32,
        power.sum as u32,
        (power.sum >> 32) as u32,
        power.count as u32,
        u32::from(gain.is_some()),
        gain.map_or(0, |g| g.mant as u32),
        gain.map_or(0, |g| g.shift as u32),
        target_amplitude_q30(-12.0),
    ];
    emit(&Record {
        input_hash: samples_hash(&b),
        ..Record::new("timing_gain", &head)
    });

    let y = span.get_mut(..S)?;
    let mut hash = Fnv1a32::default();
    if let Some(case) = crate::CASES.get(CLIPPED_CASE) {
        crate::for_each_sample(case.kind, seed(CLIPPED_CASE, S), S, |i, re, im| {
            hash.push_i16(re);
            hash.push_i16(im);
            if let Some(v) = y.get_mut(i) {
                *v = Cq15::new(re, im);
            }
        });
    }
    let mut nco = NcoQ15::new();
    nco.set_increment(increment);
    nco.set_phase(CLIPPED_PHASE);
    let (a, b) = y.split_at_mut(5.min(S));
    let sat = nco.derotate(a) + nco.derotate(b);
    let head = [sat as u32, nco.phase()];
    emit(&Record {
        input_hash: hash.finish(),
        samples: y,
        ..Record::new("nco_clipped", &head)
    });

    Some(PreambleRun {
        cfo_q16,
        increment,
        dc,
        shift,
        origin: (det.window_start as i64 + i64::from(shift)).max(0) as u64,
    })
}

fn cp_words(e: &CpEstimateQ15) -> [u32; 2] {
    [e.cp_start as u32, e.cfo_q32 as u32]
}

/// Stage `cp`: per chunk size of [`CP_CHUNKS`], a fresh [`CpTrackerQ15`] (ρ =
/// [`CP_RHO_Q16`]) fed the whole capture; `estimate` after the first frame's last sample and
/// at the end, then `clear` and `estimate` again. One record each, words: the three
/// estimates (CP start, CFO ε·2^32), and whether the tracker could be built.
#[inline(never)]
pub fn stage_cp<const N: usize, const S: usize>(
    case_index: usize,
    preamble: &[Cf32],
    chunk_buf: &mut [Cq15],
    emit: &mut Emit,
) {
    for chunk in CP_CHUNKS {
        let mut head = [0u32; 7];
        let mut hash = Fnv1a32::default();
        if let (Some(mut cap), Ok(nu), Some(buf)) = (
            Capture::<N, S>::new(case_index, preamble),
            Numerology::new(numerology_params(N)),
            chunk_buf.get_mut(..chunk),
        ) {
            if let Ok(mut cp) = CpTrackerQ15::<N, S>::new(&nu, CP_RHO_Q16) {
                let mid = cap.frame_start(1);
                let mut feed = |cap: &mut Capture<N, S>, cp: &mut CpTrackerQ15<N, S>, end| {
                    while cap.position() < end {
                        let want = chunk.min(end - cap.position());
                        let b = buf.get_mut(..want).unwrap_or_default();
                        let len = cap.fill(b);
                        if len == 0 {
                            break;
                        }
                        let x = b.get(..len).unwrap_or_default();
                        for v in x {
                            hash.push_i16(v.re);
                            hash.push_i16(v.im);
                        }
                        cp.push(x);
                    }
                };
                feed(&mut cap, &mut cp, mid);
                let at_mid = cp.estimate();
                feed(&mut cap, &mut cp, capture_len(N));
                let at_end = cp.estimate();
                cp.clear();
                let cleared = cp.estimate();
                head[0] = 1;
                for (h, w) in head[1..].iter_mut().zip(
                    cp_words(&at_mid)
                        .into_iter()
                        .chain(cp_words(&at_end))
                        .chain(cp_words(&cleared)),
                ) {
                    *h = w;
                }
            }
        }
        emit(&Record {
            chunk,
            input_hash: hash.finish(),
            ..Record::new("cp", &head)
        });
    }
}

/// Stage `sco`: the first frame's data symbols at the windows the preamble stage found
/// (`origin + (2 + m)·S`), each with the DC removed, derotated by the NCO (phase continued
/// from `origin`), through the Q15 FFT and into [`ScoEstimatorQ15::update`]. One record,
/// per symbol: whether `update` succeeded, the FFT's block exponent, a hash of the bins,
/// whether there is an estimate and the estimate (ζ·2^32).
#[inline(never)]
pub fn stage_sco<const N: usize, const S: usize>(
    case_index: usize,
    preamble: &[Cf32],
    pre: &PreambleRun,
    emit: &mut Emit,
) {
    const WORDS: usize = 5;
    let mut head = [0u32; WORDS * DATA_SYMBOLS as usize];
    let mut hash = Fnv1a32::default();
    if let (Some(mut cap), Ok(nu)) = (
        Capture::<N, S>::new(case_index, preamble),
        Numerology::new(numerology_params(N)),
    ) {
        if let Ok(mut sco) = ScoEstimatorQ15::<N>::new(&nu) {
            let mut fft = Q15Fft::<N>::new();
            let mut nco = NcoQ15::new();
            nco.set_increment(pre.increment);
            let mut x = [Cq15::ZERO; N];
            for (m, words) in (0..DATA_SYMBOLS).zip(head.chunks_exact_mut(WORDS)) {
                let start = pre.origin + (2 + u64::from(m)) * S as u64;
                if !cap.read_at(start, &mut x) {
                    break;
                }
                for v in &x {
                    hash.push_i16(v.re);
                    hash.push_i16(v.im);
                }
                remove_dc_q15(&mut x, pre.dc);
                nco.set_phase(0);
                nco.advance(start - pre.origin);
                nco.derotate(&mut x);
                let exp = fft.forward(&mut x);
                let ok = sco.update(&x, m).is_ok();
                let est = sco.estimate_q32();
                words[0] = u32::from(ok);
                words[1] = exp as u32;
                words[2] = samples_hash(&x);
                words[3] = u32::from(est.is_some());
                words[4] = est.unwrap_or(0) as u32;
            }
        }
    }
    emit(&Record {
        input_hash: hash.finish(),
        ..Record::new("sco", &head)
    });
}

/// Stage `frame`: per chunk size of [`FRAME_CHUNKS`], a fresh
/// `FrameReceiverQ15<N, RX_K, RX_M, R>` (design `design`, settings [`frame_config`]) fed the
/// whole capture. One `frame` record per decoded symbol (index: the event count), words:
/// symbol, window start (low, high), CFO (Q16), clipped, data bins, LLRs, then the equalized
/// symbols, SINR weights and LLRs. Then one `frame_end` record: events, push errors, whether
/// the receiver could be built, and after each push in which a frame's last symbol was
/// decoded, `sco_q32()` (count, then [`FRAMES`] slots).
#[inline(never)]
pub fn stage_frame<const N: usize, const S: usize, const R: usize>(
    case_index: usize,
    preamble: &[Cf32],
    design: &DesignQ15<N, RX_K, RX_M>,
    chunk_buf: &mut [Cq15],
    emit: &mut Emit,
) {
    for chunk in FRAME_CHUNKS {
        let (mut events, mut errors, mut built) = (0u32, 0u32, false);
        let mut scos = [0u32; FRAMES];
        let mut sco_count = 0usize;
        let mut hash = Fnv1a32::default();
        if let (Some(mut cap), Ok(nu), Some(buf), true) = (
            Capture::<N, S>::new(case_index, preamble),
            Numerology::new(numerology_params(N)),
            chunk_buf.get_mut(..chunk),
            ring_len(N) == R,
        ) {
            if let Ok(mut fr) =
                FrameReceiverQ15::<N, RX_K, RX_M, R>::new(&nu, design.clone(), frame_config(N))
            {
                built = true;
                loop {
                    let len = cap.fill(buf);
                    if len == 0 {
                        break;
                    }
                    let x = buf.get(..len).unwrap_or_default();
                    for v in x {
                        hash.push_i16(v.re);
                        hash.push_i16(v.im);
                    }
                    let mut frame_ended = false;
                    let pushed = fr.push(x, |ev| {
                        let head = [
                            ev.symbol,
                            ev.window_start as u32,
                            (ev.window_start >> 32) as u32,
                            ev.cfo_q16 as u32,
                            ev.clipped as u32,
                            ev.equalized.len() as u32,
                            ev.llrs.len() as u32,
                        ];
                        emit(&Record {
                            chunk,
                            index: events,
                            samples: ev.equalized,
                            sinr: ev.sinr,
                            llrs: ev.llrs,
                            ..Record::new("frame", &head)
                        });
                        events += 1;
                        frame_ended |= ev.symbol + 1 == DATA_SYMBOLS;
                    });
                    if pushed.is_err() {
                        errors += 1;
                    }
                    if frame_ended {
                        if let Some(slot) = scos.get_mut(sco_count) {
                            *slot = fr.sco_q32() as u32;
                        }
                        sco_count += 1;
                    }
                }
            }
        }
        let mut head = [0u32; 4 + FRAMES];
        head[0] = events;
        head[1] = errors;
        head[2] = u32::from(built);
        head[3] = sco_count as u32;
        for (h, s) in head[4..].iter_mut().zip(scos) {
            *h = s;
        }
        emit(&Record {
            chunk,
            input_hash: hash.finish(),
            ..Record::new("frame_end", &head)
        });
    }
}

/// Which stages a core runs (its RAM decides).
#[derive(Clone, Copy)]
pub struct Coverage<'d, const N: usize> {
    /// Run the CP tracker (`CpTrackerQ15<N, S>` is about `4N + 48S` bytes).
    pub cp: bool,
    /// Run the frame receiver with this design.
    pub frame: Option<&'d DesignQ15<N, RX_K, RX_M>>,
}

/// The whole check of capture `case_index` at FFT size `N` (`S = N + N/8`, `R =
/// ring_len(N)`), in order: [`stage_acq`], [`stage_preamble`] from the first detection (or
/// window 0 and CFO 0 if there is none), [`stage_cp`] (if `coverage.cp`), [`stage_sco`] from
/// the preamble stage's result, [`stage_frame`] (if `coverage.frame`).
///
/// `chunk_buf` holds at least [`MAX_CHUNK`] samples and `span` at least `S + N`. False when a
/// buffer is too short, the sizes disagree or the case is unknown.
pub fn run_case<const N: usize, const S: usize, const R: usize>(
    case_index: usize,
    preamble: &[Cf32],
    coverage: Coverage<N>,
    chunk_buf: &mut [Cq15],
    span: &mut [Cq15],
    emit: &mut Emit,
) -> bool {
    if SYNC_CASES.get(case_index).is_none()
        || S != symbol_len(N)
        || R != ring_len(N)
        || chunk_buf.len() < MAX_CHUNK
        || span.len() < S + N
        || preamble.len() != preamble_len(N)
    {
        return false;
    }
    let det = stage_acq::<N, S>(case_index, preamble, chunk_buf, emit).unwrap_or(DetectionQ15 {
        window_start: 0,
        cfo_fraction_q31: 0,
        metric_q16: 0,
    });
    let Some(pre) = stage_preamble::<N, S>(case_index, preamble, &det, span, emit) else {
        return false;
    };
    if coverage.cp {
        stage_cp::<N, S>(case_index, preamble, chunk_buf, emit);
    }
    stage_sco::<N, S>(case_index, preamble, &pre, emit);
    if let Some(design) = coverage.frame {
        stage_frame::<N, S, R>(case_index, preamble, design, chunk_buf, emit);
    }
    true
}
