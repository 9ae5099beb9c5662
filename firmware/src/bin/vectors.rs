//! Bit-exact vectors: the FFTs on the target, every output word printed in hex, so the host
//! can run the same code and compare bit for bit (`cargo xtask mcu`).
//!
//! Inputs come from `vectors_gen` (shared with the host). Per case:
//!
//! ```text
//! vec core=cortex-m4f stage=fft_q15 n=64 kind=gauss-12dBFS in=1a2b3c4d exp=-3 words=64
//! w 7ffa0012 ...            (16 words a line)
//! end
//! ```
//!
//! `in` is the FNV-1a hash of the input (re, im as i16, in order), so the host can tell a
//! generator mismatch from an FFT mismatch. Words: `fft_f32` prints two per sample (the f32
//! bits of re, then im); `fft_q15` prints one per sample, `re as u16 | (im as u16) << 16`
//! (the packed layout of `flatbin::fixed::Cq15`).

#![no_std]
#![no_main]

use core::ptr::addr_of_mut;

use cortex_m_rt::entry;
use cortex_m_semihosting::hprintln;
use flatbin::fft::{MicroFft, OfdmFft};
use flatbin::Cf32;
use flatbin_firmware::{exit, fill, prefix, print_words, CORE};
use panic_semihosting as _;
use vectors_gen::{Fnv1a32, CASES};

#[cfg(feature = "q15")]
use flatbin::{fft_q15::Q15Fft, fixed::Cq15};

#[cfg(not(core_m0))]
const MAX_N: usize = 1024;
#[cfg(core_m0)]
const MAX_N: usize = 256;

static mut BUF_F32: [Cf32; MAX_N] = [Cf32::new(0.0, 0.0); MAX_N];
#[cfg(feature = "q15")]
static mut BUF_Q15: [Cq15; MAX_N] = [Cq15 { re: 0, im: 0 }; MAX_N];

fn fft_f32<const N: usize>(buf: &mut [Cf32], failures: &mut u32) {
    let Some(x) = prefix::<Cf32, N>(buf) else {
        *failures += 1;
        return;
    };
    for (k, case) in CASES.iter().enumerate() {
        let mut hash = Fnv1a32::default();
        fill(k, x, |v, re, im| {
            hash.push_i16(re);
            hash.push_i16(im);
            *v = Cf32::new(f32::from(re) / 32768.0, f32::from(im) / 32768.0);
        });
        let exp = MicroFft::<N>::new().forward(x);
        hprintln!(
            "vec core={} stage=fft_f32 n={} kind={} in={:08x} exp={} words={}",
            CORE,
            N,
            case.label,
            hash.finish(),
            exp,
            2 * N
        );
        print_words(x.iter().flat_map(|v| [v.re.to_bits(), v.im.to_bits()]));
    }
}

#[cfg(feature = "q15")]
fn fft_q15<const N: usize>(buf: &mut [Cq15], failures: &mut u32) {
    let Some(x) = prefix::<Cq15, N>(buf) else {
        *failures += 1;
        return;
    };
    for (k, case) in CASES.iter().enumerate() {
        let mut hash = Fnv1a32::default();
        fill(k, x, |v, re, im| {
            hash.push_i16(re);
            hash.push_i16(im);
            *v = Cq15 { re, im };
        });
        let exp = Q15Fft::<N>::new().forward(x);
        hprintln!(
            "vec core={} stage=fft_q15 n={} kind={} in={:08x} exp={} words={}",
            CORE,
            N,
            case.label,
            hash.finish(),
            exp,
            N
        );
        print_words(
            x.iter()
                .map(|v| u32::from(v.re as u16) | (u32::from(v.im as u16) << 16)),
        );
    }
}

#[entry]
fn main() -> ! {
    cortex_m::interrupt::disable();
    let mut failures = 0u32;
    // SAFETY: the only reference to the buffer, taken once before any use.
    let buf_f32: &mut [Cf32; MAX_N] = unsafe { &mut *addr_of_mut!(BUF_F32) };
    fft_f32::<16>(buf_f32, &mut failures);
    fft_f32::<64>(buf_f32, &mut failures);
    fft_f32::<256>(buf_f32, &mut failures);
    #[cfg(not(core_m0))]
    fft_f32::<1024>(buf_f32, &mut failures);

    #[cfg(feature = "q15")]
    {
        // SAFETY: as above.
        let buf_q15: &mut [Cq15; MAX_N] = unsafe { &mut *addr_of_mut!(BUF_Q15) };
        fft_q15::<16>(buf_q15, &mut failures);
        // 32 and 128: odd log2 N, the radix-2 first stage.
        fft_q15::<32>(buf_q15, &mut failures);
        fft_q15::<64>(buf_q15, &mut failures);
        fft_q15::<128>(buf_q15, &mut failures);
        fft_q15::<256>(buf_q15, &mut failures);
        #[cfg(not(core_m0))]
        fft_q15::<1024>(buf_q15, &mut failures);
    }

    hprintln!("done core={} failures={}", CORE, failures);
    exit(failures)
}
