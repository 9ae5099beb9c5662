//! The core's delay-spread estimator (`flatbin::delay_spread`) against the moments of the
//! simulated power delay profile.
//!
//! Reference: the mean excess delay `τ_m = Σ p_l τ_l` and RMS delay spread
//! `τ_rms = sqrt(Σ p_l (τ_l − τ_m)²)` of the normalised tap powers (REFERENCES item 8, "Derived
//! statistics"; Rappaport, *Wireless Communications*, 2nd ed., small-scale fading chapter, from
//! memory), evaluated on the taps the tapped delay line actually runs: sample-spaced
//! exponential profiles (REFERENCES item 4's exponential PDP, discretised and truncated by
//! `DelayProfile::exponential`, whose discrete RMS equals the request; rounded to the sample
//! grid, which changes nothing for sample-spaced taps). The reference is computed here from the
//! tap list, not taken from the code under test.

use flatbin::delay_spread::{DelaySpreadConfig, DelaySpreadEstimator};
use flatbin::fft::MicroFft;
use flatbin::front::Front;
use flatbin::numerology::{NumerologyParams, PilotParams};
use flatbin::transmit::Transmitter;
use flatbin::{Cf32, Modulation, Numerology};
use flatbin_harness::channel::profile::{DelayProfile, Quantisation};
use flatbin_harness::channel::sos::FadingParams;
use flatbin_harness::channel::tdl::{Tdl, Variation};
use flatbin_harness::noise::{add_awgn, n0_for_es_n0_db};
use flatbin_harness::rng::{stream_rng, HarnessRng};
use rand::RngExt;

const N: usize = 256;
const FS: f64 = 1.0e6;

fn numerology() -> Numerology {
    Numerology::new(NumerologyParams {
        fft_len: N,
        cp_len: 32,
        sample_rate_hz: FS as f32,
        guard_low_bins: 12,
        guard_high_bins: 11,
        dc_null: true,
        pilots: PilotParams::default(),
    })
    .unwrap()
}

struct Run {
    frames: usize,
    symbols_per_frame: usize,
    es_n0_db: f64,
    doppler_norm: f64,
}

/// One estimate: `frames` fresh channel draws, each `symbols_per_frame` QPSK symbols.
fn one_estimate(
    nu: &Numerology,
    taps: &[(usize, f64)],
    cfg: DelaySpreadConfig,
    run: &Run,
    rng: &mut HarnessRng,
) -> (flatbin::delay_spread::DelaySpread, i32) {
    let mut tx = Transmitter::new(*nu, MicroFft::<N>::new()).unwrap();
    let mut front = Front::new(nu, MicroFft::<N>::new()).unwrap();
    let mut est = DelaySpreadEstimator::new(nu, cfg, MicroFft::<N>::new()).unwrap();
    let params = FadingParams::rayleigh(run.doppler_norm * FS / N as f64, FS, N);
    let n0 = n0_for_es_n0_db(run.es_n0_db);
    let sym_len = nu.symbol_len();
    let mut samples = vec![Cf32::new(0.0, 0.0); sym_len];
    let mut rx = vec![Cf32::new(0.0, 0.0); sym_len];
    let mut bins = [Cf32::new(0.0, 0.0); N];
    for _ in 0..run.frames {
        let mut line = Tdl::new(taps, &params, Variation::Continuous, rng);
        for s in 0..run.symbols_per_frame as u32 {
            let bits: Vec<u8> = (0..tx.bits_per_ofdm_symbol(Modulation::Qpsk, s))
                .map(|_| rng.random::<u8>() & 1)
                .collect();
            tx.modulate(Modulation::Qpsk, &bits, s, &mut samples)
                .unwrap();
            line.process(&samples, &mut rx);
            add_awgn(rng, &mut rx, n0);
            front.demodulate(&rx, &mut bins).unwrap();
            est.update(&bins, s).unwrap();
        }
    }
    (est.estimate().unwrap(), est.kernel_extent_samples())
}

/// Mean delay and RMS delay spread of `(delay, power)` taps (normalised powers), samples:
/// τ_m = Σ p τ / Σ p, τ_rms = sqrt(Σ p (τ − τ_m)² / Σ p) (REFERENCES item 8 definitions).
fn tap_moments(taps: &[(usize, f64)]) -> (f64, f64) {
    let p: f64 = taps.iter().map(|t| t.1).sum();
    let m = taps.iter().map(|t| t.0 as f64 * t.1).sum::<f64>() / p;
    let v = taps
        .iter()
        .map(|t| (t.0 as f64 - m).powi(2) * t.1)
        .sum::<f64>()
        / p;
    (m, v.sqrt())
}

/// Delay (samples) of the last tap within `db` of the strongest: the maximum excess delay
/// "X dB below the peak" (Rappaport, small-scale fading chapter, from memory).
fn max_excess_delay(taps: &[(usize, f64)], db: f64) -> usize {
    let peak = taps.iter().map(|t| t.1).fold(0.0, f64::max);
    taps.iter()
        .filter(|t| t.1 >= peak * 10f64.powf(-db / 10.0))
        .map(|t| t.0)
        .max()
        .unwrap()
}

fn mean_sd(x: &[f64]) -> (f64, f64) {
    let n = x.len() as f64;
    let m = x.iter().sum::<f64>() / n;
    (
        m,
        (x.iter().map(|v| (v - m).powi(2)).sum::<f64>() / (n - 1.0)).sqrt(),
    )
}

/// The target: RMS delay spread within ±20 % for spreads of 1–4 samples at
/// Es/N0 = 20 dB per data subcarrier, N = 256, exponential profile with Rayleigh taps.
///
/// What one estimate is: the PDP averaged over 50 frames, each a fresh Rayleigh draw of the
/// profile (independent channel realisations), of 8 symbols each (400 symbols), noise floor
/// measured blind from the delays beyond the CP. Over T = 64 such estimates (fixed seeds):
///
/// * every estimate lies within ±20 % (the empirical maximum: the 1 − 1/(T+1) ≈ 98.5 %
///   quantile), and so does the normal 99 % range `|ē| + 2.576 s` of the relative error,
///   with `ē` and `s` each pushed to their 4σ upper confidence limit (`ē ± 4s/√T`,
///   `s·(1 + 4/√(2(T−1)))`; REFERENCES "Tolerances: general rules");
/// * the mean of the estimates equals the taps' RMS within `4 s/√T` (no bias beyond the Monte
///   Carlo error), and the mean delay likewise (the FFT window starts at the first path, so
///   the mean delay is the profile's `τ_m`);
/// * the maximum significant delay (20 dB below the peak) is an upper value that includes the
///   aperture's smear `e` (`kernel_extent_samples`, 2 samples here): a single path reads
///   exactly `e` late, a smooth profile between 0 and `e` late. With ±1 sample for the grid of
///   both values, the mean error over the trials must lie in `[−1, e + 1]` (widened by
///   4 s/√T), and every estimate in that range widened by the fluctuation of the averaged PDP
///   at the threshold: from `F` independent draws its level has relative sd ≈ 1/√F, which
///   moves an exponential tail of decay `τ` by `τ/√F` samples; 4 of those.
fn rms_spread_within_20_percent(rms_samples: f64, seed: u64) {
    let nu = numerology();
    let taps = DelayProfile::exponential(rms_samples / FS, FS)
        .unwrap()
        .to_sample_taps(FS, Quantisation::Nearest);
    let (tau_m, tau_rms) = tap_moments(&taps);
    let max_true = max_excess_delay(&taps, 20.0) as i32;
    // The discrete profile is what the TDL simulates; its RMS equals the request.
    assert!((tau_rms / rms_samples - 1.0).abs() < 1e-6);
    // The channel fits the CP: no ISI, so the estimator sees only the profile and the noise.
    assert!(taps.iter().all(|t| t.0 < nu.cp_len()));
    let cfg = DelaySpreadConfig::measured(&nu).unwrap();
    let run = Run {
        frames: 50,
        symbols_per_frame: 16,
        es_n0_db: 20.0,
        doppler_norm: 0.005,
    };
    let trials = 64u64;
    let (mut rel, mut dm) = (Vec::new(), Vec::new());
    let (mut max_err, mut extent) = (Vec::new(), 0);
    for t in 0..trials {
        let (r, ext) = one_estimate(&nu, &taps, cfg, &run, &mut stream_rng(seed, t));
        extent = ext;
        max_err.push(f64::from(r.max_delay_samples - max_true));
        assert!(r.resolved);
        rel.push(f64::from(r.rms_delay_samples) / tau_rms - 1.0);
        dm.push(f64::from(r.mean_delay_samples) - tau_m);
    }
    let n = trials as f64;
    let (e, s) = mean_sd(&rel);
    let (m, sm) = mean_sd(&dm);
    let (me, _) = mean_sd(&max_err);
    let (lo, hi) = max_err
        .iter()
        .fold((f64::MAX, f64::MIN), |(a, b), &v| (a.min(v), b.max(v)));
    let worst = rel.iter().fold(0.0f64, |a, v| a.max(v.abs()));
    let e_hi = e.abs() + 4.0 * s / n.sqrt();
    let s_hi = s * (1.0 + 4.0 / (2.0 * (n - 1.0)).sqrt());
    let range99 = e_hi + 2.576 * s_hi;
    println!(
        "τ_rms {tau_rms:.4} (τ_m {tau_m:.4}, {} taps, max excess 20 dB {max_true}): relative \
         error mean {e:+.4}, sd {s:.4}, worst {worst:.3}, 99 % bound {range99:.3}; mean-delay \
         error {m:+.4} ± {:.4}; max delay − taps' {lo}..{hi}, mean {me:.2} (smear {extent})",
        taps.len(),
        4.0 * sm / n.sqrt()
    );
    assert!(worst <= 0.2, "an estimate is off by {worst}");
    assert!(range99 <= 0.2, "99 % range {range99}");
    assert!(e.abs() <= 4.0 * s / n.sqrt(), "bias {e} beyond 4s/√T");
    assert!(m.abs() <= 4.0 * sm / n.sqrt(), "mean delay bias {m}");
    let ext = f64::from(extent);
    let (_, sme) = mean_sd(&max_err);
    let mc = 4.0 * sme / n.sqrt();
    assert!(
        (-1.0 - mc..=ext + 1.0 + mc).contains(&me),
        "mean max delay error {me}"
    );
    // Decay constant of the profile from its first two taps, p_1/p_0 = e^{−1/τ}.
    let decay = 1.0 / (taps[0].1 / taps[1].1).ln();
    let spread = 4.0 * decay / (run.frames as f64).sqrt();
    assert!(
        lo >= -1.0 - spread && hi <= ext + 1.0 + spread,
        "max delay error {lo}..{hi} beyond ±{spread}"
    );
}

#[test]
fn rms_spread_1_sample() {
    rms_spread_within_20_percent(1.0, 11);
}

#[test]
fn rms_spread_2_samples() {
    rms_spread_within_20_percent(2.0, 12);
}

#[test]
fn rms_spread_3_samples() {
    rms_spread_within_20_percent(3.0, 13);
}

#[test]
fn rms_spread_4_samples() {
    rms_spread_within_20_percent(4.0, 14);
}

/// A published sparse profile with the noise floor given instead of measured: ITU Vehicular A
/// (ITU-R M.1225 Annex 2, taps as in REFERENCES item 8) at 7.68 MHz, delays rounded to the
/// sample grid (0, 2, 5, 8, 13, 19 samples; REFERENCES item 8 asks for the rounded-grid RMS
/// when the simulator rounds). Same statistic and tolerances as above: 99 % range within ±20 %,
/// no bias beyond 4 s/√T, mean delay likewise. One estimate here averages 100 draws of 8
/// symbols: a sparse profile's realisations vary more (two taps hold 87 % of the power), and
/// 50 draws gave a 99 % bound of 20.4 % (sd 4.7 %).
#[test]
fn vehicular_a_with_known_noise_floor() {
    let fs = 7.68e6;
    let nu = numerology();
    let profile = DelayProfile::itu_vehicular_a();
    let taps = profile.to_sample_taps(fs, Quantisation::Nearest);
    let (tau_m, tau_rms) = tap_moments(&taps);
    // Item 8 lists 370.39 ns ideal; on a 7.68 MHz grid the taps move by up to half a sample.
    println!(
        "Veh A at 7.68 MHz: ideal {:.4} samples, on the grid {tau_rms:.4}",
        profile.rms_delay_s() * fs
    );
    assert!((profile.rms_delay_s() * 1e9 - 370.39).abs() < 0.01);
    let es_n0_db = 20.0;
    let cfg = DelaySpreadConfig::known(&nu, n0_for_es_n0_db(es_n0_db) as f32);
    let run = Run {
        frames: 100,
        symbols_per_frame: 8,
        es_n0_db,
        doppler_norm: 0.005,
    };
    let trials = 48u64;
    let (mut rel, mut dm) = (Vec::new(), Vec::new());
    for t in 0..trials {
        let (r, _) = one_estimate(&nu, &taps, cfg, &run, &mut stream_rng(15, t));
        rel.push(f64::from(r.rms_delay_samples) / tau_rms - 1.0);
        dm.push(f64::from(r.mean_delay_samples) - tau_m);
    }
    let n = trials as f64;
    let (e, s) = mean_sd(&rel);
    let (m, sm) = mean_sd(&dm);
    let range99 = e.abs() + 4.0 * s / n.sqrt() + 2.576 * s * (1.0 + 4.0 / (2.0 * (n - 1.0)).sqrt());
    println!(
        "relative error mean {e:+.4}, sd {s:.4}, 99 % bound {range99:.3}; mean delay {tau_m:.3}, \
         error {m:+.4} (4s/√T {:.4})",
        4.0 * sm / n.sqrt()
    );
    assert!(range99 <= 0.2);
    assert!(e.abs() <= 4.0 * s / n.sqrt());
    assert!(m.abs() <= 4.0 * sm / n.sqrt());
}
