//! ICI and common phase error (CPE) from Wiener (random-walk) phase noise.
//!
//! With a 3-dB linewidth `β`, the phase increment over `k` samples is Gaussian with variance
//! `2πβ·k·Ts`, so `E[e^{j(φ[n] − φ[m])}] = e^{−πβTs|n−m|}`. The part of a subcarrier's power that
//! stays on it is the mean over the window of these correlations, exactly as for Doppler
//! (REFERENCES item 1 with J0 replaced by the exponential):
//!
//! ```text
//! P_S   = (1/N²) Σ_{n,m} e^{−πβTs|n−m|}
//! P_ICI = 1 − P_S = (2/N²) Σ_{i=1}^{N−1} (N − i)(1 − e^{−πβTs·i})   ≈ πβT/3 for small βT
//! ```
//!
//! Source: T. Pollet, M. Van Bladel, M. Moeneclaey, "BER sensitivity of OFDM systems to carrier
//! frequency offset and Wiener phase noise," IEEE Trans. Commun. 43(2/3/4):191–193, 1995
//! (citation confirmed in REFERENCES.md item 2; this exact sum is derived here from the Wiener
//! model, and its small-βT limit πβT/3 is the form we recall from that paper — from memory).

/// Exact ICI power fraction for linewidth·symbol time `beta_t = β·N·Ts` and FFT size `n`.
pub fn phase_noise_ici_exact(beta_t: f64, n: usize) -> f64 {
    if n == 0 {
        return 0.0;
    }
    let a = std::f64::consts::PI * beta_t / n as f64; // πβTs
    let nn = n as f64;
    (1..n)
        .map(|i| (nn - i as f64) * -(-a * i as f64).exp_m1())
        .sum::<f64>()
        * 2.0
        / (nn * nn)
}

/// Small-βT approximation `πβT/3`.
pub fn phase_noise_ici_approx(beta_t: f64) -> f64 {
    std::f64::consts::PI * beta_t / 3.0
}

/// Variance of the common phase error, rad², referenced to the oscillator phase just before the
/// FFT window, for linewidth·symbol time `beta_t = β·N·Ts` and FFT size `n`.
///
/// To first order the CPE is the window mean of the phase, `φ̄ = (1/N) Σ_{n=1}^{N} φ_n`, with
/// `φ_n` the sum of `n` independent steps of variance `σ² = 2πβTs`. Then
/// `Var φ̄ = (σ²/N²) Σ_{n,m} min(n, m) = σ² (N + 1)(2N + 1) / (6N)`, which tends to `2πβT/3`
/// (derived here from the Wiener model; the `2πβT/3` limit is the form given for the CPE of a
/// free-running oscillator by A. G. Armada, "Understanding the effects of phase noise in OFDM,"
/// IEEE Trans. Broadcasting 47(2):153–159, 2001 — from memory). The arg of the mean phasor,
/// which is what a receiver measures, differs from `φ̄` only at third order.
pub fn phase_noise_cpe_variance(beta_t: f64, n: usize) -> f64 {
    if n == 0 {
        return 0.0;
    }
    let nn = n as f64;
    let step_var = 2.0 * std::f64::consts::PI * beta_t / nn;
    step_var * (nn + 1.0) * (2.0 * nn + 1.0) / (6.0 * nn)
}

/// Variance of the change of the common phase error from one symbol to the next, rad², for
/// `beta_t = β·N·Ts`, FFT size `n` and cyclic prefix `n_cp` samples: what a pilot-based CPE
/// tracker that holds the previous symbol's estimate is left with.
///
/// The two windows are `Ns = N + N_cp` samples apart, so
/// `φ̄_{k+1} − φ̄_k = (1/N) Σ_n (φ_{n+Ns} − φ_n)` and
/// `Var = (σ²/N²) Σ_{n,m} (Ns − |n − m|) = σ² (Ns − (N² − 1)/(3N))` (derived here from the
/// Wiener model, σ² = 2πβTs).
pub fn phase_noise_cpe_step_variance(beta_t: f64, n: usize, n_cp: usize) -> f64 {
    if n == 0 {
        return 0.0;
    }
    let nn = n as f64;
    let step_var = 2.0 * std::f64::consts::PI * beta_t / nn;
    step_var * ((nn + n_cp as f64) - (nn * nn - 1.0) / (3.0 * nn))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn exact_sum_equals_double_sum_and_approaches_the_limit() {
        // Independent check: 1 − (1/N²)ΣΣ e^{−a|n−m|} by a double loop; and for small βT the
        // exact value approaches πβT/3 (first-order expansion, derived in the module docs).
        let (bt, n) = (0.02, 64usize);
        let a = std::f64::consts::PI * bt / n as f64;
        let mut ps = 0.0;
        for i in 0..n {
            for j in 0..n {
                ps += (-a * (i as f64 - j as f64).abs()).exp();
            }
        }
        let direct = 1.0 - ps / (n * n) as f64;
        assert!((phase_noise_ici_exact(bt, n) - direct).abs() < 1e-12);
        let small = phase_noise_ici_exact(1e-5, 4096);
        assert!((small / phase_noise_ici_approx(1e-5) - 1.0).abs() < 1e-3);
    }

    #[test]
    fn cpe_closed_forms_equal_their_double_sums() {
        // Independent check of the two closed forms: the covariance double sums evaluated
        // directly (Wiener increments independent, variance σ² per sample — the model).
        let (bt, n, cp) = (0.03, 32usize, 5usize);
        let s2 = 2.0 * std::f64::consts::PI * bt / n as f64;
        let mut single = 0.0;
        let mut step = 0.0;
        let ns = (n + cp) as f64;
        for i in 1..=n {
            for j in 1..=n {
                single += i.min(j) as f64;
                step += ns - (i as f64 - j as f64).abs();
            }
        }
        let nn2 = (n * n) as f64;
        assert!((phase_noise_cpe_variance(bt, n) - s2 * single / nn2).abs() < 1e-12);
        assert!((phase_noise_cpe_step_variance(bt, n, cp) - s2 * step / nn2).abs() < 1e-12);
        // Large N: 2πβT/3 (Armada 2001, from memory).
        let big = phase_noise_cpe_variance(0.01, 1 << 16);
        assert!((big / (2.0 * std::f64::consts::PI * 0.01 / 3.0) - 1.0).abs() < 1e-4);
    }
}
