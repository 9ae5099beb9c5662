//! Delay spread beyond the cyclic prefix: measured ISI + ICI through the tapped delay line
//! against the windowing result of `theory::isi` (derived there; the standard result, e.g.
//! Steendam & Moeneclaey, IEEE Trans. Commun. 47(12), 1999 — from memory).

use flatbin::fft::{MicroFft, OfdmFft};
use flatbin::Cf32;
use flatbin_harness::channel::sos::FadingParams;
use flatbin_harness::channel::tdl::{Tdl, Variation};
use flatbin_harness::rng::stream_rng;
use flatbin_harness::theory::isi::{isi_ici_fraction, useful_amplitude};
use rand::RngExt;

const N: usize = 64;
const L: usize = 8;

/// Measured interference fraction: three symbols with CP through a static multipath channel
/// (independent Rayleigh gains per trial), the middle symbol's FFT against the effective
/// one-tap channel Σ h_l ((N − e_l)/N) e^{−j2πk d_l/N}.
fn measure(taps: &[(usize, f64)], trials: u64) -> f64 {
    let mut fft = MicroFft::<N>::new();
    let mut rng = stream_rng(3, taps.len() as u64);
    let params = FadingParams {
        doppler_hz: 0.0,
        sample_rate_hz: 1e6,
        sinusoids: 16,
        rician_k: 0.0,
        los_angle_rad: 0.0,
        step: 64,
    };
    let a = std::f32::consts::FRAC_1_SQRT_2;
    let (mut err, mut pow) = (0.0f64, 0.0f64);
    for t in 0..trials {
        let mut line = Tdl::new(taps, &params, Variation::Continuous, &mut stream_rng(21, t));
        let mut probe = line.clone();
        let mut grids = [[Cf32::new(0.0, 0.0); N]; 3];
        let mut stream = Vec::new();
        for g in grids.iter_mut() {
            for v in g.iter_mut() {
                *v = Cf32::new(
                    if rng.random::<bool>() { a } else { -a },
                    if rng.random::<bool>() { a } else { -a },
                );
            }
            let mut x = *g;
            fft.inverse(&mut x);
            stream.extend_from_slice(&x[N - L..]);
            stream.extend_from_slice(&x);
        }
        let mut y = vec![Cf32::new(0.0, 0.0); stream.len()];
        line.process(&stream, &mut y);
        let maxd = taps.iter().map(|t| t.0).max().unwrap();
        let mut impulse = vec![Cf32::new(0.0, 0.0); maxd + 1];
        impulse[0] = Cf32::new(1.0, 0.0);
        let mut h = vec![Cf32::new(0.0, 0.0); maxd + 1];
        probe.process(&impulse, &mut h);
        let start = (N + L) + L; // middle symbol, after its CP
        let mut win = [Cf32::new(0.0, 0.0); N];
        win.copy_from_slice(&y[start..start + N]);
        fft.forward(&mut win);
        for k in 0..N {
            let mut heff = num_complex::Complex::<f64>::new(0.0, 0.0);
            for &(d, _) in taps {
                let w = useful_amplitude(d, L, N);
                let ang = -2.0 * std::f64::consts::PI * (k * d) as f64 / N as f64;
                heff += num_complex::Complex::new(f64::from(h[d].re), f64::from(h[d].im))
                    * w
                    * num_complex::Complex::from_polar(1.0, ang);
            }
            let x = grids[1][k];
            let want = heff * num_complex::Complex::new(f64::from(x.re), f64::from(x.im));
            let got = num_complex::Complex::new(f64::from(win[k].re), f64::from(win[k].im));
            err += (got - want).norm_sqr();
            pow += got.norm_sqr();
        }
    }
    err / pow
}

fn uniform(span: usize) -> Vec<(usize, f64)> {
    (0..=span).map(|d| (d, 1.0 / (span + 1) as f64)).collect()
}

#[test]
fn isi_ici_beyond_the_cp_matches_theory() {
    for span in [L * 3 / 2, 3 * L] {
        let taps = uniform(span);
        let measured = measure(&taps, 4000);
        let theory = isi_ici_fraction(&taps, L, N);
        println!(
            "profile to {span} samples (CP {L}): measured {measured:.4e}, theory {theory:.4e}"
        );
        assert!(
            (measured / theory - 1.0).abs() <= 0.10,
            "span {span}: {measured} vs {theory}"
        );
    }
}

#[test]
fn no_interference_when_the_profile_fits_the_cp() {
    let measured = measure(&uniform(L), 200);
    assert!(measured < 1e-9, "{measured:e}");
}
