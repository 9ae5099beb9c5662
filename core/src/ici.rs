//! Predicted inter-carrier interference (ICI) from the tracker's own estimates: the Doppler
//! spread (classical Jakes spectrum) and a residual carrier frequency offset (CFO), in f32.
//!
//! Every power is a fraction of the received power per subcarrier (dimensionless), for a
//! unit-power channel and every one of the `N` bins loaded with independent zero-mean data of
//! equal power; the receiver's one-tap gain is the channel averaged over the FFT window
//! (REFERENCES item 1). `fd_t = fd·T` uses the useful symbol time `T = N·Ts` (no CP); the CFO
//! `eps` is in subcarrier spacings `1/T`.
//!
//! ## Formulas and their cost
//!
//! * Doppler, [`doppler_ici`]: the exact finite sum of M. Russell and G. L. Stüber (Proc. IEEE
//!   VTC'95, pp. 820–824), written without cancellation,
//!   `P_ICI = (2/N²) Σ_{i=1}^{N−1} (N − i)·[1 − J0(2π·fd_t·i/N)]`. Each `1 − J0(x)` comes from
//!   its power series while `|x| < 2` ([`one_minus_j0`], 8 multiply-adds, no libm call), so the
//!   cost is `N − 1` series evaluations and a compensated (Kahan) sum: O(N), about 20 flops
//!   per term while `2π·fd_t < 2`, one `libm::j0f` per term above.
//! * Doppler, [`doppler_ici_fast`]: O(1). The `N → ∞` limit
//!   `1 − ₁F₂(½; 3/2, 2; −(π·fd_t)²)` (a 12-term series) minus the first Euler–Maclaurin
//!   correction of the finite sum, `(1 − J0(2π·fd_t))/(6N²)`. The next correction is
//!   `O(fd_t⁴/N⁴)`, far below f32 rounding for `N ≥ 16`; outside `fd_t ≤ 0.5` it falls back to
//!   the exact sum.
//! * CFO, [`cfo_ici`] and [`cfo_signal_power`]: `|S0|² = [sin(πε)/(N sin(πε/N))]²`
//!   (P. H. Moose, IEEE Trans. Commun. 42(10), 1994) and `P_ICI = 1 − |S0|²` (Parseval),
//!   with `1 − |S0|² = (1 − D)(1 + D)` and `N sin(πε/N) − sin(πε)` from its power series for
//!   `|ε| ≤ ½` (after reducing `ε` modulo `N`, the period of `|S0|²`). O(1): two `sinf`.
//! * Both together, [`joint_ici`]: the channel seen by the FFT is `h(n)·e^{j2πεn/N}`, whose
//!   autocorrelation is `J0(2π·fd_t·d/N)·e^{j2πεd/N}`; the same window-average argument as
//!   the Doppler sum gives, exactly,
//!   `P_ICI = (2/N²) Σ_{i=1}^{N−1} (N − i)·[(1 − J0(a_i)) + J0(a_i)·2 sin²(b_i/2)]`,
//!   `a_i = 2π·fd_t·i/N`, `b_i = 2πε·i/N`. Assumed: the CFO is deterministic and constant
//!   over the window, the fading wide-sense stationary with the Jakes spectrum, and the one-tap
//!   gain (channel estimate with common-phase correction) includes the CFO's common rotation
//!   and attenuation `S0`. No independence assumption is needed; the additive rule "ICI powers
//!   add, the signal is attenuated by both" (`P_S ≈ (1 − P_D)(1 − P_ε)`) agrees with it to
//!   first order in each (the unit tests bound the difference). O(N), one `sinf` per term.
//! * [`predict`] combines them with an Es/N0 into the SINR ceiling
//!   `SINR = P_S·γ/(1 + P_ICI·γ)`, `γ = Es/N0` per data subcarrier (REFERENCES item 2).
//!
//! With guard bands the band-edge bins see less ICI than the fully loaded formula says (their
//! outer neighbours are empty), so on a partly loaded band these figures are slightly
//! pessimistic: by 0.25 dB in SIR for the default band (56 of 64 bins, from the leakage
//! `E|C_m|²` summed over the used bins; `tests/ici_predict.rs` measures 0.35–0.45 dB as a
//! mean of per-observation dB values).
//!
//! Inputs are checked: a NaN or infinite argument gives [`ProcessError::NonFinite`] with the
//! argument's position as `index`, an FFT size outside `1..=`[`MAX_FFT_LEN`] or a negative
//! Es/N0 gives [`ProcessError::OutOfRange`]. No output is NaN or infinite.

use crate::error::ProcessError;
pub use crate::numerology::MAX_FFT_LEN;

use core::f32::consts::PI;

/// Largest SIR the prediction reports, dB (an ICI of exactly zero reports this).
pub const SIR_CAP_DB: f32 = 150.0;

/// `1 − J0(x)` without cancellation (dimensionless): the power series
/// `Σ_{k≥1} (−1)^{k+1} (x²/4)^k/(k!)²` (8 terms, nested) for `|x| < 2`, `1 − libm::j0f(x)`
/// above (where `J0(x) ≤ 0.224`). Non-finite `x` gives NaN; callers check first.
pub fn one_minus_j0(x: f32) -> f32 {
    if x.abs() >= 2.0 {
        return 1.0 - libm::j0f(x);
    }
    let q = 0.25 * x * x;
    // t_k / t_{k−1} = −q/k²: q(1 − q/4(1 − q/9(1 − …(1 − q/64))))
    let mut acc = 1.0f32;
    for k in (2..=8u8).rev() {
        let kk = f32::from(k) * f32::from(k);
        acc = 1.0 - q / kk * acc;
    }
    q * acc
}

/// Kahan (compensated) sum of `f32` terms.
#[derive(Clone, Copy, Default)]
struct Kahan {
    sum: f32,
    carry: f32,
}

impl Kahan {
    fn add(&mut self, v: f32) {
        let y = v - self.carry;
        let t = self.sum + y;
        self.carry = (t - self.sum) - y;
        self.sum = t;
    }
}

fn check_finite(value: f32, position: usize) -> Result<(), ProcessError> {
    if value.is_finite() {
        Ok(())
    } else {
        Err(ProcessError::NonFinite { index: position })
    }
}

fn check_len(fft_len: usize, position: usize) -> Result<f32, ProcessError> {
    if (1..=MAX_FFT_LEN).contains(&fft_len) {
        Ok(fft_len as f32)
    } else {
        Err(ProcessError::OutOfRange { index: position })
    }
}

/// Doppler ICI power for the classical (Jakes) spectrum, fraction of the received power
/// (dimensionless), by the exact Russell & Stüber sum (see the module docs). `fd_t = fd·T`
/// (its sign is ignored), `fft_len` = N in `1..=4096`. O(N).
///
/// Errors: `fd_t` not finite (`NonFinite { index: 0 }`), `fft_len` out of range
/// (`OutOfRange { index: 1 }`).
pub fn doppler_ici(fd_t: f32, fft_len: usize) -> Result<f32, ProcessError> {
    check_finite(fd_t, 0)?;
    check_len(fft_len, 1)?;
    joint_ici(fd_t, 0.0, fft_len)
}

/// `P_ICI` of the `N → ∞` limit, `1 − ₁F₂(½; 3/2, 2; −(π·fd_t)²)`, by its series without the
/// leading 1 (12 terms, nested; accurate for `π·fd_t ≤ 2`).
fn doppler_ici_limit(fd_t: f32) -> f32 {
    let z = -(PI * fd_t) * (PI * fd_t);
    // t_k/t_{k−1} = z(2k − 1)/((2k + 1)(k + 1)k), t_0 = 1; P = −Σ_{k≥1} t_k.
    let mut acc = 1.0f32;
    for k in (2..=12u8).rev() {
        let kf = f32::from(k);
        acc = 1.0 + z * (2.0 * kf - 1.0) / ((2.0 * kf + 1.0) * (kf + 1.0) * kf) * acc;
    }
    -(z / 6.0) * acc
}

/// Doppler ICI power as [`doppler_ici`], in O(1): the `N → ∞` limit minus
/// `(1 − J0(2π·fd_t))/(6N²)` (first Euler–Maclaurin correction of the finite sum; derivation
/// in the module docs). For `|fd_t| > 0.5` it returns the exact O(N) sum instead.
///
/// Errors as [`doppler_ici`].
pub fn doppler_ici_fast(fd_t: f32, fft_len: usize) -> Result<f32, ProcessError> {
    check_finite(fd_t, 0)?;
    let n = check_len(fft_len, 1)?;
    let fd_t = fd_t.abs();
    if fd_t > 0.5 {
        return doppler_ici(fd_t, fft_len);
    }
    let correction = one_minus_j0(2.0 * PI * fd_t) / (6.0 * n * n);
    Ok((doppler_ici_limit(fd_t) - correction).max(0.0))
}

/// `ε` reduced modulo `N` into `[−N/2, N/2]` (`|S0|²` has period `N` in `ε`).
fn reduce_eps(eps: f32, n: f32) -> f32 {
    eps - n * libm::roundf(eps / n)
}

/// `sin(πx)` with the argument reduced to `[−½, ½]` first (exact zeros at integers).
fn sin_pi(x: f32) -> f32 {
    let r = libm::roundf(x);
    let s = libm::sinf(PI * (x - r));
    // (−1)^r without converting a possibly huge float to an integer.
    if libm::fmodf(r, 2.0) == 0.0 {
        s
    } else {
        -s
    }
}

/// `(1 − D, D)` with `D = sin(πε)/(N sin(πε/N))` for `ε` already reduced to `[−N/2, N/2]`.
fn dirichlet_0(eps: f32, n: f32) -> (f32, f32) {
    let den = n * sin_pi(eps / n);
    if den == 0.0 {
        // ε = 0 (the only multiple of N left after the reduction, up to ±N/2 for N = 1).
        return (0.0, 1.0);
    }
    if eps.abs() <= 0.5 {
        // N sin(a/N) − sin(a) = Σ_{k≥1} (−1)^{k+1} a^{2k+1}(1 − N^{−2k})/(2k+1)!, a = πε.
        let a = PI * eps;
        let a2 = a * a;
        let inv_n2 = 1.0 / (n * n);
        let mut term = a; // a^{2k+1}/(2k+1)! at k = 0
        let mut n_pow = 1.0f32; // N^{−2k}
        let mut num = 0.0f32;
        for k in 1..=8u8 {
            let kf = f32::from(k);
            term *= -a2 / ((2.0 * kf) * (2.0 * kf + 1.0));
            n_pow *= inv_n2;
            num -= term * (1.0 - n_pow);
        }
        let one_minus_d = num / den;
        (one_minus_d, 1.0 - one_minus_d)
    } else {
        let d = sin_pi(eps) / den;
        (1.0 - d, d)
    }
}

/// Wanted-signal attenuation of a CFO, `|S0|² = [sin(πε)/(N sin(πε/N))]²` (dimensionless;
/// Moose 1994), for `eps` in subcarrier spacings and `fft_len` = N in `1..=4096`. O(1).
///
/// Errors: `eps` not finite (`NonFinite { index: 0 }`), `fft_len` out of range
/// (`OutOfRange { index: 1 }`).
pub fn cfo_signal_power(eps: f32, fft_len: usize) -> Result<f32, ProcessError> {
    check_finite(eps, 0)?;
    let n = check_len(fft_len, 1)?;
    let (_, d) = dirichlet_0(reduce_eps(eps, n), n);
    Ok(d * d)
}

/// CFO ICI power `1 − |S0|²` (fraction of the received power; Moose 1994, Parseval),
/// cancellation-free (module docs). O(1).
///
/// Errors as [`cfo_signal_power`].
pub fn cfo_ici(eps: f32, fft_len: usize) -> Result<f32, ProcessError> {
    check_finite(eps, 0)?;
    let n = check_len(fft_len, 1)?;
    let (one_minus_d, d) = dirichlet_0(reduce_eps(eps, n), n);
    Ok((one_minus_d * (1.0 + d)).clamp(0.0, 1.0))
}

/// ICI power of a Jakes Doppler spread `fd_t = fd·T` and a constant CFO `eps` (subcarrier
/// spacings) together, by the exact joint sum of the module docs (fraction of the received
/// power). O(N): one series (or `j0f`) and one `sinf` per term.
///
/// Errors: `fd_t` or `eps` not finite (`NonFinite { index: 0 or 1 }`), `fft_len` out of range
/// (`OutOfRange { index: 2 }`).
pub fn joint_ici(fd_t: f32, eps: f32, fft_len: usize) -> Result<f32, ProcessError> {
    check_finite(fd_t, 0)?;
    check_finite(eps, 1)?;
    let n = check_len(fft_len, 2)?;
    let eps = reduce_eps(eps, n);
    let a = 2.0 * PI * fd_t.abs() / n;
    let mut sum = Kahan::default();
    for i in 1..fft_len {
        let fi = i as f32;
        let mut term = one_minus_j0(a * fi);
        if eps != 0.0 {
            // sin(b_i/2) = sin(π ε i/N); the product ε·i is reduced by sin_pi.
            let s = sin_pi(eps * fi / n);
            term += (1.0 - term) * 2.0 * s * s;
        }
        sum.add((n - fi) * term);
    }
    Ok((2.0 * sum.sum / (n * n)).clamp(0.0, 1.0))
}

/// The predicted signal / ICI / noise split on one subcarrier (all linear unless `_db`).
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct IciPrediction {
    /// Doppler ICI alone (Russell & Stüber), fraction of the received power.
    pub doppler_ici: f32,
    /// CFO ICI alone, `1 − |S0|²`, fraction of the received power.
    pub cfo_ici: f32,
    /// Both together (exact joint sum), fraction of the received power.
    pub ici: f32,
    /// Wanted-signal power `1 − ici`, fraction of the received power.
    pub signal: f32,
    /// Signal-to-ICI ratio `signal/ici`, dB, at most [`SIR_CAP_DB`].
    pub sir_db: f32,
    /// SINR ceiling `signal·γ/(1 + ici·γ)` at the given Es/N0 `γ` per data subcarrier, dB
    /// (`−∞` is avoided: at `γ = 0` it reports −300 dB).
    pub sinr_db: f32,
}

/// `10·log10(x)` for `x > 0`, floored at −300 dB.
fn db(x: f32) -> f32 {
    if x > 0.0 {
        10.0 * libm::log10f(x)
    } else {
        -300.0
    }
}

/// Predicts the ICI split from a Doppler estimate `fd_t = fd·T`, a residual CFO `eps`
/// (subcarrier spacings), the FFT size and `es_n0` (linear Es/N0 per data subcarrier, ≥ 0).
/// O(N): the joint sum, and the Doppler sum again when `eps ≠ 0` (the CFO term is O(1)).
/// Meant to run once per estimate, not per symbol.
///
/// Errors: a non-finite argument (`NonFinite { index }` = its position 0, 1 or 3), `fft_len`
/// outside `1..=4096` (`OutOfRange { index: 2 }`), `es_n0 < 0` (`OutOfRange { index: 3 }`).
pub fn predict(
    fd_t: f32,
    eps: f32,
    fft_len: usize,
    es_n0: f32,
) -> Result<IciPrediction, ProcessError> {
    check_finite(es_n0, 3)?;
    if es_n0 < 0.0 {
        return Err(ProcessError::OutOfRange { index: 3 });
    }
    let ici = joint_ici(fd_t, eps, fft_len)?;
    let doppler = if eps == 0.0 {
        ici
    } else {
        doppler_ici(fd_t, fft_len)?
    };
    let cfo = cfo_ici(eps, fft_len)?;
    let signal = 1.0 - ici;
    let sir_db = if ici > 0.0 {
        db(signal / ici).min(SIR_CAP_DB)
    } else {
        SIR_CAP_DB
    };
    let sinr = signal * es_n0 / (1.0 + ici * es_n0);
    Ok(IciPrediction {
        doppler_ici: doppler,
        cfo_ici: cfo,
        ici,
        signal,
        sir_db,
        sinr_db: db(sinr),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// f64 reference of the Doppler+CFO ICI by the double sum `1 − (1/N²) Σ_{n,m} r(n − m)`
    /// (REFERENCES item 1: P_S = 1ᵀR1/N²), with `r(d) = J0(2π fd_t d/N) e^{j2πεd/N}`.
    fn brute_force(fd_t: f64, eps: f64, n: usize) -> f64 {
        let nf = n as f64;
        let mut s = 0.0;
        for a in 0..n {
            for b in 0..n {
                let d = a as f64 - b as f64;
                let w = 2.0 * core::f64::consts::PI * d / nf;
                s += libm::j0(w * fd_t) * libm::cos(w * eps);
            }
        }
        1.0 - s / (nf * nf)
    }

    #[test]
    fn one_minus_j0_is_continuous_and_accurate() {
        // Against f64 1 − J0 where there is no cancellation (x ≥ 0.3), and the leading term
        // x²/4 (A&S 9.1.10, from memory) for tiny x.
        for i in 1..400 {
            let x = i as f32 * 0.01 + 0.3;
            let want = 1.0 - libm::j0(f64::from(x));
            let got = f64::from(one_minus_j0(x));
            assert!((got - want).abs() <= 2e-6 * want, "x={x}: {got} vs {want}");
        }
        let x = 1e-3f32;
        let lead = f64::from(x) * f64::from(x) / 4.0;
        assert!((f64::from(one_minus_j0(x)) / lead - 1.0).abs() < 1e-6);
    }

    #[test]
    fn joint_sum_matches_brute_force() {
        for (fd_t, eps) in [(0.1, 0.0), (0.0, 0.2), (0.05, 0.1), (0.2, -0.3), (0.7, 1.4)] {
            let want = brute_force(fd_t, eps, 64);
            let got = f64::from(joint_ici(fd_t as f32, eps as f32, 64).unwrap());
            assert!(
                (got / want - 1.0).abs() < 1e-5,
                "{fd_t} {eps}: {got} vs {want}"
            );
        }
    }

    #[test]
    fn additive_rule_is_first_order_close() {
        // P_D + P_ε − P_D·P_ε against the exact joint sum: the difference is second order,
        // below 2·P_D·P_ε here.
        for (fd_t, eps) in [(0.05f32, 0.05f32), (0.1, 0.1), (0.2, 0.2)] {
            let pd = doppler_ici(fd_t, 64).unwrap();
            let pe = cfo_ici(eps, 64).unwrap();
            let joint = joint_ici(fd_t, eps, 64).unwrap();
            let additive = pd + pe - pd * pe;
            assert!((joint - additive).abs() <= 2.0 * pd * pe, "{fd_t} {eps}");
        }
    }

    #[test]
    fn bad_arguments_are_typed_errors() {
        assert_eq!(
            doppler_ici(f32::NAN, 64),
            Err(ProcessError::NonFinite { index: 0 })
        );
        assert_eq!(
            doppler_ici(0.1, 0),
            Err(ProcessError::OutOfRange { index: 1 })
        );
        assert_eq!(
            cfo_ici(f32::INFINITY, 64),
            Err(ProcessError::NonFinite { index: 0 })
        );
        assert_eq!(
            predict(0.1, 0.0, 64, -1.0),
            Err(ProcessError::OutOfRange { index: 3 })
        );
        let p = predict(0.0, 0.0, 64, 0.0).unwrap();
        assert_eq!(p.ici, 0.0);
        assert_eq!(p.sir_db, SIR_CAP_DB);
        assert!(p.sinr_db.is_finite());
    }

    #[test]
    fn cfo_is_periodic_in_n_and_even() {
        let a = cfo_ici(0.2, 64).unwrap();
        assert!((cfo_ici(64.2, 64).unwrap() - a).abs() < 1e-5);
        assert!((cfo_ici(-0.2, 64).unwrap() - a).abs() < 1e-7);
        assert_eq!(cfo_ici(0.0, 64).unwrap(), 0.0);
        assert_eq!(cfo_ici(0.3, 1).unwrap(), 0.0);
    }
}
