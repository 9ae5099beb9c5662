//! Additive white Gaussian noise at a stated Es/N0 per data subcarrier.
//!
//! With the core's unitary transforms, complex noise of variance `σ²` per time sample
//! appears with variance `σ²` in every bin, and data symbols have unit mean energy, so
//! `σ² = N0 = 1 / (Es/N0)`. Pilot boost does not enter (DESIGN.md convention).

use flatbin::Cf32;
use rand::RngExt;
use rand_distr::StandardNormal;

/// Noise variance N0 (total complex) for an Es/N0 in dB, with unit-energy data symbols.
pub fn n0_for_es_n0_db(es_n0_db: f64) -> f64 {
    10f64.powf(-es_n0_db / 10.0)
}

/// Adds circular complex Gaussian noise of total variance `n0` (n0/2 per real dimension).
pub fn add_awgn<R: rand::Rng + ?Sized>(rng: &mut R, samples: &mut [Cf32], n0: f64) {
    let sigma = (n0 / 2.0).sqrt();
    for s in samples.iter_mut() {
        let re: f64 = rng.sample(StandardNormal);
        let im: f64 = rng.sample(StandardNormal);
        *s += Cf32::new((re * sigma) as f32, (im * sigma) as f32);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn variance_matches_request() {
        // Sample variance of n = 200 000 complex draws: relative std of the estimate is
        // 1/sqrt(n) ≈ 0.22 %, so ±1 % is over 4σ (REFERENCES tolerance rule).
        let mut rng = crate::rng::stream_rng(7, 0);
        let mut buf = vec![Cf32::new(0.0, 0.0); 200_000];
        add_awgn(&mut rng, &mut buf, 0.25);
        let p: f64 = buf.iter().map(|v| f64::from(v.norm_sqr())).sum::<f64>() / buf.len() as f64;
        assert!((p - 0.25).abs() < 0.0025, "{p}");
    }
}
