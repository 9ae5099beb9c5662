//! The CP tracker of [`crate::cp_sync`] in integers (Q15 input): exact `i64` running sums of
//! `r(k) r*(k+N)` and of the energies, accumulated per position modulo the symbol period, the
//! decision `argmax |γ| − ρΦ` compared without square roots or division, and the CFO from
//! [`atan2_turns`] (van de Beek, Sandell & Börjesson, IEEE Trans. Signal Process. 45(7), 1997).
//!
//! The cost per sample is a few multiplies and adds; the search over the `N + L` positions
//! (values normalised to 30 bits, `|γ|` by an integer square root, `ρ` in Q16) runs once per
//! [`CpTrackerQ15::estimate`].

use crate::error::ConfigError;
use crate::fixed::Cq15;
use crate::fixed_math::atan2_turns;
use crate::numerology::Numerology;

/// Timing and fractional CFO from the cyclic prefix (integer form).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct CpEstimateQ15 {
    /// Position of the CP start modulo the symbol period, samples.
    pub cp_start: usize,
    /// Fractional CFO `ε` as `ε·2^32` (wrapping; |ε| < ½ maps to ±2^31).
    pub cfo_q32: i32,
}

/// Integer streaming van de Beek tracker; `S` = `N + L`.
#[derive(Clone, Debug)]
pub struct CpTrackerQ15<const N: usize, const S: usize> {
    cp: usize,
    rho_q16: i64,
    ring: [Cq15; N],
    prods: [(i64, i64); S],
    energies: [i64; S],
    run: (i64, i64, i64),
    gamma: [(i64, i64); S],
    phi: [i64; S],
    seen: u64,
}

impl<const N: usize, const S: usize> CpTrackerQ15<N, S> {
    /// A tracker with weight `ρ = SNR/(SNR + 1)` given in Q16 (`rho_q16 ≤ 65536`).
    pub fn new(numerology: &Numerology, rho_q16: u32) -> Result<Self, ConfigError> {
        crate::preamble::check_size::<N>(numerology)?;
        if numerology.symbol_len() != S || numerology.cp_len() == 0 || rho_q16 > 65536 {
            return Err(ConfigError::FftSizeMismatch {
                numerology: numerology.symbol_len(),
                stage: S,
            });
        }
        Ok(Self {
            cp: numerology.cp_len(),
            rho_q16: i64::from(rho_q16),
            ring: [Cq15::ZERO; N],
            prods: [(0, 0); S],
            energies: [0; S],
            run: (0, 0, 0),
            gamma: [(0, 0); S],
            phi: [0; S],
            seen: 0,
        })
    }

    /// Clears the accumulated statistics.
    pub fn clear(&mut self) {
        self.gamma = [(0, 0); S];
        self.phi = [0; S];
    }

    /// Consumes samples (any chunk size).
    pub fn push(&mut self, samples: &[Cq15]) {
        let l = self.cp as u64;
        let n_len = N as u64;
        for &x in samples {
            let n = self.seen;
            if n >= n_len {
                let old = self
                    .ring
                    .get((n % n_len) as usize)
                    .copied()
                    .unwrap_or_default();
                let (or, oi, xr, xi) = (
                    i64::from(old.re),
                    i64::from(old.im),
                    i64::from(x.re),
                    i64::from(x.im),
                );
                // old · conj(x); energies ½(|old|² + |x|²) kept doubled (exact).
                let prod = (or * xr + oi * xi, oi * xr - or * xi);
                let energy = or * or + oi * oi + xr * xr + xi * xi;
                // l ≥ 1 (`new` rejects a zero CP); `checked_rem` keeps the panic path out.
                let slot = (n - n_len).checked_rem(l).unwrap_or(0) as usize;
                if let (Some(p), Some(e)) = (self.prods.get_mut(slot), self.energies.get_mut(slot))
                {
                    self.run.0 += prod.0 - p.0;
                    self.run.1 += prod.1 - p.1;
                    self.run.2 += energy - *e;
                    *p = prod;
                    *e = energy;
                }
                if n >= n_len + l - 1 {
                    let m = ((n + 1 - n_len - l) % S as u64) as usize;
                    if let (Some(g), Some(f)) = (self.gamma.get_mut(m), self.phi.get_mut(m)) {
                        g.0 += self.run.0;
                        g.1 += self.run.1;
                        *f += self.run.2;
                    }
                }
            }
            if let Some(slot) = self.ring.get_mut((n % n_len) as usize) {
                *slot = x;
            }
            self.seen += 1;
        }
    }

    /// The position maximising `|γ| − ρΦ` and its CFO `−arg γ/(2π)`.
    pub fn estimate(&self) -> CpEstimateQ15 {
        // Common normalisation of every γ and Φ to 30 bits.
        let big = self
            .gamma
            .iter()
            .map(|g| g.0.unsigned_abs().max(g.1.unsigned_abs()))
            .chain(self.phi.iter().map(|f| f.unsigned_abs()))
            .max()
            .unwrap_or(0);
        let s = (64 - big.leading_zeros()).saturating_sub(30);
        // Metric |γ| − ρΦ/2 (Φ is kept doubled), |γ| by an integer square root.
        let mut best: Option<(usize, i64, i64, i64)> = None; // (m, gr, gi, metric)
        for (m, (g, f)) in self.gamma.iter().zip(self.phi.iter()).enumerate() {
            let (gr, gi) = (g.0 >> s, g.1 >> s);
            let rp = ((f >> s) * self.rho_q16) >> 17;
            let v = isqrt((gr * gr + gi * gi) as u64) as i64 - rp;
            if best.is_none_or(|b| v > b.3) {
                best = Some((m, gr, gi, v));
            }
        }
        let (m, gr, gi, _) = best.unwrap_or((0, 0, 0, 0));
        // −arg γ/(2π) in turns·2^32.
        let turns = atan2_turns(gi, gr);
        CpEstimateQ15 {
            cp_start: m,
            cfo_q32: (turns as i32).wrapping_neg(),
        }
    }
}

/// Integer square root (floor) by Newton's method.
fn isqrt(v: u64) -> u64 {
    if v < 2 {
        return v;
    }
    let mut x = 1u64 << ((64 - v.leading_zeros()).div_ceil(2));
    loop {
        // x ≥ 1 throughout; `checked_div` keeps the panic path out.
        let y = (x + v.checked_div(x).unwrap_or(0)) / 2;
        if y >= x {
            return x;
        }
        x = y;
    }
}
