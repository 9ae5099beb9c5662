//! Channel correlation models that estimator designs assume (REFERENCES items 4 and 6).
//!
//! * Frequency: an exponential power delay profile of RMS spread `τ` (continuous, untruncated)
//!   has `E[H_{k+d} H_k^*] = r_f(d) = 1/(1 + j2π τ d/N)`, `τ` in samples, `d` in bins.
//! * Time: the classical (Jakes) Doppler spectrum gives `r_t(d) = J0(2π fd Tsym d)` for `d`
//!   symbols apart, `Tsym` including the CP.
//!
//! Both are evaluated in f64 at configuration time only.

use crate::linalg::Cf64;

/// What the estimator may assume about the channel: the design model of its LMMSE filters
/// and of the per-bin estimation error it reports.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct ChannelModel {
    /// RMS delay spread of an exponential profile, s (finite, ≥ 0).
    pub rms_delay_s: f32,
    /// Maximum Doppler shift of a classical spectrum, Hz (finite, ≥ 0).
    pub doppler_hz: f32,
}

impl Default for ChannelModel {
    /// 1 µs RMS delay spread, 100 Hz Doppler: a moderate outdoor channel at 900 MHz and
    /// 120 km/h (an example design point, not a recommendation).
    fn default() -> Self {
        Self {
            rms_delay_s: 1.0e-6,
            doppler_hz: 100.0,
        }
    }
}

impl ChannelModel {
    /// True when both parameters are finite and non-negative.
    pub fn is_valid(&self) -> bool {
        self.rms_delay_s.is_finite()
            && self.rms_delay_s >= 0.0
            && self.doppler_hz.is_finite()
            && self.doppler_hz >= 0.0
    }
}

/// Frequency correlation `r_f(d) = 1/(1 + j2π τ d/N)` for `d` bins apart, `tau_samples = τ·fs`
/// and FFT size `n`.
pub fn freq_correlation(tau_samples: f64, n: usize, d: i64) -> Cf64 {
    let x = 2.0 * core::f64::consts::PI * tau_samples * d as f64 / n as f64;
    // 1/(1 + jx) = (1 − jx)/(1 + x²)
    let den = 1.0 + x * x;
    Cf64::new(1.0 / den, -x / den)
}

/// Time correlation `r_t(d) = J0(2π·fd_tsym·d)` for `d` symbols apart, `fd_tsym = fd·Tsym`.
pub fn time_correlation(fd_tsym: f64, d: i64) -> f64 {
    libm::j0(2.0 * core::f64::consts::PI * fd_tsym * d as f64)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn match_the_published_tables() {
        // REFERENCES item 4 table: Δf·τ = 0.1 → r_f = 0.716957 − 0.450477j; with τ in samples
        // and d bins, Δf·τ = τ d / N: τ = 6.4, d = 1, N = 64.
        let r = freq_correlation(6.4, 64, 1);
        assert!((r.re - 0.716957).abs() < 1e-6 && (r.im + 0.450477).abs() < 1e-6);
        // J0 at its first zero 2.404826 (Abramowitz & Stegun Table 9.5): fd·Tsym·d = 0.382740.
        assert!(time_correlation(0.382_740_0, 1).abs() < 1e-6);
        assert!((time_correlation(0.05, 0) - 1.0).abs() < 1e-15);
    }
}
