//! End to end: a capture with noise before the frame, a fractional timing offset, CFO 0.3
//! subcarrier, SCO 20 ppm, an exponential channel of RMS spread 0.5 samples, fed to the
//! acquisition in random chunks of 1 … N samples; the detected frame is derotated, gained and
//! decoded by the Q15 receiver. Its BER must be within 1 dB of the ideal-sync curve: at Es/N0
//! S it may not exceed the ideal-sync BER at S − 1 dB (beyond a 4σ binomial margin). Es/N0 per
//! data subcarrier (DESIGN.md).

use flatbin::acquire::{first_path_offset, total_cfo, Acquirer};
use flatbin::estimate::{EstimatorConfig, FreqInterpolation, TimeFilter};
use flatbin::fft::{MicroFft, OfdmFft};
use flatbin::fft_q15::Q15Fft;
use flatbin::fixed::Cq15;
use flatbin::fixed_math::Scaled;
use flatbin::numerology::NumerologyParams;
use flatbin::preamble::write_preamble;
use flatbin::receiver_q15::{
    samples_to_q15, DesignQ15, DigitalGain, ReceiverQ15, ReceiverQ15Config,
};
use flatbin::transmit::Transmitter;
use flatbin::{Cf32, Modulation, Numerology};
use flatbin_harness::channel::profile::{DelayProfile, Quantisation};
use flatbin_harness::channel::sos::FadingParams;
use flatbin_harness::channel::tdl::{Tdl, Variation};
use flatbin_harness::impair::{fractional_delay, frequency_offset, resample};
use flatbin_harness::noise::add_awgn;
use flatbin_harness::rng::stream_rng;
use rand::RngExt;

const N: usize = 64;
const SYMBOLS: usize = 20;

/// Bit errors and bits over `frames` frames at `es_n0_db`; `impaired` switches the capture
/// impairments and the acquisition on (otherwise the receiver is given the true timing and no
/// offsets: ideal sync).
fn run(es_n0_db: f64, frames: usize, impaired: bool, seed: u64) -> (Vec<f64>, usize) {
    let nu = Numerology::new(NumerologyParams::default()).unwrap();
    let ns = nu.symbol_len();
    let cp = nu.cp_len();
    let fs = f64::from(nu.sample_rate_hz());
    let n0 = 10f64.powf(-es_n0_db / 10.0);
    let m = Modulation::Qpsk;
    let est = EstimatorConfig {
        freq: FreqInterpolation::Lmmse,
        time: TimeFilter::Latest,
        noise_var: n0 as f32,
        ..EstimatorConfig::default()
    };
    let cfg = ReceiverQ15Config {
        estimator: est,
        signal_dbfs: -12.0,
        ..ReceiverQ15Config::default()
    };
    let design =
        DesignQ15::<N, 4, 4>::new(&nu, &cfg, <Q15Fft<N> as OfdmFft<N>>::RESIDUAL_SCALE).unwrap();
    let mut tx = Transmitter::new(nu, MicroFft::<N>::new()).unwrap();
    let taps = DelayProfile::exponential(0.5 / fs, fs)
        .unwrap()
        .to_sample_taps(fs, Quantisation::Nearest);
    let params = FadingParams::rayleigh(5.0, fs, N);
    let threshold = Acquirer::<N>::threshold_for(&nu, 1e-5);
    let mut rng = stream_rng(seed, u64::from(impaired));
    let (mut frame_bers, mut missed) = (Vec::with_capacity(frames), 0usize);
    let k = m.bits_per_symbol();
    let d = nu.max_data_len();
    for _ in 0..frames {
        // Transmit: preamble + data.
        let mut x = vec![Cf32::default(); 2 * ns];
        write_preamble(&nu, &mut MicroFft::<N>::new(), &mut x).unwrap();
        let mut sent = Vec::new();
        for sym in 0..SYMBOLS as u32 {
            let b: Vec<u8> = (0..tx.bits_per_ofdm_symbol(m, sym))
                .map(|_| rng.random::<u8>() & 1)
                .collect();
            let mut s = vec![Cf32::default(); ns];
            tx.modulate(m, &b, sym, &mut s).unwrap();
            x.extend_from_slice(&s);
            sent.push(b);
        }
        let lead = if impaired {
            rng.random_range(100..300)
        } else {
            100
        };
        let mut stream = vec![Cf32::default(); lead];
        stream.extend_from_slice(&x);
        stream.extend(std::iter::repeat_n(Cf32::default(), 2 * ns));
        let mut line = Tdl::new(&taps, &params, Variation::Continuous, &mut rng);
        let mut r = vec![Cf32::default(); stream.len()];
        line.process(&stream, &mut r);
        let delay = if impaired { 0.37 } else { 0.0 };
        if impaired {
            r = fractional_delay(&r, delay);
            frequency_offset(
                &mut r,
                0.3 / N as f64,
                rng.random_range(0.0..std::f64::consts::TAU),
            );
            r = resample(&r, 20.0);
        }
        add_awgn(&mut rng, &mut r, n0);
        // Input level about −20 dBFS (a front end's AGC would place it; the digital gain trims).
        let level = 0.1f32;
        for v in r.iter_mut() {
            *v *= level;
        }
        // Acquisition (or ideal timing: the last sample of symbol A's CP, no offsets).
        let (win_a, eps) = if impaired {
            let mut acq = Acquirer::<N>::new(&nu, threshold).unwrap();
            let mut at = 0;
            let mut det = None;
            while at < r.len() && det.is_none() {
                let len = rng.random_range(1..=N).min(r.len() - at);
                det = acq.push(&r[at..at + len]).unwrap();
                at += len;
            }
            let Some(det) = det else {
                missed += 1;
                continue;
            };
            let w = det.window_start as usize;
            // A detection that leaves no room for the frame is a false alarm after a miss.
            if w + (SYMBOLS + 2) * ns + N / 4 > r.len() || w < cp + N / 4 {
                missed += 1;
                continue;
            }
            let a: [Cf32; N] = r[w..w + N].try_into().unwrap();
            let b: [Cf32; N] = r[w + ns..w + ns + N].try_into().unwrap();
            (
                w,
                f64::from(total_cfo(
                    &nu,
                    &mut MicroFft::<N>::new(),
                    &a,
                    &b,
                    det.cfo_fraction,
                    4,
                )),
            )
        } else {
            (lead + cp, 0.0)
        };
        // Derotate from symbol A's window on (phase continuous over the frame).
        let mut frame = r[win_a - cp..].to_vec();
        frequency_offset(&mut frame, -eps / N as f64, 0.0);
        // Fine timing on symbol B: move the windows so the first path starts one sample in.
        let frame = if impaired {
            let b: [Cf32; N] = frame[cp + ns..cp + ns + N].try_into().unwrap();
            let shift = first_path_offset(&nu, &mut MicroFft::<N>::new(), &b, 0.1);
            let start = (win_a as i64 + i64::from(shift)) as usize - cp;
            let mut f = r[start..].to_vec();
            frequency_offset(&mut f, -eps / N as f64, 0.0);
            f
        } else {
            frame
        };
        // Digital gain from symbol B's power: FFT input at −12 dBFS.
        let pb: f64 = frame[cp + ns..cp + ns + N]
            .iter()
            .map(|v| f64::from(v.norm_sqr()))
            .sum::<f64>()
            / N as f64;
        let gain_db = -12.0 - 10.0 * pb.log10();
        let mut q = vec![Cq15::ZERO; frame.len()];
        samples_to_q15(&frame, &mut q).unwrap();
        let mut rx = Box::new(
            ReceiverQ15::<Q15Fft<N>, N, 4, 4>::new(&nu, Q15Fft::new(), design.clone()).unwrap(),
        );
        rx.set_gain(DigitalGain::from_db(gain_db as f32));
        let (mut xq, mut sq, mut lq) = (
            vec![Cq15::ZERO; d],
            vec![Scaled::default(); d],
            vec![0i8; d * k],
        );
        let (mut errors, mut bits_total) = (0u64, 0u64);
        for (sym, b) in sent.iter().enumerate() {
            let start = (2 + sym) * ns; // this symbol's CP start in `q` (which begins at A's CP)
            rx.receive(
                &q[start..start + ns],
                sym as u32,
                m,
                &mut xq,
                &mut sq,
                &mut lq,
            )
            .unwrap();
            for (l, bit) in lq.iter().zip(b) {
                errors += u64::from(u8::from(*l < 0) != *bit);
            }
            bits_total += b.len() as u64;
        }
        frame_bers.push(errors as f64 / bits_total as f64);
    }
    (frame_bers, missed)
}

fn mean_var(v: &[f64]) -> (f64, f64) {
    let n = v.len() as f64;
    let m = v.iter().sum::<f64>() / n;
    (
        m,
        v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (n - 1.0),
    )
}

#[test]
fn synchronised_q15_receiver_is_within_1_db_of_ideal_sync() {
    // BER over the acquired frames (acquisition itself is checked in tests/acquisition.rs; here
    // at most 1 % of frames may be missed). The frames are independent channel draws, so the
    // tolerance is 4σ of the difference of two means of per-frame BERs (common practice).
    let s = 20.0;
    let frames = 2000;
    let (sync, missed) = run(s, frames, true, 121);
    let (ideal, _) = run(s - 1.0, frames, false, 122);
    let (ideal_same, _) = run(s, frames, false, 123);
    let (b_sync, v_sync) = mean_var(&sync);
    let (b_ideal, v_ideal) = mean_var(&ideal);
    let margin = 4.0 * (v_sync / sync.len() as f64 + v_ideal / ideal.len() as f64).sqrt();
    println!(
        "QPSK: synchronised at {s} dB BER {b_sync:.3e} over {} acquired frames ({missed} missed); \
         ideal sync at {s} dB {:.3e}, at {} dB {b_ideal:.3e} (margin {margin:.1e})",
        sync.len(),
        mean_var(&ideal_same).0,
        s - 1.0
    );
    assert!(missed * 100 <= frames);
    assert!(b_sync <= b_ideal + margin);
}

/// The same captures through the core's streaming `FrameReceiver` (acquisition, integer CFO,
/// fine timing, NCO, gain, Q15 receiver): per-frame BERs of the acquired frames.
fn run_frame_receiver(es_n0_db: f64, frames: usize, seed: u64) -> (Vec<f64>, usize) {
    use flatbin::frame::{FrameConfig, FrameReceiver};
    let nu = Numerology::new(NumerologyParams::default()).unwrap();
    let ns = nu.symbol_len();
    let fs = f64::from(nu.sample_rate_hz());
    let n0 = 10f64.powf(-es_n0_db / 10.0);
    let m = Modulation::Qpsk;
    let est = EstimatorConfig {
        freq: FreqInterpolation::Lmmse,
        time: TimeFilter::Latest,
        noise_var: n0 as f32,
        ..EstimatorConfig::default()
    };
    let cfg = ReceiverQ15Config {
        estimator: est,
        signal_dbfs: -12.0,
        ..ReceiverQ15Config::default()
    };
    let design =
        DesignQ15::<N, 4, 4>::new(&nu, &cfg, <Q15Fft<N> as OfdmFft<N>>::RESIDUAL_SCALE).unwrap();
    let fc = FrameConfig {
        threshold: Acquirer::<N>::threshold_for(&nu, 1e-5),
        target_dbfs: -12.0,
        frame_symbols: SYMBOLS as u32,
        modulation: m,
        max_integer_cfo: 4,
        first_path_fraction: 0.1,
    };
    let mut tx = Transmitter::new(nu, MicroFft::<N>::new()).unwrap();
    let taps = DelayProfile::exponential(0.5 / fs, fs)
        .unwrap()
        .to_sample_taps(fs, Quantisation::Nearest);
    let params = FadingParams::rayleigh(5.0, fs, N);
    let mut rng = stream_rng(seed, 7);
    let (mut frame_bers, mut missed) = (Vec::new(), 0usize);
    for _ in 0..frames {
        let mut x = vec![Cf32::default(); 2 * ns];
        tx.preamble(&mut x).unwrap();
        let mut sent = Vec::new();
        for sym in 0..SYMBOLS as u32 {
            let b: Vec<u8> = (0..tx.bits_per_ofdm_symbol(m, sym))
                .map(|_| rng.random::<u8>() & 1)
                .collect();
            let mut s = vec![Cf32::default(); ns];
            tx.modulate(m, &b, sym, &mut s).unwrap();
            x.extend_from_slice(&s);
            sent.push(b);
        }
        let lead = rng.random_range(100..300);
        let mut stream = vec![Cf32::default(); lead];
        stream.extend_from_slice(&x);
        stream.extend(std::iter::repeat_n(Cf32::default(), 2 * ns));
        let mut line = Tdl::new(&taps, &params, Variation::Continuous, &mut rng);
        let mut r = vec![Cf32::default(); stream.len()];
        line.process(&stream, &mut r);
        r = fractional_delay(&r, 0.37);
        frequency_offset(
            &mut r,
            0.3 / N as f64,
            rng.random_range(0.0..std::f64::consts::TAU),
        );
        r = resample(&r, 20.0);
        add_awgn(&mut rng, &mut r, n0);
        for v in r.iter_mut() {
            *v *= 0.1;
        }
        let mut fr = Box::new(FrameReceiver::<N, 4, 4, 512>::new(&nu, design.clone(), fc).unwrap());
        let (mut errors, mut bits, mut got) = (0u64, 0u64, 0usize);
        let mut at = 0;
        while at < r.len() {
            let len = rng.random_range(1..=N).min(r.len() - at);
            fr.push(&r[at..at + len], |ev| {
                if let Some(b) = sent.get(ev.symbol as usize) {
                    for (l, bit) in ev.llrs.iter().zip(b) {
                        errors += u64::from(u8::from(*l < 0) != *bit);
                    }
                    bits += b.len() as u64;
                    got += 1;
                }
            })
            .unwrap();
            at += len;
        }
        if got == SYMBOLS {
            frame_bers.push(errors as f64 / bits as f64);
        } else {
            missed += 1;
        }
    }
    (frame_bers, missed)
}

#[test]
fn streaming_frame_receiver_is_within_1_db_of_ideal_sync() {
    // As above, through the core's streaming FrameReceiver.
    let s = 20.0;
    let frames = 2000;
    let (sync, missed) = run_frame_receiver(s, frames, 131);
    let (ideal, _) = run(s - 1.0, frames, false, 122);
    let (b_sync, v_sync) = mean_var(&sync);
    let (b_ideal, v_ideal) = mean_var(&ideal);
    let margin = 4.0 * (v_sync / sync.len() as f64 + v_ideal / ideal.len() as f64).sqrt();
    println!(
        "FrameReceiver, QPSK at {s} dB: BER {b_sync:.3e} over {} frames ({missed} missed or incomplete); ideal sync at {} dB {b_ideal:.3e} (margin {margin:.1e})",
        sync.len(),
        s - 1.0
    );
    assert!(missed * 100 <= frames);
    assert!(b_sync <= b_ideal + margin);
}

/// The same captures as Q15 samples (about −20 dBFS) through the integer-only
/// `FrameReceiverQ15`; with `dc`, a DC offset of 0.01 − 0.005j full scale (−37 dBFS, about
/// the noise level) is added at the ADC and the receiver's DC blocker is on.
fn run_frame_receiver_q15(es_n0_db: f64, frames: usize, seed: u64, dc: bool) -> (Vec<f64>, usize) {
    use flatbin::acquire_q15::AcquirerQ15;
    use flatbin::frame_q15::{FrameConfigQ15, FrameReceiverQ15};
    use flatbin::gain_dc::target_amplitude_q30;
    let nu = Numerology::new(NumerologyParams::default()).unwrap();
    let ns = nu.symbol_len();
    let fs = f64::from(nu.sample_rate_hz());
    let n0 = 10f64.powf(-es_n0_db / 10.0);
    let m = Modulation::Qpsk;
    let est = EstimatorConfig {
        freq: FreqInterpolation::Lmmse,
        time: TimeFilter::Latest,
        noise_var: n0 as f32,
        ..EstimatorConfig::default()
    };
    let cfg = ReceiverQ15Config {
        estimator: est,
        signal_dbfs: -12.0,
        ..ReceiverQ15Config::default()
    };
    let design =
        DesignQ15::<N, 4, 4>::new(&nu, &cfg, <Q15Fft<N> as OfdmFft<N>>::RESIDUAL_SCALE).unwrap();
    let fc = FrameConfigQ15 {
        threshold_q16: (Acquirer::<N>::threshold_for(&nu, 1e-5) * 65536.0).round() as u32,
        target_amplitude_q30: target_amplitude_q30(-12.0),
        frame_symbols: SYMBOLS as u32,
        modulation: m,
        max_integer_cfo: 4,
        first_path_q16: 6554,
        dc_block_shift: if dc { 6 } else { 0 },
        sco_q32: 0,
        track_sco: false,
    };
    let _ = AcquirerQ15::<N>::new(&nu, fc.threshold_q16).unwrap();
    let mut tx = Transmitter::new(nu, MicroFft::<N>::new()).unwrap();
    let taps = DelayProfile::exponential(0.5 / fs, fs)
        .unwrap()
        .to_sample_taps(fs, Quantisation::Nearest);
    let params = FadingParams::rayleigh(5.0, fs, N);
    let mut rng = stream_rng(seed, 8);
    let (mut frame_bers, mut missed) = (Vec::new(), 0usize);
    for _ in 0..frames {
        let mut x = vec![Cf32::default(); 2 * ns];
        tx.preamble(&mut x).unwrap();
        let mut sent = Vec::new();
        for sym in 0..SYMBOLS as u32 {
            let b: Vec<u8> = (0..tx.bits_per_ofdm_symbol(m, sym))
                .map(|_| rng.random::<u8>() & 1)
                .collect();
            let mut s = vec![Cf32::default(); ns];
            tx.modulate(m, &b, sym, &mut s).unwrap();
            x.extend_from_slice(&s);
            sent.push(b);
        }
        let lead = rng.random_range(100..300);
        let mut stream = vec![Cf32::default(); lead];
        stream.extend_from_slice(&x);
        stream.extend(std::iter::repeat_n(Cf32::default(), 2 * ns));
        let mut line = Tdl::new(&taps, &params, Variation::Continuous, &mut rng);
        let mut r = vec![Cf32::default(); stream.len()];
        line.process(&stream, &mut r);
        r = fractional_delay(&r, 0.37);
        frequency_offset(
            &mut r,
            0.3 / N as f64,
            rng.random_range(0.0..std::f64::consts::TAU),
        );
        r = resample(&r, 20.0);
        add_awgn(&mut rng, &mut r, n0);
        let q: Vec<Cq15> = r
            .iter()
            .map(|v| {
                Cq15::from_cf32(
                    v * 0.1
                        + if dc {
                            Cf32::new(0.01, -0.005)
                        } else {
                            Cf32::default()
                        },
                )
            })
            .collect();
        let mut fr =
            Box::new(FrameReceiverQ15::<N, 4, 4, 512>::new(&nu, design.clone(), fc).unwrap());
        let (mut errors, mut bits, mut got) = (0u64, 0u64, 0usize);
        let mut at = 0;
        while at < q.len() {
            let len = rng.random_range(1..=N).min(q.len() - at);
            fr.push(&q[at..at + len], |ev| {
                if let Some(b) = sent.get(ev.symbol as usize) {
                    for (l, bit) in ev.llrs.iter().zip(b) {
                        errors += u64::from(u8::from(*l < 0) != *bit);
                    }
                    bits += b.len() as u64;
                    got += 1;
                }
            })
            .unwrap();
            at += len;
        }
        if got == SYMBOLS {
            frame_bers.push(errors as f64 / bits as f64);
        } else {
            missed += 1;
        }
    }
    (frame_bers, missed)
}

#[test]
fn integer_frame_receiver_is_within_1_db_of_ideal_sync() {
    // As above, integers only from the Q15 samples on.
    let s = 20.0;
    let frames = 2000;
    let (sync, missed) = run_frame_receiver_q15(s, frames, 141, false);
    let (ideal, _) = run(s - 1.0, frames, false, 122);
    let (b_sync, v_sync) = mean_var(&sync);
    let (b_ideal, v_ideal) = mean_var(&ideal);
    let margin = 4.0 * (v_sync / sync.len() as f64 + v_ideal / ideal.len() as f64).sqrt();
    println!(
        "FrameReceiverQ15, QPSK at {s} dB: BER {b_sync:.3e} over {} frames ({missed} missed or incomplete); ideal sync at {} dB {b_ideal:.3e} (margin {margin:.1e})",
        sync.len(),
        s - 1.0
    );
    assert!(missed * 100 <= frames);
    assert!(b_sync <= b_ideal + margin);
}

#[test]
fn integer_frame_receiver_with_a_dc_offset_and_the_dc_blocker() {
    // A DC offset at the noise level raises the Schmidl & Cox metric before the frame; with the
    // DC blocker on, the frame receiver is again within 1 dB of ideal sync.
    let s = 20.0;
    let frames = 2000;
    let (sync, missed) = run_frame_receiver_q15(s, frames, 151, true);
    let (ideal, _) = run(s - 1.0, frames, false, 122);
    let (b_sync, v_sync) = mean_var(&sync);
    let (b_ideal, v_ideal) = mean_var(&ideal);
    let margin = 4.0 * (v_sync / sync.len() as f64 + v_ideal / ideal.len() as f64).sqrt();
    println!(
        "FrameReceiverQ15 with DC offset and blocker, QPSK at {s} dB: BER {b_sync:.3e} over {} frames ({missed} missed); ideal sync at {} dB {b_ideal:.3e} (margin {margin:.1e})",
        sync.len(),
        s - 1.0
    );
    assert!(missed * 100 <= frames);
    assert!(b_sync <= b_ideal + margin);
}
