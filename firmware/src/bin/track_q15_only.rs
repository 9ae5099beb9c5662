//! The integer tracking stages alone, at N = 64 and 256 (Cortex-M0: 64, for its flash), with the receiver's and the noise
//! tracker's designs from the `build.rs` tables. Built, not run (the stages live on the
//! stack). Like `panic_free`, its panic handler references an undefined symbol.
//!
//! Three kinds of code, in separate functions the xtask finds by name:
//! - `configure`: `Numerology::new` (the pilot amplitude in f32), `IciTableQ15::new` (f32
//!   through `flatbin::ici`), `vectors_gen::track::delay_config` and the constructors
//!   (configuration time, once);
//! - `per_symbol`: `NoiseTrackerQ15::update_from_receiver`, `update`, `start_frame`,
//!   `DopplerEstimatorQ15::update`, `DelaySpreadEstimatorQ15::update`,
//!   `IqImageEstimatorQ15::update`, `ReceiverQ15::set_bin_noise` and `clear_bin_noise` (and
//!   `ReceiverQ15::receive`, which feeds them);
//! - `per_frame`: `NoiseTrackerQ15::frame_stats`, `bin_noise`, `interfered_bins`,
//!   `start_frame_with_gain`, `DopplerEstimatorQ15::estimate`, `end_frame`,
//!   `DelaySpreadEstimatorQ15::estimate`, `IqImageEstimatorQ15::estimate`,
//!   `IciTableQ15::predict`.
//!
//! Left out as floating point by design (host designs, reports): `NoiseTrackDesignQ15::new`,
//! `DdTableQ15::new`, `IciTableQ15::new`, the `to_f32` conversions.
//!
//! `cargo xtask mcu` checks on the Cortex-M0 build that no soft-float routine (`__aeabi_f*`,
//! `__aeabi_d*`, …, or `libm`) is reachable through direct calls from `per_symbol` and
//! `per_frame`.

#![no_std]
#![no_main]

use core::hint::black_box;
use core::ptr::addr_of_mut;

use cortex_m_rt::entry;
use flatbin::delay_spread_q15::DelaySpreadEstimatorQ15;
use flatbin::doppler_q15::{DopplerConfigQ15, DopplerEstimatorQ15};
use flatbin::fft_q15::Q15Fft;
use flatbin::fixed::Cq15;
use flatbin::fixed_math::Scaled;
use flatbin::ici_q15::IciTableQ15;
use flatbin::iq_image_q15::IqImageEstimatorQ15;
use flatbin::noise_track_q15::{NoiseTrackConfigQ15, NoiseTrackerQ15};
use flatbin::receiver_q15::ReceiverQ15;
use flatbin::{Modulation, Numerology};
use flatbin_firmware::exit;
use flatbin_firmware::rx_tables::{RxDesigns, Tables};
use flatbin_firmware::track_tables::TrackDesigns;
use vectors_gen::rx::{numerology_params, RX_K, RX_M};
use vectors_gen::track::{delay_config, TRACK_RX_DESIGN};

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
static mut NOISE: [u64; MAX_N] = [0; MAX_N];
static mut BINS: [u16; MAX_N] = [0; MAX_N];

type Rx<const N: usize> = ReceiverQ15<Q15Fft<N>, N, RX_K, RX_M>;

/// The stages at one size, built at configuration time.
struct Stages<const N: usize, const P: usize> {
    nu: Numerology,
    rx: Rx<N>,
    noise: NoiseTrackerQ15<N>,
    doppler: DopplerEstimatorQ15<N, P, 32>,
    delay: DelaySpreadEstimatorQ15<N>,
    iq: IqImageEstimatorQ15<N>,
    ici: IciTableQ15,
}

/// Configuration (floating point allowed here).
#[inline(never)]
fn configure<const N: usize, const P: usize>() -> Option<Stages<N, P>>
where
    Tables: RxDesigns<N> + TrackDesigns<N>,
{
    let nu = Numerology::new(black_box(numerology_params(N))).ok()?;
    let design = Tables::design(black_box(TRACK_RX_DESIGN))?;
    Some(Stages {
        nu,
        rx: Rx::<N>::new(&nu, Q15Fft::new(), design.clone()).ok()?,
        noise: NoiseTrackerQ15::new(
            &nu,
            Tables::track_design().clone(),
            black_box(NoiseTrackConfigQ15::default()),
        )
        .ok()?,
        doppler: DopplerEstimatorQ15::new(&nu, black_box(DopplerConfigQ15::default())).ok()?,
        delay: DelaySpreadEstimatorQ15::new(&nu, delay_config(&nu)).ok()?,
        iq: IqImageEstimatorQ15::new(&nu).ok()?,
        ici: IciTableQ15::new(black_box(N)).ok()?,
    })
}

/// Every per-symbol tracking entry point at size `N`; no floating point may be reachable
/// from here.
#[inline(never)]
fn per_symbol<const N: usize, const P: usize>(s: &mut Stages<N, P>)
where
    Tables: TrackDesigns<N>,
{
    // SAFETY: the only references to the buffers, taken once per call, not kept.
    let (samples, equalized, sinr, llrs, noise) = unsafe {
        (
            &mut *addr_of_mut!(SAMPLES),
            &mut *addr_of_mut!(EQUALIZED),
            &mut *addr_of_mut!(SINR),
            &mut *addr_of_mut!(LLRS),
            &mut *addr_of_mut!(NOISE),
        )
    };
    let symbol = black_box(3u32);
    let modulation = black_box(Modulation::Qam16);
    let rx = black_box(&mut s.rx);
    black_box(rx.receive(
        black_box(&samples[..]),
        symbol,
        modulation,
        black_box(&mut equalized[..]),
        black_box(&mut sinr[..]),
        black_box(&mut llrs[..]),
    ))
    .ok();
    let tracker = black_box(&mut s.noise);
    tracker.start_frame();
    black_box(tracker.update_from_receiver(symbol, rx, black_box(&equalized[..]), modulation)).ok();
    let (bins, exp) = rx.bins_with_exponent();
    black_box(black_box(&mut s.doppler).update(bins, black_box(exp), symbol)).ok();
    black_box(black_box(&mut s.delay).update(bins, black_box(exp), symbol)).ok();
    black_box(black_box(&mut s.iq).update(bins, black_box(exp), symbol)).ok();
    let design = <Tables as TrackDesigns<N>>::track_design();
    black_box(rx.set_bin_noise(black_box(&noise[..]), black_box(&design.estimator_mse[..]))).ok();
    let weights = black_box([Scaled { mant: 0, exp: 0 }; N]);
    rx.clear_bin_noise(&weights);
    noise[0] = black_box(noise[0]);
}

/// Every per-frame tracking entry point at size `N`; no floating point may be reachable from
/// here.
#[inline(never)]
fn per_frame<const N: usize, const P: usize>(s: &mut Stages<N, P>) {
    // SAFETY: the only references to the buffers, taken once per call, not kept.
    let (noise, bins) = unsafe { (&mut *addr_of_mut!(NOISE), &mut *addr_of_mut!(BINS)) };
    let tracker = black_box(&mut s.noise);
    black_box(tracker.frame_stats());
    black_box(tracker.bin_noise(black_box(&mut noise[..])));
    black_box(tracker.interfered_bins(black_box(&mut bins[..])));
    black_box(tracker.is_interfered(black_box(3)));
    tracker.start_frame_with_gain(black_box(Scaled {
        mant: 16_384,
        exp: 2,
    }));
    let d = black_box(&mut s.doppler);
    let e = black_box(d.estimate());
    d.end_frame();
    black_box(black_box(&s.delay).estimate());
    black_box(black_box(&s.iq).estimate());
    let fd = e.map_or(0, |e| (e.fd_t_q31.max(0) as u32) >> 15);
    black_box(black_box(&s.ici).predict(black_box(fd), black_box(1311)));
    black_box(s.nu.used_len());
}

#[entry]
fn main() -> ! {
    if let Some(mut s) = configure::<64, 16>() {
        per_symbol(black_box(&mut s));
        per_frame(black_box(&mut s));
    }
    // The M0's 256 KiB of flash does not hold both sizes with their design tables: N = 64 there
    // (the code is the same generic code).
    #[cfg(not(core_m0))]
    if let Some(mut s) = configure::<256, 64>() {
        per_symbol(black_box(&mut s));
        per_frame(black_box(&mut s));
    }
    exit(0)
}
