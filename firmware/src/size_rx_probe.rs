// Body of the Q15 receiver size probes `src/bin/size_rx_q15_<n>.rs` and
// `src/bin/size_numerology.rs` (each file is `include!` of this one; kept apart from
// `size_probe.rs` so the FFT probes and their baseline do not change).
//
// `size_rx_q15_<n>` holds the Q15 receiver at N = n: its `Numerology` built by
// `Numerology::new`, its design from the `build.rs` table, `new`, `set_gain` and `receive`
// (any modulation). `size_numerology` builds only the `Numerology` (configuration; float, so
// soft float on the Cortex-M0). The receiver's code size is the difference of the two
// (nm -S sizes of code and read-only data): its own code, its FFT and its design table.
// Neither is run (the receiver lives on the stack). The panic handler references an
// undefined symbol, as in `panic_free`.

use core::hint::black_box;

use cortex_m_rt::entry;
use flatbin::fft_q15::Q15Fft;
use flatbin::fixed::Cq15;
use flatbin::fixed_math::Scaled;
use flatbin::receiver_q15::{DigitalGain, ReceiverQ15};
use flatbin::{Modulation, Numerology};
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

const NAME: &str = env!("CARGO_BIN_NAME");

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

/// The probe's size (0 for `size_numerology`).
const N: usize = trailing_number();

#[entry]
fn main() -> ! {
    if N == 64 {
        rx::<64>();
    } else if N == 256 {
        rx::<256>();
    } else {
        black_box(Numerology::new(black_box(numerology_params(64)))).ok();
    }
    exit(0)
}

#[inline(never)]
fn rx<const N: usize>()
where
    Tables: RxDesigns<N>,
{
    let Ok(nu) = Numerology::new(black_box(numerology_params(N))) else {
        return;
    };
    let Some(design) = Tables::design(0) else {
        return;
    };
    let Ok(mut rx) = ReceiverQ15::<Q15Fft<N>, N, RX_K, RX_M>::new(&nu, Q15Fft::new(), design.clone())
    else {
        return;
    };
    let rx = black_box(&mut rx);
    rx.set_gain(black_box(DigitalGain::UNITY));
    let samples = black_box([Cq15::ZERO; N]);
    let mut eq = [Cq15::ZERO; N];
    let mut sinr = [Scaled { mant: 0, exp: 0 }; N];
    let mut llrs = [0i8; N];
    black_box(rx.receive(
        black_box(&samples[..]),
        black_box(0),
        black_box(Modulation::Qam16),
        black_box(&mut eq[..]),
        black_box(&mut sinr[..]),
        black_box(&mut llrs[..]),
    ))
    .ok();
}
