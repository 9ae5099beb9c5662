//! Sampling-clock offset from the pilot phase slope: N = 256, Es/N0 = 20 dB per data
//! subcarrier (pilots unboosted, so pilot SNR A²/N0 = 100), AWGN, 20 ppm, 100 symbols after
//! the reference. The estimate's standard deviation over 200 trials must stay within 1.5× the
//! least-squares bound `(N/(2πNs))² σ²/(Σ(k−k̄)² Σ(m−m̄)²)`, `σ² = N0/(2A²)` the phase-noise
//! variance of one pilot at high SNR (linear regression variance; common practice).

use flatbin::fft::{MicroFft, OfdmFft};
use flatbin::numerology::NumerologyParams;
use flatbin::sco::ScoEstimator;
use flatbin::transmit::Transmitter;
use flatbin::{Cf32, Modulation, Numerology};
use flatbin_harness::impair::resample;
use flatbin_harness::noise::add_awgn;
use flatbin_harness::rng::stream_rng;
use rand::RngExt;

const N: usize = 256;

#[test]
fn sco_estimate_spread_is_within_1_5_times_the_least_squares_bound() {
    let nu = Numerology::new(NumerologyParams {
        fft_len: N,
        cp_len: N / 8,
        guard_low_bins: N / 16,
        guard_high_bins: N / 16 - 1,
        ..NumerologyParams::default()
    })
    .unwrap();
    let ns = nu.symbol_len();
    let zeta = 20e-6;
    let n0 = 0.01;
    let symbols = 101usize;
    let mut tx = Transmitter::new(nu, MicroFft::<N>::new()).unwrap();
    let mut fft = MicroFft::<N>::new();
    let mut rng = stream_rng(111, 0);
    let trials = 200;
    let mut est = Vec::with_capacity(trials);
    for _ in 0..trials {
        let mut x = Vec::with_capacity(symbols * ns + ns);
        for sym in 0..symbols as u32 {
            let bits: Vec<u8> = (0..tx.bits_per_ofdm_symbol(Modulation::Qpsk, sym))
                .map(|_| rng.random::<u8>() & 1)
                .collect();
            let mut s = vec![Cf32::default(); ns];
            tx.modulate(Modulation::Qpsk, &bits, sym, &mut s).unwrap();
            x.extend_from_slice(&s);
        }
        x.extend(std::iter::repeat_n(Cf32::default(), ns));
        let mut r = resample(&x, zeta * 1e6);
        add_awgn(&mut rng, &mut r, n0);
        let mut sco = ScoEstimator::<N>::new(&nu).unwrap();
        for sym in 0..symbols {
            // Window from the middle of the CP: the drift (0.58 samples over the frame) keeps it
            // inside the ISI-free part.
            let start = sym * ns + nu.cp_len() / 2;
            let mut bins: [Cf32; N] = r[start..start + N].try_into().unwrap();
            fft.forward(&mut bins);
            sco.update(&bins, sym as u32).unwrap();
        }
        est.push(f64::from(sco.estimate().unwrap()));
    }
    let mean = est.iter().sum::<f64>() / trials as f64;
    let sd = (est.iter().map(|e| (e - mean).powi(2)).sum::<f64>() / (trials - 1) as f64).sqrt();
    // The bound, from the pilot positions and the SNR.
    let ks: Vec<f64> = nu
        .pilot_bins(0)
        .map(|i| {
            if i < N / 2 {
                i as f64
            } else {
                i as f64 - N as f64
            }
        })
        .collect();
    let k_mean = ks.iter().sum::<f64>() / ks.len() as f64;
    let sk: f64 = ks.iter().map(|k| (k - k_mean).powi(2)).sum();
    let ms: Vec<f64> = (1..symbols).map(|m| m as f64).collect();
    let m_mean = ms.iter().sum::<f64>() / ms.len() as f64;
    let sm: f64 = ms.iter().map(|m| (m - m_mean).powi(2)).sum();
    let sigma2 = n0 / (2.0 * f64::from(nu.pilot_amplitude()).powi(2));
    let scale = N as f64 / (2.0 * std::f64::consts::PI * ns as f64);
    let bound = scale * (sigma2 / (sk * sm)).sqrt();
    println!(
        "SCO 20 ppm: mean {:.3} ppm, sd {:.4} ppm, LS bound {:.4} ppm ({:.2}×)",
        mean * 1e6,
        sd * 1e6,
        bound * 1e6,
        sd / bound
    );
    // Unbiased to within 4 standard errors, and the spread within 1.5× the bound.
    assert!((mean - zeta).abs() <= 4.0 * sd / (trials as f64).sqrt());
    assert!(sd <= 1.5 * bound);
}

#[test]
fn rotation_undoes_an_early_window() {
    // A window starting 3 samples early inside the CP is the symbol cyclically delayed by 3,
    // which the DFT shift theorem maps to e^{−j2πk·3/N}: undone by rotate_for_delay(−3).
    let nu = Numerology::new(NumerologyParams {
        fft_len: N,
        cp_len: N / 8,
        guard_low_bins: N / 16,
        guard_high_bins: N / 16 - 1,
        ..NumerologyParams::default()
    })
    .unwrap();
    let mut tx = Transmitter::new(nu, MicroFft::<N>::new()).unwrap();
    let bits = vec![1u8; tx.bits_per_ofdm_symbol(Modulation::Qpsk, 0)];
    let mut s = vec![Cf32::default(); nu.symbol_len()];
    tx.modulate(Modulation::Qpsk, &bits, 0, &mut s).unwrap();
    let mut fft = MicroFft::<N>::new();
    let cp = nu.cp_len();
    let mut on_time: [Cf32; N] = s[cp..cp + N].try_into().unwrap();
    let mut early: [Cf32; N] = s[cp - 3..cp - 3 + N].try_into().unwrap();
    fft.forward(&mut on_time);
    fft.forward(&mut early);
    flatbin::sco::rotate_for_delay(&nu, &mut early, -3.0);
    for u in 0..nu.used_len() {
        let i = nu.fft_index(u);
        assert!((early[i] - on_time[i]).norm() < 1e-4, "bin {i}");
    }
}

#[test]
fn integer_sco_estimate_meets_the_same_bound() {
    // The integer estimator on Q15 FFT output of the same kind of frames (−12 dBFS): its spread
    // over 200 trials within 1.5× the least-squares bound, as the f32 one.
    use flatbin::fft_q15::Q15Fft;
    use flatbin::fixed::Cq15;
    use flatbin::sco_q15::ScoEstimatorQ15;
    let nu = Numerology::new(NumerologyParams {
        fft_len: N,
        cp_len: N / 8,
        guard_low_bins: N / 16,
        guard_high_bins: N / 16 - 1,
        ..NumerologyParams::default()
    })
    .unwrap();
    let ns = nu.symbol_len();
    let zeta = 20e-6;
    let n0 = 0.01;
    let symbols = 101usize;
    let mut tx = Transmitter::new(nu, MicroFft::<N>::new()).unwrap();
    let mut fft = Q15Fft::<N>::new();
    let mut rng = stream_rng(112, 0);
    let trials = 200;
    let mut est = Vec::with_capacity(trials);
    for _ in 0..trials {
        let mut x = Vec::with_capacity(symbols * ns + ns);
        for sym in 0..symbols as u32 {
            let bits: Vec<u8> = (0..tx.bits_per_ofdm_symbol(Modulation::Qpsk, sym))
                .map(|_| rng.random::<u8>() & 1)
                .collect();
            let mut s = vec![Cf32::default(); ns];
            tx.modulate(Modulation::Qpsk, &bits, sym, &mut s).unwrap();
            x.extend_from_slice(&s);
        }
        x.extend(std::iter::repeat_n(Cf32::default(), ns));
        let mut r = resample(&x, zeta * 1e6);
        add_awgn(&mut rng, &mut r, n0);
        let p: f64 = r.iter().map(|v| f64::from(v.norm_sqr())).sum::<f64>() / r.len() as f64;
        let scale = (10f64.powf(-1.2) / p).sqrt() as f32;
        let mut sco = ScoEstimatorQ15::<N>::new(&nu).unwrap();
        for sym in 0..symbols {
            let start = sym * ns + nu.cp_len() / 2;
            let mut bins = [Cq15::ZERO; N];
            for (b, v) in bins.iter_mut().zip(&r[start..start + N]) {
                *b = Cq15::from_cf32(v * scale);
            }
            fft.forward(&mut bins);
            sco.update(&bins, sym as u32).unwrap();
        }
        est.push(f64::from(sco.estimate_q32().unwrap()) / 2f64.powi(32));
    }
    let mean = est.iter().sum::<f64>() / trials as f64;
    let sd = (est.iter().map(|e| (e - mean).powi(2)).sum::<f64>() / (trials - 1) as f64).sqrt();
    let ks: Vec<f64> = nu
        .pilot_bins(0)
        .map(|i| {
            if i < N / 2 {
                i as f64
            } else {
                i as f64 - N as f64
            }
        })
        .collect();
    let k_mean = ks.iter().sum::<f64>() / ks.len() as f64;
    let sk: f64 = ks.iter().map(|k| (k - k_mean).powi(2)).sum();
    let ms: Vec<f64> = (1..symbols).map(|m| m as f64).collect();
    let m_mean = ms.iter().sum::<f64>() / ms.len() as f64;
    let sm: f64 = ms.iter().map(|m| (m - m_mean).powi(2)).sum();
    let sigma2 = n0 / (2.0 * f64::from(nu.pilot_amplitude()).powi(2));
    let bound = N as f64 / (2.0 * std::f64::consts::PI * ns as f64) * (sigma2 / (sk * sm)).sqrt();
    println!(
        "integer SCO 20 ppm: mean {:.3} ppm, sd {:.4} ppm, LS bound {:.4} ppm ({:.2}×)",
        mean * 1e6,
        sd * 1e6,
        bound * 1e6,
        sd / bound
    );
    assert!((mean - zeta).abs() <= 4.0 * sd / (trials as f64).sqrt());
    assert!(sd <= 1.5 * bound);
}

#[test]
fn a_common_phase_that_wraps_does_not_bend_the_slope() {
    // A residual CFO turns every pilot of a symbol alike, by whole turns over a frame. The
    // double-centred slope does not depend on it (the model's c_m, module docs of
    // flatbin::sco), so each estimator, fed the same 100 ppm frame with a common phase of
    // 0.3 turn per symbol added, must still land within 4σ of the true offset, σ = 1.5× the
    // least-squares bound (as above; linear regression, common practice).
    use flatbin::fft_q15::Q15Fft;
    use flatbin::fixed::Cq15;
    use flatbin::sco_q15::ScoEstimatorQ15;
    const M: usize = 64;
    let nu = Numerology::new(NumerologyParams::default()).unwrap();
    let ns = nu.symbol_len();
    let zeta = 100e-6;
    let n0 = 0.01;
    let symbols = 60usize;
    let mut tx = Transmitter::new(nu, MicroFft::<M>::new()).unwrap();
    let mut rng = stream_rng(113, 0);
    let mut x = Vec::new();
    for sym in 0..symbols as u32 {
        let bits: Vec<u8> = (0..tx.bits_per_ofdm_symbol(Modulation::Qpsk, sym))
            .map(|_| rng.random::<u8>() & 1)
            .collect();
        let mut s = vec![Cf32::default(); ns];
        tx.modulate(Modulation::Qpsk, &bits, sym, &mut s).unwrap();
        x.extend_from_slice(&s);
    }
    x.extend(std::iter::repeat_n(Cf32::default(), ns));
    let mut r = resample(&x, zeta * 1e6);
    add_awgn(&mut rng, &mut r, n0);
    let mut fft = MicroFft::<M>::new();
    let mut fft_q = Q15Fft::<M>::new();
    let mut f32_est = ScoEstimator::<M>::new(&nu).unwrap();
    let mut int_est = ScoEstimatorQ15::<M>::new(&nu).unwrap();
    for sym in 0..symbols {
        let turn = Cf32::from_polar(1.0, std::f32::consts::TAU * 0.3 * sym as f32);
        let start = sym * ns + nu.cp_len() / 2;
        let mut bins: [Cf32; M] = r[start..start + M].try_into().unwrap();
        for v in bins.iter_mut() {
            *v *= turn;
        }
        let mut bins_q = [Cq15::ZERO; M];
        for (b, v) in bins_q.iter_mut().zip(&bins) {
            *b = Cq15::from_cf32(v * 0.1);
        }
        fft.forward(&mut bins);
        fft_q.forward(&mut bins_q);
        f32_est.update(&bins, sym as u32).unwrap();
        int_est.update(&bins_q, sym as u32).unwrap();
    }
    let ks: Vec<f64> = nu
        .pilot_bins(0)
        .map(|i| {
            if i < M / 2 {
                i as f64
            } else {
                i as f64 - M as f64
            }
        })
        .collect();
    let k_mean = ks.iter().sum::<f64>() / ks.len() as f64;
    let sk: f64 = ks.iter().map(|k| (k - k_mean).powi(2)).sum();
    let ms: Vec<f64> = (1..symbols).map(|m| m as f64).collect();
    let m_mean = ms.iter().sum::<f64>() / ms.len() as f64;
    let sm: f64 = ms.iter().map(|m| (m - m_mean).powi(2)).sum();
    let sigma2 = n0 / (2.0 * f64::from(nu.pilot_amplitude()).powi(2));
    let bound = M as f64 / (2.0 * std::f64::consts::PI * ns as f64) * (sigma2 / (sk * sm)).sqrt();
    let a = f64::from(f32_est.estimate().unwrap());
    let b = f64::from(int_est.estimate_q32().unwrap()) / 2f64.powi(32);
    println!(
        "with a wrapping common phase: f32 {:.2} ppm, integer {:.2} ppm (true 100, ±{:.2})",
        a * 1e6,
        b * 1e6,
        6.0 * bound * 1e6
    );
    assert!((a - zeta).abs() <= 4.0 * 1.5 * bound);
    assert!((b - zeta).abs() <= 4.0 * 1.5 * bound);
}
