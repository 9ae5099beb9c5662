//! The frame preamble: two OFDM symbols, each with the numerology's cyclic prefix.
//!
//! * **Symbol A** (timing and fractional CFO): a PN sequence of ±1 on the *even* used bins
//!   only, amplitude √2 so its power equals a data symbol's; the odd bins are empty, so its
//!   useful part is two identical halves of `N/2` samples (Schmidl & Cox, IEEE Trans. Commun.
//!   45(12), 1997).
//! * **Symbol B** (integer CFO, gain): a PN sequence of ±1 on every used bin. On the even bins
//!   `v_k = B_k / A_k` is the differential code that resolves the CFO's even-integer ambiguity
//!   left by symbol A.
//!
//! Both sequences come from the pilot PRBS with fixed stream numbers, so transmitter and
//! receiver regenerate them from the numerology alone.

use crate::error::{ConfigError, ProcessError};
use crate::fft::OfdmFft;
use crate::numerology::Numerology;
use crate::pilots::Prbs15;
use crate::Cf32;

/// PRBS symbol index of symbol A's sequence (far from data symbol numbers).
const STREAM_A: u32 = 0xA5A5_0001;
/// PRBS symbol index of symbol B's sequence.
const STREAM_B: u32 = 0xA5A5_0002;

/// Which preamble symbol.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum PreambleSymbol {
    /// The two-halves symbol (timing, fractional CFO).
    A,
    /// The full PN symbol (integer CFO, gain).
    B,
}

/// The value of `symbol` on used bin `used_index` (logical bin `k`), before the IFFT.
pub fn preamble_bin(numerology: &Numerology, symbol: PreambleSymbol, used_index: usize) -> Cf32 {
    preamble_grid_value(numerology, symbol, used_index)
}

fn preamble_grid_value(nu: &Numerology, symbol: PreambleSymbol, used_index: usize) -> Cf32 {
    // Re-run the PRBS up to this bin: configuration-time and test use only.
    let seed = nu.params().pilots.seed;
    match symbol {
        PreambleSymbol::A => {
            let mut prbs = Prbs15::for_symbol(seed, STREAM_A);
            let mut v = Cf32::new(0.0, 0.0);
            for u in 0..=used_index {
                if nu.logical_bin(u) % 2 == 0 {
                    v = prbs.next_pilot(core::f32::consts::SQRT_2);
                } else {
                    v = Cf32::new(0.0, 0.0);
                }
            }
            v
        }
        PreambleSymbol::B => {
            let mut prbs = Prbs15::for_symbol(seed, STREAM_B);
            let mut v = Cf32::new(0.0, 0.0);
            for _ in 0..=used_index {
                v = prbs.next_pilot(1.0);
            }
            v
        }
    }
}

/// Fills `grid` (natural FFT order) with preamble `symbol`; unused bins zero.
pub fn preamble_grid<const N: usize>(
    numerology: &Numerology,
    symbol: PreambleSymbol,
    grid: &mut [Cf32; N],
) {
    grid.fill(Cf32::new(0.0, 0.0));
    let seed = numerology.params().pilots.seed;
    let mut prbs = Prbs15::for_symbol(
        seed,
        match symbol {
            PreambleSymbol::A => STREAM_A,
            PreambleSymbol::B => STREAM_B,
        },
    );
    for u in 0..numerology.used_len() {
        let k = numerology.logical_bin(u);
        let v = match symbol {
            PreambleSymbol::A if k % 2 == 0 => prbs.next_pilot(core::f32::consts::SQRT_2),
            PreambleSymbol::A => continue,
            PreambleSymbol::B => prbs.next_pilot(1.0),
        };
        if let Some(slot) = grid.get_mut(numerology.fft_index(u)) {
            *slot = v;
        }
    }
}

/// The signs of preamble `symbol` per FFT index (+1, −1; 0 on empty bins), from the same PRBS
/// as [`preamble_grid`] with no floating point (for the integer receiver).
pub fn preamble_signs<const N: usize>(numerology: &Numerology, symbol: PreambleSymbol) -> [i8; N] {
    let mut out = [0i8; N];
    let seed = numerology.params().pilots.seed;
    let mut prbs = Prbs15::for_symbol(
        seed,
        match symbol {
            PreambleSymbol::A => STREAM_A,
            PreambleSymbol::B => STREAM_B,
        },
    );
    for u in 0..numerology.used_len() {
        let k = numerology.logical_bin(u);
        if symbol == PreambleSymbol::A && k % 2 != 0 {
            continue;
        }
        // `next_pilot` maps bit 0 to +amplitude, 1 to −amplitude.
        let sign = if prbs.next_bit() == 0 { 1 } else { -1 };
        if let Some(slot) = out.get_mut(numerology.fft_index(u)) {
            *slot = sign;
        }
    }
    out
}

/// Writes the preamble (symbol A then symbol B, each `N + L` samples with its CP) into `out`
/// (exactly `2(N + L)` samples), unitary scale as the transmitter's data symbols.
pub fn write_preamble<F: OfdmFft<N, Sample = Cf32>, const N: usize>(
    numerology: &Numerology,
    fft: &mut F,
    out: &mut [Cf32],
) -> Result<(), ProcessError> {
    let sym = numerology.symbol_len();
    if out.len() != 2 * sym {
        return Err(ProcessError::BufferLength {
            expected: 2 * sym,
            actual: out.len(),
        });
    }
    let cp = numerology.cp_len();
    for (s, chunk) in [PreambleSymbol::A, PreambleSymbol::B]
        .into_iter()
        .zip(out.chunks_exact_mut(sym))
    {
        let mut grid = [Cf32::new(0.0, 0.0); N];
        preamble_grid(numerology, s, &mut grid);
        fft.inverse(&mut grid);
        let (head, body) = chunk.split_at_mut(cp);
        body.copy_from_slice(&grid);
        if let Some(tail) = grid.get(N - cp..) {
            head.copy_from_slice(tail);
        }
    }
    Ok(())
}

/// Checks that the numerology's FFT size is `N` (for stages built on the preamble).
pub fn check_size<const N: usize>(numerology: &Numerology) -> Result<(), ConfigError> {
    if numerology.fft_len() == N {
        Ok(())
    } else {
        Err(ConfigError::FftSizeMismatch {
            numerology: numerology.fft_len(),
            stage: N,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::fft::MicroFft;
    use crate::numerology::NumerologyParams;

    #[test]
    fn the_transmitter_writes_the_same_preamble() {
        let nu = Numerology::new(NumerologyParams::default()).unwrap();
        let mut a = [Cf32::new(0.0, 0.0); 144];
        let mut b = [Cf32::new(0.0, 0.0); 144];
        write_preamble(&nu, &mut MicroFft::<64>::new(), &mut a).unwrap();
        crate::transmit::Transmitter::new(nu, MicroFft::<64>::new())
            .unwrap()
            .preamble(&mut b)
            .unwrap();
        assert_eq!(a, b);
    }

    #[test]
    fn symbol_a_has_two_identical_halves_and_the_cp_is_a_copy() {
        // Only even subcarriers → period N/2 in time (DFT property; Schmidl & Cox 1997).
        let nu = Numerology::new(NumerologyParams::default()).unwrap();
        let mut out = [Cf32::new(0.0, 0.0); 144];
        write_preamble(&nu, &mut MicroFft::<64>::new(), &mut out).unwrap();
        let a = &out[8..72];
        for m in 0..32 {
            assert!((a[m] - a[m + 32]).norm() < 1e-5);
        }
        assert_eq!(&out[..8], &out[64..72]);
        // Symbol B is not periodic in N/2.
        let b = &out[80..144];
        assert!((0..32).any(|m| (b[m] - b[m + 32]).norm() > 0.1));
        // Power equal to a data symbol's (used bins, unit energy): Σ|a|² = used_len (unitary).
        let pa: f32 = a.iter().map(|v| v.norm_sqr()).sum();
        let even = (0..nu.used_len())
            .filter(|&u| nu.logical_bin(u) % 2 == 0)
            .count() as f32;
        assert!((pa - 2.0 * even).abs() < 1e-3);
        assert_eq!(preamble_bin(&nu, PreambleSymbol::B, 3).norm(), 1.0);
        // The integer signs agree with the grid.
        for s in [PreambleSymbol::A, PreambleSymbol::B] {
            let mut g = [Cf32::new(0.0, 0.0); 64];
            preamble_grid(&nu, s, &mut g);
            let signs = preamble_signs::<64>(&nu, s);
            for (v, sg) in g.iter().zip(signs.iter()) {
                assert_eq!(f32::from(*sg), v.re.signum() * f32::from(v.re != 0.0));
            }
        }
    }
}
