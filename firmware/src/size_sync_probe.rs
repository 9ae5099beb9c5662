// Body of the synchronisation size probes `src/bin/size_sync_<stage>[_<n>].rs` (each file is
// `include!` of this one; kept apart from `size_probe.rs` and `size_rx_probe.rs` so their
// figures do not move).
//
// Each holds one integer synchronisation stage at one size and nothing else:
// - `size_sync_acq_<n>`: `AcquirerQ15::new`, `push`;
// - `size_sync_nco`: `NcoQ15` (`set_increment`, `derotate`; no FFT size);
// - `size_sync_cp_<n>`: `CpTrackerQ15::new`, `push`, `estimate`;
// - `size_sync_sco_<n>`: `ScoEstimatorQ15::new`, `update`, `estimate_q32`;
// - `size_sync_frame_<n>`: `FrameReceiverQ15::new` from the `build.rs` design table, `push`
//   (which holds everything the frame receiver calls: acquisition, preamble steps, NCO,
//   gain/DC, the Q15 receiver and its FFT, the SCO estimator), `sco_q32`.
// All but `size_sync_nco` also build their `Numerology` with `Numerology::new`, so their code
// size is what they have beyond `size_numerology` (`src/size_rx_probe.rs`); `size_sync_nco`'s
// is what it has beyond `size_baseline`. Not run (the stages live on the stack). The panic
// handler references an undefined symbol, as in `panic_free`.

use core::hint::black_box;

use cortex_m_rt::entry;
use flatbin::fixed::Cq15;
use flatbin::Numerology;
use flatbin_firmware::exit;
use flatbin_firmware::rx_tables::{RxDesigns, Tables};
use vectors_gen::rx::numerology_params;

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

const N: usize = trailing_number();

#[entry]
fn main() -> ! {
    if starts_with("size_sync_nco") {
        let mut nco = flatbin::nco::NcoQ15::new();
        nco.set_increment(black_box(0x1234_5678));
        let mut x = black_box([Cq15::ZERO; 64]);
        black_box(nco.derotate(&mut x));
    } else if N == 64 {
        stage::<64, 72, 512>();
    } else if N == 256 {
        stage::<256, 288, 2048>();
    }
    exit(0)
}

#[inline(never)]
fn stage<const N: usize, const S: usize, const R: usize>()
where
    Tables: RxDesigns<N>,
{
    let Ok(nu) = Numerology::new(black_box(numerology_params(N))) else {
        return;
    };
    let x = black_box([Cq15::ZERO; S]);
    if starts_with("size_sync_acq_") {
        if let Ok(mut acq) = flatbin::acquire_q15::AcquirerQ15::<N>::new(&nu, black_box(9411)) {
            black_box(black_box(&mut acq).push(&x)).ok();
        }
    } else if starts_with("size_sync_cp_") {
        if let Ok(mut cp) = flatbin::cp_sync_q15::CpTrackerQ15::<N, S>::new(&nu, black_box(1)) {
            black_box(&mut cp).push(&x);
            black_box(cp.estimate());
        }
    } else if starts_with("size_sync_sco_") {
        if let Ok(mut sco) = flatbin::sco_q15::ScoEstimatorQ15::<N>::new(&nu) {
            let bins = black_box([Cq15::ZERO; N]);
            black_box(black_box(&mut sco).update(&bins, black_box(1))).ok();
            black_box(sco.estimate_q32());
        }
    } else if starts_with("size_sync_frame_") {
        let Some(design) = Tables::design(vectors_gen::sync::FRAME_DESIGN) else {
            return;
        };
        if let Ok(mut fr) = flatbin::frame_q15::FrameReceiverQ15::<N, 4, 4, R>::new(
            &nu,
            design.clone(),
            black_box(vectors_gen::sync::frame_config(N)),
        ) {
            black_box(black_box(&mut fr).push(&x, |ev| {
                black_box(ev.llrs);
            }))
            .ok();
            black_box(fr.sco_q32());
        }
    }
}
