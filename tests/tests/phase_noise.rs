//! Wiener phase noise: measured ICI through the impairment model against the exact sum of
//! `theory::phase_noise` (Pollet, Van Bladel & Moeneclaey, IEEE Trans. Commun. 43, 1995; sum
//! derived from the Wiener model).

use flatbin::fft::{MicroFft, OfdmFft};
use flatbin::Cf32;
use flatbin_harness::impair::PhaseNoise;
use flatbin_harness::rng::stream_rng;
use flatbin_harness::theory::phase_noise::phase_noise_ici_exact;
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
