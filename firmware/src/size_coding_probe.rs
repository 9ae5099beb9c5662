// Body of the coding size probes `src/bin/size_coding_<family>.rs` (each file is `include!` of
// this one; kept apart from the other probes so their figures do not move).
//
// Each holds one coding stage and nothing else; its code size is what it has beyond
// `size_baseline` (nm -S sizes of code and read-only data):
// - `size_coding_viterbi`: `ViterbiDecoder::<96>::new` (any rate, soft or hard: the rate and
//   decision come through `black_box`), `decode`, `finish`;
// - `size_coding_encode`: `conv_code::encode` (any rate);
// - `size_coding_interleave`: `Interleaver::new` (any modulation), `interleave`,
//   `deinterleave` on i8;
// - `size_coding_crc32`: `crc::crc32_bits`; `size_coding_crc16`: `crc::crc16_bits`.
// Not run. The panic handler references an undefined symbol, as in `panic_free`.

use core::hint::black_box;

use cortex_m_rt::entry;
use flatbin::conv_code::CodeRate;
use flatbin::viterbi::{Decision, ViterbiDecoder};
use flatbin::Modulation;
use flatbin_firmware::exit;

extern "C" {
    /// Deliberately never defined: referenced only from the panic handler.
    fn flatbin_panic_path_reachable() -> !;
}

#[panic_handler]
fn panic(_: &core::panic::PanicInfo) -> ! {
    // SAFETY: never executed in a correct build: the link fails while this is reachable.
    unsafe { flatbin_panic_path_reachable() }
}

const NAME: &str = env!("CARGO_BIN_NAME");

/// `NAME` ends with `suffix` (const).
const fn ends_with(suffix: &str) -> bool {
    let (a, b) = (NAME.as_bytes(), suffix.as_bytes());
    if b.len() > a.len() {
        return false;
    }
    let mut i = 0;
    while i < b.len() {
        if a[a.len() - b.len() + i] != b[i] {
            return false;
        }
        i += 1;
    }
    true
}

static mut DECODER: Option<ViterbiDecoder<96>> = None;
static mut BITS: [u8; 512] = [0; 512];
static mut OUT: [u8; 512] = [0; 512];
static mut LLRS: [i8; 512] = [0; 512];
static mut LLRS_OUT: [i8; 512] = [0; 512];

#[entry]
fn main() -> ! {
    let rate = black_box(CodeRate::Half);
    // SAFETY: the only references to the buffers (statics: no stack arrays, so no memset or
    // memcpy enters the figures through the probe itself).
    let (bits, out, llrs, llrs_out) = unsafe {
        (
            black_box(&mut *core::ptr::addr_of_mut!(BITS)),
            black_box(&mut *core::ptr::addr_of_mut!(OUT)),
            black_box(&mut *core::ptr::addr_of_mut!(LLRS)),
            black_box(&mut *core::ptr::addr_of_mut!(LLRS_OUT)),
        )
    };
    let n = black_box(256).min(bits.len());
    if ends_with("_viterbi") {
        // SAFETY: the only reference to the decoder.
        let slot = unsafe { &mut *core::ptr::addr_of_mut!(DECODER) };
        let dec = slot.insert(ViterbiDecoder::new(rate, black_box(Decision::Soft)));
        let k = black_box(dec.decode(&llrs[..], &mut out[..])).unwrap_or(0);
        black_box(dec.finish(out.get_mut(k..).unwrap_or_default())).ok();
    } else if ends_with("_encode") {
        black_box(flatbin::conv_code::encode(&bits[..n], rate, &mut out[..])).ok();
    } else if ends_with("_interleave") {
        if let Ok(il) =
            flatbin::interleave::Interleaver::new(black_box(41), black_box(Modulation::Qam16))
        {
            black_box(il.interleave(&bits[..], &mut out[..])).ok();
            black_box(il.deinterleave(&llrs[..], &mut llrs_out[..])).ok();
        }
    } else if ends_with("_crc32") {
        black_box(flatbin::crc::crc32_bits(&bits[..n])).ok();
    } else if ends_with("_crc16") {
        black_box(flatbin::crc::crc16_bits(&bits[..n])).ok();
    }
    exit(0)
}
