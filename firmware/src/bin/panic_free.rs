//! Panic-free link check: calls every public per-symbol entry point of the core for every
//! supported size, with inputs the optimiser cannot see through (`black_box`): the FFTs, the
//! transmitters, the front, the demapper, the Q15 receiver, and the synchronisation stages
//! (`acquire_q15`, `nco`, `gain_dc`, `cp_sync_q15`, `sco_q15`, `sync_q15`, `frame_q15`). The panic
//! handler calls a function that is declared but defined nowhere, so if any panic path
//! survives optimisation the link fails naming `flatbin_panic_path_reachable`.
//!
//! Built (not run) by `cargo xtask mcu` for both cores.

#![no_std]
#![no_main]

use core::hint::black_box;
use core::ptr::addr_of_mut;

use cortex_m_rt::entry;
use flatbin::demap::{demap_symbols, hard_decision, llr_max_log, llr_to_i8};
use flatbin::fft::{MicroFft, OfdmFft};
use flatbin::front::Front;
use flatbin::transmit::Transmitter;
use flatbin::{Cf32, Modulation, Numerology, NumerologyParams};
use flatbin_firmware::{exit, prefix};

#[cfg(feature = "q15")]
use flatbin::estimate::{TimeFilter, MAX_PATTERN_PERIOD};
#[cfg(feature = "q15")]
use flatbin::fixed_math::Scaled;
#[cfg(feature = "q15")]
use flatbin::receiver_q15::{DesignQ15, DigitalGain, ReceiverQ15};
#[cfg(feature = "q15")]
use flatbin::{fft_q15::Q15Fft, fixed::Cq15, transmit_q15::TransmitterQ15};

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

/// Largest size on this core: 4096 on the M4F (256 KiB RAM), 256 on the M0 (16 KiB RAM).
#[cfg(not(core_m0))]
const MAX_N: usize = 4096;
#[cfg(core_m0)]
const MAX_N: usize = 256;
/// Room for the longest symbol: N + a cyclic prefix of up to N/4.
const MAX_SYMBOL: usize = MAX_N + MAX_N / 4;
/// Bits of one symbol at 256-QAM with every bin used, one per byte.
const MAX_BITS: usize = MAX_N * 8;

static mut SAMPLES: [Cf32; MAX_SYMBOL] = [Cf32::new(0.0, 0.0); MAX_SYMBOL];
static mut BINS: [Cf32; MAX_N] = [Cf32::new(0.0, 0.0); MAX_N];
static mut BITS: [u8; MAX_BITS] = [0; MAX_BITS];
static mut LLRS: [f32; 64] = [0.0; 64];
static mut LLRS_I8: [i8; 64] = [0; 64];
#[cfg(feature = "q15")]
static mut BUF_Q15: [Cq15; MAX_SYMBOL] = [Cq15 { re: 0, im: 0 }; MAX_SYMBOL];
#[cfg(feature = "q15")]
static mut EQUALIZED_Q15: [Cq15; MAX_N] = [Cq15 { re: 0, im: 0 }; MAX_N];
#[cfg(feature = "q15")]
static mut SINR_Q15: [Scaled; MAX_N] = [Scaled { mant: 0, exp: 0 }; MAX_N];
#[cfg(feature = "q15")]
static mut LLRS_Q15: [i8; MAX_BITS] = [0; MAX_BITS];

struct Buffers {
    samples: &'static mut [Cf32; MAX_SYMBOL],
    bins: &'static mut [Cf32; MAX_N],
    bits: &'static mut [u8; MAX_BITS],
    llrs: &'static mut [f32; 64],
    llrs_i8: &'static mut [i8; 64],
    #[cfg(feature = "q15")]
    q15: &'static mut [Cq15; MAX_SYMBOL],
    #[cfg(feature = "q15")]
    equalized_q15: &'static mut [Cq15; MAX_N],
    #[cfg(feature = "q15")]
    sinr_q15: &'static mut [Scaled; MAX_N],
    #[cfg(feature = "q15")]
    llrs_q15: &'static mut [i8; MAX_BITS],
}

fn params(n: usize) -> NumerologyParams {
    black_box(NumerologyParams {
        fft_len: n,
        cp_len: n / 8,
        ..NumerologyParams::default()
    })
}

/// Every entry point at size N (`S = N + N/8`, the symbol length of `params(N)`; `R = 8N`,
/// the frame receiver's ring). Results go to `black_box` so nothing is dropped as dead.
#[inline(never)]
fn at_size<const N: usize, const S: usize, const R: usize>(b: &mut Buffers) {
    let Ok(nu) = Numerology::new(params(N)) else {
        black_box(N);
        return;
    };
    let symbol = black_box(0u32);
    let modulation = black_box(Modulation::Qam16);
    let len = black_box(nu.symbol_len());
    let bits_len = black_box(nu.data_len(symbol) * modulation.bits_per_symbol());

    if let Ok(mut tx) = Transmitter::new(nu, MicroFft::<N>::new()) {
        let bits = b.bits.get(..bits_len).unwrap_or_default();
        let out = b.samples.get_mut(..len).unwrap_or_default();
        sink(tx.modulate(modulation, black_box(bits), symbol, black_box(out)));
        if let Some(grid) = prefix::<Cf32, N>(&mut b.bins[..]) {
            let bits = b.bits.get(..bits_len).unwrap_or_default();
            sink(tx.map_grid(modulation, black_box(bits), symbol, black_box(grid)));
        }
    }
    if let (Ok(mut front), Some(bins)) = (
        Front::new(&nu, MicroFft::<N>::new()),
        prefix::<Cf32, N>(&mut b.bins[..]),
    ) {
        let samples = b.samples.get(..len).unwrap_or_default();
        sink(front.demodulate(black_box(samples), black_box(bins)));
    }
    if let Some(bins) = prefix::<Cf32, N>(&mut b.bins[..]) {
        sink(MicroFft::<N>::new().forward(black_box(&mut *bins)));
        sink(MicroFft::<N>::new().inverse(black_box(bins)));
    }
    #[cfg(feature = "q15")]
    if let Some(x) = prefix::<Cq15, N>(&mut b.q15[..]) {
        sink(Q15Fft::<N>::new().forward(black_box(&mut *x)));
        sink(Q15Fft::<N>::new().inverse(black_box(x)));
    }
    #[cfg(feature = "q15")]
    if let Ok(mut tx) = TransmitterQ15::<N>::new(nu) {
        let bits_len = black_box(tx.bits_per_ofdm_symbol(modulation, symbol));
        let bits = b.bits.get(..bits_len).unwrap_or_default();
        let out = b.q15.get_mut(..len).unwrap_or_default();
        sink(tx.modulate(modulation, black_box(bits), symbol, black_box(out)));
    }
    #[cfg(feature = "q15")]
    receiver_q15::<N>(&nu, b);
    // The M0's 256 KiB of flash holds the synchronisation stages at the sizes it runs them at.
    #[cfg(feature = "q15")]
    if !cfg!(core_m0) || N == 64 || N == 256 {
        sync_q15::<N, S, R>(&nu, b);
    }
    // The tracking stages are in track_panic_free.rs (they do not fit the M0's flash here).
}

/// A design the optimiser cannot see into (any values: the receiver must not panic for any).
#[cfg(feature = "q15")]
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

/// The Q15 receiver's per-symbol entry points at size N (K = M = 4), and the conversions in
/// front of it. Never run: the receiver lives on the stack here.
#[cfg(feature = "q15")]
#[inline(never)]
fn receiver_q15<const N: usize>(nu: &Numerology, b: &mut Buffers) {
    let len = black_box(nu.symbol_len());
    let gain = black_box(DigitalGain {
        mant: black_box(23_170),
        shift: black_box(3),
    });
    sink(gain.apply(black_box(&b.q15[..]), black_box(&mut b.equalized_q15[..])));
    // f32 samples to Q15: float, so on the M4F only.
    #[cfg(not(core_m0))]
    sink(flatbin::receiver_q15::samples_to_q15(
        black_box(b.samples.get(..len).unwrap_or_default()),
        black_box(&mut b.q15[..]),
    ));
    let Ok(mut rx) =
        ReceiverQ15::<Q15Fft<N>, N, 4, 4>::new(nu, Q15Fft::new(), opaque_design::<N>())
    else {
        return;
    };
    let rx = black_box(&mut rx);
    rx.set_gain(gain);
    sink(rx.receive(
        black_box(b.q15.get(..len).unwrap_or_default()),
        black_box(3u32),
        black_box(Modulation::Qam16),
        black_box(&mut b.equalized_q15[..]),
        black_box(&mut b.sinr_q15[..]),
        black_box(&mut b.llrs_q15[..]),
    ));
    rx.reset();
}

/// The synchronisation stages' entry points at size N: the integer ones (`AcquirerQ15`,
/// `NcoQ15`, the Q15 gain/DC functions, `CpTrackerQ15`, `ScoEstimatorQ15`, `sync_q15`,
/// `FrameReceiverQ15`) and the configuration-time floating-point helpers of the same modules.
/// Never run: the stages live on the stack here.
#[cfg(feature = "q15")]
#[inline(never)]
fn sync_q15<const N: usize, const S: usize, const R: usize>(nu: &Numerology, b: &mut Buffers) {
    use flatbin::acquire_q15::AcquirerQ15;
    use flatbin::cp_sync_q15::CpTrackerQ15;
    use flatbin::frame_q15::{FrameConfigQ15, FrameReceiverQ15};
    use flatbin::gain_dc::{
        estimate_dc_cfo_q15, estimate_dc_q15, gain_for_backoff_q15, remove_dc_q15,
        target_amplitude_q30, DcSumsQ15, PowerQ15,
    };
    use flatbin::nco::{cos_sin_q15, increment_for_cfo, increment_for_cfo_q16, NcoQ15};
    use flatbin::sco_q15::ScoEstimatorQ15;
    use flatbin::sync_q15::{first_path_offset_q15, increment_for_cfo_q31, total_cfo_q15};

    let len = black_box(nu.symbol_len());
    if let Ok(mut acq) = AcquirerQ15::<N>::new(nu, black_box(9411)) {
        let acq = black_box(&mut acq);
        sink(acq.push(black_box(b.q15.get(..len).unwrap_or_default())));
        sink(acq.position());
    }
    let mut nco = NcoQ15::new();
    let nco = black_box(&mut nco);
    nco.set_increment(increment_for_cfo_q16(black_box(144_179), N));
    nco.set_phase(black_box(7));
    nco.advance(black_box(100));
    sink(nco.derotate(black_box(&mut b.q15[..])));
    sink((nco.phase(), nco.increment()));
    nco.reset();
    nco.set_cfo(black_box(0.3), N);
    sink(NcoQ15::with_cfo(black_box(-1.7), N));
    sink(increment_for_cfo(black_box(2.2), N));
    sink(cos_sin_q15(black_box(0x1234_5678)));

    let mut sums = DcSumsQ15::new();
    sums.add(black_box(&b.q15[..]));
    let dc = black_box(sums.mean());
    sink(estimate_dc_q15(black_box(&b.q15[..])));
    sink(estimate_dc_cfo_q15(
        black_box(b.q15.get(..len).unwrap_or_default()),
        black_box(0x0100_0000),
    ));
    sink(remove_dc_q15(black_box(&mut b.q15[..]), dc));
    let mut power = PowerQ15::new();
    power.add(black_box(&b.q15[..]), dc);
    let target = target_amplitude_q30(black_box(-12.0));
    sink(gain_for_backoff_q15(black_box(power), black_box(target)));

    if let Ok(mut cp) = CpTrackerQ15::<N, S>::new(nu, black_box(64_887)) {
        let cp = black_box(&mut cp);
        cp.push(black_box(&b.q15[..]));
        sink(cp.estimate());
        cp.clear();
    }
    let mut fft = Q15Fft::<N>::new();
    if let Ok(mut sco) = ScoEstimatorQ15::<N>::new(nu) {
        let sco = black_box(&mut sco);
        if let Some(bins) = prefix::<Cq15, N>(&mut b.equalized_q15[..]) {
            sink(sco.update(black_box(bins), black_box(1)));
        }
        sink(sco.estimate_q32());
        sco.reset();
    }
    sink(increment_for_cfo_q31(black_box(-5_000_000), N));
    if let (Some(a), Some(w)) = (
        prefix::<Cq15, N>(&mut b.q15[..]),
        prefix::<Cq15, N>(&mut b.equalized_q15[..]),
    ) {
        let (a, w) = (black_box(&*a), black_box(&*w));
        sink(total_cfo_q15(
            nu,
            &mut fft,
            a,
            w,
            black_box(600_000_000),
            black_box(4),
        ));
        sink(first_path_offset_q15(nu, &mut fft, w, black_box(6554)));
    }

    let config = black_box(FrameConfigQ15 {
        threshold_q16: 9411,
        target_amplitude_q30: 269_711_752,
        frame_symbols: 10,
        modulation: Modulation::Qpsk,
        max_integer_cfo: 4,
        first_path_q16: 6554,
        dc_block_shift: 6,
        sco_q32: 0,
        track_sco: true,
    });
    if let Ok(mut fr) = FrameReceiverQ15::<N, 4, 4, R>::new(nu, opaque_design::<N>(), config) {
        let fr = black_box(&mut fr);
        sink(fr.push(black_box(&b.q15[..]), |ev| sink(ev.llrs)));
        sink(fr.sco_q32());
    }
}

/// The demapper entry points (size-independent).
#[inline(never)]
fn demapper(b: &mut Buffers) {
    for modulation in Modulation::ALL {
        let modulation = black_box(modulation);
        let y = black_box(Cf32::new(0.3, -0.7));
        sink(hard_decision(modulation, y, black_box(&mut b.bits[..])));
        sink(llr_max_log(
            modulation,
            y,
            black_box(10.0),
            black_box(&mut b.llrs[..]),
        ));
        let count = black_box(4usize);
        let ys = black_box(&b.bins[..]).get(..count).unwrap_or_default();
        let weights = black_box([1.0f32; 4]);
        let k = count * modulation.bits_per_symbol();
        sink(demap_symbols(
            modulation,
            ys,
            &weights,
            black_box(&mut b.llrs[..]).get_mut(..k).unwrap_or_default(),
        ));
        sink(llr_to_i8(
            black_box(&b.llrs[..]),
            black_box(flatbin::demap::I8_LSB_PER_LLR),
            black_box(&mut b.llrs_i8[..]),
        ));
    }
}

#[entry]
fn main() -> ! {
    // SAFETY: the only references to these buffers, taken once here.
    let mut b = unsafe {
        Buffers {
            samples: &mut *addr_of_mut!(SAMPLES),
            bins: &mut *addr_of_mut!(BINS),
            bits: &mut *addr_of_mut!(BITS),
            llrs: &mut *addr_of_mut!(LLRS),
            llrs_i8: &mut *addr_of_mut!(LLRS_I8),
            #[cfg(feature = "q15")]
            q15: &mut *addr_of_mut!(BUF_Q15),
            #[cfg(feature = "q15")]
            equalized_q15: &mut *addr_of_mut!(EQUALIZED_Q15),
            #[cfg(feature = "q15")]
            sinr_q15: &mut *addr_of_mut!(SINR_Q15),
            #[cfg(feature = "q15")]
            llrs_q15: &mut *addr_of_mut!(LLRS_Q15),
        }
    };
    at_size::<16, 18, 128>(&mut b);
    at_size::<32, 36, 256>(&mut b);
    at_size::<64, 72, 512>(&mut b);
    at_size::<128, 144, 1024>(&mut b);
    at_size::<256, 288, 2048>(&mut b);
    #[cfg(not(core_m0))]
    {
        at_size::<512, 576, 4096>(&mut b);
        at_size::<1024, 1152, 8192>(&mut b);
        at_size::<2048, 2304, 16384>(&mut b);
        at_size::<4096, 4608, 32768>(&mut b);
    }
    demapper(&mut b);
    exit(0)
}
