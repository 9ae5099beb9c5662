//! Bit-exact vectors of the integer tracking stages: `vectors_gen::track::run_case` (the
//! host runs the same procedure) on frames of `vectors_gen::rx` cases 0 and 1 (QPSK and
//! 16-QAM at −12 dBFS through the fixed multipath channel, noise 20 dB below, clipped bursts),
//! three frames of six symbols through `ReceiverQ15` (design 0 from the `build.rs` table) and
//! the noise tracker (design from the `build.rs` table), the Doppler, delay-spread and I/Q
//! image estimators; per frame the noise statistics, per-bin noise and interference flags,
//! the LLR weights after `set_bin_noise`, every estimate and the ICI prediction; per symbol a
//! hash of the LLRs (they follow the weights `set_bin_noise` wrote). Then `IciTableQ15::predict`
//! over a grid (the table built here at configuration time). Every record is printed:
//!
//! ```text
//! trackv core=cortex-m4f n=64 case=0 rec=frame_stats idx=7 words=12
//! w 00000002 00000000 ...            (16 words a line)
//! end
//! ```
//!
//! `trackdesign` lines give the hashes of the receiver's and the noise tracker's design
//! tables. Coverage (RAM): the Cortex-M4F runs everything at N = 64 and 256; the Cortex-M0
//! runs the receiver with `set_bin_noise` (the noise the design assumes) and the ICI table at
//! N = 64, and the ICI table at 256: `ReceiverQ15<64>` (6,144 B) with the trackers and the
//! ~6 KB of stack `ReceiverQ15::new` takes exceeds its 16 KiB (the `trackskip` line gives the
//! sizes). The M0 checks the noise tracker (design borrowed from flash) and the Doppler,
//! delay-spread and I/Q estimators at N = 64 without the receiver, on its stored outputs:
//! `track_stored.rs`. Exit status: the number of failures.

#![no_std]
#![no_main]
// The Cortex-M0 build leaves the trackers out (RAM).
#![cfg_attr(core_m0, allow(unused_imports, dead_code))]

#[cfg(core_m0)]
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
use flatbin::noise_track_q15::{NoiseTrackConfigQ15, NoiseTrackerQ15};
use flatbin::receiver_q15::ReceiverQ15;
use flatbin::{ConfigError, Numerology};
use flatbin_firmware::rx_tables::{RxDesigns, Tables};
use flatbin_firmware::track_tables::TrackDesigns;
use flatbin_firmware::{exit, print_words, stack_peak, CORE};
use panic_semihosting as _;
use vectors_gen::rx::{design_hash, numerology_params, RX_K, RX_M};
use vectors_gen::track::{
    delay_config, ici_grid, run_case, track_design_hash, Buffers, Trackers, TRACK_CASES,
    TRACK_RX_DESIGN,
};

#[cfg(not(core_m0))]
const MAX_N: usize = 256;
#[cfg(core_m0)]
const MAX_N: usize = 64;
const H: usize = 32;
const NOT_BUILT: ConfigError = ConfigError::PilotSpacingZero;

type Rx<const N: usize> = ReceiverQ15<Q15Fft<N>, N, RX_K, RX_M>;

static mut SAMPLES: [Cq15; MAX_N + MAX_N / 8] = [Cq15::ZERO; MAX_N + MAX_N / 8];
static mut EQUALIZED: [Cq15; MAX_N] = [Cq15::ZERO; MAX_N];
static mut SINR: [Scaled; MAX_N] = [Scaled { mant: 0, exp: 0 }; MAX_N];
static mut LLRS: [i8; 4 * MAX_N] = [0; 4 * MAX_N];
static mut NOISE: [u64; MAX_N] = [0; MAX_N];

/// The stages at one size, built in place.
struct Slots<const N: usize, const P: usize> {
    rx: Result<Rx<N>, ConfigError>,
    #[cfg(not(core_m0))]
    noise: Result<NoiseTrackerQ15<N>, ConfigError>,
    #[cfg(not(core_m0))]
    doppler: Result<DopplerEstimatorQ15<N, P, H>, ConfigError>,
    #[cfg(not(core_m0))]
    delay: Result<DelaySpreadEstimatorQ15<N>, ConfigError>,
    #[cfg(not(core_m0))]
    iq: Result<IqImageEstimatorQ15<N>, ConfigError>,
}

impl<const N: usize, const P: usize> Slots<N, P> {
    const EMPTY: Self = Self {
        rx: Err(NOT_BUILT),
        #[cfg(not(core_m0))]
        noise: Err(NOT_BUILT),
        #[cfg(not(core_m0))]
        doppler: Err(NOT_BUILT),
        #[cfg(not(core_m0))]
        delay: Err(NOT_BUILT),
        #[cfg(not(core_m0))]
        iq: Err(NOT_BUILT),
    };
}

static mut SLOTS_64: Slots<64, 16> = Slots::EMPTY;
#[cfg(not(core_m0))]
static mut SLOTS_256: Slots<256, 64> = Slots::EMPTY;

/// Prints one record.
fn print(n: usize, case: usize, index: &mut u32, label: &str, words: &[u32]) {
    hprintln!(
        "trackv core={} n={} case={} rec={} idx={} words={}",
        CORE,
        n,
        case,
        label,
        *index,
        words.len()
    );
    print_words(words.iter().copied());
    *index += 1;
}

#[inline(never)]
fn build<const N: usize, const P: usize>(s: &mut Slots<N, P>, nu: &Numerology)
where
    Tables: RxDesigns<N> + TrackDesigns<N>,
{
    s.rx = match Tables::design(TRACK_RX_DESIGN) {
        Some(d) => Rx::<N>::new(nu, Q15Fft::new(), d.clone()),
        None => Err(NOT_BUILT),
    };
    #[cfg(not(core_m0))]
    {
        s.noise = NoiseTrackerQ15::new(
            nu,
            Tables::track_design().clone(),
            NoiseTrackConfigQ15::default(),
        );
        s.doppler = DopplerEstimatorQ15::new(nu, DopplerConfigQ15::default());
        s.delay = DelaySpreadEstimatorQ15::new(nu, delay_config(nu));
        s.iq = IqImageEstimatorQ15::new(nu);
    }
}

/// Every case at size `N`.
#[inline(never)]
fn run<const N: usize, const P: usize>(s: &mut Slots<N, P>, failures: &mut u32)
where
    Tables: RxDesigns<N> + TrackDesigns<N>,
{
    let Ok(nu) = Numerology::new(numerology_params(N)) else {
        hprintln!("error: n={}: no numerology", N);
        *failures += 1;
        return;
    };
    let track_design = <Tables as TrackDesigns<N>>::track_design();
    if let Some(d) = Tables::design(TRACK_RX_DESIGN) {
        hprintln!(
            "trackdesign core={} n={} rx={:08x} track={:08x}",
            CORE,
            N,
            design_hash(d),
            track_design_hash(track_design)
        );
    }
    let built = stack_peak(&mut || build(s, &nu));
    let ici = IciTableQ15::new(N).ok();
    let Ok(rx) = s.rx.as_mut() else {
        hprintln!("error: n={}: receiver not built", N);
        *failures += 1;
        return;
    };
    if built.overflowed {
        hprintln!("error: n={}: stack overflow while building", N);
        *failures += 1;
        return;
    }
    #[cfg(not(core_m0))]
    let mut t = Trackers::<N, P, H> {
        noise: s.noise.as_mut().ok(),
        doppler: s.doppler.as_mut().ok(),
        delay: s.delay.as_mut().ok(),
        iq: s.iq.as_mut().ok(),
        ici: ici.as_ref(),
    };
    #[cfg(not(core_m0))]
    if t.noise.is_none() || t.doppler.is_none() || t.delay.is_none() || t.iq.is_none() {
        hprintln!("error: n={}: a tracker was not built", N);
        *failures += 1;
    }
    #[cfg(core_m0)]
    let mut t = Trackers::<N, P, H> {
        noise: None,
        doppler: None,
        delay: None,
        iq: None,
        ici: ici.as_ref(),
    };
    if ici.is_none() {
        hprintln!("error: n={}: no ICI table", N);
        *failures += 1;
    }
    // SAFETY: the only references to these buffers, taken once per call, not kept.
    let mut b = unsafe {
        Buffers {
            samples: &mut *addr_of_mut!(SAMPLES),
            equalized: &mut *addr_of_mut!(EQUALIZED),
            sinr: &mut *addr_of_mut!(SINR),
            llrs: &mut *addr_of_mut!(LLRS),
            noise: &mut *addr_of_mut!(NOISE),
        }
    };
    for case in TRACK_CASES {
        let mut index = 0u32;
        let ok = run_case(
            case,
            &nu,
            rx,
            track_design,
            &mut t,
            &mut b,
            &mut |label, words| print(N, case, &mut index, label, words),
        );
        if !ok {
            hprintln!("error: n={} case={}: the procedure failed", N, case);
            *failures += 1;
        }
    }
}

/// The ICI table alone at size `N` (`case=ici`).
#[inline(never)]
fn ici_only<const N: usize>(failures: &mut u32) {
    match IciTableQ15::new(N) {
        Ok(table) => {
            let mut index = 0u32;
            ici_grid(&table, &mut |label, words| {
                hprintln!(
                    "trackv core={} n={} case=ici rec={} idx={} words={}",
                    CORE,
                    N,
                    label,
                    index,
                    words.len()
                );
                print_words(words.iter().copied());
                index += 1;
            });
        }
        Err(_) => {
            hprintln!("error: n={}: no ICI table", N);
            *failures += 1;
        }
    }
}

#[entry]
fn main() -> ! {
    let mut failures = 0u32;
    // SAFETY: the only references to the slots, taken once here.
    unsafe { run::<64, 16>(&mut *addr_of_mut!(SLOTS_64), &mut failures) };
    ici_only::<64>(&mut failures);
    #[cfg(not(core_m0))]
    // SAFETY: as above.
    unsafe {
        run::<256, 64>(&mut *addr_of_mut!(SLOTS_256), &mut failures)
    };
    ici_only::<256>(&mut failures);
    #[cfg(core_m0)]
    hprintln!(
        "trackskip core={} n=64 receiver={} noise_track={} doppler={} delay={} iq={} (bytes; the noise tracker with its design borrowed from flash; with ReceiverQ15::new's stack beyond 16 KiB)",
        CORE,
        size_of::<Rx<64>>(),
        size_of::<NoiseTrackerQ15<64, &'static flatbin::noise_track_q15::NoiseTrackDesignQ15<64>>>(),
        size_of::<DopplerEstimatorQ15<64, 16, H>>(),
        size_of::<DelaySpreadEstimatorQ15<64>>(),
        size_of::<IqImageEstimatorQ15<64>>()
    );
    hprintln!("done core={} failures={}", CORE, failures);
    exit(failures)
}
