//! Clarke/Jakes fading statistics: autocorrelation, Doppler spectrum, Rayleigh envelope CDF,
//! level-crossing rate, average fade duration and coherence time.
//!
//! Conventions (as in `/work/shared/REFERENCES.md` item 3): 2-D isotropic scattering, vertical
//! antenna, unit-power complex gain `h` (`E|h|^2 = 1`), Rayleigh envelope `R = |h|`,
//! `rho = R_threshold / R_rms` (dimensionless, `R_rms = 1`). `fd` is the maximum Doppler shift in
//! Hz, `tau` a time lag in seconds; functions taking the product `fd_tau` use it dimensionless.
//!
//! Source status (REFERENCES.md item 3; no equation numbers were confirmed, so none are given):
//! Clarke 1968 and Jakes 1974 are from memory; Rappaport's LCR formula and the definition of
//! `rho` are confirmed; the AFD formula and the coherence-time rules are from memory. Each
//! `*_SOURCE` constant carries its status in brackets so a report can print it.

use core::f64::consts::PI;

/// Source of [`clarke_acf`], [`clarke_power_autocovariance`],
/// [`clarke_power_autocorrelation`], [`clarke_doppler_psd`], [`rayleigh_envelope_cdf`] and the
/// bisection helpers built on the ACF ([`clarke_fd_tau_at_correlation`],
/// [`clarke_coherence_time`], [`clarke_first_zero_fd_tau`]).
pub const CLARKE_JAKES_SOURCE: &str = "R. H. Clarke, \"A statistical theory of mobile-radio \
     reception,\" Bell Syst. Tech. J. 47(6), 1968; W. C. Jakes (ed.), Microwave Mobile \
     Communications, Wiley 1974 / IEEE Press 1994, ch. 1 [from memory]";

/// Source of [`level_crossing_rate`].
pub const LCR_SOURCE: &str = "T. S. Rappaport, Wireless Communications: Principles and \
     Practice, 2nd ed., Prentice Hall 2002, small-scale fading chapter, level crossing and fading \
     statistics [LCR formula and rho definition confirmed; section number from memory]";

/// Source of [`average_fade_duration`].
pub const AFD_SOURCE: &str = "T. S. Rappaport, Wireless Communications: Principles and \
     Practice, 2nd ed., Prentice Hall 2002, small-scale fading chapter, level crossing and fading \
     statistics [AFD formula from memory; consistent with AFD = CDF / LCR]";

/// Source of [`coherence_time_9_over_16pi`] and [`coherence_time_0423`].
pub const COHERENCE_TIME_SOURCE: &str = "T. S. Rappaport, Wireless Communications: Principles \
     and Practice, 2nd ed., Prentice Hall 2002, small-scale fading chapter, coherence time: \
     Tc ~ 9/(16 pi fd) and Tc ~ 0.423/fd [from memory]";

/// Upper end of the bisection bracket in `fd tau`: `J0(2 pi x)` decreases monotonically on
/// `[0, j_{1,1}/(2 pi)] = [0, 0.6098...]`, and `0.6 < 0.6098`.
const BISECTION_MAX_FD_TAU: f64 = 0.6;

/// Complex-gain autocorrelation of Clarke/Jakes fading, `E[h(t) h*(t + tau)] = J0(2 pi fd tau)`
/// (dimensionless, unit power), for Doppler `fd_hz` in Hz and lag `tau_s` in seconds.
///
/// Source: Clarke 1968; Jakes 1974, ch. 1 (from memory) — see [`CLARKE_JAKES_SOURCE`].
pub fn clarke_acf(fd_hz: f64, tau_s: f64) -> f64 {
    libm::j0(2.0 * PI * fd_hz * tau_s)
}

/// Normalised autocovariance of the power `|h|^2` under Clarke/Jakes fading,
/// `J0^2(2 pi fd tau)` (dimensionless), for `fd_hz` in Hz and `tau_s` in seconds.
///
/// Source: Clarke 1968; Jakes 1974, ch. 1 (from memory) — see [`CLARKE_JAKES_SOURCE`].
pub fn clarke_power_autocovariance(fd_hz: f64, tau_s: f64) -> f64 {
    clarke_acf(fd_hz, tau_s).powi(2)
}

/// Autocorrelation of the power `|h|^2` under Clarke/Jakes fading,
/// `E[|h(t)|^2 |h(t + tau)|^2] = 1 + J0^2(2 pi fd tau)` (dimensionless, unit power).
///
/// Source: Clarke 1968; Jakes 1974, ch. 1 (from memory) — see [`CLARKE_JAKES_SOURCE`].
pub fn clarke_power_autocorrelation(fd_hz: f64, tau_s: f64) -> f64 {
    1.0 + clarke_power_autocovariance(fd_hz, tau_s)
}

/// Classical (Jakes) Doppler power spectral density of a unit-power gain, in 1/Hz:
/// `S(f) = 1 / (pi fd sqrt(1 - (f/fd)^2))` for `|f| < fd`, and 0 for `|f| >= fd` (the
/// integrable singularity at `|f| = fd` is not represented). `f_hz` and `fd_hz` in Hz. Its
/// integral is 1 and its inverse Fourier transform is [`clarke_acf`].
///
/// Source: Clarke 1968; Jakes 1974, ch. 1 (from memory) — see [`CLARKE_JAKES_SOURCE`].
pub fn clarke_doppler_psd(fd_hz: f64, f_hz: f64) -> f64 {
    let u = f_hz / fd_hz;
    if u.abs() < 1.0 {
        1.0 / (PI * fd_hz * (1.0 - u * u).sqrt())
    } else {
        0.0
    }
}

/// Rayleigh envelope CDF, `P(R <= rho R_rms) = 1 - exp(-rho^2)` (dimensionless probability),
/// evaluated as `-expm1(-rho^2)` (accurate for small `rho`).
///
/// Source: Clarke 1968; Jakes 1974, ch. 1 (from memory); as used by Rappaport 2002 — see
/// [`CLARKE_JAKES_SOURCE`].
pub fn rayleigh_envelope_cdf(rho: f64) -> f64 {
    -(-rho * rho).exp_m1()
}

/// Envelope threshold ratio in dB, `20 log10(rho)` (an amplitude ratio; REFERENCES.md table 3a
/// column "rho dB").
pub fn envelope_ratio_db(rho: f64) -> f64 {
    20.0 * rho.log10()
}

/// Level-crossing rate of a Rayleigh envelope with the classical Doppler spectrum, in
/// positive-going crossings per second: `N_R = sqrt(2 pi) fd rho exp(-rho^2)`, for `fd_hz` in
/// Hz and `rho = R_threshold / R_rms`.
///
/// Source: T. S. Rappaport, *Wireless Communications*, 2nd ed., 2002 (formula and `rho`
/// definition confirmed) — see [`LCR_SOURCE`].
pub fn level_crossing_rate(fd_hz: f64, rho: f64) -> f64 {
    (2.0 * PI).sqrt() * fd_hz * rho * (-rho * rho).exp()
}

/// Average fade duration below `rho R_rms`, in seconds:
/// `AFD = (exp(rho^2) - 1) / (rho fd sqrt(2 pi))` `= CDF / N_R`, for `fd_hz` in Hz and
/// `rho > 0` (`rho = 0` gives NaN). Evaluated with `expm1` (accurate for small `rho`).
///
/// Source: T. S. Rappaport, *Wireless Communications*, 2nd ed., 2002 (from memory; consistent
/// with CDF / LCR) — see [`AFD_SOURCE`].
pub fn average_fade_duration(fd_hz: f64, rho: f64) -> f64 {
    (rho * rho).exp_m1() / (rho * fd_hz * (2.0 * PI).sqrt())
}

/// Smallest `fd tau >= 0` (dimensionless) at which the Clarke ACF `J0(2 pi fd tau)` equals
/// `level`, found by bisection on `[0, 0.6]` (where `J0(2 pi x)` decreases monotonically) to
/// about 1e-15. `level = 0.5` gives 0.242098, `0.9` gives 0.101960 (REFERENCES.md item 3).
///
/// Returns `None` unless `J0(2 pi 0.6) = -0.4018... <= level <= 1`.
///
/// Source: the Clarke 1968 / Jakes 1974 ACF (from memory) — see [`CLARKE_JAKES_SOURCE`].
pub fn clarke_fd_tau_at_correlation(level: f64) -> Option<f64> {
    let f = |x: f64| libm::j0(2.0 * PI * x) - level;
    let (mut lo, mut hi) = (0.0, BISECTION_MAX_FD_TAU);
    // f is decreasing: need f(lo) >= 0 >= f(hi) (rejects NaN too).
    if !(f(lo) >= 0.0 && f(hi) <= 0.0) {
        return None;
    }
    for _ in 0..200 {
        let mid = 0.5 * (lo + hi);
        if mid <= lo || mid >= hi {
            break;
        }
        if f(mid) > 0.0 {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    Some(0.5 * (lo + hi))
}

/// Coherence time in seconds for Clarke/Jakes fading defined as the smallest lag at which the
/// complex-gain ACF `J0(2 pi fd tau)` drops to `level` (e.g. 0.5 or 0.9), for `fd_hz` in Hz:
/// [`clarke_fd_tau_at_correlation`]`(level) / fd`.
///
/// Returns `None` for a `level` outside the range accepted by [`clarke_fd_tau_at_correlation`].
///
/// Source: the Clarke 1968 / Jakes 1974 ACF (from memory) — see [`CLARKE_JAKES_SOURCE`].
pub fn clarke_coherence_time(fd_hz: f64, level: f64) -> Option<f64> {
    clarke_fd_tau_at_correlation(level).map(|x| x / fd_hz)
}

/// First zero of the Clarke ACF in `fd tau` (dimensionless), `j_{0,1} / (2 pi) = 0.382740...`,
/// by bisection ([`clarke_fd_tau_at_correlation`] at level 0).
///
/// Source: the Clarke 1968 / Jakes 1974 ACF (from memory) — see [`CLARKE_JAKES_SOURCE`].
pub fn clarke_first_zero_fd_tau() -> f64 {
    clarke_fd_tau_at_correlation(0.0).unwrap_or(f64::NAN)
}

/// Rappaport's coherence-time rule `Tc ~ 9 / (16 pi fd) ~ 0.179 / fd`, in seconds, for `fd_hz`
/// in Hz.
///
/// Source: T. S. Rappaport, *Wireless Communications*, 2nd ed., 2002 (from memory) — see
/// [`COHERENCE_TIME_SOURCE`].
pub fn coherence_time_9_over_16pi(fd_hz: f64) -> f64 {
    9.0 / (16.0 * PI * fd_hz)
}

/// Rappaport's coherence-time rule `Tc ~ sqrt(9 / (16 pi)) / fd ~ 0.423 / fd` (the geometric
/// mean of the `9/(16 pi fd)` rule and `1/fd`), in seconds, for `fd_hz` in Hz.
///
/// Source: T. S. Rappaport, *Wireless Communications*, 2nd ed., 2002 (from memory) — see
/// [`COHERENCE_TIME_SOURCE`].
pub fn coherence_time_0423(fd_hz: f64) -> f64 {
    (9.0 / (16.0 * PI)).sqrt() / fd_hz
}

#[cfg(test)]
mod tests {
    //! Check values are from `/work/shared/REFERENCES.md` item 3 (tables 3a and 3b and the
    //! coherence-time line), computed there with mpmath/scipy. They print 6 significant digits,
    //! so they are compared with a relative tolerance of 1e-5 (values that are exactly 0 or
    //! printed with fixed decimals: half a unit of the last digit).
    use super::*;

    use super::super::table::{assert_rel, TABLE_REL};

    /// Midpoint rule with `n` points of `g(theta)` over `[-pi/2, pi/2]`; for integrands of
    /// period pi (as below) it converges geometrically.
    fn midpoint_half_circle(n: usize, g: impl Fn(f64) -> f64) -> f64 {
        let h = PI / n as f64;
        (0..n)
            .map(|i| g(-0.5 * PI + (i as f64 + 0.5) * h))
            .sum::<f64>()
            * h
    }

    /// `int S(f) w(f) df` over `|f| < fd` with `f = fd sin(theta)`, using the PSD function
    /// itself: `df = fd cos(theta) d theta`.
    fn psd_integral(fd: f64, w: impl Fn(f64) -> f64) -> f64 {
        midpoint_half_circle(400, |t| {
            let f = fd * t.sin();
            clarke_doppler_psd(fd, f) * w(f) * fd * t.cos()
        })
    }

    #[test]
    fn table_3a_lcr_afd_cdf() {
        // Columns rho, rho dB, N_R/fd, AFD*fd, P(R <= rho Rrms), N_R @ 100 Hz, AFD ms @ 100 Hz.
        // LCR: Rappaport 2002 (confirmed); AFD: Rappaport 2002 (from memory); CDF: Clarke 1968
        // / Jakes 1974 (from memory). Values REFERENCES.md table 3a.
        let rows = [
            (
                0.1, -20.0000, 0.248169, 0.0400944, 0.00995017, 24.8169, 0.400944,
            ),
            (
                0.3, -10.4576, 0.687266, 0.125234, 0.0860688, 68.7266, 1.25234,
            ),
            (1.0, 0.0000, 0.922137, 0.685495, 0.632121, 92.2137, 6.85495),
        ];
        for (rho, rho_db, nr, afd, cdf, nr100, afd100_ms) in rows {
            let tol_db = 0.5e-4 + 1e-9; // printed to 4 decimals
            assert!((envelope_ratio_db(rho) - rho_db).abs() <= tol_db, "rho dB");
            assert_rel(level_crossing_rate(1.0, rho), nr, TABLE_REL, "N_R/fd");
            assert_rel(average_fade_duration(1.0, rho), afd, TABLE_REL, "AFD*fd");
            assert_rel(rayleigh_envelope_cdf(rho), cdf, TABLE_REL, "CDF");
            assert_rel(
                level_crossing_rate(100.0, rho),
                nr100,
                TABLE_REL,
                "N_R 100 Hz",
            );
            assert_rel(
                average_fade_duration(100.0, rho) * 1e3,
                afd100_ms,
                TABLE_REL,
                "AFD ms 100 Hz",
            );
        }
    }

    #[test]
    fn table_3b_autocorrelation() {
        // Clarke 1968 / Jakes 1974 ch. 1 (from memory): J0 and J0^2 columns; values
        // REFERENCES.md table 3b. Evaluated both as fd = 1 Hz, tau = fd*tau s and as
        // fd = 200 Hz, tau = fd*tau / 200 s.
        let rows = [
            (0.05, 0.975478, 0.951557),
            (0.1, 0.903713, 0.816697),
            (0.2, 0.642512, 0.412821),
            (0.3, 0.290564, 0.0844276),
            (0.5, -0.304242, 0.0925633),
            (1.0, 0.220277, 0.0485219),
        ];
        for (x, j0, j0sq) in rows {
            assert_rel(clarke_acf(1.0, x), j0, TABLE_REL, "J0");
            assert_rel(clarke_acf(200.0, x / 200.0), j0, TABLE_REL, "J0 @200 Hz");
            assert_rel(clarke_power_autocovariance(1.0, x), j0sq, TABLE_REL, "J0^2");
            assert_rel(
                clarke_power_autocorrelation(1.0, x),
                1.0 + j0sq,
                TABLE_REL,
                "1 + J0^2",
            );
        }
        // Last row: first zero at fd*tau = 0.382740, where J0 = J0^2 = 0.
        let z = clarke_first_zero_fd_tau();
        assert_rel(z, 0.382740, TABLE_REL, "first zero");
        assert!(clarke_acf(1.0, z).abs() < 1e-14);
        assert!(clarke_power_autocovariance(1.0, z) < 1e-28);
        // And against the first zero of J0, j_{0,1} = 2.404825557695773 (M. Abramowitz,
        // I. A. Stegun, Handbook of Mathematical Functions, 1964, table 9.5; from memory).
        assert_rel(z, 2.404_825_557_695_773 / (2.0 * PI), 1e-13, "j01/(2 pi)");
    }

    #[test]
    fn coherence_time_line() {
        // REFERENCES.md item 3, coherence-time helpers: J0(2 pi fd tau) = 0.5 at
        // fd*tau = 0.242098, = 0.9 at 0.101960 (Clarke/Jakes ACF, from memory);
        // 9/(16 pi) = 0.179049 and sqrt(9/(16 pi)) = 0.423142 (Rappaport 2002, from memory).
        assert_rel(
            clarke_fd_tau_at_correlation(0.5).unwrap(),
            0.242098,
            TABLE_REL,
            "0.5",
        );
        assert_rel(
            clarke_fd_tau_at_correlation(0.9).unwrap(),
            0.101960,
            TABLE_REL,
            "0.9",
        );
        assert_rel(
            coherence_time_9_over_16pi(1.0),
            0.179049,
            TABLE_REL,
            "9/16pi",
        );
        assert_rel(coherence_time_0423(1.0), 0.423142, TABLE_REL, "0.423");
        // In seconds at fd = 100 Hz.
        assert_rel(
            clarke_coherence_time(100.0, 0.5).unwrap(),
            0.242098e-2,
            TABLE_REL,
            "Tc(0.5) at 100 Hz",
        );
        assert_rel(
            coherence_time_9_over_16pi(100.0),
            0.179049e-2,
            TABLE_REL,
            "s",
        );
        assert_rel(coherence_time_0423(100.0), 0.423142e-2, TABLE_REL, "s");
    }

    #[test]
    fn bisection_inverts_acf() {
        // Self-consistency of the bisection: J0 at the returned lag equals the level, the lag
        // grows as the level falls; invalid levels are rejected.
        let mut prev = -1.0;
        for k in 0..=20 {
            let level = 1.0 - 0.07 * f64::from(k);
            let x = clarke_fd_tau_at_correlation(level).unwrap();
            assert!((clarke_acf(1.0, x) - level).abs() < 1e-14, "level {level}");
            assert!(x > prev);
            prev = x;
        }
        assert!(clarke_fd_tau_at_correlation(1.0).unwrap() < 1e-15);
        assert_eq!(clarke_fd_tau_at_correlation(1.01), None);
        assert_eq!(clarke_fd_tau_at_correlation(-0.5), None);
        assert_eq!(clarke_fd_tau_at_correlation(f64::NAN), None);
        assert_eq!(clarke_coherence_time(10.0, 2.0), None);
    }

    #[test]
    fn psd_normalised_and_transforms_to_acf() {
        // Not a table lookup: the Doppler PSD (Clarke 1968 / Jakes 1974) must integrate to the
        // unit power and its cosine transform must reproduce the ACF J0(2 pi fd tau)
        // (Wiener-Khinchin), evaluated numerically from the PSD function.
        for fd in [1.0, 37.0, 500.0] {
            assert_rel(psd_integral(fd, |_| 1.0), 1.0, 1e-13, "unit power");
            for x in [0.05, 0.2, 0.5, 1.0, 3.0] {
                let tau = x / fd;
                let acf = psd_integral(fd, |f| (2.0 * PI * f * tau).cos());
                assert!(
                    (acf - clarke_acf(fd, tau)).abs() < 1e-13,
                    "fd={fd} tau={tau}: {acf} vs {}",
                    clarke_acf(fd, tau)
                );
            }
        }
        assert_eq!(clarke_doppler_psd(10.0, 10.0), 0.0);
        assert_eq!(clarke_doppler_psd(10.0, -12.0), 0.0);
        assert_rel(
            clarke_doppler_psd(10.0, 0.0),
            1.0 / (10.0 * PI),
            1e-15,
            "S(0)",
        );
    }

    #[test]
    fn lcr_from_rice_formula_and_psd() {
        // Not a table lookup: Rice's formula N_R = p_R(rho) E[max(R', 0)] with
        // p_R(r) = 2 r exp(-r^2) (Rayleigh, E R^2 = 1) and R' ~ N(0, s^2), where s^2 is the
        // per-dimension variance of dh/dt: s^2 = (1/2) (2 pi)^2 int f^2 S(f) df, integrated
        // from the PSD function (S. O. Rice, "Mathematical analysis of random noise," Bell Syst.
        // Tech. J. 1944/45; from memory). Compared with Rappaport's closed form.
        for fd in [1.0, 100.0] {
            let second_moment = psd_integral(fd, |f| f * f);
            assert_rel(second_moment, 0.5 * fd * fd, 1e-12, "E[f^2] = fd^2/2");
            let s = (0.5 * (2.0 * PI).powi(2) * second_moment).sqrt();
            for rho in [0.05f64, 0.1, 0.3, 0.7, 1.0, 2.0] {
                let pdf = 2.0 * rho * (-rho * rho).exp();
                let rice = pdf * s / (2.0 * PI).sqrt();
                assert_rel(level_crossing_rate(fd, rho), rice, 1e-11, "Rice LCR");
                // AFD = P(R <= rho) / N_R (REFERENCES.md item 3).
                assert_rel(
                    average_fade_duration(fd, rho),
                    rayleigh_envelope_cdf(rho) / level_crossing_rate(fd, rho),
                    1e-14,
                    "AFD = CDF/LCR",
                );
            }
        }
    }

    #[test]
    fn small_rho_no_cancellation() {
        // 1 - exp(-rho^2) ~ rho^2 and (exp(rho^2) - 1)/rho ~ rho for tiny rho (series of exp).
        let rho = 1e-9;
        assert_rel(rayleigh_envelope_cdf(rho), rho * rho, 1e-12, "CDF");
        assert_rel(
            average_fade_duration(1.0, rho),
            rho / (2.0 * PI).sqrt(),
            1e-12,
            "AFD",
        );
    }

    #[test]
    fn sources_are_named() {
        for s in [
            CLARKE_JAKES_SOURCE,
            LCR_SOURCE,
            AFD_SOURCE,
            COHERENCE_TIME_SOURCE,
        ] {
            assert!(s.contains("19") || s.contains("20"), "no year: {s}");
            assert!(s.contains('['), "no status tag: {s}");
        }
    }
}
