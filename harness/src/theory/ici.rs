//! Inter-carrier interference (ICI) closed forms: Doppler spread with the classical
//! (Clarke/Jakes) spectrum, and a constant carrier frequency offset (CFO).
//!
//! Conventions (as in `/work/shared/REFERENCES.md` items 1 and 2): complex baseband, unit
//! channel power, every subcarrier loaded with independent unit-power zero-mean data. `N` is the
//! FFT size, `T = N Ts` the useful symbol time without the cyclic prefix, `fd` the maximum
//! Doppler shift, so `fd_t = fd T` is dimensionless. The CFO `eps` is measured in subcarrier
//! spacings `1/T`. All powers are fractions of the received power per subcarrier (dimensionless);
//! SIR and SNR arguments are linear power ratios unless the name says `db`; phases are radians.
//!
//! Source status (REFERENCES.md items 1 and 2; no equation numbers were confirmed, so none are
//! given): the Russell & Stüber, Li & Cimini, Moose and Pollet citations are confirmed, their
//! formulas are from memory and verified numerically there; the Shu et al. one-third law is
//! confirmed from the abstracts. Each `*_SOURCE` constant carries its status in brackets so a
//! report can print it.

use core::f64::consts::{LN_10, PI};
use num_complex::Complex;

/// Source of [`doppler_ici_exact`], [`doppler_signal_power_exact`] and [`doppler_sir_exact`]:
/// the exact finite J0 sum for the classical Doppler spectrum.
pub const DOPPLER_ICI_SOURCE: &str = "M. Russell, G. L. St\u{fc}ber, \"Interchannel interference \
     analysis of OFDM in a mobile environment,\" Proc. IEEE VTC'95, Chicago, pp. 820\u{2013}824, \
     1995 [citation confirmed; formula form from memory, verified numerically]; restated in \
     G. L. St\u{fc}ber, Principles of Mobile Communication, Kluwer/Springer, OFDM chapter \
     [from memory]";

/// Source of [`doppler_ici_limit`] and [`doppler_signal_power_limit`]: the `N -> inf`
/// (continuous-time) limit of the Russell & Stüber sum.
pub const DOPPLER_ICI_LIMIT_SOURCE: &str = "N -> inf limit of the sum in M. Russell, \
     G. L. St\u{fc}ber, Proc. IEEE VTC'95, pp. 820\u{2013}824, 1995: P_S = 2 int_0^1 (1-x) \
     J0(2 pi fdT x) dx = 1F2(1/2; 3/2, 2; -(pi fdT)^2) [derived in REFERENCES.md item 1, not a \
     published equation; checked against the finite sum at large N]";

/// Source of [`doppler_ici_approx_24`]: small-`fdT` expansion `(2 pi fdT)^2 / 24` for the
/// classical spectrum.
pub const DOPPLER_ICI_APPROX_SOURCE: &str = "follows from the derivation in Y. Li, L. J. Cimini \
     Jr., \"Bounds on the interchannel interference of OFDM in time-varying impairments,\" IEEE \
     Trans. Commun. 49(3):401\u{2013}404, Mar. 2001, with E[f^2] = fd^2/2 for the classical \
     spectrum [citation confirmed; not confirmed to appear in the paper, re-derived in \
     REFERENCES.md item 1]";

/// Source of [`doppler_ici_bound_12`]: the spectrum-free bound `(2 pi fdT)^2 / 12`.
pub const DOPPLER_ICI_BOUND_SOURCE: &str = "Y. Li, L. J. Cimini Jr., \"Bounds on the \
     interchannel interference of OFDM in time-varying impairments,\" IEEE Trans. Commun. \
     49(3):401\u{2013}404, Mar. 2001 [citation confirmed; bound from memory, re-derived in \
     REFERENCES.md item 1]";

/// Source of the CFO leakage coefficients [`cfo_s`], [`cfo_s0_power`], the exact CFO ICI
/// ([`cfo_ici_exact`], [`cfo_ici_parseval`]), its `N -> inf` limit [`cfo_ici_limit`], the SIR
/// [`cfo_sir_exact`] and the common phase [`cfo_common_phase`].
pub const CFO_LEAKAGE_SOURCE: &str = "P. H. Moose, \"A technique for orthogonal frequency \
     division multiplexing frequency offset correction,\" IEEE Trans. Commun. \
     42(10):2908\u{2013}2914, Oct. 1994 [citation confirmed; leakage form S_m from memory, \
     verified numerically against a brute-force DFT]";

/// Source of [`cfo_ici_small_eps`]: the ICI power is one third of the squared normalised
/// offset, `(pi eps)^2 / 3` with `eps` in subcarrier spacings.
pub const CFO_ICI_SMALL_EPS_SOURCE: &str = "F. Shu et al., \"A simple formula for ICI caused by \
     single frequency offset in wireless OFDM system,\" J. Applied Sciences (Shanghai) \
     24(6):551\u{2013}554, 2006, and \"Proof of a simple formula ...\", ISPACS 2007 [abstracts \
     confirmed; normalisation eps in subcarrier spacings verified numerically]";

/// Source of [`cfo_ici_moose_bound`] and [`cfo_sir_moose_db`].
pub const MOOSE_BOUND_SOURCE: &str = "P. H. Moose, IEEE Trans. Commun. \
     42(10):2908\u{2013}2914, Oct. 1994: P_ICI <= 0.5947 sin^2(pi eps), |eps| <= 1/2 [citation \
     confirmed; constant from memory, re-derived in REFERENCES.md item 2 as 1 - 4/pi^2]";

/// Source of [`cfo_degradation_pollet_db`] (and the exact loss [`cfo_degradation_exact_db`]
/// it approximates).
pub const POLLET_SOURCE: &str = "T. Pollet, M. Van Bladel, M. Moeneclaey, \"BER sensitivity of \
     OFDM systems to carrier frequency offset and Wiener phase noise,\" IEEE Trans. Commun. \
     43(2/3/4):191\u{2013}193, 1995 [citation confirmed; degradation formula from memory, \
     verified numerically against the exact SINR for small loss]";

/// Moose's ICI-bound constant as it is usually quoted, `0.5947` (REFERENCES.md item 2: from
/// memory). [`cfo_ici_moose_bound`] uses the exact value [`MOOSE_CONSTANT`] instead.
pub const MOOSE_CONSTANT_ROUNDED: f64 = 0.5947;

/// Exact value of Moose's ICI-bound constant, `1 - 4/pi^2 = 0.594715...` (dimensionless): the
/// largest value over `|eps| <= 1/2` of `sum_{m != 0} sin^2(pi eps) / (pi^2 (m + eps)^2) /
/// sin^2(pi eps)`, reached at `eps = 1/2` (REFERENCES.md item 2, re-derivation of Moose 1994;
/// citation confirmed, constant from memory).
pub const MOOSE_CONSTANT: f64 = 1.0 - 4.0 / (PI * PI);

/// Number of Gauss–Legendre nodes per panel for the numerical `N -> inf` Doppler integral.
const GL_NODES: usize = 20;

/// Above this `pi fdT`, [`doppler_ici_limit`] integrates numerically instead of summing the
/// 1F2 series (the alternating series starts to lose digits for large arguments).
const SERIES_MAX_PI_FDT: f64 = 2.0;

/// `1 - J0(x)` without cancellation for small `|x|` (power series
/// `sum_{k>=1} (-1)^(k+1) (x^2/4)^k / (k!)^2` for `|x| < 2`, `1 - libm::j0(x)` otherwise).
fn one_minus_j0(x: f64) -> f64 {
    if x.abs() >= 2.0 {
        return 1.0 - libm::j0(x);
    }
    let q = 0.25 * x * x;
    let mut term = 1.0;
    let mut sum = 0.0;
    for k in 1..40 {
        let kf = f64::from(k);
        term *= -q / (kf * kf);
        sum -= term;
        if term.abs() <= 1e-18 * sum.abs() {
            break;
        }
    }
    sum
}

/// `sin(pi x)` with exact zeros at integers (argument reduced to `[-1/2, 1/2]` first).
fn sin_pi(x: f64) -> f64 {
    let r = x.round();
    let s = (PI * (x - r)).sin();
    if r.rem_euclid(2.0) == 0.0 {
        s
    } else {
        -s
    }
}

/// Dirichlet kernel `D(x) = sin(pi x) / (N sin(pi x / N))` at `x = m + eps`, with its limit
/// `+-1` where `x / N` is an integer. `m` and `eps` are kept apart so that a tiny `eps` is not
/// rounded away in `m + eps`: with `m = qN + r`, `0 <= r < N`, `sin(pi x) = (-1)^m sin(pi eps)`
/// and `sin(pi x / N) = (-1)^q sin(pi (r + eps) / N)`. `n = 0` gives NaN.
fn dirichlet(m: i64, eps: f64, n: usize) -> f64 {
    if n == 0 {
        return f64::NAN;
    }
    let n_i = n as i64;
    let nf = n as f64;
    let (q, r) = (m.div_euclid(n_i), m.rem_euclid(n_i));
    let den = nf * sin_pi((r as f64 + eps) / nf);
    if den == 0.0 {
        // x = kN (eps is then an integer, so x is exact): the limit is
        // cos(pi x) / cos(pi x / N) = (-1)^(k (N - 1)).
        let k = ((m as f64 + eps) / nf).round();
        if (k * (nf - 1.0)).rem_euclid(2.0) == 0.0 {
            1.0
        } else {
            -1.0
        }
    } else if (m + q).rem_euclid(2) == 0 {
        sin_pi(eps) / den
    } else {
        -sin_pi(eps) / den
    }
}

/// `1 - sinc(x)` with `sinc(x) = sin(pi x)/(pi x)`, without cancellation for small `|x|`.
fn one_minus_sinc(x: f64) -> f64 {
    let y = PI * x;
    if y.abs() >= 1.0 {
        return 1.0 - y.sin() / y;
    }
    // sum_{k>=1} (-1)^(k+1) y^(2k) / (2k+1)!
    let y2 = y * y;
    let mut term = 1.0;
    let mut sum = 0.0;
    for k in 1..30 {
        let kf = f64::from(k);
        term *= -y2 / ((2.0 * kf) * (2.0 * kf + 1.0));
        sum -= term;
        if term.abs() <= 1e-18 * sum.abs() {
            break;
        }
    }
    sum
}

/// Signal-to-interference ratio (linear) from an ICI fraction `p_ici` of a unit total power:
/// `(1 - p_ici) / p_ici`. This is how REFERENCES.md item 1 (table 1b) turns each ICI
/// column, including the `/24` approximation and the `/12` bound, into an SIR.
pub fn sir_from_ici(p_ici: f64) -> f64 {
    (1.0 - p_ici) / p_ici
}

/// SIR in dB from an ICI fraction of a unit total power: `10 log10((1 - p_ici) / p_ici)`.
pub fn sir_db_from_ici(p_ici: f64) -> f64 {
    10.0 * sir_from_ici(p_ici).log10()
}

/// Exact Doppler ICI power for the classical (Jakes) spectrum, as a fraction of the received
/// power per subcarrier (dimensionless), for normalised Doppler `fd_t = fd T` and FFT size `n`:
///
/// `P_ICI = (2/N^2) sum_{i=1}^{N-1} (N - i) [1 - J0(2 pi fdT i / N)]`,
///
/// the cancellation-free form (each `1 - J0` is itself evaluated without cancellation). The
/// receiver's one-tap gain is the channel averaged over the FFT window; the channel changes every
/// sample. `n = 1` gives 0; `n = 0` gives NaN.
///
/// Source: M. Russell, G. L. Stüber, Proc. IEEE VTC'95, pp. 820–824, 1995 (citation
/// confirmed; formula form from memory, verified numerically) — see [`DOPPLER_ICI_SOURCE`].
pub fn doppler_ici_exact(fd_t: f64, n: usize) -> f64 {
    let nf = n as f64;
    let w = 2.0 * PI * fd_t / nf;
    let sum: f64 = (1..n)
        .map(|i| (n - i) as f64 * one_minus_j0(w * i as f64))
        .sum();
    2.0 * sum / (nf * nf)
}

/// Exact wanted-signal power `P_S = 1 - P_ICI` under the classical Doppler spectrum
/// (dimensionless fraction of the received power), i.e.
/// `(1/N^2) [N + 2 sum_{i=1}^{N-1} (N - i) J0(2 pi fdT i / N)]`.
///
/// Source: Russell & Stüber 1995 (citation confirmed; formula form from memory, verified
/// numerically) — see [`DOPPLER_ICI_SOURCE`].
pub fn doppler_signal_power_exact(fd_t: f64, n: usize) -> f64 {
    1.0 - doppler_ici_exact(fd_t, n)
}

/// Exact Doppler signal-to-ICI ratio `P_S / P_ICI` (linear) for the classical spectrum.
///
/// Source: Russell & Stüber 1995 (citation confirmed; formula form from memory, verified
/// numerically) — see [`DOPPLER_ICI_SOURCE`].
pub fn doppler_sir_exact(fd_t: f64, n: usize) -> f64 {
    sir_from_ici(doppler_ici_exact(fd_t, n))
}

/// Exact Doppler SIR in dB, `10 log10(P_S / P_ICI)`, for the classical spectrum.
///
/// Source: Russell & Stüber 1995 (citation confirmed; formula form from memory, verified
/// numerically) — see [`DOPPLER_ICI_SOURCE`].
pub fn doppler_sir_exact_db(fd_t: f64, n: usize) -> f64 {
    sir_db_from_ici(doppler_ici_exact(fd_t, n))
}

/// `P_ICI` of the `N -> inf` limit by the 1F2 power series, cancellation-free:
/// `P_ICI = -sum_{k>=1} z^k / ((2k+1)(k+1)(k!)^2)`, `z = -(pi fdT)^2`.
fn doppler_ici_limit_series(fd_t: f64) -> f64 {
    let z = -(PI * fd_t).powi(2);
    let mut term = 1.0; // t_0
    let mut sum = 0.0;
    for k in 1..200 {
        let kf = f64::from(k);
        // t_k / t_{k-1} = z (2k - 1) / ((2k + 1)(k + 1) k)
        term *= z * (2.0 * kf - 1.0) / ((2.0 * kf + 1.0) * (kf + 1.0) * kf);
        sum -= term;
        if term.abs() <= 1e-18 * sum.abs() {
            break;
        }
    }
    sum
}

/// Nodes and weights of the `GL_NODES`-point Gauss–Legendre rule on `[-1, 1]`, by Newton
/// iteration on the Legendre polynomial (three-term recurrence).
fn gauss_legendre() -> [(f64, f64); GL_NODES] {
    let mut rule = [(0.0, 0.0); GL_NODES];
    let n = GL_NODES;
    let nf = n as f64;
    for i in 0..n / 2 {
        let mut x = (PI * (i as f64 + 0.75) / (nf + 0.5)).cos();
        let mut dp = 1.0;
        for _ in 0..100 {
            let (mut p0, mut p1) = (1.0, x);
            for k in 2..=n {
                let kf = k as f64;
                let p2 = ((2.0 * kf - 1.0) * x * p1 - (kf - 1.0) * p0) / kf;
                p0 = p1;
                p1 = p2;
            }
            dp = nf * (x * p1 - p0) / (x * x - 1.0);
            let dx = p1 / dp;
            x -= dx;
            if dx.abs() < 1e-16 {
                break;
            }
        }
        let w = 2.0 / ((1.0 - x * x) * dp * dp);
        rule[i] = (x, w);
        rule[n - 1 - i] = (-x, w);
    }
    rule
}

/// `P_ICI` of the `N -> inf` limit by composite Gauss–Legendre quadrature of
/// `2 int_0^1 (1 - x) [1 - J0(2 pi fdT x)] dx`, with enough panels to resolve the oscillation.
fn doppler_ici_limit_integral(fd_t: f64) -> f64 {
    let a = 2.0 * PI * fd_t.abs();
    let panels = (a / 2.0).ceil().max(1.0) as usize + 1;
    let h = 1.0 / panels as f64;
    let rule = gauss_legendre();
    let mut total = 0.0;
    for p in 0..panels {
        let mid = (p as f64 + 0.5) * h;
        let panel: f64 = rule
            .iter()
            .map(|&(t, w)| {
                let x = mid + 0.5 * h * t;
                w * (1.0 - x) * one_minus_j0(a * x)
            })
            .sum();
        total += 0.5 * h * panel;
    }
    2.0 * total
}

/// Doppler ICI power in the limit `N -> inf` (continuous time) for the classical spectrum
/// (dimensionless fraction of the received power):
///
/// `P_ICI = 1 - 1F2(1/2; 3/2, 2; -(pi fdT)^2) = 2 int_0^1 (1 - x) [1 - J0(2 pi fdT x)] dx`.
///
/// For `pi fdT <= 2` this sums the 1F2 power series without its leading 1 (no cancellation);
/// above, where the alternating series would lose digits, it integrates numerically with a
/// 20-point Gauss–Legendre rule on panels no wider than about 2/(2 pi fdT). The two agree to
/// about 1e-14 where both are used (unit test).
///
/// Source: limit of Russell & Stüber 1995, derived in REFERENCES.md item 1 (not a published
/// equation; checked here against the finite sum at large `N`) — see
/// [`DOPPLER_ICI_LIMIT_SOURCE`].
pub fn doppler_ici_limit(fd_t: f64) -> f64 {
    if PI * fd_t.abs() <= SERIES_MAX_PI_FDT {
        doppler_ici_limit_series(fd_t)
    } else {
        doppler_ici_limit_integral(fd_t)
    }
}

/// Wanted-signal power in the limit `N -> inf`, `P_S = 1F2(1/2; 3/2, 2; -(pi fdT)^2)`
/// (dimensionless) — `1 - `[`doppler_ici_limit`].
///
/// Source: limit of Russell & Stüber 1995, derived in REFERENCES.md item 1 — see
/// [`DOPPLER_ICI_LIMIT_SOURCE`].
pub fn doppler_signal_power_limit(fd_t: f64) -> f64 {
    1.0 - doppler_ici_limit(fd_t)
}

/// Small-`fdT` approximation of the Doppler ICI for the classical spectrum,
/// `(2 pi fdT)^2 / 24` (dimensionless; the mean-square Doppler of the Jakes spectrum is
/// `fd^2 / 2`). Independent of `N`.
///
/// Source: follows from the Li & Cimini 2001 derivation (citation confirmed; not confirmed to
/// appear in the paper, re-derived in REFERENCES.md item 1) — see
/// [`DOPPLER_ICI_APPROX_SOURCE`].
pub fn doppler_ici_approx_24(fd_t: f64) -> f64 {
    (2.0 * PI * fd_t).powi(2) / 24.0
}

/// Li & Cimini upper bound on the Doppler ICI for *any* Doppler spectrum confined to
/// `|f| <= fd`: `P_ICI <= (2 pi fdT)^2 / 12` (dimensionless). Independent of `N`.
///
/// Source: Y. Li, L. J. Cimini Jr., IEEE Trans. Commun. 49(3):401–404, 2001 (citation
/// confirmed; bound from memory, re-derived in REFERENCES.md item 1) — see
/// [`DOPPLER_ICI_BOUND_SOURCE`].
pub fn doppler_ici_bound_12(fd_t: f64) -> f64 {
    (2.0 * PI * fd_t).powi(2) / 12.0
}

/// CFO leakage coefficient `S_m` (dimensionless, complex): the gain from subcarrier `k + m` into
/// subcarrier `k` for a CFO of `eps` subcarrier spacings and FFT size `n`,
///
/// `S_m = [sin(pi (m + eps)) / (N sin(pi (m + eps)/N))] exp(j pi (m + eps)(N - 1)/N)`,
///
/// so that `Y_k = S_0 H_k X_k + sum_{l != k} S_{l-k} H_l X_l + W_k` for
/// `r(n) = s(n) exp(j 2 pi eps n / N)`. The phase is referenced to the first sample of the FFT
/// window. Equivalently, `S_m` is bin `-m (mod N)` of `DFT(exp(j 2 pi eps n / N)) / N`.
///
/// Source: Moose 1994 (citation confirmed; form from memory, verified numerically against a
/// brute-force DFT) — see [`CFO_LEAKAGE_SOURCE`].
pub fn cfo_s(m: i64, eps: f64, n: usize) -> Complex<f64> {
    let x = m as f64 + eps;
    let nf = n as f64;
    Complex::from_polar(1.0, PI * x * (nf - 1.0) / nf) * dirichlet(m, eps, n)
}

/// Power of the wanted term under a CFO, `|S_0|^2 = [sin(pi eps) / (N sin(pi eps / N))]^2`
/// (dimensionless; 1 at `eps = 0`, tends to `sinc^2(eps)` as `N -> inf`).
///
/// Source: Moose 1994 (citation confirmed; form from memory, verified numerically) — see
/// [`CFO_LEAKAGE_SOURCE`].
pub fn cfo_s0_power(eps: f64, n: usize) -> f64 {
    dirichlet(0, eps, n).powi(2)
}

/// Wanted-term power under a CFO in the limit `N -> inf`, `sinc^2(eps)` with
/// `sinc(x) = sin(pi x)/(pi x)` (dimensionless).
///
/// Source: limit of Moose 1994's `|S_0|^2` (REFERENCES.md item 2) — see
/// [`CFO_LEAKAGE_SOURCE`].
pub fn cfo_s0_power_limit(eps: f64) -> f64 {
    let s = 1.0 - one_minus_sinc(eps);
    s * s
}

/// Exact CFO ICI power with all `N` subcarriers loaded (unit power, independent data,
/// `|H| = 1`), as a fraction of the received power (dimensionless):
/// `P_ICI = sum_{m=1}^{N-1} |S_m|^2`, summed term by term (no cancellation; `O(N)`).
/// Equal to [`cfo_ici_parseval`] by Parseval.
///
/// Source: Moose 1994 (citation confirmed; form from memory, verified numerically) — see
/// [`CFO_LEAKAGE_SOURCE`].
pub fn cfo_ici_exact(eps: f64, n: usize) -> f64 {
    (1..n as i64).map(|m| dirichlet(m, eps, n).powi(2)).sum()
}

/// Exact CFO ICI power by Parseval, `1 - |S_0|^2` (dimensionless; `O(1)`, but loses relative
/// precision for very small `eps` because of the subtraction — prefer [`cfo_ici_exact`] there).
///
/// Source: Moose 1994 (citation confirmed; form from memory, verified numerically) — see
/// [`CFO_LEAKAGE_SOURCE`].
pub fn cfo_ici_parseval(eps: f64, n: usize) -> f64 {
    1.0 - cfo_s0_power(eps, n)
}

/// CFO ICI power in the limit `N -> inf`, `1 - sinc^2(eps)` (dimensionless), evaluated as
/// `(1 - sinc)(1 + sinc)` with `1 - sinc` from its power series for small `eps` (no
/// cancellation).
///
/// Source: limit of Moose 1994 (REFERENCES.md item 2, via
/// `sum_m 1/(m + eps)^2 = pi^2 / sin^2(pi eps)`) — see [`CFO_LEAKAGE_SOURCE`].
pub fn cfo_ici_limit(eps: f64) -> f64 {
    let d = one_minus_sinc(eps);
    d * (2.0 - d)
}

/// Small-offset CFO ICI, `(pi eps)^2 / 3 ~ 3.29 eps^2` (dimensionless): "one third of the
/// squared normalised offset", stated for `|eps| <= 0.2`.
///
/// Source: F. Shu et al. 2006 / ISPACS 2007 (abstracts confirmed) — see
/// [`CFO_ICI_SMALL_EPS_SOURCE`].
pub fn cfo_ici_small_eps(eps: f64) -> f64 {
    (PI * eps).powi(2) / 3.0
}

/// Moose's upper bound on the CFO ICI, `0.5947 sin^2(pi eps)` for `|eps| <= 1/2`
/// (dimensionless), evaluated with the exact constant [`MOOSE_CONSTANT`] `= 1 - 4/pi^2` (the
/// REFERENCES.md table 2 column uses the exact constant; the rounded 0.5947 differs by 2.6e-5
/// relative). About 2.5 dB above the exact ICI for small `eps`.
///
/// Source: P. H. Moose, IEEE Trans. Commun. 42(10):2908–2914, 1994 (citation confirmed;
/// constant from memory, re-derived as `1 - 4/pi^2`) — see [`MOOSE_BOUND_SOURCE`].
pub fn cfo_ici_moose_bound(eps: f64) -> f64 {
    MOOSE_CONSTANT * sin_pi(eps).powi(2)
}

/// Exact CFO signal-to-ICI ratio `|S_0|^2 / P_ICI` (linear), with [`cfo_ici_exact`].
///
/// Source: Moose 1994 (citation confirmed; form from memory, verified numerically) — see
/// [`CFO_LEAKAGE_SOURCE`].
pub fn cfo_sir_exact(eps: f64, n: usize) -> f64 {
    cfo_s0_power(eps, n) / cfo_ici_exact(eps, n)
}

/// Exact CFO SIR in dB, `10 log10(|S_0|^2 / P_ICI)`.
///
/// Source: Moose 1994 (citation confirmed; form from memory, verified numerically) — see
/// [`CFO_LEAKAGE_SOURCE`].
pub fn cfo_sir_exact_db(eps: f64, n: usize) -> f64 {
    10.0 * cfo_sir_exact(eps, n).log10()
}

/// Pessimistic CFO SIR in dB from Moose's bound: `10 log10(|S_0|^2 / bound)`, with the exact
/// `|S_0|^2` for FFT size `n` and [`cfo_ici_moose_bound`] (as in REFERENCES.md table 2,
/// column "SIR Moose-bound dB").
///
/// Source: Moose 1994 (citation confirmed; constant from memory, re-derived) — see
/// [`MOOSE_BOUND_SOURCE`].
pub fn cfo_sir_moose_db(eps: f64, n: usize) -> f64 {
    10.0 * (cfo_s0_power(eps, n) / cfo_ici_moose_bound(eps)).log10()
}

/// Pollet et al. SNR degradation due to a CFO, in dB (small `eps`, high SNR):
/// `D ~ (10 / (3 ln 10)) (pi eps)^2 Es/N0`, with `es_n0_linear` = Es/N0 as a linear ratio.
/// Only usable below about 1 dB of loss (compare [`cfo_degradation_exact_db`]).
///
/// Source: T. Pollet, M. Van Bladel, M. Moeneclaey, IEEE Trans. Commun. 43(2/3/4):191–193,
/// 1995 (citation confirmed; formula from memory, verified numerically) — see
/// [`POLLET_SOURCE`].
pub fn cfo_degradation_pollet_db(eps: f64, es_n0_linear: f64) -> f64 {
    10.0 / (3.0 * LN_10) * (PI * eps).powi(2) * es_n0_linear
}

/// Exact SNR loss due to a CFO, in dB: `D = 10 log10(SNR / SINR)` with
/// `SINR = |S_0|^2 SNR / (1 + P_ICI SNR)`, i.e. `10 log10((1 + P_ICI SNR) / |S_0|^2)`, for FFT
/// size `n` and `es_n0_linear` = Es/N0 as a linear ratio.
///
/// Source: the exact loss that Pollet et al. 1995 approximate (REFERENCES.md item 2; formula
/// from memory, verified numerically) — see [`POLLET_SOURCE`].
pub fn cfo_degradation_exact_db(eps: f64, n: usize, es_n0_linear: f64) -> f64 {
    let ratio = (1.0 + cfo_ici_exact(eps, n) * es_n0_linear) / cfo_s0_power(eps, n);
    10.0 * ratio.log10()
}

/// Common phase error of the wanted term under a CFO, `arg S_0 = pi eps (N - 1)/N` in radians,
/// referenced to the first sample of the FFT window.
///
/// Source: Moose 1994 (citation confirmed; form from memory, verified numerically) — see
/// [`CFO_LEAKAGE_SOURCE`].
pub fn cfo_common_phase(eps: f64, n: usize) -> f64 {
    let nf = n as f64;
    PI * eps * (nf - 1.0) / nf
}

/// Advance of the common phase from one OFDM symbol to the next under a CFO,
/// `2 pi eps (N + N_CP) / N` in radians, for FFT size `n` and cyclic prefix `n_cp` samples.
///
/// Source: REFERENCES.md item 2 (same model as Moose 1994; citation confirmed, form from
/// memory) — see [`CFO_LEAKAGE_SOURCE`].
pub fn cfo_phase_advance_per_symbol(eps: f64, n: usize, n_cp: usize) -> f64 {
    2.0 * PI * eps * (n + n_cp) as f64 / n as f64
}

#[cfg(test)]
mod tests {
    //! Check values are from `/work/shared/REFERENCES.md` items 1 and 2 (tables 1a, 1b and 2,
    //! the Pollet table and the deterministic check lines), computed there with mpmath. Tables
    //! that print 6 significant digits are compared with relative 1e-5; values printed with a
    //! fixed number of decimals (dB) with half a unit of the last digit; the 10–12-digit check
    //! lines with relative 1e-9.
    use super::*;

    use super::super::table::{assert_rel, TABLE_REL};

    /// Check-line precision (10 to 12 digits printed).
    const CHECK_REL: f64 = 1e-9;

    /// Absolute check for a value printed with `decimals` decimals: half a unit of the last
    /// digit, plus a small margin for our own rounding.
    fn assert_decimals(got: f64, want: f64, decimals: i32, what: &str) {
        let tol = 0.5 * 10f64.powi(-decimals) + 1e-9;
        assert!(
            (got - want).abs() <= tol,
            "{what}: got {got}, want {want} (printed to {decimals} decimals)"
        );
    }

    /// Linear ratio from dB, computed here independently.
    fn lin(db: f64) -> f64 {
        10f64.powf(db / 10.0)
    }

    /// fd*T rows of tables 1a/1b.
    const FDT_ROWS: [f64; 5] = [0.01, 0.02, 0.05, 0.1, 0.2];

    #[test]
    fn table_1a_exact_finite_n() {
        // Russell & Stüber, VTC'95 pp. 820-824 (exact J0 sum); values REFERENCES.md table 1a,
        // columns "P_ICI exact N=64", "N=256", "N=1024".
        let cols: [(usize, [f64; 5]); 3] = [
            (
                64,
                [0.000164437, 0.000657553, 0.00410121, 0.016284, 0.0632454],
            ),
            (
                256,
                [0.000164475, 0.000657704, 0.00410214, 0.0162877, 0.063259],
            ),
            (
                1024,
                [0.000164477, 0.000657713, 0.0041022, 0.0162879, 0.0632598],
            ),
        ];
        for (n, want) in cols {
            for (&fdt, &w) in FDT_ROWS.iter().zip(&want) {
                assert_rel(
                    doppler_ici_exact(fdt, n),
                    w,
                    TABLE_REL,
                    &format!("P_ICI N={n} fdT={fdt}"),
                );
            }
        }
    }

    #[test]
    fn table_1a_limit_approx_bound() {
        // N->inf column: limit of Russell & Stüber (1F2 form derived in REFERENCES.md item 1);
        // /24 column: Jakes expansion following Li & Cimini 2001; /12 column: Li & Cimini,
        // IEEE TCOM 49(3):401-404, 2001. Values REFERENCES.md table 1a.
        let limit = [0.000164477, 0.000657714, 0.0041022, 0.0162879, 0.0632599];
        let approx = [0.000164493, 0.000657974, 0.00411234, 0.0164493, 0.0657974];
        let bound = [0.000328987, 0.00131595, 0.00822467, 0.0328987, 0.131595];
        for (i, &fdt) in FDT_ROWS.iter().enumerate() {
            assert_rel(doppler_ici_limit(fdt), limit[i], TABLE_REL, "N->inf");
            assert_rel(doppler_ici_approx_24(fdt), approx[i], TABLE_REL, "/24");
            assert_rel(doppler_ici_bound_12(fdt), bound[i], TABLE_REL, "/12");
            // The bound holds for every N (Li & Cimini 2001).
            for n in [64, 256, 1024] {
                assert!(doppler_ici_exact(fdt, n) <= doppler_ici_bound_12(fdt));
            }
        }
    }

    #[test]
    fn table_1b_sir_db() {
        // Russell & Stüber 1995 (exact), its N->inf limit (REFERENCES.md item 1), the /24
        // expansion and the Li & Cimini 2001 /12 bound, each turned into (1-P)/P in dB;
        // values REFERENCES.md table 1b (printed to 4 decimals).
        let rows: [[f64; 6]; 5] = [
            [37.8393, 37.8383, 37.8382, 37.8382, 37.8378, 34.8268],
            [31.8178, 31.8168, 31.8168, 31.8168, 31.8151, 28.8019],
            [23.8530, 23.8520, 23.8520, 23.8520, 23.8412, 20.8129],
            [17.8111, 17.8101, 17.8100, 17.8100, 17.7665, 14.6829],
            [11.7060, 11.7050, 11.7049, 11.7049, 11.5223, 8.1948],
        ];
        for (&fdt, row) in FDT_ROWS.iter().zip(&rows) {
            for (j, n) in [64, 256, 1024].into_iter().enumerate() {
                assert_decimals(
                    doppler_sir_exact_db(fdt, n),
                    row[j],
                    4,
                    &format!("SIR N={n} fdT={fdt}"),
                );
            }
            assert_decimals(
                sir_db_from_ici(doppler_ici_limit(fdt)),
                row[3],
                4,
                "SIR N->inf",
            );
            assert_decimals(
                sir_db_from_ici(doppler_ici_approx_24(fdt)),
                row[4],
                4,
                "SIR /24",
            );
            assert_decimals(
                sir_db_from_ici(doppler_ici_bound_12(fdt)),
                row[5],
                4,
                "SIR /12",
            );
        }
    }

    #[test]
    fn deterministic_check_line_item_1() {
        // Russell & Stüber 1995; REFERENCES.md item 1 deterministic check (N=64, fdT=0.1):
        // (1/N^2) sum_nm J0(...) = 0.983715975665, P_ICI = 0.01628402433.
        assert_rel(
            doppler_signal_power_exact(0.1, 64),
            0.983715975665,
            CHECK_REL,
            "P_S",
        );
        assert_rel(
            doppler_ici_exact(0.1, 64),
            0.01628402433,
            CHECK_REL,
            "P_ICI",
        );
        let sir = doppler_sir_exact(0.1, 64);
        assert_rel(sir, 0.983715975665 / 0.01628402433, CHECK_REL, "SIR linear");
    }

    /// `1 - (1/N^2) 1^T R 1` with `R_nm = J0(2 pi fdT (n - m)/N)`, by a double loop.
    fn ici_from_correlation_matrix(fd_t: f64, n: usize) -> f64 {
        let mut total = 0.0;
        for a in 0..n {
            for b in 0..n {
                let d = a as f64 - b as f64;
                total += libm::j0(2.0 * PI * fd_t * d / n as f64);
            }
        }
        1.0 - total / (n * n) as f64
    }

    #[test]
    fn exact_sum_equals_quadratic_form() {
        // REFERENCES.md item 1, "Equivalently, P_S = (1/N^2) 1^T R 1" (Russell & Stüber 1995
        // model): independent of the closed sum. Not a table lookup. The double loop subtracts
        // a sum of N^2 terms from 1, so it carries ~1e-13 absolute rounding (1.3e-10 relative
        // at N=256, fdT=0.02): relative 1e-9.
        for n in [16, 64, 256] {
            for fdt in [0.02, 0.1, 0.2, 0.7, 1.5] {
                assert_rel(
                    doppler_ici_exact(fdt, n),
                    ici_from_correlation_matrix(fdt, n),
                    1e-9,
                    &format!("N={n} fdT={fdt}"),
                );
            }
        }
    }

    #[test]
    fn finite_sum_converges_to_limit() {
        // The N->inf form (REFERENCES.md item 1) is the limit of the Russell & Stüber sum; the
        // gap shrinks like 1/N^2 (table 1a: 2.4e-4 relative at N=64), so at N=65536 it is
        // about 2e-10 relative. Covers both the series and the quadrature branch.
        for fdt in [0.01, 0.1, 0.5, 0.9, 2.0] {
            assert_rel(
                doppler_ici_exact(fdt, 65536),
                doppler_ici_limit(fdt),
                1e-8,
                &format!("fdT={fdt}"),
            );
        }
    }

    #[test]
    fn series_and_quadrature_agree() {
        // Two independent evaluations of the N->inf limit (REFERENCES.md item 1: 1F2 form and
        // 2 int (1-x) J0 dx) must agree where both are usable.
        for fdt in [0.001, 0.01, 0.05, 0.1, 0.2, 0.4, 0.6, 0.8, 1.0] {
            assert_rel(
                doppler_ici_limit_integral(fdt),
                doppler_ici_limit_series(fdt),
                1e-12,
                &format!("fdT={fdt}"),
            );
        }
    }

    #[test]
    fn one_minus_j0_series_matches_libm() {
        // Power series of J0 (M. Abramowitz, I. A. Stegun, Handbook of Mathematical Functions,
        // 1964, 9.1.10, from memory) against libm where there is little cancellation.
        for x in [0.5, 1.0, 1.5, 1.999] {
            assert_rel(one_minus_j0(x), 1.0 - libm::j0(x), 1e-13, "1-J0");
        }
        // Small x: 1 - J0(x) ~ x^2/4 - x^4/64.
        let x: f64 = 1e-4;
        assert_rel(
            one_minus_j0(x),
            x * x / 4.0 - x.powi(4) / 64.0,
            1e-15,
            "tiny x",
        );
    }

    #[test]
    fn small_fdt_matches_expansion_and_edge_cases() {
        // Li & Cimini 2001 derivation: for small fdT the exact ICI tends to (2 pi fdT)^2/24
        // (Jakes) from below; relative gap O(fdT^2).
        let fdt = 1e-4;
        assert_rel(
            doppler_ici_limit(fdt),
            doppler_ici_approx_24(fdt),
            1e-6,
            "small fdT",
        );
        assert!(doppler_ici_limit(fdt) < doppler_ici_approx_24(fdt));
        // A static channel has no ICI; a one-point FFT has no other subcarrier.
        assert_eq!(doppler_ici_exact(0.0, 64), 0.0);
        assert_eq!(doppler_ici_limit(0.0), 0.0);
        assert_eq!(doppler_ici_exact(0.3, 1), 0.0);
    }

    /// eps rows and N of table 2.
    const EPS_ROWS: [f64; 4] = [0.01, 0.05, 0.1, 0.2];

    #[test]
    fn table_2_cfo() {
        // Columns: |S0|^2, |S0|^2 dB, ICI exact (sum), ICI N->inf, (pi eps)^2/3, Moose bound,
        // SIR exact dB, SIR Moose-bound dB. Sources: Moose, IEEE TCOM 42(10):2908-2914, 1994
        // (S_m, |S0|^2, exact ICI, bound); Shu et al. 2006 ((pi eps)^2/3). Values REFERENCES.md
        // table 2.
        let table: [(usize, [[f64; 8]; 4]); 2] = [
            (
                64,
                [
                    [
                        0.9996711,
                        -0.00143,
                        0.000328863,
                        0.000328944,
                        0.000328987,
                        0.000586767,
                        34.8284,
                        32.3139,
                    ],
                    [
                        0.9918043, -0.03574, 0.00819567, 0.00819766, 0.00822467, 0.0145537,
                        20.8284, 18.3345,
                    ],
                    [
                        0.967539, -0.14332, 0.032461, 0.0324688, 0.0328987, 0.0567903, 14.7431,
                        12.3139,
                    ],
                    [
                        0.8751683, -0.57908, 0.124832, 0.12486, 0.131595, 0.205469, 8.4577, 6.2935,
                    ],
                ],
            ),
            (
                256,
                [
                    [
                        0.9996711,
                        -0.00143,
                        0.000328939,
                        0.000328944,
                        0.000328987,
                        0.000586767,
                        34.8274,
                        32.3139,
                    ],
                    [
                        0.9918025, -0.03575, 0.00819754, 0.00819766, 0.00822467, 0.0145537,
                        20.8274, 18.3345,
                    ],
                    [
                        0.9675317, -0.14335, 0.0324683, 0.0324688, 0.0328987, 0.0567903, 14.7421,
                        12.3139,
                    ],
                    [
                        0.875142, -0.57921, 0.124858, 0.12486, 0.131595, 0.205469, 8.4566, 6.2933,
                    ],
                ],
            ),
        ];
        for (n, rows) in table {
            for (&eps, row) in EPS_ROWS.iter().zip(&rows) {
                let tag = |c: &str| format!("{c} N={n} eps={eps}");
                let s0 = cfo_s0_power(eps, n);
                assert_rel(s0, row[0], TABLE_REL, &tag("|S0|^2"));
                assert_decimals(10.0 * s0.log10(), row[1], 5, &tag("|S0|^2 dB"));
                assert_rel(cfo_ici_exact(eps, n), row[2], TABLE_REL, &tag("ICI exact"));
                assert_rel(
                    cfo_ici_parseval(eps, n),
                    row[2],
                    TABLE_REL,
                    &tag("1-|S0|^2"),
                );
                assert_rel(cfo_ici_limit(eps), row[3], TABLE_REL, &tag("1-sinc^2"));
                assert_rel(cfo_ici_small_eps(eps), row[4], TABLE_REL, &tag("/3"));
                assert_rel(cfo_ici_moose_bound(eps), row[5], TABLE_REL, &tag("Moose"));
                assert_decimals(cfo_sir_exact_db(eps, n), row[6], 4, &tag("SIR exact"));
                assert_decimals(cfo_sir_moose_db(eps, n), row[7], 4, &tag("SIR Moose"));
            }
        }
    }

    #[test]
    fn moose_constant_rounding() {
        // Moose 1994 (constant from memory) quotes 0.5947; REFERENCES.md item 2 re-derives it
        // as 1 - 4/pi^2 = 0.594715, which is what table 2 uses. The rounded constant misses
        // the table by 2.6e-5 relative, beyond the table's 1e-5.
        assert_rel(MOOSE_CONSTANT, 0.594715, TABLE_REL, "1 - 4/pi^2");
        assert_rel(
            MOOSE_CONSTANT_ROUNDED,
            MOOSE_CONSTANT,
            1e-4,
            "0.5947 rounding",
        );
        let rounded = MOOSE_CONSTANT_ROUNDED * (PI * 0.01).sin().powi(2);
        assert!((rounded - 0.000586767).abs() / 0.000586767 > TABLE_REL);
        // The bound is the large-N sum at eps = 1/2 (REFERENCES.md item 2): there it is tight.
        assert_rel(cfo_ici_limit(0.5), MOOSE_CONSTANT, 1e-14, "tight at 1/2");
    }

    #[test]
    fn cfo_bounds_and_limits_ordered() {
        // REFERENCES.md item 2: exact (finite N) <= N->inf <= (pi eps)^2/3 < Moose bound for
        // small eps; the bound holds for all |eps| <= 1/2 (Moose 1994).
        for k in 1..=50 {
            let eps = 0.01 * f64::from(k);
            let exact = cfo_ici_exact(eps, 64);
            assert!(exact <= cfo_ici_limit(eps) * (1.0 + 1e-12));
            assert!(cfo_ici_limit(eps) <= cfo_ici_moose_bound(eps) * (1.0 + 1e-12));
            if eps <= 0.2 {
                assert!(cfo_ici_limit(eps) <= cfo_ici_small_eps(eps));
            }
        }
        // No offset: no loss, no ICI. Integer offset: the wanted bin is empty.
        assert_eq!(cfo_s0_power(0.0, 64), 1.0);
        assert_eq!(cfo_ici_exact(0.0, 64), 0.0);
        assert_eq!(cfo_ici_limit(0.0), 0.0);
        assert_eq!(cfo_s0_power(1.0, 64), 0.0);
        assert_rel(cfo_ici_exact(1.0, 64), 1.0, 1e-14, "eps = 1");
        // Symmetry in eps (|S0|^2 is even).
        assert_rel(cfo_s0_power(-0.3, 64), cfo_s0_power(0.3, 64), 1e-15, "even");
    }

    #[test]
    fn small_eps_cancellation_free() {
        // For tiny eps the N->inf ICI must match (pi eps)^2/3 (Shu et al. 2006) to O(eps^2)
        // relative; a naive 1 - sinc^2 would be pure rounding noise here.
        let eps = 1e-7;
        assert_rel(
            cfo_ici_limit(eps),
            cfo_ici_small_eps(eps),
            1e-12,
            "tiny eps",
        );
        // The exact finite-N sum is cancellation-free too: (pi eps)^2/3 (1 - 1/N^2) to
        // leading order (expansion of 1 - |S0|^2 in eps).
        let n = 64usize;
        let want = cfo_ici_small_eps(eps) * (1.0 - 1.0 / (n * n) as f64);
        assert_rel(cfo_ici_exact(eps, n), want, 1e-9, "tiny eps exact");
    }

    /// `X_k = (1/N) sum_n exp(j 2 pi eps n / N) exp(-j 2 pi k n / N)`, naive DFT (numpy sign
    /// convention), with the integer part of the phase reduced modulo N.
    fn naive_dft_of_cfo(eps: f64, n: usize) -> Vec<Complex<f64>> {
        let nf = n as f64;
        (0..n)
            .map(|k| {
                (0..n)
                    .map(|t| {
                        let int_part = ((k * t) % n) as f64;
                        Complex::from_polar(1.0, 2.0 * PI * (eps * t as f64 - int_part) / nf)
                    })
                    .sum::<Complex<f64>>()
                    / nf
            })
            .collect()
    }

    #[test]
    fn dft_check_line_n64_eps02() {
        // REFERENCES.md item 2, "Deterministic DFT check (N=64, eps=0.2)": bin 0 power
        // 0.875168316796, other bins 0.124831683204, phase 0.6185010537 rad. The closed forms
        // (Moose 1994) against those printed values ...
        let (eps, n) = (0.2, 64);
        assert_rel(cfo_s0_power(eps, n), 0.875168316796, CHECK_REL, "|S0|^2");
        assert_rel(cfo_ici_exact(eps, n), 0.124831683204, CHECK_REL, "ICI sum");
        assert_rel(
            cfo_ici_parseval(eps, n),
            0.124831683204,
            CHECK_REL,
            "1-|S0|^2",
        );
        assert_rel(cfo_common_phase(eps, n), 0.6185010537, CHECK_REL, "CPE");
        assert_rel(cfo_s(0, eps, n).arg(), 0.6185010537, CHECK_REL, "arg S0");
        // ... and our own naive DFT against the same printed values (checks the test's DFT).
        let bins = naive_dft_of_cfo(eps, n);
        assert_rel(bins[0].norm_sqr(), 0.875168316796, CHECK_REL, "DFT bin 0");
        let others: f64 = bins[1..].iter().map(|b| b.norm_sqr()).sum();
        assert_rel(others, 0.124831683204, CHECK_REL, "DFT other bins");
        assert_rel(bins[0].arg(), 0.6185010537, CHECK_REL, "DFT phase");
    }

    #[test]
    fn cfo_exact_matches_brute_force_dft() {
        // Not a table lookup: the leakage of exp(j 2 pi eps n/N) through a naive DFT is the
        // model of REFERENCES.md item 2 (Moose 1994). Every coefficient S_m must equal DFT bin
        // -m mod N, and the exact ICI must equal the power outside bin 0.
        for n in [8usize, 64, 256] {
            for eps in [-0.45, -0.1, 0.01, 0.2, 0.37, 0.5, 1.3] {
                let bins = naive_dft_of_cfo(eps, n);
                for (k, bin) in bins.iter().enumerate() {
                    let m = -(k as i64);
                    let s = cfo_s(m, eps, n);
                    assert!(
                        (s - bin).norm() <= 1e-12,
                        "S_{m} N={n} eps={eps}: closed form {s}, DFT {bin}"
                    );
                    // Periodicity of S_m in m with period N (magnitude and value).
                    let s_wrapped = cfo_s(m + n as i64, eps, n);
                    assert!((s_wrapped.norm() - s.norm()).abs() <= 1e-12);
                }
                let leak: f64 = bins[1..].iter().map(|b| b.norm_sqr()).sum();
                assert_rel(cfo_ici_exact(eps, n), leak, 1e-12, "ICI vs DFT");
                assert_rel(
                    cfo_s0_power(eps, n),
                    bins[0].norm_sqr(),
                    1e-12,
                    "|S0|^2 vs DFT",
                );
            }
        }
    }

    #[test]
    fn pollet_table() {
        // Pollet, Van Bladel, Moeneclaey, IEEE TCOM 43(2/3/4):191-193, 1995 (approximation)
        // and the exact SINR loss; values REFERENCES.md item 2, "Pollet approximation versus
        // the exact SINR loss" (N = 64, printed to 5 decimals).
        let rows = [
            (10.0, 0.01, 0.01569, 0.01429),
            (10.0, 0.05, 0.37784, 0.35719),
            (10.0, 0.1, 1.36420, 1.42877),
            (10.0, 0.2, 4.09766, 5.71509),
            (20.0, 0.01, 0.14195, 0.14288),
            (20.0, 0.05, 2.63542, 3.57193),
            (20.0, 0.1, 6.42322, 14.28772),
            (20.0, 0.2, 11.87700, 57.15086),
        ];
        for (snr_db, eps, exact, pollet) in rows {
            let snr = lin(snr_db);
            assert_decimals(
                cfo_degradation_exact_db(eps, 64, snr),
                exact,
                5,
                &format!("exact loss {snr_db} dB eps={eps}"),
            );
            assert_decimals(
                cfo_degradation_pollet_db(eps, snr),
                pollet,
                5,
                &format!("Pollet {snr_db} dB eps={eps}"),
            );
        }
    }

    #[test]
    fn phase_advance_per_symbol() {
        // REFERENCES.md item 2: the common phase advances by 2 pi eps (N + N_CP)/N from one
        // symbol to the next. Not a table lookup: bin 0 of a naive DFT of the CFO phasor
        // exp(j 2 pi eps t/N) over the window starting at t = 0 and over the next window,
        // starting at t = N + N_CP; their phase difference is the advance.
        for (eps, n, n_cp) in [(0.13, 64usize, 16usize), (-0.07, 256, 32), (0.02, 128, 0)] {
            let nf = n as f64;
            let bin0 = |start: usize| -> Complex<f64> {
                (0..n)
                    .map(|t| Complex::from_polar(1.0, 2.0 * PI * eps * (start + t) as f64 / nf))
                    .sum::<Complex<f64>>()
                    / nf
            };
            let first = bin0(0);
            let next = bin0(n + n_cp);
            let measured = (next * first.conj()).arg();
            assert_rel(
                cfo_phase_advance_per_symbol(eps, n, n_cp),
                measured,
                1e-12,
                "advance",
            );
            assert_rel(cfo_common_phase(eps, n), first.arg(), 1e-12, "CPE");
        }
    }

    #[test]
    fn sources_are_named() {
        for s in [
            DOPPLER_ICI_SOURCE,
            DOPPLER_ICI_LIMIT_SOURCE,
            DOPPLER_ICI_APPROX_SOURCE,
            DOPPLER_ICI_BOUND_SOURCE,
            CFO_LEAKAGE_SOURCE,
            CFO_ICI_SMALL_EPS_SOURCE,
            MOOSE_BOUND_SOURCE,
            POLLET_SOURCE,
        ] {
            assert!(s.contains("19") || s.contains("20"), "no year: {s}");
            assert!(s.contains('['), "no status tag: {s}");
        }
    }
}
