//! Interference from a delay spread longer than the cyclic prefix.
//!
//! A tap of power `p` at delay `d` samples, with CP length `L` and FFT size `N`, reads the
//! previous symbol during the first `e = max(0, d − L)` samples of the FFT window. Of its
//! received power `p`, the part that stays on its own subcarrier is `p·((N − e)/N)²` (the mean of
//! the rectangular window that cuts the circular part); the rest, `p·[1 − ((N − e)/N)²] =
//! p·e(2N − e)/N²`, is interference: `p·e/N` from the previous symbol (ISI) and
//! `p·e(N − e)/N²` spread over the other subcarriers of the current one (ICI). Data are
//! independent with unit power on all `N` subcarriers.
//!
//! Source: derived here from the windowing argument above (the standard result; see e.g.
//! H. Steendam, M. Moeneclaey, "Analysis and optimization of the performance of OFDM on
//! frequency-selective time-selective fading channels," IEEE Trans. Commun. 47(12), 1999 —
//! from memory).

/// Excess of a tap beyond the CP, samples: `max(0, d − L)`, at most `N`.
pub fn excess_samples(delay: usize, cp_len: usize, fft_len: usize) -> usize {
    delay.saturating_sub(cp_len).min(fft_len)
}

/// The factor `(N − e)/N` by which a tap's contribution to its own subcarrier is scaled.
pub fn useful_amplitude(delay: usize, cp_len: usize, fft_len: usize) -> f64 {
    let e = excess_samples(delay, cp_len, fft_len) as f64;
    (fft_len as f64 - e) / fft_len as f64
}

/// ISI + ICI power from taps `(delay_samples, power)` as a fraction of the received power.
pub fn isi_ici_fraction(taps: &[(usize, f64)], cp_len: usize, fft_len: usize) -> f64 {
    let total: f64 = taps.iter().map(|t| t.1).sum();
    if total <= 0.0 {
        return 0.0;
    }
    let interference: f64 = taps
        .iter()
        .map(|&(d, p)| p * (1.0 - useful_amplitude(d, cp_len, fft_len).powi(2)))
        .sum();
    interference / total
}

/// The ISI part alone (power read from the previous symbol), fraction of received power.
pub fn isi_fraction(taps: &[(usize, f64)], cp_len: usize, fft_len: usize) -> f64 {
    let total: f64 = taps.iter().map(|t| t.1).sum();
    if total <= 0.0 {
        return 0.0;
    }
    taps.iter()
        .map(|&(d, p)| p * excess_samples(d, cp_len, fft_len) as f64 / fft_len as f64)
        .sum::<f64>()
        / total
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn worked_by_hand() {
        // N = 64, L = 8: a tap at 24 samples exceeds the CP by 16; useful (48/64)² = 0.5625,
        // interference 0.4375 = 16·112/64², of which ISI 16/64 = 0.25 (arithmetic by hand).
        assert!((isi_ici_fraction(&[(24, 1.0)], 8, 64) - 0.4375).abs() < 1e-12);
        assert!((isi_fraction(&[(24, 1.0)], 8, 64) - 0.25).abs() < 1e-12);
        assert_eq!(isi_ici_fraction(&[(0, 0.5), (8, 0.5)], 8, 64), 0.0);
    }
}
