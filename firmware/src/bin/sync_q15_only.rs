//! The integer synchronisation stages alone, at N = 64 and 256, with the frame receiver's
//! design from the `build.rs` table. Built, not run (the stages live on the stack). Like
//! `panic_free`, its panic handler references an undefined symbol.
//!
//! Two kinds of code, in separate functions the xtask finds by name:
//! - `configure`: `Numerology::new` (the pilot amplitude in f32, configuration time, once);
//! - `per_sample`: every integer entry point of `acquire_q15` (`AcquirerQ15`), `nco`
//!   (`NcoQ15`'s integer API, `increment_for_cfo_q16`, `cos_sin_q15`), `gain_dc`
//!   (`DcSumsQ15`, `estimate_dc_q15`, `estimate_dc_cfo_q15`, `remove_dc_q15`, `PowerQ15::add`,
//!   `gain_for_backoff_q15`), `cp_sync_q15` (`CpTrackerQ15`), `sco_q15` (`ScoEstimatorQ15`),
//!   `sync_q15` (`increment_for_cfo_q31`, `total_cfo_q15`, `first_path_offset_q15`) and
//!   `frame_q15` (`FrameReceiverQ15::new`, `push`, `sco_q32`).
//!
//! Left out as floating point by design (configuration or reports): `target_amplitude_q30`,
//! `gain_for_backoff`, `estimate_dc`/`estimate_dc_cfo`/`remove_dc`/`preamble_power` (f32),
//! `PowerQ15::mean`, `increment_for_cfo`, `cfo_of_increment`, `NcoQ15::with_cfo`/`set_cfo`
//! and `NcoF32`.
//!
//! `cargo xtask mcu` checks on the Cortex-M0 build that no soft-float routine (`__aeabi_f*`,
//! `__aeabi_d*`, …, or `libm`) is reachable through direct calls from `per_sample`.

#![no_std]
#![no_main]

use core::hint::black_box;
use core::ptr::addr_of_mut;

use cortex_m_rt::entry;
use flatbin::acquire_q15::AcquirerQ15;
use flatbin::cp_sync_q15::CpTrackerQ15;
use flatbin::fft_q15::Q15Fft;
use flatbin::fixed::Cq15;
use flatbin::frame_q15::FrameReceiverQ15;
use flatbin::gain_dc::{
    estimate_dc_cfo_q15, estimate_dc_q15, gain_for_backoff_q15, remove_dc_q15, DcSumsQ15, PowerQ15,
};
use flatbin::nco::{cos_sin_q15, increment_for_cfo_q16, NcoQ15};
use flatbin::sco_q15::ScoEstimatorQ15;
use flatbin::sync_q15::{first_path_offset_q15, increment_for_cfo_q31, total_cfo_q15};
use flatbin::Numerology;
use flatbin_firmware::rx_tables::{RxDesigns, Tables};
use flatbin_firmware::{exit, prefix};
use vectors_gen::rx::{numerology_params, RX_K, RX_M};
use vectors_gen::sync::{frame_config, FRAME_DESIGN};

extern "C" {
    /// Deliberately never defined: referenced only from the panic handler.
    fn flatbin_panic_path_reachable() -> !;
}

#[panic_handler]
fn panic(_: &core::panic::PanicInfo) -> ! {
    // SAFETY: never executed in a correct build: the link fails while this is reachable.
    unsafe { flatbin_panic_path_reachable() }
}

const MAX_S: usize = 256 + 32;
static mut SAMPLES: [Cq15; 2 * MAX_S] = [Cq15::ZERO; 2 * MAX_S];

/// Configuration: the numerology of size `n` (floating point allowed here).
#[inline(never)]
fn configure(n: usize) -> Option<Numerology> {
    Numerology::new(black_box(numerology_params(n))).ok()
}

/// Every integer synchronisation entry point at size `N` (`S = N + N/8`, ring `R`); no
/// floating point may be reachable from here.
#[inline(never)]
fn per_sample<const N: usize, const S: usize, const R: usize>(nu: &Numerology)
where
    Tables: RxDesigns<N>,
{
    // SAFETY: the only reference to the buffer, taken once per call, not kept.
    let samples = unsafe { &mut *addr_of_mut!(SAMPLES) };
    let x = black_box(&samples[..]);
    if let Ok(mut acq) = AcquirerQ15::<N>::new(nu, black_box(9411)) {
        let acq = black_box(&mut acq);
        black_box(acq.push(x)).ok();
        black_box(acq.position());
    }
    let mut nco = NcoQ15::new();
    let nco = black_box(&mut nco);
    nco.set_increment(increment_for_cfo_q16(black_box(144_179), N));
    nco.set_phase(black_box(7));
    nco.advance(black_box(100));
    black_box(nco.derotate(black_box(&mut samples[..])));
    black_box((nco.phase(), nco.increment()));
    nco.reset();
    black_box(cos_sin_q15(black_box(0x1234_5678)));

    let mut sums = DcSumsQ15::new();
    sums.add(black_box(&samples[..]));
    let dc = black_box(sums.mean());
    black_box(estimate_dc_q15(black_box(&samples[..])));
    black_box(estimate_dc_cfo_q15(
        black_box(&samples[..]),
        black_box(0x0100_0000),
    ));
    black_box(remove_dc_q15(black_box(&mut samples[..]), dc));
    let mut power = PowerQ15::new();
    power.add(black_box(&samples[..]), dc);
    black_box(gain_for_backoff_q15(
        black_box(power),
        black_box(269_711_752),
    ));

    if let Ok(mut cp) = CpTrackerQ15::<N, S>::new(nu, black_box(64_887)) {
        let cp = black_box(&mut cp);
        cp.push(black_box(&samples[..]));
        black_box(cp.estimate());
        cp.clear();
    }
    let mut fft = Q15Fft::<N>::new();
    if let Ok(mut sco) = ScoEstimatorQ15::<N>::new(nu) {
        let sco = black_box(&mut sco);
        if let Some(bins) = prefix::<Cq15, N>(&mut samples[..]) {
            black_box(sco.update(black_box(bins), black_box(1))).ok();
        }
        black_box(sco.estimate_q32());
        sco.reset();
    }
    black_box(increment_for_cfo_q31(black_box(-5_000_000), N));
    let a = black_box([Cq15::ZERO; N]);
    let b = black_box([Cq15::ZERO; N]);
    black_box(total_cfo_q15(
        nu,
        &mut fft,
        &a,
        &b,
        black_box(600_000_000),
        black_box(4),
    ));
    black_box(first_path_offset_q15(nu, &mut fft, &b, black_box(6554)));

    let Some(design) = Tables::design(black_box(FRAME_DESIGN)) else {
        return;
    };
    if let Ok(mut fr) =
        FrameReceiverQ15::<N, RX_K, RX_M, R>::new(nu, design.clone(), black_box(frame_config(N)))
    {
        let fr = black_box(&mut fr);
        black_box(fr.push(black_box(&samples[..]), |ev| {
            black_box(ev.llrs);
        }))
        .ok();
        black_box(fr.sco_q32());
    }
}

#[entry]
fn main() -> ! {
    if let Some(nu) = configure(64) {
        per_sample::<64, 72, 512>(black_box(&nu));
    }
    if let Some(nu) = configure(256) {
        per_sample::<256, 288, 2048>(black_box(&nu));
    }
    exit(0)
}
