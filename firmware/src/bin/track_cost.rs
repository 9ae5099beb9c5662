//! Cost of the integer tracking stages on an emulated Cortex-M: one measured region per case,
//! run under `xtask/qemu/run-counted` as `cost.rs` (printing outside the regions):
//!
//! ```text
//! case core=cortex-m4f stage=doppler_q15_update n=64 region=1 stack=96
//! ```
//!
//! Input: frame case 0 of `vectors_gen::rx` (QPSK, −12 dBFS, fixed multipath, noise 20 dB
//! below) received by `ReceiverQ15` (K = M = 4, design `vectors_gen::track::TRACK_RX_DESIGN`
//! from the `build.rs` table); symbols 0–3 feed every tracker unmeasured, then symbol 4:
//! - per symbol (one call on symbol 4's bins and exponent): `noise_track_q15_update`
//!   (`NoiseTrackerQ15::update_from_receiver`, design from the `build.rs` table),
//!   `doppler_q15_update` (`DopplerEstimatorQ15<N, N/4, 32>`), `delay_q15_update`
//!   (`DelaySpreadEstimatorQ15`, `vectors_gen::track::delay_config`: known floor at N = 64, measured at 256), `iq_q15_update` (`IqImageEstimatorQ15`);
//! - per frame (one call after the five symbols): `noise_track_q15_frame_stats`,
//!   `doppler_q15_estimate`, `delay_q15_estimate`, `iq_q15_estimate`, `ici_q15_predict`
//!   (`IciTableQ15::predict` with the Doppler estimate and a residual CFO of 0.02), and
//!   `set_bin_noise` (`ReceiverQ15::set_bin_noise` with the tracker's `bin_noise`, or the noise
//!   the design assumes where there is no tracker; it runs per frame here but may run per
//!   symbol).
//!
//! On the Cortex-M0 (16 KiB RAM): `set_bin_noise` at N = 64 with the receiver (6,144 B) and the
//! noise the design assumes; the noise tracker, Doppler, delay and I/Q rows at N = 64 without
//! the receiver, on its outputs of the same frame stored in flash
//! (`flatbin_firmware::track_stored`, recorded on the host by
//! `vectors_gen::track::record_case`: the same bins, exponents, channel estimate, common phase
//! and equalized symbols): `noise_track_q15_update` is `NoiseTrackerQ15::update` on that view
//! (what `update_from_receiver` calls), with the design borrowed from the flash table
//! (`NoiseTrackerQ15<64, &'static NoiseTrackDesignQ15<64>>`: 2,600 B of state in RAM); no
//! receiver at N = 256 (about 21 KB). `ici_q15_predict` needs no receiver: N = 64 and 256 on
//! both cores. The firmware prints `trackskip` lines with the sizes.
//!
//! Region 0 is the empty stage. Exit status: the number of failures.

#![no_std]
#![no_main]
// The Cortex-M0 build measures `set_bin_noise`, `ici_q15_predict` and (on stored receiver
// outputs) the noise tracker and the Doppler, delay and I/Q estimators.
#![cfg_attr(core_m0, allow(unused_imports, dead_code))]

use core::hint::black_box;
use core::mem::size_of;
use core::ptr::addr_of_mut;

use cortex_m_rt::entry;
use cortex_m_semihosting::hprintln;
use flatbin::delay_spread_q15::DelaySpreadEstimatorQ15;
use flatbin::doppler_q15::{DopplerConfigQ15, DopplerEstimatorQ15};
use flatbin::fft_q15::Q15Fft;
use flatbin::fixed::Cq15;
use flatbin::fixed_math::Scaled;
use flatbin::ici_q15::IciTableQ15;
use flatbin::iq_image_q15::IqImageEstimatorQ15;
#[cfg(core_m0)]
use flatbin::noise_track_q15::NoiseTrackDesignQ15;
use flatbin::noise_track_q15::{NoiseTrackConfigQ15, NoiseTrackerQ15};
use flatbin::receiver_q15::ReceiverQ15;
use flatbin::{ConfigError, Numerology};
use flatbin_firmware::rx_tables::{RxDesigns, Tables};
use flatbin_firmware::track_tables::TrackDesigns;
use flatbin_firmware::{exit, measure, stack_peak, Measured, CORE};
use panic_semihosting as _;
use vectors_gen::rx::{numerology_params, RxFrame, RX_CASES, RX_K, RX_M};
use vectors_gen::track::{delay_config, TRACK_EPS_Q16, TRACK_RX_DESIGN};

/// The measured symbol.
const MEASURED: u32 = 4;
/// Frame case of `vectors_gen::rx`.
const CASE: usize = 0;
/// Pilot history of the Doppler estimator, symbols.
const H: usize = 32;

#[cfg(not(core_m0))]
const MAX_N: usize = 256;
#[cfg(core_m0)]
const MAX_N: usize = 64;

type Rx<const N: usize> = ReceiverQ15<Q15Fft<N>, N, RX_K, RX_M>;
const NOT_BUILT: ConfigError = ConfigError::PilotSpacingZero;

static mut SAMPLES: [Cq15; MAX_N + MAX_N / 8] = [Cq15::ZERO; MAX_N + MAX_N / 8];
static mut EQUALIZED: [Cq15; MAX_N] = [Cq15::ZERO; MAX_N];
static mut SINR: [Scaled; MAX_N] = [Scaled { mant: 0, exp: 0 }; MAX_N];
static mut LLRS: [i8; 4 * MAX_N] = [0; 4 * MAX_N];
static mut NOISE: [u64; MAX_N] = [0; MAX_N];

/// The stage objects at one size, built in place.
#[cfg(not(core_m0))]
struct Slots<const N: usize, const P: usize> {
    rx: Result<Rx<N>, ConfigError>,
    frame: Option<RxFrame<N>>,
    noise: Result<NoiseTrackerQ15<N>, ConfigError>,
    doppler: Result<DopplerEstimatorQ15<N, P, H>, ConfigError>,
    delay: Result<DelaySpreadEstimatorQ15<N>, ConfigError>,
    iq: Result<IqImageEstimatorQ15<N>, ConfigError>,
}

#[cfg(not(core_m0))]
impl<const N: usize, const P: usize> Slots<N, P> {
    const EMPTY: Self = Self {
        rx: Err(NOT_BUILT),
        frame: None,
        noise: Err(NOT_BUILT),
        doppler: Err(NOT_BUILT),
        delay: Err(NOT_BUILT),
        iq: Err(NOT_BUILT),
    };
}

#[cfg(not(core_m0))]
static mut SLOTS_64: Slots<64, 16> = Slots::EMPTY;
#[cfg(not(core_m0))]
static mut SLOTS_256: Slots<256, 64> = Slots::EMPTY;

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

fn fail(what: &str, n: usize, failures: &mut u32) {
    hprintln!("error: {} n={}", what, n);
    *failures += 1;
}

#[cfg(not(core_m0))]
#[inline(never)]
fn build<const N: usize, const P: usize>(s: &mut Slots<N, P>, nu: &Numerology)
where
    Tables: RxDesigns<N> + TrackDesigns<N>,
{
    s.rx = match Tables::design(TRACK_RX_DESIGN) {
        Some(d) => Rx::<N>::new(nu, Q15Fft::new(), d.clone()),
        None => Err(NOT_BUILT),
    };
    s.frame = RxFrame::<N>::new(CASE);
    {
        s.noise = NoiseTrackerQ15::new(
            nu,
            Tables::track_design().clone(),
            NoiseTrackConfigQ15::default(),
        );
    }
    s.doppler = DopplerEstimatorQ15::new(nu, DopplerConfigQ15::default());
    s.delay = DelaySpreadEstimatorQ15::new(nu, delay_config(nu));
    s.iq = IqImageEstimatorQ15::new(nu);
}

/// `ici_q15_predict` at size `N` (no receiver needed).
#[inline(never)]
fn ici<const N: usize>(fd_t_q16: u32, failures: &mut u32) {
    match IciTableQ15::new(N) {
        Ok(table) => {
            let m = measure(&mut || {
                black_box(black_box(&table).predict(black_box(fd_t_q16), black_box(TRACK_EPS_Q16)));
            });
            report("ici_q15_predict", N, m, failures);
        }
        Err(_) => fail("ici: table not built", N, failures),
    }
}

/// Every receiver-fed stage at size `N` (`P` pilots per symbol at most).
#[cfg(not(core_m0))]
#[inline(never)]
fn run<const N: usize, const P: usize>(s: &mut Slots<N, P>, failures: &mut u32) -> u32
where
    Tables: RxDesigns<N> + TrackDesigns<N>,
{
    let (Ok(nu), Some(case)) = (Numerology::new(numerology_params(N)), RX_CASES.get(CASE)) else {
        fail("track: no numerology or case", N, failures);
        return 0;
    };
    let built = stack_peak(&mut || build(s, &nu));
    // SAFETY: the only references to these buffers, taken once per call, not kept.
    let (samples, equalized, sinr, llrs, noise) = unsafe {
        (
            &mut *addr_of_mut!(SAMPLES),
            &mut *addr_of_mut!(EQUALIZED),
            &mut *addr_of_mut!(SINR),
            &mut *addr_of_mut!(LLRS),
            &mut *addr_of_mut!(NOISE),
        )
    };
    let (Ok(rx), Some(frame), Ok(doppler), Ok(delay), Ok(iq), false) = (
        s.rx.as_mut(),
        s.frame.as_mut(),
        s.doppler.as_mut(),
        s.delay.as_mut(),
        s.iq.as_mut(),
        built.overflowed,
    ) else {
        hprintln!(
            "error: track n={}: not built: rx {} frame {} doppler {:?} delay {:?} iq {} stack {}",
            N,
            s.rx.is_ok(),
            s.frame.is_some(),
            s.doppler.as_ref().err(),
            s.delay.as_ref().err(),
            s.iq.is_ok(),
            built.overflowed
        );
        *failures += 1;
        return 0;
    };
    let Ok(tracker) = s.noise.as_mut() else {
        fail("track: the noise tracker was not built", N, failures);
        return 0;
    };
    let modulation = case.modulation;
    let mut ok = true;
    tracker.start_frame();
    for symbol in 0..=MEASURED {
        ok &= frame.symbol(symbol, &mut samples[..]);
        let x = samples.get(..N + N / 8).unwrap_or_default();
        ok &= rx
            .receive(
                x,
                symbol,
                modulation,
                &mut equalized[..],
                &mut sinr[..],
                &mut llrs[..],
            )
            .is_ok();
        let data = nu.data_len(symbol);
        let (bins, exp) = rx.bins_with_exponent();
        if symbol < MEASURED {
            {
                let eq = equalized.get(..data).unwrap_or_default();
                ok &= tracker
                    .update_from_receiver(symbol, rx, eq, modulation)
                    .is_ok();
            }
            ok &= doppler.update(bins, exp, symbol).is_ok();
            ok &= delay.update(bins, exp, symbol).is_ok();
            ok &= iq.update(bins, exp, symbol).is_ok();
            continue;
        }
        {
            let eq = equalized.get(..data).unwrap_or_default();
            let mut r = None;
            let m = measure(&mut || {
                r = Some(black_box(&mut *tracker).update_from_receiver(
                    black_box(symbol),
                    black_box(&*rx),
                    black_box(eq),
                    black_box(modulation),
                ));
            });
            report("noise_track_q15_update", N, m, failures);
            ok &= matches!(r, Some(Ok(())));
        }
        let mut r = None;
        let m = measure(&mut || {
            r = Some(black_box(&mut *doppler).update(black_box(bins), black_box(exp), symbol));
        });
        report("doppler_q15_update", N, m, failures);
        ok &= matches!(r, Some(Ok(())));
        let mut r = None;
        let m = measure(&mut || {
            r = Some(black_box(&mut *delay).update(black_box(bins), black_box(exp), symbol));
        });
        report("delay_q15_update", N, m, failures);
        ok &= matches!(r, Some(Ok(())));
        let mut r = None;
        let m = measure(&mut || {
            r = Some(black_box(&mut *iq).update(black_box(bins), black_box(exp), symbol));
        });
        report("iq_q15_update", N, m, failures);
        ok &= matches!(r, Some(Ok(())));
    }

    // Per frame.
    {
        let m = measure(&mut || {
            black_box(black_box(&*tracker).frame_stats());
        });
        report("noise_track_q15_frame_stats", N, m, failures);
    }
    let mut fd_t_q16 = 0;
    let m = measure(&mut || {
        if let Some(e) = black_box(black_box(&*doppler).estimate()) {
            fd_t_q16 = (e.fd_t_q31.max(0) as u32) >> 15;
        }
    });
    report("doppler_q15_estimate", N, m, failures);
    let m = measure(&mut || {
        black_box(black_box(&*delay).estimate());
    });
    report("delay_q15_estimate", N, m, failures);
    let m = measure(&mut || {
        black_box(black_box(&*iq).estimate());
    });
    report("iq_q15_estimate", N, m, failures);

    let design = <Tables as TrackDesigns<N>>::track_design();
    let noise = noise.get_mut(..N).unwrap_or_default();
    let count = tracker.bin_noise(noise);
    let noise = noise.get(..count).unwrap_or_default();
    let mut r = None;
    let m = measure(&mut || {
        r = Some(
            black_box(&mut *rx)
                .set_bin_noise(black_box(noise), black_box(&design.estimator_mse[..])),
        );
    });
    report("set_bin_noise", N, m, failures);
    ok &= matches!(r, Some(Ok(())));
    if !ok {
        fail("track: a call reported an error", N, failures);
    }
    fd_t_q16
}

/// `set_bin_noise` alone at size `N` (the Cortex-M0: the receiver without the trackers), with
/// the noise the design assumes (`N0 = 0.01` of a unit-energy symbol) on every used bin.
#[cfg(core_m0)]
#[inline(never)]
fn bin_noise_only<const N: usize>(slot: &mut Result<Rx<N>, ConfigError>, failures: &mut u32)
where
    Tables: RxDesigns<N> + TrackDesigns<N>,
{
    let Ok(nu) = Numerology::new(numerology_params(N)) else {
        return fail("track: no numerology", N, failures);
    };
    let built = stack_peak(&mut || {
        *slot = match Tables::design(TRACK_RX_DESIGN) {
            Some(d) => Rx::<N>::new(&nu, Q15Fft::new(), d.clone()),
            None => Err(NOT_BUILT),
        };
    });
    let (Ok(rx), false) = (slot.as_mut(), built.overflowed) else {
        return fail("track: the receiver was not built", N, failures);
    };
    // SAFETY: the only reference to the buffer, taken once here, not kept.
    let noise = unsafe { &mut *addr_of_mut!(NOISE) };
    let design = <Tables as TrackDesigns<N>>::track_design();
    let n0 = design.unit_power / 100;
    noise.iter_mut().for_each(|v| *v = n0);
    let noise = noise.get(..nu.used_len()).unwrap_or_default();
    let mut r = None;
    let m = measure(&mut || {
        r = Some(
            black_box(&mut *rx)
                .set_bin_noise(black_box(noise), black_box(&design.estimator_mse[..])),
        );
    });
    report("set_bin_noise", N, m, failures);
    if !matches!(r, Some(Ok(()))) {
        fail("track: set_bin_noise reported an error", N, failures);
    }
}

/// The Cortex-M0's stored-output stages at one size (built in place in [`M0Arena`]).
#[cfg(core_m0)]
struct StoredStages<const N: usize, const P: usize> {
    noise: Result<NoiseTrackerQ15<N, &'static NoiseTrackDesignQ15<N>>, ConfigError>,
    doppler: Result<DopplerEstimatorQ15<N, P, H>, ConfigError>,
    delay: Result<DelaySpreadEstimatorQ15<N>, ConfigError>,
    iq: Result<IqImageEstimatorQ15<N>, ConfigError>,
}

/// The Cortex-M0's 16 KiB hold the receiver (for `set_bin_noise`) or the stored-output stages
/// (noise tracker and estimators), not both: they take turns in one static.
#[cfg(core_m0)]
union M0Arena {
    rx: core::mem::ManuallyDrop<Result<Rx<64>, ConfigError>>,
    stored: core::mem::ManuallyDrop<StoredStages<64, 16>>,
}

#[cfg(core_m0)]
static mut ARENA: M0Arena = M0Arena {
    rx: core::mem::ManuallyDrop::new(Err(NOT_BUILT)),
};

/// The noise tracker (`NoiseTrackerQ15::update` on the stored view, design borrowed from the
/// flash table; `frame_stats`) and the Doppler, delay-spread and I/Q estimators at size `N`
/// (`P` pilots) on the stored receiver outputs of the same frame
/// (`flatbin_firmware::track_stored`, recorded on the host by
/// `vectors_gen::track::record_case`: frame 0 of case `CASE` is what `run` receives), for the
/// Cortex-M0, whose RAM does not hold them beside the receiver. They are built in `st`
/// (the arena the receiver used before).
#[cfg(core_m0)]
#[inline(never)]
fn stored_estimators<const N: usize, const P: usize>(
    st: &mut StoredStages<N, P>,
    failures: &mut u32,
) where
    Tables: flatbin_firmware::track_stored::TrackStored<N> + TrackDesigns<N>,
{
    use flatbin_firmware::track_stored::stored;
    use vectors_gen::track::TRACK_CASES;
    let (Ok(nu), Some(case_pos)) = (
        Numerology::new(numerology_params(N)),
        TRACK_CASES.iter().position(|&c| c == CASE),
    ) else {
        return fail("track: no numerology or stored case", N, failures);
    };
    let Some(modulation) = RX_CASES.get(CASE).map(|c| c.modulation) else {
        return fail("track: no case", N, failures);
    };
    st.noise = NoiseTrackerQ15::new(
        &nu,
        <Tables as TrackDesigns<N>>::track_design(),
        NoiseTrackConfigQ15::default(),
    );
    st.doppler = DopplerEstimatorQ15::new(&nu, DopplerConfigQ15::default());
    st.delay = DelaySpreadEstimatorQ15::new(&nu, delay_config(&nu));
    st.iq = IqImageEstimatorQ15::new(&nu);
    let (Ok(tracker), Ok(doppler), Ok(delay), Ok(iq)) = (
        st.noise.as_mut(),
        st.doppler.as_mut(),
        st.delay.as_mut(),
        st.iq.as_mut(),
    ) else {
        return fail("track: an estimator was not built", N, failures);
    };
    let mut ok = true;
    tracker.start_frame();
    for symbol in 0..=MEASURED {
        let Some(s) = stored::<N>(case_pos, 0, symbol) else {
            return fail("track: no stored symbol", N, failures);
        };
        let (bins, exp) = (s.bins, s.bins_exp);
        let view = s.view();
        let eq = s.equalized.get(..nu.data_len(symbol)).unwrap_or_default();
        if symbol < MEASURED {
            ok &= tracker.update(symbol, &view, eq, modulation).is_ok();
            ok &= doppler.update(bins, exp, symbol).is_ok();
            ok &= delay.update(bins, exp, symbol).is_ok();
            ok &= iq.update(bins, exp, symbol).is_ok();
            continue;
        }
        let mut r = None;
        let m = measure(&mut || {
            r = Some(black_box(&mut *tracker).update(
                black_box(symbol),
                black_box(&view),
                black_box(eq),
                black_box(modulation),
            ));
        });
        report("noise_track_q15_update", N, m, failures);
        ok &= matches!(r, Some(Ok(())));
        let mut r = None;
        let m = measure(&mut || {
            r = Some(black_box(&mut *doppler).update(black_box(bins), black_box(exp), symbol));
        });
        report("doppler_q15_update", N, m, failures);
        ok &= matches!(r, Some(Ok(())));
        let mut r = None;
        let m = measure(&mut || {
            r = Some(black_box(&mut *delay).update(black_box(bins), black_box(exp), symbol));
        });
        report("delay_q15_update", N, m, failures);
        ok &= matches!(r, Some(Ok(())));
        let mut r = None;
        let m = measure(&mut || {
            r = Some(black_box(&mut *iq).update(black_box(bins), black_box(exp), symbol));
        });
        report("iq_q15_update", N, m, failures);
        ok &= matches!(r, Some(Ok(())));
    }
    let m = measure(&mut || {
        black_box(black_box(&*tracker).frame_stats());
    });
    report("noise_track_q15_frame_stats", N, m, failures);
    let m = measure(&mut || {
        black_box(black_box(&*doppler).estimate());
    });
    report("doppler_q15_estimate", N, m, failures);
    let m = measure(&mut || {
        black_box(black_box(&*delay).estimate());
    });
    report("delay_q15_estimate", N, m, failures);
    let m = measure(&mut || {
        black_box(black_box(&*iq).estimate());
    });
    report("iq_q15_estimate", N, m, failures);
    if !ok {
        fail("track: a call reported an error", N, failures);
    }
}

#[entry]
fn main() -> ! {
    cortex_m::interrupt::disable();
    let mut failures = 0u32;
    let empty = measure(&mut || {});
    report("empty", 0, empty, &mut failures);

    #[cfg(not(core_m0))]
    {
        // SAFETY: the only references to the slots, taken once here.
        let fd64 = unsafe { run::<64, 16>(&mut *addr_of_mut!(SLOTS_64), &mut failures) };
        ici::<64>(fd64, &mut failures);
        // SAFETY: as above.
        let fd256 = unsafe { run::<256, 64>(&mut *addr_of_mut!(SLOTS_256), &mut failures) };
        ici::<256>(fd256, &mut failures);
    }
    #[cfg(core_m0)]
    {
        // SAFETY: the only reference to the arena's receiver, taken once here and dropped
        // before the arena is reused.
        unsafe { bin_noise_only::<64>(&mut *addr_of_mut!(ARENA.rx), &mut failures) };
        ici::<64>(0, &mut failures);
        // SAFETY: the receiver is no longer used (its type needs no drop: `ManuallyDrop`);
        // the arena now holds the stored-output stages, built in place, and this is the only
        // reference to them.
        unsafe {
            let arena = &mut *addr_of_mut!(ARENA);
            arena.stored = core::mem::ManuallyDrop::new(StoredStages {
                noise: Err(NOT_BUILT),
                doppler: Err(NOT_BUILT),
                delay: Err(NOT_BUILT),
                iq: Err(NOT_BUILT),
            });
            stored_estimators::<64, 16>(&mut arena.stored, &mut failures);
        }
        hprintln!(
            "trackskip core={} n=256 stage=receiver-fed bytes={} (ReceiverQ15<256>)",
            CORE,
            size_of::<Rx<256>>()
        );
        ici::<256>(0, &mut failures);
    }
    #[cfg(not(core_m0))]
    hprintln!(
        "tracksize core={} NoiseTrackerQ15<64>={} DopplerEstimatorQ15<64,16,32>={} DelaySpreadEstimatorQ15<64>={} IqImageEstimatorQ15<64>={}",
        CORE,
        size_of::<NoiseTrackerQ15<64>>(),
        size_of::<DopplerEstimatorQ15<64, 16, H>>(),
        size_of::<DelaySpreadEstimatorQ15<64>>(),
        size_of::<IqImageEstimatorQ15<64>>()
    );

    hprintln!("done core={} failures={}", CORE, failures);
    exit(failures)
}
