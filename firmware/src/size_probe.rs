// Body of the size probes `src/bin/size_*.rs` (each file is `include!` of this one).
//
// One binary per stage and size, selected by the binary's name (`size_<stage>_<n>`, or
// `size_baseline`), holding only that stage at that size: the stage's code size is what this
// binary has beyond `size_baseline` (nm -S sizes of code and read-only data). No printing, no
// test-signal generator: the input buffer is a zeroed static behind `black_box`. The panic
// handler references an undefined symbol, as in `panic_free`.

use core::hint::black_box;
use core::ptr::addr_of_mut;

use cortex_m_rt::entry;
use flatbin::fft::OfdmFft;
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

/// `NAME` starts with `prefix` (const).
const fn starts_with(prefix: &str) -> bool {
    let (a, b) = (NAME.as_bytes(), prefix.as_bytes());
    if b.len() > a.len() {
        return false;
    }
    let mut i = 0;
    while i < b.len() {
        if a[i] != b[i] {
            return false;
        }
        i += 1;
    }
    true
}

/// The trailing decimal number of `NAME` (0 when none).
const fn trailing_number() -> usize {
    let a = NAME.as_bytes();
    let mut i = a.len();
    while i > 0 && a[i - 1].is_ascii_digit() {
        i -= 1;
    }
    let mut n = 0;
    while i < a.len() {
        n = n * 10 + (a[i] - b'0') as usize;
        i += 1;
    }
    n
}

/// The probe's size; the baseline instantiates 16 but never reaches the stage code.
const N: usize = if trailing_number() >= 16 {
    trailing_number()
} else {
    16
};
const F32: bool = starts_with("size_fft_f32_");
#[cfg(feature = "q15")]
const Q15: bool = starts_with("size_fft_q15_");

static mut BUF_F32: [flatbin::Cf32; N] = [flatbin::Cf32::new(0.0, 0.0); N];
#[cfg(feature = "q15")]
static mut BUF_Q15: [flatbin::fixed::Cq15; N] = [flatbin::fixed::Cq15 { re: 0, im: 0 }; N];

#[entry]
fn main() -> ! {
    if F32 {
        // SAFETY: the only reference to the buffer.
        let buf = unsafe { &mut *addr_of_mut!(BUF_F32) };
        black_box(flatbin::fft::MicroFft::<N>::new().forward(black_box(buf)));
    }
    #[cfg(feature = "q15")]
    if Q15 {
        // SAFETY: the only reference to the buffer.
        let buf = unsafe { &mut *addr_of_mut!(BUF_Q15) };
        black_box(flatbin::fft_q15::Q15Fft::<N>::new().forward(black_box(buf)));
    }
    exit(0)
}
