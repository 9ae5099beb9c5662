//! Impairments measured through OFDM symbols: the narrowband noise burst occupies the bins it
//! is asked for at the power it is asked for, and IQ imbalance puts each bin's mirror on it at
//! the image rejection ratio of the closed form (Tarighat, Bagheri & Sayed, IEEE Trans. Signal
//! Process. 53(8), 2005 — from memory; re-derived in `theory::iq_image`).

use flatbin::fft::{MicroFft, OfdmFft};
use flatbin::Cf32;
use flatbin_harness::impair::{IqImbalance, NoiseBurst};
use flatbin_harness::rng::stream_rng;
use flatbin_harness::theory::iq_image::image_rejection_db;
use rand::RngExt;

const N: usize = 64;

#[test]
fn noise_burst_sits_in_its_bins_at_its_power_and_duty() {
    let mut fft = MicroFft::<N>::new();
    let (centre_bin, width_bins, power) = (10.0f64, 4.0f64, 0.25f64);
    let blocks = 16_384usize;
    for duty in [1.0f64, 0.25] {
        let period = 8 * N; // on for the first duty·8 blocks of every 8
        let mut nb = NoiseBurst::new(
            centre_bin / N as f64,
            width_bins / N as f64,
            power,
            duty,
            period,
            21,
        );
        let mut per_bin = [0.0f64; N];
        let mut total = 0.0f64;
        let mut off_power = 0.0f64;
        for b in 0..blocks {
            let mut x = [Cf32::new(0.0, 0.0); N];
            nb.add(&mut x, (b * N) as u64);
            let p: f64 = x.iter().map(|v| f64::from(v.norm_sqr())).sum();
            total += p;
            if (b * N) % period >= (duty * period as f64) as usize {
                off_power += p;
            }
            // Hann window before the FFT so the estimate shows the burst's spectrum rather
            // than the rectangular window's leakage (common practice).
            for (i, v) in x.iter_mut().enumerate() {
                let w = 0.5 - 0.5 * (2.0 * std::f32::consts::PI * i as f32 / N as f32).cos();
                *v *= w;
            }
            fft.forward(&mut x);
            for (acc, v) in per_bin.iter_mut().zip(&x) {
                *acc += f64::from(v.norm_sqr());
            }
        }
        let mean = total / (blocks * N) as f64;
        // Mean power = duty × power (definition of the duty cycle). Tolerance: the band holds
        // about M·B ≈ 65 000 independent samples, σ ≈ 0.4 %, so 3 % is > 4σ even at duty 0.25.
        assert!(
            (mean / (duty * power) - 1.0).abs() <= 0.03,
            "duty {duty}: mean power {mean} vs {}",
            duty * power
        );
        assert_eq!(off_power, 0.0, "nothing is added while the burst is off");
        // Occupied band (Parseval; common practice): ≥ 99.9 % of the power within the requested
        // band widened by 2 bins each side (the filter's transition and the Hann main lobe).
        let spectrum_total: f64 = per_bin.iter().sum();
        let lo = (centre_bin - width_bins / 2.0 - 2.0) as usize;
        let hi = (centre_bin + width_bins / 2.0 + 2.0) as usize;
        let inband: f64 = per_bin[lo..=hi].iter().sum();
        println!(
            "duty {duty}: mean power {mean:.4} (want {:.4}), in bins {lo}..={hi}: {:.4} %",
            duty * power,
            100.0 * inband / spectrum_total
        );
        assert!(inband / spectrum_total >= 0.999);
    }
}

#[test]
fn iq_image_interference_matches_the_closed_form() {
    let mut fft = MicroFft::<N>::new();
    let a = std::f32::consts::FRAC_1_SQRT_2;
    for (g_db, ph_deg, mirror_gain) in [(1.0f64, 5.0f64, 1.0f32), (0.3, 2.0, 1.0), (0.5, 3.0, 2.0)]
    {
        // μ written out from the model y = μx + νx* (common practice), not taken from the code.
        let g = 10f64.powf(g_db / 20.0);
        let phi = ph_deg.to_radians();
        let mu = Cf32::new(
            ((1.0 + g * phi.cos()) / 2.0) as f32,
            (-g * phi.sin() / 2.0) as f32,
        );
        let imb = IqImbalance::new(g_db, ph_deg);
        let mut rng = stream_rng(31, (g_db * 100.0) as u64);
        let (mut sig, mut err) = (0.0f64, 0.0f64);
        for _ in 0..2000 {
            // QPSK on bins 1..=26, and on their mirrors −1..=−26 scaled by `mirror_gain`.
            let mut grid = [Cf32::new(0.0, 0.0); N];
            for k in 1..=26usize {
                for (bin, scale) in [(k, 1.0f32), (N - k, mirror_gain)] {
                    grid[bin] = Cf32::new(
                        if rng.random::<bool>() { a } else { -a },
                        if rng.random::<bool>() { a } else { -a },
                    ) * scale;
                }
            }
            let mut y = grid;
            fft.inverse(&mut y);
            imb.apply(&mut y);
            fft.forward(&mut y);
            for k in 1..=26usize {
                let want = mu * grid[k];
                sig += f64::from(want.norm_sqr());
                err += f64::from((y[k] - want).norm_sqr());
            }
        }
        let measured = 10.0 * (sig / err).log10();
        // Image SIR on bin k = IRR · P_k / P_{−k} (Tarighat et al. 2005, from memory).
        let want = image_rejection_db(g_db, ph_deg) - 20.0 * f64::from(mirror_gain).log10();
        println!("{g_db} dB / {ph_deg}°, mirror ×{mirror_gain}: image SIR {measured:.2} dB, theory {want:.2} dB");
        assert!((measured - want).abs() <= 0.5, "{measured} vs {want}");
    }
}
