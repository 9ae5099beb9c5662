//! Wiener phase noise: measured ICI through the impairment model against the exact sum of
//! `theory::phase_noise` (Pollet, Van Bladel & Moeneclaey, IEEE Trans. Commun. 43, 1995; sum
//! derived from the Wiener model).

use flatbin::fft::{MicroFft, OfdmFft};
use flatbin::Cf32;
use flatbin_harness::impair::PhaseNoise;
use flatbin_harness::rng::stream_rng;
use flatbin_harness::theory::phase_noise::{
    phase_noise_cpe_step_variance, phase_noise_cpe_variance, phase_noise_ici_exact,
};
use rand::RngExt;

#[test]
fn phase_noise_ici_matches_exact_sum() {
    const N: usize = 64;
    let fs = 1.0e6;
    let mut fft = MicroFft::<N>::new();
    let a = std::f32::consts::FRAC_1_SQRT_2;
    for beta_t in [0.01f64, 0.05] {
        let linewidth = beta_t * fs / N as f64;
        let mut data = stream_rng(8, (beta_t * 1e4) as u64);
        let (mut err, mut pow) = (0.0f64, 0.0f64);
        for s in 0..20_000u64 {
            let mut grid = [Cf32::new(0.0, 0.0); N];
            for v in grid.iter_mut() {
                *v = Cf32::new(
                    if data.random::<bool>() { a } else { -a },
                    if data.random::<bool>() { a } else { -a },
                );
            }
            let mut y = grid;
            fft.inverse(&mut y);
            // The same phase process twice (same seed): on the signal and on ones → e^{jφ[n]}.
            let mut pn = PhaseNoise::new(linewidth, fs);
            let mut probe = pn.clone();
            pn.apply(&mut y, &mut stream_rng(9, s));
            let mut ph = [Cf32::new(1.0, 0.0); N];
            probe.apply(&mut ph, &mut stream_rng(9, s));
            let c = ph.iter().sum::<Cf32>() / N as f32;
            fft.forward(&mut y);
            for (yk, xk) in y.iter().zip(&grid) {
                err += f64::from((yk - c * xk).norm_sqr());
                pow += f64::from(yk.norm_sqr());
            }
        }
        let measured = err / pow;
        let theory = phase_noise_ici_exact(beta_t, N);
        println!("βT = {beta_t}: measured ICI {measured:.4e}, exact sum {theory:.4e}");
        assert!(
            (measured / theory - 1.0).abs() <= 0.10,
            "βT={beta_t}: {measured} vs {theory}"
        );
    }
}

/// Measured common phase error of Wiener phase noise against the closed forms derived in
/// `theory::phase_noise` (from the Wiener model; large-N limit 2πβT/3 as in Armada, IEEE Trans.
/// Broadcasting 47(2), 2001 — from memory): the CPE relative to the phase just before each FFT
/// window, and its change from one symbol to the next (windows N + N_cp apart).
#[test]
fn phase_noise_cpe_variance_matches_theory() {
    const N: usize = 64;
    const CP: usize = 16;
    let fs = 1.0e6;
    let symbols = 20_000usize;
    for beta_t in [0.005f64, 0.02] {
        let mut pn = PhaseNoise::new(beta_t * fs / N as f64, fs);
        // One continuous oscillator over the whole stream: e^{jφ[n]} on a carrier of ones.
        let mut ph = vec![Cf32::new(1.0, 0.0); symbols * (N + CP) + 1];
        pn.apply(&mut ph, &mut stream_rng(11, (beta_t * 1e4) as u64));
        let mut cpe = Vec::with_capacity(symbols);
        let mut window_mean = Vec::with_capacity(symbols);
        for k in 0..symbols {
            let start = 1 + k * (N + CP) + CP;
            let c = ph[start..start + N].iter().sum::<Cf32>() / N as f32;
            cpe.push(f64::from((c * ph[start - 1].conj()).arg()));
            window_mean.push(c);
        }
        let var = cpe.iter().map(|t| t * t).sum::<f64>() / symbols as f64;
        let steps: Vec<f64> = window_mean
            .windows(2)
            .map(|w| f64::from((w[1] * w[0].conj()).arg()))
            .collect();
        let step_var = steps.iter().map(|t| t * t).sum::<f64>() / steps.len() as f64;
        let theory = phase_noise_cpe_variance(beta_t, N);
        let step_theory = phase_noise_cpe_step_variance(beta_t, N, CP);
        println!(
            "βT = {beta_t}: CPE variance {var:.4e} (theory {theory:.4e}), \
             symbol-to-symbol {step_var:.4e} (theory {step_theory:.4e})"
        );
        // Issue tolerance 10 %; the estimator's own spread is √(2/M) ≈ 1 % for M = 20 000.
        assert!((var / theory - 1.0).abs() <= 0.10, "{var} vs {theory}");
        assert!(
            (step_var / step_theory - 1.0).abs() <= 0.10,
            "{step_var} vs {step_theory}"
        );
    }
}
