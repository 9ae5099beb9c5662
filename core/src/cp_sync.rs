//! Cyclic-prefix tracking without a preamble: the maximum-likelihood timing and fractional
//! CFO of van de Beek, Sandell & Börjesson (IEEE Trans. Signal Process. 45(7):1800–1805, 1997;
//! REFERENCES item 7a), accumulated over symbols.
//!
//! For a window start `m` (CP length `L`, FFT size `N`):
//!
//! ```text
//! γ(m) = Σ_{k=m}^{m+L−1} r(k) r*(k+N)        Φ(m) = ½ Σ_{k=m}^{m+L−1} (|r(k)|² + |r(k+N)|²)
//! θ̂ = argmax_m |γ(m)| − ρΦ(m),   ρ = SNR/(SNR + 1),   ε̂ = −arg γ(θ̂)/(2π)   (|ε| < ½)
//! ```
//!
//! Streaming: each sample adds one product `r(n−N) r*(n)` to running sums over the last `L`
//! products, and `γ`, `Φ` are accumulated per position modulo the symbol period `N + L`, so the
//! statistics of many symbols add up (constant cost per sample; memory `2N + 3L` values).
//! The running sums are recomputed exactly every `N + L` samples.

use crate::error::ConfigError;
use crate::numerology::Numerology;
use crate::Cf32;

/// Timing and fractional CFO from the cyclic prefix.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct CpEstimate {
    /// Position of the CP start modulo the symbol period `N + L`, samples (in stream indices
    /// counted from the tracker's first sample).
    pub cp_start: usize,
    /// Fractional CFO, subcarrier spacings, in (−½, ½].
    pub cfo: f32,
    /// Symbols accumulated.
    pub symbols: u32,
}

/// Streaming van de Beek tracker for FFT size `N` (and `P` = `N + L` accumulator slots,
/// given as the const `S`, which must equal the numerology's symbol length).
#[derive(Clone, Debug)]
pub struct CpTracker<const N: usize, const S: usize> {
    cp: usize,
    rho: f32,
    /// The last `N` samples (ring by stream index mod N).
    ring: [Cf32; N],
    /// The last `L` products and energies (ring).
    prods: [Cf32; S],
    energies: [f32; S],
    run_gamma: Cf32,
    run_phi: f32,
    /// Accumulated γ and Φ per position modulo `S`.
    gamma: [Cf32; S],
    phi: [f32; S],
    seen: u64,
}

impl<const N: usize, const S: usize> CpTracker<N, S> {
    /// A tracker for `numerology` (`S` must be `N + L`), assuming `snr_db` (time domain) for
    /// the weight `ρ = SNR/(SNR + 1)`.
    pub fn new(numerology: &Numerology, snr_db: f32) -> Result<Self, ConfigError> {
        crate::preamble::check_size::<N>(numerology)?;
        if numerology.symbol_len() != S || numerology.cp_len() == 0 || !snr_db.is_finite() {
            return Err(ConfigError::FftSizeMismatch {
                numerology: numerology.symbol_len(),
                stage: S,
            });
        }
        let snr = libm::powf(10.0, snr_db / 10.0);
        Ok(Self {
            cp: numerology.cp_len(),
            rho: snr / (snr + 1.0),
            ring: [Cf32::new(0.0, 0.0); N],
            prods: [Cf32::new(0.0, 0.0); S],
            energies: [0.0; S],
            run_gamma: Cf32::new(0.0, 0.0),
            run_phi: 0.0,
            gamma: [Cf32::new(0.0, 0.0); S],
            phi: [0.0; S],
            seen: 0,
        })
    }

    /// Clears the accumulated statistics (keeps the sample history).
    pub fn clear(&mut self) {
        self.gamma = [Cf32::new(0.0, 0.0); S];
        self.phi = [0.0; S];
    }

    /// Consumes samples (any chunk size). Non-finite samples are treated as zero.
    pub fn push(&mut self, samples: &[Cf32]) {
        let l = self.cp as u64;
        let n_len = N as u64;
        for &x0 in samples {
            let x = if x0.re.is_finite() && x0.im.is_finite() {
                x0
            } else {
                Cf32::new(0.0, 0.0)
            };
            let n = self.seen;
            if n >= n_len {
                // r(n−N) is the oldest sample in the ring: slot n mod N before overwrite.
                let old = self
                    .ring
                    .get((n % n_len) as usize)
                    .copied()
                    .unwrap_or_default();
                let prod = old * x.conj();
                let energy = 0.5 * (old.norm_sqr() + x.norm_sqr());
                let slot = ((n - n_len) % l) as usize;
                if let (Some(p), Some(e)) = (self.prods.get_mut(slot), self.energies.get_mut(slot))
                {
                    self.run_gamma += prod - *p;
                    self.run_phi += energy - *e;
                    *p = prod;
                    *e = energy;
                }
                if n >= n_len + l - 1 {
                    // Sums now cover window start m = n − N − L + 1.
                    if n.is_multiple_of(S as u64) {
                        self.run_gamma = self.prods.iter().take(self.cp).sum();
                        self.run_phi = self.energies.iter().take(self.cp).sum();
                    }
                    let m = ((n + 1 - n_len - l) % S as u64) as usize;
                    if let (Some(g), Some(f)) = (self.gamma.get_mut(m), self.phi.get_mut(m)) {
                        *g += self.run_gamma;
                        *f += self.run_phi;
                    }
                }
            }
            if let Some(slot) = self.ring.get_mut((n % n_len) as usize) {
                *slot = x;
            }
            self.seen += 1;
        }
    }

    /// The current estimate: the position maximising `|γ| − ρΦ` over the accumulated symbols.
    pub fn estimate(&self) -> CpEstimate {
        let mut best = (f32::MIN, 0usize);
        for (m, (g, f)) in self.gamma.iter().zip(self.phi.iter()).enumerate() {
            let v = g.norm() - self.rho * f;
            if v > best.0 {
                best = (v, m);
            }
        }
        let g = self.gamma.get(best.1).copied().unwrap_or_default();
        let windows = self.seen.saturating_sub((N + self.cp) as u64 - 1);
        CpEstimate {
            cp_start: best.1,
            cfo: -libm::atan2f(g.im, g.re) / (2.0 * core::f32::consts::PI),
            symbols: (windows / S as u64) as u32,
        }
    }
}
