//! Cost of the integer synchronisation stages on an emulated Cortex-M: one measured region per
//! case, run under `xtask/qemu/run-counted` as `cost.rs` (printing outside the regions):
//!
//! ```text
//! case core=cortex-m4f stage=acq_q15_1k_samples n=64 region=1 stack=96
//! ```
//!
//! Stages (the unit of each row is in its name; `1k_samples` rows are one call on 1000 samples,
//! so instructions per sample are the row's figure / 1000):
//! - `acq_q15_1k_samples`: `AcquirerQ15::push` of 1000 samples of complex Gaussian noise at
//!   −12 dBFS (`vectors_gen::CASES[0]`), after 1000 samples of the same: the listening state
//!   (searching, no detection; a detection in the region fails the case).
//! - `nco_q15_1k_samples` (n = 0: no FFT size): `NcoQ15::derotate` of the same 1000 samples.
//! - `cp_q15_1k_samples`: `CpTrackerQ15::push` of the same 1000 samples after 1000 of them;
//!   `cp_q15_estimate`: one `estimate` afterwards (the search over the `N + L` positions).
//! - `sco_q15_update`: one `ScoEstimatorQ15::update` on the FFT output of data symbol 2 of a
//!   clean QPSK frame (the Q15 transmitter's symbols through the Q15 FFT) after symbols 0
//!   (the reference) and 1; `sco_q15_estimate`: one `estimate_q32` afterwards.
//! - `frame_q15_data_symbol_qpsk`: `FrameReceiverQ15::push` of the `N + L` samples that
//!   complete data symbol 4 of the first frame of `vectors_gen::sync` capture 0 (−12 dBFS, CFO
//!   2.2, DC offset; QPSK; `track_sco` on, DC blocker on), after the receiver decoded symbol 3:
//!   the steady-state cost per data symbol (DC blocker and ring per sample, then DC removal,
//!   NCO, the Q15 receiver, the SCO update, the callback). The case fails unless exactly one
//!   symbol, number 4, is decoded in the region. Cortex-M4F only: it does not fit the M0.
//!
//! Region 0 is the empty stage. Exit status: the number of failures.

#![no_std]
#![no_main]

use core::hint::black_box;
use core::ptr::addr_of_mut;

use cortex_m_rt::entry;
use cortex_m_semihosting::hprintln;
use flatbin::acquire_q15::AcquirerQ15;
use flatbin::cp_sync_q15::CpTrackerQ15;
use flatbin::fft::OfdmFft;
use flatbin::fft_q15::Q15Fft;
use flatbin::fixed::Cq15;
use flatbin::nco::{increment_for_cfo_q16, NcoQ15};
use flatbin::sco_q15::ScoEstimatorQ15;
use flatbin::transmit_q15::TransmitterQ15;
use flatbin::Numerology;
use flatbin_firmware::{exit, fill, measure, Measured, CORE};
use panic_semihosting as _;
use vectors_gen::rx::numerology_params;
use vectors_gen::sync::{data_bits, threshold_q16, CP_RHO_Q16, SYNC_MODULATION};

/// Samples of the per-sample cases.
const SAMPLES: usize = 1000;
/// Input of the per-sample cases: the generator's complex Gaussian at −12 dBFS.
const INPUT_CASE: usize = 0;

static mut INPUT: [Cq15; SAMPLES] = [Cq15::ZERO; SAMPLES];

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

/// `acq_q15_1k_samples` at size `N`.
#[inline(never)]
fn acq<const N: usize>(x: &[Cq15], failures: &mut u32) {
    let Ok(nu) = Numerology::new(numerology_params(N)) else {
        return fail("acq: no numerology", N, failures);
    };
    match AcquirerQ15::<N>::new(&nu, threshold_q16(N)) {
        Ok(mut acq) => {
            let warm = acq.push(x);
            let mut got = None;
            let m = measure(&mut || {
                got = Some(black_box(&mut acq).push(black_box(x)));
            });
            report("acq_q15_1k_samples", N, m, failures);
            if !matches!((warm, got), (Ok(None), Some(Ok(None)))) {
                fail("acq: a detection or an error on noise", N, failures);
            }
        }
        Err(_) => fail("acq: not built", N, failures),
    }
}

/// `nco_q15_1k_samples`.
#[inline(never)]
fn nco(x: &mut [Cq15], failures: &mut u32) {
    let mut nco = NcoQ15::new();
    // 0.3 subcarrier spacings at N = 64 (the cost does not depend on it).
    nco.set_increment(increment_for_cfo_q16(19_661, 64));
    let m = measure(&mut || {
        black_box(black_box(&mut nco).derotate(black_box(&mut *x)));
    });
    report("nco_q15_1k_samples", 0, m, failures);
}

/// `cp_q15_1k_samples` and `cp_q15_estimate` at size `N` (`S = N + N/8`).
#[inline(never)]
fn cp<const N: usize, const S: usize>(x: &[Cq15], failures: &mut u32) {
    let Ok(nu) = Numerology::new(numerology_params(N)) else {
        return fail("cp: no numerology", N, failures);
    };
    match CpTrackerQ15::<N, S>::new(&nu, CP_RHO_Q16) {
        Ok(mut cp) => {
            cp.push(x);
            let m = measure(&mut || black_box(&mut cp).push(black_box(x)));
            report("cp_q15_1k_samples", N, m, failures);
            let m = measure(&mut || {
                black_box(black_box(&cp).estimate());
            });
            report("cp_q15_estimate", N, m, failures);
        }
        Err(_) => fail("cp: not built", N, failures),
    }
}

/// FFT output of data symbol `symbol` of a clean QPSK frame (transmitter, CP dropped, Q15
/// FFT) into `bins`; false on failure.
#[inline(never)]
fn clean_bins<const N: usize, const S: usize>(
    nu: Numerology,
    symbol: u32,
    bins: &mut [Cq15; N],
) -> bool {
    let mut bits = [[0u8; 2]; N];
    let bits = bits.as_flattened_mut();
    let count = data_bits::<N>(0, 0, symbol, bits);
    let mut sym = [Cq15::ZERO; S];
    let ok = match (TransmitterQ15::<N>::new(nu), bits.get(..count)) {
        (Ok(mut tx), Some(b)) => tx.modulate(SYNC_MODULATION, b, symbol, &mut sym).is_ok(),
        _ => false,
    };
    for (b, s) in bins.iter_mut().zip(sym.iter().skip(S - N)) {
        *b = *s;
    }
    Q15Fft::<N>::new().forward(bins);
    ok
}

/// `sco_q15_update` and `sco_q15_estimate` at size `N`.
#[inline(never)]
fn sco<const N: usize, const S: usize>(failures: &mut u32) {
    let Ok(nu) = Numerology::new(numerology_params(N)) else {
        return fail("sco: no numerology", N, failures);
    };
    match ScoEstimatorQ15::<N>::new(&nu) {
        Ok(mut sco) => {
            let mut bins = [Cq15::ZERO; N];
            let mut ok = true;
            for symbol in 0..2 {
                ok &= clean_bins::<N, S>(nu, symbol, &mut bins);
                ok &= sco.update(&bins, symbol).is_ok();
            }
            ok &= clean_bins::<N, S>(nu, 2, &mut bins);
            let mut updated = None;
            let m = measure(&mut || {
                updated = Some(black_box(&mut sco).update(black_box(&bins), black_box(2)));
            });
            report("sco_q15_update", N, m, failures);
            let mut estimate = None;
            let m = measure(&mut || {
                estimate = black_box(black_box(&sco).estimate_q32());
            });
            report("sco_q15_estimate", N, m, failures);
            if !(ok && matches!(updated, Some(Ok(()))) && estimate.is_some()) {
                fail("sco: an update failed or no estimate", N, failures);
            }
        }
        Err(_) => fail("sco: not built", N, failures),
    }
}

#[cfg(not(core_m0))]
mod frame {
    use super::*;
    use flatbin::frame_q15::FrameReceiverQ15;
    use flatbin_firmware::rx_tables::{RxDesigns, Tables};
    use flatbin_firmware::sync_tables::preamble;
    use vectors_gen::rx::{RX_K, RX_M};
    use vectors_gen::sync::{frame_config, Capture, FRAME_DESIGN};

    /// The measured data symbol.
    const MEASURED: u32 = 4;

    /// `frame_q15_data_symbol_qpsk` at size `N` (`S = N + N/8`, ring `R`); `buf` holds at
    /// least `S` samples.
    #[inline(never)]
    pub fn frame<const N: usize, const S: usize, const R: usize>(
        buf: &mut [Cq15],
        failures: &mut u32,
    ) where
        Tables: RxDesigns<N>,
    {
        let (Ok(nu), Some(pre), Some(design), Some(x)) = (
            Numerology::new(numerology_params(N)),
            preamble(N),
            Tables::design(FRAME_DESIGN),
            buf.get_mut(..S),
        ) else {
            return fail(
                "frame: no numerology, preamble, design or buffer",
                N,
                failures,
            );
        };
        let Some(mut cap) = Capture::<N, S>::new(0, pre) else {
            return fail("frame: no capture", N, failures);
        };
        match FrameReceiverQ15::<N, RX_K, RX_M, R>::new(&nu, design.clone(), frame_config(N)) {
            Ok(mut fr) => {
                // Sample by sample until data symbol MEASURED − 1 is decoded.
                let mut last = None;
                let mut one = [Cq15::ZERO; 1];
                while last != Some(MEASURED - 1) {
                    if cap.fill(&mut one) == 0
                        || fr.push(&one, |ev| last = Some(ev.symbol)).is_err()
                    {
                        return fail("frame: the capture ended before the symbol", N, failures);
                    }
                }
                // The next N + L samples complete data symbol MEASURED.
                if cap.fill(x) != S {
                    return fail("frame: short capture", N, failures);
                }
                let (mut events, mut symbol, mut pushed) = (0u32, None, None);
                let m = measure(&mut || {
                    pushed = Some(black_box(&mut fr).push(black_box(&*x), |ev| {
                        events += 1;
                        symbol = Some(ev.symbol);
                        black_box(ev.llrs);
                    }));
                });
                report("frame_q15_data_symbol_qpsk", N, m, failures);
                if !(events == 1 && symbol == Some(MEASURED) && matches!(pushed, Some(Ok(())))) {
                    fail("frame: not exactly the one measured symbol", N, failures);
                }
            }
            Err(_) => fail("frame: not built", N, failures),
        }
    }
}

#[entry]
fn main() -> ! {
    cortex_m::interrupt::disable();
    let mut failures = 0u32;
    // SAFETY: the only reference to the buffer, taken once here.
    let input: &mut [Cq15; SAMPLES] = unsafe { &mut *addr_of_mut!(INPUT) };
    fill(INPUT_CASE, input, |v, re, im| *v = Cq15::new(re, im));

    let empty = measure(&mut || {});
    report("empty", 0, empty, &mut failures);

    acq::<64>(input, &mut failures);
    acq::<256>(input, &mut failures);
    cp::<64, 72>(input, &mut failures);
    #[cfg(not(core_m0))]
    cp::<256, 288>(input, &mut failures);
    sco::<64, 72>(&mut failures);
    sco::<256, 288>(&mut failures);
    // After the cases that read the input: it derotates it in place.
    nco(input, &mut failures);
    // The input buffer holds the capture's samples from here on.
    #[cfg(not(core_m0))]
    {
        frame::frame::<64, 72, 512>(input, &mut failures);
        frame::frame::<256, 288, 2048>(input, &mut failures);
    }

    hprintln!("done core={} failures={}", CORE, failures);
    exit(failures)
}
