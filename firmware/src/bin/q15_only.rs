//! Only the Q15 FFT, forward and inverse, at every size that fits the core. `cargo xtask mcu`
//! checks with `nm` that the Cortex-M0 build links no soft-float routine (`__aeabi_f*`,
//! `__aeabi_d*`, …): the fixed-point path must not fall back to float emulation. Like
//! `panic_free`, its panic handler references an undefined symbol. Built, not run.

#![no_std]
#![no_main]

use core::hint::black_box;
use core::ptr::addr_of_mut;

use cortex_m_rt::entry;
use flatbin::fft::OfdmFft;
use flatbin::{fft_q15::Q15Fft, fixed::Cq15};
use flatbin_firmware::{exit, prefix};

extern "C" {
    /// Deliberately never defined: referenced only from the panic handler.
    fn flatbin_panic_path_reachable() -> !;
}

#[panic_handler]
fn panic(_: &core::panic::PanicInfo) -> ! {
    // SAFETY: never executed in a correct build: the link fails while this is reachable.
    unsafe { flatbin_panic_path_reachable() }
}

#[cfg(not(core_m0))]
const MAX_N: usize = 4096;
#[cfg(core_m0)]
const MAX_N: usize = 256;

static mut BUF: [Cq15; MAX_N] = [Cq15 { re: 0, im: 0 }; MAX_N];

#[inline(never)]
fn at_size<const N: usize>(buf: &mut [Cq15]) {
    if let Some(x) = prefix::<Cq15, N>(buf) {
        black_box(Q15Fft::<N>::new().forward(black_box(&mut *x)));
        black_box(Q15Fft::<N>::new().inverse(black_box(x)));
    }
}

#[entry]
fn main() -> ! {
    // SAFETY: the only reference to the buffer, taken once here.
    let buf: &mut [Cq15; MAX_N] = unsafe { &mut *addr_of_mut!(BUF) };
    at_size::<16>(buf);
    at_size::<32>(buf);
    at_size::<64>(buf);
    at_size::<128>(buf);
    at_size::<256>(buf);
    #[cfg(not(core_m0))]
    {
        at_size::<512>(buf);
        at_size::<1024>(buf);
        at_size::<2048>(buf);
        at_size::<4096>(buf);
    }
    exit(0)
}
