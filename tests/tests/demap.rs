//! Max-log LLRs against a brute-force max-log search over the whole 2-D constellation.

use flatbin::demap::{hard_decision, llr_max_log, llr_to_i8, I8_LSB_PER_LLR};
use flatbin::{Cf32, Modulation};
use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;

/// Every constellation point with its bit label, built from the public mapper.
fn constellation(m: Modulation) -> Vec<(Vec<u8>, Cf32)> {
    let k = m.bits_per_symbol();
    (0..1usize << k)
        .map(|v| {
            let bits: Vec<u8> = (0..k).map(|j| ((v >> (k - 1 - j)) & 1) as u8).collect();
            let x = m.map(&bits).expect("valid label");
            (bits, x)
        })
        .collect()
}

/// Definition of the max-log LLR (REFERENCES item 10, negated to ln P0/P1): for received
/// `r = H x + n`, `L(b) = (1/N0)[min_{x:b=1} |r − Hx|² − min_{x:b=0} |r − Hx|²]`, searched over
/// all M points in two dimensions, in f64.
fn brute_force(
    points: &[(Vec<u8>, Cf32)],
    r: (f64, f64),
    h: (f64, f64),
    n0: f64,
    bit: usize,
) -> f64 {
    let mut min = [f64::INFINITY; 2];
    for (bits, x) in points {
        let (xr, xi) = (f64::from(x.re), f64::from(x.im));
        let hx = (h.0 * xr - h.1 * xi, h.0 * xi + h.1 * xr);
        let d = (r.0 - hx.0).powi(2) + (r.1 - hx.1).powi(2);
        let slot = &mut min[usize::from(bits[bit])];
        *slot = slot.min(d);
    }
    (min[1] - min[0]) / n0
}

#[test]
fn max_log_llrs_equal_brute_force_search() {
    let mut rng = ChaCha8Rng::seed_from_u64(2002);
    for m in Modulation::ALL {
        let points = constellation(m);
        let k = m.bits_per_symbol();
        for _ in 0..2000 {
            // Random channel gain and a received value anywhere around the constellation.
            let h = (rng.random_range(-1.5..1.5), rng.random_range(-1.5..1.5));
            let h2: f64 = h.0 * h.0 + h.1 * h.1;
            if h2 < 0.05 {
                continue;
            }
            let n0 = rng.random_range(0.05..2.0);
            let r: (f64, f64) = (rng.random_range(-2.0..2.0), rng.random_range(-2.0..2.0));
            // ZF output y = r / H and CSI weight |H|²/N0 (item 10: identical to the metric on r).
            let y = ((r.0 * h.0 + r.1 * h.1) / h2, (r.1 * h.0 - r.0 * h.1) / h2);
            let mut llrs = [0.0f32; 8];
            llr_max_log(
                m,
                Cf32::new(y.0 as f32, y.1 as f32),
                (h2 / n0) as f32,
                &mut llrs,
            )
            .unwrap();
            for (bit, got) in llrs.iter().take(k).enumerate() {
                let want = brute_force(&points, r, h, n0, bit);
                // f32 arithmetic on values up to ~100: 1e-4 absolute, relative above 1 (the
                // issue's 1e-4 absolute bound, scaled for large LLRs).
                let tol = 1e-4 * want.abs().max(1.0);
                assert!(
                    (f64::from(*got) - want).abs() <= tol,
                    "{m:?} bit {bit}: got {got}, brute force {want}"
                );
            }
        }
    }
}

#[test]
fn hard_decisions_agree_with_nearest_point() {
    let mut rng = ChaCha8Rng::seed_from_u64(17);
    for m in Modulation::ALL {
        let points = constellation(m);
        for _ in 0..2000 {
            let y = Cf32::new(rng.random_range(-1.6..1.6), rng.random_range(-1.6..1.6));
            let nearest = points
                .iter()
                .min_by(|a, b| (y - a.1).norm_sqr().total_cmp(&(y - b.1).norm_sqr()))
                .unwrap();
            let mut bits = [0u8; 8];
            hard_decision(m, y, &mut bits).unwrap();
            assert_eq!(
                &bits[..m.bits_per_symbol()],
                nearest.0.as_slice(),
                "{m:?} y={y}"
            );
        }
    }
}

#[test]
fn i8_llrs_saturate_never_wrap() {
    // A strongly received 256-QAM corner point: its outer bits' LLRs are far beyond the i8
    // range at high weight; they must clip at ±127 with the right sign, never wrap.
    let x = Modulation::Qam256.map(&[1, 0, 0, 0, 0, 0, 0, 0]).unwrap();
    let mut llrs = [0.0f32; 8];
    llr_max_log(Modulation::Qam256, x * 1.5, 1e4, &mut llrs).unwrap();
    let mut q = [0i8; 8];
    llr_to_i8(&llrs, I8_LSB_PER_LLR, &mut q).unwrap();
    for (l, v) in llrs.iter().zip(q) {
        assert_eq!(v.signum(), (l.signum() as i8), "sign lost: {l} -> {v}");
        if l.abs() * I8_LSB_PER_LLR > 127.0 {
            assert_eq!(v.abs(), 127);
        }
    }
    assert_eq!(q[0], -127); // bit 0 is 1 → strongly negative
}
