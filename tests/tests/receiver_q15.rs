//! The Q15 receiver against the f32 receiver on identical inputs: the difference between their
//! equalized symbols, referred to the receiver input (× |Ĥ|²), stays ≥ 12 dB below the thermal
//! noise N0 at the operating SNR for FFT input levels from −40 to −3 dBFS (a difference 12 dB
//! below the noise adds at most 10·log10(1 + 1/16) = 0.26 dB of SNR loss; common practice).

use flatbin::estimate::{EstimatorConfig, FreqInterpolation, TimeFilter};
use flatbin::fft::MicroFft;
use flatbin::fft_q15::Q15Fft;
use flatbin::fixed::Cq15;
use flatbin::fixed_math::Scaled;
use flatbin::numerology::NumerologyParams;
use flatbin::receiver::{Receiver, ReceiverConfig};
use flatbin::receiver_q15::{samples_to_q15, DesignQ15, ReceiverQ15, ReceiverQ15Config};
use flatbin::transmit::Transmitter;
use flatbin::{Cf32, Modulation, Numerology};
use flatbin_harness::channel::profile::{DelayProfile, Quantisation};
use flatbin_harness::channel::sos::FadingParams;
use flatbin_harness::channel::tdl::{Tdl, Variation};
use flatbin_harness::noise::add_awgn;
use flatbin_harness::rng::stream_rng;
use rand::RngExt;

fn numerology(n: usize) -> Numerology {
    numerology_shift(n, 0)
}

fn numerology_shift(n: usize, shift: usize) -> Numerology {
    Numerology::new(NumerologyParams {
        fft_len: n,
        cp_len: n / 8,
        guard_low_bins: n / 16,
        guard_high_bins: n / 16 - 1,
        pilots: flatbin::PilotParams {
            shift_per_symbol: shift,
            ..flatbin::PilotParams::default()
        },
        ..NumerologyParams::default()
    })
    .unwrap()
}

/// Returns the implementation-noise-to-thermal-noise ratio, dB, at FFT input `level_dbfs`.
fn compare<const N: usize>(m: Modulation, es_n0_db: f64, level_dbfs: f64, seed: u64) -> f64 {
    compare_with::<N>(
        m,
        es_n0_db,
        level_dbfs,
        seed,
        FreqInterpolation::Lmmse,
        TimeFilter::Latest,
        0,
    )
}

fn compare_with<const N: usize>(
    m: Modulation,
    es_n0_db: f64,
    level_dbfs: f64,
    seed: u64,
    freq: FreqInterpolation,
    time: TimeFilter,
    shift: usize,
) -> f64 {
    let nu = numerology_shift(N, shift);
    let fs = f64::from(nu.sample_rate_hz());
    let n0 = 10f64.powf(-es_n0_db / 10.0);
    let est = EstimatorConfig {
        freq,
        time,
        noise_var: n0 as f32,
        ..EstimatorConfig::default()
    };
    let cfg_f = ReceiverConfig {
        estimator: est,
        ..ReceiverConfig::default()
    };
    let cfg_q = ReceiverQ15Config {
        estimator: est,
        signal_dbfs: level_dbfs as f32,
        ..ReceiverQ15Config::default()
    };
    let mut rx_f =
        Box::new(Receiver::<MicroFft<N>, N, 4, 4>::new(&nu, MicroFft::new(), cfg_f).unwrap());
    let design = Box::new(
        DesignQ15::<N, 4, 4>::new(
            &nu,
            &cfg_q,
            <Q15Fft<N> as flatbin::fft::OfdmFft<N>>::RESIDUAL_SCALE,
        )
        .unwrap(),
    );
    let mut rx_q =
        Box::new(ReceiverQ15::<Q15Fft<N>, N, 4, 4>::new(&nu, Q15Fft::new(), *design).unwrap());
    let mut tx = Transmitter::new(nu, MicroFft::<N>::new()).unwrap();
    let taps = DelayProfile::exponential(1.0 / fs, fs)
        .unwrap()
        .to_sample_taps(fs, Quantisation::Nearest);
    let params = FadingParams::rayleigh(20.0, fs, N);
    let mut rng = stream_rng(seed, 1);
    // Unit-level signal power per sample: (data + A²·pilots)/N (unitary IFFT of the grid).
    let a2 = f64::from(nu.pilot_amplitude()).powi(2);
    let unit_power = (nu.data_len(0) as f64 + a2 * nu.pilot_len(0) as f64) / N as f64;
    let scale = (10f64.powf(level_dbfs / 10.0) / unit_power).sqrt();
    let k = m.bits_per_symbol();
    let d = nu.max_data_len();
    let (mut xf, mut sf, mut lf) = (
        vec![Cf32::default(); d],
        vec![0.0f32; d],
        vec![0.0f32; d * k],
    );
    let (mut xq, mut sq, mut lq) = (
        vec![Cq15::ZERO; d],
        vec![Scaled::default(); d],
        vec![0i8; d * k],
    );
    let (mut diff, mut count) = (0.0f64, 0usize);
    for frame in 0..60 {
        let mut line = Tdl::new(
            &taps,
            &params,
            Variation::HeldPerBlock(nu.symbol_len()),
            &mut rng,
        );
        let _ = frame;
        for sym in 0..4u32 {
            let bits: Vec<u8> = (0..tx.bits_per_ofdm_symbol(m, sym))
                .map(|_| rng.random::<u8>() & 1)
                .collect();
            let mut s = vec![Cf32::default(); nu.symbol_len()];
            tx.modulate(m, &bits, sym, &mut s).unwrap();
            let mut r = vec![Cf32::default(); nu.symbol_len()];
            line.process(&s, &mut r);
            add_awgn(&mut rng, &mut r, n0);
            // The same Q15 samples for both receivers.
            let x: Vec<Cf32> = r.iter().map(|v| v * scale as f32).collect();
            let mut q = vec![Cq15::ZERO; x.len()];
            samples_to_q15(&x, &mut q).unwrap();
            let back: Vec<Cf32> = q.iter().map(|v| v.to_cf32() / scale as f32).collect();
            rx_f.receive(&back, sym, m, &mut xf, &mut sf, &mut lf)
                .unwrap();
            rx_q.receive(&q, sym, m, &mut xq, &mut sq, &mut lq).unwrap();
            let h = rx_f.estimator().estimate();
            for (i, u) in (0..nu.used_len())
                .filter(|&u| !nu.is_pilot(u, sym))
                .enumerate()
            {
                let xq_f = Cf32::new(f32::from(xq[i].re) / 4096.0, f32::from(xq[i].im) / 4096.0);
                let g = f64::from(h[u].norm_sqr());
                diff += g * f64::from((xq_f - xf[i]).norm_sqr());
                count += 1;
            }
        }
        rx_f.reset();
        rx_q.reset();
    }
    10.0 * (diff / count as f64 / n0).log10()
}

#[test]
fn every_q15_stage_variant_stays_12_db_below_the_noise() {
    // Linear interpolation, exponential forgetting, and the 2-D (time LMMSE on a scattered
    // pattern) estimator, at the extremes of the level range; same criterion as below.
    for (name, freq, time, shift) in [
        ("linear", FreqInterpolation::Linear, TimeFilter::Latest, 0),
        (
            "forgetting 0.5",
            FreqInterpolation::Lmmse,
            TimeFilter::Forgetting { lambda: 0.5 },
            0,
        ),
        (
            "2-D scattered",
            FreqInterpolation::Lmmse,
            TimeFilter::Lmmse,
            1,
        ),
    ] {
        for level in [-40.0, -3.0] {
            let r = compare_with::<64>(Modulation::Qam16, 22.0, level, 3, freq, time, shift);
            println!("{name}, 16-QAM 22 dB, {level} dBFS: implementation noise {r:.1} dB re N0");
            assert!(r <= -12.0, "{name} at {level} dBFS: {r:.1} dB");
        }
    }
}

#[test]
fn q15_receiver_stays_12_db_below_the_noise_from_minus_40_to_minus_3_dbfs() {
    for (m, es_n0) in [(Modulation::Qpsk, 15.0), (Modulation::Qam16, 22.0)] {
        for level in [-40.0, -30.0, -20.0, -12.0, -6.0, -3.0] {
            let r64 = compare::<64>(m, es_n0, level, 1);
            let r256 = compare::<256>(m, es_n0, level, 2);
            println!("{m:?} Es/N0 {es_n0} dB, FFT input {level} dBFS: implementation noise {r64:.1} dB (N=64), {r256:.1} dB (N=256) relative to N0");
            assert!(r64 <= -12.0 && r256 <= -12.0);
        }
    }
}

/// Runs f32 and Q15 receivers on the same frames; returns (bits, f32 errors, Q15 errors,
/// f32-only errors, Q15-only errors).
fn paired_errors<const N: usize>(
    m: Modulation,
    es_n0_db: f64,
    frames: usize,
    seed: u64,
) -> [u64; 5] {
    let nu = numerology(N);
    let fs = f64::from(nu.sample_rate_hz());
    let n0 = 10f64.powf(-es_n0_db / 10.0);
    let est = EstimatorConfig {
        freq: FreqInterpolation::Lmmse,
        time: TimeFilter::Latest,
        noise_var: n0 as f32,
        ..EstimatorConfig::default()
    };
    let level_dbfs = -12.0;
    let cfg_q = ReceiverQ15Config {
        estimator: est,
        signal_dbfs: level_dbfs as f32,
        ..ReceiverQ15Config::default()
    };
    let mut rx_f = Box::new(
        Receiver::<MicroFft<N>, N, 4, 4>::new(
            &nu,
            MicroFft::new(),
            ReceiverConfig {
                estimator: est,
                ..ReceiverConfig::default()
            },
        )
        .unwrap(),
    );
    let design = DesignQ15::<N, 4, 4>::new(
        &nu,
        &cfg_q,
        <Q15Fft<N> as flatbin::fft::OfdmFft<N>>::RESIDUAL_SCALE,
    )
    .unwrap();
    let mut rx_q =
        Box::new(ReceiverQ15::<Q15Fft<N>, N, 4, 4>::new(&nu, Q15Fft::new(), design).unwrap());
    let mut tx = Transmitter::new(nu, MicroFft::<N>::new()).unwrap();
    let taps = DelayProfile::exponential(1.0 / fs, fs)
        .unwrap()
        .to_sample_taps(fs, Quantisation::Nearest);
    let params = FadingParams::rayleigh(40.0, fs, N);
    let mut rng = stream_rng(seed, 2);
    let a2 = f64::from(nu.pilot_amplitude()).powi(2);
    let unit_power = (nu.data_len(0) as f64 + a2 * nu.pilot_len(0) as f64) / N as f64;
    let scale = (10f64.powf(level_dbfs / 10.0) / unit_power).sqrt();
    let k = m.bits_per_symbol();
    let d = nu.max_data_len();
    let (mut xf, mut sf, mut lf) = (
        vec![Cf32::default(); d],
        vec![0.0f32; d],
        vec![0.0f32; d * k],
    );
    let (mut xq, mut sq, mut lq) = (
        vec![Cq15::ZERO; d],
        vec![Scaled::default(); d],
        vec![0i8; d * k],
    );
    let mut c = [0u64; 5];
    for _ in 0..frames {
        let mut line = Tdl::new(&taps, &params, Variation::Continuous, &mut rng);
        rx_f.reset();
        rx_q.reset();
        for sym in 0..8u32 {
            let bits: Vec<u8> = (0..tx.bits_per_ofdm_symbol(m, sym))
                .map(|_| rng.random::<u8>() & 1)
                .collect();
            let mut s = vec![Cf32::default(); nu.symbol_len()];
            tx.modulate(m, &bits, sym, &mut s).unwrap();
            let mut r = vec![Cf32::default(); nu.symbol_len()];
            line.process(&s, &mut r);
            add_awgn(&mut rng, &mut r, n0);
            let x: Vec<Cf32> = r.iter().map(|v| v * scale as f32).collect();
            let mut q = vec![Cq15::ZERO; x.len()];
            samples_to_q15(&x, &mut q).unwrap();
            let back: Vec<Cf32> = q.iter().map(|v| v.to_cf32() / scale as f32).collect();
            let nf = rx_f
                .receive(&back, sym, m, &mut xf, &mut sf, &mut lf)
                .unwrap();
            rx_q.receive(&q, sym, m, &mut xq, &mut sq, &mut lq).unwrap();
            for ((b, l_f), l_q) in bits.iter().zip(&lf[..nf.llrs]).zip(&lq) {
                let ef = u8::from(*l_f < 0.0) != *b;
                let eq = u8::from(*l_q < 0) != *b;
                c[0] += 1;
                c[1] += u64::from(ef);
                c[2] += u64::from(eq);
                c[3] += u64::from(ef && !eq);
                c[4] += u64::from(eq && !ef);
            }
        }
    }
    c
}

#[test]
fn paired_monte_carlo_ber_of_q15_equals_f32() {
    // Same channel, noise and data into both receivers. Under "the two receivers err equally
    // often", the discordant counts n₁₀ (f32 only) and n₀₁ (Q15 only) differ by a
    // binomial(n₁₀ + n₀₁, ½) amount: |n₁₀ − n₀₁| ≤ 4·sqrt(n₁₀ + n₀₁) (McNemar, Psychometrika
    // 12(2), 1947). Operating points near BER 1e-2 with the pilot estimator.
    for (m, es_n0) in [(Modulation::Qpsk, 21.0), (Modulation::Qam16, 28.0)] {
        let c = paired_errors::<64>(m, es_n0, 400, 5);
        let (n10, n01) = (c[3] as f64, c[4] as f64);
        println!(
            "{m:?} at {es_n0} dB: {} bits, BER f32 {:.3e}, Q15 {:.3e}; discordant f32-only {n10}, Q15-only {n01}",
            c[0],
            c[1] as f64 / c[0] as f64,
            c[2] as f64 / c[0] as f64
        );
        assert!(c[1] > 1000, "enough errors for the comparison");
        assert!((n10 - n01).abs() <= 4.0 * (n10 + n01).sqrt().max(1.0));
    }
}

#[test]
fn conversion_to_q15_rejects_non_finite_and_counts_clipping() {
    let mut out = [Cq15::new(7, 7); 4];
    let bad = [
        Cf32::new(0.1, 0.0),
        Cf32::new(0.2, f32::NAN),
        Cf32::new(0.0, 0.0),
        Cf32::new(f32::INFINITY, 0.0),
    ];
    assert_eq!(
        samples_to_q15(&bad, &mut out),
        Err(flatbin::ProcessError::NonFinite { index: 1 })
    );
    assert_eq!(out, [Cq15::new(7, 7); 4], "nothing written on error");
    let hot = [
        Cf32::new(1.5, -0.5),
        Cf32::new(-1.2, 2.0),
        Cf32::new(0.5, 0.5),
        Cf32::new(-1.0, 0.0),
    ];
    assert_eq!(samples_to_q15(&hot, &mut out), Ok(3));
    assert_eq!(out[0], Cq15::new(i16::MAX, -16384));
}

#[test]
fn dynamic_range_with_a_12_bit_adc_spans_at_least_35_db() {
    // 16-QAM at Es/N0 = 20 dB through a 12-bit ADC (full scale 1 per branch, clipping), input
    // level (signal + noise, dBFS: total complex power against a full-scale complex sinusoid,
    // DESIGN.md) from −50 to 0 dBFS; a digital gain brings the FFT input to −12 dBFS. EVM
    // (data-aided, SINR-weighted) of the Q15 receiver's equalized symbols at each level; the usable range is
    // where EVM is within 0.5 dB of its best. Low levels lose to quantisation (6.02·b + 1.76 − B
    // dB SQNR; common practice), high levels to clipping of the OFDM peaks.
    use flatbin::receiver_q15::DigitalGain;
    use flatbin_harness::impair::Adc;
    const N: usize = 64;
    let nu = numerology(N);
    let fs = f64::from(nu.sample_rate_hz());
    let m = Modulation::Qam16;
    let es_n0_db = 20.0;
    let n0 = 10f64.powf(-es_n0_db / 10.0);
    let est = EstimatorConfig {
        freq: FreqInterpolation::Lmmse,
        time: TimeFilter::Latest,
        noise_var: n0 as f32,
        ..EstimatorConfig::default()
    };
    let cfg_q = ReceiverQ15Config {
        estimator: est,
        signal_dbfs: -12.0,
        ..ReceiverQ15Config::default()
    };
    let design = DesignQ15::<N, 4, 4>::new(
        &nu,
        &cfg_q,
        <Q15Fft<N> as flatbin::fft::OfdmFft<N>>::RESIDUAL_SCALE,
    )
    .unwrap();
    let mut tx = Transmitter::new(nu, MicroFft::<N>::new()).unwrap();
    let taps = DelayProfile::exponential(1.0 / fs, fs)
        .unwrap()
        .to_sample_taps(fs, Quantisation::Nearest);
    let params = FadingParams::rayleigh(20.0, fs, N);
    let a2 = f64::from(nu.pilot_amplitude()).powi(2);
    let unit_power = (nu.data_len(0) as f64 + a2 * nu.pilot_len(0) as f64) / N as f64;
    let k = m.bits_per_symbol();
    let d = nu.max_data_len();
    let mut table = Vec::new();
    for level in (-50..=0).step_by(2).map(f64::from) {
        let mut rx = Box::new(
            ReceiverQ15::<Q15Fft<N>, N, 4, 4>::new(&nu, Q15Fft::new(), design.clone()).unwrap(),
        );
        // Input power = signal + noise; the gain brings the signal to −12 dBFS at the FFT.
        let total = unit_power + n0;
        let scale = (10f64.powf(level / 10.0) / total).sqrt();
        let signal_dbfs = 10.0 * (unit_power * scale * scale).log10();
        rx.set_gain(DigitalGain::from_db((-12.0 - signal_dbfs) as f32));
        let mut rng = stream_rng(9, 3); // the same channel, noise and data at every level
        let (mut xq, mut sq, mut lq) = (
            vec![Cq15::ZERO; d],
            vec![Scaled::default(); d],
            vec![0i8; d * k],
        );
        let (mut err, mut pow, mut clipped) = (0.0f64, 0.0f64, 0usize);
        for _ in 0..40 {
            let mut line = Tdl::new(
                &taps,
                &params,
                Variation::HeldPerBlock(nu.symbol_len()),
                &mut rng,
            );
            rx.reset();
            for sym in 0..4u32 {
                let bits: Vec<u8> = (0..tx.bits_per_ofdm_symbol(m, sym))
                    .map(|_| rng.random::<u8>() & 1)
                    .collect();
                let mut s = vec![Cf32::default(); nu.symbol_len()];
                tx.modulate(m, &bits, sym, &mut s).unwrap();
                let mut r = vec![Cf32::default(); nu.symbol_len()];
                line.process(&s, &mut r);
                add_awgn(&mut rng, &mut r, n0);
                let x: Vec<Cf32> = r.iter().map(|v| v * scale as f32).collect();
                let mut q = vec![Cq15::ZERO; x.len()];
                clipped += Adc { bits: 12 }.convert(&x, &mut q);
                rx.receive(&q, sym, m, &mut xq, &mut sq, &mut lq).unwrap();
                for ((xi, si), chunk) in xq.iter().zip(&sq).zip(bits.chunks_exact(k)) {
                    // Weighted by the bin's SINR (∝ |Ĥ|²): the error referred to the receiver
                    // input, so faded bins do not dominate (the plain mean of |W/H|² over
                    // Rayleigh fading diverges).
                    let w = f64::from(si.mant) * 2f64.powi(si.exp - 15);
                    let want = m.map(chunk).unwrap();
                    let got = Cf32::new(f32::from(xi.re) / 4096.0, f32::from(xi.im) / 4096.0);
                    err += w * f64::from((got - want).norm_sqr());
                    pow += w * f64::from(want.norm_sqr());
                }
            }
        }
        let evm_db = 10.0 * (err / pow).log10();
        table.push((level, evm_db, clipped));
    }
    let best = table.iter().map(|t| t.1).fold(f64::INFINITY, f64::min);
    let usable: Vec<f64> = table
        .iter()
        .filter(|t| t.1 <= best + 0.5)
        .map(|t| t.0)
        .collect();
    let (lo, hi) = (
        usable.first().copied().unwrap(),
        usable.last().copied().unwrap(),
    );
    for (level, evm, clipped) in &table {
        println!("input {level:>5.0} dBFS: EVM {evm:6.2} dB, ADC clipped {clipped}");
    }
    println!(
        "best EVM {best:.2} dB; usable (within 0.5 dB) {lo} … {hi} dBFS: {} dB",
        hi - lo
    );
    // The usable levels must form one contiguous run (no holes) spanning ≥ 35 dB.
    assert_eq!(
        usable.len() as f64,
        (hi - lo) / 2.0 + 1.0,
        "usable levels are contiguous"
    );
    assert!(hi - lo >= 35.0);
}
