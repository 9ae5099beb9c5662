//! The integer Doppler estimator ([`flatbin::doppler_q15`]) against the f32 estimator
//! ([`flatbin::doppler`], itself checked against the J0 correlation of the Jakes channel,
//! REFERENCES item 3, and the simulator's true Doppler in `tests/doppler.rs`) on identical
//! inputs, and against the simulator's true Doppler on its own.
//!
//! The frames are those of `tests/doppler.rs` (same seeds, same draws, same channel and trial
//! design: default numerology N = 64, CP 8, 15 unboosted pilots; QPSK; Es/N0 = 15 dB per data
//! subcarrier; frames of 100 symbols with 2-symbol gaps; observations of whole Doppler
//! periods). Each received symbol is scaled so that the signal sits at −12 dBFS (DESIGN.md
//! dBFS; the long-run level: constructive fades and OFDM peaks clip, and both estimators see
//! the same clipped samples) and rounded to Q15 (`samples_to_q15`). The integer estimator
//! reads the Q15 FFT output with its block exponent (`Q15Fft::forward` on the samples after
//! the CP: what `ReceiverQ15::bins_with_exponent` returns at unity gain, checked bit for bit
//! below); the f32 estimator reads the f32 FFT of the same Q15 samples read back as fractions
//! (as `tests/receiver_q15.rs` and `tests/delay_spread_q15.rs` compare the receivers). A
//! third estimator, f32 on the unrounded samples exactly as in `tests/doppler.rs`, is printed
//! beside them.
//!
//! ## Agreement tolerance (derived)
//!
//! Both estimators see the same samples, so the fading and noise statistics are shared and
//! they differ only by arithmetic:
//!
//! * **Q15 FFT rounding.** Measured per trial as `q`, the power of the difference between the
//!   Q15 pilot bins (`bins·2^e·R`) and the f32 ones over the f32 pilot power (measured
//!   73 dB below the pilots at −12 dBFS). Taken as independent noise of relative power `q` on every pilot (rounding of
//!   many products; common practice), it perturbs the pair ratio `r = Re[c(2τ)c*(τ)²]/|c(τ)|³`
//!   with the linearised variance the f32 module derives for noise,
//!   `q·(1/w_{2τ} + r²/w_τ)/|c(τ)|²` (`w` the pilot-product counts of the lags, from the frame
//!   structure).
//! * **f32 summation.** Each f32 running sum adds one value per symbol: relative error of
//!   standard deviation `sqrt(n)·2⁻²⁴` after `n` additions (the probabilistic rounding model;
//!   Higham, *Accuracy and Stability of Numerical Algorithms*, ch. 2, from memory); a
//!   coefficient combines three sums and the ratio three coefficients: at most
//!   `5·sqrt(n)·2⁻²⁴/|c(τ)|` on `r`. The integer sums round at 2⁻⁶⁰ (negligible).
//! * **Inversion.** `δy = δr/|g'(y)|`, `g(y) = J0(2y)/J0(y)` and its derivative from the
//!   J0 and J1 power series (A&S 9.1.10, from memory) at the f32 estimate; `|c(τ)|` taken as
//!   half its model value `κ·J0(y)`, `κ = SNR/(1 + SNR)` (a factor 2 for the scatter of the
//!   sample coefficient over ten Doppler periods). Plus the integer inversion's own error
//!   (3e-8 rad + 2e-7 relative, unit tests of `doppler_q15`) and the Q31 output step.
//!
//! Tolerance: 5 standard deviations of the first two, plus the last. The status and the lag
//! must be the same.
//!
//! **Percentile statistics** as in `tests/doppler.rs`: the 97.5 % one-sided upper confidence
//! bound `X_(k)` on the true 90th percentile (distribution-free order statistic; common
//! practice) must be ≤ 15 %.

use flatbin::doppler::{DopplerConfig, DopplerEstimate, DopplerEstimator, DopplerStatus};
use flatbin::doppler_q15::{
    DopplerConfigQ15, DopplerEstimateQ15, DopplerEstimatorQ15, MAX_BLOCK_EXPONENT,
};
use flatbin::fft::{MicroFft, OfdmFft};
use flatbin::fft_q15::Q15Fft;
use flatbin::fixed::Cq15;
use flatbin::fixed_math::Scaled;
use flatbin::front::Front;
use flatbin::numerology::NumerologyParams;
use flatbin::receiver_q15::{samples_to_q15, DesignQ15, ReceiverQ15, ReceiverQ15Config};
use flatbin::transmit::Transmitter;
use flatbin::{Cf32, Modulation, Numerology, ProcessError};
use flatbin_harness::channel::profile::{DelayProfile, Quantisation};
use flatbin_harness::channel::sos::FadingParams;
use flatbin_harness::channel::tdl::{Tdl, Variation};
use flatbin_harness::impair::frequency_offset;
use flatbin_harness::noise::add_awgn;
use flatbin_harness::rng::stream_rng;
use rand::RngExt;

const N: usize = 64;
const ES_N0_DB: f64 = 15.0;
const FRAME_SYMBOLS: usize = 100;
const GAP_SYMBOLS: usize = 2;
/// FFT input level of the signal, dBFS.
const LEVEL_DBFS: f64 = -12.0;
/// Pilots per symbol of the default numerology.
const PILOTS: f64 = 15.0;

fn numerology() -> Numerology {
    Numerology::new(NumerologyParams::default()).unwrap()
}

/// Exponential power delay profile of RMS spread `rms` samples (as `tests/doppler.rs`).
fn exp_taps(rms: f64, fs: f64) -> Vec<(usize, f64)> {
    DelayProfile::exponential(rms / fs, fs)
        .unwrap()
        .to_sample_taps(fs, Quantisation::Nearest)
}

/// The Q15 receiver, used for its FFT output with the block exponent.
fn q15_receiver(nu: &Numerology) -> Box<ReceiverQ15<Q15Fft<N>, N, 4, 4>> {
    let cfg = ReceiverQ15Config {
        signal_dbfs: LEVEL_DBFS as f32,
        ..ReceiverQ15Config::default()
    };
    let design =
        DesignQ15::<N, 4, 4>::new(nu, &cfg, <Q15Fft<N> as OfdmFft<N>>::RESIDUAL_SCALE).unwrap();
    Box::new(ReceiverQ15::new(nu, Q15Fft::new(), design).unwrap())
}

/// Amplitude that puts unit-energy symbols through a unit-power channel at `LEVEL_DBFS`.
fn level_scale(nu: &Numerology) -> f64 {
    let a2 = f64::from(nu.pilot_amplitude()).powi(2);
    let unit_power = (nu.data_len(0) as f64 + a2 * nu.pilot_len(0) as f64) / N as f64;
    (10f64.powf(LEVEL_DBFS / 10.0) / unit_power).sqrt()
}

/// Forgetting of both estimators: `λ = 1 − 2^−k`, or none.
#[derive(Clone, Copy)]
enum Memory {
    Plain,
    Shift(u8),
}

/// One observation through all three estimators.
struct Observation {
    /// f32 estimator on the f32 FFT of the Q15 samples.
    f32_est: DopplerEstimate,
    /// Integer estimator on the Q15 receiver's FFT output.
    q15: DopplerEstimateQ15,
    /// f32 estimator on the unrounded samples (`tests/doppler.rs`).
    unrounded: DopplerEstimate,
    /// Q15 FFT rounding power over the pilot power.
    q: f64,
    /// Clipped I/Q components over all components.
    clip_fraction: f64,
    /// Forgetting used.
    memory: Memory,
    /// Symbols per frame.
    frame_lengths: Vec<usize>,
}

impl Observation {
    /// Pilot products at lag `tau` as the estimators count them (forgotten as the sums are).
    fn weight(&self, tau: usize) -> f64 {
        let lambda = match self.memory {
            Memory::Plain => 1.0,
            Memory::Shift(k) => 1.0 - 2f64.powi(-i32::from(k)),
        };
        // Symbols are processed in order; a symbol m ≥ τ of a frame adds PILOTS products,
        // and every later symbol multiplies the sums by λ.
        let total: usize = self.frame_lengths.iter().sum();
        let mut w = 0.0;
        let mut index = 0usize;
        for &len in &self.frame_lengths {
            for m in 0..len {
                if m >= tau {
                    w += PILOTS * lambda.powi((total - 1 - index) as i32);
                }
                index += 1;
            }
        }
        w
    }

    /// Symbols in the sums (for the f32 rounding term).
    fn symbols(&self) -> f64 {
        self.frame_lengths.iter().sum::<usize>() as f64
    }
}

/// One observation of `periods` Doppler periods at `fd_t` (the draws of `tests/doppler.rs`).
fn observe(
    fd_t: f64,
    taps: &[(usize, f64)],
    periods: f64,
    eps: f64,
    memory: Memory,
    seed: u64,
    trial: u64,
) -> Observation {
    let nu = numerology();
    let fs = f64::from(nu.sample_rate_hz());
    let ns = nu.symbol_len();
    let fd_hz = fd_t * fs / N as f64;
    let symbols = if fd_hz > 0.0 {
        (periods / (fd_hz * ns as f64 / fs)).ceil() as usize
    } else {
        periods as usize
    };
    let n0 = 10f64.powf(-ES_N0_DB / 10.0);
    let mut rng = stream_rng(seed, trial);
    let mut tx = Transmitter::new(nu, MicroFft::<N>::new()).unwrap();
    let mut front = Front::new(&nu, MicroFft::<N>::new()).unwrap();
    let params = FadingParams::rayleigh(fd_hz, fs, N);
    let mut line = Tdl::new(taps, &params, Variation::Continuous, &mut rng);
    let (cfg_f, cfg_q) = match memory {
        Memory::Plain => (
            DopplerConfig { forgetting: None },
            DopplerConfigQ15 {
                forgetting_shift: None,
            },
        ),
        Memory::Shift(k) => (
            DopplerConfig {
                forgetting: Some(1.0 - 2f32.powi(-i32::from(k))),
            },
            DopplerConfigQ15 {
                forgetting_shift: Some(k),
            },
        ),
    };
    let mut est_f = DopplerEstimator::<N, 16, 32>::new(&nu, cfg_f).unwrap();
    let mut est_u = DopplerEstimator::<N, 16, 32>::new(&nu, cfg_f).unwrap();
    let mut est_q = DopplerEstimatorQ15::<N, 16, 32>::new(&nu, cfg_q).unwrap();
    let mut fft_q = Q15Fft::<N>::new();
    let mut bq = [Cq15::ZERO; N];
    let scale = level_scale(&nu) as f32;
    let residual = <Q15Fft<N> as OfdmFft<N>>::RESIDUAL_SCALE as f64;
    let mut s = vec![Cf32::default(); ns];
    let mut y = vec![Cf32::default(); ns];
    let mut ys = vec![Cf32::default(); ns];
    let mut q = vec![Cq15::ZERO; ns];
    let mut back = vec![Cf32::default(); ns];
    let mut bins_u = [Cf32::default(); N];
    let mut bins_f = [Cf32::default(); N];
    let gap_in = vec![Cf32::default(); GAP_SYMBOLS * ns];
    let mut gap_out = gap_in.clone();
    let cycles_per_sample = eps / N as f64;
    let mut time = 0u64;
    let mut done = 0;
    let (mut err, mut pow, mut clipped) = (0.0f64, 0.0f64, 0usize);
    let mut frame_lengths = Vec::new();
    while done < symbols {
        let len = FRAME_SYMBOLS.min(symbols - done);
        for m in 0..len as u32 {
            let bits: Vec<u8> = (0..tx.bits_per_ofdm_symbol(Modulation::Qpsk, m))
                .map(|_| rng.random::<u8>() & 1)
                .collect();
            tx.modulate(Modulation::Qpsk, &bits, m, &mut s).unwrap();
            line.process(&s, &mut y);
            let phase = 2.0 * std::f64::consts::PI * cycles_per_sample * time as f64;
            frequency_offset(&mut y, cycles_per_sample, phase);
            time += ns as u64;
            add_awgn(&mut rng, &mut y, n0);
            // As tests/doppler.rs.
            front.demodulate(&y, &mut bins_u).unwrap();
            est_u.update(&bins_u, m).unwrap();
            // The same samples at −12 dBFS in Q15; f32 reads them back.
            for (o, v) in ys.iter_mut().zip(&y) {
                *o = *v * scale;
            }
            clipped += samples_to_q15(&ys, &mut q).unwrap();
            for (b, v) in back.iter_mut().zip(&q) {
                *b = v.to_cf32() / scale;
            }
            front.demodulate(&back, &mut bins_f).unwrap();
            est_f.update(&bins_f, m).unwrap();
            for (b, v) in bq.iter_mut().zip(&q[ns - N..]) {
                *b = *v;
            }
            let e = fft_q.forward(&mut bq);
            est_q.update(&bq, e, m).unwrap();
            let gain = 2f64.powi(e) * residual / 32768.0 / f64::from(scale);
            for k in nu.pilot_bins(m) {
                let (a, b) = (bq[k], bins_f[k]);
                let dr = f64::from(a.re) * gain - f64::from(b.re);
                let di = f64::from(a.im) * gain - f64::from(b.im);
                err += dr * dr + di * di;
                pow += f64::from(b.norm_sqr());
            }
        }
        done += len;
        frame_lengths.push(len);
        est_f.end_frame();
        est_u.end_frame();
        est_q.end_frame();
        line.process(&gap_in, &mut gap_out);
        time += gap_in.len() as u64;
    }
    Observation {
        f32_est: est_f.estimate().unwrap(),
        q15: est_q.estimate().unwrap(),
        unrounded: est_u.estimate().unwrap(),
        q: err / pow,
        clip_fraction: clipped as f64 / (2 * symbols * ns) as f64,
        memory,
        frame_lengths,
    }
}

/// `J0(x)` and `J1(x)` by their power series (A&S 9.1.10, from memory), f64, `|x| ≤ 4`.
fn j0_j1(x: f64) -> (f64, f64) {
    let u = x * x / 4.0;
    let (mut t0, mut t1) = (1.0, x / 2.0);
    let (mut s0, mut s1) = (t0, t1);
    for k in 1..30 {
        let k = k as f64;
        t0 *= -u / (k * k);
        t1 *= -u / (k * (k + 1.0));
        s0 += t0;
        s1 += t1;
    }
    (s0, s1)
}

/// The derived agreement tolerance on `|f̂d_q15/f̂d_f32 − 1|` (module docs).
fn agreement_tol(o: &Observation) -> f64 {
    let e = o.f32_est;
    let tau = e.lag_symbols as usize;
    let y = 2.0 * std::f64::consts::PI * f64::from(e.fd_tsym) * tau as f64;
    let (j0, j1) = j0_j1(y);
    let (j0_2, j1_2) = j0_j1(2.0 * y);
    let r = j0_2 / j0;
    let slope = (-2.0 * j1_2 * j0 + j0_2 * j1) / (j0 * j0);
    let snr = 10f64.powf(ES_N0_DB / 10.0);
    let c = 0.5 * snr / (1.0 + snr) * j0;
    let (w_a, w_b) = (o.weight(tau), o.weight(2 * tau));
    let var_q = o.q * (1.0 / w_b + r * r / w_a) / (c * c);
    let sd_f32 = 5.0 * o.symbols().sqrt() * 2f64.powi(-24) / c;
    let sd = (var_q + sd_f32 * sd_f32).sqrt();
    let q31_step = 2f64.powi(-31) / f64::from(e.fd_tsym);
    5.0 * sd / (y * slope.abs()) + 2e-7 + 3e-8 / y + q31_step
}

/// The derived agreement tolerance on the static channel's BelowRange bound: the bound is the
/// `y` at which the decorrelation equals `4·sqrt(var r)`, `var r ∝ (1 − κ²)(1/w_b + r²/w_a)/
/// |c(τ)|²` with `κ = |c(u)|`. The perturbation of each coefficient part (as in
/// [`agreement_tol`]: FFT rounding `sqrt(q/w)`, f32 sums `5·sqrt(n)·2⁻²⁴`; 5 standard
/// deviations) moves `κ²` by up to twice that, i.e. `1 − κ²` (0.06 at 15 dB) relatively by that
/// over `1 − κ²`, and `|c(τ)|²`, `r²` by up to 4 times it; the floor is a square root (½)
/// and, with `1 − g ≈ 3y²/4` at small `y`, the bound another (½).
fn static_tol(o: &Observation) -> f64 {
    let snr = 10f64.powf(ES_N0_DB / 10.0);
    let kappa = snr / (1.0 + snr);
    let tau = o.f32_est.lag_symbols as usize;
    let w = o.weight(1).min(o.weight(tau)).min(o.weight(2 * tau));
    let sd = 5.0 * ((o.q / w).sqrt() + 5.0 * o.symbols().sqrt() * 2f64.powi(-24));
    let q31_step = 2f64.powi(-31) / f64::from(o.f32_est.fd_tsym);
    0.25 * (2.0 * sd / (1.0 - kappa * kappa) + 8.0 * sd) + 2e-7 + q31_step
}

/// ln P(Bin(n, q) ≤ k) summed from the log pmf (f64).
fn binomial_cdf(k: usize, n: usize, q: f64) -> f64 {
    let ln_choose = |j: usize| -> f64 {
        (1..=j)
            .map(|i| ((n - j + i) as f64).ln() - (i as f64).ln())
            .sum()
    };
    (0..=k)
        .map(|j| (ln_choose(j) + j as f64 * q.ln() + (n - j) as f64 * (1.0 - q).ln()).exp())
        .sum()
}

/// The sample's 90 % point and the one-sided 97.5 % upper confidence bound on the true 90th
/// percentile (module docs).
fn p90_with_upper_bound(values: &[f64]) -> (f64, f64, usize) {
    let mut v = values.to_vec();
    v.sort_by(|a, b| a.partial_cmp(b).unwrap());
    let n = v.len();
    let point = v[(0.9 * n as f64).ceil() as usize - 1];
    let k = (1..=n)
        .find(|&k| binomial_cdf(k - 1, n, 0.9) >= 0.975)
        .unwrap_or(n);
    (point, v[k - 1], k)
}

/// `trials` observations at each of `points` (one thread per point).
fn observations(
    points: &[f64],
    taps: &[(usize, f64)],
    periods: f64,
    eps: f64,
    memory: Memory,
    seed: u64,
    trials: u64,
) -> Vec<(f64, Vec<Observation>)> {
    std::thread::scope(|scope| {
        let handles: Vec<_> = points
            .iter()
            .map(|&fd_t| {
                scope.spawn(move || {
                    let obs = (0..trials)
                        .map(|t| observe(fd_t, taps, periods, eps, memory, seed, t))
                        .collect();
                    (fd_t, obs)
                })
            })
            .collect();
        handles.into_iter().map(|h| h.join().unwrap()).collect()
    })
}

/// Per trial: same status and lag, values within the derived tolerance.
fn check_agreement(label: &str, fd_t: f64, obs: &[Observation]) {
    let (mut worst_ratio, mut worst_diff, mut worst_q, mut clip) = (0.0f64, 0.0f64, 0.0f64, 0.0);
    for (t, o) in obs.iter().enumerate() {
        let (a, b) = (o.q15.to_f32(), o.f32_est);
        assert_eq!(
            (a.status, a.lag_symbols),
            (b.status, b.lag_symbols),
            "{label} fd·T={fd_t} trial {t}: {a:?} vs {b:?}"
        );
        let diff = (f64::from(a.fd_tsym) / f64::from(b.fd_tsym) - 1.0).abs();
        let tol = agreement_tol(o);
        assert!(
            diff <= tol,
            "{label} fd·T={fd_t} trial {t}: Q15 {a:?} vs f32 {b:?}: {diff:.3e} > {tol:.3e}"
        );
        // fd·T is fd·Tsym·N/(N + L) in both.
        let diff_t = (f64::from(a.fd_t) / f64::from(b.fd_t) - 1.0).abs();
        assert!(diff_t <= tol + 2f64.powi(-31) / f64::from(b.fd_t) + 1e-6);
        worst_ratio = worst_ratio.max(diff / tol);
        worst_diff = worst_diff.max(diff);
        worst_q = worst_q.max(o.q);
        clip += o.clip_fraction / obs.len() as f64;
    }
    println!(
        "{label} fd·T={fd_t:5}: Q15 vs f32 largest relative difference {worst_diff:.2e} \
         ({:.2} of its tolerance); Q15 FFT rounding up to {:.1} dB below the pilots; \
         {:.1e} of the components clipped",
        worst_ratio,
        -10.0 * worst_q.log10(),
        clip
    );
}

/// The integer estimates meet the requirement on their own: no flag, 97.5 % upper bound of
/// the 90th percentile of the relative error ≤ 15 %.
fn check_p90(label: &str, fd_t: f64, obs: &[Observation]) {
    let rel = |e: f32| f64::from(e) / fd_t - 1.0;
    let errors: Vec<f64> = obs.iter().map(|o| rel(o.q15.to_f32().fd_t)).collect();
    let flagged = obs
        .iter()
        .filter(|o| o.q15.status != DopplerStatus::Valid)
        .count();
    let abs: Vec<f64> = errors.iter().map(|e| e.abs()).collect();
    let (p90, upper, k) = p90_with_upper_bound(&abs);
    let bias = errors.iter().sum::<f64>() / errors.len() as f64;
    let f32_abs: Vec<f64> = obs.iter().map(|o| rel(o.f32_est.fd_t).abs()).collect();
    let unrounded: Vec<f64> = obs.iter().map(|o| rel(o.unrounded.fd_t).abs()).collect();
    println!(
        "{label} fd·T={fd_t:5}: Q15 relative error p90 {p90:.3} (97.5 % upper bound X_({k}) = \
         {upper:.3}), mean signed {bias:+.3}, flagged {flagged}/{}; f32 on the same samples \
         p90 {:.3}, f32 unrounded p90 {:.3}",
        errors.len(),
        p90_with_upper_bound(&f32_abs).0,
        p90_with_upper_bound(&unrounded).0,
    );
    assert_eq!(
        flagged, 0,
        "{label} fd·T={fd_t}: estimates flagged out of range"
    );
    assert!(
        upper <= 0.15,
        "{label} fd·T={fd_t}: the 90th percentile is not shown ≤ 15 % (bound {upper:.3})"
    );
}

#[test]
fn q15_meets_15_percent_over_10_periods_and_agrees_with_f32() {
    // The requirement on the f32 test's multipath channel: exponential profile, RMS
    // 1 sample, each tap Jakes; 10 Doppler periods; fd·T over [0.01, 0.1].
    let fs = f64::from(numerology().sample_rate_hz());
    let taps = exp_taps(1.0, fs);
    let results = observations(
        &[0.01, 0.02, 0.05, 0.1],
        &taps,
        10.0,
        0.0,
        Memory::Plain,
        21,
        300,
    );
    for (fd_t, obs) in &results {
        check_agreement("exp 1 sample, 10 periods", *fd_t, obs);
        check_p90("exp 1 sample, 10 periods", *fd_t, obs);
    }
}

#[test]
fn single_rayleigh_tap_meets_15_percent_with_15_periods() {
    // As tests/doppler.rs: one Rayleigh tap has no frequency diversity across the pilots and
    // needs 15 periods for the 15 % point.
    let results = observations(&[0.01, 0.1], &[(0, 1.0)], 15.0, 0.0, Memory::Plain, 22, 300);
    for (fd_t, obs) in &results {
        check_agreement("flat, 15 periods", *fd_t, obs);
        check_p90("flat, 15 periods", *fd_t, obs);
    }
}

#[test]
fn residual_cfo_and_forgetting_agree_with_f32() {
    // A residual CFO of 0.1 subcarrier (the pair statistic cancels its rotation; its ICI is
    // noise-like), as tests/doppler.rs; and forgetting λ = 1 − 2⁻⁶ (memory 64 symbols) over
    // 40 periods at fd·T = 0.1 (356 symbols), where the old symbols weigh e⁻⁵: the integer
    // `s − (s >> 6)` against the f32 multiply. Agreement per trial; the CFO case also meets
    // the 15 % requirement.
    let fs = f64::from(numerology().sample_rate_hz());
    let taps = exp_taps(1.0, fs);
    let cfo = observations(&[0.05], &taps, 10.0, 0.1, Memory::Plain, 23, 300);
    for (fd_t, obs) in &cfo {
        check_agreement("exp 1 sample, ε = 0.1", *fd_t, obs);
        check_p90("exp 1 sample, ε = 0.1", *fd_t, obs);
    }
    let forget = observations(&[0.1], &taps, 40.0, 0.0, Memory::Shift(6), 26, 100);
    for (fd_t, obs) in &forget {
        check_agreement("exp 1 sample, λ = 1 − 2⁻⁶", *fd_t, obs);
    }
}

#[test]
fn static_channel_is_flagged_below_range_as_in_f32() {
    // fd = 0 over 900 symbols (tests/doppler.rs): both estimators flag BelowRange on every
    // trial and report an upper bound below fd·T = 0.01, the same within `static_tol`.
    let fs = f64::from(numerology().sample_rate_hz());
    let taps = exp_taps(1.0, fs);
    let mut worst = (0.0f32, 0.0f64, 0.0f64);
    for t in 0..50 {
        let o = observe(0.0, &taps, 900.0, 0.0, Memory::Plain, 24, t);
        let (a, b) = (o.q15.to_f32(), o.f32_est);
        assert_eq!(a.status, DopplerStatus::BelowRange, "trial {t}: {a:?}");
        assert_eq!(b.status, DopplerStatus::BelowRange, "trial {t}: {b:?}");
        assert_eq!(a.lag_symbols, b.lag_symbols, "trial {t}");
        let diff = (f64::from(a.fd_tsym) / f64::from(b.fd_tsym) - 1.0).abs();
        let tol = static_tol(&o);
        assert!(
            diff <= tol,
            "trial {t}: {a:?} vs {b:?}: {diff:.2e} > {tol:.2e}"
        );
        worst = (
            worst.0.max(a.fd_t),
            worst.1.max(diff),
            worst.2.max(diff / tol),
        );
    }
    println!(
        "static channel: 50/50 BelowRange in both, largest Q15 bound fd·T = {:.4}, largest \
         relative difference to f32 {:.1e} ({:.2} of its tolerance)",
        worst.0, worst.1, worst.2
    );
    assert!(worst.0 < 0.01);
}

#[test]
fn doppler_beyond_the_main_lobe_is_flagged_above_range_as_in_f32() {
    // fd·T = 0.3 and 0.5 (tests/doppler.rs): J0 at lag 1 below the 0.45 threshold. Both
    // flag AboveRange with the range limit, fd·Tsym = 1.6095/(2π) (J0(1.6095) = 0.45 from
    // the A&S 9.1.10 series here), a lower bound of the truth.
    let (j0, _) = j0_j1(1.6095);
    assert!((j0 - 0.45).abs() < 1e-4, "{j0}");
    let limit = 1.6095 / (2.0 * std::f64::consts::PI);
    let fs = f64::from(numerology().sample_rate_hz());
    let taps = exp_taps(1.0, fs);
    for fd_t in [0.3, 0.5] {
        for t in 0..50 {
            let o = observe(fd_t, &taps, 10.0, 0.0, Memory::Plain, 25, t);
            let (a, b) = (o.q15.to_f32(), o.f32_est);
            assert_eq!(a.status, DopplerStatus::AboveRange, "fd·T={fd_t} trial {t}");
            assert_eq!(b.status, DopplerStatus::AboveRange, "fd·T={fd_t} trial {t}");
            // Q31 step and f32 rounding of the constant.
            assert!((f64::from(a.fd_tsym) - limit).abs() < 1e-7, "{a:?}");
            assert!(f64::from(a.fd_t) < fd_t);
        }
    }
}

#[test]
fn receiver_output_is_the_fft_used_here() {
    // ReceiverQ15::bins_with_exponent at unity gain equals Q15Fft::forward on the samples
    // after the CP, bins and exponent: the agreement checks above cover the receiver's output.
    let nu = numerology();
    let ns = nu.symbol_len();
    let mut rx_q = q15_receiver(&nu);
    let mut fft = Q15Fft::<N>::new();
    let d = nu.max_data_len();
    let (mut xq, mut sq, mut lq) = (
        vec![Cq15::ZERO; d],
        vec![Scaled::default(); d],
        vec![0i8; 2 * d],
    );
    let mut rng = stream_rng(28, 0);
    for m in 0..20u32 {
        // Levels from −40 to +6 dBFS (clipped), so the block exponent moves.
        let amp = 10f64.powf((-40.0 + 2.4 * f64::from(m)) / 20.0);
        let x: Vec<Cq15> = (0..ns)
            .map(|_| {
                let (a, b): (f64, f64) = (rng.random(), rng.random());
                Cq15::from_cf32(Cf32::new(
                    ((a - 0.5) * 2.0 * amp) as f32,
                    ((b - 0.5) * 2.0 * amp) as f32,
                ))
            })
            .collect();
        rx_q.receive(&x, m, Modulation::Qpsk, &mut xq, &mut sq, &mut lq)
            .unwrap();
        let mut b = [Cq15::ZERO; N];
        for (o, v) in b.iter_mut().zip(&x[ns - N..]) {
            *o = *v;
        }
        let e = fft.forward(&mut b);
        assert_eq!(rx_q.bins_with_exponent(), (&b, e), "symbol {m}");
    }
}

#[test]
fn silence_full_scale_and_extreme_exponents_give_none_or_a_flag() {
    // Through the Q15 receiver: all-zero samples (no pilot power: no estimate), then
    // full-scale random-sign samples (noise-like pilots, no correlation: above range or no
    // estimate, never a valid number). Then direct bins: full scale at the exponent limits,
    // and exponents beyond them (rejected, nothing changed).
    let nu = numerology();
    let ns = nu.symbol_len();
    let mut rx_q = q15_receiver(&nu);
    let mut est = DopplerEstimatorQ15::<N, 16, 32>::new(&nu, DopplerConfigQ15::default()).unwrap();
    let d = nu.max_data_len();
    let (mut xq, mut sq, mut lq) = (
        vec![Cq15::ZERO; d],
        vec![Scaled::default(); d],
        vec![0i8; 2 * d],
    );
    for m in 0..40u32 {
        rx_q.receive(
            &vec![Cq15::ZERO; ns],
            m,
            Modulation::Qpsk,
            &mut xq,
            &mut sq,
            &mut lq,
        )
        .unwrap();
        let (b, e) = rx_q.bins_with_exponent();
        est.update(b, e, m).unwrap();
    }
    assert_eq!(est.estimate(), None);
    let mut rng = stream_rng(27, 0);
    for m in 0..200u32 {
        let x: Vec<Cq15> = (0..ns)
            .map(|_| {
                let (a, b) = (rng.random::<bool>(), rng.random::<bool>());
                let v = |s: bool| if s { i16::MAX } else { i16::MIN };
                Cq15::new(v(a), v(b))
            })
            .collect();
        rx_q.receive(&x, m, Modulation::Qpsk, &mut xq, &mut sq, &mut lq)
            .unwrap();
        let (b, e) = rx_q.bins_with_exponent();
        est.update(b, e, m).unwrap();
    }
    let e = est.estimate();
    println!("full-scale random samples: {e:?}");
    assert!(e.is_none_or(|e| e.status != DopplerStatus::Valid), "{e:?}");

    let mut est = DopplerEstimatorQ15::<N, 16, 32>::new(&nu, DopplerConfigQ15::default()).unwrap();
    for m in 0..100u32 {
        let v = if m % 3 == 0 { i16::MIN } else { i16::MAX };
        let ex = if m % 2 == 0 {
            MAX_BLOCK_EXPONENT
        } else {
            -MAX_BLOCK_EXPONENT
        };
        est.update(&[Cq15::new(v, v); N], ex, m).unwrap();
    }
    let before = est.estimate();
    assert!(
        before.is_none_or(|e| e.status != DopplerStatus::Valid),
        "{before:?}"
    );
    for ex in [
        i32::MIN,
        -MAX_BLOCK_EXPONENT - 1,
        MAX_BLOCK_EXPONENT + 1,
        i32::MAX,
    ] {
        assert_eq!(
            est.update(&[Cq15::new(1, 1); N], ex, 100),
            Err(ProcessError::OutOfRange { index: 1 })
        );
    }
    assert_eq!(est.estimate(), before);
}
