//! Panic-free link check of the coding stage (`conv_code`, `viterbi`, `interleave`, `crc`,
//! `packet`), as
//! `panic_free.rs`: every public entry point of the five modules is called with `black_box`
//! inputs, for every code rate and both decision modes, and the panic handler calls
//! `flatbin_panic_path_reachable`, which is defined nowhere, so a surviving panic path fails
//! the link (`--features locate-panics` builds a diagnostic variant that links).
//!
//! Everything is called from `per_bit`, the per-bit path of the coding stage (no
//! configuration there needs floating point either): on the Cortex-M0 the xtask follows the
//! disassembly's direct calls from `coding_panic_free::per_bit` and requires that no soft-float
//! or `libm` routine is reachable (an indirect branch fails too). The numerology the
//! interleaver reads is built in `main` (`Numerology::new`, soft float on the M0 for the pilot
//! amplitude, configuration time).

#![no_std]
#![no_main]

use core::hint::black_box;
use core::ptr::addr_of_mut;

use cortex_m_rt::entry;
use flatbin::conv_code::{self, CodeRate, ConvEncoder, Depuncturer};
use flatbin::crc::{self, Crc16, Crc32};
use flatbin::interleave::Interleaver;
use flatbin::packet::{PacketDecoder, PacketFormat};
use flatbin::viterbi::{Decision, ViterbiDecoder, RECOMMENDED_DEPTH};
use flatbin::{Modulation, Numerology};
use flatbin_firmware::exit;
use vectors_gen::rx::numerology_params;

#[cfg(not(feature = "locate-panics"))]
extern "C" {
    /// Deliberately never defined: referenced only from the panic handler.
    fn flatbin_panic_path_reachable() -> !;
}

#[cfg(not(feature = "locate-panics"))]
#[panic_handler]
fn panic(_: &core::panic::PanicInfo) -> ! {
    // SAFETY: never executed in a correct build: the link fails while this is reachable.
    unsafe { flatbin_panic_path_reachable() }
}

/// Diagnostic build (`--features locate-panics`): links, so the xtask can list the call sites
/// of the `core::panicking` functions that survived.
#[cfg(feature = "locate-panics")]
#[panic_handler]
fn panic(_: &core::panic::PanicInfo) -> ! {
    cortex_m::asm::udf()
}

/// Keeps a value alive without a `must_use` warning (results are not inspected here).
fn sink<T>(value: T) {
    black_box(value);
}

const BITS: usize = 1024;

static mut INFO: [u8; BITS] = [0; BITS];
static mut CODED: [u8; BITS] = [0; BITS];
static mut LLRS: [i8; BITS] = [0; BITS];
static mut OUT: [u8; BITS] = [0; BITS];
static mut LLRS_OUT: [i8; BITS] = [0; BITS];
static mut SOFT: [f32; 256] = [0.0; 256];
static mut SOFT_OUT: [f32; 256] = [0.0; 256];
static mut DECODER: Option<ViterbiDecoder<RECOMMENDED_DEPTH>> = None;
static mut SMALL: Option<ViterbiDecoder<8>> = None;
static mut PACKET: Option<PacketDecoder<RECOMMENDED_DEPTH>> = None;

/// One length from the optimiser's point of view: anything up to `max`.
fn len(max: usize) -> usize {
    black_box(max).min(max)
}

/// Every coding entry point for `rate` and `decision`; no floating point may be reachable from
/// here.
#[inline(never)]
fn per_bit(nu: &Numerology, rate: CodeRate, decision: Decision) {
    // SAFETY: the only references to the buffers, taken once per call, not kept.
    let (info, coded, llrs, out, llrs_out, soft, soft_out, dec, small) = unsafe {
        (
            &mut *addr_of_mut!(INFO),
            &mut *addr_of_mut!(CODED),
            &mut *addr_of_mut!(LLRS),
            &mut *addr_of_mut!(OUT),
            &mut *addr_of_mut!(LLRS_OUT),
            &mut *addr_of_mut!(SOFT),
            &mut *addr_of_mut!(SOFT_OUT),
            &mut *addr_of_mut!(DECODER),
            &mut *addr_of_mut!(SMALL),
        )
    };
    let n = len(BITS);
    let info = info.get_mut(..black_box(n)).unwrap_or_default();

    // conv_code.
    sink(rate.numerator());
    sink(rate.denominator());
    sink(rate.puncture_pattern());
    sink(conv_code::branch_output(black_box(37), black_box(1)));
    sink(conv_code::next_state(black_box(63), black_box(1)));
    sink(conv_code::mother_len(black_box(n)));
    sink(conv_code::coded_len(black_box(n), rate));
    let mut enc = ConvEncoder::new();
    sink(enc.push(black_box(1)));
    sink(enc.state());
    enc.reset();
    black_box(&mut enc);
    sink(conv_code::encode(
        black_box(&info[..]),
        rate,
        black_box(&mut coded[..]),
    ));
    let mut d = Depuncturer::new(rate);
    sink(d.rate());
    sink(d.push(black_box(-7)));
    sink(d.has_half_pair());
    sink(d.held());
    sink(d.pairs_for(black_box(n)));
    d.reset();
    black_box(&mut d);
    sink(conv_code::depuncture(
        black_box(&llrs[..]),
        rate,
        black_box(&mut llrs_out[..]),
    ));

    // viterbi.
    let dec = dec.insert(ViterbiDecoder::new(rate, decision));
    let dec = black_box(dec);
    sink(dec.rate());
    sink(dec.decision());
    sink(dec.pending_steps());
    sink(dec.path_metrics());
    sink(dec.decoded_len(black_box(n)));
    sink(dec.finish_len());
    sink(dec.decode(black_box(&llrs[..len(BITS)]), black_box(&mut out[..])));
    sink(dec.finish(black_box(&mut out[..])));
    dec.reset();
    let small = small.insert(ViterbiDecoder::new(rate, decision));
    let small = black_box(small);
    sink(small.decode(black_box(&llrs[..len(BITS)]), black_box(&mut out[..])));
    sink(small.finish(black_box(&mut out[..])));

    // interleave.
    for m in Modulation::ALL {
        if let Ok(il) = Interleaver::new(black_box(n / 4), black_box(m)) {
            sink(il.data_bins());
            sink(il.modulation());
            sink(il.coded_bits());
            sink(il.columns());
            sink(il.min_subcarrier_spread());
            sink(il.index(black_box(5)));
            let k = len(BITS);
            sink(il.interleave(black_box(&coded[..k]), black_box(&mut out[..k])));
            sink(il.deinterleave(black_box(&llrs[..k]), black_box(&mut llrs_out[..k])));
            let k = len(soft.len());
            sink(il.deinterleave(black_box(&soft[..k]), black_box(&mut soft_out[..k])));
        }
        if let Ok(il) = Interleaver::for_symbol(nu, black_box(1), black_box(m)) {
            sink(il.interleave(black_box(&coded[..]), black_box(&mut out[..])));
        }
    }

    // crc.
    let bytes = black_box(&coded[..len(64)]);
    sink(crc::crc16(bytes));
    sink(crc::crc32(bytes));
    sink(crc::crc16_bits(black_box(&info[..])));
    sink(crc::crc32_bits(black_box(&info[..])));
    let mut c16 = Crc16::new();
    c16.update(bytes);
    sink(c16.update_bits(black_box(&info[..])));
    sink(c16.finish());
    sink(c16.residue());
    sink(Crc16::default().finish());
    let mut c32 = Crc32::new();
    c32.update(bytes);
    sink(c32.update_bits(black_box(&info[..])));
    sink(c32.finish());
    sink(c32.residue());
    sink(Crc32::default().finish());
    sink(crc::append_crc16_bits(black_box(&mut info[..])));
    sink(crc::append_crc32_bits(black_box(&mut info[..])));
    sink(crc::check_crc16_bits(black_box(&info[..])));
    sink(crc::check_crc32_bits(black_box(&info[..])));

    // packet (integer only: the format from the numerology's data bins).
    // SAFETY: the only reference to the decoder slot, taken once per call, not kept.
    let slot = unsafe { &mut *addr_of_mut!(PACKET) };
    for m in [Modulation::Qpsk, Modulation::Qam16] {
        let Ok(f) = PacketFormat::new(nu, black_box(m), rate, black_box(len(512))) else {
            continue;
        };
        sink(f.modulation());
        sink(f.rate());
        sink(f.payload_bits());
        sink(f.coded_bits());
        sink(f.symbols());
        sink(f.symbol_bits(black_box(1)));
        let k = len(BITS);
        let packet = info.get_mut(..k).unwrap_or_default();
        sink(f.encode(black_box(packet), black_box(&mut coded[..])));
        let (half_a, half_b) = out.split_at_mut(BITS / 2);
        sink(f.symbol_bits_out(black_box(0), black_box(&coded[..]), half_a, half_b));
        let dec = slot.insert(PacketDecoder::new(f));
        sink(dec.format());
        sink(dec.next_symbol());
        let (la, lb) = llrs_out.split_at_mut(BITS / 2);
        for (d, s) in la.iter_mut().zip(black_box(&llrs[..])) {
            *d = *s;
        }
        for s in 0..black_box(f.symbols()) {
            sink(dec.push_symbol(black_box(s), &la[..], &mut lb[..], black_box(&mut info[..])));
        }
        dec.reset();
    }
}

#[entry]
fn main() -> ! {
    if let Ok(nu) = Numerology::new(black_box(numerology_params(64))) {
        for rate in [CodeRate::Half, CodeRate::TwoThirds, CodeRate::ThreeQuarters] {
            for decision in [Decision::Soft, Decision::Hard] {
                per_bit(black_box(&nu), black_box(rate), black_box(decision));
            }
        }
    }
    exit(0)
}
