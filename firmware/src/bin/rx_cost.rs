//! Cost of the Q15 receiver on an emulated Cortex-M: one `ReceiverQ15::receive` call per
//! measured region, on symbol 4 of a `vectors_gen::rx` frame (a fresh receiver built from the
//! `build.rs` design tables has received symbols 0–3 first, so the time stage has history).
//!
//! Run under `xtask/qemu/run-counted`. Per case one line, or one per part of a split
//! measurement (printing is outside the regions):
//!
//! ```text
//! case core=cortex-m4f stage=rx_q15_symbol_qpsk n=64 region=4 stack=512
//! case core=cortex-m4f stage=rx_q15_est_eq_demap_qpsk n=64 region=5 part=0 stack=512
//! ```
//!
//! Stages (per modulation; `2d` = time LMMSE instead of time `Latest`):
//! - `rx_q15_symbol_*`: the whole call (digital gain, FFT, LS, time and frequency stages,
//!   common phase, equalization, LLRs).
//! - `rx_q15_est_eq_demap_*`: the same call without the FFT. The receiver's FFT is wrapped
//!   ([`CostFft`]) so that in split mode it ends the region before the FFT and starts a new
//!   one after it: three regions (before, FFT, after). The xtask adds the first and the last
//!   and subtracts the same parts of `empty_split`, the wrapper's markers with nothing between.
//!
//! Region 0 is the empty stage, region 1–3 `empty_split`. Exit status: the number of failures.

#![no_std]
#![no_main]

use core::hint::black_box;
use core::ptr::{addr_of, addr_of_mut, read_volatile, write_volatile};

use cortex_m_rt::entry;
use cortex_m_semihosting::hprintln;
use flatbin::fft::OfdmFft;
use flatbin::fixed::Cq15;
use flatbin::fixed_math::Scaled;
use flatbin::receiver_q15::{DesignQ15, ReceiverQ15};
use flatbin::{fft_q15::Q15Fft, ConfigError, Numerology};
use flatbin_firmware::rx_tables::{RxDesigns, Tables};
use flatbin_firmware::{
    exit, measure, measure_split, probe_start, probe_stop, stack_peak, Measured, CORE,
};
use panic_semihosting as _;
use vectors_gen::rx::{numerology_params, RxFrame, RX_CASES, RX_K, RX_M};

/// Plain FFT.
const WHOLE: u8 = 0;
/// FFT between region boundaries.
const SPLIT: u8 = 1;
/// Region boundaries only, no FFT (calibration of [`SPLIT`]).
const MARKERS_ONLY: u8 = 2;
static mut FFT_MODE: u8 = WHOLE;

fn set_mode(mode: u8) {
    // SAFETY: single core, interrupts off; a plain volatile store.
    unsafe { write_volatile(addr_of_mut!(FFT_MODE), mode) }
}

/// The Q15 FFT behind a switch read at each call: plain, or with region boundaries around
/// it (the switch costs a load and a compare in every mode).
pub struct CostFft<const N: usize>(Q15Fft<N>);

impl<const N: usize> OfdmFft<N> for CostFft<N> {
    type Sample = Cq15;
    const RESIDUAL_SCALE: f32 = <Q15Fft<N> as OfdmFft<N>>::RESIDUAL_SCALE;

    fn forward(&mut self, buf: &mut [Cq15; N]) -> i32 {
        // SAFETY: single core, interrupts off; a plain volatile load.
        let mode = unsafe { read_volatile(addr_of!(FFT_MODE)) };
        if mode == WHOLE {
            return self.0.forward(buf);
        }
        probe_stop();
        probe_start();
        let e = if mode == SPLIT {
            self.0.forward(buf)
        } else {
            0
        };
        probe_stop();
        probe_start();
        e
    }

    fn inverse(&mut self, buf: &mut [Cq15; N]) -> i32 {
        self.0.inverse(buf)
    }
}

type Rx<const N: usize> = ReceiverQ15<CostFft<N>, N, RX_K, RX_M>;

/// Placeholder of an empty receiver slot.
const NOT_BUILT: ConfigError = ConfigError::PilotSpacingZero;

/// Largest size: 256 on the M4F; the M0's 16 KiB RAM holds the receiver at 64 only.
#[cfg(not(core_m0))]
const MAX_N: usize = 256;
#[cfg(core_m0)]
const MAX_N: usize = 64;

/// The measured symbol: the fifth of the frame.
const MEASURED: u32 = 4;

/// (whole-call stage, FFT-less stage, case index into `RX_CASES`).
const STAGES: [(&str, &str, usize); 3] = [
    ("rx_q15_symbol_qpsk", "rx_q15_est_eq_demap_qpsk", 0),
    ("rx_q15_symbol_qam16", "rx_q15_est_eq_demap_qam16", 1),
    ("rx_q15_2d_symbol_qam16", "rx_q15_2d_est_eq_demap_qam16", 5),
];

static mut SAMPLES: [Cq15; MAX_N + MAX_N / 8] = [Cq15::ZERO; MAX_N + MAX_N / 8];
static mut EQUALIZED: [Cq15; MAX_N] = [Cq15::ZERO; MAX_N];
static mut SINR: [Scaled; MAX_N] = [Scaled { mant: 0, exp: 0 }; MAX_N];
static mut LLRS: [i8; 4 * MAX_N] = [0; 4 * MAX_N];
static mut CALIBRATION_BUF: [Cq15; 64] = [Cq15::ZERO; 64];

static mut RX_64: Result<Rx<64>, ConfigError> = Err(NOT_BUILT);
static mut FRAME_64: Option<RxFrame<64>> = None;
#[cfg(not(core_m0))]
static mut RX_256: Result<Rx<256>, ConfigError> = Err(NOT_BUILT);
#[cfg(not(core_m0))]
static mut FRAME_256: Option<RxFrame<256>> = None;

struct Buffers {
    samples: &'static mut [Cq15],
    equalized: &'static mut [Cq15],
    sinr: &'static mut [Scaled],
    llrs: &'static mut [i8],
}

fn report(stage: &str, n: usize, part: Option<u32>, m: Measured, failures: &mut u32) {
    match part {
        None => hprintln!(
            "case core={} stage={} n={} region={} stack={}",
            CORE,
            stage,
            n,
            m.region,
            m.stack_bytes
        ),
        Some(p) => hprintln!(
            "case core={} stage={} n={} region={} part={} stack={}",
            CORE,
            stage,
            n,
            m.region + p,
            p,
            m.stack_bytes
        ),
    }
    if m.overflowed {
        hprintln!(
            "error: {} n={}: stack reached the bottom of the painted area",
            stage,
            n
        );
        *failures += 1;
    }
}

/// Builds a receiver into `slot` (its own stack frame: `ReceiverQ15::new` returns by value).
#[inline(never)]
fn build<const N: usize>(
    slot: &mut Result<Rx<N>, ConfigError>,
    nu: &Numerology,
    design: &DesignQ15<N, RX_K, RX_M>,
) {
    *slot = Rx::<N>::new(nu, CostFft(Q15Fft::new()), design.clone());
}

/// Builds the frame generator of case `k` into `slot`.
#[inline(never)]
fn build_frame<const N: usize>(slot: &mut Option<RxFrame<N>>, k: usize) {
    *slot = RxFrame::<N>::new(k);
}

/// Measures the three stages at size `N`.
fn run<const N: usize>(
    rx_slot: &mut Result<Rx<N>, ConfigError>,
    frame_slot: &mut Option<RxFrame<N>>,
    b: &mut Buffers,
    failures: &mut u32,
) where
    Tables: RxDesigns<N>,
{
    for (whole_stage, split_stage, k) in STAGES {
        for split in [false, true] {
            let stage = if split { split_stage } else { whole_stage };
            let (Some(case), Ok(nu)) = (RX_CASES.get(k), Numerology::new(numerology_params(N)))
            else {
                *failures += 1;
                continue;
            };
            let Some(design) = Tables::design(case.design) else {
                *failures += 1;
                continue;
            };
            set_mode(WHOLE);
            // A fresh receiver and frame for each measurement.
            let built = stack_peak(&mut || {
                build(rx_slot, &nu, design);
                build_frame(frame_slot, k);
            });
            let (Ok(rx), Some(frame), false) =
                (rx_slot.as_mut(), frame_slot.as_mut(), built.overflowed)
            else {
                hprintln!("error: {} n={}: receiver not built", stage, N);
                *failures += 1;
                continue;
            };
            rx.set_gain(case.gain);
            let len = frame.symbol_len();
            let mut ok = true;
            for symbol in 0..=MEASURED {
                ok &= frame.symbol(symbol, b.samples);
                if symbol < MEASURED {
                    let x = b.samples.get(..len).unwrap_or_default();
                    ok &= rx
                        .receive(x, symbol, case.modulation, b.equalized, b.sinr, b.llrs)
                        .is_ok();
                }
            }
            let x = b.samples.get(..len).unwrap_or_default();
            let (eq, sinr, llrs) = (&mut *b.equalized, &mut *b.sinr, &mut *b.llrs);
            let mut result = None;
            let mut call = || {
                result = Some(black_box(&mut *rx).receive(
                    black_box(x),
                    MEASURED,
                    black_box(case.modulation),
                    black_box(&mut *eq),
                    black_box(&mut *sinr),
                    black_box(&mut *llrs),
                ));
            };
            if split {
                set_mode(SPLIT);
                let m = measure_split(&mut call, 3);
                set_mode(WHOLE);
                for p in 0..3 {
                    report(stage, N, Some(p), m, failures);
                }
            } else {
                let m = measure(&mut call);
                report(stage, N, None, m, failures);
            }
            if !(ok && matches!(result, Some(Ok(_)))) {
                hprintln!("error: {} n={}: the receiver reported an error", stage, N);
                *failures += 1;
            }
        }
    }
}

#[entry]
fn main() -> ! {
    cortex_m::interrupt::disable();
    let mut failures = 0u32;
    // SAFETY: the only references to these buffers, taken once here.
    let (mut b, cal) = unsafe {
        (
            Buffers {
                samples: &mut *addr_of_mut!(SAMPLES),
                equalized: &mut *addr_of_mut!(EQUALIZED),
                sinr: &mut *addr_of_mut!(SINR),
                llrs: &mut *addr_of_mut!(LLRS),
            },
            &mut *addr_of_mut!(CALIBRATION_BUF),
        )
    };

    let empty = measure(&mut || {});
    report("empty", 0, None, empty, &mut failures);
    // The split wrapper's own markers, with no FFT between them.
    let mut fft = CostFft(Q15Fft::<64>::new());
    set_mode(MARKERS_ONLY);
    let calibration = measure_split(
        &mut || {
            black_box(black_box(&mut fft).forward(black_box(&mut *cal)));
        },
        3,
    );
    set_mode(WHOLE);
    for p in 0..3 {
        report("empty_split", 0, Some(p), calibration, &mut failures);
    }

    // SAFETY: the only references to the receiver and frame slots.
    unsafe {
        run::<64>(
            &mut *addr_of_mut!(RX_64),
            &mut *addr_of_mut!(FRAME_64),
            &mut b,
            &mut failures,
        );
        #[cfg(not(core_m0))]
        run::<256>(
            &mut *addr_of_mut!(RX_256),
            &mut *addr_of_mut!(FRAME_256),
            &mut b,
            &mut failures,
        );
    }

    hprintln!("done core={} failures={}", CORE, failures);
    exit(failures)
}
