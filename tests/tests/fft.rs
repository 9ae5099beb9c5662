//! The f32 FFT front against an f64 reference FFT (`rustfft`), and its algebraic invariants.

use flatbin::fft::{MicroFft, OfdmFft};
use flatbin::Cf32;
use proptest::prelude::*;
use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rustfft::num_complex::Complex64;

/// Relative RMS error ‖x − ref‖ / ‖ref‖.
fn rel_rms_error(x: &[Cf32], reference: &[Complex64]) -> f64 {
    let mut err = 0.0;
    let mut pow = 0.0;
    for (a, b) in x.iter().zip(reference) {
        let d = Complex64::new(f64::from(a.re), f64::from(a.im)) - b;
        err += d.norm_sqr();
        pow += b.norm_sqr();
    }
    (err / pow).sqrt()
}

fn check_against_rustfft<const N: usize>(seed: u64) {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut planner = rustfft::FftPlanner::<f64>::new();
    let fwd = planner.plan_fft_forward(N);
    let inv = planner.plan_fft_inverse(N);
    let mut fft = MicroFft::<N>::new();
    for _ in 0..4 {
        let mut buf = [Cf32::new(0.0, 0.0); N];
        for v in buf.iter_mut() {
            *v = Cf32::new(rng.random_range(-1.0..1.0), rng.random_range(-1.0..1.0));
        }
        // rustfft computes the unnormalised DFT with e^{-j2πkn/N} forward (its crate docs,
        // "Normalization"); ours is unitary, so scale the reference by 1/sqrt(N).
        let scale = 1.0 / (N as f64).sqrt();
        let mut reference: Vec<Complex64> = buf
            .iter()
            .map(|v| Complex64::new(f64::from(v.re), f64::from(v.im)))
            .collect();
        let mut inv_ref = reference.clone();
        fwd.process(&mut reference);
        inv.process(&mut inv_ref);
        reference.iter_mut().for_each(|v| *v *= scale);
        inv_ref.iter_mut().for_each(|v| *v *= scale);

        let mut f = buf;
        assert_eq!(fft.forward(&mut f), 0);
        // f32 has a 6e-8 unit roundoff; a radix-2 FFT's relative RMS error grows about like
        // eps·sqrt(log2 N) (common practice), far below 1e-5 up to N = 4096.
        let e = rel_rms_error(&f, &reference);
        assert!(e < 1e-5, "N={N} forward rel err {e}");
        let mut g = buf;
        fft.inverse(&mut g);
        let e = rel_rms_error(&g, &inv_ref);
        assert!(e < 1e-5, "N={N} inverse rel err {e}");
    }
}

#[test]
fn agrees_with_f64_reference_fft_for_every_size() {
    check_against_rustfft::<16>(1);
    check_against_rustfft::<32>(2);
    check_against_rustfft::<64>(3);
    check_against_rustfft::<128>(4);
    check_against_rustfft::<256>(5);
    check_against_rustfft::<512>(6);
    check_against_rustfft::<1024>(7);
    check_against_rustfft::<2048>(8);
    check_against_rustfft::<4096>(9);
}

fn vec_n<const N: usize>() -> impl Strategy<Value = Vec<Cf32>> {
    prop::collection::vec((-1.0f32..1.0, -1.0f32..1.0), N)
        .prop_map(|v| v.into_iter().map(|(r, i)| Cf32::new(r, i)).collect())
}

fn to_array<const N: usize>(v: &[Cf32]) -> [Cf32; N] {
    let mut a = [Cf32::new(0.0, 0.0); N];
    a.copy_from_slice(v);
    a
}

fn energy(v: &[Cf32]) -> f64 {
    v.iter().map(|c| f64::from(c.norm_sqr())).sum()
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(64))]

    /// Inverse after forward is the identity (unitary pair; textbook DFT inversion).
    #[test]
    fn round_trip_is_identity(x in vec_n::<256>()) {
        let mut fft = MicroFft::<256>::new();
        let mut a = to_array::<256>(&x);
        fft.forward(&mut a);
        fft.inverse(&mut a);
        let err: f64 = a.iter().zip(&x).map(|(p, q)| f64::from((p - q).norm_sqr())).sum();
        prop_assert!(err <= 1e-10 * energy(&x).max(1e-3), "err {}", err);
    }

    /// Parseval: a unitary DFT preserves energy (textbook identity).
    #[test]
    fn parseval_holds(x in vec_n::<64>()) {
        let mut fft = MicroFft::<64>::new();
        let mut a = to_array::<64>(&x);
        fft.forward(&mut a);
        let (ex, ea) = (energy(&x), energy(&a));
        prop_assert!((ex - ea).abs() <= 1e-5 * ex.max(1e-6), "{} vs {}", ex, ea);
    }

    /// Linearity: F(αx + y) = αF(x) + F(y) (textbook DFT property).
    #[test]
    fn linearity_holds(x in vec_n::<128>(), y in vec_n::<128>(), alpha in -4.0f32..4.0) {
        let mut fft = MicroFft::<128>::new();
        let mut fx = to_array::<128>(&x);
        let mut fy = to_array::<128>(&y);
        let mut fz = [Cf32::new(0.0, 0.0); 128];
        for (z, (p, q)) in fz.iter_mut().zip(x.iter().zip(&y)) {
            *z = p * alpha + q;
        }
        fft.forward(&mut fx);
        fft.forward(&mut fy);
        fft.forward(&mut fz);
        let scale = energy(&fz).max(1e-6);
        let err: f64 = fz.iter().zip(fx.iter().zip(&fy))
            .map(|(z, (p, q))| f64::from((z - (p * alpha + q)).norm_sqr())).sum();
        prop_assert!(err <= 1e-10 * scale, "err {}", err);
    }
}
