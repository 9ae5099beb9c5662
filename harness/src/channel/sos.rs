//! Sum-of-sinusoids fading generator with the classical (Jakes) Doppler spectrum.
//!
//! One tap's complex gain, unit mean power:
//!
//! ```text
//! h(t) = sqrt(1/(K+1)) · sqrt(2/M) · Σ_{n=1..M} e^{jψ_n} cos(ω_n t + φ_n)
//!      + sqrt(K/(K+1)) · e^{j(ω_0 t + φ_0)}                        (Rician, K ≥ 0)
//! ω_n = 2π fd cos α_n,   α_n = (2πn − π + θ)/(4M),   θ, φ_n, ψ_n, φ_0 i.i.d. U[−π, π)
//! ```
//!
//! This is the model of Y. R. Zheng and C. Xiao, "Simulation models with correct statistical
//! properties for Rayleigh fading channels," IEEE Trans. Commun. 51(6):920–928, 2003 (citation
//! confirmed; equations from memory, REFERENCES.md item 3b), with one change the reference sheet
//! recommends: every sinusoid has its own phase `φ_n` (a shared phase makes `h(0)` non-Gaussian,
//! E|h|⁴/(E|h|²)² = 3 − 1.5/M instead of 2). Its autocorrelation is exactly J0(2π fd τ) for any
//! M (averaged over θ), so ICI and estimator statistics are right with M = 16; envelope
//! statistics (LCR, AFD) approach Clarke's as M grows (use 64 for those tests).
//!
//! ## Fast evaluation
//!
//! The gain is computed exactly (f64 oscillators, rotated once per step and re-anchored to the
//! exact phase every 256 steps) on a coarse grid of one point every `D` samples, and linearly
//! interpolated in between. For a sinusoid advancing `θ = 2π f D Ts` per step, linear
//! interpolation leaves a mean-square error of `θ⁴/120` (leading term; derivation in
//! [`interpolation_mse_bound`]), `3θ⁴/(8·120)` averaged over the Jakes spectrum. [`step_for`]
//! picks the largest `D ≤ 64` that keeps this error 35 dB below the Doppler ICI of an
//! `N`-sample window (the (2π fd N Ts)²/24 approximation of REFERENCES item 1);
//! [`step_for_any_spectrum`] uses the spectrum-free bound (Rician taps).

use std::f64::consts::PI;

use num_complex::Complex;
use rand::RngExt;

use crate::rng::HarnessRng;

/// Largest interpolation step, samples.
pub const MAX_STEP: usize = 64;
/// Coarse steps between exact re-anchoring of the oscillators.
const REANCHOR_STEPS: u64 = 256;
/// How far below the Doppler ICI the interpolation error is kept, dB.
pub const INTERPOLATION_MARGIN_DB: f64 = 35.0;

/// Settings of one fading tap.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct FadingParams {
    /// Maximum Doppler shift fd, Hz (≥ 0).
    pub doppler_hz: f64,
    /// Sample rate, Hz (> 0).
    pub sample_rate_hz: f64,
    /// Sinusoids M (≥ 1; 16 for link simulation, 64 for envelope statistics).
    pub sinusoids: usize,
    /// Rician K factor, linear (0 = Rayleigh).
    pub rician_k: f64,
    /// Angle of arrival of the line-of-sight component, radians (its Doppler is fd·cos).
    pub los_angle_rad: f64,
    /// Interpolation step D, samples (1 = exact per-sample evaluation).
    pub step: usize,
}

impl FadingParams {
    /// Rayleigh fading with 16 sinusoids and the step [`step_for`] gives for a window of
    /// `window_samples` (the FFT size).
    pub fn rayleigh(doppler_hz: f64, sample_rate_hz: f64, window_samples: usize) -> Self {
        Self {
            doppler_hz,
            sample_rate_hz,
            sinusoids: 16,
            rician_k: 0.0,
            los_angle_rad: 0.0,
            step: step_for(doppler_hz / sample_rate_hz, window_samples),
        }
    }
}

/// Upper bound on the mean-square error of linear interpolation between exact points `step`
/// samples apart, for a unit-power process whose spectrum lies within `±doppler_norm` cycles
/// per sample: `θ⁴/120` with `θ = 2π·doppler_norm·step`.
///
/// Derivation: for `e^{jωt}` sampled at 0 and D, the interpolant at `u = t/D` is
/// `(1−u) + u e^{jθ}`; expanding both in θ, the error is `θ² u(1−u)/2 + O(θ³)`, whose mean
/// square over `u ∈ [0, 1]` is `θ⁴/4 · ∫u²(1−u)² du = θ⁴/120`. Every spectral line below the
/// maximum Doppler has a smaller θ, so the bound holds for any Doppler spectrum (Jakes: the
/// mean of cos⁴ is 3/8, so the error is 3/8 of the bound).
pub fn interpolation_mse_bound(doppler_norm: f64, step: usize) -> f64 {
    let theta = 2.0 * PI * doppler_norm * step as f64;
    theta.powi(4) / 120.0
}

/// Mean-square error of linear interpolation for the classical (Jakes) spectrum: the bound of
/// [`interpolation_mse_bound`] times the spectrum's mean of cos⁴ over the arrival angle, 3/8
/// (leading term).
pub fn jakes_interpolation_mse(doppler_norm: f64, step: usize) -> f64 {
    interpolation_mse_bound(doppler_norm, step) * 3.0 / 8.0
}

/// The interpolation step rule for Rayleigh (Jakes-spectrum) taps: the largest step
/// `D ≤ MAX_STEP` whose [`jakes_interpolation_mse`] is at least [`INTERPOLATION_MARGIN_DB`]
/// below the Doppler ICI `(2π fd N Ts)²/24` of a window of `window_samples` samples.
/// `doppler_norm` is fd·Ts.
pub fn step_for(doppler_norm: f64, window_samples: usize) -> usize {
    largest_step(doppler_norm, window_samples, jakes_interpolation_mse)
}

/// The same rule with the spectrum-free bound [`interpolation_mse_bound`]: for taps whose
/// spectrum is not the classical one (a Rician line-of-sight component).
pub fn step_for_any_spectrum(doppler_norm: f64, window_samples: usize) -> usize {
    largest_step(doppler_norm, window_samples, interpolation_mse_bound)
}

fn largest_step(doppler_norm: f64, window_samples: usize, mse: fn(f64, usize) -> f64) -> usize {
    if doppler_norm <= 0.0 || window_samples == 0 {
        return MAX_STEP;
    }
    let ici = (2.0 * PI * doppler_norm * window_samples as f64).powi(2) / 24.0;
    let allowed = ici * 10f64.powf(-INTERPOLATION_MARGIN_DB / 10.0);
    (1..=MAX_STEP)
        .rev()
        .find(|&d| mse(doppler_norm, d) <= allowed)
        .unwrap_or(1)
}

/// One fading tap: its random parameters and the coarse-grid oscillators.
///
/// The oscillators are stored as structure-of-arrays f32 (one rotation per step, vectorised);
/// rotations and re-anchoring phases are computed in f64, and the oscillators are re-anchored
/// to the exact phase every 256 steps, so the rotation error stays near f32 precision.
#[derive(Clone, Debug)]
pub struct SosFading {
    /// Angular frequency of each sinusoid per sample, rad (f64).
    omega: Vec<f64>,
    /// Initial phase φ_n of each sinusoid, rad.
    phi: Vec<f64>,
    /// Complex weight sqrt(2/M)·sqrt(1/(K+1))·e^{jψ_n} of each sinusoid.
    weight: Vec<Complex<f64>>,
    /// The weights as f32 parts.
    w_re: Vec<f32>,
    w_im: Vec<f32>,
    /// Line-of-sight term: amplitude, angular frequency per sample, phase.
    los: (f64, f64, f64),
    /// Oscillator states e^{j(ω_n t + φ_n)} at the current coarse point (real, imaginary).
    s_re: Vec<f32>,
    s_im: Vec<f32>,
    /// Per-step rotations e^{jω_n D} (real, imaginary).
    r_re: Vec<f32>,
    r_im: Vec<f32>,
    step: usize,
    /// Index of the current coarse point (time = coarse·D samples).
    coarse: u64,
}

impl SosFading {
    /// A tap with fresh random parameters from `rng`.
    pub fn new(params: &FadingParams, rng: &mut HarnessRng) -> Self {
        let m = params.sinusoids.max(1);
        let step = params.step.clamp(1, MAX_STEP);
        let fd_norm = if params.sample_rate_hz > 0.0 {
            params.doppler_hz.max(0.0) / params.sample_rate_hz
        } else {
            0.0
        };
        let k = params.rician_k.max(0.0);
        let scatter = (1.0 / (k + 1.0)).sqrt() * (2.0 / m as f64).sqrt();
        let mut uniform = || rng.random_range(-PI..PI);
        let theta = uniform();
        let mut omega = Vec::with_capacity(m);
        let mut phi = Vec::with_capacity(m);
        let mut weight = Vec::with_capacity(m);
        for n in 1..=m {
            let alpha = (2.0 * PI * n as f64 - PI + theta) / (4.0 * m as f64);
            omega.push(2.0 * PI * fd_norm * alpha.cos());
            phi.push(uniform());
            weight.push(Complex::from_polar(scatter, uniform()));
        }
        let los = (
            (k / (k + 1.0)).sqrt(),
            2.0 * PI * fd_norm * params.los_angle_rad.cos(),
            uniform(),
        );
        let rot: Vec<Complex<f64>> = omega
            .iter()
            .map(|w| Complex::from_polar(1.0, w * step as f64))
            .collect();
        // f32 working arrays padded to a multiple of 8 lanes (zero weight, unit rotation).
        let padded = m.div_ceil(8) * 8;
        let pad = |v: Vec<f32>, fill: f32| {
            let mut v = v;
            v.resize(padded, fill);
            v
        };
        let mut s = Self {
            w_re: pad(weight.iter().map(|c| c.re as f32).collect(), 0.0),
            w_im: pad(weight.iter().map(|c| c.im as f32).collect(), 0.0),
            r_re: pad(rot.iter().map(|c| c.re as f32).collect(), 1.0),
            r_im: pad(rot.iter().map(|c| c.im as f32).collect(), 0.0),
            omega,
            phi,
            weight,
            los,
            s_re: vec![0.0; padded],
            s_im: vec![0.0; padded],
            step,
            coarse: 0,
        };
        s.reanchor();
        s
    }

    /// Interpolation step D, samples.
    pub fn step(&self) -> usize {
        self.step
    }

    /// The gain at sample `n`, evaluated directly in f64 (slow; the reference the fast path
    /// is tested against).
    pub fn gain_exact(&self, n: u64) -> Complex<f64> {
        let t = n as f64;
        let mut h = Complex::new(0.0, 0.0);
        for ((w, p), c) in self.omega.iter().zip(&self.phi).zip(&self.weight) {
            h += c * (w * t + p).cos();
        }
        let (a, w, p) = self.los;
        h + Complex::from_polar(a, w * t + p)
    }

    /// The gains at the next `out.len()` coarse points (see [`next_coarse`](Self::next_coarse)),
    /// advancing as many steps; on x86-64 with AVX2 (checked at run time) the oscillator loop
    /// runs on 8-lane vectors (same IEEE operations, same bits).
    pub fn coarse_points(&mut self, out: &mut [Complex<f64>]) {
        #[cfg(target_arch = "x86_64")]
        if crate::simd::has_avx2() {
            // SAFETY: the CPU supports AVX2 (checked at run time).
            return unsafe { self.coarse_points_avx2(out) };
        }
        for o in out {
            *o = self.next_coarse();
        }
    }

    /// [`next_coarse`](Self::next_coarse) with 8-lane AVX vectors: the same products and sums
    /// in the same order (lane k accumulates sinusoids k, k+8, …; then the same pairwise tree),
    /// so the same bits.
    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx2")]
    fn coarse_points_avx2(&mut self, out: &mut [Complex<f64>]) {
        use std::arch::x86_64::*;
        /// ((a0+a4)+(a2+a6)) + ((a1+a5)+(a3+a7)).
        #[target_feature(enable = "avx2")]
        fn tree(v: __m256) -> f32 {
            let q = _mm_add_ps(_mm256_castps256_ps128(v), _mm256_extractf128_ps(v, 1));
            let h = _mm_add_ps(q, _mm_movehl_ps(q, q));
            _mm_cvtss_f32(_mm_add_ss(h, _mm_shuffle_ps(h, h, 1)))
        }
        let chunks = self.s_re.len() / 8;
        for o in out.iter_mut() {
            if self.los.0 > 0.0 || (self.coarse + 1).is_multiple_of(REANCHOR_STEPS) {
                *o = self.next_coarse();
                continue;
            }
            let (mut acc_re, mut acc_im) = (_mm256_setzero_ps(), _mm256_setzero_ps());
            for c in 0..chunks {
                let at = 8 * c;
                // SAFETY: every array holds `8·chunks` elements (padded at construction).
                unsafe {
                    let sr = _mm256_loadu_ps(self.s_re.as_ptr().add(at));
                    let si = _mm256_loadu_ps(self.s_im.as_ptr().add(at));
                    let wr = _mm256_loadu_ps(self.w_re.as_ptr().add(at));
                    let wi = _mm256_loadu_ps(self.w_im.as_ptr().add(at));
                    acc_re = _mm256_add_ps(acc_re, _mm256_mul_ps(wr, sr));
                    acc_im = _mm256_add_ps(acc_im, _mm256_mul_ps(wi, sr));
                    let rr = _mm256_loadu_ps(self.r_re.as_ptr().add(at));
                    let ri = _mm256_loadu_ps(self.r_im.as_ptr().add(at));
                    let nr = _mm256_sub_ps(_mm256_mul_ps(sr, rr), _mm256_mul_ps(si, ri));
                    let ni = _mm256_add_ps(_mm256_mul_ps(sr, ri), _mm256_mul_ps(si, rr));
                    _mm256_storeu_ps(self.s_re.as_mut_ptr().add(at), nr);
                    _mm256_storeu_ps(self.s_im.as_mut_ptr().add(at), ni);
                }
            }
            *o = Complex::new(f64::from(tree(acc_re)), f64::from(tree(acc_im)));
            self.coarse += 1;
        }
    }

    /// The gain at the current coarse point, then advance one step (D samples).
    #[inline(always)]
    pub fn next_coarse(&mut self) -> Complex<f64> {
        // Eight partial sums (a fixed order, so the result is reproducible) let the sum
        // vectorise; a single running sum would be one long dependency chain. The arrays are
        // padded to a multiple of 8 with zero weights.
        let (mut acc_re, mut acc_im) = ([0.0f32; 8], [0.0f32; 8]);
        let lanes = self
            .s_re
            .chunks_exact(8)
            .zip(self.w_re.chunks_exact(8))
            .zip(self.w_im.chunks_exact(8));
        for ((s, wr), wi) in lanes {
            for k in 0..8 {
                acc_re[k] += wr[k] * s[k];
                acc_im[k] += wi[k] * s[k];
            }
        }
        // A fixed pairwise tree (three dependent additions, not eight).
        let tree = |a: [f32; 8]| ((a[0] + a[4]) + (a[2] + a[6])) + ((a[1] + a[5]) + (a[3] + a[7]));
        let (h_re, h_im) = (tree(acc_re), tree(acc_im));
        let mut h = Complex::new(f64::from(h_re), f64::from(h_im));
        let (a, w, p) = self.los;
        if a > 0.0 {
            h += Complex::from_polar(a, w * (self.coarse * self.step as u64) as f64 + p);
        }
        self.coarse += 1;
        if self.coarse.is_multiple_of(REANCHOR_STEPS) {
            self.reanchor();
        } else {
            let states = self
                .s_re
                .chunks_exact_mut(8)
                .zip(self.s_im.chunks_exact_mut(8));
            let rots = self.r_re.chunks_exact(8).zip(self.r_im.chunks_exact(8));
            for ((sr, si), (rr, ri)) in states.zip(rots) {
                for k in 0..8 {
                    let (a, b) = (sr[k], si[k]);
                    sr[k] = a * rr[k] - b * ri[k];
                    si[k] = a * ri[k] + b * rr[k];
                }
            }
        }
        h
    }

    /// Recomputes the oscillators exactly (f64) at the current coarse point.
    fn reanchor(&mut self) {
        let t = (self.coarse * self.step as u64) as f64;
        let states = self.s_re.iter_mut().zip(self.s_im.iter_mut());
        for ((sr, si), (w, p)) in states.zip(self.omega.iter().zip(&self.phi)) {
            let ph = w * t + p;
            *sr = ph.cos() as f32;
            *si = ph.sin() as f32;
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::rng::stream_rng;

    #[test]
    fn coarse_points_equal_direct_evaluation() {
        // The oscillator recursion (with re-anchoring) against direct cos evaluation.
        let p = FadingParams {
            doppler_hz: 100.0,
            sample_rate_hz: 250e3,
            sinusoids: 16,
            rician_k: 2.0,
            los_angle_rad: 0.7,
            step: 8,
        };
        let mut g = SosFading::new(&p, &mut stream_rng(3, 0));
        let r = g.clone();
        // f32 oscillators: error at the level of f32 rounding accumulated over ≤ 256 steps.
        for k in 0..2000u64 {
            let h = g.next_coarse();
            let e = r.gain_exact(k * 8);
            assert!((h - e).norm() < 2e-5, "k={k}: {h} vs {e}");
        }
    }

    #[test]
    fn step_rule_keeps_its_margin() {
        // The rules' own guarantee, recomputed from their definitions for a grid of cases;
        // the largest step is chosen (the next one up would break the margin).
        for &n in &[64usize, 256, 1024] {
            for &fdt in &[0.001, 0.01, 0.05, 0.1, 0.2, 0.5] {
                let fd_norm = fdt / n as f64;
                let allowed = (2.0 * PI * fdt).powi(2) / 24.0 * 10f64.powf(-3.5);
                type Rule = (fn(f64, usize) -> usize, fn(f64, usize) -> f64);
                let rules: [Rule; 2] = [
                    (step_for, jakes_interpolation_mse),
                    (step_for_any_spectrum, interpolation_mse_bound),
                ];
                for (rule, mse) in rules {
                    let d = rule(fd_norm, n);
                    assert!((1..=MAX_STEP).contains(&d));
                    assert!(
                        d == 1 || mse(fd_norm, d) <= allowed,
                        "n={n} fdT={fdt} D={d}"
                    );
                    assert!(
                        d == MAX_STEP || mse(fd_norm, d + 1) > allowed,
                        "n={n} fdT={fdt} D={d} not largest"
                    );
                }
            }
        }
    }
}
