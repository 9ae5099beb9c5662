//! Streaming frame acquisition on the preamble (f32): Schmidl & Cox timing metric from running
//! sums, a plateau-robust decision, fractional CFO from the half-symbol correlation, and the
//! integer CFO from preamble symbol B.
//!
//! With `L = N/2` and the newest sample `r(n)`, `d = n − 2L + 1`:
//!
//! ```text
//! P(d) = Σ_{m<L} r*(d+m) r(d+m+L)      R(d) = Σ_{m<L} |r(d+m+L)|²      M(d) = |P(d)|²/R(d)²
//! ```
//!
//! (Schmidl & Cox, IEEE Trans. Commun. 45(12):1613–1621, 1997; REFERENCES item 7b). `P` and `R`
//! are updated per sample by adding the newest product and removing the oldest (constant cost
//! per sample: two complex multiplies, one real divide, a compare), and recomputed exactly every
//! [`REFRESH`] samples so rounding cannot accumulate.
//!
//! **Decision.** When `M` first exceeds the threshold, `M` and `P` are kept for the next `N`
//! positions (the plateau of `L_cp + 1` positions and both ramps, `L` long each, fit); the
//! timing is the centroid of `max(M − ½·peak, 0)`. The metric is a trapezoid symmetric about
//! the plateau's middle, so the centroid is that middle; on a channel whose echoes fit the CP
//! the plateau spans the ISI-free part of symbol A's CP, so the FFT window of symbol A starts
//! in the middle of that part. (Schmidl & Cox take the midpoint of the 90 %-of-peak points; at
//! N = 256 and Es/N0 = 5 dB two extreme points of a noisy metric put about 1 % of windows just
//! outside the CP, the centroid averages the whole plateau.) The fractional CFO is
//! `ε = arg P(d̂)/π` subcarrier spacings (|ε| < 1).
//!
//! **Threshold.** On noise alone (variance σ²), given the second half `b`, `P` is complex
//! Gaussian with variance `σ²R`, so `|P|²/(σ²R)` is exponential and `P(M > t | R) =
//! e^{−tR/σ²}`; `R/σ²` is Gamma(`L`, 1), whose moment-generating function gives
//! `P(M > t) = (1 + t)^{−L}` exactly (derived here). Over the `N + L_cp` positions of a symbol, a
//! false-alarm rate `p` per symbol needs `t = ((N + L_cp)/p)^{1/L} − 1` (union bound). The
//! simpler `e^{−Lt}` (R taken as its mean) understates the tail: at `L = 32` it let through
//! 8.5e-5 per symbol when 1e-5 was asked.

use crate::error::{ConfigError, ProcessError};
use crate::fft::OfdmFft;
use crate::numerology::Numerology;
use crate::preamble::{preamble_grid, PreambleSymbol};
use crate::Cf32;

/// Samples between exact recomputations of the running sums.
pub const REFRESH: u64 = 4096;

/// A detected preamble.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Detection {
    /// Stream index of the first sample of symbol A's FFT window (inside its cyclic prefix, in
    /// the middle of the ISI-free part). Symbol B's window starts `N + L_cp` later.
    pub window_start: u64,
    /// Fractional CFO, subcarrier spacings, in (−1, 1].
    pub cfo_fraction: f32,
    /// Peak timing metric M.
    pub metric: f32,
}

#[derive(Clone, Copy, Debug)]
enum State {
    Searching,
    Plateau { start: u64, len: usize, peak: f32 },
    Holdoff { until: u64 },
}

/// Streaming Schmidl & Cox acquisition for FFT size `N`.
#[derive(Clone, Debug)]
pub struct Acquirer<const N: usize> {
    half: usize,
    cp: usize,
    threshold: f32,
    /// The last `N` samples, ring (index = stream index mod N).
    ring: [Cf32; N],
    /// Samples seen.
    seen: u64,
    p: Cf32,
    r: f32,
    state: State,
    /// Metric and correlation over the current plateau.
    m_buf: [f32; N],
    p_buf: [Cf32; N],
}

impl<const N: usize> Acquirer<N> {
    /// Threshold on `M` for `false_alarms_per_symbol` on noise alone (see the module docs).
    pub fn threshold_for(numerology: &Numerology, false_alarms_per_symbol: f32) -> f32 {
        let l = (N / 2) as f32;
        let positions = numerology.symbol_len() as f32;
        libm::expf(libm::logf(positions / false_alarms_per_symbol.max(f32::MIN_POSITIVE)) / l) - 1.0
    }

    /// An acquirer for `numerology` with timing threshold `threshold` on `M` (0 < t < 1).
    pub fn new(numerology: &Numerology, threshold: f32) -> Result<Self, ConfigError> {
        crate::preamble::check_size::<N>(numerology)?;
        if !(threshold > 0.0 && threshold < 1.0) {
            return Err(ConfigError::EstimatorModelInvalid);
        }
        Ok(Self {
            half: N / 2,
            cp: numerology.cp_len(),
            threshold,
            ring: [Cf32::new(0.0, 0.0); N],
            seen: 0,
            p: Cf32::new(0.0, 0.0),
            r: 0.0,
            state: State::Searching,
            m_buf: [0.0; N],
            p_buf: [Cf32::new(0.0, 0.0); N],
        })
    }

    /// Samples consumed so far (the stream index of the next sample).
    pub fn position(&self) -> u64 {
        self.seen
    }

    fn at(&self, index: u64) -> Cf32 {
        self.ring
            .get((index % N as u64) as usize)
            .copied()
            .unwrap_or_default()
    }

    fn recompute(&mut self) {
        let n = self.seen; // next index; newest is n − 1
        let l = self.half as u64;
        let (mut p, mut r) = (Cf32::new(0.0, 0.0), 0.0f32);
        if n >= 2 * l {
            let d = n - 2 * l;
            for m in 0..l {
                let a = self.at(d + m);
                let b = self.at(d + m + l);
                p += a.conj() * b;
                r += b.norm_sqr();
            }
        }
        self.p = p;
        self.r = r;
    }

    /// Consumes `samples` (any length); returns the first detection completed in this chunk,
    /// if any (a detection ends the search for `2(N + L_cp)` samples, the rest of the
    /// preamble). Errors on a NaN or infinite sample (index within `samples`), consuming
    /// nothing.
    pub fn push(&mut self, samples: &[Cf32]) -> Result<Option<Detection>, ProcessError> {
        if let Some(index) = samples
            .iter()
            .position(|v| !(v.re.is_finite() && v.im.is_finite()))
        {
            return Err(ProcessError::NonFinite { index });
        }
        let mut found = None;
        let l = self.half as u64;
        for &x in samples {
            let n = self.seen;
            // Running sums: add the product ending at n, drop the one that left the window.
            if n >= l {
                let mid = self.at(n - l);
                self.p += mid.conj() * x;
                self.r += x.norm_sqr();
                if n >= 2 * l {
                    let old = self.at(n - 2 * l);
                    self.p -= old.conj() * mid;
                    self.r -= mid.norm_sqr();
                }
            }
            if let Some(slot) = self.ring.get_mut((n % N as u64) as usize) {
                *slot = x;
            }
            self.seen += 1;
            if self.seen.is_multiple_of(REFRESH) {
                self.recompute();
            }
            if self.seen < 2 * l {
                continue;
            }
            let d = self.seen - 2 * l; // window start of the sums just completed
            let m = if self.r > 0.0 {
                self.p.norm_sqr() / (self.r * self.r)
            } else {
                0.0
            };
            if let Some(det) = self.decide(d, m) {
                found = found.or(Some(det));
            }
        }
        Ok(found)
    }

    fn decide(&mut self, d: u64, m: f32) -> Option<Detection> {
        match self.state {
            State::Holdoff { until } => {
                if d >= until {
                    self.state = State::Searching;
                }
                None
            }
            State::Searching => {
                if m > self.threshold {
                    if let (Some(mb), Some(pb)) = (self.m_buf.first_mut(), self.p_buf.first_mut()) {
                        *mb = m;
                        *pb = self.p;
                    }
                    self.state = State::Plateau {
                        start: d,
                        len: 1,
                        peak: m,
                    };
                }
                None
            }
            State::Plateau { start, len, peak } => {
                let peak = peak.max(m);
                if len >= N {
                    let det = self.finish(start, len, peak);
                    self.state = State::Holdoff {
                        until: start + 2 * (N + self.cp) as u64,
                    };
                    return Some(det);
                }
                if let (Some(mb), Some(pb)) = (self.m_buf.get_mut(len), self.p_buf.get_mut(len)) {
                    *mb = m;
                    *pb = self.p;
                }
                self.state = State::Plateau {
                    start,
                    len: len + 1,
                    peak,
                };
                None
            }
        }
    }

    fn finish(&self, start: u64, len: usize, peak: f32) -> Detection {
        // Centroid of the metric above half its peak (module docs).
        let level = 0.5 * peak;
        let ms = self.m_buf.get(..len).unwrap_or_default();
        let (mut sw, mut swd) = (0.0f32, 0.0f32);
        for (i, &v) in ms.iter().enumerate() {
            let w = (v - level).max(0.0);
            sw += w;
            swd += w * i as f32;
        }
        let mid = if sw > 0.0 {
            (swd / sw + 0.5) as usize
        } else {
            0
        };
        let p = self.p_buf.get(mid).copied().unwrap_or_default();
        Detection {
            window_start: start + mid as u64,
            cfo_fraction: libm::atan2f(p.im, p.re) / core::f32::consts::PI,
            metric: peak,
        }
    }
}

/// Integer (even) part of the CFO from the two preamble windows (`N` samples each, symbol A's
/// and B's FFT windows, `N + L_cp` apart) after the fractional part `cfo_fraction` is known: the
/// shift `2g`, `|2g| ≤ max_shift`, maximising `|Σ_k X_A*(k+2g) v_k* X_B(k+2g)|` over the even
/// used bins, `v = B/A` the differential code (Schmidl & Cox 1997). Returns the total CFO in
/// subcarrier spacings (`2g + cfo_fraction`).
pub fn total_cfo<F: OfdmFft<N, Sample = Cf32>, const N: usize>(
    numerology: &Numerology,
    fft: &mut F,
    window_a: &[Cf32; N],
    window_b: &[Cf32; N],
    cfo_fraction: f32,
    max_shift: usize,
) -> f32 {
    let sym = numerology.symbol_len() as f32;
    // Remove the fractional part (window B also advanced by N + L_cp samples of phase).
    let mut xa = *window_a;
    let mut xb = *window_b;
    let w = -2.0 * core::f32::consts::PI * cfo_fraction / N as f32;
    for (n, (a, b)) in xa.iter_mut().zip(xb.iter_mut()).enumerate() {
        let ph = w * n as f32;
        let rot = Cf32::new(libm::cosf(ph), libm::sinf(ph));
        *a *= rot;
        let ph_b = w * sym;
        *b *= rot * Cf32::new(libm::cosf(ph_b), libm::sinf(ph_b));
    }
    fft.forward(&mut xa);
    fft.forward(&mut xb);
    let mut ga = [Cf32::new(0.0, 0.0); N];
    let mut gb = [Cf32::new(0.0, 0.0); N];
    preamble_grid(numerology, PreambleSymbol::A, &mut ga);
    preamble_grid(numerology, PreambleSymbol::B, &mut gb);
    let mut best = (f32::MIN, 0i64);
    let half = (max_shift / 2) as i64;
    for g in -half..=half {
        let shift = 2 * g;
        let mut acc = Cf32::new(0.0, 0.0);
        for u in 0..numerology.used_len() {
            let k = i64::from(numerology.logical_bin(u));
            if k % 2 != 0 {
                continue;
            }
            let idx = (k + shift).rem_euclid(N as i64) as usize;
            let src = numerology.fft_index(u);
            let (a, b) = (
                ga.get(src).copied().unwrap_or_default(),
                gb.get(src).copied().unwrap_or_default(),
            );
            // v_k = B_k/A_k; its conjugate direction is enough (real ±).
            let v = if (a.re >= 0.0) == (b.re >= 0.0) {
                1.0
            } else {
                -1.0
            };
            let (ya, yb) = (
                xa.get(idx).copied().unwrap_or_default(),
                xb.get(idx).copied().unwrap_or_default(),
            );
            acc += ya.conj() * yb * v;
        }
        let mag = acc.norm_sqr();
        if mag > best.0 {
            best = (mag, shift);
        }
    }
    best.1 as f32 + cfo_fraction
}

/// Fine timing from preamble symbol B: the offset, in samples, from symbol B's FFT window
/// start (`window_b`, CFO already removed) to the channel's first path, found in the
/// impulse response `IFFT(Y_k B_k*)` as the earliest lag in `[−N/4, N/4)` whose power reaches
/// `first_path_fraction` of the strongest (e.g. 0.1). Moving the FFT windows by this offset
/// (minus a sample or two of margin) puts the first path at the start of the channel, where
/// the estimator's delay-profile model begins. Returns 0 when the window holds no power.
pub fn first_path_offset<F: OfdmFft<N, Sample = Cf32>, const N: usize>(
    numerology: &Numerology,
    fft: &mut F,
    window_b: &[Cf32; N],
    first_path_fraction: f32,
) -> i32 {
    let mut y = *window_b;
    fft.forward(&mut y);
    let mut grid = [Cf32::new(0.0, 0.0); N];
    preamble_grid(numerology, PreambleSymbol::B, &mut grid);
    for (v, b) in y.iter_mut().zip(grid.iter()) {
        *v *= b.conj();
    }
    fft.inverse(&mut y);
    let q = (N / 4) as i32;
    let power = |lag: i32| {
        y.get(lag.rem_euclid(N as i32) as usize)
            .map_or(0.0, |v| v.norm_sqr())
    };
    let peak = (-q..q).map(power).fold(0.0f32, f32::max);
    if peak <= 0.0 {
        return 0;
    }
    (-q..q)
        .find(|&lag| power(lag) >= first_path_fraction * peak)
        .unwrap_or(0)
}
