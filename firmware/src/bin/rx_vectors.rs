//! Bit-exact vectors of the Q15 receiver: the cases of `vectors_gen::rx::RX_CASES` (a
//! deterministic OFDM frame through a fixed multipath channel plus noise, with clipped
//! bursts), received symbol by symbol from the design tables `build.rs` writes; every output
//! word is printed in hex so the host can run the same receiver on the same frame and compare
//! bit for bit (`cargo xtask mcu`). Per symbol:
//!
//! ```text
//! rxv core=cortex-m0 n=64 case=qpsk-12dBFS sym=0 in=1a2b3c4d design=5e6f7a8b status=ok
//!     data=42 llrs=84 clipped=0 words=147
//! w 0ffa0012 ...            (16 words a line)
//! end
//! ```
//!
//! (one line). `in` hashes the symbol's samples and `design` the design table in use (both
//! FNV-1a, `vectors_gen::rx`). Words: the equalized symbols (Q3.12 pairs packed as `Cq15`),
//! then the SINR weights (mantissa, exponent: two words each), then the i8 LLRs, four to a
//! word, first LLR in the low byte. Exit status: the number of failures (a receiver that
//! could not be built, a stack overflow while building it).

#![no_std]
#![no_main]

use core::ptr::addr_of_mut;

use cortex_m_rt::entry;
use cortex_m_semihosting::hprintln;
use flatbin::fixed::Cq15;
use flatbin::fixed_math::Scaled;
use flatbin::receiver_q15::{DesignQ15, ReceiverQ15};
use flatbin::{fft_q15::Q15Fft, ConfigError, Numerology};
use flatbin_firmware::rx_tables::{RxDesigns, Tables};
use flatbin_firmware::{exit, print_words, stack_peak, CORE};
use panic_semihosting as _;
use vectors_gen::rx::{
    design_hash, numerology_params, output_words, samples_hash, RxFrame, RX_CASES, RX_K, RX_M,
    RX_SYMBOLS,
};

/// Placeholder of an empty receiver slot.
const NOT_BUILT: ConfigError = ConfigError::PilotSpacingZero;

type Rx<const N: usize> = ReceiverQ15<Q15Fft<N>, N, RX_K, RX_M>;

/// Largest size: 256 on the M4F; the M0's 16 KiB RAM holds the receiver at 64 only.
#[cfg(not(core_m0))]
const MAX_N: usize = 256;
#[cfg(core_m0)]
const MAX_N: usize = 64;

static mut SAMPLES: [Cq15; MAX_N + MAX_N / 8] = [Cq15::ZERO; MAX_N + MAX_N / 8];
static mut EQUALIZED: [Cq15; MAX_N] = [Cq15::ZERO; MAX_N];
static mut SINR: [Scaled; MAX_N] = [Scaled { mant: 0, exp: 0 }; MAX_N];
static mut LLRS: [i8; 4 * MAX_N] = [0; 4 * MAX_N];

static mut RX_64: Result<Rx<64>, ConfigError> = Err(NOT_BUILT);
static mut FRAME_64: Option<RxFrame<64>> = None;
#[cfg(not(core_m0))]
static mut RX_256: Result<Rx<256>, ConfigError> = Err(NOT_BUILT);
#[cfg(not(core_m0))]
static mut FRAME_256: Option<RxFrame<256>> = None;

struct Buffers {
    samples: &'static mut [Cq15],
    equalized: &'static mut [Cq15],
    sinr: &'static mut [Scaled],
    llrs: &'static mut [i8],
}

/// Builds a receiver into `slot`.
#[inline(never)]
fn build<const N: usize>(
    slot: &mut Result<Rx<N>, ConfigError>,
    nu: &Numerology,
    design: &DesignQ15<N, RX_K, RX_M>,
) {
    *slot = Rx::<N>::new(nu, Q15Fft::new(), design.clone());
}

/// Builds the frame generator of case `k` into `slot` (its own frame, not nested in
/// [`build`]'s).
#[inline(never)]
fn build_frame<const N: usize>(slot: &mut Option<RxFrame<N>>, k: usize) {
    *slot = RxFrame::<N>::new(k);
}

/// Every case at size `N`; the receiver and the frame generator live in the caller's slots.
fn run<const N: usize>(
    rx_slot: &mut Result<Rx<N>, ConfigError>,
    frame_slot: &mut Option<RxFrame<N>>,
    b: &mut Buffers,
    failures: &mut u32,
) where
    Tables: RxDesigns<N>,
{
    for (k, case) in RX_CASES.iter().enumerate() {
        let (Ok(nu), Some(design)) = (
            Numerology::new(numerology_params(N)),
            Tables::design(case.design),
        ) else {
            hprintln!(
                "error: n={} case={}: no numerology or design",
                N,
                case.label
            );
            *failures += 1;
            continue;
        };
        // Built in place in the static slots; the stack it took is checked for overflow.
        let built = stack_peak(&mut || {
            build(rx_slot, &nu, design);
            build_frame(frame_slot, k);
        });
        if k == 0 {
            hprintln!(
                "rxbuild core={} n={} stack={} (peak stack of ReceiverQ15::new from the table \
                 and of the frame generator)",
                CORE,
                N,
                built.stack_bytes
            );
        }
        if built.overflowed {
            hprintln!(
                "error: n={} case={}: stack overflow while building",
                N,
                case.label
            );
            *failures += 1;
        }
        let (Ok(rx), Some(frame)) = (rx_slot.as_mut(), frame_slot.as_mut()) else {
            hprintln!("error: n={} case={}: receiver not built", N, case.label);
            *failures += 1;
            continue;
        };
        rx.set_gain(case.gain);
        let dhash = design_hash(design);
        for symbol in 0..RX_SYMBOLS {
            if !frame.symbol(symbol, b.samples) {
                hprintln!("error: n={} case={}: frame generator failed", N, case.label);
                *failures += 1;
                break;
            }
            let x = b.samples.get(..frame.symbol_len()).unwrap_or_default();
            let result = rx.receive(x, symbol, case.modulation, b.equalized, b.sinr, b.llrs);
            let (status, data, llrs, clipped) = match result {
                Ok(c) => ("ok", c.data_bins, c.llrs, c.clipped),
                Err(_) => ("err", 0, 0, 0),
            };
            let eq = b.equalized.get(..data).unwrap_or_default();
            let sinr = b.sinr.get(..data).unwrap_or_default();
            let l8 = b.llrs.get(..llrs).unwrap_or_default();
            hprintln!(
                "rxv core={} n={} case={} sym={} in={:08x} design={:08x} status={} data={} \
                 llrs={} clipped={} words={}",
                CORE,
                N,
                case.label,
                symbol,
                samples_hash(x),
                dhash,
                status,
                data,
                llrs,
                clipped,
                3 * data + llrs.div_ceil(4)
            );
            print_words(output_words(eq, sinr, l8));
        }
    }
}

#[entry]
fn main() -> ! {
    cortex_m::interrupt::disable();
    let mut failures = 0u32;
    // SAFETY: the only references to these buffers, taken once here.
    let mut b = unsafe {
        Buffers {
            samples: &mut *addr_of_mut!(SAMPLES),
            equalized: &mut *addr_of_mut!(EQUALIZED),
            sinr: &mut *addr_of_mut!(SINR),
            llrs: &mut *addr_of_mut!(LLRS),
        }
    };
    // SAFETY: as above, for the receiver and frame slots.
    unsafe {
        run::<64>(
            &mut *addr_of_mut!(RX_64),
            &mut *addr_of_mut!(FRAME_64),
            &mut b,
            &mut failures,
        );
        #[cfg(not(core_m0))]
        run::<256>(
            &mut *addr_of_mut!(RX_256),
            &mut *addr_of_mut!(FRAME_256),
            &mut b,
            &mut failures,
        );
    }
    hprintln!("done core={} failures={}", CORE, failures);
    exit(failures)
}
