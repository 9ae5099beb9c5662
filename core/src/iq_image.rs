//! Image rejection ratio (receiver IQ imbalance) from mirror-bin statistics, blind: no pilots,
//! decisions or channel estimate needed.
//!
//! ## Model and estimator
//!
//! With the quadrature branch at gain `g` and phase error `φ`, the baseband signal becomes
//! `y = μx + νx*` (the usual model; common practice), so after the FFT
//!
//! ```text
//! Y_k = μ A_k + ν A*_{−k},   A_k = H_k X_k + W_k   (the bin before the imbalance)
//! ```
//!
//! With i.i.d. zero-mean *circular* data (`E[X_k X_{−k}] = 0`, `E[X²] = 0`: QPSK and square
//! QAM, not BPSK) and circular noise, the only terms of `Y_k Y_{−k}` with a nonzero mean are
//! `μν |A_k|²` and `μν |A_{−k}|²`. Summed over mirror pairs and symbols:
//!
//! ```text
//! C = Σ Y_k Y_{−k},   P = Σ (|Y_k|² + |Y_{−k}|²)
//! E[C] = μν S,   E[P] = (|μ|² + |ν|²) S,   S = Σ (|A_k|² + |A_{−k}|²)
//! c = |E C| / E P = ρ / (1 + ρ²),   ρ = |ν/μ|   ⇒   ρ = 2c / (1 + sqrt(1 − 4c²))
//! ```
//!
//! and IRR = `|μ|²/|ν|²` = `1/ρ²`. `C` is a non-circularity measure of the received signal: it
//! vanishes without imbalance. The channel drops out (only powers enter), and so does a timing
//! offset (its phase ramps cancel between `k` and `−k`).
//!
//! `|C|²` is biased by the fluctuation of a sum of zero-mean terms: `E|C|² = |E C|² + Σ
//! E|z_i|² − Σ |E z_i|²` with `z_i = Y_k Y_{−k}`. The estimator uses the debiased
//! `|C|² − Q`, `Q = Σ |Y_k|² |Y_{−k}|²`, so `ĉ² = (|C|² − Q) / P²`.
//!
//! ## Valid range
//!
//! * **Ceiling (the noise of the estimate).** Without imbalance `C` is a sum of `n`
//!   zero-mean terms with `E|C|² = Q`, so `|C|²/Q` is exponential (a sum of many independent
//!   terms; central limit). The image counts as resolved when `|C|² − Q > 9Q` (3σ of the
//!   fluctuation; false detection probability `e^{−10}` ≈ 4.5e-5). The ceiling reported is the
//!   IRR at that level, `ρ_ceil = 3 sqrt(Q)/P`; for unit-power bins it is about `4n/9`
//!   (`n` pairs × symbols): 1e5 pair-symbols resolve up to about 46 dB. Below the ceiling the
//!   estimate has a standard error of about `sqrt(Q/2)/P` in `ρ`.
//! * **Noise added after the imbalance** (baseband, ADC) is circular: it adds to `P` but not
//!   to `C`, so the estimate of IRR reads high by `20·log10(1 + N/S')` dB, `S'` the mean bin
//!   power before that noise (0.09 dB at 20 dB SNR, 0.8 dB at 10 dB), and an image must be
//!   `1 + N/S'` times larger in amplitude to be resolved. Noise at the mixer's input
//!   (thermal, LNA) is imbalanced like the signal and changes neither. The ceiling in terms of
//!   `Q/P²` depends on the number of pairs and on the bins' fourth moment (fading raises it
//!   up to twofold: `E|H|⁴ = 2` for Rayleigh), not on the noise level.
//! * **Phase stability.** `C` is summed coherently over symbols: its phase `arg(μν)` must
//!   not turn while averaging. A carrier offset corrected *after* the mixer turns the image
//!   by `−4πε(N+L)/N` per symbol (ε in subcarrier spacings): average only over spans where
//!   that stays small, or estimate before the CFO correction.
//! * Only pairs of data bins enter (pilots are BPSK and non-circular); DC and unpaired bins
//!   do not.
//!
//! ## Integer version
//!
//! The state is four plain sums and a count (`C`, `P`, `Q`, pairs), which
//! [`crate::iq_image_q15`] keeps exactly in integers from the Q15 FFT output and its block
//! exponent.

use crate::error::{ConfigError, ProcessError};
use crate::numerology::Numerology;
use crate::Cf32;

/// Standard deviations of the zero-imbalance fluctuation an image must exceed to count as
/// resolved (see the module docs).
pub const RESOLVE_SIGMAS: f32 = 3.0;

/// An image-rejection report.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct IqImage {
    /// Image rejection ratio `|μ|²/|ν|²`, dB. When not resolved this is the ceiling: the
    /// true IRR is at least this much.
    pub irr_db: f32,
    /// Image-to-signal amplitude ratio `|ν/μ|` (0 when not resolved).
    pub image_ratio: f32,
    /// Highest IRR this accumulation resolves (3σ of its fluctuation), dB.
    pub ceiling_db: f32,
    /// Standard error of `irr_db` from the fluctuation of `C` (1σ, dB; 0 when not resolved).
    pub irr_sd_db: f32,
    /// True when the image stands above the estimate's own noise.
    pub resolved: bool,
    /// Mirror pairs × symbols accumulated.
    pub pairs: u32,
}

/// Streaming image-rejection estimator for FFT size `N`.
#[derive(Clone, Debug)]
pub struct IqImageEstimator<const N: usize> {
    numerology: Numerology,
    /// Used index of the mirror of each used bin above DC (`u16::MAX`: none), by used index.
    mirror: [u16; N],
    c: Cf32,
    p: f32,
    q: f32,
    pairs: u32,
}

pub(crate) const NO_MIRROR: u16 = u16::MAX;

impl<const N: usize> IqImageEstimator<N> {
    /// An estimator for `numerology`. Errors: FFT size not `N`; no bin pair `k`, `−k` in the
    /// used band ([`ConfigError::TrackerSetting`]).
    pub fn new(numerology: &Numerology) -> Result<Self, ConfigError> {
        crate::preamble::check_size::<N>(numerology)?;
        let mut mirror = [NO_MIRROR; N];
        let mut any = false;
        for (u, m) in mirror.iter_mut().enumerate().take(numerology.used_len()) {
            let k = numerology.logical_bin(u);
            if k > 0 {
                if let Some(v) = used_index_of(numerology, -k) {
                    *m = v as u16;
                    any = true;
                }
            }
        }
        if !any {
            return Err(ConfigError::TrackerSetting);
        }
        Ok(Self {
            numerology: *numerology,
            mirror,
            c: Cf32::new(0.0, 0.0),
            p: 0.0,
            q: 0.0,
            pairs: 0,
        })
    }

    /// Forgets every symbol accumulated so far.
    pub fn reset(&mut self) {
        self.c = Cf32::new(0.0, 0.0);
        self.p = 0.0;
        self.q = 0.0;
        self.pairs = 0;
    }

    /// Mirror pairs × symbols accumulated since the last reset.
    pub fn pairs(&self) -> u32 {
        self.pairs
    }

    /// Adds symbol `symbol` (FFT output `bins`, natural order): every pair of data bins at
    /// `k` and `−k`. Errors on a non-finite bin of such a pair, or one whose power overflows
    /// f32 (its index); nothing is accumulated then.
    pub fn update(&mut self, bins: &[Cf32; N], symbol: u32) -> Result<(), ProcessError> {
        let nu = &self.numerology;
        let (mut c, mut p, mut q, mut n) = (Cf32::new(0.0, 0.0), 0.0f32, 0.0f32, 0u32);
        for (u, &m) in self.mirror.iter().enumerate().take(nu.used_len()) {
            if m == NO_MIRROR {
                continue;
            }
            let m = usize::from(m);
            if nu.is_pilot(u, symbol) || nu.is_pilot(m, symbol) {
                continue;
            }
            let (iu, im) = (nu.fft_index(u), nu.fft_index(m));
            let y = bins.get(iu).copied().unwrap_or_default();
            let ym = bins.get(im).copied().unwrap_or_default();
            let (py, pm) = (y.norm_sqr(), ym.norm_sqr());
            if !py.is_finite() {
                return Err(ProcessError::NonFinite { index: iu });
            }
            if !pm.is_finite() {
                return Err(ProcessError::NonFinite { index: im });
            }
            let z = y * ym;
            let zz = py * pm;
            if !(z.re.is_finite() && z.im.is_finite() && zz.is_finite()) {
                return Err(ProcessError::NonFinite { index: iu });
            }
            c += z;
            p += py + pm;
            q += zz;
            n += 1;
        }
        // Per-symbol partial sums first, then the totals (keeps f32 rounding per level small).
        self.c += c;
        self.p += p;
        self.q += q;
        self.pairs = self.pairs.saturating_add(n);
        Ok(())
    }

    /// The estimate from every symbol since the last reset; `None` before any pair, with no
    /// power, or when a sum overflowed.
    pub fn estimate(&self) -> Option<IqImage> {
        let (c2, p, q) = (self.c.norm_sqr(), self.p, self.q);
        if self.pairs == 0 || !(p > 0.0 && p.is_finite() && q.is_finite() && c2.is_finite()) {
            return None;
        }
        let p2 = p * p;
        let ceil_c = RESOLVE_SIGMAS * libm::sqrtf(q) / p;
        let ceiling_db = irr_db_of(rho_of(ceil_c));
        let debiased = c2 - q;
        let resolved = debiased > RESOLVE_SIGMAS * RESOLVE_SIGMAS * q;
        let out = if resolved {
            let c = libm::sqrtf(debiased / p2);
            let rho = rho_of(c);
            // σ of c along C: sqrt(Q/2)/P; dc/dρ = (1 − ρ²)/(1 + ρ²)².
            let sd_c = libm::sqrtf(q * 0.5) / p;
            let slope = (1.0 - rho * rho) / ((1.0 + rho * rho) * (1.0 + rho * rho));
            let sd_db = if slope > 0.0 && rho > 0.0 {
                20.0 / core::f32::consts::LN_10 * sd_c / (slope * rho)
            } else {
                0.0
            };
            IqImage {
                irr_db: irr_db_of(rho),
                image_ratio: rho,
                ceiling_db,
                irr_sd_db: sd_db,
                resolved,
                pairs: self.pairs,
            }
        } else {
            IqImage {
                irr_db: ceiling_db,
                image_ratio: 0.0,
                ceiling_db,
                irr_sd_db: 0.0,
                resolved,
                pairs: self.pairs,
            }
        };
        (out.irr_db.is_finite() && out.ceiling_db.is_finite() && out.irr_sd_db.is_finite())
            .then_some(out)
    }
}

/// `ρ` from `c = ρ/(1 + ρ²)` (the root below 1), `c` clamped to `[0, ½]`.
fn rho_of(c: f32) -> f32 {
    let c = c.clamp(0.0, 0.5);
    2.0 * c / (1.0 + libm::sqrtf((1.0 - 4.0 * c * c).max(0.0)))
}

/// IRR in dB for amplitude ratio `ρ`: `−20 log10 ρ` (ρ floored at 1e-30 to stay finite).
fn irr_db_of(rho: f32) -> f32 {
    -20.0 * libm::log10f(rho.max(1e-30))
}

/// Used index of logical bin `k`, if it is a used bin.
pub(crate) fn used_index_of(nu: &Numerology, k: i32) -> Option<usize> {
    let p = nu.params();
    let from_low = k + (p.fft_len / 2) as i32 - p.guard_low_bins as i32;
    if from_low < 0 || (p.dc_null && k == 0) {
        return None;
    }
    let u = from_low as usize - usize::from(p.dc_null && k > 0);
    (u < nu.used_len() && nu.logical_bin(u) == k).then_some(u)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::numerology::NumerologyParams;

    #[test]
    fn mirror_map_pairs_k_with_minus_k() {
        // Default layout: bins −28..=28 without 0 (numerology tests), all paired.
        let nu = Numerology::new(NumerologyParams::default()).unwrap();
        let est = IqImageEstimator::<64>::new(&nu).unwrap();
        let paired = est.mirror.iter().filter(|&&m| m != NO_MIRROR).count();
        assert_eq!(paired, 28);
        for u in 0..nu.used_len() {
            if est.mirror[u] != NO_MIRROR {
                let k = nu.logical_bin(u);
                assert_eq!(nu.logical_bin(usize::from(est.mirror[u])), -k);
            }
        }
    }

    #[test]
    fn bad_input_and_silence_give_no_estimate() {
        let nu = Numerology::new(NumerologyParams::default()).unwrap();
        let mut est = IqImageEstimator::<64>::new(&nu).unwrap();
        assert!(est.estimate().is_none());
        est.update(&[Cf32::new(0.0, 0.0); 64], 1).unwrap();
        assert!(est.estimate().is_none());
        let mut bins = [Cf32::new(0.5, 0.0); 64];
        let first = nu.data_bins(0).find(|&i| i < 32).unwrap();
        bins[first] = Cf32::new(f32::INFINITY, 0.0);
        assert!(est.update(&bins, 0).is_err());
        bins[first] = Cf32::new(1e20, 0.0);
        assert!(est.update(&bins, 0).is_err());
        // One zero symbol was accepted: 28 mirror pairs less those holding a pilot (k in
        // {1, 5, …, 25, 28}, −k in {−4, …, −28}: 14 pairs, counted by hand).
        assert_eq!(est.pairs(), 14);
    }

    #[test]
    fn image_built_in_the_bins_is_recovered() {
        // QPSK from a PRBS on every bin, Y_k = μA_k + νA*_{−k} with ν/μ = 0.05 (IRR 26.02 dB):
        // 8000 symbols × 14 pairs; σ of ρ̂ ≈ sqrt(Q/2)/P ≈ 1/(2·sqrt(2n)) = 0.0011, so
        // ±0.005 in ρ is over 4σ.
        let nu = Numerology::new(NumerologyParams::default()).unwrap();
        let mut est = IqImageEstimator::<64>::new(&nu).unwrap();
        let (mu, nu_c) = (
            Cf32::new(0.9, -0.1),
            Cf32::new(0.9, -0.1) * Cf32::new(0.03, 0.04),
        );
        let mut prbs = crate::pilots::Prbs15::new(0x1234);
        let a = core::f32::consts::FRAC_1_SQRT_2;
        for s in 0..8000u32 {
            let mut x = [Cf32::new(0.0, 0.0); 64];
            for v in x.iter_mut() {
                let re = if prbs.next_bit() == 0 { a } else { -a };
                let im = if prbs.next_bit() == 0 { a } else { -a };
                *v = Cf32::new(re, im);
            }
            let mut y = [Cf32::new(0.0, 0.0); 64];
            for (k, v) in y.iter_mut().enumerate() {
                *v = mu * x[k] + nu_c * x[(64 - k) % 64].conj();
            }
            est.update(&y, s).unwrap();
        }
        let r = est.estimate().unwrap();
        assert!(r.resolved);
        assert!((r.image_ratio - 0.05).abs() < 0.005, "{r:?}");
    }

    #[test]
    fn rho_inverts_the_ratio() {
        for rho in [0.0f32, 0.01, 0.1, 0.5, 0.9] {
            let c = rho / (1.0 + rho * rho);
            assert!((rho_of(c) - rho).abs() < 1e-5);
        }
    }
}
