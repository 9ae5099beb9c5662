//! Pilot values: a seeded PRBS-15 mapped to BPSK at the numerology's pilot amplitude.
//!
//! The generator is the maximal-length LFSR with polynomial `x^15 + x^14 + 1` (the PRBS-15
//! of ITU-T O.150, from memory). Each OFDM symbol restarts it from a state derived from the
//! seed and the symbol index, so a receiver can produce the pilots of any symbol directly,
//! without replaying the ones before it. Bit 0 → `+A`, bit 1 → `-A`.

use crate::numerology::{BinIter, BinKind, Numerology};
use crate::Cf32;

/// PRBS-15 generator (`x^15 + x^14 + 1`), one bit per step.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Prbs15 {
    state: u16,
}

impl Prbs15 {
    /// Starts from `seed` (low 15 bits; an all-zero seed is replaced by 1, since the
    /// all-zero state never leaves zero).
    pub fn new(seed: u16) -> Self {
        let s = seed & 0x7fff;
        Self {
            state: if s == 0 { 1 } else { s },
        }
    }
    /// The state a symbol starts from: the seed advanced by a fixed odd stride per symbol,
    /// reduced to a nonzero 15-bit value.
    pub fn for_symbol(seed: u16, symbol: u32) -> Self {
        let mixed = (u32::from(seed & 0x7fff)).wrapping_add(symbol.wrapping_mul(0x3a5b)) % 0x7fff;
        Self::new((mixed + 1) as u16)
    }
    /// Next output bit (0 or 1).
    pub fn next_bit(&mut self) -> u8 {
        let bit = ((self.state >> 14) ^ (self.state >> 13)) & 1;
        self.state = ((self.state << 1) | bit) & 0x7fff;
        bit as u8
    }
    /// Next pilot value: bit 0 → `+amplitude`, bit 1 → `-amplitude` (real BPSK).
    pub fn next_pilot(&mut self, amplitude: f32) -> Cf32 {
        let sign = if self.next_bit() == 0 { 1.0 } else { -1.0 };
        Cf32::new(sign * amplitude, 0.0)
    }
}

/// The pilots of one symbol in ascending frequency: `(fft_index, value)`.
#[derive(Clone, Debug)]
pub struct PilotIter {
    bins: BinIter,
    prbs: Prbs15,
    amplitude: f32,
}

impl PilotIter {
    /// Pilots of symbol `symbol` under `numerology`.
    pub fn new(numerology: &Numerology, symbol: u32) -> Self {
        Self {
            bins: numerology.bins(symbol),
            prbs: Prbs15::for_symbol(numerology.params().pilots.seed, symbol),
            amplitude: numerology.pilot_amplitude(),
        }
    }
}

impl Iterator for PilotIter {
    type Item = (usize, Cf32);
    fn next(&mut self) -> Option<(usize, Cf32)> {
        let bin = self.bins.find(|b| b.kind == BinKind::Pilot)?;
        Some((bin.fft_index, self.prbs.next_pilot(self.amplitude)))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn prbs15_is_maximal_length() {
        // A maximal-length 15-bit LFSR returns to its start after exactly 2^15 - 1 steps and
        // emits 2^14 ones per period (property of m-sequences; common practice).
        let mut g = Prbs15::new(1);
        let start = g;
        let mut ones = 0u32;
        let mut period = 0u32;
        loop {
            ones += u32::from(g.next_bit());
            period += 1;
            if g == start {
                break;
            }
            assert!(period < 40_000);
        }
        assert_eq!(period, 32_767);
        assert_eq!(ones, 16_384);
    }

    #[test]
    fn symbols_get_different_sequences() {
        let mut s0 = Prbs15::for_symbol(0x1d5, 0);
        let mut s1 = Prbs15::for_symbol(0x1d5, 1);
        let w0: u32 = (0..32).fold(0, |w, _| (w << 1) | u32::from(s0.next_bit()));
        let w1: u32 = (0..32).fold(0, |w, _| (w << 1) | u32::from(s1.next_bit()));
        assert_ne!(w0, w1);
    }
}
