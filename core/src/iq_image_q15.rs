//! The image-rejection estimator of [`crate::iq_image`] in integers, for cores without an FPU:
//! Q15 FFT output with its block exponent in, the same mirror-pair sums `C = Σ Y_k Y_{−k}`,
//! `P = Σ |Y_k|² + |Y_{−k}|²`, `Q = Σ |Y_k|²|Y_{−k}|²` kept exactly in integers, and the same
//! debiased ratio, ceiling and standard error once per report, in fixed point (dB in Q8).
//!
//! ## Per symbol (no floating point)
//!
//! Over the symbol's data pairs, `Y_k Y_{−k}` and `|Y|²` are exact `i64`/`u64` products of the
//! `i16` parts (Q30), summed per symbol (`i64`, `u64`; `Q`'s products, below 2^62, in `u128`).
//! With the bins' exponent `e` the symbol's sums are worth `2^(2e − 30)` (`C`, `P`) and
//! `2^(2(2e − 30))` (`Q`) in Q15 fractions of the unitary DFT. They join the totals (`i128`,
//! `u128`) against one reference exponent, at most 2^16 above it: the first symbol sets the
//! reference 16 bits below its own, so later symbols from 16 bits of power quieter up to as
//! loud add exactly; a louder one rounds the totals down first, a quieter one is rounded, and
//! totals that reach 2^124 are halved (`Q` quartered) with the exponent raised by one. The common residual scale `R` of the FFT cancels in every ratio.
//!
//! ## Per report ([`IqImageEstimatorQ15::estimate`])
//!
//! The totals are normalised so `P < 2^62` (then `|C| ≤ P/2` and `Q ≤ P²/4` by
//! Cauchy–Schwarz), `|C|²` and `P²` are exact `u128`, and one `u128` division gives
//! `2^126/P²`, from which every squared ratio (`c² = (|C|² − Q)/P²`, the ceiling's `9Q/P²`,
//! the error's `Q/(2P²)`) follows in Q62 by multiplication. Square roots are exact integer
//! square roots; `ρ = 2c/(1 + sqrt(1 − 4c²))` and the error's `1/((1 − ρ²)ρ)` use the Newton
//! reciprocal of [`crate::fixed_math`] (2^-30 relative); decibels come from an integer
//! `log2` (20 fractional bits by repeated squaring, rounded to 16) times `20·log10 2` in Q24.
//! The dB values read within 1/256 dB of the same formulas in f64 (unit tests).
//!
//! ## Agreement with the f32 estimator
//!
//! The Q15 FFT's rounding is circular noise about 70 dB below the bins: it raises `P` by
//! that fraction and leaves `E[C]` alone, so the IRR moves by far less than the Q8 output
//! step. On the f32 tests' links through Q15 at −12 dBFS (N = 256, IRR 19.6–35.2 dB, flat and
//! Rayleigh) the two estimators agree within 0.0017 dB in IRR and 1.1e-5 in `|Δρ|/ρ`
//! (`tests/iq_image_q15.rs`).

use crate::delay_spread_q15::{isqrt_u128, shr_round_i128, shr_round_u128, MAX_BLOCK_EXPONENT};
use crate::error::{ConfigError, ProcessError};
use crate::fixed::Cq15;
use crate::fixed_math::reciprocal;
use crate::iq_image::{used_index_of, IqImage, NO_MIRROR};
use crate::numerology::Numerology;

/// Headroom of a symbol's placement above the reference exponent, bits (of `C` and `P`).
const GUARD_BITS: i32 = 16;
/// Totals at or above this are halved.
const TOTAL_LIMIT: u128 = 1 << 124;
/// `20·log10 2` in Q24 (decibels per octave of amplitude).
const DB_PER_OCTAVE_Q24: i64 = 101_008_905;
/// `20/ln 10` in Q24 (decibels per neper of amplitude).
const DB_PER_NEPER_Q24: u128 = 145_725_047;
/// `ρ` floor (2^-31, Q31): IRRs are capped at 186.6 dB.
const MIN_RHO_Q31: u32 = 1;

/// An image-rejection report in fixed point.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct IqImageQ15 {
    /// Image rejection ratio `|μ|²/|ν|²`, dB × 256 (Q8); the ceiling when not resolved (a
    /// lower bound). Capped at 186.6 dB.
    pub irr_db_q8: i32,
    /// Image-to-signal amplitude ratio `|ν/μ|`, × 2^31 (Q31; 0 when not resolved).
    pub image_ratio_q31: u32,
    /// Highest IRR this accumulation resolves (3σ of its fluctuation), dB × 256.
    pub ceiling_db_q8: i32,
    /// Standard error of the IRR (1σ), dB × 256 (0 when not resolved; saturated at
    /// `u32::MAX`).
    pub irr_sd_db_q8: u32,
    /// True when the image stands above the estimate's own noise.
    pub resolved: bool,
    /// Mirror pairs × symbols accumulated.
    pub pairs: u32,
    /// Parts of paired data bins at the Q15 limits (`−32768` or `32767`): a nonzero count
    /// flags an FFT output that may have saturated.
    pub saturated_parts: u32,
}

impl IqImageQ15 {
    /// The report as the f32 [`IqImage`] (host convenience, floating point).
    pub fn to_f32(&self) -> IqImage {
        IqImage {
            irr_db: self.irr_db_q8 as f32 / 256.0,
            image_ratio: libm::ldexpf(self.image_ratio_q31 as f32, -31),
            ceiling_db: self.ceiling_db_q8 as f32 / 256.0,
            irr_sd_db: self.irr_sd_db_q8 as f32 / 256.0,
            resolved: self.resolved,
            pairs: self.pairs,
        }
    }
}

/// Streaming integer image-rejection estimator for FFT size `N`.
///
/// Memory: the mirror map (`N` × `u16`) and four 128-bit totals.
#[derive(Clone, Debug)]
pub struct IqImageEstimatorQ15<const N: usize> {
    numerology: Numerology,
    /// Used index of the mirror of each used bin above DC ([`NO_MIRROR`]: none).
    mirror: [u16; N],
    c_re: i128,
    c_im: i128,
    p: u128,
    q: u128,
    /// `C`, `P` are worth `2^exp`, `Q` is worth `2^(2·exp)` per unit.
    exp: i32,
    fresh: bool,
    pairs: u32,
    saturated: u32,
}

impl<const N: usize> IqImageEstimatorQ15<N> {
    /// An estimator for `numerology` (no floating point). Errors: FFT size not `N`; no bin
    /// pair `k`, `−k` in the used band ([`ConfigError::TrackerSetting`]).
    pub fn new(numerology: &Numerology) -> Result<Self, ConfigError> {
        crate::preamble::check_size::<N>(numerology)?;
        let mut mirror = [NO_MIRROR; N];
        let mut any = false;
        for (u, m) in mirror.iter_mut().enumerate().take(numerology.used_len()) {
            let k = numerology.logical_bin(u);
            if k > 0 {
                if let Some(v) = used_index_of(numerology, -k).and_then(|v| u16::try_from(v).ok()) {
                    *m = v;
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
            c_re: 0,
            c_im: 0,
            p: 0,
            q: 0,
            exp: 0,
            fresh: true,
            pairs: 0,
            saturated: 0,
        })
    }

    /// Forgets every symbol accumulated so far.
    pub fn reset(&mut self) {
        (self.c_re, self.c_im, self.p, self.q) = (0, 0, 0, 0);
        self.exp = 0;
        self.fresh = true;
        self.pairs = 0;
        self.saturated = 0;
    }

    /// Mirror pairs × symbols accumulated since the last reset.
    pub fn pairs(&self) -> u32 {
        self.pairs
    }

    /// Adds symbol `symbol`: its FFT output `bins` (natural order) with block `exponent`
    /// (unitary DFT = `bins·2^exponent·R`, as
    /// [`ReceiverQ15::bins_with_exponent`](crate::receiver_q15::ReceiverQ15::bins_with_exponent)
    /// gives): every pair of data bins at `k` and `−k`. Errors when `|exponent| >`
    /// [`MAX_BLOCK_EXPONENT`] ([`ProcessError::OutOfRange`] with index 1, the exponent
    /// argument); nothing is accumulated then. No floating point.
    pub fn update(
        &mut self,
        bins: &[Cq15; N],
        exponent: i32,
        symbol: u32,
    ) -> Result<(), ProcessError> {
        if exponent.unsigned_abs() > MAX_BLOCK_EXPONENT.unsigned_abs() {
            return Err(ProcessError::OutOfRange { index: 1 });
        }
        let nu = &self.numerology;
        let (mut cr, mut ci, mut p, mut q) = (0i64, 0i64, 0u64, 0u128);
        let (mut n, mut sat) = (0u32, 0u32);
        for (u, &m) in self.mirror.iter().enumerate().take(nu.used_len()) {
            if m == NO_MIRROR {
                continue;
            }
            let m = usize::from(m);
            if nu.is_pilot(u, symbol) || nu.is_pilot(m, symbol) {
                continue;
            }
            let y = bins.get(nu.fft_index(u)).copied().unwrap_or_default();
            let ym = bins.get(nu.fft_index(m)).copied().unwrap_or_default();
            for v in [y.re, y.im, ym.re, ym.im] {
                sat += u32::from(v == i16::MIN || v == i16::MAX);
            }
            let (yr, yi) = (i64::from(y.re), i64::from(y.im));
            let (mr, mi) = (i64::from(ym.re), i64::from(ym.im));
            // Each product below 2^31 in magnitude; at most N/2 pairs: sums below 2^43.
            cr += yr * mr - yi * mi;
            ci += yr * mi + yi * mr;
            let (py, pm) = ((yr * yr + yi * yi) as u64, (mr * mr + mi * mi) as u64);
            p += py + pm;
            q += u128::from(py * pm);
            n += 1;
        }
        self.add(cr, ci, p, q, 2 * exponent - 30);
        self.pairs = self.pairs.saturating_add(n);
        self.saturated = self.saturated.saturating_add(sat);
        Ok(())
    }

    /// Adds one symbol's sums worth `2^e_s` (`Q`: `2^(2e_s)`) to the totals.
    fn add(&mut self, cr: i64, ci: i64, p: u64, q: u128, e_s: i32) {
        if self.fresh {
            self.exp = e_s - GUARD_BITS;
            self.fresh = false;
        }
        let mut d = e_s.saturating_sub(self.exp);
        if d > GUARD_BITS {
            self.rescale(d - GUARD_BITS);
            d = GUARD_BITS;
        }
        // d ≤ 16: C, P below 2^59, Q below 2^105 after the shift.
        let place = |v: u128, s: i32| {
            if s >= 0 {
                v << s.unsigned_abs()
            } else {
                shr_round_u128(v, s.unsigned_abs())
            }
        };
        let signed = |v: i64, s: i32| {
            let m = place(u128::from(v.unsigned_abs()), s) as i128;
            if v < 0 {
                -m
            } else {
                m
            }
        };
        self.c_re = self.c_re.saturating_add(signed(cr, d));
        self.c_im = self.c_im.saturating_add(signed(ci, d));
        self.p = self.p.saturating_add(place(u128::from(p), d));
        self.q = self.q.saturating_add(place(q, 2 * d));
        let c_top = self.c_re.unsigned_abs().max(self.c_im.unsigned_abs());
        if self.p.max(self.q).max(c_top) >= TOTAL_LIMIT {
            self.rescale(1);
        }
    }

    /// Rounds the totals down by `2^s` (`Q` by `2^(2s)`) and raises the exponent by `s`.
    fn rescale(&mut self, s: i32) {
        let s_u = s.unsigned_abs();
        self.c_re = shr_round_i128(self.c_re, s_u);
        self.c_im = shr_round_i128(self.c_im, s_u);
        self.p = shr_round_u128(self.p, s_u);
        self.q = shr_round_u128(self.q, s_u.saturating_mul(2));
        self.exp = self.exp.saturating_add(s);
    }

    /// The estimate from every symbol since the last reset; `None` before any pair or with
    /// no power. No floating point; one `u128` division.
    pub fn estimate(&self) -> Option<IqImageQ15> {
        if self.pairs == 0 || self.p == 0 {
            return None;
        }
        let s = (128 - self.p.leading_zeros()).saturating_sub(62);
        let pn = shr_round_u128(self.p, s).max(1);
        let lim = pn / 2 + 1;
        let cr = shr_round_i128(self.c_re, s).unsigned_abs().min(lim);
        let ci = shr_round_i128(self.c_im, s).unsigned_abs().min(lim);
        let qn = shr_round_u128(self.q, 2 * s).min(pn * pn / 4 + 1);
        let c2 = cr * cr + ci * ci;
        let ratios = SquaredRatios::new(pn * pn);
        let resolved = c2 > qn.saturating_mul(10);
        let ceiling_rho = rho_q31(ratios.q62(qn.saturating_mul(9)));
        let ceiling_db_q8 = db_q8(ceiling_rho);
        let out = if resolved {
            let rho = rho_q31(ratios.q62(c2 - qn));
            let sd_c = isqrt_u128(u128::from(ratios.q62(qn / 2)));
            IqImageQ15 {
                irr_db_q8: db_q8(rho),
                image_ratio_q31: rho,
                ceiling_db_q8,
                irr_sd_db_q8: sd_db_q8(sd_c, rho),
                resolved,
                pairs: self.pairs,
                saturated_parts: self.saturated,
            }
        } else {
            IqImageQ15 {
                irr_db_q8: ceiling_db_q8,
                image_ratio_q31: 0,
                ceiling_db_q8,
                irr_sd_db_q8: 0,
                resolved,
                pairs: self.pairs,
                saturated_parts: self.saturated,
            }
        };
        Some(out)
    }
}

/// Ratios `x/D` in Q62 for a fixed denominator `D ≥ 1` (below 2^125), by one division.
struct SquaredRatios {
    /// Right shift that brings `D` below 2^64.
    shift: u32,
    /// `D >> shift`.
    den: u128,
    /// `2^126 / den`.
    recip: u128,
}

impl SquaredRatios {
    fn new(d: u128) -> Self {
        let shift = (128 - d.leading_zeros()).saturating_sub(64);
        let den = (d >> shift).max(1);
        Self {
            shift,
            den,
            recip: (1u128 << 126).checked_div(den).unwrap_or(0),
        }
    }

    /// `min(x/D, 1/4)` × 2^62.
    fn q62(&self, x: u128) -> u64 {
        let xn = (x >> self.shift).min(self.den / 4);
        // xn·recip ≤ (den/4)·(2^126/den) ≤ 2^124.
        (xn.saturating_mul(self.recip) >> 64).min(1 << 60) as u64
    }
}

/// `ρ = 2c/(1 + sqrt(1 − 4c²))` in Q31 from `c²` in Q62 (clamped to `[0, 1/4]`).
fn rho_q31(c2_q62: u64) -> u32 {
    let c2 = u128::from(c2_q62.min(1 << 60));
    let c = u64::from(isqrt_u128(c2) as u32);
    if c == 0 {
        return 0;
    }
    // c > 0: 4c² ≥ 4, so the root is below 2^31 and the denominator below 2^32.
    let root = isqrt_u128((1u128 << 62) - 4 * c2);
    let den = u32::try_from((1u64 << 31) + root).unwrap_or(u32::MAX);
    match reciprocal(den) {
        // 1/den = r·2^(sh − 30); ρ·2^31 = 2c·2^31/den = c·r·2^(sh + 2).
        Some((r, sh)) => {
            let v = u128::from(c) * u128::from(r.unsigned_abs());
            let v = shr_round_u128(v, (-(sh + 2)).max(0).unsigned_abs());
            u32::try_from(v).unwrap_or(u32::MAX).min(1 << 31)
        }
        None => 0,
    }
}

/// `log2 x` × 2^16 for `x ≥ 1` ([`crate::fixed_math::log2_q16`]); `i32::MIN` for 0.
pub(crate) fn log2_q16(x: u32) -> i32 {
    crate::fixed_math::log2_q16(u64::from(x)).unwrap_or(i32::MIN)
}

/// `−20·log10 ρ` in dB × 256 for `ρ` in Q31 (floored at 2^-31).
fn db_q8(rho_q31: u32) -> i32 {
    let l = 31 * 65_536 - log2_q16(rho_q31.max(MIN_RHO_Q31)); // −log2 ρ, Q16, ≥ 0
    let v = i64::from(l) * DB_PER_OCTAVE_Q24; // Q40
    i32::try_from((v + (1 << 31)) >> 32).unwrap_or(i32::MAX)
}

/// Standard error of the IRR in dB × 256: `(20/ln 10)·σ_c·(1 + ρ²)²/((1 − ρ²)ρ)` with `σ_c`
/// and `ρ` in Q31 (0 when `ρ` is 0 or 1, as in the f32 estimator).
fn sd_db_q8(sd_c_q31: u64, rho_q31: u32) -> u32 {
    let rho = u128::from(rho_q31);
    let one = 1u128 << 31;
    let rho2 = (rho * rho) >> 31;
    let gain = ((one + rho2) * (one + rho2)) >> 31; // (1 + ρ²)², Q31
    let den = (one.saturating_sub(rho2) * rho) >> 31; // (1 − ρ²)ρ, Q31
    let Some((r, sh)) = u32::try_from(den).ok().and_then(reciprocal) else {
        return 0;
    };
    let num = (u128::from(sd_c_q31) * gain) >> 31; // Q31
                                                   // num/den in Q31 = num·2^31·r·2^(sh − 30) = num·r·2^(sh + 1), sh + 1 ≤ 0.
    let x = shr_round_u128(
        num.saturating_mul(u128::from(r.unsigned_abs())),
        (-(sh + 1)).max(0).unsigned_abs(),
    );
    let v = shr_round_u128(x.saturating_mul(DB_PER_NEPER_Q24), 31 + 24 - 8);
    u32::try_from(v).unwrap_or(u32::MAX)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::numerology::NumerologyParams;

    #[test]
    fn log2_and_db_match_f64() {
        // Against f64 log2 (IEEE 754 library) and the definitions.
        for x in [1u32, 2, 3, 5, 1000, 65_535, 123_456_789, 1 << 31, u32::MAX] {
            let want = f64::from(x).log2();
            let got = f64::from(log2_q16(x)) / 65536.0;
            assert!((got - want).abs() < 2.0 / 65536.0, "{x}: {got} vs {want}");
        }
        for rho in [1e-9f64, 0.001, 0.0178, 0.05, 0.1, 0.5, 1.0] {
            let q = (rho * 2f64.powi(31)).round() as u32;
            let want = -20.0 * (f64::from(q) / 2f64.powi(31)).log10();
            let got = f64::from(db_q8(q)) / 256.0;
            assert!((got - want).abs() < 1.0 / 256.0, "{rho}: {got} vs {want}");
        }
    }

    #[test]
    fn rho_inverts_the_ratio() {
        // c = ρ/(1 + ρ²) (module docs of crate::iq_image), in f64.
        for rho in [0.0f64, 1e-4, 0.01, 0.1, 0.5, 0.9, 1.0] {
            let c = rho / (1.0 + rho * rho);
            let c2 = (c * c * 2f64.powi(62)).round() as u64;
            let got = f64::from(rho_q31(c2)) / 2f64.powi(31);
            let tol = if rho > 0.95 { 1e-4 } else { 1e-8 };
            assert!((got - rho).abs() < tol, "{rho}: {got}");
        }
    }

    #[test]
    fn standard_error_matches_its_formula() {
        // The f32 estimator's formula, in f64.
        for (sd_c, rho) in [(1e-4f64, 0.05f64), (3e-4, 0.0178), (1e-3, 0.3)] {
            let want = 20.0 / core::f64::consts::LN_10 * sd_c * (1.0 + rho * rho).powi(2)
                / ((1.0 - rho * rho) * rho);
            let got = f64::from(sd_db_q8(
                (sd_c * 2f64.powi(31)).round() as u64,
                (rho * 2f64.powi(31)).round() as u32,
            )) / 256.0;
            assert!(
                (got - want).abs() < 1.0 / 256.0 + want * 1e-4,
                "{got} vs {want}"
            );
        }
        assert_eq!(sd_db_q8(1000, 0), 0);
        assert_eq!(sd_db_q8(1000, 1 << 31), 0);
    }

    #[test]
    fn image_built_in_the_bins_is_recovered() {
        // As the f32 unit test: QPSK on every bin, Y_k = μA_k + νA*_{−k}, ν/μ = 0.05, 8000
        // symbols × 14 pairs; ±0.005 in ρ is over 4σ. Bins at ±8000 (Q15) and exponents
        // changing from symbol to symbol (the values scaled to match): the estimate must not
        // depend on the block exponent.
        let nu = Numerology::new(NumerologyParams::default()).unwrap();
        let mut est = IqImageEstimatorQ15::<64>::new(&nu).unwrap();
        let mu = num_complex::Complex::<f64>::new(0.9, -0.1);
        let nu_c = mu * num_complex::Complex::new(0.03, 0.04);
        let mut prbs = crate::pilots::Prbs15::new(0x1234);
        for s in 0..8000u32 {
            let mut x = [num_complex::Complex::<f64>::new(0.0, 0.0); 64];
            for v in x.iter_mut() {
                let re = if prbs.next_bit() == 0 { 1.0 } else { -1.0 };
                let im = if prbs.next_bit() == 0 { 1.0 } else { -1.0 };
                *v = num_complex::Complex::new(re, im) * 6000.0;
            }
            let e = (s % 5) as i32 - 2;
            let scale = 2f64.powi(-e);
            let mut y = [Cq15::ZERO; 64];
            for (k, v) in y.iter_mut().enumerate() {
                let z = (mu * x[k] + nu_c * x[(64 - k) % 64].conj()) * scale;
                *v = Cq15::new(z.re.round() as i16, z.im.round() as i16);
            }
            est.update(&y, e, s).unwrap();
        }
        let r = est.estimate().unwrap();
        assert!(r.resolved);
        let rho = f64::from(r.image_ratio_q31) / 2f64.powi(31);
        assert!((rho - 0.05).abs() < 0.005, "{r:?}");
    }
}
