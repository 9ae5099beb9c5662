//! Cost of the core's stages on an emulated Cortex-M: one measured region per case.
//!
//! Run under `xtask/qemu/run-counted`, which counts the guest instructions of each region.
//! Per case this prints one line (printing is outside the region):
//!
//! ```text
//! case core=cortex-m4f stage=fft_f32 n=256 region=1 stack=272
//! ```
//!
//! Region 0 is an empty stage (the fixed overhead of a region). Exit status: the number of
//! failed checks (a stack figure that hit the bottom of the painted area, a bad buffer size).

#![no_std]
#![no_main]

use core::hint::black_box;
use core::ptr::addr_of_mut;

use cortex_m_rt::entry;
use cortex_m_semihosting::hprintln;
use flatbin::fft::{MicroFft, OfdmFft};
use flatbin::Cf32;
use flatbin_firmware::{exit, fill, measure, prefix, Measured, CORE};
use panic_semihosting as _;

#[cfg(feature = "q15")]
use flatbin::{fft_q15::Q15Fft, fixed::Cq15};

/// Largest measured size (RAM: 16 KiB on the Cortex-M0 board).
#[cfg(not(core_m0))]
const MAX_N: usize = 1024;
#[cfg(core_m0)]
const MAX_N: usize = 256;

/// Input of every case: the generator's complex Gaussian at −12 dBFS (`vectors_gen::CASES[0]`).
const INPUT_CASE: usize = 0;

static mut BUF_F32: [Cf32; MAX_N] = [Cf32::new(0.0, 0.0); MAX_N];
#[cfg(feature = "q15")]
static mut BUF_Q15: [Cq15; MAX_N] = [Cq15 { re: 0, im: 0 }; MAX_N];

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

fn fft_f32<const N: usize>(buf: &mut [Cf32], failures: &mut u32) {
    let Some(x) = prefix::<Cf32, N>(buf) else {
        hprintln!("error: fft_f32 n={}: buffer too small", N);
        *failures += 1;
        return;
    };
    fill(INPUT_CASE, x, |v, re, im| {
        *v = Cf32::new(f32::from(re) / 32768.0, f32::from(im) / 32768.0)
    });
    let mut fft = MicroFft::<N>::new();
    let m = measure(&mut || {
        black_box(black_box(&mut fft).forward(black_box(&mut *x)));
    });
    report("fft_f32", N, m, failures);
}

#[cfg(feature = "q15")]
fn fft_q15<const N: usize>(buf: &mut [Cq15], failures: &mut u32) {
    let Some(x) = prefix::<Cq15, N>(buf) else {
        hprintln!("error: fft_q15 n={}: buffer too small", N);
        *failures += 1;
        return;
    };
    fill(INPUT_CASE, x, |v, re, im| *v = Cq15 { re, im });
    let mut fft = Q15Fft::<N>::new();
    let m = measure(&mut || {
        black_box(black_box(&mut fft).forward(black_box(&mut *x)));
    });
    report("fft_q15", N, m, failures);
}

#[entry]
fn main() -> ! {
    cortex_m::interrupt::disable();
    let mut failures = 0u32;

    // SAFETY: the only reference to the buffer, taken once before any use.
    let buf_f32: &mut [Cf32; MAX_N] = unsafe { &mut *addr_of_mut!(BUF_F32) };

    let empty = measure(&mut || {});
    report("empty", 0, empty, &mut failures);

    fft_f32::<64>(buf_f32, &mut failures);
    fft_f32::<128>(buf_f32, &mut failures);
    fft_f32::<256>(buf_f32, &mut failures);
    #[cfg(not(core_m0))]
    {
        fft_f32::<512>(buf_f32, &mut failures);
        fft_f32::<1024>(buf_f32, &mut failures);
    }

    #[cfg(feature = "q15")]
    {
        // SAFETY: as above.
        let buf_q15: &mut [Cq15; MAX_N] = unsafe { &mut *addr_of_mut!(BUF_Q15) };
        fft_q15::<64>(buf_q15, &mut failures);
        fft_q15::<128>(buf_q15, &mut failures);
        fft_q15::<256>(buf_q15, &mut failures);
        #[cfg(not(core_m0))]
        {
            fft_q15::<512>(buf_q15, &mut failures);
            fft_q15::<1024>(buf_q15, &mut failures);
        }
    }

    hprintln!("done core={} failures={}", CORE, failures);
    exit(failures)
}
