//! One-tap equalization and common-phase-error correction.
//!
//! With an estimate `Ĥ` of error variance `σ_e²` (unit-energy data) and noise `N0`, the
//! received bin `Y = H X + W` is equalized to `X̂ = Y/Ĥ` and its post-equalization SINR is
//! `|Ĥ|²/(N0 + σ_e²)`: the estimation error acts as extra noise `σ_e²|X|²` (LMMSE estimates are
//! uncorrelated with their error; common practice). That SINR is the LLR weight.
//!
//! * **ZF** divides by `Ĥ`.
//! * **MMSE** applies `Ĥ*/(|Ĥ|² + N0 + σ_e²)`, whose output is biased by
//!   `β = |Ĥ|²/(|Ĥ|² + N0 + σ_e²)`; the bias is removed before the demapper, which for a single
//!   tap gives the ZF symbol again wherever `β` is not negligible. The two differ only in deep
//!   fades, where ZF output is set to zero below a floor and MMSE output shrinks towards zero
//!   by itself; in both cases the SINR, and so the LLRs, go to zero.

use crate::Cf32;

/// Equalizer kind.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Equalizer {
    /// Zero forcing.
    Zf,
    /// MMSE with bias removal.
    Mmse,
}

/// Channel power below which a bin counts as faded out (ZF output zero).
pub const FADE_FLOOR: f32 = 1e-20;

/// Equalizes one bin: returns the unbiased symbol estimate and its SINR (linear, ≥ 0, finite).
/// `noise_var` is N0, `est_mse` the estimation error variance of `h`.
pub fn equalize(kind: Equalizer, y: Cf32, h: Cf32, noise_var: f32, est_mse: f32) -> (Cf32, f32) {
    let g = h.norm_sqr();
    let n = (noise_var + est_mse).max(f32::MIN_POSITIVE);
    if !(g.is_finite() && y.re.is_finite() && y.im.is_finite()) {
        return (Cf32::new(0.0, 0.0), 0.0);
    }
    let sinr = (g / n).min(f32::MAX);
    let x = match kind {
        Equalizer::Zf => {
            if g <= FADE_FLOOR {
                return (Cf32::new(0.0, 0.0), 0.0);
            }
            y * h.conj() / g
        }
        Equalizer::Mmse => {
            let biased = y * h.conj() / (g + n);
            let beta = g / (g + n);
            if beta > 1e-6 {
                biased / beta
            } else {
                biased
            }
        }
    };
    if x.re.is_finite() && x.im.is_finite() {
        (x, sinr)
    } else {
        (Cf32::new(0.0, 0.0), 0.0)
    }
}

/// Common phase error of a symbol from its pilots: `arg Σ Y_p (Ĥ_p X_p)*` over `(y, h, x)`
/// triples, as a unit phasor (1 when the pilots carry no power).
pub fn common_phase<I: IntoIterator<Item = (Cf32, Cf32, Cf32)>>(pilots: I) -> Cf32 {
    let acc = pilots
        .into_iter()
        .fold(Cf32::new(0.0, 0.0), |acc, (y, h, x)| {
            acc + y * (h * x).conj()
        });
    let m = acc.norm();
    if m > 0.0 && m.is_finite() {
        acc / m
    } else {
        Cf32::new(1.0, 0.0)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn flat_channel_is_undone_and_fades_go_quiet() {
        let x = Cf32::new(0.7, -0.7);
        let h = Cf32::new(0.3, -1.2);
        for kind in [Equalizer::Zf, Equalizer::Mmse] {
            let (xe, sinr) = equalize(kind, h * x, h, 0.01, 0.0);
            assert!((xe - x).norm() < 1e-6);
            assert!((sinr - h.norm_sqr() / 0.01).abs() < 1e-3);
            let (xz, s0) = equalize(kind, Cf32::new(1e-3, 0.0), Cf32::new(0.0, 0.0), 0.01, 0.0);
            assert!(xz.re.is_finite() && s0 == 0.0);
        }
        let cpe = common_phase([(
            Cf32::new(0.0, 1.0),
            Cf32::new(1.0, 0.0),
            Cf32::new(1.0, 0.0),
        )]);
        assert!((cpe - Cf32::new(0.0, 1.0)).norm() < 1e-6);
    }
}
