//! Fixed-size Hermitian solves for estimator design, on the device, without allocation.
//!
//! Estimator coefficients are computed once at configuration time by solving
//! `(R + σ²I) x = b` with `R` a correlation matrix (Hermitian, positive semi-definite) and
//! `σ² > 0`, so the system is positive definite and Cholesky (`A = L Lᴴ`) applies. The work is
//! done in f64 (soft-float on a single-precision FPU, but it runs once per configuration) and
//! only the results are narrowed to f32.

use num_complex::Complex;

/// Complex f64, for configuration-time arithmetic.
pub type Cf64 = Complex<f64>;

/// The matrix was not positive definite (a pivot ≤ `1e-12 ×` the largest diagonal entry, or
/// not finite).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct NotPositiveDefinite;

/// Solves `a x = b` for Hermitian positive-definite `a` (only the lower triangle is read) by
/// Cholesky factorisation. `K` is the system size.
pub fn solve_hpd<const K: usize>(
    a: &[[Cf64; K]; K],
    b: &[Cf64; K],
) -> Result<[Cf64; K], NotPositiveDefinite> {
    let zero = Cf64::new(0.0, 0.0);
    let mut l = [[zero; K]; K];
    let scale = a
        .iter()
        .enumerate()
        .map(|(i, row)| row.get(i).map_or(0.0, |v| v.re.abs()))
        .fold(0.0f64, f64::max);
    let floor = 1e-12 * scale;
    for i in 0..K {
        for j in 0..=i {
            let mut sum = a.get(i).and_then(|r| r.get(j)).copied().unwrap_or(zero);
            for k in 0..j {
                let lik = l.get(i).and_then(|r| r.get(k)).copied().unwrap_or(zero);
                let ljk = l.get(j).and_then(|r| r.get(k)).copied().unwrap_or(zero);
                sum -= lik * ljk.conj();
            }
            if i == j {
                let d = sum.re;
                if !(d.is_finite() && d > floor) {
                    return Err(NotPositiveDefinite);
                }
                if let Some(v) = l.get_mut(i).and_then(|r| r.get_mut(i)) {
                    *v = Cf64::new(libm::sqrt(d), 0.0);
                }
            } else {
                let ljj = l.get(j).and_then(|r| r.get(j)).map_or(1.0, |v| v.re);
                if let Some(v) = l.get_mut(i).and_then(|r| r.get_mut(j)) {
                    *v = sum / ljj;
                }
            }
        }
    }
    // Forward: L y = b.
    let mut y = [zero; K];
    for i in 0..K {
        let mut sum = b.get(i).copied().unwrap_or(zero);
        for k in 0..i {
            let lik = l.get(i).and_then(|r| r.get(k)).copied().unwrap_or(zero);
            sum -= lik * y.get(k).copied().unwrap_or(zero);
        }
        let lii = l.get(i).and_then(|r| r.get(i)).map_or(1.0, |v| v.re);
        if let Some(v) = y.get_mut(i) {
            *v = sum / lii;
        }
    }
    // Backward: Lᴴ x = y.
    let mut x = [zero; K];
    for i in (0..K).rev() {
        let mut sum = y.get(i).copied().unwrap_or(zero);
        for k in i + 1..K {
            let lki = l.get(k).and_then(|r| r.get(i)).copied().unwrap_or(zero);
            sum -= lki.conj() * x.get(k).copied().unwrap_or(zero);
        }
        let lii = l.get(i).and_then(|r| r.get(i)).map_or(1.0, |v| v.re);
        if let Some(v) = x.get_mut(i) {
            *v = sum / lii;
        }
    }
    if x.iter().all(|v| v.re.is_finite() && v.im.is_finite()) {
        Ok(x)
    } else {
        Err(NotPositiveDefinite)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    #[allow(clippy::needless_range_loop)] // matrix products read clearest with indices
    fn solves_a_hermitian_system_and_rejects_a_singular_one() {
        // A = M Mᴴ + I for a fixed M: positive definite; check A x = b by multiplying back
        // (the defining property of a solution).
        let m = [
            [
                Cf64::new(1.0, 0.5),
                Cf64::new(-0.3, 0.2),
                Cf64::new(0.7, -0.1),
            ],
            [
                Cf64::new(0.2, -0.4),
                Cf64::new(0.9, 0.0),
                Cf64::new(-0.5, 0.6),
            ],
            [
                Cf64::new(-0.8, 0.3),
                Cf64::new(0.1, 0.1),
                Cf64::new(0.4, -0.7),
            ],
        ];
        let mut a = [[Cf64::new(0.0, 0.0); 3]; 3];
        for i in 0..3 {
            for j in 0..3 {
                for k in 0..3 {
                    a[i][j] += m[i][k] * m[j][k].conj();
                }
            }
            a[i][i] += 1.0;
        }
        let b = [
            Cf64::new(1.0, -2.0),
            Cf64::new(0.5, 0.5),
            Cf64::new(-1.0, 0.0),
        ];
        let x = solve_hpd(&a, &b).unwrap();
        for i in 0..3 {
            let mut r = Cf64::new(0.0, 0.0);
            for j in 0..3 {
                r += a[i][j] * x[j];
            }
            assert!((r - b[i]).norm() < 1e-12);
        }
        let singular = [[Cf64::new(1.0, 0.0); 2]; 2];
        assert_eq!(
            solve_hpd(&singular, &[Cf64::new(1.0, 0.0); 2]),
            Err(NotPositiveDefinite)
        );
    }
}
