//! Cost of the coding stage on an emulated Cortex-M: one measured region per case, run under
//! `xtask/qemu/run-counted` as `cost.rs` (printing outside the regions):
//!
//! ```text
//! case core=cortex-m0 stage=viterbi_soft_r12 n=256 region=1 stack=96
//! ```
//!
//! - `viterbi_{soft,hard}_r{12,23,34}` (n = 256 information bits, CRC-32 included): one
//!   terminated frame through `ViterbiDecoder<96>` — `decode` of all its LLRs in one call,
//!   then `finish` — on the frames of `vectors_gen::coding::CODING_CASES` 0–5 (soft and hard
//!   at each rate; 256 + 6 trellis steps: 524, 393 and 350 LLRs). The decoder is built (`new`)
//!   outside the region. The xtask derives the `_per_bit` rows (instructions / 256).
//! - `conv_encode_r{12,23,34}` (n = 256): `conv_code::encode` of the same frames.
//! - `interleave_{qpsk,qam16}`, `deinterleave_{qpsk,qam16}` (n = 64, the FFT size):
//!   `Interleaver::interleave` of symbol 0's coded bits / `deinterleave` of its i8 LLRs, for the
//!   N = 64 numerology of `vectors_gen::rx::numerology_params` (41 data bins: 82 and 164 bits).
//! - `crc32_bits`, `crc16_bits` (n = 256 bits): `crc32_bits` / `crc16_bits` over a 32-byte
//!   payload in bit form (one bit per byte).
//!
//! `codingsize` prints `size_of::<ViterbiDecoder<96>>()`. Region 0 is the empty stage. Exit
//! status: the number of failures.

#![no_std]
#![no_main]

use core::hint::black_box;
use core::mem::size_of;
use core::ptr::addr_of_mut;

use cortex_m_rt::entry;
use cortex_m_semihosting::hprintln;
use flatbin::conv_code::{encode, CodeRate};
use flatbin::crc::{crc16_bits, crc32_bits};
use flatbin::interleave::Interleaver;
use flatbin::viterbi::{Decision, ViterbiDecoder};
use flatbin::{Modulation, Numerology};
use flatbin_firmware::{exit, measure, Measured, CORE};
use panic_semihosting as _;
use vectors_gen::coding::{
    bits_lsb_first, bits_msb_first, crc_payload, frame, CODING_CASES, CRC_PAYLOAD_BYTES, DEPTH,
    MAX_CODED_BITS, MAX_INFO_BITS,
};
use vectors_gen::rx::numerology_params;

static mut INFO: [u8; MAX_INFO_BITS] = [0; MAX_INFO_BITS];
static mut CODED: [u8; MAX_CODED_BITS] = [0; MAX_CODED_BITS];
static mut LLRS: [i8; MAX_CODED_BITS] = [0; MAX_CODED_BITS];
static mut DECODED: [u8; MAX_INFO_BITS + 2 * DEPTH] = [0; MAX_INFO_BITS + 2 * DEPTH];
static mut DECODER: Option<ViterbiDecoder<DEPTH>> = None;

fn report(stage: &str, n: usize, m: Measured, failures: &mut u32) {
    hprintln!(
        "case core={} stage={} n={} region={} stack={}",
        CORE,
        stage,
        n,
        m.region,
        m.stack_bytes
    );
    if m.overflowed {
        hprintln!(
            "error: {} n={}: stack reached the bottom of the painted area",
            stage,
            n
        );
        *failures += 1;
    }
}

fn fail(what: &str, failures: &mut u32) {
    hprintln!("error: coding: {}", what);
    *failures += 1;
}

fn rate_tag(rate: CodeRate) -> &'static str {
    match rate {
        CodeRate::Half => "r12",
        CodeRate::TwoThirds => "r23",
        CodeRate::ThreeQuarters => "r34",
    }
}

/// The decoder and encoder rows on `CODING_CASES[0..6]`.
#[inline(never)]
fn viterbi(failures: &mut u32) {
    // SAFETY: the only references to the buffers, taken once here.
    let (info, coded, llrs, decoded, dec) = unsafe {
        (
            &mut *addr_of_mut!(INFO),
            &mut *addr_of_mut!(CODED),
            &mut *addr_of_mut!(LLRS),
            &mut *addr_of_mut!(DECODED),
            &mut *addr_of_mut!(DECODER),
        )
    };
    for c in CODING_CASES.iter().take(6) {
        let Some((n, len)) = frame(c, info, coded, llrs) else {
            return fail("frame not generated", failures);
        };
        let tag = rate_tag(c.rate);
        let (info, llrs) = (&info[..n], &llrs[..len]);
        let dec = dec.insert(ViterbiDecoder::new(c.rate, c.decision));
        let mut r = (Ok(0), Ok(0));
        let m = measure(&mut || {
            let dec = black_box(&mut *dec);
            let a = dec.decode(black_box(llrs), &mut decoded[..]);
            let k = *a.as_ref().unwrap_or(&0);
            let b = dec.finish(decoded.get_mut(k..).unwrap_or_default());
            r = (a, b);
        });
        let stage = match (c.decision, c.rate) {
            (Decision::Soft, CodeRate::Half) => "viterbi_soft_r12",
            (Decision::Soft, CodeRate::TwoThirds) => "viterbi_soft_r23",
            (Decision::Soft, CodeRate::ThreeQuarters) => "viterbi_soft_r34",
            (Decision::Hard, CodeRate::Half) => "viterbi_hard_r12",
            (Decision::Hard, CodeRate::TwoThirds) => "viterbi_hard_r23",
            (Decision::Hard, CodeRate::ThreeQuarters) => "viterbi_hard_r34",
        };
        report(stage, n, m, failures);
        let total = match r {
            (Ok(a), Ok(b)) => a + b,
            _ => 0,
        };
        if total != n || decoded[..n] != *info {
            fail(
                "the measured frame did not decode to the sent bits",
                failures,
            );
        }
        if c.decision == Decision::Soft {
            let mut r = Ok(0);
            let m = measure(&mut || {
                r = encode(black_box(info), black_box(c.rate), &mut coded[..]);
            });
            let stage = match tag {
                "r12" => "conv_encode_r12",
                "r23" => "conv_encode_r23",
                _ => "conv_encode_r34",
            };
            report(stage, n, m, failures);
            if r != Ok(len) {
                fail("encode", failures);
            }
        }
    }
}

/// The interleaver rows (symbol 0 of the N = 64 numerology).
#[inline(never)]
fn interleaver(failures: &mut u32) {
    const N: usize = 64;
    let Ok(nu) = Numerology::new(numerology_params(N)) else {
        return fail("no numerology", failures);
    };
    let mut bits = [0u8; 4 * N];
    let mut bits_out = [0u8; 4 * N];
    let mut llrs = [0i8; 4 * N];
    let mut llrs_out = [0i8; 4 * N];
    for (i, (b, l)) in bits.iter_mut().zip(llrs.iter_mut()).enumerate() {
        *b = ((i * 7 + i / 3) & 1) as u8;
        *l = (i as i32 * 37 - 128) as i8;
    }
    for (m, name) in [(Modulation::Qpsk, "qpsk"), (Modulation::Qam16, "qam16")] {
        let Ok(il) = Interleaver::for_symbol(&nu, 0, m) else {
            return fail("interleaver", failures);
        };
        let k = il.coded_bits();
        let mut r = Ok(());
        let meas = measure(&mut || {
            r = black_box(&il).interleave(black_box(&bits[..k]), &mut bits_out[..k]);
        });
        report(
            if name == "qpsk" {
                "interleave_qpsk"
            } else {
                "interleave_qam16"
            },
            N,
            meas,
            failures,
        );
        if r.is_err() {
            fail("interleave", failures);
        }
        let meas = measure(&mut || {
            r = black_box(&il).deinterleave(black_box(&llrs[..k]), &mut llrs_out[..k]);
        });
        report(
            if name == "qpsk" {
                "deinterleave_qpsk"
            } else {
                "deinterleave_qam16"
            },
            N,
            meas,
            failures,
        );
        if r.is_err() {
            fail("deinterleave", failures);
        }
        black_box(&bits_out);
        black_box(&llrs_out);
    }
}

/// The CRC rows (a 32-byte payload in bit form).
#[inline(never)]
fn crc(failures: &mut u32) {
    let p = crc_payload();
    let mut bits = [0u8; 8 * CRC_PAYLOAD_BYTES];
    bits_lsb_first(&p, &mut bits);
    let mut r32 = Ok(0);
    let m = measure(&mut || r32 = crc32_bits(black_box(&bits[..])));
    report("crc32_bits", bits.len(), m, failures);
    bits_msb_first(&p, &mut bits);
    let mut r16 = Ok(0);
    let m = measure(&mut || r16 = crc16_bits(black_box(&bits[..])));
    report("crc16_bits", bits.len(), m, failures);
    // The bit forms equal the byte forms on the packed payload.
    if r32 != Ok(flatbin::crc::crc32(&p)) || r16 != Ok(flatbin::crc::crc16(&p)) {
        fail("CRC bit form differs from the byte form", failures);
    }
}

#[entry]
fn main() -> ! {
    cortex_m::interrupt::disable();
    let mut failures = 0u32;
    let empty = measure(&mut || {});
    report("empty", 0, empty, &mut failures);
    viterbi(&mut failures);
    interleaver(&mut failures);
    crc(&mut failures);
    hprintln!(
        "codingsize core={} viterbi_decoder_96={} (bytes)",
        CORE,
        size_of::<ViterbiDecoder<DEPTH>>()
    );
    hprintln!("done core={} failures={}", CORE, failures);
    exit(failures)
}
