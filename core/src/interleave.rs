//! Bit interleaver across the subcarriers and bits of one OFDM symbol, and its inverse on LLRs.
//!
//! ## The permutation
//!
//! The two-step block interleaver of IEEE 802.11a-1999 clause 17.3.5.6, generalised to any
//! number of data bins. For `N` = `N_CBPS` coded bits per symbol (data bins × `N_BPSC` bits per
//! subcarrier), coded bit `k` (`0 ≤ k < N`, the order bits leave the encoder) is sent at
//! position `j` of the symbol's bit sequence, which is cut into groups of `N_BPSC` bits, one
//! group per data bin in ascending frequency (the order [`crate::transmit`] maps bits).
//!
//! 1. **First step** (adjacent coded bits onto non-adjacent subcarriers): the bits are written
//!    row by row into a block of `C` columns and read out column by column,
//!    `i = (N/C)·(k mod C) + ⌊k/C⌋` in the standard, with `C = 16`.
//! 2. **Second step** (adjacent coded bits alternately onto more and less significant
//!    constellation bits): `j = s·⌊i/s⌋ + (i + N − ⌊C·i/N⌋) mod s`, `s = max(N_BPSC/2, 1)`.
//!
//! ### Generalisation to `N` not a multiple of 16
//!
//! The standard requires `N` to be a multiple of 16; our numerologies give any data-bin count.
//!
//! * **Columns** `C = min(16, data bins)` (16 whenever there are at least 16 data bins; with
//!   fewer, one column per bin so adjacent bits still never share a subcarrier).
//! * **Padded block, empty cells skipped**: the block has `⌈N/C⌉` rows; only the last row may be
//!   short. With `q = ⌊N/C⌋` and `F = N mod C`, the first `F` columns hold `q + 1` bits and the
//!   others `q`. Reading column by column and skipping the empty cells gives
//!   `i = q·c + min(c, F) + r` for `k = C·r + c` — exactly the standard's formula when `F = 0`.
//! * **Second step per group**: the rotation is taken from the first index of each group of `s`,
//!   `j = s·⌊i/s⌋ + (i + N − ⌊C·s·⌊i/s⌋/N⌋) mod s`. Where the standard's own formula is a
//!   permutation (the column length `N/C` a multiple of `s`, true for all of its sizes
//!   `N = 48·N_BPSC`), `⌊C·i/N⌋` is constant across each group and this equals the clause
//!   exactly; elsewhere (e.g. 4 bins of 256-QAM) the clause's formula maps two bits of a group
//!   to the same place, while the per-group rotation is a permutation by construction.
//!
//! ### Spreading
//!
//! The second step only permutes bits inside groups of `s` consecutive positions, and `s`
//! divides `N_BPSC`, so a bit's subcarrier is `⌊i/N_BPSC⌋`. Adjacent coded bits `k, k+1` in the
//! same row land `q` or `q + 1` positions apart; across a row boundary (column `C−1` to column
//! 0 of the next row) at least `(C−1)·q − 1 ≥ q` apart for `C ≥ 3`. Hence, with at least 3 data
//! bins, **adjacent coded bits lie on subcarriers at least `⌊q/N_BPSC⌋ = ⌊bins/C⌋` apart**
//! ([`Interleaver::min_subcarrier_spread`]): 3 for the standard's 48 bins, 3 for 52, 12 for
//! 200, 14 for 234, and at least 1 (never the same subcarrier) for any size of 2 bins or more.
//! (Distances are in data-bin numbering; pilots between data bins only add to them.)
//!
//! ## Cost
//!
//! [`Interleaver::index`] is O(1) with a few integer divisions. [`Interleaver::interleave`] and
//! [`Interleaver::deinterleave`] walk the block column by column, so `i` simply counts up and
//! the whole symbol is permuted with additions and compares only — no division per bit (the
//! Cortex-M0 has no divider), no table, no allocation. Every divisor (`C`, `s`, `N`) is fixed
//! nonzero at construction.

use core::num::NonZeroUsize;

use crate::error::{ConfigError, ProcessError};
use crate::modulation::Modulation;
use crate::numerology::{Numerology, MAX_FFT_LEN};

/// Columns of the interleaver block in IEEE 802.11a-1999 clause 17.3.5.6.
pub const STANDARD_COLUMNS: usize = 16;

/// The interleaver of one OFDM symbol: sized by its data-bin count and modulation.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Interleaver {
    data_bins: usize,
    modulation: Modulation,
    /// Coded bits per symbol, `N`.
    n: NonZeroUsize,
    /// Columns `C`.
    columns: NonZeroUsize,
    /// Second-step group size `s`.
    s: NonZeroUsize,
    /// Shortest column length `q = ⌊N/C⌋`.
    q: usize,
    /// Columns of length `q + 1`, `F = N mod C`.
    long_columns: usize,
}

impl Interleaver {
    /// An interleaver for `data_bins` data subcarriers each carrying `modulation`.
    ///
    /// Errors: [`ConfigError::NoDataBins`] for 0 bins; [`ConfigError::CapacityTooSmall`]
    /// (`needed` = `data_bins`, `capacity` = [`MAX_FFT_LEN`]) for more data bins than the
    /// largest FFT has.
    pub fn new(data_bins: usize, modulation: Modulation) -> Result<Self, ConfigError> {
        if data_bins > MAX_FFT_LEN {
            return Err(ConfigError::CapacityTooSmall {
                needed: data_bins,
                capacity: MAX_FFT_LEN,
            });
        }
        let bpsc = modulation.bits_per_symbol();
        let n = NonZeroUsize::new(data_bins * bpsc).ok_or(ConfigError::NoDataBins)?;
        let columns =
            NonZeroUsize::new(data_bins.min(STANDARD_COLUMNS)).ok_or(ConfigError::NoDataBins)?;
        let s = NonZeroUsize::new((bpsc / 2).max(1)).ok_or(ConfigError::NoDataBins)?;
        Ok(Self {
            data_bins,
            modulation,
            n,
            columns,
            s,
            q: n.get() / columns,
            long_columns: n.get() % columns,
        })
    }

    /// The interleaver of symbol `symbol` of numerology `nu` (its data-bin count,
    /// [`Numerology::data_len`]).
    pub fn for_symbol(
        nu: &Numerology,
        symbol: u32,
        modulation: Modulation,
    ) -> Result<Self, ConfigError> {
        Self::new(nu.data_len(symbol), modulation)
    }

    /// Data bins (subcarriers) of the symbol.
    pub fn data_bins(&self) -> usize {
        self.data_bins
    }
    /// Modulation of every data bin.
    pub fn modulation(&self) -> Modulation {
        self.modulation
    }
    /// Coded bits per symbol, `N_CBPS` = data bins × bits per subcarrier (the length of every
    /// buffer the permutation takes).
    pub fn coded_bits(&self) -> usize {
        self.n.get()
    }
    /// Columns `C` of the first step (`min(16, data bins)`).
    pub fn columns(&self) -> usize {
        self.columns.get()
    }
    /// The guaranteed subcarrier distance between the bins carrying coded bits `k` and `k+1`,
    /// for every `k` (module docs): `⌊bins / C⌋` for 3 or more bins, 1 for 2 bins, 0 for 1.
    pub fn min_subcarrier_spread(&self) -> usize {
        if self.data_bins < 2 {
            0
        } else {
            self.data_bins / self.columns
        }
    }

    /// Position `j` in the symbol's bit sequence of coded bit `k` (the permutation). O(1).
    /// Returns `k` itself for `k ≥ coded_bits()` (outside the permutation's domain).
    pub fn index(&self, k: usize) -> usize {
        if k >= self.n.get() {
            return k;
        }
        let c = k % self.columns;
        let r = k / self.columns;
        let i = self.q * c + c.min(self.long_columns) + r;
        let group = i / self.s;
        let x = (self.columns.get() * self.s.get() * group) / self.n;
        let rot = (i + self.n.get() - x) % self.s;
        self.s.get() * group + rot
    }

    /// Calls `f(k, j)` for every coded bit `k` and its position `j = index(k)`, walking the
    /// block column by column so that `i` counts up: additions and compares only.
    #[inline(always)]
    fn walk(&self, mut f: impl FnMut(usize, usize)) {
        let n = self.n.get();
        let c_len = self.columns.get();
        let s = self.s.get();
        // `C·i0 mod N` and `⌊C·i0/N⌋ mod s` for the group start i0, kept incrementally
        // (C ≤ N, so one subtraction per step suffices).
        let mut num = 0usize; // C·i mod N
        let mut x_mod_s = 0usize; // ⌊C·i/N⌋ mod s
        let mut pos = 0usize; // i mod s
        let mut group_start = 0usize; // s·⌊i/s⌋
        let mut rot = 0usize; // (i + N − x) mod s for the current i
        for c in 0..c_len {
            let len = self.q + usize::from(c < self.long_columns);
            let mut k = c;
            for _ in 0..len {
                if pos == 0 {
                    // (N − x) mod s, with N a multiple of s.
                    rot = if x_mod_s == 0 { 0 } else { s - x_mod_s };
                }
                f(k, group_start + rot);
                k += c_len;
                // Advance i by one.
                num += c_len;
                if num >= n {
                    num -= n;
                    x_mod_s += 1;
                    if x_mod_s == s {
                        x_mod_s = 0;
                    }
                }
                pos += 1;
                rot += 1;
                if rot == s {
                    rot = 0;
                }
                if pos == s {
                    pos = 0;
                    group_start += s;
                }
            }
        }
    }

    fn check_lengths(&self, input: usize, output: usize) -> Result<(), ProcessError> {
        let expected = self.n.get();
        for actual in [input, output] {
            if actual != expected {
                return Err(ProcessError::BufferLength { expected, actual });
            }
        }
        Ok(())
    }

    /// Interleaves one symbol's coded bits (one per byte, 0/1): `out[index(k)] = bits_in[k]`.
    ///
    /// Errors: [`ProcessError::BufferLength`] unless both buffers hold `coded_bits()`;
    /// [`ProcessError::InvalidBit`] for a value other than 0/1. On error `out` is untouched.
    pub fn interleave(&self, bits_in: &[u8], out: &mut [u8]) -> Result<(), ProcessError> {
        self.check_lengths(bits_in.len(), out.len())?;
        if let Some(index) = bits_in.iter().position(|&b| b > 1) {
            return Err(ProcessError::InvalidBit { index });
        }
        self.walk(|k, j| {
            if let (Some(&b), Some(o)) = (bits_in.get(k), out.get_mut(j)) {
                *o = b;
            }
        });
        Ok(())
    }

    /// De-interleaves one symbol's soft values (i8 or f32 LLRs, or anything `Copy`), in the
    /// order the demapper writes them (bin by bin): `out[k] = llrs_in[index(k)]`, so `out` is
    /// in coded-bit order for the decoder.
    ///
    /// Errors: [`ProcessError::BufferLength`] unless both buffers hold `coded_bits()`. On error
    /// `out` is untouched.
    pub fn deinterleave<T: Copy>(&self, llrs_in: &[T], out: &mut [T]) -> Result<(), ProcessError> {
        self.check_lengths(llrs_in.len(), out.len())?;
        self.walk(|k, j| {
            if let (Some(&v), Some(o)) = (llrs_in.get(j), out.get_mut(k)) {
                *o = v;
            }
        });
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn walk_agrees_with_index() {
        // The division-free walk and the O(1) formula are two codings of one permutation.
        for bins in 1..=300 {
            for m in Modulation::ALL {
                let il = Interleaver::new(bins, m).unwrap();
                let mut visited = 0;
                il.walk(|k, j| {
                    assert_eq!(il.index(k), j, "bins {bins} {m:?} k {k}");
                    visited += 1;
                });
                assert_eq!(visited, il.coded_bits());
            }
        }
    }

    #[test]
    fn zero_and_oversized_rejected() {
        assert_eq!(
            Interleaver::new(0, Modulation::Qpsk),
            Err(ConfigError::NoDataBins)
        );
        assert!(Interleaver::new(MAX_FFT_LEN + 1, Modulation::Qpsk).is_err());
        assert!(Interleaver::new(MAX_FFT_LEN, Modulation::Qam256).is_ok());
    }
}
