//! The coding stage on deterministic frames: the procedure the firmware
//! (`firmware/src/bin/coding_vectors.rs`) and the host checker (`xtask/src/coding_vectors.rs`)
//! both run, so every word it emits can be compared.
//!
//! A frame ([`frame`]): `info_bits − 32` pseudo-random payload bits from the case's seed, its
//! CRC-32 appended (`append_crc32_bits`), encoded (`conv_code::encode`, terminated, punctured
//! to the case's rate), then mapped to BPSK-like i8 LLRs (coded bit 0 → `+A`, 1 → `−A`) with
//! deterministic pseudo-random noise (a sum of four uniform integers), clipped to ±127, and
//! with erasures (0), values forced to full scale (±127, right sign) and a few deliberately
//! wrong signs at fixed strides. Integers only: the target regenerates the same frame and
//! prints its hash.
//!
//! [`run_case`] decodes it with `ViterbiDecoder` (the case's rate and decision) in chunks of the
//! case's size, then `finish`; it emits the input hashes, every decoded bit (packed), the CRC
//! verdict and the bit errors against the sent bits. [`run_interleave`] runs `Interleaver`
//! (`for_symbol` on the N = 64 numerology, QPSK and 16-QAM, symbols 0 and 1) on pseudo-random
//! bits and i8 LLRs; [`run_crc`] the CRC functions on a 32-byte payload.

use flatbin::conv_code::{coded_len, encode, CodeRate};
use flatbin::crc::{
    append_crc16_bits, append_crc32_bits, check_crc16_bits, check_crc32_bits, crc16, crc16_bits,
    crc32, crc32_bits, Crc16, Crc32,
};
use flatbin::interleave::Interleaver;
use flatbin::viterbi::{Decision, ViterbiDecoder};
use flatbin::{Modulation, Numerology};

/// Longest frame of the cases, information bits (CRC included).
pub const MAX_INFO_BITS: usize = 1000;
/// Longest coded frame (rate 1/2 with the 6 tail steps).
pub const MAX_CODED_BITS: usize = 2 * (MAX_INFO_BITS + 6);
/// Bits of the CRC appended to each frame.
pub const FRAME_CRC_BITS: usize = 32;
/// The decoder's traceback depth in these checks (`flatbin::viterbi::RECOMMENDED_DEPTH`).
pub const DEPTH: usize = 96;

/// One coded frame.
#[derive(Clone, Copy, Debug)]
pub struct CodingCase {
    /// Label in the records.
    pub label: &'static str,
    /// Information bits (payload + CRC-32).
    pub info_bits: usize,
    /// Code rate.
    pub rate: CodeRate,
    /// Decoder decision mode.
    pub decision: Decision,
    /// Seed of the payload and the noise.
    pub seed: u64,
    /// LLR magnitude of a noiseless bit.
    pub amplitude: i32,
    /// Noise: each of the four uniform terms is in `−spread..=spread`.
    pub spread: i32,
    /// LLRs per `decode` call (0: the whole frame in one call).
    pub chunk: usize,
}

const fn case(
    label: &'static str,
    info_bits: usize,
    rate: CodeRate,
    decision: Decision,
    seed: u64,
    spread: i32,
    chunk: usize,
) -> CodingCase {
    CodingCase {
        label,
        info_bits,
        rate,
        decision,
        seed,
        amplitude: 40,
        spread,
        chunk,
    }
}

/// The frames: every rate soft and hard at 256 information bits, and 1000-bit frames (several
/// traceback windows of [`DEPTH`]) at rates 1/2 and 3/4, with mild noise (σ ≈ 17 against an
/// amplitude of 40) besides the erasures, saturated values and wrong signs; and one frame in
/// heavy noise (σ ≈ 35, hard decisions at rate 3/4) that the decoder is not expected to
/// recover, so that a failing CRC verdict is compared too.
#[rustfmt::skip]
pub const CODING_CASES: [CodingCase; 9] = [
    case("r12-soft-256", 256, CodeRate::Half, Decision::Soft, 11, 14, 37),
    case("r23-soft-256", 256, CodeRate::TwoThirds, Decision::Soft, 12, 14, 1),
    case("r34-soft-256", 256, CodeRate::ThreeQuarters, Decision::Soft, 13, 14, 0),
    case("r12-hard-256", 256, CodeRate::Half, Decision::Hard, 14, 14, 64),
    case("r23-hard-256", 256, CodeRate::TwoThirds, Decision::Hard, 15, 14, 0),
    case("r34-hard-256", 256, CodeRate::ThreeQuarters, Decision::Hard, 16, 14, 5),
    case("r12-soft-1000", 1000, CodeRate::Half, Decision::Soft, 17, 14, 101),
    case("r34-soft-1000", 1000, CodeRate::ThreeQuarters, Decision::Soft, 18, 14, 0),
    case("r34-hard-noisy", 256, CodeRate::ThreeQuarters, Decision::Hard, 19, 30, 50),
];

/// Stride of the erasures (LLR 0) in the coded frame.
pub const ERASE_EVERY: usize = 29;
/// Stride of the LLRs forced to full scale (±127, right sign).
pub const SATURATE_EVERY: usize = 23;
/// Stride of the deliberately wrong signs (magnitude [`WRONG_MAGNITUDE`]).
pub const WRONG_EVERY: usize = 151;
/// Magnitude of a deliberately wrong LLR.
pub const WRONG_MAGNITUDE: i32 = 50;

/// xorshift32 (integers only, the same bits on every core).
#[derive(Clone, Copy, Debug)]
pub struct Rng(u32);

impl Rng {
    /// From a seed (never the all-zero state).
    pub fn new(seed: u64) -> Self {
        let s = (seed as u32) ^ ((seed >> 32) as u32) ^ 0x9e37_79b9;
        Self(if s == 0 { 1 } else { s })
    }

    /// The next word.
    pub fn next_u32(&mut self) -> u32 {
        let mut x = self.0;
        x ^= x << 13;
        x ^= x >> 17;
        x ^= x << 5;
        self.0 = x;
        x
    }

    /// A bit.
    pub fn bit(&mut self) -> u8 {
        (self.next_u32() >> 31) as u8
    }

    /// Uniform in `−spread..=spread` (`spread` ≤ 127).
    fn uniform(&mut self, spread: i32) -> i32 {
        let width = (2 * spread + 1) as u32;
        // Multiply-shift: no division (the Cortex-M0 has no divider).
        ((u64::from(self.next_u32()) * u64::from(width)) >> 32) as i32 - spread
    }
}

/// FNV-1a over bytes from `h`.
pub fn fnv_from(h: u32, bytes: impl Iterator<Item = u8>) -> u32 {
    bytes.fold(h, |h, b| (h ^ u32::from(b)).wrapping_mul(0x0100_0193))
}

/// The FNV-1a offset basis.
pub const HASH_START: u32 = 0x811c_9dc5;

/// Bits (one per byte) packed 32 to a word, first bit in bit 0.
pub fn pack_bits(bits: &[u8], emit_word: &mut dyn FnMut(u32)) {
    for chunk in bits.chunks(32) {
        let w = chunk
            .iter()
            .enumerate()
            .fold(0u32, |w, (i, &b)| w | (u32::from(b & 1) << i));
        emit_word(w);
    }
}

/// i8 values packed four to a word, first value in the low byte.
pub fn pack_i8(values: &[i8], emit_word: &mut dyn FnMut(u32)) {
    for chunk in values.chunks(4) {
        let w = chunk
            .iter()
            .enumerate()
            .fold(0u32, |w, (i, &v)| w | (u32::from(v as u8) << (8 * i)));
        emit_word(w);
    }
}

/// The LLR of coded bit `bit` at position `i` with noise from `rng`.
fn llr(rng: &mut Rng, c: &CodingCase, i: usize, bit: u8) -> i8 {
    let sign = if bit == 0 { 1 } else { -1 };
    let noise: i32 = (0..4).map(|_| rng.uniform(c.spread)).sum();
    let v = if i % ERASE_EVERY == ERASE_EVERY - 1 {
        0
    } else if i % SATURATE_EVERY == SATURATE_EVERY - 1 {
        127 * sign
    } else if i % WRONG_EVERY == WRONG_EVERY / 2 {
        -WRONG_MAGNITUDE * sign
    } else {
        (c.amplitude * sign + noise).clamp(-127, 127)
    };
    v as i8
}

/// Writes case `c`'s frame: its information bits (payload and CRC-32) to `info`, the coded
/// bits to `coded` and their LLRs to `llrs`. Returns (information bits, coded bits), or None
/// when a buffer is short.
pub fn frame(
    c: &CodingCase,
    info: &mut [u8],
    coded: &mut [u8],
    llrs: &mut [i8],
) -> Option<(usize, usize)> {
    let n = c.info_bits;
    let len = coded_len(n, c.rate);
    let info = info.get_mut(..n)?;
    let coded = coded.get_mut(..len)?;
    let llrs = llrs.get_mut(..len)?;
    let mut rng = Rng::new(c.seed);
    for b in info.iter_mut().take(n.checked_sub(FRAME_CRC_BITS)?) {
        *b = rng.bit();
    }
    append_crc32_bits(info).ok()?;
    if encode(info, c.rate, coded).ok()? != len {
        return None;
    }
    for (i, (l, &b)) in llrs.iter_mut().zip(coded.iter()).enumerate() {
        *l = llr(&mut rng, c, i, b);
    }
    Some((n, len))
}

/// Buffers of [`run_case`].
pub struct CodingBuffers<'a> {
    /// At least [`MAX_INFO_BITS`].
    pub info: &'a mut [u8],
    /// At least [`MAX_CODED_BITS`].
    pub coded: &'a mut [u8],
    /// At least [`MAX_CODED_BITS`].
    pub llrs: &'a mut [i8],
    /// At least [`MAX_INFO_BITS`] + `2·DEPTH` (what `decode` may write at once).
    pub decoded: &'a mut [u8],
}

/// A record: a label and its words.
pub type Emit<'e> = dyn FnMut(&str, &[u32]) + 'e;

/// Emits a record built word by word (at most 64 words; longer ones are split).
fn emit_words(label: &str, emit: &mut Emit, fill: &mut dyn FnMut(&mut dyn FnMut(u32))) {
    let mut buf = [0u32; 64];
    let mut len = 0usize;
    fill(&mut |w| {
        if len == buf.len() {
            emit(label, &buf);
            len = 0;
        }
        if let Some(slot) = buf.get_mut(len) {
            *slot = w;
        }
        len += 1;
    });
    emit(label, buf.get(..len).unwrap_or_default());
}

/// Runs case `case_index` of [`CODING_CASES`] through `dec` (rebuilt for the case's rate and
/// decision) and emits: `input` (information bits, coded bits, hash of the information bits,
/// hash of the LLRs, LLR sign errors against the coded bits: erasures count as errors),
/// `decoded` (every decoded bit, packed), `verdict` (decoded bits, CRC-32 verdict: 1 pass,
/// 0 fail, 2 error; bit errors against the sent bits; bits written by `decode`, by `finish`).
/// False when the case is unknown, a buffer is short or a call fails.
pub fn run_case<const D: usize>(
    case_index: usize,
    dec: &mut ViterbiDecoder<D>,
    b: &mut CodingBuffers<'_>,
    emit: &mut Emit,
) -> bool {
    let Some(c) = CODING_CASES.get(case_index) else {
        return false;
    };
    let Some((n, len)) = frame(c, b.info, b.coded, b.llrs) else {
        return false;
    };
    let info = b.info.get(..n).unwrap_or_default();
    let coded = b.coded.get(..len).unwrap_or_default();
    let llrs = b.llrs.get(..len).unwrap_or_default();
    let sign_errors = llrs
        .iter()
        .zip(coded)
        .filter(|(&l, &c)| (l <= 0 && c == 0) || (l >= 0 && c == 1))
        .count() as u32;
    emit(
        "input",
        &[
            n as u32,
            len as u32,
            fnv_from(HASH_START, info.iter().copied()),
            fnv_from(HASH_START, llrs.iter().map(|&v| v as u8)),
            sign_errors,
        ],
    );
    *dec = ViterbiDecoder::new(c.rate, c.decision);
    let chunk = if c.chunk == 0 { len.max(1) } else { c.chunk };
    let mut written = 0usize;
    let mut ok = true;
    for part in llrs.chunks(chunk) {
        let out = b.decoded.get_mut(written..).unwrap_or_default();
        match dec.decode(part, out) {
            Ok(k) => written += k,
            Err(_) => ok = false,
        }
    }
    let by_decode = written;
    let out = b.decoded.get_mut(written..).unwrap_or_default();
    match dec.finish(out) {
        Ok(k) => written += k,
        Err(_) => ok = false,
    }
    let decoded = b.decoded.get(..written).unwrap_or_default();
    emit_words("decoded", emit, &mut |put| pack_bits(decoded, put));
    let verdict = match check_crc32_bits(decoded) {
        Ok(true) => 1,
        Ok(false) => 0,
        Err(_) => 2,
    };
    let errors = decoded
        .iter()
        .zip(info)
        .filter(|(a, b)| a != b)
        .count()
        .saturating_add(n.abs_diff(written)) as u32;
    emit(
        "verdict",
        &[
            written as u32,
            verdict,
            errors,
            by_decode as u32,
            (written - by_decode) as u32,
        ],
    );
    ok && written == n
}

/// Buffers of [`run_interleave`]: each at least 4·N (16-QAM on every bin).
pub struct InterleaveBuffers<'a> {
    /// Bits in.
    pub bits: &'a mut [u8],
    /// Interleaved bits.
    pub bits_out: &'a mut [u8],
    /// LLRs in.
    pub llrs: &'a mut [i8],
    /// De-interleaved LLRs.
    pub llrs_out: &'a mut [i8],
}

/// The modulations and symbols of [`run_interleave`].
pub const INTERLEAVE_MODULATIONS: [Modulation; 2] = [Modulation::Qpsk, Modulation::Qam16];
/// Symbols of [`run_interleave`] (their data-bin counts may differ: pilots).
pub const INTERLEAVE_SYMBOLS: [u32; 2] = [0, 1];

/// `Interleaver::for_symbol(nu, symbol, modulation)` for the modulations and symbols above:
/// per pair, `il` (data bins, coded bits, columns, minimum spread), `interleaved` (the bits,
/// packed), `deinterleaved` (the LLRs, packed four to a word), `roundtrip` (the de-interleaved
/// interleaved bits equal the input: 1). False when a call fails or a buffer is short.
pub fn run_interleave(nu: &Numerology, b: &mut InterleaveBuffers<'_>, emit: &mut Emit) -> bool {
    let mut ok = true;
    let mut rng = Rng::new(0x1e7e_a7e5);
    for m in INTERLEAVE_MODULATIONS {
        for symbol in INTERLEAVE_SYMBOLS {
            let Ok(il) = Interleaver::for_symbol(nu, symbol, m) else {
                return false;
            };
            let n = il.coded_bits();
            let (Some(bits), Some(bits_out), Some(llrs), Some(llrs_out)) = (
                b.bits.get_mut(..n),
                b.bits_out.get_mut(..n),
                b.llrs.get_mut(..n),
                b.llrs_out.get_mut(..n),
            ) else {
                return false;
            };
            bits.iter_mut().for_each(|v| *v = rng.bit());
            llrs.iter_mut().for_each(|v| *v = rng.next_u32() as i8);
            emit(
                "il",
                &[
                    il.data_bins() as u32,
                    n as u32,
                    il.columns() as u32,
                    il.min_subcarrier_spread() as u32,
                ],
            );
            ok &= il.interleave(bits, bits_out).is_ok();
            emit_words("interleaved", emit, &mut |put| pack_bits(bits_out, put));
            ok &= il.deinterleave(llrs, llrs_out).is_ok();
            emit_words("deinterleaved", emit, &mut |put| pack_i8(llrs_out, put));
            // Round trip on the bits, reusing the LLR buffer (0/1 as i8).
            for (l, &v) in llrs.iter_mut().zip(bits_out.iter()) {
                *l = v as i8;
            }
            ok &= il.deinterleave(llrs, llrs_out).is_ok();
            let same = llrs_out
                .iter()
                .zip(bits.iter())
                .all(|(&a, &b)| a as u8 == b);
            emit("roundtrip", &[u32::from(same)]);
        }
    }
    ok
}

/// Length of the CRC payload, bytes.
pub const CRC_PAYLOAD_BYTES: usize = 32;

/// The CRC payload (pseudo-random bytes).
pub fn crc_payload() -> [u8; CRC_PAYLOAD_BYTES] {
    let mut rng = Rng::new(0xc0de_c4c4);
    let mut p = [0u8; CRC_PAYLOAD_BYTES];
    p.iter_mut().for_each(|v| *v = rng.next_u32() as u8);
    p
}

/// The payload's bits as CRC-32 reads them (LSB first per byte).
pub fn bits_lsb_first(bytes: &[u8], out: &mut [u8]) {
    for (i, o) in out.iter_mut().enumerate().take(8 * bytes.len()) {
        *o = bytes.get(i / 8).map_or(0, |b| (b >> (i % 8)) & 1);
    }
}

/// The payload's bits as CRC-16 reads them (MSB first per byte).
pub fn bits_msb_first(bytes: &[u8], out: &mut [u8]) {
    for (i, o) in out.iter_mut().enumerate().take(8 * bytes.len()) {
        *o = bytes.get(i / 8).map_or(0, |b| (b >> (7 - i % 8)) & 1);
    }
}

/// The CRC functions on [`crc_payload`] (`frame` holds at least 8·32 + 32 bits): `crc32`
/// (byte form, bit form, streaming bytes in two pieces, streaming bits in two pieces, residue
/// after the appended CRC; check verdicts of the good frame and with bit 100 flipped) and
/// `crc16` the same. False when a call fails.
pub fn run_crc(frame: &mut [u8], emit: &mut Emit) -> bool {
    let p = crc_payload();
    let nbits = 8 * CRC_PAYLOAD_BYTES;
    let mut ok = true;
    let verdict = |r: Result<bool, _>| match r {
        Ok(true) => 1u32,
        Ok(false) => 0,
        Err(flatbin::ProcessError::BufferLength { .. }) => 2,
        Err(_) => 3,
    };
    // CRC-32.
    let Some(f) = frame.get_mut(..nbits + 32) else {
        return false;
    };
    bits_lsb_first(&p, f);
    let (bits, _) = f.split_at(nbits);
    let by_bits = crc32_bits(bits);
    let mut s = Crc32::new();
    s.update(p.get(..13).unwrap_or_default());
    s.update(p.get(13..).unwrap_or_default());
    let mut t = Crc32::new();
    ok &= t.update_bits(bits.get(..77).unwrap_or_default()).is_ok();
    ok &= t.update_bits(bits.get(77..).unwrap_or_default()).is_ok();
    ok &= append_crc32_bits(f).is_ok();
    let mut r = Crc32::new();
    ok &= r.update_bits(f).is_ok();
    let good = verdict(check_crc32_bits(f));
    if let Some(b) = f.get_mut(100) {
        *b ^= 1;
    }
    let bad = verdict(check_crc32_bits(f));
    emit(
        "crc32",
        &[
            crc32(&p),
            by_bits.unwrap_or(0),
            s.finish(),
            t.finish(),
            r.residue(),
            good,
            bad,
        ],
    );
    // CRC-16.
    let Some(f) = frame.get_mut(..nbits + 16) else {
        return false;
    };
    bits_msb_first(&p, f);
    let (bits, _) = f.split_at(nbits);
    let by_bits = crc16_bits(bits);
    let mut s = Crc16::new();
    s.update(p.get(..13).unwrap_or_default());
    s.update(p.get(13..).unwrap_or_default());
    let mut t = Crc16::new();
    ok &= t.update_bits(bits.get(..77).unwrap_or_default()).is_ok();
    ok &= t.update_bits(bits.get(77..).unwrap_or_default()).is_ok();
    ok &= append_crc16_bits(f).is_ok();
    let mut r = Crc16::new();
    ok &= r.update_bits(f).is_ok();
    let good = verdict(check_crc16_bits(f));
    if let Some(b) = f.get_mut(100) {
        *b ^= 1;
    }
    let bad = verdict(check_crc16_bits(f));
    emit(
        "crc16",
        &[
            u32::from(crc16(&p)),
            u32::from(by_bits.unwrap_or(0)),
            u32::from(s.finish()),
            u32::from(t.finish()),
            u32::from(r.residue()),
            good,
            bad,
        ],
    );
    ok & by_bits.is_ok()
}
