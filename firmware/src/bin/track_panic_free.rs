//! Panic-free link check of the integer tracking stages (`noise_track_q15`, `doppler_q15`,
//! `delay_spread_q15`, `iq_image_q15`, `ici_q15` and `ReceiverQ15::set_bin_noise`), as
//! `panic_free.rs` does for the rest of the core: every entry point at N = 64 and 256 (the
//! Cortex-M0: 64; the tracking code at two sizes does not fit its 256 KiB of flash beside the
//! receiver), with designs and inputs the optimiser cannot see into. Its panic handler calls
//! `flatbin_panic_path_reachable`, defined nowhere: the link fails while a panic path
//! survives. Built, not run.

#![no_std]
#![no_main]

use core::hint::black_box;
use core::ptr::addr_of_mut;

use cortex_m_rt::entry;
use flatbin::estimate::{TimeFilter, MAX_PATTERN_PERIOD};
use flatbin::fft_q15::Q15Fft;
use flatbin::fixed::Cq15;
use flatbin::fixed_math::Scaled;
use flatbin::receiver_q15::{DesignQ15, ReceiverQ15};
use flatbin::{Modulation, Numerology, NumerologyParams};
use flatbin_firmware::{exit, prefix};

#[cfg(not(feature = "locate-panics"))]
extern "C" {
    /// Deliberately never defined: referenced only from the panic handler.
    fn flatbin_panic_path_reachable() -> !;
}

#[cfg(not(feature = "locate-panics"))]
#[panic_handler]
fn panic(_: &core::panic::PanicInfo) -> ! {
    // SAFETY: never executed in a correct build: the link fails while this is reachable.
    unsafe { flatbin_panic_path_reachable() }
}

/// Diagnostic build (`--features locate-panics`): links, so the xtask can list the call sites
/// of the `core::panicking` functions that survived.
#[cfg(feature = "locate-panics")]
#[panic_handler]
fn panic(_: &core::panic::PanicInfo) -> ! {
    cortex_m::asm::udf()
}

/// Keeps a value alive without a `must_use` warning (results are not inspected here).
fn sink<T>(value: T) {
    black_box(value);
}

#[cfg(not(core_m0))]
const MAX_N: usize = 256;
#[cfg(core_m0)]
const MAX_N: usize = 64;
const MAX_SYMBOL: usize = MAX_N + MAX_N / 4;

static mut BUF_Q15: [Cq15; MAX_SYMBOL] = [Cq15 { re: 0, im: 0 }; MAX_SYMBOL];
static mut EQUALIZED_Q15: [Cq15; MAX_N] = [Cq15 { re: 0, im: 0 }; MAX_N];
static mut SINR_Q15: [Scaled; MAX_N] = [Scaled { mant: 0, exp: 0 }; MAX_N];
static mut LLRS_Q15: [i8; 8 * MAX_N] = [0; 8 * MAX_N];

struct Buffers {
    q15: &'static mut [Cq15; MAX_SYMBOL],
    equalized_q15: &'static mut [Cq15; MAX_N],
    sinr_q15: &'static mut [Scaled; MAX_N],
    llrs_q15: &'static mut [i8; 8 * MAX_N],
}

/// A receiver design the optimiser cannot see into.
fn opaque_design<const N: usize>() -> DesignQ15<N, 4, 4> {
    black_box(DesignQ15 {
        lattice: [0; N],
        lattice_len: 0,
        lattice_of: [0; N],
        every_symbol: [false; N],
        taps: [[(0, 0); 4]; N],
        first_tap: [0; N],
        time_weights: [[[[0; 4]; 4]; MAX_PATTERN_PERIOD]; 2],
        time: TimeFilter::Latest,
        lambda_q15: 0,
        inv_pilot: Scaled { mant: 0, exp: 0 },
        weight: [Scaled { mant: 0, exp: 0 }; N],
        cpe: false,
    })
}

/// A noise tracker design the optimiser cannot see into.
fn opaque_track_design<const N: usize>() -> flatbin::noise_track_q15::NoiseTrackDesignQ15<N> {
    use flatbin::noise_track_q15::{DdPointQ15, DdTableQ15, NoiseTrackDesignQ15, DD_POINTS};
    black_box(NoiseTrackDesignQ15 {
        pilot_coef: [(0, 0); N],
        pilot_scale: [Scaled { mant: 0, exp: 0 }; N],
        inv_pilot_power: Scaled { mant: 0, exp: 0 },
        estimator_mse: [0; N],
        unit_power: 0,
        dd: [DdTableQ15 {
            points: [DdPointQ15::default(); DD_POINTS],
        }; 5],
    })
}

/// The tracking stages' entry points at size N: `NoiseTrackerQ15` (`new`, `update_from_receiver`,
/// `update`, `start_frame`, `start_frame_with_gain`, `frame_stats`, `bin_noise`,
/// `interfered_bins`, `is_interfered`, `reset`), `ReceiverQ15::set_bin_noise` and
/// `clear_bin_noise`, `DopplerEstimatorQ15` (`new`, `update`, `estimate`, `end_frame`),
/// `DelaySpreadEstimatorQ15` and `IqImageEstimatorQ15` (`new`, `update`, `estimate`),
/// `IciTableQ15` (`new`, `predict`), with designs and inputs the optimiser cannot see into.
#[inline(never)]
fn track_q15<const N: usize>(nu: &Numerology, b: &mut Buffers) {
    use flatbin::delay_spread_q15::{DelaySpreadConfigQ15, DelaySpreadEstimatorQ15};
    use flatbin::doppler_q15::{DopplerConfigQ15, DopplerEstimatorQ15};
    use flatbin::ici_q15::IciTableQ15;
    use flatbin::iq_image_q15::IqImageEstimatorQ15;
    use flatbin::noise_track_q15::{NoiseTrackConfigQ15, NoiseTrackerQ15, SymbolViewQ15};

    let symbol = black_box(2u32);
    let modulation = black_box(Modulation::Qam16);
    let exp = black_box(3i32);
    let Ok(mut rx) =
        ReceiverQ15::<Q15Fft<N>, N, 4, 4>::new(nu, Q15Fft::new(), opaque_design::<N>())
    else {
        return;
    };
    let rx = black_box(&mut rx);
    let len = black_box(nu.symbol_len());
    sink(rx.receive(
        black_box(b.q15.get(..len).unwrap_or_default()),
        symbol,
        modulation,
        black_box(&mut b.equalized_q15[..]),
        black_box(&mut b.sinr_q15[..]),
        black_box(&mut b.llrs_q15[..]),
    ));
    let config = black_box(NoiseTrackConfigQ15::default());
    if let Ok(mut t) = NoiseTrackerQ15::new(nu, opaque_track_design::<N>(), config) {
        let t = black_box(&mut t);
        t.start_frame();
        sink(t.update_from_receiver(symbol, &*rx, black_box(&b.equalized_q15[..]), modulation));
        if let Some(bins) = prefix::<Cq15, N>(&mut b.q15[..]) {
            let view = SymbolViewQ15 {
                bins: black_box(&*bins),
                bins_exp: exp,
                estimate: black_box(&b.equalized_q15[..]),
                estimate_exp: black_box(-2),
                common_phase: black_box(Some(Cq15::new(3, 4))),
            };
            sink(t.update(symbol, &view, black_box(&b.equalized_q15[..]), modulation));
        }
        sink(t.frame_stats());
        let mut noise = [0u64; N];
        sink(t.bin_noise(black_box(&mut noise[..])));
        let mut flagged = [0u16; N];
        sink(t.interfered_bins(black_box(&mut flagged[..])));
        sink(t.is_interfered(black_box(5)));
        t.start_frame_with_gain(black_box(Scaled {
            mant: 20_000,
            exp: 1,
        }));
        let mse = black_box([7u64; N]);
        sink(rx.set_bin_noise(black_box(&noise[..]), &mse[..]));
        t.reset();
    }
    let weights = black_box([Scaled { mant: 0, exp: 0 }; N]);
    rx.clear_bin_noise(&weights);
    let Some(bins) = prefix::<Cq15, N>(&mut b.q15[..]) else {
        return;
    };
    let bins = black_box(&*bins);
    if let Ok(mut d) =
        DopplerEstimatorQ15::<N, N, 32>::new(nu, black_box(DopplerConfigQ15::default()))
    {
        let d = black_box(&mut d);
        sink(d.update(bins, exp, symbol));
        sink(d.estimate());
        d.end_frame();
    }
    let floor = black_box(Scaled {
        mant: 20_726,
        exp: -10,
    });
    let config = black_box(DelaySpreadConfigQ15::known(nu, floor));
    if let Ok(mut d) = DelaySpreadEstimatorQ15::<N>::new(nu, config) {
        let d = black_box(&mut d);
        sink(d.update(bins, exp, symbol));
        sink(d.estimate());
    }
    if let Ok(mut q) = IqImageEstimatorQ15::<N>::new(nu) {
        let q = black_box(&mut q);
        sink(q.update(bins, exp, symbol));
        sink(q.estimate());
    }
    if let Ok(t) = IciTableQ15::new(black_box(N)) {
        sink(black_box(&t).predict(black_box(1234), black_box(-777)));
    }
}

#[entry]
fn main() -> ! {
    // SAFETY: the only references to these buffers, taken once here.
    let mut b = unsafe {
        Buffers {
            q15: &mut *addr_of_mut!(BUF_Q15),
            equalized_q15: &mut *addr_of_mut!(EQUALIZED_Q15),
            sinr_q15: &mut *addr_of_mut!(SINR_Q15),
            llrs_q15: &mut *addr_of_mut!(LLRS_Q15),
        }
    };
    for n in [64usize, 256] {
        let params = black_box(NumerologyParams {
            fft_len: n,
            cp_len: n / 8,
            ..NumerologyParams::default()
        });
        let Ok(nu) = Numerology::new(params) else {
            continue;
        };
        if n == 64 {
            track_q15::<64>(&nu, &mut b);
        }
        #[cfg(not(core_m0))]
        if n == 256 {
            track_q15::<256>(&nu, &mut b);
        }
    }
    exit(0)
}
