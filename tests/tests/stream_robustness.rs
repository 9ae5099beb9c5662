//! The streaming frame receivers on hostile streams: noise only, all zeros, a full-scale
//! clipped square wave, a frame driven 20 dB past full scale, and (f32 path) a NaN sample.
//! Required of both (DESIGN.md, bad input): no panic, every emitted symbol well formed (its
//! LLR count matches its data bins, LLRs within ±127 — the i8 convention, never −128 — and
//! a finite CFO), a clipped frame reported as clipped, and a NaN rejected with its index
//! while the receiver stays usable. Properties of the implementation; no outside source.

use flatbin::acquire::Acquirer;
use flatbin::estimate::EstimatorConfig;
use flatbin::fft::{MicroFft, OfdmFft};
use flatbin::fft_q15::Q15Fft;
use flatbin::fixed::Cq15;
use flatbin::frame::{FrameConfig, FrameReceiver};
use flatbin::frame_q15::{FrameConfigQ15, FrameReceiverQ15};
use flatbin::gain_dc::target_amplitude_q30;
use flatbin::numerology::NumerologyParams;
use flatbin::receiver_q15::{DesignQ15, ReceiverQ15Config};
use flatbin::transmit::Transmitter;
use flatbin::{Cf32, Modulation, Numerology, ProcessError};
use flatbin_harness::noise::add_awgn;
use flatbin_harness::rng::stream_rng;
use rand::RngExt;

const N: usize = 64;
const SYMBOLS: u32 = 12;
const M: Modulation = Modulation::Qam16;

fn nu() -> Numerology {
    Numerology::new(NumerologyParams::default()).unwrap()
}

fn design(nu: &Numerology) -> DesignQ15<N, 4, 4> {
    let cfg = ReceiverQ15Config {
        estimator: EstimatorConfig {
            noise_var: 0.01,
            ..EstimatorConfig::default()
        },
        signal_dbfs: -12.0,
        ..ReceiverQ15Config::default()
    };
    DesignQ15::new(nu, &cfg, <Q15Fft<N> as OfdmFft<N>>::RESIDUAL_SCALE).unwrap()
}

fn f32_receiver(nu: &Numerology) -> Box<FrameReceiver<N, 4, 4, 512>> {
    let fc = FrameConfig {
        threshold: Acquirer::<N>::threshold_for(nu, 1e-5),
        target_dbfs: -12.0,
        frame_symbols: SYMBOLS,
        modulation: M,
        max_integer_cfo: 4,
        first_path_fraction: 0.1,
    };
    Box::new(FrameReceiver::new(nu, design(nu), fc).unwrap())
}

fn q15_receiver(nu: &Numerology) -> Box<FrameReceiverQ15<N, 4, 4, 512>> {
    let fc = FrameConfigQ15 {
        threshold_q16: (Acquirer::<N>::threshold_for(nu, 1e-5) * 65536.0).round() as u32,
        target_amplitude_q30: target_amplitude_q30(-12.0),
        frame_symbols: SYMBOLS,
        modulation: M,
        max_integer_cfo: 4,
        first_path_q16: 6554,
        dc_block_shift: 6,
        sco_q32: 0,
        track_sco: true,
    };
    Box::new(FrameReceiverQ15::new(nu, design(nu), fc).unwrap())
}

/// One frame (preamble + SYMBOLS data symbols) at unit scale, after `lead` zeros.
fn frame(nu: &Numerology, lead: usize, seed: u64) -> Vec<Cf32> {
    let ns = nu.symbol_len();
    let mut tx = Transmitter::new(*nu, MicroFft::<N>::new()).unwrap();
    let mut rng = stream_rng(seed, 0);
    let mut x = vec![Cf32::default(); lead + 2 * ns];
    tx.preamble(&mut x[lead..]).unwrap();
    for sym in 0..SYMBOLS {
        let b: Vec<u8> = (0..tx.bits_per_ofdm_symbol(M, sym))
            .map(|_| rng.random::<u8>() & 1)
            .collect();
        let mut s = vec![Cf32::default(); ns];
        tx.modulate(M, &b, sym, &mut s).unwrap();
        x.extend_from_slice(&s);
    }
    x.extend(std::iter::repeat_n(Cf32::default(), 2 * ns));
    x
}

/// What the callbacks saw.
#[derive(Default, Debug)]
struct Seen {
    symbols: usize,
    clipped: usize,
    malformed: usize,
}

fn check_llrs(data_bins: usize, llrs: &[i8]) -> bool {
    llrs.len() == data_bins * M.bits_per_symbol() && llrs.iter().all(|&l| l != i8::MIN)
}

fn run_f32(rx: &mut FrameReceiver<N, 4, 4, 512>, x: &[Cf32], seed: u64) -> Seen {
    let mut seen = Seen::default();
    let mut rng = stream_rng(seed, 1);
    let mut at = 0;
    while at < x.len() {
        let len = rng.random_range(1..=N).min(x.len() - at);
        rx.push(&x[at..at + len], |ev| {
            seen.symbols += 1;
            seen.clipped += ev.clipped;
            if !(check_llrs(ev.equalized.len(), ev.llrs) && ev.cfo.is_finite()) {
                seen.malformed += 1;
            }
        })
        .unwrap();
        at += len;
    }
    seen
}

fn run_q15(rx: &mut FrameReceiverQ15<N, 4, 4, 512>, x: &[Cq15], seed: u64) -> Seen {
    let mut seen = Seen::default();
    let mut rng = stream_rng(seed, 1);
    let mut at = 0;
    while at < x.len() {
        let len = rng.random_range(1..=N).min(x.len() - at);
        rx.push(&x[at..at + len], |ev| {
            seen.symbols += 1;
            seen.clipped += ev.clipped;
            if !check_llrs(ev.equalized.len(), ev.llrs) {
                seen.malformed += 1;
            }
        })
        .unwrap();
        at += len;
    }
    seen
}

fn to_q15(x: &[Cf32]) -> Vec<Cq15> {
    x.iter().map(|v| Cq15::from_cf32(*v)).collect()
}

#[test]
fn silence_noise_and_square_waves_neither_panic_nor_emit_malformed_symbols() {
    let nu = nu();
    let zeros = vec![Cf32::default(); 20_000];
    let mut noise = vec![Cf32::default(); 20_000];
    add_awgn(&mut stream_rng(5, 0), &mut noise, 0.06);
    let square: Vec<Cf32> = (0..20_000)
        .map(|i| {
            Cf32::new(
                if i % 3 == 0 { 1.0 } else { -1.0 },
                if i % 5 < 2 { 1.0 } else { -1.0 },
            )
        })
        .collect();
    for (name, x) in [("zeros", &zeros), ("noise", &noise), ("square", &square)] {
        let s = run_f32(&mut f32_receiver(&nu), x, 1);
        assert_eq!(s.malformed, 0, "f32 {name}: {s:?}");
        let s = run_q15(&mut q15_receiver(&nu), &to_q15(x), 1);
        assert_eq!(s.malformed, 0, "q15 {name}: {s:?}");
        if name == "zeros" {
            // Nothing to detect in silence (the metric's denominator is zero: no decision).
            let s = run_f32(&mut f32_receiver(&nu), x, 2);
            assert_eq!(s.symbols, 0, "f32 zeros");
            assert_eq!(run_q15(&mut q15_receiver(&nu), &to_q15(x), 2).symbols, 0);
        }
    }
    // Integer extremes: every component at i16::MIN or i16::MAX.
    let extremes: Vec<Cq15> = (0..20_000)
        .map(|i| Cq15::new(if i % 2 == 0 { i16::MAX } else { i16::MIN }, i16::MIN))
        .collect();
    assert_eq!(run_q15(&mut q15_receiver(&nu), &extremes, 3).malformed, 0);
}

#[test]
fn a_frame_20_db_past_full_scale_is_decoded_and_reported_clipped() {
    // The frame's RMS is about 0.9 of full scale per component pair at unit scale; ×10 puts
    // it 20 dB past it, so most samples saturate in the conversion to Q15.
    let nu = nu();
    let x: Vec<Cf32> = frame(&nu, 300, 9).iter().map(|v| v * 10.0).collect();
    let s = run_f32(&mut f32_receiver(&nu), &x, 4);
    assert_eq!(s.malformed, 0, "f32 {s:?}");
    assert_eq!(s.symbols, SYMBOLS as usize, "f32 {s:?}");
    assert!(s.clipped > 0, "f32 {s:?}");
    let clipped_q: Vec<Cq15> = x.iter().map(|v| Cq15::from_cf32(*v)).collect();
    let s = run_q15(&mut q15_receiver(&nu), &clipped_q, 4);
    assert_eq!(s.malformed, 0, "q15 {s:?}");
    assert_eq!(s.symbols, SYMBOLS as usize, "q15 {s:?}");
}

#[test]
fn a_nan_sample_is_rejected_with_its_index_and_the_receiver_goes_on() {
    let nu = nu();
    let mut rx = f32_receiver(&nu);
    let mut bad = vec![Cf32::new(0.01, 0.0); 100];
    bad[37] = Cf32::new(0.0, f32::INFINITY);
    assert_eq!(
        rx.push(&bad, |_| {}),
        Err(ProcessError::NonFinite { index: 37 })
    );
    let x: Vec<Cf32> = frame(&nu, 200, 10).iter().map(|v| v * 0.1).collect();
    let s = run_f32(&mut rx, &x, 5);
    assert_eq!(s.symbols, SYMBOLS as usize, "{s:?}");
    assert_eq!(s.malformed, 0);
}
