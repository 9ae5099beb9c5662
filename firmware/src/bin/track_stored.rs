//! Bit-exact vectors of the integer tracking stages without the receiver, for a core whose
//! RAM does not hold `ReceiverQ15` beside the trackers (the Cortex-M0: 16 KiB).
//! `vectors_gen::track::run_stored` (the host runs the same procedure) feeds the trackers the
//! receiver's outputs of the tracking cases at N = 64 — per symbol the FFT bins with their
//! block exponent, the channel estimate with its exponent, the common phase and the equalized
//! symbols — recorded on the host by `vectors_gen::track::record_case` (cases 0 and 1 of
//! `vectors_gen::rx`, three frames of six symbols, receiver design 0) and written into flash
//! by `build.rs` (`flatbin_firmware::track_stored`). Per case (`pass=all`):
//! `NoiseTrackerQ15` (`update` on the stored view; design borrowed from flash),
//! `DopplerEstimatorQ15<64, 16, 32>`, `DelaySpreadEstimatorQ15` (the frames' known noise
//! floor) and `IqImageEstimatorQ15` per symbol, their estimates and `IciTableQ15::predict` on
//! the Doppler estimate per frame (table built here, f32), with the noise tracker's
//! `frame_stats`, `interfered` and `bin_noise`. Every record is printed as in
//! `track_vectors.rs`, tagged `tracks` and with its pass:
//!
//! ```text
//! tracks core=cortex-m0 n=64 case=0 pass=all rec=doppler idx=6 words=4
//! w 00000002 00000000 ...
//! end
//! ```
//!
//! `trackstore` gives the hash of the stored tables and `trackdesign` that of the noise
//! tracker's `build.rs` design table; `tracksize` the stages' sizes and the pass's peak stack
//! (the stages live on it). The xtask compares every record with the host's, and the host's
//! with its own full receiver run (`run_case`).
//!
//! `NoiseTrackerQ15<64, &'static NoiseTrackDesignQ15<64>>` runs in the same pass: it borrows
//! its design from the flash table (`Tables::track_design()`), so RAM holds only its state
//! (printed on `tracksize`); it emits `frame_stats`, `interfered` and `bin_noise` per frame.
//! Not covered: the `weights` record (`ReceiverQ15::set_bin_noise` with the tracked noise): it
//! needs the receiver (6,144 B, and about 6 KB of stack to build), which does not fit beside
//! the stored pass; `track_vectors` runs `set_bin_noise` with the noise the design assumes on
//! the M0. Exit status: the number of failures.

#![no_std]
#![no_main]

use core::mem::size_of;

use cortex_m_rt::entry;
use cortex_m_semihosting::hprintln;
use flatbin::delay_spread_q15::DelaySpreadEstimatorQ15;
use flatbin::doppler_q15::{DopplerConfigQ15, DopplerEstimatorQ15};
use flatbin::ici_q15::IciTableQ15;
use flatbin::iq_image_q15::IqImageEstimatorQ15;
use flatbin::noise_track_q15::{NoiseTrackConfigQ15, NoiseTrackDesignQ15, NoiseTrackerQ15};
use flatbin::Numerology;
use flatbin_firmware::track_stored::{stored, Tables};
use flatbin_firmware::track_tables::TrackDesigns;
use flatbin_firmware::{exit, print_words, stack_peak, CORE};
use panic_semihosting as _;
use vectors_gen::rx::{numerology_params, RX_SYMBOLS};
use vectors_gen::track::{
    delay_config, run_stored, track_design_hash, Trackers, HASH_START, TRACK_CASES, TRACK_FRAMES,
};

const N: usize = 64;
const P: usize = 16;
const H: usize = 32;

/// The noise tracker with its design borrowed from flash.
type NoiseTracker = NoiseTrackerQ15<N, &'static NoiseTrackDesignQ15<N>>;

/// Prints one record.
fn print(case: usize, pass: &str, index: &mut u32, label: &str, words: &[u32]) {
    hprintln!(
        "tracks core={} n={} case={} pass={} rec={} idx={} words={}",
        CORE,
        N,
        case,
        pass,
        label,
        *index,
        words.len()
    );
    print_words(words.iter().copied());
    *index += 1;
}

/// The noise tracker (design borrowed from flash), the Doppler, delay-spread and I/Q
/// estimators and the ICI table on case `TRACK_CASES[case_pos]` (all on this frame's stack).
#[inline(never)]
fn est_pass(case_pos: usize, nu: &Numerology, failures: &mut u32) {
    let case = TRACK_CASES[case_pos];
    let mut tracker: Result<NoiseTracker, _> = NoiseTrackerQ15::new(
        nu,
        <Tables as TrackDesigns<N>>::track_design(),
        NoiseTrackConfigQ15::default(),
    );
    let mut doppler = DopplerEstimatorQ15::<N, P, H>::new(nu, DopplerConfigQ15::default());
    let mut delay = DelaySpreadEstimatorQ15::<N>::new(nu, delay_config(nu));
    let mut iq = IqImageEstimatorQ15::<N>::new(nu);
    let ici = IciTableQ15::new(N);
    let (Ok(tracker), Ok(doppler), Ok(delay), Ok(iq), Ok(ici)) = (
        tracker.as_mut(),
        doppler.as_mut(),
        delay.as_mut(),
        iq.as_mut(),
        ici.as_ref(),
    ) else {
        hprintln!("error: n={} case={}: an estimator was not built", N, case);
        *failures += 1;
        return;
    };
    let mut t = Trackers::<N, P, H, &'static NoiseTrackDesignQ15<N>> {
        noise: Some(tracker),
        doppler: Some(doppler),
        delay: Some(delay),
        iq: Some(iq),
        ici: Some(ici),
    };
    let mut noise = [0u64; N];
    let mut index = 0u32;
    let ok = run_stored(
        case,
        nu,
        &|f, s| stored::<N>(case_pos, f, s),
        &mut t,
        &mut noise,
        &mut |label, words| print(case, "all", &mut index, label, words),
    );
    if !ok {
        hprintln!(
            "error: n={} case={} pass=all: the procedure failed",
            N,
            case
        );
        *failures += 1;
    }
}

#[entry]
fn main() -> ! {
    let mut failures = 0u32;
    let Ok(nu) = Numerology::new(numerology_params(N)) else {
        hprintln!("error: n={}: no numerology", N);
        exit(1)
    };
    // The stored tables, hashed in table order.
    let mut hash = HASH_START;
    let mut count = 0u32;
    for case_pos in 0..TRACK_CASES.len() {
        for frame in 0..TRACK_FRAMES {
            for symbol in 0..RX_SYMBOLS {
                match stored::<N>(case_pos, frame, symbol) {
                    Some(s) => {
                        hash = s.hash(hash);
                        count += 1;
                    }
                    None => {
                        hprintln!(
                            "error: n={}: no stored symbol {}/{}/{}",
                            N,
                            case_pos,
                            frame,
                            symbol
                        );
                        failures += 1;
                    }
                }
            }
        }
    }
    hprintln!(
        "trackstore core={} n={} symbols={} hash={:08x}",
        CORE,
        N,
        count,
        hash
    );
    hprintln!(
        "trackdesign core={} n={} track={:08x}",
        CORE,
        N,
        track_design_hash(<Tables as TrackDesigns<N>>::track_design())
    );
    let mut peak = 0u32;
    for case_pos in 0..TRACK_CASES.len() {
        let m = stack_peak(&mut || est_pass(case_pos, &nu, &mut failures));
        peak = peak.max(m.stack_bytes);
        if m.overflowed {
            hprintln!("error: n={} pass=all: stack overflow", N);
            failures += 1;
        }
    }
    hprintln!(
        "tracksize core={} n={} noise_track={} doppler={} delay={} iq={} ici={} stack_pass={} (bytes; the stages live on the pass's stack; the noise tracker's design, {} B, stays in flash)",
        CORE,
        N,
        size_of::<NoiseTracker>(),
        size_of::<DopplerEstimatorQ15<N, P, H>>(),
        size_of::<DelaySpreadEstimatorQ15<N>>(),
        size_of::<IqImageEstimatorQ15<N>>(),
        size_of::<IciTableQ15>(),
        peak,
        size_of::<NoiseTrackDesignQ15<N>>()
    );
    hprintln!(
        "trackskip core={} n={} stage=weights receiver={} ram=16384 (bytes; ReceiverQ15::set_bin_noise with the tracked noise needs the receiver, which does not fit beside the stored pass)",
        CORE,
        N,
        size_of::<flatbin::receiver_q15::ReceiverQ15<flatbin::fft_q15::Q15Fft<N>, N, 4, 4>>()
    );
    hprintln!("done core={} failures={}", CORE, failures);
    exit(failures)
}
