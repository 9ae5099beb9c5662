//! ICI from Wiener (random-walk) phase noise.
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
}
