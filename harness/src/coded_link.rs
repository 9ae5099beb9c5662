//! Coded links: the core's convolutional code, interleaver, Viterbi decoder and CRC measured
//! by bit and packet error rate.
//!
//! * [`bpsk_awgn`]: coded BPSK over AWGN (no OFDM): the decoder against the union bound of
//!   [`crate::theory::conv_code`], soft against hard decisions, and i8 LLRs against the
//!   unquantised f64 reference decoder ([`crate::coding_ref`]) on the same noise.
//! * [`crossing_db`]: where a measured error-rate curve crosses a target (log-linear
//!   interpolation between the points that bracket it).
//!
//! Random streams are keyed by `(seed, point, frame)`: results do not depend on thread count.

use flatbin::conv_code::{encode, CodeRate};
use rand::RngExt;
use rand_distr::StandardNormal;
use rayon::prelude::*;
use serde::Serialize;

use crate::rng::stream_rng;

/// Which decoder decodes a coded BPSK frame.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
pub enum Decoder {
    /// The core's Viterbi decoder on i8 LLRs (round(4·L), saturated), soft decisions.
    CoreSoft,
    /// The core's Viterbi decoder in hard-decision mode on the same i8 LLRs.
    CoreHard,
    /// The f64 maximum-likelihood reference ([`crate::coding_ref`]) on unquantised LLRs.
    ReferenceF64,
}

/// Error counts of one decoder at one point.
#[derive(Clone, Debug, Serialize)]
pub struct ErrorCount {
    /// The decoder.
    pub decoder: Decoder,
    /// Eb/N0 per information bit, dB.
    pub eb_n0_db: f64,
    /// Information bits decoded.
    pub bits: u64,
    /// Information bits in error.
    pub bit_errors: u64,
    /// Frames decoded.
    pub frames: u64,
    /// Frames with at least one bit error.
    pub frame_errors: u64,
    /// Sum over frames of (bit errors)², for the frame-level variance of the BER estimate
    /// (errors come in bursts: the bits of one error event are not independent).
    pub sum_sq: f64,
}

impl ErrorCount {
    fn new(decoder: Decoder, eb_n0_db: f64) -> Self {
        Self {
            decoder,
            eb_n0_db,
            bits: 0,
            bit_errors: 0,
            frames: 0,
            frame_errors: 0,
            sum_sq: 0.0,
        }
    }

    fn add(&mut self, o: &Self) {
        self.bits += o.bits;
        self.bit_errors += o.bit_errors;
        self.frames += o.frames;
        self.frame_errors += o.frame_errors;
        self.sum_sq += o.sum_sq;
    }

    /// Bit error rate.
    pub fn ber(&self) -> f64 {
        if self.bits == 0 {
            return 0.0;
        }
        self.bit_errors as f64 / self.bits as f64
    }

    /// Standard deviation of [`ErrorCount::ber`] from the spread of the per-frame error
    /// counts (frames independent; bits within a frame not).
    pub fn ber_sd(&self) -> f64 {
        let f = self.frames as f64;
        if f < 2.0 || self.bits == 0 {
            return 0.0;
        }
        let per_frame = self.bits as f64 / f;
        let mean = self.bit_errors as f64 / f;
        let var = (self.sum_sq / f - mean * mean).max(0.0) * f / (f - 1.0);
        (var / f).sqrt() / per_frame
    }

    /// Packet (frame) error rate.
    pub fn fer(&self) -> f64 {
        if self.frames == 0 {
            return 0.0;
        }
        self.frame_errors as f64 / self.frames as f64
    }
}

/// Coded BPSK over AWGN: `frames` terminated frames of `info_bits` random bits at `rate`,
/// Eb/N0 per information bit `eb_n0_db`; every decoder in `decoders` sees the same noise.
///
/// Channel: `y = (1 − 2c) + n`, `n ~ N(0, σ²)`, `σ² = 1/(2·R·Eb/N0)`; LLR `L = 2y/σ²`; the
/// core decoders take `round(4·L)` saturated to ±127 (DESIGN.md's i8 LLR scale).
pub fn bpsk_awgn(
    rate: CodeRate,
    eb_n0_db: f64,
    frames: u64,
    info_bits: usize,
    decoders: &[Decoder],
    seed: u64,
) -> anyhow::Result<Vec<ErrorCount>> {
    let r = rate.numerator() as f64 / rate.denominator() as f64;
    let sigma2 = 1.0 / (2.0 * r * 10f64.powf(eb_n0_db / 10.0));
    let sigma = sigma2.sqrt();
    let point_key = (eb_n0_db * 1000.0).round() as i64 as u64 ^ ((rate.denominator() as u64) << 48);
    let per_frame = |frame: u64| -> anyhow::Result<Vec<ErrorCount>> {
        let mut rng = stream_rng(seed ^ point_key.rotate_left(17), frame);
        let info: Vec<u8> = (0..info_bits).map(|_| rng.random::<u8>() & 1).collect();
        let mut coded = vec![0u8; flatbin::conv_code::coded_len(info_bits, rate)];
        let n = encode(&info, rate, &mut coded)?;
        coded.truncate(n);
        let llr: Vec<f64> = coded
            .iter()
            .map(|&c| {
                let noise: f64 = rng.sample(StandardNormal);
                let y = if c == 0 { 1.0 } else { -1.0 } + sigma * noise;
                2.0 * y / sigma2
            })
            .collect();
        let q: Vec<i8> = llr.iter().map(|&l| quantise_llr(l)).collect();
        decoders
            .iter()
            .map(|&d| {
                let out = match d {
                    Decoder::CoreSoft => decode_core(&q, info_bits, rate, false)?,
                    Decoder::CoreHard => decode_core(&q, info_bits, rate, true)?,
                    Decoder::ReferenceF64 => {
                        crate::coding_ref::decode(&llr, info_bits, pattern_of(rate))
                            .ok_or_else(|| anyhow::anyhow!("reference decoder: length"))?
                    }
                };
                let e = out.iter().zip(&info).filter(|(a, b)| a != b).count() as u64;
                let mut c = ErrorCount::new(d, eb_n0_db);
                c.bits = info_bits as u64;
                c.bit_errors = e;
                c.frames = 1;
                c.frame_errors = u64::from(e > 0);
                c.sum_sq = (e * e) as f64;
                Ok(c)
            })
            .collect()
    };
    let parts: Vec<Vec<ErrorCount>> = (0..frames)
        .into_par_iter()
        .map(per_frame)
        .collect::<anyhow::Result<_>>()?;
    let mut total: Vec<ErrorCount> = decoders
        .iter()
        .map(|&d| ErrorCount::new(d, eb_n0_db))
        .collect();
    for p in &parts {
        for (t, c) in total.iter_mut().zip(p) {
            t.add(c);
        }
    }
    Ok(total)
}

/// `round(4·L)` saturated to ±127: the core's i8 LLR scale (DESIGN.md).
pub fn quantise_llr(l: f64) -> i8 {
    (4.0 * l).round().clamp(-127.0, 127.0) as i8
}

/// The theory module's puncturing pattern for `rate` (written independently of the core).
pub fn pattern_of(rate: CodeRate) -> crate::theory::conv_code::PuncturePattern {
    use crate::theory::conv_code::{RATE_1_2, RATE_2_3, RATE_3_4};
    match rate {
        CodeRate::Half => RATE_1_2,
        CodeRate::TwoThirds => RATE_2_3,
        CodeRate::ThreeQuarters => RATE_3_4,
    }
}

/// Where the curve `points` (`(dB, error rate)`, ascending in dB) first falls through
/// `target`: log-linear interpolation between the bracketing points (`None` when no pair
/// brackets it).
pub fn crossing_db(points: &[(f64, f64)], target: f64) -> Option<f64> {
    points.windows(2).find_map(|w| {
        let ((x0, y0), (x1, y1)) = (w[0], w[1]);
        if y0 >= target && y1 <= target && y0 > 0.0 && y1 > 0.0 && y0 != y1 {
            let t = (y0.ln() - target.ln()) / (y0.ln() - y1.ln());
            Some(x0 + t * (x1 - x0))
        } else {
            None
        }
    })
}

/// Decodes one terminated frame with the core's Viterbi decoder
/// ([`flatbin::viterbi::RECOMMENDED_DEPTH`]), soft or hard.
pub fn decode_core(
    llrs: &[i8],
    info_bits: usize,
    rate: CodeRate,
    hard: bool,
) -> anyhow::Result<Vec<u8>> {
    use flatbin::viterbi::{Decision, ViterbiDecoder, RECOMMENDED_DEPTH};
    let decision = if hard { Decision::Hard } else { Decision::Soft };
    let mut dec = Box::new(ViterbiDecoder::<RECOMMENDED_DEPTH>::new(rate, decision));
    let mut out = vec![0u8; info_bits + flatbin::conv_code::TAIL_BITS + 2 * RECOMMENDED_DEPTH];
    let n = dec.decode(llrs, &mut out)?;
    let m = dec.finish(&mut out[n..])?;
    anyhow::ensure!(
        n + m == info_bits,
        "decoder returned {} bits, {info_bits} expected",
        n + m
    );
    out.truncate(info_bits);
    Ok(out)
}
