//! Streaming preamble acquisition in integers (Q15 input): the algorithm of
//! [`crate::acquire`] with exact integer running sums, so no refresh is needed and the host and
//! every core compute the same bits.
//!
//! * Samples `Cq15`; products `i32`, running sums `P` (complex) and `R` in `i64` — exact.
//! * Search: `M > t` is tested as `|P|² > t·R²` on normalised 30-bit values (`t` in Q16), a
//!   few multiplies and a compare per sample, no division.
//! * On the plateau `M` itself is kept (Q16, through [`reciprocal`]) for the 90 %-of-peak
//!   midpoint.
//! * The fractional CFO comes from [`atan2_turns`] (CORDIC) as a fraction of a turn × 2^32:
//!   `ε = arg P/π`, i.e. `ε·2^31` — the unit a phase-accumulator NCO takes directly.

use crate::error::{ConfigError, ProcessError};
use crate::fixed::Cq15;
use crate::fixed_math::{atan2_turns, reciprocal};
use crate::numerology::Numerology;

/// A detected preamble (integer form).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct DetectionQ15 {
    /// Stream index of the first sample of symbol A's FFT window (as [`crate::acquire`]).
    pub window_start: u64,
    /// Fractional CFO `ε` (subcarrier spacings) as `ε·2^31` (wrapping: ±2^31 is ±1).
    pub cfo_fraction_q31: i32,
    /// Peak timing metric M, Q16.
    pub metric_q16: u32,
}

#[derive(Clone, Copy, Debug)]
enum State {
    Searching,
    Plateau { start: u64, len: usize, peak: u32 },
    Holdoff { until: u64 },
}

/// Integer streaming Schmidl & Cox acquisition for FFT size `N`.
#[derive(Clone, Debug)]
pub struct AcquirerQ15<const N: usize> {
    half: usize,
    cp: usize,
    /// Threshold on M, Q16.
    threshold_q16: u32,
    ring: [Cq15; N],
    seen: u64,
    p_re: i64,
    p_im: i64,
    r: i64,
    state: State,
    m_buf: [u32; N],
    p_buf: [(i64, i64); N],
}

/// `v` shifted right so that its magnitude fits in 30 bits, and the shift.
fn norm30(v: u64) -> u32 {
    let bits = 64 - v.leading_zeros();
    bits.saturating_sub(30)
}

impl<const N: usize> AcquirerQ15<N> {
    /// An acquirer for `numerology` with threshold `threshold_q16` on M (Q16, e.g. from
    /// [`crate::acquire::Acquirer::threshold_for`] × 65536 at configuration time).
    pub fn new(numerology: &Numerology, threshold_q16: u32) -> Result<Self, ConfigError> {
        crate::preamble::check_size::<N>(numerology)?;
        if threshold_q16 == 0 || threshold_q16 >= 1 << 16 {
            return Err(ConfigError::EstimatorModelInvalid);
        }
        Ok(Self {
            half: N / 2,
            cp: numerology.cp_len(),
            threshold_q16,
            ring: [Cq15::ZERO; N],
            seen: 0,
            p_re: 0,
            p_im: 0,
            r: 0,
            state: State::Searching,
            m_buf: [0; N],
            p_buf: [(0, 0); N],
        })
    }

    /// Samples consumed so far.
    pub fn position(&self) -> u64 {
        self.seen
    }

    fn at(&self, index: u64) -> Cq15 {
        self.ring
            .get((index % N as u64) as usize)
            .copied()
            .unwrap_or_default()
    }

    /// `|P|² > t·R²`, on values normalised to 30 bits.
    fn above(&self, t_q16: u32) -> bool {
        let big = self
            .p_re
            .unsigned_abs()
            .max(self.p_im.unsigned_abs())
            .max(self.r.unsigned_abs());
        let s = norm30(big);
        let (pr, pi, r) = (self.p_re >> s, self.p_im >> s, self.r >> s);
        let p2 = (pr * pr + pi * pi) as u64; // < 2^61
        let r2 = (r * r) as u64 >> 16; // < 2^44
        p2 > r2.saturating_mul(u64::from(t_q16))
    }

    /// `M` in Q16 (division-free: normalised reciprocal).
    fn metric_q16(&self) -> u32 {
        let big = self
            .p_re
            .unsigned_abs()
            .max(self.p_im.unsigned_abs())
            .max(self.r.unsigned_abs());
        // Normalise the largest to 15 bits (squares < 2^31), up or down.
        let s = (64 - big.leading_zeros()) as i32 - 15;
        let sh = |v: i64| if s >= 0 { v >> s } else { v << -s };
        let (pr, pi, r) = (sh(self.p_re), sh(self.p_im), sh(self.r));
        let p2 = (pr * pr + pi * pi) as u64;
        let r2 = (r * r) as u32;
        match reciprocal(r2) {
            // M = p2 · rec·2^(e−30), in Q16.
            Some((rec, e)) => {
                let v = crate::fixed_math::shift_round(p2 as i64 * rec, 30 - e - 16);
                v.clamp(0, i64::from(u32::MAX)) as u32
            }
            None => 0,
        }
    }

    /// Consumes `samples` (any length); returns the first detection completed in this chunk.
    /// Never fails on content (integers cannot be NaN); the `Result` keeps the f32 API.
    pub fn push(&mut self, samples: &[Cq15]) -> Result<Option<DetectionQ15>, ProcessError> {
        let mut found = None;
        let l = self.half as u64;
        for &x in samples {
            let n = self.seen;
            let (xr, xi) = (i64::from(x.re), i64::from(x.im));
            if n >= l {
                let mid = self.at(n - l);
                let (mr, mi) = (i64::from(mid.re), i64::from(mid.im));
                // conj(mid)·x
                self.p_re += mr * xr + mi * xi;
                self.p_im += mr * xi - mi * xr;
                self.r += xr * xr + xi * xi;
                if n >= 2 * l {
                    let old = self.at(n - 2 * l);
                    let (or, oi) = (i64::from(old.re), i64::from(old.im));
                    self.p_re -= or * mr + oi * mi;
                    self.p_im -= or * mi - oi * mr;
                    self.r -= mr * mr + mi * mi;
                }
            }
            if let Some(slot) = self.ring.get_mut((n % N as u64) as usize) {
                *slot = x;
            }
            self.seen += 1;
            if self.seen < 2 * l {
                continue;
            }
            let d = self.seen - 2 * l;
            if let Some(det) = self.decide(d) {
                found = found.or(Some(det));
            }
        }
        Ok(found)
    }

    fn decide(&mut self, d: u64) -> Option<DetectionQ15> {
        match self.state {
            State::Holdoff { until } => {
                if d >= until {
                    self.state = State::Searching;
                }
                None
            }
            State::Searching => {
                if self.r > 0 && self.above(self.threshold_q16) {
                    let m = self.metric_q16();
                    if let (Some(mb), Some(pb)) = (self.m_buf.first_mut(), self.p_buf.first_mut()) {
                        *mb = m;
                        *pb = (self.p_re, self.p_im);
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
                let m = if self.r > 0 { self.metric_q16() } else { 0 };
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
                    *pb = (self.p_re, self.p_im);
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

    fn finish(&self, start: u64, len: usize, peak: u32) -> DetectionQ15 {
        // Centroid of the metric above half its peak (as `crate::acquire`), rounded.
        let level = peak / 2;
        let ms = self.m_buf.get(..len).unwrap_or_default();
        let (mut sw, mut swd) = (0u64, 0u64);
        for (i, &v) in ms.iter().enumerate() {
            let w = u64::from(v.saturating_sub(level));
            sw += w;
            swd += w * i as u64;
        }
        let mid = (swd + sw / 2).checked_div(sw).unwrap_or(0) as usize;
        let (pr, pi) = self.p_buf.get(mid).copied().unwrap_or_default();
        // ε = arg P / π: turns·2 → ε·2^31 = turns·2^32 (as i32, wrapping).
        let turns = atan2_turns(pi, pr);
        DetectionQ15 {
            window_start: start + mid as u64,
            cfo_fraction_q31: turns as i32,
            metric_q16: peak,
        }
    }
}
