//! Analytic mean-square error of any linear pilot-aided channel estimator, and the LMMSE
//! (Wiener) weights, for a separable time × frequency channel correlation.
//!
//! Why: the core's estimator (LS at the pilots, then linear or banded-LMMSE interpolation in
//! frequency and LMMSE filtering in time) is linear in the LS values. Its exact error
//! covariance therefore follows from the channel's second-order statistics alone, and a Monte
//! Carlo run of the core can be checked against the analytic MSE of the *same* linear map. This
//! module computes that analytic side in f64.
//!
//! Conventions (as in `/work/shared/REFERENCES.md`, conventions and items 4 and 6):
//! * A position on the time-frequency grid is a [`GridPos`] `(k, n)`: subcarrier index `k` and
//!   OFDM symbol index `n`. Unit channel power, `E|H|^2 = 1`.
//! * Correlation: `E[H_{k,n} H*_{k',n'}] = r_f(k - k') r_t(n - n')` (separable). The frequency
//!   correlation is `r_f(dk) = E[H_{k+dk} H_k^*]` with `H_k = sum_l h_l exp(-j 2 pi k l / N)`
//!   (numpy FFT sign), i.e. `r_f(dk) = int p(tau) exp(-j 2 pi dk tau / N) dtau` for a delay
//!   profile `p` with `tau` in samples; with delays `>= 0`, `Im r_f < 0` for small `dk > 0`.
//!   The time correlation is Jakes' `r_t(dn) = J0(2 pi fd Tsym dn)`, `Tsym` including the CP.
//! * Subcarrier offsets are taken as `k - k'` without wrapping: with a continuous delay profile
//!   `r_f` is not periodic in `N`, and a circular interpolator that uses pilot `k = 0` for a
//!   target near `k = N` sees the correlation at `dk = k`, as the REFERENCES.md tables assume.
//! * The LS estimate at pilot `p` is `H_p + N_p / X_p`, the noise independent of the channel and
//!   white across pilots with variance `sigma^2 = N0 / |X_p|^2`; with `SNR = Es/N0` per data
//!   subcarrier and pilot power `|X_p|^2 = boost Es`, `sigma^2 = 1 / (SNR boost)` ([`ls_mse`]).
//! * A linear estimator is a list of [`SparseRow`]s, one per target: `H_hat_t = sum w_j
//!   H_ls(pilot j)`, with `j` an index into the pilot list. Cascades (time then frequency) are
//!   combined into one row per target by [`compose_rows`].
//!
//! The error covariance of any linear `W` (REFERENCES.md item 6) is
//! `C_e(W) = R_hh - W R_hp^H - R_hp W^H + W (R_pp + sigma^2 I) W^H`, with `R_hp = E[H H_p^H]`,
//! `R_pp = E[H_p H_p^H]`; its diagonal is the per-target MSE ([`error_covariance_diag`]). The
//! LMMSE weights `W = R_hp (R_pp + sigma^2 I)^-1` ([`lmmse_weights`]) minimise every diagonal
//! entry and give `C_e = R_hh - W R_hp^H` ([`lmmse_error_diag`]).
//!
//! Source status (REFERENCES.md item 6 and its appendix; no equation numbers confirmed): the
//! Li, Cimini & Sollenberger 1998 and Edfors et al. 1998 citations are confirmed; the LMMSE MSE
//! expression is the standard one (from memory there, verified by Monte Carlo); van de Beek et
//! al. 1995 and Hoeher, Kaiser & Robertson 1997 are from memory. The effective-SNR model is from
//! memory (Hassibi & Hochwald 2003, citation confirmed against a bibliographic record) and is
//! checked here by Monte Carlo. Each `*_SOURCE` constant carries its status in brackets.

use core::f64::consts::{LN_10, PI};
use std::collections::BTreeMap;
use std::fmt;

use nalgebra::DMatrix;
use num_complex::Complex;

use super::ber;
use super::freq_corr;

/// Source of [`lmmse_weights`], [`error_covariance_diag`] and [`lmmse_error_diag`].
pub const LMMSE_SOURCE: &str = "Y. Li, L. J. Cimini Jr., N. R. Sollenberger, \"Robust channel \
     estimation for OFDM systems with rapid dispersive fading channels,\" IEEE Trans. Commun. \
     46(7):902\u{2013}915, July 1998 [citation confirmed]; O. Edfors, M. Sandell, \
     J.-J. van de Beek, S. K. Wilson, P. O. B\u{f6}rjesson, \"OFDM channel estimation by \
     singular value decomposition,\" IEEE Trans. Commun. 46(7):931\u{2013}939, July 1998 \
     [citation confirmed]; P. Hoeher, S. Kaiser, P. Robertson, \"Two-dimensional \
     pilot-symbol-aided channel estimation by Wiener filtering,\" Proc. ICASSP 1997 [from \
     memory]; LMMSE error covariance as in REFERENCES.md item 6 [standard form, from memory, \
     verified numerically there]";

/// Source of [`TimeCorr::Jakes`]: the classical (Clarke/Jakes) Doppler spectrum's
/// autocorrelation, sampled once per OFDM symbol.
pub const JAKES_TIME_CORR_SOURCE: &str = "R. H. Clarke, Bell Syst. Tech. J. 47(6), 1968; \
     W. C. Jakes (ed.), Microwave Mobile Communications, Wiley 1974: r_t(dn) = \
     J0(2 pi fd Tsym dn), REFERENCES.md items 3 and 6 [from memory, verified numerically there]";

/// Source of [`FreqCorr::UniformPdp`] and the robust design: a uniform delay profile, the
/// design prior of the robust estimator of Li, Cimini & Sollenberger.
pub const ROBUST_DESIGN_SOURCE: &str = "Y. Li, L. J. Cimini Jr., N. R. Sollenberger, IEEE \
     Trans. Commun. 46(7):902\u{2013}915, 1998: the robust estimator designed for a uniform \
     delay profile [citation confirmed; design prior from memory]; r_f of a uniform profile \
     over [0, span) is exp(-j theta/2) sin(theta/2)/(theta/2), theta = 2 pi dk span / N \
     [Fourier transform, derived here]";

/// Source of [`effective_snr`], [`snr_loss_from_mse_db`] and [`ber_rayleigh_with_estimate`].
pub const EFFECTIVE_SNR_SOURCE: &str = "B. Hassibi, B. M. Hochwald, \"How much training is \
     needed in multiple-antenna wireless links?\", IEEE Trans. Inf. Theory 49(4):951\u{2013}963, \
     2003: with an MMSE estimate the estimation error acts as additional noise, \
     SNR_eff = SNR sigma_hhat^2 / (1 + SNR sigma_e^2) [citation confirmed against a \
     bibliographic record; formula from memory; checked by Monte Carlo here for QPSK]";

/// One row of a linear estimator: `(pilot index, complex weight)` pairs, the estimate at the
/// target being `sum w_j H_ls(pilots[j])`. Indices may repeat (weights then add).
pub type SparseRow = Vec<(usize, Complex<f64>)>;

/// A position on the time-frequency grid: subcarrier index `k` and OFDM symbol index `n`.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub struct GridPos {
    /// Subcarrier index (any integer; offsets are taken without wrapping).
    pub k: i64,
    /// OFDM symbol index.
    pub n: i64,
}

impl GridPos {
    /// The position of subcarrier `k` in OFDM symbol `n`.
    pub const fn new(k: i64, n: i64) -> Self {
        Self { k, n }
    }
}

/// Every `(k, n)` with `k` from `ks` and `n` from `ns`, `k`-major (all symbols of the first
/// subcarrier first).
pub fn grid_positions(ks: &[i64], ns: &[i64]) -> Vec<GridPos> {
    ks.iter()
        .flat_map(|&k| ns.iter().map(move |&n| GridPos::new(k, n)))
        .collect()
}

/// Errors of the estimator computations.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[non_exhaustive]
pub enum EstimationError {
    /// No pilots were given.
    NoPilots,
    /// The noise variance is negative or not finite.
    InvalidNoiseVariance,
    /// `R_pp + sigma^2 I` is not positive definite (e.g. `sigma^2 = 0` with a rank-deficient
    /// `R_pp`), so the LMMSE weights are undefined.
    NotPositiveDefinite,
    /// Row `row` refers to pilot (or inner-row) `index`, which does not exist.
    IndexOutOfRange {
        /// The row (target) holding the bad index.
        row: usize,
        /// The bad index.
        index: usize,
    },
    /// The number of rows differs from the number of targets.
    RowCountMismatch {
        /// Rows given.
        rows: usize,
        /// Targets given.
        targets: usize,
    },
    /// Pilot subcarriers not strictly increasing inside `[0, N)`, a target outside `[0, N)`,
    /// or `N = 0`.
    InvalidLayout,
}

impl fmt::Display for EstimationError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::NoPilots => write!(f, "no pilots"),
            Self::InvalidNoiseVariance => write!(f, "noise variance negative or not finite"),
            Self::NotPositiveDefinite => {
                write!(f, "R_pp + sigma^2 I is not positive definite")
            }
            Self::IndexOutOfRange { row, index } => {
                write!(f, "row {row} refers to index {index}, out of range")
            }
            Self::RowCountMismatch { rows, targets } => {
                write!(f, "{rows} estimator rows for {targets} targets")
            }
            Self::InvalidLayout => write!(
                f,
                "pilots must be strictly increasing in [0, N) and targets inside [0, N)"
            ),
        }
    }
}

impl std::error::Error for EstimationError {}

/// A channel correlation `E[H_a H_b^*]` between two grid positions (dimensionless, unit channel
/// power). Implemented by [`SeparableCorr`] and by any `Fn(GridPos, GridPos) -> Complex<f64>`.
pub trait Correlation {
    /// `E[H_a H_b^*]`; must be Hermitian, `corr(b, a) = corr(a, b)^*`.
    fn corr(&self, a: GridPos, b: GridPos) -> Complex<f64>;
}

impl<F> Correlation for F
where
    F: Fn(GridPos, GridPos) -> Complex<f64>,
{
    fn corr(&self, a: GridPos, b: GridPos) -> Complex<f64> {
        self(a, b)
    }
}

/// Frequency correlation models `r_f(dk) = E[H_{k+dk} H_k^*]` on an `n_fft`-point grid
/// (dimensionless, complex; REFERENCES.md sign: `exp(-j 2 pi dk tau / N)`).
#[derive(Clone, Debug, PartialEq)]
pub enum FreqCorr {
    /// Flat fading across subcarriers: `r_f = 1`.
    Flat,
    /// Continuous, untruncated exponential PDP with rms spread `tau_samples` (model A of
    /// REFERENCES.md item 6): `r_f(dk) = 1 / (1 + j 2 pi tau dk / N)`.
    ExponentialPdp {
        /// RMS delay spread (= mean excess delay), in samples.
        tau_samples: f64,
        /// FFT size `N`.
        n_fft: usize,
    },
    /// Sample-spaced taps, `powers[l]` the linear power at delay `l` samples (model B):
    /// `r_f(dk) = sum_l p_l exp(-j 2 pi dk l / N)`. Not renormalised.
    TapPdp {
        /// Linear tap powers at delays `0, 1, 2, ...` samples; should sum to 1.
        powers: Vec<f64>,
        /// FFT size `N`.
        n_fft: usize,
    },
    /// Taps at arbitrary delays: `r_f(dk) = sum_i p_i exp(-j 2 pi dk d_i / N)`. Not
    /// renormalised.
    DelayPdp {
        /// `(delay in samples, linear power)` of each tap; powers should sum to 1.
        taps: Vec<(f64, f64)>,
        /// FFT size `N`.
        n_fft: usize,
    },
    /// Continuous uniform PDP over `[0, span)` samples (the robust design prior, see
    /// [`ROBUST_DESIGN_SOURCE`]): `r_f(dk) = exp(-j theta/2) sin(theta/2) / (theta/2)`,
    /// `theta = 2 pi dk span / N`.
    UniformPdp {
        /// Width of the delay profile, in samples.
        span_samples: f64,
        /// FFT size `N`.
        n_fft: usize,
    },
}

impl FreqCorr {
    /// `r_f(dk) = E[H_{k+dk} H_k^*]` for a subcarrier offset `dk` (dimensionless, complex).
    pub fn r_f(&self, dk: i64) -> Complex<f64> {
        match self {
            Self::Flat => Complex::new(1.0, 0.0),
            Self::ExponentialPdp { tau_samples, n_fft } => {
                freq_corr::exp_pdp_freq_corr_grid(*tau_samples, dk, *n_fft)
            }
            Self::TapPdp { powers, n_fft } => {
                freq_corr::discrete_pdp_freq_corr_grid(powers, dk, *n_fft)
            }
            Self::DelayPdp { taps, n_fft } => {
                let x = -2.0 * PI * dk as f64 / *n_fft as f64;
                taps.iter()
                    .map(|&(d, p)| Complex::from_polar(p, x * d))
                    .sum()
            }
            Self::UniformPdp {
                span_samples,
                n_fft,
            } => {
                let half = PI * dk as f64 * span_samples / *n_fft as f64;
                let sinc = if half == 0.0 { 1.0 } else { half.sin() / half };
                Complex::from_polar(sinc, -half)
            }
        }
    }
}

/// Time correlation models `r_t(dn)` between OFDM symbols `dn` apart (dimensionless, real).
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum TimeCorr {
    /// Time-invariant channel: `r_t = 1`.
    Static,
    /// Classical (Jakes) Doppler spectrum: `r_t(dn) = J0(2 pi fd Tsym dn)` (`libm::j0`), see
    /// [`JAKES_TIME_CORR_SOURCE`].
    Jakes {
        /// Maximum Doppler shift times the OFDM symbol period *including* the CP, `fd Tsym`.
        fd_tsym: f64,
    },
}

impl TimeCorr {
    /// `r_t(dn) = E[H_{n+dn} H_n^*]` for a symbol offset `dn` (dimensionless, real, even).
    pub fn r_t(&self, dn: i64) -> f64 {
        match self {
            Self::Static => 1.0,
            Self::Jakes { fd_tsym } => libm::j0(2.0 * PI * fd_tsym * dn as f64),
        }
    }
}

/// Separable time × frequency correlation, `E[H_{k,n} H*_{k',n'}] = r_f(k-k') r_t(n-n')`
/// (REFERENCES.md item 6; Li, Cimini & Sollenberger 1998).
#[derive(Clone, Debug, PartialEq)]
pub struct SeparableCorr {
    /// Frequency correlation.
    pub freq: FreqCorr,
    /// Time correlation.
    pub time: TimeCorr,
}

impl SeparableCorr {
    /// The product model of `freq` and `time`.
    pub fn new(freq: FreqCorr, time: TimeCorr) -> Self {
        Self { freq, time }
    }

    /// A frequency-only model (time-invariant channel).
    pub fn freq_only(freq: FreqCorr) -> Self {
        Self::new(freq, TimeCorr::Static)
    }
}

impl Correlation for SeparableCorr {
    fn corr(&self, a: GridPos, b: GridPos) -> Complex<f64> {
        self.freq.r_f(a.k - b.k) * self.time.r_t(a.n - b.n)
    }
}

/// Tap powers of model B of REFERENCES.md item 6: `taps` sample-spaced taps,
/// `p_l ∝ exp(-l / tau)`, normalised to sum to 1 (linear). Empty if `taps = 0`.
pub fn exp_tap_powers(tau_samples: f64, taps: usize) -> Vec<f64> {
    let raw: Vec<f64> = (0..taps)
        .map(|l| (-(l as f64) / tau_samples).exp())
        .collect();
    let sum: f64 = raw.iter().sum();
    raw.into_iter().map(|p| p / sum).collect()
}

/// A uniform delay profile over `[0, span)` samples sampled by `taps` equal taps at delays
/// `m span / taps`, `m = 0..taps` (each of power `1/taps`), for [`FreqCorr::DelayPdp`]. With
/// `span = N/D` and 64 taps this is the robust design prior the REFERENCES.md item 6 tables
/// were computed with; [`FreqCorr::UniformPdp`] is its continuous limit. The sampling matters
/// there: far from the target (`dk` up to `N`) the sampled `r_f` drifts in phase by about
/// `2 pi dk span / (128 N)`, and the robust MSEs of Table 6b move by 1 % to 23 % if the
/// continuous prior is used instead (computed here, not a published figure).
pub fn uniform_pdp_taps(span_samples: f64, taps: usize) -> Vec<(f64, f64)> {
    (0..taps)
        .map(|m| (m as f64 * span_samples / taps as f64, 1.0 / taps as f64))
        .collect()
}

/// MSE of the LS estimate at a pilot (dimensionless, relative to unit channel power), which is
/// also the noise variance `sigma^2 = N0 / |X_p|^2` used in the LMMSE design:
/// `1 / (snr_linear pilot_boost)`, for `snr_linear` = Es/N0 per data subcarrier and
/// `pilot_boost = |X_p|^2 / Es` (1 without boost). Source: REFERENCES.md item 6
/// (`MSE_LS = N0 / |X_p|^2`).
pub fn ls_mse(snr_linear: f64, pilot_boost: f64) -> f64 {
    1.0 / (snr_linear * pilot_boost)
}

/// The correlation matrix `[E[H_{rows[i]} H_{cols[j]}^*]]` (`rows.len() x cols.len()`).
pub fn corr_matrix<C: Correlation + ?Sized>(
    corr: &C,
    rows: &[GridPos],
    cols: &[GridPos],
) -> DMatrix<Complex<f64>> {
    DMatrix::from_fn(rows.len(), cols.len(), |i, j| corr.corr(rows[i], cols[j]))
}

fn check_noise(noise_var: f64) -> Result<(), EstimationError> {
    if noise_var.is_finite() && noise_var >= 0.0 {
        Ok(())
    } else {
        Err(EstimationError::InvalidNoiseVariance)
    }
}

/// LMMSE (Wiener) weights `W = R_hp (R_pp + sigma^2 I)^-1` (`targets.len() x pilots.len()`,
/// dimensionless) for the channel at `targets` from the LS values at `pilots`, designed for the
/// correlation `corr` and LS noise variance `noise_var` = `sigma^2 = N0/|X_p|^2` (see
/// [`ls_mse`]). Solved by a Cholesky factorisation of `R_pp + sigma^2 I`. `noise_var = 0` gives
/// the noiseless interpolator `R_hp R_pp^-1`.
///
/// Source: REFERENCES.md item 6 — see [`LMMSE_SOURCE`].
pub fn lmmse_weights<C: Correlation + ?Sized>(
    corr: &C,
    pilots: &[GridPos],
    targets: &[GridPos],
    noise_var: f64,
) -> Result<DMatrix<Complex<f64>>, EstimationError> {
    check_noise(noise_var)?;
    if pilots.is_empty() {
        return Err(EstimationError::NoPilots);
    }
    let mut a = corr_matrix(corr, pilots, pilots);
    for i in 0..pilots.len() {
        a[(i, i)] += noise_var;
    }
    let chol = a.cholesky().ok_or(EstimationError::NotPositiveDefinite)?;
    let r_hp = corr_matrix(corr, targets, pilots);
    // W^H = A^-1 R_hp^H since A is Hermitian.
    Ok(chol.solve(&r_hp.adjoint()).adjoint())
}

/// The LMMSE row for one `target` using only the pilots `subset` (indices into `pilots`): the
/// banded / K-nearest-pilot Wiener interpolator, `w = r_tp (R_ss + sigma^2 I)^-1`, returned with
/// indices into `pilots`. `noise_var` is `sigma^2` (see [`lmmse_weights`]).
///
/// Source: REFERENCES.md item 6 restricted to a subset of pilots — see [`LMMSE_SOURCE`].
pub fn lmmse_row<C: Correlation + ?Sized>(
    corr: &C,
    pilots: &[GridPos],
    subset: &[usize],
    target: GridPos,
    noise_var: f64,
) -> Result<SparseRow, EstimationError> {
    if let Some(&index) = subset.iter().find(|&&i| i >= pilots.len()) {
        return Err(EstimationError::IndexOutOfRange { row: 0, index });
    }
    let sub: Vec<GridPos> = subset.iter().map(|&i| pilots[i]).collect();
    let w = lmmse_weights(corr, &sub, &[target], noise_var)?;
    Ok(subset
        .iter()
        .enumerate()
        .map(|(j, &i)| (i, w[(0, j)]))
        .collect())
}

/// Every row of a dense weight matrix (`targets x pilots`) as a [`SparseRow`] (zeros kept).
pub fn rows_from_matrix(w: &DMatrix<Complex<f64>>) -> Vec<SparseRow> {
    (0..w.nrows())
        .map(|t| (0..w.ncols()).map(|j| (j, w[(t, j)])).collect())
        .collect()
}

fn check_rows(rows: &[SparseRow], targets: usize, columns: usize) -> Result<(), EstimationError> {
    if rows.len() != targets {
        return Err(EstimationError::RowCountMismatch {
            rows: rows.len(),
            targets,
        });
    }
    for (row, r) in rows.iter().enumerate() {
        if let Some(&(index, _)) = r.iter().find(|(i, _)| *i >= columns) {
            return Err(EstimationError::IndexOutOfRange { row, index });
        }
    }
    Ok(())
}

/// Per-target MSE of ANY linear estimator (dimensionless, relative to unit channel power): the
/// diagonal of `C_e(W) = R_hh - W R_hp^H - R_hp W^H + W (R_pp + sigma^2 I) W^H`, i.e. for target
/// `t` with row `w`,
/// `[C_e]_tt = R_tt - 2 Re(sum_j w_j E[H_t H_pj^*]^*) + sum_ij w_i (R_pp + sigma^2 I)_ij w_j^*`.
/// `rows[t]` holds the weights of target `t` on the LS values at `pilots` (indices into
/// `pilots`); `noise_var` is the LS noise variance `sigma^2 = N0/|X_p|^2` of the channel the
/// estimator runs on (see [`ls_mse`]), and `corr` is the true channel correlation. Cost
/// `O(nnz^2)` correlation evaluations per row.
///
/// Source: REFERENCES.md item 6 ("any linear W") — see [`LMMSE_SOURCE`].
pub fn error_covariance_diag<C: Correlation + ?Sized>(
    corr: &C,
    pilots: &[GridPos],
    targets: &[GridPos],
    rows: &[SparseRow],
    noise_var: f64,
) -> Result<Vec<f64>, EstimationError> {
    check_noise(noise_var)?;
    check_rows(rows, targets.len(), pilots.len())?;
    Ok(targets
        .iter()
        .zip(rows)
        .map(|(&t, row)| {
            let mut cross = Complex::new(0.0, 0.0);
            let mut quad = Complex::new(0.0, 0.0);
            for &(i, wi) in row {
                cross += wi * corr.corr(t, pilots[i]).conj();
                for &(j, wj) in row {
                    let mut a = corr.corr(pilots[i], pilots[j]);
                    if i == j {
                        a += noise_var;
                    }
                    quad += wi * a * wj.conj();
                }
            }
            corr.corr(t, t).re - 2.0 * cross.re + quad.re
        })
        .collect())
}

/// Average over the targets of [`error_covariance_diag`] (dimensionless): the MSE of a linear
/// estimator, `tr(C_e(W)) / targets`. Returns `Ok(NaN)` for no targets.
///
/// Source: REFERENCES.md item 6 — see [`LMMSE_SOURCE`].
pub fn mse_of_linear<C: Correlation + ?Sized>(
    corr: &C,
    pilots: &[GridPos],
    targets: &[GridPos],
    rows: &[SparseRow],
    noise_var: f64,
) -> Result<f64, EstimationError> {
    let d = error_covariance_diag(corr, pilots, targets, rows, noise_var)?;
    Ok(mean(&d))
}

fn mean(v: &[f64]) -> f64 {
    v.iter().sum::<f64>() / v.len() as f64
}

/// Per-target MSE of the full LMMSE estimator designed for the true correlation and noise
/// (dimensionless): `[C_e]_tt = R_tt - [W R_hp^H]_tt`, `W = R_hp (R_pp + sigma^2 I)^-1`, the
/// closed form valid only for the matched Wiener filter.
///
/// Source: REFERENCES.md item 6 — see [`LMMSE_SOURCE`].
pub fn lmmse_error_diag<C: Correlation + ?Sized>(
    corr: &C,
    pilots: &[GridPos],
    targets: &[GridPos],
    noise_var: f64,
) -> Result<Vec<f64>, EstimationError> {
    let w = lmmse_weights(corr, pilots, targets, noise_var)?;
    Ok(targets
        .iter()
        .enumerate()
        .map(|(t, &pos)| {
            let wr: Complex<f64> = pilots
                .iter()
                .enumerate()
                .map(|(j, &p)| w[(t, j)] * corr.corr(pos, p).conj())
                .sum();
            corr.corr(pos, pos).re - wr.re
        })
        .collect())
}

/// Average MSE of the full LMMSE estimator over `targets` (dimensionless), `tr(C_e)/targets`
/// from [`lmmse_error_diag`].
///
/// Source: REFERENCES.md item 6 — see [`LMMSE_SOURCE`].
pub fn lmmse_mse_avg<C: Correlation + ?Sized>(
    corr: &C,
    pilots: &[GridPos],
    targets: &[GridPos],
    noise_var: f64,
) -> Result<f64, EstimationError> {
    Ok(mean(&lmmse_error_diag(corr, pilots, targets, noise_var)?))
}

/// Circular linear interpolation in frequency between the LS values of neighbouring pilots:
/// for target `k`, with `a <= k < b` the bracketing pilots (wrapping from the last pilot to the
/// first plus `N`), weights `1 - f` on `a` and `f` on `b`, `f = (k - a)/(b - a)`. `pilot_ks`
/// must be strictly increasing inside `[0, n_fft)` and every target inside `[0, n_fft)`; rows
/// index into `pilot_ks`. A single pilot gives weight 1 everywhere.
///
/// Source: the "circular linear interpolation" of REFERENCES.md item 6, Table 6b (common
/// practice).
pub fn circular_linear_interp_rows(
    pilot_ks: &[i64],
    target_ks: &[i64],
    n_fft: usize,
) -> Result<Vec<SparseRow>, EstimationError> {
    let n = i64::try_from(n_fft).map_err(|_| EstimationError::InvalidLayout)?;
    if pilot_ks.is_empty() {
        return Err(EstimationError::NoPilots);
    }
    let ordered = pilot_ks.windows(2).all(|w| w[0] < w[1]);
    let inside = |k: i64| (0..n).contains(&k);
    if n == 0 || !ordered || !pilot_ks.iter().all(|&k| inside(k)) {
        return Err(EstimationError::InvalidLayout);
    }
    if !target_ks.iter().all(|&k| inside(k)) {
        return Err(EstimationError::InvalidLayout);
    }
    let p = pilot_ks.len();
    let one = |w: f64| Complex::new(w, 0.0);
    Ok(target_ks
        .iter()
        .map(|&k| {
            if p == 1 {
                return vec![(0, one(1.0))];
            }
            // Number of pilots at or below k; 0 means k lies before the first pilot.
            let above = pilot_ks.partition_point(|&pk| pk <= k);
            let (ia, a) = if above == 0 {
                (p - 1, pilot_ks[p - 1] - n)
            } else {
                (above - 1, pilot_ks[above - 1])
            };
            let (ib, b) = if above == p {
                (0, pilot_ks[0] + n)
            } else {
                (above, pilot_ks[above])
            };
            let f = (k - a) as f64 / (b - a) as f64;
            if f == 0.0 {
                vec![(ia, one(1.0))]
            } else {
                vec![(ia, one(1.0 - f)), (ib, one(f))]
            }
        })
        .collect())
}

/// Composes a cascade of linear stages into one row per final target: `outer[t]` weights the
/// outputs of `inner` (indices into `inner`), each `inner[i]` weights the LS pilot values; the
/// result is `sum_i outer_ti inner_i`, indices into the pilots, sorted, duplicates merged. Use it
/// for a time filter at the pilot subcarriers followed by frequency interpolation.
pub fn compose_rows(
    outer: &[SparseRow],
    inner: &[SparseRow],
) -> Result<Vec<SparseRow>, EstimationError> {
    for (row, r) in outer.iter().enumerate() {
        if let Some(&(index, _)) = r.iter().find(|(i, _)| *i >= inner.len()) {
            return Err(EstimationError::IndexOutOfRange { row, index });
        }
    }
    Ok(outer
        .iter()
        .map(|r| {
            let mut acc: BTreeMap<usize, Complex<f64>> = BTreeMap::new();
            for &(i, a) in r {
                for &(j, b) in &inner[i] {
                    *acc.entry(j).or_default() += a * b;
                }
            }
            acc.into_iter().collect()
        })
        .collect())
}

/// Effective SNR of a one-tap equaliser using a channel estimate whose error variance is `mse`
/// (unit channel power), treating the error as additional noise:
/// `SNR_eff = SNR (1 - mse) / (1 + SNR mse)` (linear). Exact in form for an MMSE estimate
/// (error orthogonal to the estimate, `E|H_hat|^2 = 1 - mse`); an approximation for other
/// estimates. Returns `None` unless `snr_linear > 0` is finite and `0 <= mse < 1`.
///
/// Source: Hassibi & Hochwald 2003 (from memory) — see [`EFFECTIVE_SNR_SOURCE`].
pub fn effective_snr(snr_linear: f64, mse: f64) -> Option<f64> {
    let valid = snr_linear.is_finite() && snr_linear > 0.0 && (0.0..1.0).contains(&mse);
    valid.then(|| snr_linear * (1.0 - mse) / (1.0 + snr_linear * mse))
}

/// SNR loss in dB from equalising with an estimate of error variance `mse`:
/// `10 log10(SNR / SNR_eff) = 10 log10((1 + SNR mse) / (1 - mse))` (see [`effective_snr`]),
/// evaluated with `ln_1p`. Returns `None` unless `snr_linear > 0` is finite and `0 <= mse < 1`.
///
/// Source: Hassibi & Hochwald 2003 (from memory) — see [`EFFECTIVE_SNR_SOURCE`].
pub fn snr_loss_from_mse_db(snr_linear: f64, mse: f64) -> Option<f64> {
    effective_snr(snr_linear, mse)?;
    Some(10.0 / LN_10 * ((snr_linear * mse).ln_1p() - (-mse).ln_1p()))
}

/// BER of Gray BPSK/QPSK/square M-QAM over flat Rayleigh fading when the one-tap equaliser uses
/// an MMSE channel estimate of error variance `mse`: [`ber::ber_rayleigh`] at the effective SNR
/// of [`effective_snr`], for `es_n0_linear` = Es/N0 per data subcarrier. Exact for BPSK/QPSK
/// with a Gaussian LMMSE error (the error times a constant-modulus symbol is Gaussian noise
/// independent of the estimate); an approximation for 16-QAM and up, whose error term depends
/// on the symbol energy (derived here).
///
/// Returns `None` for an unsupported `bits_per_symbol` or invalid SNR or `mse`.
pub fn ber_rayleigh_with_estimate(
    bits_per_symbol: u32,
    es_n0_linear: f64,
    mse: f64,
) -> Option<f64> {
    let snr = effective_snr(es_n0_linear, mse)?;
    ber::ber_rayleigh(bits_per_symbol, ber::eb_n0_from_es_n0(snr, bits_per_symbol))
}

#[cfg(test)]
mod tests {
    //! Check values are from `/work/shared/REFERENCES.md` item 6 (Tables 6a and 6b, the
    //! per-subcarrier MSE rows, the first entries of W, the 2-D example and the model B tap
    //! powers), computed there with numpy/scipy; sources: Li, Cimini & Sollenberger 1998,
    //! Edfors et al. 1998, Hoeher, Kaiser & Robertson 1997 (see `LMMSE_SOURCE`). Tables with 6
    //! significant digits use `TABLE_REL`; other printed precisions are stated at each check.
    use super::*;

    use super::super::table::{assert_rel, TABLE_REL};
    use crate::rng::stream_rng;
    use rand_distr::{Distribution, StandardNormal};

    const N: usize = 64;

    /// The worked example of REFERENCES.md item 6: 64 circular subcarriers, pilots at
    /// `0, D, 2D, ...`, model A (continuous exponential PDP) or B (16 taps, `p_l ∝ exp(-l/tau)`).
    struct Example {
        corr: SeparableCorr,
        pilots: Vec<GridPos>,
        targets: Vec<GridPos>,
        pilot_ks: Vec<i64>,
    }

    fn example(d: i64, tau: f64, model_b: bool) -> Example {
        let freq = if model_b {
            FreqCorr::TapPdp {
                powers: exp_tap_powers(tau, 16),
                n_fft: N,
            }
        } else {
            FreqCorr::ExponentialPdp {
                tau_samples: tau,
                n_fft: N,
            }
        };
        let pilot_ks: Vec<i64> = (0..N as i64).step_by(d as usize).collect();
        Example {
            corr: SeparableCorr::freq_only(freq),
            pilots: grid_positions(&pilot_ks, &[0]),
            targets: grid_positions(&(0..N as i64).collect::<Vec<_>>(), &[0]),
            pilot_ks,
        }
    }

    /// The six configurations of Tables 6a/6b, in table order.
    const CONFIGS: [(i64, f64, bool, &str); 6] = [
        (8, 4.0, false, "D=8, tau=4, A"),
        (8, 4.0, true, "D=8, tau=4, B"),
        (4, 4.0, false, "D=4, tau=4, A"),
        (4, 4.0, true, "D=4, tau=4, B"),
        (8, 1.0, false, "D=8, tau=1, A"),
        (8, 1.0, true, "D=8, tau=1, B"),
    ];

    fn snr(db: f64) -> f64 {
        10f64.powf(db / 10.0)
    }

    /// Relative error, for reporting the worst case.
    fn rel(got: f64, want: f64) -> f64 {
        (got - want).abs() / want.abs()
    }

    #[test]
    fn table_6a_lmmse_mse_against_snr() {
        // REFERENCES.md item 6, Table 6a: average LMMSE MSE over all 64 subcarriers at
        // 0/10/20/30 dB (Li, Cimini & Sollenberger 1998; Edfors et al. 1998). Checked both
        // through the general C_e(W) and through the Wiener closed form R_hh - W R_hp^H.
        let table = [
            [0.622822, 0.350315, 0.294252, 0.287968],
            [0.576018, 0.279745, 0.217781, 0.210776],
            [0.434462, 0.129726, 0.0620089, 0.0537703],
            [0.388486, 0.079403, 0.00969317, 0.00099675],
            [0.331147, 0.0753644, 0.0178364, 0.00912146],
            [0.27895, 0.0557412, 0.00877485, 0.00163266],
        ];
        let mut worst = 0.0f64;
        for ((d, tau, b, label), want_row) in CONFIGS.into_iter().zip(table) {
            let ex = example(d, tau, b);
            for (snr_db, want) in [0.0, 10.0, 20.0, 30.0].into_iter().zip(want_row) {
                let s2 = ls_mse(snr(snr_db), 1.0);
                let w = lmmse_weights(&ex.corr, &ex.pilots, &ex.targets, s2).unwrap();
                let general =
                    mse_of_linear(&ex.corr, &ex.pilots, &ex.targets, &rows_from_matrix(&w), s2)
                        .unwrap();
                let closed = lmmse_mse_avg(&ex.corr, &ex.pilots, &ex.targets, s2).unwrap();
                let what = format!("Table 6a {label} {snr_db} dB");
                assert_rel(general, want, TABLE_REL, &what);
                assert_rel(closed, want, TABLE_REL, &what);
                worst = worst.max(rel(general, want)).max(rel(closed, want));
            }
        }
        eprintln!("Table 6a: max relative error {worst:e}");
    }

    #[test]
    fn table_6b_estimators_at_10_db() {
        // REFERENCES.md item 6, Table 6b at 10 dB (Li, Cimini & Sollenberger 1998 for the LMMSE
        // and the robust design; Edfors et al. 1998): columns LS at pilots, LMMSE avg, LMMSE
        // data subcarriers only, LMMSE at pilot subcarriers, W = R_hp R_pp^-1 (no noise term),
        // circular linear interpolation, robust design (uniform PDP over [0, N/D)).
        let table = [
            [
                0.1, 0.350315, 0.38764, 0.0890425, 0.358047, 0.691357, 0.388634,
            ],
            [
                0.1, 0.279745, 0.307095, 0.0883002, 0.288988, 0.551683, 0.429658,
            ],
            [
                0.1, 0.129726, 0.145767, 0.0816027, 0.147024, 0.31021, 0.168411,
            ],
            [0.1, 0.079403, 0.079403, 0.079403, 0.1, 0.228863, 0.21263],
            [
                0.1, 0.0753644, 0.0768905, 0.0646821, 0.119831, 0.17913, 0.233216,
            ],
            [
                0.1, 0.0557412, 0.0558317, 0.0551077, 0.100603, 0.0924249, 0.466756,
            ],
        ];
        let s2 = ls_mse(snr(10.0), 1.0);
        let mut worst = 0.0f64;
        for ((d, tau, b, label), want) in CONFIGS.into_iter().zip(table) {
            let ex = example(d, tau, b);
            let mut check = |got: f64, want: f64, col: &str| {
                assert_rel(got, want, TABLE_REL, &format!("Table 6b {label} {col}"));
                worst = worst.max(rel(got, want));
            };
            check(s2, want[0], "LS at pilots");

            let diag = lmmse_error_diag(&ex.corr, &ex.pilots, &ex.targets, s2).unwrap();
            let (pil, data): (Vec<_>, Vec<_>) = ex
                .targets
                .iter()
                .zip(&diag)
                .partition(|(t, _)| t.k % d == 0);
            let avg =
                |v: &[(&GridPos, &f64)]| v.iter().map(|(_, &m)| m).sum::<f64>() / v.len() as f64;
            check(mean(&diag), want[1], "LMMSE avg");
            check(avg(&data), want[2], "LMMSE data only");
            check(avg(&pil), want[3], "LMMSE at pilots");

            // Noiseless interpolator: designed with sigma^2 = 0, run at 10 dB.
            let w0 = lmmse_weights(&ex.corr, &ex.pilots, &ex.targets, 0.0).unwrap();
            let m0 = mse_of_linear(
                &ex.corr,
                &ex.pilots,
                &ex.targets,
                &rows_from_matrix(&w0),
                s2,
            )
            .unwrap();
            check(m0, want[4], "no noise term");

            let ks: Vec<i64> = ex.targets.iter().map(|t| t.k).collect();
            let lin = circular_linear_interp_rows(&ex.pilot_ks, &ks, N).unwrap();
            let ml = mse_of_linear(&ex.corr, &ex.pilots, &ex.targets, &lin, s2).unwrap();
            check(ml, want[5], "circular linear");

            // Robust design: LMMSE designed for a uniform PDP over [0, N/D), sampled by 64
            // equal taps as REFERENCES.md's generator does, at the true SNR, run on the true
            // channel.
            let span = N as f64 / d as f64;
            let robust = SeparableCorr::freq_only(FreqCorr::DelayPdp {
                taps: uniform_pdp_taps(span, 64),
                n_fft: N,
            });
            let wr = lmmse_weights(&robust, &ex.pilots, &ex.targets, s2).unwrap();
            let mr = mse_of_linear(
                &ex.corr,
                &ex.pilots,
                &ex.targets,
                &rows_from_matrix(&wr),
                s2,
            )
            .unwrap();
            check(mr, want[6], "robust design");
        }
        eprintln!("Table 6b: max relative error {worst:e}");
    }

    #[test]
    fn per_subcarrier_mse_rows() {
        // REFERENCES.md item 6, per-subcarrier LMMSE MSE at 10 dB, k = 0..8 (Li, Cimini &
        // Sollenberger 1998; Edfors et al. 1998). Printed with 5 significant digits: relative
        // 5e-5 (half a unit of the fifth digit when the leading digit is 1).
        let rows = [
            (
                4.0,
                [
                    0.089758, 0.18938, 0.36355, 0.47895, 0.51363, 0.47215, 0.35394, 0.18414,
                    0.088951,
                ],
            ),
            (
                1.0,
                [
                    0.076748, 0.069748, 0.066804, 0.066004, 0.065764, 0.065193, 0.064152, 0.063017,
                    0.062277,
                ],
            ),
        ];
        for (tau, want) in rows {
            let ex = example(8, tau, false);
            let s2 = ls_mse(snr(10.0), 1.0);
            let w = lmmse_weights(&ex.corr, &ex.pilots, &ex.targets, s2).unwrap();
            let diag =
                error_covariance_diag(&ex.corr, &ex.pilots, &ex.targets, &rows_from_matrix(&w), s2)
                    .unwrap();
            for (k, &want) in want.iter().enumerate() {
                assert_rel(diag[k], want, 5e-5, &format!("MSE_k tau={tau} k={k}"));
            }
        }
    }

    #[test]
    fn first_entries_of_w() {
        // REFERENCES.md item 6, "First entries of W" (D = 8, tau = 4, model A, 10 dB; Li,
        // Cimini & Sollenberger 1998): printed with 6 decimals, so each of Re and Im must lie
        // within half a unit of the last decimal.
        let ex = example(8, 4.0, false);
        let w = lmmse_weights(&ex.corr, &ex.pilots, &ex.targets, 0.1).unwrap();
        let c = Complex::new;
        let table = [
            (
                0,
                [
                    c(0.897585, -0.0),
                    c(0.002150, 0.028968),
                    c(0.005569, 0.013701),
                ],
            ),
            (
                1,
                [
                    c(0.748660, -0.342436),
                    c(-0.070096, 0.111580),
                    c(-0.021734, 0.055282),
                ],
            ),
            (
                4,
                [
                    c(0.106363, -0.412506),
                    c(0.083942, 0.431624),
                    c(0.047584, 0.135162),
                ],
            ),
        ];
        let tol = 5e-7 + 1e-12;
        for (k, want) in table {
            for (j, want) in want.into_iter().enumerate() {
                let got = w[(k, j)];
                assert!(
                    (got.re - want.re).abs() <= tol && (got.im - want.im).abs() <= tol,
                    "W[{k},{j}] = {got}, want {want}"
                );
            }
        }
        // The banded single-row form with all pilots reproduces the same row.
        let all: Vec<usize> = (0..ex.pilots.len()).collect();
        let row = lmmse_row(&ex.corr, &ex.pilots, &all, GridPos::new(1, 0), 0.1).unwrap();
        assert!((row[0].1 - c(0.748660, -0.342436)).norm() <= 2.0 * tol);
    }

    #[test]
    fn two_dimensional_example() {
        // REFERENCES.md item 6, 2-D example (Hoeher, Kaiser & Robertson 1997; Li, Cimini &
        // Sollenberger 1998): 64 x 8 grid, pilots on k = 0, 8, ..., 56 in the listed symbols,
        // model A in frequency, J0(2 pi fd Tsym dn) in time, full 2-D LMMSE at 10 dB; average
        // and worst-position MSE over the 512 positions.
        let table: [(f64, f64, &[i64], f64, f64); 9] = [
            (1.0, 0.01, &[0, 4], 0.0569345, 0.265238),
            (1.0, 0.01, &[0, 7], 0.0521973, 0.247699),
            (1.0, 0.01, &[0, 3, 6], 0.0416877, 0.229605),
            (1.0, 0.05, &[0, 4], 0.0976645, 0.422691),
            (1.0, 0.05, &[0, 7], 0.100922, 0.323832),
            (1.0, 0.05, &[0, 3, 6], 0.0594528, 0.294014),
            (4.0, 0.05, &[0, 4], 0.368274, 0.878999),
            (4.0, 0.05, &[0, 7], 0.367267, 0.858218),
            (4.0, 0.05, &[0, 3, 6], 0.333133, 0.853051),
        ];
        let pilot_ks: Vec<i64> = (0..64).step_by(8).collect();
        let all_k: Vec<i64> = (0..64).collect();
        let all_n: Vec<i64> = (0..8).collect();
        let targets = grid_positions(&all_k, &all_n);
        let mut worst = 0.0f64;
        for (tau, fd_tsym, syms, want_avg, want_max) in table {
            let corr = SeparableCorr::new(
                FreqCorr::ExponentialPdp {
                    tau_samples: tau,
                    n_fft: N,
                },
                TimeCorr::Jakes { fd_tsym },
            );
            let pilots = grid_positions(&pilot_ks, syms);
            let w = lmmse_weights(&corr, &pilots, &targets, 0.1).unwrap();
            let diag = error_covariance_diag(&corr, &pilots, &targets, &rows_from_matrix(&w), 0.1)
                .unwrap();
            let max = diag.iter().copied().fold(f64::MIN, f64::max);
            let what = format!("2-D tau={tau} fdTsym={fd_tsym} symbols {syms:?}");
            assert_rel(mean(&diag), want_avg, TABLE_REL, &format!("{what} avg"));
            assert_rel(max, want_max, TABLE_REL, &format!("{what} worst"));
            worst = worst
                .max(rel(mean(&diag), want_avg))
                .max(rel(max, want_max));
        }
        eprintln!("2-D table: max relative error {worst:e}");
    }

    #[test]
    fn model_b_tap_powers_and_delays() {
        // REFERENCES.md item 6, model B: tap powers for tau = 4 (6 decimals: within 5e-7) and
        // the mean and rms delays (6 decimals) for tau = 4 and tau = 1.
        let want = [
            0.225326, 0.175484, 0.136667, 0.106437, 0.082893, 0.064557, 0.050277, 0.039156,
            0.030495, 0.023749, 0.018496, 0.014405, 0.011218, 0.008737, 0.006804, 0.005299,
        ];
        let p = exp_tap_powers(4.0, 16);
        for (l, (&got, &want)) in p.iter().zip(&want).enumerate() {
            assert!(
                (got - want).abs() <= 5e-7 + 1e-12,
                "p_{l} = {got}, want {want}"
            );
        }
        for (tau, mean_d, rms_d) in [(4.0, 3.222294, 3.324384), (1.0, 0.581975, 0.959502)] {
            let p = exp_tap_powers(tau, 16);
            let m1: f64 = p.iter().enumerate().map(|(l, q)| l as f64 * q).sum();
            let m2: f64 = p.iter().enumerate().map(|(l, q)| (l * l) as f64 * q).sum();
            let rms = (m2 - m1 * m1).sqrt();
            assert!((m1 - mean_d).abs() <= 5e-7 + 1e-12, "mean delay {m1}");
            assert!((rms - rms_d).abs() <= 5e-7 + 1e-12, "rms delay {rms}");
        }
    }

    #[test]
    fn sign_convention_and_correlation_models() {
        // REFERENCES.md conventions: r_f(dk) = E[H_{k+dk} H_k^*] with the numpy FFT sign, so
        // Im r_f < 0 for small dk > 0 and r_f(-dk) = r_f(dk)^*, for every delay model.
        let models = [
            FreqCorr::ExponentialPdp {
                tau_samples: 2.0,
                n_fft: N,
            },
            FreqCorr::TapPdp {
                powers: exp_tap_powers(2.0, 16),
                n_fft: N,
            },
            FreqCorr::DelayPdp {
                taps: vec![(0.0, 0.5), (2.5, 0.5)],
                n_fft: N,
            },
            FreqCorr::UniformPdp {
                span_samples: 8.0,
                n_fft: N,
            },
        ];
        for m in &models {
            assert!(m.r_f(1).im < 0.0, "{m:?}");
            assert!((m.r_f(0) - Complex::new(1.0, 0.0)).norm() < 1e-12, "{m:?}");
            for dk in [1i64, 3, 7] {
                assert!((m.r_f(-dk) - m.r_f(dk).conj()).norm() < 1e-14);
            }
        }
        // Integer delays through DelayPdp agree with the tap-sum model (definition, item 4).
        let p = exp_tap_powers(3.0, 16);
        let taps: Vec<(f64, f64)> = p.iter().enumerate().map(|(l, &q)| (l as f64, q)).collect();
        let a = FreqCorr::TapPdp {
            powers: p,
            n_fft: N,
        };
        let b = FreqCorr::DelayPdp { taps, n_fft: N };
        for dk in -9..9 {
            assert!((a.r_f(dk) - b.r_f(dk)).norm() < 1e-13);
        }
        // The 64-tap sampled uniform profile tends to the continuous one as taps grow
        // (Riemann sum of the Fourier integral).
        let fine = FreqCorr::DelayPdp {
            taps: uniform_pdp_taps(8.0, 100_000),
            n_fft: N,
        };
        let cont = FreqCorr::UniformPdp {
            span_samples: 8.0,
            n_fft: N,
        };
        for dk in [1i64, 3, 5] {
            assert!((fine.r_f(dk) - cont.r_f(dk)).norm() < 1e-4);
        }
        // Jakes time correlation: J0 zero crossing at 2 pi fd Tsym dn = 2.404826 (first zero
        // of J0, Abramowitz & Stegun Table 9.5, from memory).
        let t = TimeCorr::Jakes {
            fd_tsym: 2.404_825_557_695_773 / (2.0 * PI),
        };
        assert!(t.r_t(1).abs() < 1e-9);
        assert_eq!(TimeCorr::Static.r_t(5), 1.0);
        // A closure is a correlation too.
        let flat = |_a: GridPos, _b: GridPos| Complex::new(1.0, 0.0);
        assert_eq!(
            flat.corr(GridPos::new(0, 0), GridPos::new(5, 1)),
            Complex::new(1.0, 0.0)
        );
    }

    #[test]
    fn lmmse_is_optimal_among_linear_rows() {
        // Orthogonality principle (Wiener; REFERENCES.md item 6): perturbing the LMMSE weights
        // in any direction increases every diagonal entry of C_e(W) by w_d (R_pp+s2 I) w_d^H.
        let ex = example(8, 1.0, false);
        let s2 = 0.1;
        let w = lmmse_weights(&ex.corr, &ex.pilots, &ex.targets, s2).unwrap();
        let base =
            error_covariance_diag(&ex.corr, &ex.pilots, &ex.targets, &rows_from_matrix(&w), s2)
                .unwrap();
        let mut pert = w.clone();
        let delta = Complex::new(0.01, -0.02);
        for t in 0..pert.nrows() {
            pert[(t, (t / 8 + 1) % 8)] += delta;
        }
        let moved = error_covariance_diag(
            &ex.corr,
            &ex.pilots,
            &ex.targets,
            &rows_from_matrix(&pert),
            s2,
        )
        .unwrap();
        for (t, (&m, &b)) in moved.iter().zip(&base).enumerate() {
            // Increase = |delta|^2 (1 + s2), since R_pp has a unit diagonal.
            let want = delta.norm_sqr() * (1.0 + s2);
            assert!(((m - b) - want).abs() < 1e-12, "target {t}: {m} - {b}");
        }
    }

    #[test]
    fn cascade_equals_matrix_product() {
        // compose_rows against a dense matrix product (nalgebra), and the MSE of the composed
        // rows equals the MSE of the dense product: a time LMMSE filter over pilot symbols
        // 0 and 4 at each pilot subcarrier, then circular linear interpolation in frequency.
        let pilot_ks: Vec<i64> = (0..64).step_by(8).collect();
        let syms = [0i64, 4];
        let pilots = grid_positions(&pilot_ks, &syms);
        let corr = SeparableCorr::new(
            FreqCorr::ExponentialPdp {
                tau_samples: 1.0,
                n_fft: N,
            },
            TimeCorr::Jakes { fd_tsym: 0.02 },
        );
        let s2 = 0.05;
        // Stage 1: at each pilot subcarrier, estimate symbol 2 from its own two LS values.
        let mid: Vec<GridPos> = pilot_ks.iter().map(|&k| GridPos::new(k, 2)).collect();
        let inner: Vec<SparseRow> = (0..pilot_ks.len())
            .map(|i| lmmse_row(&corr, &pilots, &[2 * i, 2 * i + 1], mid[i], s2).unwrap())
            .collect();
        // Stage 2: circular linear interpolation in frequency at symbol 2.
        let all_k: Vec<i64> = (0..64).collect();
        let outer = circular_linear_interp_rows(&pilot_ks, &all_k, N).unwrap();
        let rows = compose_rows(&outer, &inner).unwrap();
        let dense = |rows: &[SparseRow], cols: usize| {
            let mut m = DMatrix::<Complex<f64>>::zeros(rows.len(), cols);
            for (t, r) in rows.iter().enumerate() {
                for &(j, w) in r {
                    m[(t, j)] += w;
                }
            }
            m
        };
        let product = dense(&outer, inner.len()) * dense(&inner, pilots.len());
        assert!((dense(&rows, pilots.len()) - &product).norm() < 1e-14);
        let targets = grid_positions(&all_k, &[2]);
        let a = mse_of_linear(&corr, &pilots, &targets, &rows, s2).unwrap();
        let b = mse_of_linear(&corr, &pilots, &targets, &rows_from_matrix(&product), s2).unwrap();
        assert!((a - b).abs() < 1e-13);
        // The cascade cannot beat the full 2-D LMMSE on the same pilots.
        let full = lmmse_mse_avg(&corr, &pilots, &targets, s2).unwrap();
        assert!(full < a, "full {full} vs cascade {a}");
    }

    #[test]
    fn input_validation() {
        let ex = example(8, 1.0, false);
        let e = lmmse_weights(&ex.corr, &[], &ex.targets, 0.1);
        assert_eq!(e.unwrap_err(), EstimationError::NoPilots);
        for bad in [-0.1, f64::NAN, f64::INFINITY] {
            let e = lmmse_weights(&ex.corr, &ex.pilots, &ex.targets, bad);
            assert_eq!(e.unwrap_err(), EstimationError::InvalidNoiseVariance);
        }
        // Rank-deficient R_pp (two pilots at one position, flat channel) without noise.
        let flat = SeparableCorr::freq_only(FreqCorr::Flat);
        let twice = [GridPos::new(0, 0), GridPos::new(0, 0)];
        let e = lmmse_weights(&flat, &twice, &ex.targets, 0.0);
        assert_eq!(e.unwrap_err(), EstimationError::NotPositiveDefinite);
        let rows = vec![vec![(9usize, Complex::new(1.0, 0.0))]; 64];
        let e = error_covariance_diag(&ex.corr, &ex.pilots, &ex.targets, &rows, 0.1);
        assert_eq!(
            e.unwrap_err(),
            EstimationError::IndexOutOfRange { row: 0, index: 9 }
        );
        let e = error_covariance_diag(&ex.corr, &ex.pilots, &ex.targets, &rows[..3], 0.1);
        assert_eq!(
            e.unwrap_err(),
            EstimationError::RowCountMismatch {
                rows: 3,
                targets: 64
            }
        );
        assert_eq!(
            circular_linear_interp_rows(&[8, 0], &[1], N).unwrap_err(),
            EstimationError::InvalidLayout
        );
        assert_eq!(
            circular_linear_interp_rows(&[0, 8], &[64], N).unwrap_err(),
            EstimationError::InvalidLayout
        );
        // Irregular pilots: target 2 between pilots 1 and 5 (f = 1/4); target 0 between the
        // last pilot 60 and 1 + 64 (f = 4/5).
        let r = circular_linear_interp_rows(&[1, 5, 60], &[2, 0], N).unwrap();
        assert_eq!(
            r[0],
            vec![(0, Complex::new(0.75, 0.0)), (1, Complex::new(0.25, 0.0))]
        );
        assert!((r[1][0].1.re - 0.2).abs() < 1e-15 && r[1][0].0 == 2);
        assert!((r[1][1].1.re - 0.8).abs() < 1e-15 && r[1][1].0 == 0);
        assert_eq!(effective_snr(10.0, 1.0), None);
        assert_eq!(snr_loss_from_mse_db(0.0, 0.1), None);
        assert!(!EstimationError::NoPilots.to_string().is_empty());
    }

    #[test]
    fn effective_snr_model_against_monte_carlo_qpsk() {
        // Hassibi & Hochwald 2003 (from memory): an MMSE estimate with error variance mse acts
        // like additional noise, SNR_eff = SNR (1 - mse)/(1 + SNR mse). For Gray QPSK in
        // Rayleigh fading this gives the exact BER (Proakis & Salehi 2008 ch. 13 formula at
        // SNR_eff, REFERENCES.md item 5). Monte Carlo: H ~ CN(0,1), one pilot observation
        // H + n_p with var(n_p) = 1/9, MMSE estimate (H + n_p)/(1 + 1/9) (mse = 0.1), QPSK at
        // Es/N0 = 10 dB, detection with the estimate. Tolerance 4 sqrt(p(1-p)/symbols) (bits of
        // one symbol share a channel; counting symbols is conservative). The alternative
        // SNR/(1 + SNR mse), without the (1 - mse), predicts 0.0774 instead of 0.0844 and fails.
        let es_n0 = 10.0;
        let mse = 0.1;
        let s2p = mse / (1.0 - mse);
        let symbols = 200_000;
        let mut rng = stream_rng(0x6e57, 1);
        let mut gauss = |var: f64| {
            let re: f64 = StandardNormal.sample(&mut rng);
            let im: f64 = StandardNormal.sample(&mut rng);
            Complex::new(re, im) * (var / 2.0).sqrt()
        };
        let mut errors = 0u64;
        for i in 0..symbols {
            let h = gauss(1.0);
            let h_hat = (h + gauss(s2p)) / (1.0 + s2p);
            let b0 = i & 1 == 0;
            let b1 = i & 2 == 0;
            let x = Complex::new(if b0 { 1.0 } else { -1.0 }, if b1 { 1.0 } else { -1.0 })
                / 2f64.sqrt();
            let y = h * x + gauss(1.0 / es_n0);
            let z = y * h_hat.conj();
            errors += u64::from((z.re > 0.0) != b0) + u64::from((z.im > 0.0) != b1);
        }
        let measured = errors as f64 / (2 * symbols) as f64;
        let theory = ber_rayleigh_with_estimate(2, es_n0, mse).unwrap();
        let tol = 4.0 * (theory * (1.0 - theory) / symbols as f64).sqrt();
        assert!(
            (measured - theory).abs() <= tol,
            "QPSK BER with estimate: measured {measured}, theory {theory}, tol {tol}"
        );
        // And the loss in dB is 10 log10(SNR/SNR_eff).
        let loss = snr_loss_from_mse_db(es_n0, mse).unwrap();
        let direct = 10.0 * (es_n0 / effective_snr(es_n0, mse).unwrap()).log10();
        assert!((loss - direct).abs() < 1e-12);
        // Perfect CSI: no loss, the REFERENCES.md item 5 Table 5b value at Eb/N0 = 10 dB.
        assert_rel(
            ber_rayleigh_with_estimate(2, 20.0, 0.0).unwrap(),
            0.0232687,
            TABLE_REL,
            "QPSK Rayleigh 10 dB",
        );
    }

    #[test]
    fn sources_are_named() {
        for s in [
            LMMSE_SOURCE,
            JAKES_TIME_CORR_SOURCE,
            ROBUST_DESIGN_SOURCE,
            EFFECTIVE_SNR_SOURCE,
        ] {
            assert!(s.contains('['), "no status tag: {s}");
        }
        assert!(LMMSE_SOURCE.contains("1998") && LMMSE_SOURCE.contains("1997"));
    }
}
