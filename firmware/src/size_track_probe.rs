// Body of the tracking size probes `src/bin/size_track_<family>_<n>.rs` (each file is
// `include!` of this one; kept apart from the other probes so their figures do not move).
//
// Each holds one integer tracking stage at one size and nothing else:
// - `size_track_noise_<n>`: `NoiseTrackerQ15::new` from the `build.rs` design table (a copy
//   on the M4F, borrowed on the M0), `update`, `start_frame`, `frame_stats`, `bin_noise`;
// - `size_track_doppler_<n>`: `DopplerEstimatorQ15::<N, N/4, 32>::new`, `update`, `estimate`;
// - `size_track_delay_<n>`: `DelaySpreadEstimatorQ15::new`, `update`, `estimate`;
// - `size_track_iq_<n>`: `IqImageEstimatorQ15::new`, `update`, `estimate`;
// - `size_track_ici_<n>`: `IciTableQ15::new` (configuration, f32: soft float on the M0) and
//   `predict`;
// - `size_track_binnoise_<n>`: `ReceiverQ15::new` from the `build.rs` design table and
//   `set_bin_noise`; `size_track_rxnew_<n>`: the same without `set_bin_noise` (its base).
// All build their `Numerology` with `Numerology::new`, so their code size is what they have
// beyond `size_numerology` (`size_track_rxnew_<n>` for `binnoise`). Not run (the stages live
// on the stack). The panic handler references an undefined symbol, as in `panic_free`.

use core::hint::black_box;

use cortex_m_rt::entry;
use flatbin::fixed::Cq15;
use flatbin::Numerology;
use flatbin_firmware::exit;
use flatbin_firmware::rx_tables::{RxDesigns, Tables};
use flatbin_firmware::track_tables::TrackDesigns;
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
    if N == 64 {
        stage::<64, 16>();
    } else if N == 256 {
        stage::<256, 64>();
    }
    exit(0)
}

#[inline(never)]
fn stage<const N: usize, const P: usize>()
where
    Tables: RxDesigns<N> + TrackDesigns<N>,
{
    let Ok(nu) = Numerology::new(black_box(numerology_params(N))) else {
        return;
    };
    let bins = black_box([Cq15::ZERO; N]);
    if starts_with("size_track_noise_") {
        use flatbin::noise_track_q15::{NoiseTrackConfigQ15, NoiseTrackerQ15, SymbolViewQ15};
        // The Cortex-M0 borrows the design from flash (as its firmware does); the M4F owns a
        // copy.
        #[cfg(core_m0)]
        let design = Tables::track_design();
        #[cfg(not(core_m0))]
        let design = Tables::track_design().clone();
        if let Ok(mut t) =
            NoiseTrackerQ15::new(&nu, design, black_box(NoiseTrackConfigQ15::default()))
        {
            let t = black_box(&mut t);
            t.start_frame();
            let view = SymbolViewQ15 {
                bins: &bins,
                bins_exp: black_box(0),
                estimate: &bins[..],
                estimate_exp: black_box(0),
                common_phase: black_box(None),
            };
            black_box(t.update(
                black_box(1),
                &view,
                &bins[..],
                black_box(flatbin::Modulation::Qpsk),
            ))
            .ok();
            black_box(t.frame_stats());
            let mut noise = [0u64; N];
            black_box(t.bin_noise(&mut noise));
            black_box(noise);
        }
    } else if starts_with("size_track_doppler_") {
        use flatbin::doppler_q15::{DopplerConfigQ15, DopplerEstimatorQ15};
        if let Ok(mut d) = DopplerEstimatorQ15::<N, P, 32>::new(&nu, DopplerConfigQ15::default()) {
            black_box(black_box(&mut d).update(&bins, black_box(0), black_box(1))).ok();
            black_box(d.estimate());
        }
    } else if starts_with("size_track_delay_") {
        use flatbin::delay_spread_q15::DelaySpreadEstimatorQ15;
        let config = vectors_gen::track::delay_config(&nu);
        if let Ok(mut d) = DelaySpreadEstimatorQ15::<N>::new(&nu, config) {
            black_box(black_box(&mut d).update(&bins, black_box(0), black_box(1))).ok();
            black_box(d.estimate());
        }
    } else if starts_with("size_track_iq_") {
        use flatbin::iq_image_q15::IqImageEstimatorQ15;
        if let Ok(mut q) = IqImageEstimatorQ15::<N>::new(&nu) {
            black_box(black_box(&mut q).update(&bins, black_box(0), black_box(1))).ok();
            black_box(q.estimate());
        }
    } else if starts_with("size_track_ici_") {
        if let Ok(t) = flatbin::ici_q15::IciTableQ15::new(black_box(N)) {
            black_box(black_box(&t).predict(black_box(1000), black_box(1311)));
        }
    } else if starts_with("size_track_binnoise_") || starts_with("size_track_rxnew_") {
        use flatbin::fft_q15::Q15Fft;
        use flatbin::receiver_q15::ReceiverQ15;
        let Some(design) = Tables::design(vectors_gen::track::TRACK_RX_DESIGN) else {
            return;
        };
        if let Ok(mut rx) =
            ReceiverQ15::<Q15Fft<N>, N, 4, 4>::new(&nu, Q15Fft::new(), design.clone())
        {
            let rx = black_box(&mut rx);
            if starts_with("size_track_binnoise_") {
                let noise = black_box([0u64; N]);
                let mse = &Tables::track_design().estimator_mse;
                black_box(rx.set_bin_noise(&noise, &mse[..])).ok();
            }
        }
    }
}
