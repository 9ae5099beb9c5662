//! Doppler estimation from the pilots' time correlation, end to end: the core's transmitter,
//! the harness's tapped delay line with per-sample Jakes fading (sum of sinusoids, 16 per
//! tap, independent phases: REFERENCES item 3b, Zheng & Xiao 2003), AWGN, the core's f32
//! front (CP removal, FFT) and [`flatbin::doppler::DopplerEstimator`].
//!
//! Setup shared by every check (invented test conditions, not a product configuration): the
//! default numerology (N = 64, CP 8, 250 kHz, 56 used bins, a pilot every 4th used bin plus
//! the last: 15 pilots, no pilot boost); QPSK data; **Es/N0 = 15 dB per data subcarrier**
//! (DESIGN.md convention: noise variance per bin over the mean data-symbol energy; the pilots
//! are unboosted, so the pilot SNR is the same 15 dB); frames of 100 symbols separated by a
//! 2-symbol gap (a preamble's worth: the channel runs on, the estimator is told
//! `end_frame`), the sums carried across frames; the observation is ⌈10/(fd·Tsym)⌉ symbols,
//! i.e. exactly 10 Doppler periods, the least the requirement allows. Every trial draws a new
//! channel, data and noise from `stream_rng(seed, trial)`.
//!
//! The truth is the simulated maximum Doppler `fd` (the generator's second-order statistics
//! are the classical J0(2π fd τ) for any number of sinusoids, REFERENCES item 3b).
//!
//! **Percentile statistics.** The requirement is on the true 90th percentile `ξ` of the
//! relative error `|f̂d/fd − 1|`. From `n` independent trials the order statistic `X_(k)`
//! exceeds `ξ` with probability `P(Bin(n, 0.9) ≤ k − 1)` (distribution-free; common
//! practice), so `X_(k)` with the smallest `k` making that ≥ 0.975 is a one-sided 97.5 %
//! upper confidence bound on `ξ`. The tests assert that bound (n = 300: `X_(281)`, the
//! 93.7 % point of the sample), not only the sample's own 90 % point.

use flatbin::doppler::{DopplerConfig, DopplerEstimate, DopplerEstimator, DopplerStatus};
use flatbin::fft::MicroFft;
use flatbin::front::Front;
use flatbin::numerology::NumerologyParams;
use flatbin::transmit::Transmitter;
use flatbin::{Cf32, Modulation, Numerology};
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

fn numerology() -> Numerology {
    Numerology::new(NumerologyParams::default()).unwrap()
}

/// Exponential power delay profile of RMS spread `rms` samples on the sample grid (the
/// harness's `DelayProfile::exponential`, REFERENCES item 4), unit total power.
fn exp_taps(rms: f64, fs: f64) -> Vec<(usize, f64)> {
    DelayProfile::exponential(rms / fs, fs)
        .unwrap()
        .to_sample_taps(fs, Quantisation::Nearest)
}

/// One observation of `periods` Doppler periods at normalised Doppler `fd_t` through `taps`,
/// with a residual CFO of `eps` subcarrier spacings; the estimator's final estimate.
fn observe(
    fd_t: f64,
    taps: &[(usize, f64)],
    periods: f64,
    eps: f64,
    seed: u64,
    trial: u64,
) -> DopplerEstimate {
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
    let mut est =
        DopplerEstimator::<N, 16, 32>::new(&nu, DopplerConfig { forgetting: None }).unwrap();
    let mut s = vec![Cf32::default(); ns];
    let mut y = vec![Cf32::default(); ns];
    let mut bins = [Cf32::default(); N];
    let gap_in = vec![Cf32::default(); GAP_SYMBOLS * ns];
    let mut gap_out = gap_in.clone();
    let cycles_per_sample = eps / N as f64;
    let mut time = 0u64; // samples since the start, for a continuous CFO phase
    let mut done = 0;
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
            front.demodulate(&y, &mut bins).unwrap();
            est.update(&bins, m).unwrap();
        }
        done += len;
        est.end_frame();
        line.process(&gap_in, &mut gap_out);
        time += gap_in.len() as u64;
    }
    est.estimate().unwrap()
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

/// The sample's 90 % point `X_(⌈0.9n⌉)` and the one-sided 97.5 % upper confidence bound on
/// the true 90th percentile (module docs), from unsorted values.
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

/// Relative errors of `trials` observations at each `fd_t` (one thread per point).
fn relative_errors(
    points: &[f64],
    taps: &[(usize, f64)],
    periods: f64,
    eps: f64,
    seed: u64,
    trials: u64,
) -> Vec<(f64, Vec<f64>, usize)> {
    std::thread::scope(|scope| {
        let handles: Vec<_> = points
            .iter()
            .map(|&fd_t| {
                scope.spawn(move || {
                    let mut flagged = 0;
                    let errors = (0..trials)
                        .map(|t| {
                            let e = observe(fd_t, taps, periods, eps, seed, t);
                            flagged += usize::from(e.status != DopplerStatus::Valid);
                            f64::from(e.fd_t) / fd_t - 1.0
                        })
                        .collect();
                    (fd_t, errors, flagged)
                })
            })
            .collect();
        handles.into_iter().map(|h| h.join().unwrap()).collect()
    })
}

fn check_p90(label: &str, results: &[(f64, Vec<f64>, usize)]) {
    for (fd_t, errors, flagged) in results {
        let abs: Vec<f64> = errors.iter().map(|e| e.abs()).collect();
        let (p90, upper, k) = p90_with_upper_bound(&abs);
        let bias = errors.iter().sum::<f64>() / errors.len() as f64;
        println!(
            "{label} fd·T={fd_t:5}: relative error p90 {p90:.3} (97.5 % upper bound X_({k}) = \
             {upper:.3}), mean signed {bias:+.3}, flagged {flagged}/{}",
            errors.len()
        );
        assert_eq!(
            *flagged, 0,
            "{label} fd·T={fd_t}: estimates flagged out of range"
        );
        assert!(
            upper <= 0.15,
            "{label} fd·T={fd_t}: the 90th percentile is not shown ≤ 15 % (bound {upper:.3})"
        );
    }
}

#[test]
fn doppler_p90_relative_error_within_15_percent_over_10_periods() {
    // The requirement on a multipath channel: exponential profile, RMS 1 sample
    // (8 taps on the grid, the first 0.61 of the power; all within the CP), each tap Jakes.
    // Measured while designing (1000 trials, another seed): p90 0.089–0.099 here; a single
    // Rayleigh tap gives 0.144–0.156 at 10 periods (see the next test).
    let fs = f64::from(numerology().sample_rate_hz());
    let taps = exp_taps(1.0, fs);
    assert!(taps.iter().all(|t| t.0 <= 8));
    let results = relative_errors(&[0.01, 0.02, 0.05, 0.1], &taps, 10.0, 0.0, 21, 300);
    check_p90("exp 1 sample, 10 periods", &results);
}

#[test]
fn single_rayleigh_tap_meets_15_percent_with_15_periods() {
    // One Rayleigh tap has no frequency diversity across the pilots: ten Doppler periods hold
    // too few independent fades for the 15 % point (measured while designing, 1000 trials:
    // p90 0.156, 0.144, 0.145, 0.146 at fd·T 0.01, 0.02, 0.05, 0.1). With 15 periods it is met.
    let results = relative_errors(&[0.01, 0.1], &[(0, 1.0)], 15.0, 0.0, 22, 300);
    check_p90("flat, 15 periods", &results);
}

#[test]
fn residual_cfo_does_not_disturb_the_estimate() {
    // A residual CFO of 0.1 subcarrier turns the channel by 2π·0.1·72/64 rad per symbol; the
    // pair statistic R(2τ)·R*(τ)² cancels that rotation, and its ICI (3.2 %, REFERENCES
    // table 2) is noise-like. The requirement still holds at fd·T = 0.05.
    let fs = f64::from(numerology().sample_rate_hz());
    let taps = exp_taps(1.0, fs);
    let results = relative_errors(&[0.05], &taps, 10.0, 0.1, 23, 300);
    check_p90("exp 1 sample, ε = 0.1", &results);
}

#[test]
fn static_channel_is_flagged_below_range() {
    // fd = 0: no decorrelation beyond noise. Every estimate must be flagged BelowRange, its
    // value an upper bound below the range of the requirement (fd·T = 0.01).
    let fs = f64::from(numerology().sample_rate_hz());
    let taps = exp_taps(1.0, fs);
    let mut worst = 0.0f32;
    for t in 0..50 {
        let e = observe(0.0, &taps, 900.0, 0.0, 24, t);
        assert_eq!(e.status, DopplerStatus::BelowRange, "trial {t}: {e:?}");
        worst = worst.max(e.fd_t);
    }
    println!("static channel: 50/50 BelowRange, largest bound fd·T = {worst:.4}");
    assert!(worst < 0.01);
}

#[test]
fn doppler_beyond_the_main_lobe_is_flagged_above_range() {
    // fd·T = 0.3 and 0.5: 2π fd Tsym = 2.12 and 3.53 rad at lag 1, where J0 = 0.13 and −0.37
    // (A&S Table 9.1, from memory): below the 0.45 main-lobe threshold. Flagged AboveRange,
    // the value (the range limit, fd·T = 0.228) a lower bound — never a wrong number.
    let fs = f64::from(numerology().sample_rate_hz());
    let taps = exp_taps(1.0, fs);
    for fd_t in [0.3, 0.5] {
        for t in 0..50 {
            let e = observe(fd_t, &taps, 10.0, 0.0, 25, t);
            assert_eq!(e.status, DopplerStatus::AboveRange, "fd·T={fd_t} trial {t}");
            assert!(f64::from(e.fd_t) < fd_t);
        }
    }
}
