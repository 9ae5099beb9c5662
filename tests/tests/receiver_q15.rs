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
    Numerology::new(NumerologyParams {
        fft_len: n,
        cp_len: n / 8,
        guard_low_bins: n / 16,
        guard_high_bins: n / 16 - 1,
        ..NumerologyParams::default()
    })
    .unwrap()
}

/// Returns the implementation-noise-to-thermal-noise ratio, dB, at FFT input `level_dbfs`.
fn compare<const N: usize>(m: Modulation, es_n0_db: f64, level_dbfs: f64, seed: u64) -> f64 {
    let nu = numerology(N);
    let fs = f64::from(nu.sample_rate_hz());
    let n0 = 10f64.powf(-es_n0_db / 10.0);
    let est = EstimatorConfig {
        freq: FreqInterpolation::Lmmse,
        time: TimeFilter::Latest,
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
