//! The fading generator against the published statistics of Clarke/Jakes fading.
//!
//! Sources (REFERENCES.md item 3): R. H. Clarke, Bell Syst. Tech. J. 47(6), 1968, and
//! W. C. Jakes (ed.), Microwave Mobile Communications, 1974, ch. 1 (ACF J0(2π fd τ), Rayleigh
//! envelope; from memory); T. S. Rappaport, Wireless Communications, 2nd ed., 2002, small-scale
//! fading chapter (level-crossing rate confirmed, average fade duration from memory).

use flatbin::Cf32;
use flatbin_harness::channel::sos::{FadingParams, SosFading};
use flatbin_harness::channel::tdl::{Tdl, Variation};
use flatbin_harness::rng::stream_rng;

/// Per-sample gains of one tap through the tapped delay line (input all ones).
fn gains(params: &FadingParams, seed: u64, len: usize) -> Vec<Cf32> {
    let mut tdl = Tdl::new(
        &[(0, 1.0)],
        params,
        Variation::Continuous,
        &mut stream_rng(seed, 0),
    );
    let ones = vec![Cf32::new(1.0, 0.0); len];
    let mut out = vec![Cf32::new(0.0, 0.0); len];
    tdl.process(&ones, &mut out);
    out
}

#[test]
fn autocorrelation_follows_j0() {
    // Ensemble of 100 independent realisations, each time-averaged over 200/fd; lags up to
    // fd·τ = 1. Clarke/Jakes: E[h(t+τ) h*(t)] = J0(2π fd τ). Required |error| ≤ 0.03.
    let fs = 10_000.0;
    let fd = 100.0; // 100 samples per 1/fd
    let params = FadingParams {
        doppler_hz: fd,
        sample_rate_hz: fs,
        sinusoids: 16,
        rician_k: 0.0,
        los_angle_rad: 0.0,
        step: 8,
    };
    let (len, lags) = (20_000usize, 100usize);
    let mut acf = vec![0.0f64; lags + 1];
    let realisations = 100;
    for r in 0..realisations {
        let h = gains(&params, 1000 + r, len + lags);
        for (lag, a) in acf.iter_mut().enumerate() {
            let mut sum = 0.0;
            for t in 0..len {
                let p = h[t + lag] * h[t].conj();
                sum += f64::from(p.re);
            }
            *a += sum / len as f64 / realisations as f64;
        }
    }
    for (lag, a) in acf.iter().enumerate() {
        let want = flatbin_harness::theory::fading::clarke_acf(fd, lag as f64 / fs);
        assert!(
            (a - want).abs() <= 0.03,
            "fd·τ = {}: {a:.4} vs J0 {want:.4}",
            lag as f64 * fd / fs
        );
    }
}

#[test]
fn envelope_is_rayleigh_ks_test() {
    // 20 000 envelopes from independent realisations (64 sinusoids, random time), against the
    // Rayleigh CDF P(R ≤ r) = 1 − exp(−r²) for E[R²] = 1 (Clarke 1968). Kolmogorov–Smirnov at
    // the 1 % level: D < 1.628/sqrt(n) (asymptotic critical value, common practice).
    let n = 20_000usize;
    let params = FadingParams {
        doppler_hz: 50.0,
        sample_rate_hz: 1e4,
        sinusoids: 64,
        rician_k: 0.0,
        los_angle_rad: 0.0,
        step: 1,
    };
    let mut rng = stream_rng(77, 1);
    let mut r: Vec<f64> = (0..n)
        .map(|i| {
            let g = SosFading::new(&params, &mut rng);
            g.gain_exact((i as u64 * 7919) % 100_000).norm()
        })
        .collect();
    r.sort_by(f64::total_cmp);
    let mut d = 0.0f64;
    for (i, x) in r.iter().enumerate() {
        let cdf = 1.0 - (-x * x).exp();
        d = d
            .max((cdf - i as f64 / n as f64).abs())
            .max(((i + 1) as f64 / n as f64 - cdf).abs());
    }
    let critical = 1.628 / (n as f64).sqrt();
    assert!(d < critical, "KS D = {d:.5} ≥ {critical:.5}");
}

#[test]
fn level_crossing_rate_and_fade_duration() {
    // 64 sinusoids, fd·Ts = 1e-3 (1000 samples per 1/fd), 2000/fd in all, in 20 independent
    // records. Rappaport: N_R = sqrt(2π) fd ρ e^{−ρ²} crossings/s; AFD = (e^{ρ²} − 1)/(ρ fd
    // sqrt(2π)). Tolerance (REFERENCES item 3): ±(4/sqrt(crossings) + 2 %) relative.
    let fs = 100_000.0;
    let fd = 100.0;
    let params = FadingParams {
        doppler_hz: fd,
        sample_rate_hz: fs,
        sinusoids: 64,
        rician_k: 0.0,
        los_angle_rad: 0.0,
        step: 8,
    };
    let records = 20u64;
    let len = 100_000usize; // 100/fd per record
    let envelopes: Vec<Vec<f32>> = (0..records)
        .map(|r| {
            gains(&params, 500 + r, len)
                .iter()
                .map(|g| g.norm())
                .collect()
        })
        .collect();
    let total_s = (records as usize * len) as f64 / fs;
    for rho in [0.1f64, 0.3, 1.0] {
        let (mut crossings, mut below) = (0u64, 0u64);
        for env in &envelopes {
            for w in env.windows(2) {
                if w[0] < rho as f32 && w[1] >= rho as f32 {
                    crossings += 1;
                }
            }
            below += env.iter().filter(|&&e| e < rho as f32).count() as u64;
        }
        let lcr = crossings as f64 / total_s;
        let afd = (below as f64 / fs) / crossings as f64;
        let lcr_theory = (2.0 * std::f64::consts::PI).sqrt() * fd * rho * (-rho * rho).exp();
        let afd_theory =
            ((rho * rho).exp() - 1.0) / (rho * fd * (2.0 * std::f64::consts::PI).sqrt());
        let tol = 4.0 / (crossings as f64).sqrt() + 0.02;
        assert!(
            (lcr / lcr_theory - 1.0).abs() <= tol,
            "ρ={rho}: LCR {lcr:.2} vs {lcr_theory:.2} ({crossings} crossings)"
        );
        assert!(
            (afd / afd_theory - 1.0).abs() <= tol,
            "ρ={rho}: AFD {afd:.5} vs {afd_theory:.5}"
        );
    }
}

#[test]
fn same_seed_same_output_different_seed_independent() {
    let params = FadingParams::rayleigh(200.0, 1e5, 64);
    let a = gains(&params, 9, 50_000);
    let b = gains(&params, 9, 50_000);
    assert_eq!(a, b);
    // Different seeds: sample correlation of two long records near 0. Effective independent
    // samples ≈ duration·fd·2 = 200; 4/sqrt(200) = 0.28 bounds |ρ| (common practice).
    let c = gains(&params, 10, 50_000);
    let (mut cross, mut pa, mut pc) = (0.0f64, 0.0f64, 0.0f64);
    for (x, y) in a.iter().zip(&c) {
        cross += f64::from((x * y.conj()).re);
        pa += f64::from(x.norm_sqr());
        pc += f64::from(y.norm_sqr());
    }
    let rho = cross / (pa * pc).sqrt();
    assert!(rho.abs() < 0.28, "correlation {rho}");
}

#[test]
fn rician_tap_has_its_k_factor() {
    // Rician K = 3 with the line of sight arriving broadside (its Doppler fd·cos(π/2) = 0, so
    // the specular term is constant): over a long record the mean of h is that term, of power
    // K/(K+1) = 0.75, and E|h|² = 1 (definition of the Rician K factor, common practice).
    // Record 1000/fd: the scattered part averages to about 1/sqrt(2·1000) ≈ 0.02 in amplitude.
    let params = FadingParams {
        doppler_hz: 100.0,
        sample_rate_hz: 10_000.0,
        sinusoids: 16,
        rician_k: 3.0,
        los_angle_rad: std::f64::consts::FRAC_PI_2,
        step: 8,
    };
    let h = gains(&params, 3, 100_000);
    let mean = h.iter().sum::<Cf32>() / h.len() as f32;
    let power = h.iter().map(|g| f64::from(g.norm_sqr())).sum::<f64>() / h.len() as f64;
    assert!(
        (f64::from(mean.norm_sqr()) - 0.75).abs() < 0.05,
        "specular power {}",
        mean.norm_sqr()
    );
    assert!((power - 1.0).abs() < 0.1, "total power {power}");
}
