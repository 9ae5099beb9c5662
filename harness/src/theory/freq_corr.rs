//! Frequency correlation of a channel across subcarriers, for an exponential or a discrete power
//! delay profile (PDP), and the coherence bandwidth.
//!
//! Conventions (as in `/work/shared/REFERENCES.md`, conventions and item 4): the frequency
//! correlation is `r_f(dk) = E[H_{k+dk} H_k^*]` with `H_k = sum_l h_l exp(-j 2 pi k l / N)` (the
//! numpy FFT sign convention) and independent taps, so `r_f(dk) = sum_l p_l exp(-j 2 pi dk l / N)`
//! and `Im r_f < 0` for `dk > 0` (delays `>= 0`). Tap powers are linear and should sum to 1 (unit
//! channel power); they are not renormalised here, so `r_f(0) = sum p_l`. Delays are in seconds
//! and frequency offsets in Hz, or delays in samples and offsets in subcarriers on an `N`-point
//! grid, as each name says.
//!
//! Source status (REFERENCES.md item 4; no equation numbers were confirmed): the exponential
//! Fourier pair and the 0.9 / 0.5 thresholds are confirmed; the 1/50 and 1/5 rules (Rappaport)
//! and Jakes' 1/(2 pi tau_rms) are from memory. Each `*_SOURCE` constant carries its status in
//! brackets so a report can print it.

use core::f64::consts::PI;
use num_complex::Complex;

/// Source of [`exp_pdp_freq_corr`], [`exp_pdp_freq_corr_grid`] and the exact coherence
/// bandwidth [`exp_pdp_coherence_bandwidth`].
pub const EXP_PDP_SOURCE: &str = "Fourier pair exp(-tau/tau0)/tau0 <-> 1/(1 + j 2 pi f tau0) \
     for the exponential power delay profile, as in REFERENCES.md item 4 [Fourier pair \
     confirmed on a textbook exercise page; 0.9 and 0.5 thresholds confirmed as the usual \
     definitions]";

/// Source of [`discrete_pdp_freq_corr`] and [`discrete_pdp_freq_corr_grid`]: the definition
/// `r_f = E[H_{k+dk} H_k^*]` for independent taps (REFERENCES.md conventions).
pub const DISCRETE_PDP_SOURCE: &str = "definition r_f(dk) = E[H_{k+dk} H_k^*] with \
     H_k = sum_l h_l exp(-j 2 pi k l / N) and independent taps, REFERENCES.md conventions and \
     item 4 [definition; checked against a brute-force DFT ensemble]";

/// Source of [`coherence_bandwidth_rule_50`] and [`coherence_bandwidth_rule_5`].
pub const COHERENCE_BANDWIDTH_RULES_SOURCE: &str = "T. S. Rappaport, Wireless \
     Communications: Principles and Practice, 2nd ed., Prentice Hall 2002, Sec. 5.4: \
     Bc ~ 1/(50 tau_rms) for correlation >= 0.9, Bc ~ 1/(5 tau_rms) for correlation >= 0.5 \
     [constants and section from memory; thresholds confirmed]";

/// Source of [`coherence_bandwidth_jakes`].
pub const JAKES_COHERENCE_BANDWIDTH_SOURCE: &str = "W. C. Jakes (ed.), Microwave Mobile \
     Communications, Wiley 1974, ch. 1: Bc = 1/(2 pi tau_rms) for envelope correlation 0.5 \
     [from memory]";

/// Frequency correlation of the continuous, untruncated exponential PDP
/// `p(tau) = exp(-tau / tau_rms) / tau_rms` (whose rms delay spread and mean excess delay both
/// equal `tau_rms`): `r_f(df) = 1 / (1 + j 2 pi tau_rms df)` (dimensionless, complex), for
/// `tau_rms_s` in seconds and `delta_f_hz` in Hz. `Im r_f < 0` for `df > 0`;
/// `|r_f| = 1 / sqrt(1 + (2 pi tau_rms df)^2)`, and `|r_f|^2` approximates the Rayleigh
/// envelope correlation (Jakes).
///
/// Source: the exponential Fourier pair (confirmed), REFERENCES.md item 4 — see
/// [`EXP_PDP_SOURCE`].
pub fn exp_pdp_freq_corr(tau_rms_s: f64, delta_f_hz: f64) -> Complex<f64> {
    Complex::new(1.0, 2.0 * PI * tau_rms_s * delta_f_hz).inv()
}

/// Frequency correlation of the exponential PDP on an `n`-point subcarrier grid,
/// `r_f(dk) = 1 / (1 + j 2 pi tau dk / N)` (dimensionless, complex), with `tau_samples` the rms
/// delay spread in samples and `dk` the subcarrier offset. Same as [`exp_pdp_freq_corr`] with
/// `tau_rms = tau Ts` and `df = dk / (N Ts)`.
///
/// Source: the exponential Fourier pair (confirmed), REFERENCES.md item 4 — see
/// [`EXP_PDP_SOURCE`].
pub fn exp_pdp_freq_corr_grid(tau_samples: f64, dk: i64, n: usize) -> Complex<f64> {
    Complex::new(1.0, 2.0 * PI * tau_samples * dk as f64 / n as f64).inv()
}

/// Frequency correlation of a discrete PDP on an `n`-point grid (dimensionless, complex):
/// `r_f(dk) = sum_l p_l exp(-j 2 pi dk l / N)`, where `powers[l]` is the linear power of the tap
/// at delay `l` samples (zero for empty delays). The integer phase `dk l mod N` is reduced
/// exactly before the exponential.
///
/// Source: the definition of `r_f` with independent taps (REFERENCES.md conventions) — see
/// [`DISCRETE_PDP_SOURCE`].
pub fn discrete_pdp_freq_corr_grid(powers: &[f64], dk: i64, n: usize) -> Complex<f64> {
    let n_i = n as i128;
    powers
        .iter()
        .enumerate()
        .map(|(l, &p)| {
            let k = (i128::from(dk) * l as i128).rem_euclid(n_i) as f64;
            Complex::from_polar(p, -2.0 * PI * k / n as f64)
        })
        .sum()
}

/// Frequency correlation of a discrete PDP with arbitrary delays (dimensionless, complex):
/// `r_f(df) = sum_i p_i exp(-j 2 pi df tau_i)`, for `delays_s` in seconds, linear `powers` and
/// `delta_f_hz` in Hz.
///
/// Returns `None` if `delays_s` and `powers` differ in length.
///
/// Source: the definition of `r_f` with independent taps (REFERENCES.md conventions) — see
/// [`DISCRETE_PDP_SOURCE`].
pub fn discrete_pdp_freq_corr(
    delays_s: &[f64],
    powers: &[f64],
    delta_f_hz: f64,
) -> Option<Complex<f64>> {
    if delays_s.len() != powers.len() {
        return None;
    }
    Some(
        delays_s
            .iter()
            .zip(powers)
            .map(|(&tau, &p)| Complex::from_polar(p, -2.0 * PI * delta_f_hz * tau))
            .sum(),
    )
}

/// Exact coherence bandwidth of the exponential PDP, in Hz: the `df` at which
/// `|r_f(df)| = level`, `sqrt(1/level^2 - 1) / (2 pi tau_rms)`, for `tau_rms_s` in seconds.
/// Level 0.9 gives `0.0770823 / tau_rms`, level 0.5 gives `0.275664 / tau_rms`, and level
/// `sqrt(0.5)` (envelope correlation `|r_f|^2 = 0.5`) gives Jakes' `1/(2 pi tau_rms)`.
///
/// Returns `None` unless `0 < level <= 1`.
///
/// Source: closed-form inversion of the exponential Fourier pair (confirmed), REFERENCES.md
/// item 4 — see [`EXP_PDP_SOURCE`].
pub fn exp_pdp_coherence_bandwidth(tau_rms_s: f64, level: f64) -> Option<f64> {
    if !(level > 0.0 && level <= 1.0) {
        return None;
    }
    // 1/level^2 - 1 = (1 - level)(1 + level) / level^2, without cancellation near 1.
    let x = ((1.0 - level) * (1.0 + level)).sqrt() / level;
    Some(x / (2.0 * PI * tau_rms_s))
}

/// Rule-of-thumb coherence bandwidth for correlation `>= 0.9`, `1 / (50 tau_rms)`, in Hz for
/// `tau_rms_s` in seconds. For an exponential PDP it is conservative by a factor of about 3.9.
///
/// Source: T. S. Rappaport, *Wireless Communications*, 2nd ed., 2002, Sec. 5.4 (from memory)
/// — see [`COHERENCE_BANDWIDTH_RULES_SOURCE`].
pub fn coherence_bandwidth_rule_50(tau_rms_s: f64) -> f64 {
    1.0 / (50.0 * tau_rms_s)
}

/// Rule-of-thumb coherence bandwidth for correlation `>= 0.5`, `1 / (5 tau_rms)`, in Hz for
/// `tau_rms_s` in seconds. For an exponential PDP it is conservative by a factor of about 1.4.
///
/// Source: T. S. Rappaport, *Wireless Communications*, 2nd ed., 2002, Sec. 5.4 (from memory)
/// — see [`COHERENCE_BANDWIDTH_RULES_SOURCE`].
pub fn coherence_bandwidth_rule_5(tau_rms_s: f64) -> f64 {
    1.0 / (5.0 * tau_rms_s)
}

/// Jakes' coherence bandwidth for envelope correlation 0.5, `1 / (2 pi tau_rms)`, in Hz for
/// `tau_rms_s` in seconds (exact for the exponential PDP when the envelope correlation is taken
/// as `|r_f|^2`).
///
/// Source: W. C. Jakes, *Microwave Mobile Communications*, 1974, ch. 1 (from memory) — see
/// [`JAKES_COHERENCE_BANDWIDTH_SOURCE`].
pub fn coherence_bandwidth_jakes(tau_rms_s: f64) -> f64 {
    1.0 / (2.0 * PI * tau_rms_s)
}

#[cfg(test)]
mod tests {
    //! Check values are from `/work/shared/REFERENCES.md` item 4 (the `r_f` table, the exact
    //! coherence-bandwidth table and the `tau_rms = 1 us` example), computed there with
    //! mpmath/scipy. They print 6 significant digits: relative tolerance 1e-5 (the kHz example
    //! prints 6 to 7 digits: half a unit of its last decimal).
    use super::*;

    use super::super::table::{assert_rel, TABLE_REL};

    fn assert_close(got: Complex<f64>, want: Complex<f64>, tol: f64, what: &str) {
        assert!(
            (got - want).norm() <= tol,
            "{what}: got {got}, want {want}, |diff| {} > {tol}",
            (got - want).norm()
        );
    }

    #[test]
    // The table prints |r_f| = 0.707107 (= 1/sqrt 2) to 6 digits; keep the printed value.
    #[allow(clippy::approx_constant)]
    fn table_4_exponential_pdp() {
        // Exponential Fourier pair (confirmed; REFERENCES.md item 4): columns df*tau_rms,
        // Re r_f, Im r_f, |r_f|, |r_f|^2. Evaluated with tau_rms = 1 s, df = df*tau Hz, and with
        // tau_rms = 2.5 us, df = df*tau / 2.5 us.
        let rows = [
            (0.01, 0.996068, -0.0625848, 0.998032, 0.996068),
            (0.02, 0.984454, -0.12371, 0.992197, 0.984454),
            (0.05, 0.91017, -0.285938, 0.954028, 0.91017),
            (0.1, 0.716957, -0.450477, 0.846733, 0.716957),
            (0.159155, 0.5, -0.5, 0.707107, 0.5),
            (0.2, 0.387727, -0.487232, 0.622677, 0.387727),
            (0.5, 0.0919997, -0.289025, 0.303314, 0.0919997),
            (1.0, 0.0247045, -0.155223, 0.157177, 0.0247045),
        ];
        for (x, re, im, mag, mag2) in rows {
            for (tau, df) in [(1.0, x), (2.5e-6, x / 2.5e-6)] {
                let r = exp_pdp_freq_corr(tau, df);
                assert_rel(r.re, re, TABLE_REL, &format!("Re r_f({x})"));
                assert_rel(r.im, im, TABLE_REL, &format!("Im r_f({x})"));
                assert_rel(r.norm(), mag, TABLE_REL, &format!("|r_f({x})|"));
                assert_rel(r.norm_sqr(), mag2, TABLE_REL, &format!("|r_f({x})|^2"));
                // REFERENCES.md sign convention: Im r_f < 0 for df > 0.
                assert!(r.im < 0.0);
            }
        }
    }

    #[test]
    fn table_4_coherence_bandwidths() {
        // Exact coherence bandwidths for the exponential PDP (Fourier pair, confirmed) and the
        // rules of thumb (Rappaport 2002 Sec. 5.4, from memory; Jakes 1974 ch. 1, from memory);
        // values REFERENCES.md item 4, table "Exact coherence bandwidths ..." (x 1/tau_rms).
        assert_rel(
            exp_pdp_coherence_bandwidth(1.0, 0.9).unwrap(),
            0.0770823,
            TABLE_REL,
            "|r_f| = 0.9",
        );
        assert_rel(
            exp_pdp_coherence_bandwidth(1.0, 0.5).unwrap(),
            0.275664,
            TABLE_REL,
            "|r_f| = 0.5",
        );
        assert_rel(
            exp_pdp_coherence_bandwidth(1.0, 0.5f64.sqrt()).unwrap(),
            0.159155,
            TABLE_REL,
            "|r_f|^2 = 0.5",
        );
        assert_rel(coherence_bandwidth_jakes(1.0), 0.159155, TABLE_REL, "Jakes");
        assert_rel(coherence_bandwidth_rule_50(1.0), 0.02, 1e-15, "1/50");
        assert_rel(coherence_bandwidth_rule_5(1.0), 0.2, 1e-15, "1/5");
        // REFERENCES.md "surprise" 5: the rules are conservative by about 3.9 and 1.4.
        let f09 = exp_pdp_coherence_bandwidth(1.0, 0.9).unwrap() / coherence_bandwidth_rule_50(1.0);
        let f05 = exp_pdp_coherence_bandwidth(1.0, 0.5).unwrap() / coherence_bandwidth_rule_5(1.0);
        assert!((f09 - 3.9).abs() < 0.05, "0.9 factor {f09}");
        assert!((f05 - 1.4).abs() < 0.05, "0.5 factor {f05}");
        // The correlation at the returned bandwidth is the level (inversion check).
        for level in [0.1, 0.5, 0.9, 0.99, 0.999_999] {
            let bc = exp_pdp_coherence_bandwidth(3e-7, level).unwrap();
            assert_rel(
                exp_pdp_freq_corr(3e-7, bc).norm(),
                level,
                1e-13,
                "inversion",
            );
        }
        assert_eq!(exp_pdp_coherence_bandwidth(1.0, 1.0), Some(0.0));
        assert_eq!(exp_pdp_coherence_bandwidth(1.0, 0.0), None);
        assert_eq!(exp_pdp_coherence_bandwidth(1.0, 1.5), None);
        assert_eq!(exp_pdp_coherence_bandwidth(1.0, f64::NAN), None);
    }

    #[test]
    fn example_tau_rms_1us() {
        // REFERENCES.md item 4 example (Fourier pair, confirmed; Rappaport rules, from memory):
        // tau_rms = 1 us: |r_f| = 0.9 at 77.0823 kHz, 0.5 at 275.6644 kHz; rules 20 and 200 kHz.
        let tau = 1e-6;
        let tol_khz = 0.5e-4 + 1e-9;
        let b09 = exp_pdp_coherence_bandwidth(tau, 0.9).unwrap() / 1e3;
        let b05 = exp_pdp_coherence_bandwidth(tau, 0.5).unwrap() / 1e3;
        assert!((b09 - 77.0823).abs() <= tol_khz, "0.9: {b09} kHz");
        assert!((b05 - 275.6644).abs() <= tol_khz, "0.5: {b05} kHz");
        assert_rel(coherence_bandwidth_rule_50(tau), 20e3, 1e-12, "20 kHz");
        assert_rel(coherence_bandwidth_rule_5(tau), 200e3, 1e-12, "200 kHz");
    }

    #[test]
    fn grid_form_matches_continuous_form() {
        // REFERENCES.md item 4: on an N-point grid r_f(dk) = 1/(1 + j 2 pi tau dk/N), which is
        // the continuous form with tau_rms = tau Ts and df = dk/(N Ts). Ts = 50 ns (20 MHz).
        let ts = 50e-9;
        for (tau, n) in [(1.0, 64usize), (4.0, 64), (2.5, 256)] {
            for dk in [-7i64, -1, 0, 1, 2, 8, 33] {
                let grid = exp_pdp_freq_corr_grid(tau, dk, n);
                let cont = exp_pdp_freq_corr(tau * ts, dk as f64 / (n as f64 * ts));
                assert_close(grid, cont, 1e-14, "grid vs continuous");
            }
        }
        // Conjugate symmetry r_f(-dk) = r_f(dk)^* (definition of r_f).
        let a = exp_pdp_freq_corr_grid(4.0, 3, 64);
        let b = exp_pdp_freq_corr_grid(4.0, -3, 64);
        assert_close(a, b.conj(), 1e-15, "r_f(-dk) = r_f(dk)^*");
    }

    #[test]
    fn discrete_sum_approaches_exponential_closed_form() {
        // Not a table lookup: discretise p(tau) = exp(-tau/tau_rms)/tau_rms into bins of width
        // h = tau_rms / 10^4 (bin power = exact integral, delay at the bin midpoint), truncated
        // at 40 tau_rms, and sum the taps; the midpoint error is about (2 pi df h)^2 / 24
        // relative, 1.6e-8 at df*tau_rms = 1. Checks the closed form (exponential Fourier pair, REFERENCES.md item 4) and its
        // sign against the tap-sum definition.
        let tau_rms = 1e-6;
        let bins = 400_000;
        let h = 40.0 * tau_rms / f64::from(bins);
        let q = (-h / tau_rms).exp();
        let mut delays = Vec::with_capacity(bins as usize);
        let mut powers = Vec::with_capacity(bins as usize);
        let mut start = 1.0; // exp(-i h / tau_rms)
        for i in 0..bins {
            delays.push((f64::from(i) + 0.5) * h);
            powers.push(start * (1.0 - q));
            start *= q;
        }
        for x in [0.01, 0.1, 0.159155, 0.5, 1.0] {
            let df = x / tau_rms;
            let sum = discrete_pdp_freq_corr(&delays, &powers, df).unwrap();
            let closed = exp_pdp_freq_corr(tau_rms, df);
            assert_close(sum, closed, 5e-8, &format!("df*tau = {x}"));
        }
        assert_eq!(discrete_pdp_freq_corr(&[0.0, 1e-6], &[1.0], 1e3), None);
    }

    /// Brute-force `E[H_{k+dk} H_k^*]` with `H_k = sum_l h_l exp(-j 2 pi k l / N)` (naive DFT,
    /// numpy sign) over the ensemble `h_l = sqrt(p_l) j^{a_l}`, `a_l` in {0, 1, 2, 3}, all
    /// combinations equally likely: exactly `E[h_l h_m^*] = p_l delta_lm` (independent taps).
    fn brute_force_freq_corr(powers: &[f64], k: usize, dk: i64, n: usize) -> Complex<f64> {
        let taps = powers.len();
        let combos = 4usize.pow(taps as u32);
        let units = [
            Complex::new(1.0, 0.0),
            Complex::new(0.0, 1.0),
            Complex::new(-1.0, 0.0),
            Complex::new(0.0, -1.0),
        ];
        let dft = |h: &[Complex<f64>], bin: i64| -> Complex<f64> {
            h.iter()
                .enumerate()
                .map(|(l, &hl)| {
                    let ang = -2.0 * PI * (bin as f64) * (l as f64) / n as f64;
                    hl * Complex::from_polar(1.0, ang)
                })
                .sum()
        };
        let mut acc = Complex::new(0.0, 0.0);
        for c in 0..combos {
            let h: Vec<Complex<f64>> = (0..taps)
                .map(|l| units[(c >> (2 * l)) & 3] * powers[l].sqrt())
                .collect();
            acc += dft(&h, k as i64 + dk) * dft(&h, k as i64).conj();
        }
        acc / combos as f64
    }

    #[test]
    fn tap_sum_matches_brute_force_dft_ensemble() {
        // Not a table lookup: the tap-sum form against E[H_{k+dk} H_k^*] computed by brute
        // force from its definition (REFERENCES.md conventions: numpy FFT sign, Im r_f < 0 for
        // dk > 0). Sparse profile with empty delays.
        let powers = [0.5, 0.0, 0.3, 0.0, 0.0, 0.15, 0.05];
        let n = 64;
        for k in [0usize, 5, 40] {
            for dk in [-3i64, 0, 1, 2, 9] {
                let want = brute_force_freq_corr(&powers, k, dk, n);
                let got = discrete_pdp_freq_corr_grid(&powers, dk, n);
                assert_close(got, want, 1e-13, &format!("k={k} dk={dk}"));
            }
        }
        assert!(discrete_pdp_freq_corr_grid(&powers, 1, n).im < 0.0);
        // Seconds/Hz version with delays l Ts and df = dk/(N Ts): same values.
        let ts = 1.0 / 20e6;
        let delays: Vec<f64> = (0..powers.len()).map(|l| l as f64 * ts).collect();
        for dk in [-3i64, 1, 2, 9] {
            let df = dk as f64 / (n as f64 * ts);
            let a = discrete_pdp_freq_corr(&delays, &powers, df).unwrap();
            let b = discrete_pdp_freq_corr_grid(&powers, dk, n);
            assert_close(a, b, 1e-13, "seconds vs grid");
        }
        // Periodic in dk with period N (integer delays), exactly, thanks to the reduction.
        let a = discrete_pdp_freq_corr_grid(&powers, 5, n);
        let b = discrete_pdp_freq_corr_grid(&powers, 5 + 3 * n as i64, n);
        assert_eq!(a, b);
    }

    #[test]
    fn sources_are_named() {
        for s in [
            EXP_PDP_SOURCE,
            DISCRETE_PDP_SOURCE,
            COHERENCE_BANDWIDTH_RULES_SOURCE,
            JAKES_COHERENCE_BANDWIDTH_SOURCE,
        ] {
            assert!(s.contains('['), "no status tag: {s}");
        }
        assert!(COHERENCE_BANDWIDTH_RULES_SOURCE.contains("2002"));
        assert!(JAKES_COHERENCE_BANDWIDTH_SOURCE.contains("1974"));
    }
}
