//! The Q15 receiver alone, from the design tables `build.rs` writes (no `DesignQ15::new` on
//! the target), at N = 64 and 256. Built, not run (the receivers live on the stack). Like
//! `panic_free`, its panic handler references an undefined symbol.
//!
//! Two kinds of code, in separate functions the xtask finds by name:
//! - `configure`: `Numerology::new` (it computes the pilot amplitude in f32, configuration
//!   time, once);
//! - `per_symbol`: everything else: `ReceiverQ15::new` from the table, `set_gain`, `receive`
//!   for every modulation over a frame of symbols, `reset`, `DigitalGain::apply`.
//!
//! `cargo xtask mcu` checks on the Cortex-M0 build that no soft-float routine (`__aeabi_f*`,
//! `__aeabi_d*`, …, or `libm`) is reachable through direct calls from `per_symbol`, and
//! lists the ones the binary links (those of `configure`).

#![no_std]
#![no_main]

use core::hint::black_box;
use core::ptr::addr_of_mut;

use cortex_m_rt::entry;
use flatbin::fixed::Cq15;
use flatbin::fixed_math::Scaled;
use flatbin::receiver_q15::{DigitalGain, ReceiverQ15};
use flatbin::{fft_q15::Q15Fft, Modulation, Numerology};
use flatbin_firmware::exit;
use flatbin_firmware::rx_tables::{RxDesigns, Tables};
use vectors_gen::rx::{numerology_params, RX_K, RX_M};

extern "C" {
    /// Deliberately never defined: referenced only from the panic handler.
    fn flatbin_panic_path_reachable() -> !;
}

#[panic_handler]
fn panic(_: &core::panic::PanicInfo) -> ! {
    // SAFETY: never executed in a correct build: the link fails while this is reachable.
    unsafe { flatbin_panic_path_reachable() }
}

const MAX_N: usize = 256;
static mut SAMPLES: [Cq15; MAX_N + MAX_N / 8] = [Cq15::ZERO; MAX_N + MAX_N / 8];
static mut EQUALIZED: [Cq15; MAX_N] = [Cq15::ZERO; MAX_N];
static mut SINR: [Scaled; MAX_N] = [Scaled { mant: 0, exp: 0 }; MAX_N];
static mut LLRS: [i8; 4 * MAX_N] = [0; 4 * MAX_N];

/// Configuration: the numerology of size `n` (floating point allowed here).
#[inline(never)]
fn configure(n: usize) -> Option<Numerology> {
    Numerology::new(black_box(numerology_params(n))).ok()
}

/// The receiver from its table and every per-symbol entry point (no floating point).
#[inline(never)]
fn per_symbol<const N: usize>(nu: &Numerology)
where
    Tables: RxDesigns<N>,
{
    let Some(design) = Tables::design(black_box(0)) else {
        return;
    };
    let Ok(mut rx) =
        ReceiverQ15::<Q15Fft<N>, N, RX_K, RX_M>::new(nu, Q15Fft::new(), design.clone())
    else {
        return;
    };
    // SAFETY: the only references to these buffers, taken once per call, not kept.
    let (samples, eq, sinr, llrs) = unsafe {
        (
            &mut *addr_of_mut!(SAMPLES),
            &mut *addr_of_mut!(EQUALIZED),
            &mut *addr_of_mut!(SINR),
            &mut *addr_of_mut!(LLRS),
        )
    };
    let rx = black_box(&mut rx);
    let gain = black_box(DigitalGain {
        mant: black_box(25_722),
        shift: black_box(5),
    });
    rx.set_gain(gain);
    for symbol in 0..black_box(6u32) {
        for modulation in Modulation::ALL {
            black_box(rx.receive(
                black_box(&samples[..]),
                symbol,
                black_box(modulation),
                black_box(&mut eq[..]),
                black_box(&mut sinr[..]),
                black_box(&mut llrs[..]),
            ))
            .ok();
        }
    }
    rx.reset();
    black_box(gain.apply(black_box(&samples[..]), black_box(&mut eq[..])));
}

#[entry]
fn main() -> ! {
    if let Some(nu) = configure(64) {
        per_symbol::<64>(black_box(&nu));
    }
    if let Some(nu) = configure(256) {
        per_symbol::<256>(black_box(&nu));
    }
    exit(0)
}
