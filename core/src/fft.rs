//! The FFT front-end trait and its f32 implementation.
//!
//! Every later stage is written once against [`OfdmFft`]: the f32 path here wraps `microfft`,
//! and the Q15 block-floating-point path implements the same trait.
//!
//! ## Normalisation
//!
//! Both directions are **unitary**: `X[k] = N^(-1/2) Σ x[n] e^(-j2πkn/N)` and
//! `x[n] = N^(-1/2) Σ X[k] e^(+j2πkn/N)`, so energy is preserved and a round trip is the
//! identity. An implementation may leave its output scaled by a power of two and report the
//! block exponent `e`: the unitary transform equals `output · 2^e · RESIDUAL_SCALE` (f32:
//! `e = 0`, scale 1; Q15: see [`crate::fft_q15`], outputs read as fractions).
//!
//! ## Output order
//!
//! Natural order: index `k` holds frequency `k` for `k < N/2` and `k - N` above.

use crate::Cf32;

/// An in-place N-point transform pair, unitary up to a reported power-of-two scale.
pub trait OfdmFft<const N: usize> {
    /// Element type of the buffer (complex f32, or complex Q15).
    type Sample: Copy;
    /// Constant factor left after the power-of-two block exponent: the unitary transform is
    /// `output · 2^e · RESIDUAL_SCALE` (1 for f32; `1/sqrt 2` for Q15 when log2 N is odd).
    const RESIDUAL_SCALE: f32;
    /// Forward unitary DFT in place; returns the block exponent `e` (unitary DFT = out · 2^e).
    fn forward(&mut self, buf: &mut [Self::Sample; N]) -> i32;
    /// Inverse unitary DFT in place; returns the block exponent `e` (unitary IDFT = out · 2^e).
    fn inverse(&mut self, buf: &mut [Self::Sample; N]) -> i32;
}

/// f32 FFT on `microfft` (radix-2, in place), scaled to be unitary. N = 16 … 4096.
#[derive(Clone, Copy, Debug)]
pub struct MicroFft<const N: usize> {
    scale: f32,
}

impl<const N: usize> MicroFft<N> {
    const SIZE_OK: () = assert!(
        N.is_power_of_two() && N >= 16 && N <= 4096,
        "FFT size must be a power of two in 16..=4096"
    );

    /// A transform of size `N` (checked at compile time).
    pub fn new() -> Self {
        #[allow(clippy::let_unit_value)]
        let () = Self::SIZE_OK;
        Self {
            scale: 1.0 / libm::sqrtf(N as f32),
        }
    }

    fn raw_forward(buf: &mut [Cf32; N]) {
        macro_rules! dispatch {
            ($($n:literal => $f:ident),*) => {
                match N {
                    $($n => {
                        if let Ok(b) = <&mut [Cf32; $n]>::try_from(buf.as_mut_slice()) {
                            let _ = microfft::complex::$f(b);
                        }
                    })*
                    _ => {}
                }
            };
        }
        dispatch!(16 => cfft_16, 32 => cfft_32, 64 => cfft_64, 128 => cfft_128,
                  256 => cfft_256, 512 => cfft_512, 1024 => cfft_1024, 2048 => cfft_2048,
                  4096 => cfft_4096);
    }
}

impl<const N: usize> Default for MicroFft<N> {
    fn default() -> Self {
        Self::new()
    }
}

impl<const N: usize> OfdmFft<N> for MicroFft<N> {
    type Sample = Cf32;
    const RESIDUAL_SCALE: f32 = 1.0;

    fn forward(&mut self, buf: &mut [Cf32; N]) -> i32 {
        Self::raw_forward(buf);
        for v in buf.iter_mut() {
            *v *= self.scale;
        }
        0
    }

    fn inverse(&mut self, buf: &mut [Cf32; N]) -> i32 {
        // IDFT(x) = swap(DFT(swap(x))), swap exchanging real and imaginary parts.
        for v in buf.iter_mut() {
            *v = Cf32::new(v.im, v.re);
        }
        Self::raw_forward(buf);
        for v in buf.iter_mut() {
            *v = Cf32::new(v.im * self.scale, v.re * self.scale);
        }
        0
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn impulse_gives_flat_spectrum() {
        // DFT of a unit impulse is flat: every bin 1/sqrt(N) (unitary; textbook identity).
        let mut fft = MicroFft::<64>::new();
        let mut buf = [Cf32::new(0.0, 0.0); 64];
        buf[0] = Cf32::new(1.0, 0.0);
        assert_eq!(fft.forward(&mut buf), 0);
        for v in buf {
            assert!((v.re - 0.125).abs() < 1e-7 && v.im.abs() < 1e-7);
        }
    }

    #[test]
    fn tone_lands_in_its_bin() {
        // x[n] = e^{j2π·5n/N} → all energy in bin 5, magnitude sqrt(N) (unitary).
        let mut fft = MicroFft::<256>::new();
        let mut buf = [Cf32::new(0.0, 0.0); 256];
        for (n, v) in buf.iter_mut().enumerate() {
            let ph = 2.0 * core::f64::consts::PI * 5.0 * n as f64 / 256.0;
            *v = Cf32::new(ph.cos() as f32, ph.sin() as f32);
        }
        fft.forward(&mut buf);
        assert!((buf[5].re - 16.0).abs() < 1e-3);
        let rest: f32 = buf
            .iter()
            .enumerate()
            .filter(|(k, _)| *k != 5)
            .map(|(_, v)| v.norm_sqr())
            .sum();
        assert!(rest < 1e-6);
    }
}
