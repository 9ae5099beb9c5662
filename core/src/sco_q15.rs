//! The SCO estimator of [`crate::sco`] in integers: pilot phases by CORDIC ([`atan2_turns`],
//! in turns × 2^32), the same double-centred least squares with exact integer sums, and one
//! `i128` division per estimate. `ζ·2^32` out, the unit [`crate::frame_q15`] corrects with.

use crate::error::{ConfigError, ProcessError};
use crate::fixed::Cq15;
use crate::fixed_math::atan2_turns;
use crate::numerology::{BinKind, Numerology};
use crate::pilots::Prbs15;

/// Streaming integer SCO estimator for FFT size `N` (fixed pilot comb).
#[derive(Clone, Debug)]
pub struct ScoEstimatorQ15<const N: usize> {
    numerology: Numerology,
    /// Reference `conj(Y₀ x₀)` per FFT index.
    reference: [Cq15; N],
    have_reference: bool,
    /// Pilot count, Σk, n·Σk² − (Σk)².
    n_p: i64,
    k1: i64,
    sk: i128,
    count: i64,
    sum_a: i128,
    sum_ma: i128,
    m1: i128,
    m2: i128,
}

impl<const N: usize> ScoEstimatorQ15<N> {
    /// An estimator for `numerology` (pattern period 1).
    pub fn new(numerology: &Numerology) -> Result<Self, ConfigError> {
        crate::preamble::check_size::<N>(numerology)?;
        if numerology.pattern_period() != 1 {
            return Err(ConfigError::EstimatorHistoryUnsupported {
                depth: 0,
                pattern_period: numerology.pattern_period(),
            });
        }
        let (mut n_p, mut k1, mut k2) = (0i64, 0i64, 0i128);
        for b in numerology.bins(0).filter(|b| b.kind == BinKind::Pilot) {
            let k = i64::from(numerology.logical_bin(b.used_index));
            n_p += 1;
            k1 += k;
            k2 += i128::from(k * k);
        }
        Ok(Self {
            numerology: *numerology,
            reference: [Cq15::ZERO; N],
            have_reference: false,
            n_p,
            k1,
            sk: i128::from(n_p) * k2 - i128::from(k1) * i128::from(k1),
            count: 0,
            sum_a: 0,
            sum_ma: 0,
            m1: 0,
            m2: 0,
        })
    }

    /// Starts over: the next symbol is the reference.
    pub fn reset(&mut self) {
        self.have_reference = false;
        self.count = 0;
        self.sum_a = 0;
        self.sum_ma = 0;
        self.m1 = 0;
        self.m2 = 0;
    }

    /// Adds symbol `symbol`'s FFT output (natural order; any common block exponent — only
    /// phases are used). Symbols must be consecutive.
    pub fn update(&mut self, bins: &[Cq15; N], symbol: u32) -> Result<(), ProcessError> {
        let nu = self.numerology;
        let mut prbs = Prbs15::for_symbol(nu.params().pilots.seed, symbol);
        if !self.have_reference {
            for b in nu.bins(symbol).filter(|b| b.kind == BinKind::Pilot) {
                let neg = prbs.next_bit() != 0;
                if let (Some(r), Some(y)) =
                    (self.reference.get_mut(b.fft_index), bins.get(b.fft_index))
                {
                    // conj(y·x), x = ±1.
                    let (re, im) = if neg {
                        (-y.re, y.im)
                    } else {
                        (y.re, y.im.saturating_neg())
                    };
                    *r = Cq15::new(re, im);
                }
            }
            self.have_reference = true;
            return Ok(());
        }
        // Pass 1: the common phasor Σ z over the pilots (residual CFO and common phase turn
        // every pilot alike); pass 2 measures each pilot's phase against it, so a common
        // phase near ±½ turn cannot wrap some pilots and not others.
        let mut sr: i64 = 0;
        let mut si: i64 = 0;
        for b in nu.bins(symbol).filter(|b| b.kind == BinKind::Pilot) {
            let neg = prbs.next_bit() != 0;
            let (zr, zi) = self.pilot_product(bins, b.fft_index, neg);
            sr = sr.saturating_add(zr);
            si = si.saturating_add(zi);
        }
        let big = sr.unsigned_abs().max(si.unsigned_abs());
        let shift = (64 - big.leading_zeros()).saturating_sub(15);
        let (cr, ci) = (sr >> shift, si >> shift);
        let mut prbs = Prbs15::for_symbol(nu.params().pilots.seed, symbol);
        let mut a: i128 = 0;
        for b in nu.bins(symbol).filter(|b| b.kind == BinKind::Pilot) {
            let neg = prbs.next_bit() != 0;
            let (zr, zi) = self.pilot_product(bins, b.fft_index, neg);
            // z·conj(c): |z| < 2^32, |c| < 2^15, so the products fit in i64.
            let (wr, wi) = (
                zr.saturating_mul(cr).saturating_add(zi.saturating_mul(ci)),
                zi.saturating_mul(cr).saturating_sub(zr.saturating_mul(ci)),
            );
            // Phase in turns·2^32 as a signed value in [−2^31, 2^31).
            let phi = i64::from(atan2_turns(wi, wr) as i32);
            let k = i64::from(nu.logical_bin(b.used_index));
            a += i128::from(self.n_p * k - self.k1) * i128::from(phi);
        }
        self.count += 1;
        let m = i128::from(self.count);
        self.sum_a += a;
        self.sum_ma += m * a;
        self.m1 += m;
        self.m2 += m * m;
        Ok(())
    }

    /// `y·x·r` for the pilot at `fft_index` (`x = ±1`, `r` the reference), exact in i64.
    fn pilot_product(&self, bins: &[Cq15; N], fft_index: usize, neg: bool) -> (i64, i64) {
        let y = bins.get(fft_index).copied().unwrap_or_default();
        let r = self.reference.get(fft_index).copied().unwrap_or_default();
        let (yr, yi, rr, ri) = (
            i64::from(y.re),
            i64::from(y.im),
            i64::from(r.re),
            i64::from(r.im),
        );
        let (zr, zi) = (yr * rr - yi * ri, yr * ri + yi * rr);
        if neg {
            (-zr, -zi)
        } else {
            (zr, zi)
        }
    }

    /// The estimate `ζ·2^32` once two symbols followed the reference.
    pub fn estimate_q32(&self) -> Option<i32> {
        let c = i128::from(self.count);
        if c < 2 || self.sk <= 0 {
            return None;
        }
        let num = c * self.sum_ma - self.m1 * self.sum_a;
        let sm = c * self.m2 - self.m1 * self.m1;
        let den = self
            .sk
            .checked_mul(sm)?
            .checked_mul(self.numerology.symbol_len() as i128)?;
        let v = num.checked_mul(N as i128)?.checked_div(den)?;
        i32::try_from(v).ok()
    }
}
