//! Bit-exact vectors of the coding stage (`conv_code`, `viterbi`, `interleave`, `crc`) on an
//! emulated Cortex-M. Runs `vectors_gen::coding::run_case` on every frame of
//! `vectors_gen::coding::CODING_CASES` (random payload from a fixed seed, CRC-32 appended,
//! encoded at rates 1/2, 2/3 and 3/4, BPSK-like i8 LLRs with deterministic noise, erasures,
//! saturated values and wrong signs; soft and hard decisions; 256- and 1000-bit frames) through
//! `ViterbiDecoder<96>` in chunks, then `run_interleave` (`Interleaver::for_symbol` on the
//! N = 64 numerology, QPSK and 16-QAM) and `run_crc` (the CRC functions on a 32-byte payload);
//! the host runs the same procedures (`xtask/src/coding_vectors.rs`). Every record:
//!
//! ```text
//! coding core=cortex-m0 group=r12-soft-256 rec=decoded idx=1 words=8
//! w 8d3c01f2 ...
//! end
//! ```
//!
//! `codingsize` gives `size_of::<ViterbiDecoder<96>>()` (the decoder's whole RAM) and the
//! peak stack of the decoding pass. Exit status: the number of failures.

#![no_std]
#![no_main]

use core::mem::size_of;
use core::ptr::addr_of_mut;

use cortex_m_rt::entry;
use cortex_m_semihosting::hprintln;
use flatbin::conv_code::CodeRate;
use flatbin::interleave::Interleaver;
use flatbin::viterbi::{Decision, ViterbiDecoder};
use flatbin::Numerology;
use flatbin_firmware::{exit, print_words, stack_peak, CORE};
use panic_semihosting as _;
use vectors_gen::coding::{
    run_case, run_crc, run_interleave, CodingBuffers, InterleaveBuffers, CODING_CASES,
    CRC_PAYLOAD_BYTES, DEPTH, MAX_CODED_BITS, MAX_INFO_BITS,
};
use vectors_gen::rx::numerology_params;

/// FFT size of the interleaver's numerology.
const IL_N: usize = 64;

static mut INFO: [u8; MAX_INFO_BITS] = [0; MAX_INFO_BITS];
static mut CODED: [u8; MAX_CODED_BITS] = [0; MAX_CODED_BITS];
static mut LLRS: [i8; MAX_CODED_BITS] = [0; MAX_CODED_BITS];
static mut DECODED: [u8; MAX_INFO_BITS + 2 * DEPTH] = [0; MAX_INFO_BITS + 2 * DEPTH];
static mut DECODER: Option<ViterbiDecoder<DEPTH>> = None;

/// Prints one record.
fn print(group: &str, index: &mut u32, label: &str, words: &[u32]) {
    hprintln!(
        "coding core={} group={} rec={} idx={} words={}",
        CORE,
        group,
        label,
        *index,
        words.len()
    );
    print_words(words.iter().copied());
    *index += 1;
}

/// Every frame through the decoder (in the static `DECODER`).
#[inline(never)]
fn decode_pass(failures: &mut u32) {
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
    let dec = dec.insert(ViterbiDecoder::new(CodeRate::Half, Decision::Soft));
    let mut b = CodingBuffers {
        info,
        coded,
        llrs,
        decoded,
    };
    let mut index = 0u32;
    for (i, c) in CODING_CASES.iter().enumerate() {
        if !run_case(i, dec, &mut b, &mut |label, words| {
            print(c.label, &mut index, label, words)
        }) {
            hprintln!("error: coding case {}: the procedure failed", c.label);
            *failures += 1;
        }
    }
}

#[entry]
fn main() -> ! {
    let mut failures = 0u32;
    let m = stack_peak(&mut || decode_pass(&mut failures));
    if m.overflowed {
        hprintln!("error: coding: stack overflow in the decoding pass");
        failures += 1;
    }
    let Ok(nu) = Numerology::new(numerology_params(IL_N)) else {
        hprintln!("error: coding: no numerology");
        exit(failures + 1)
    };
    let mut index = 0u32;
    {
        let (mut bits, mut bits_out) = ([0u8; 4 * IL_N], [0u8; 4 * IL_N]);
        let (mut llrs, mut llrs_out) = ([0i8; 4 * IL_N], [0i8; 4 * IL_N]);
        let mut ib = InterleaveBuffers {
            bits: &mut bits,
            bits_out: &mut bits_out,
            llrs: &mut llrs,
            llrs_out: &mut llrs_out,
        };
        if !run_interleave(&nu, &mut ib, &mut |label, words| {
            print("il", &mut index, label, words)
        }) {
            hprintln!("error: coding: the interleaver procedure failed");
            failures += 1;
        }
    }
    let mut frame = [0u8; 8 * CRC_PAYLOAD_BYTES + 32];
    if !run_crc(&mut frame, &mut |label, words| {
        print("crc", &mut index, label, words)
    }) {
        hprintln!("error: coding: the CRC procedure failed");
        failures += 1;
    }
    hprintln!(
        "codingsize core={} viterbi_decoder_96={} interleaver={} stack_decode_pass={} (bytes; the decoder is a static)",
        CORE,
        size_of::<ViterbiDecoder<DEPTH>>(),
        size_of::<Interleaver>(),
        m.stack_bytes
    );
    hprintln!("done core={} failures={}", CORE, failures);
    exit(failures)
}
