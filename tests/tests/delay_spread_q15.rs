//! The integer delay-spread estimator (`flatbin::delay_spread_q15`) against the f32 estimator
//! on identical inputs, and against the moments of the simulated power delay profile on its
//! own.
//!
//! References, as in `tests/delay_spread.rs`: the mean excess delay `τ_m = Σ p_l τ_l` and RMS
//! delay spread `τ_rms = sqrt(Σ p_l (τ_l − τ_m)²)` of the normalised tap powers (REFERENCES
//! item 8, "Derived statistics"; Rappaport, *Wireless Communications*, 2nd ed., small-scale
//! fading chapter, from memory), computed here from the tap list the tapped delay line runs;
//! and the f32 estimator (`flatbin::delay_spread`), which `tests/delay_spread.rs` checks
//! against those definitions on the same frames.
//!
//! The frames are those of `tests/delay_spread.rs` (same seeds, same draws), scaled to
//! −12 dBFS and rounded to Q15 (`samples_to_q15`); the Q15 estimator reads the Q15 receiver's
//! FFT output (`ReceiverQ15::bins_with_exponent`), the f32 estimator the f32 FFT of the same
//! Q15 samples read back as fractions (as `tests/receiver_q15.rs` compares the receivers).
//!
//! ## Tolerance between the two estimators (derived)
//!
//! The statistical error is shared (same inputs), so the two differ only by the Q15 path's
//! rounding. Take the Q15 transforms' rounding noise as 80 dB below full scale per output
//! (the figure the Q15 FFT's SQNR tests support: ≥ 68 dB below a −12 dBFS signal), and the
//! delay profile's peak at or above 2^13 of the 2^15 full scale (the LS input is normalised to
//! its largest part in `[2^13, 2^14)`): a white floor of at most `ε = 10^-8·16 = 1.6e-7` of the
//! profile's power per delay bin. Left entirely uncorrected (the worst case: a given floor
//! does not see it) it moves the profile's variance by `ε·Σ_W (n − τ_m)²` over the moment
//! window `W`, and the kernel's by the same amount: `|Δτ²| ≤ 2ε·Σ_W (n − τ_m)²`, so
//! `|Δτ_rms| ≤ |Δτ²|/(τ_q + τ_f)`; the mean moves by at most `2ε·Σ_W |n − τ_m|`. Plus the Q16
//! rounding of the outputs (2^-16 sample). The maximum significant delay is an integer
//! threshold crossing and may flip by one sample where a profile value lies within that
//! floor of the threshold.

use flatbin::delay_spread::{DelaySpread, DelaySpreadConfig, DelaySpreadEstimator};
use flatbin::delay_spread_q15::{
    DelaySpreadConfigQ15, DelaySpreadEstimatorQ15, DelaySpreadQ15, MAX_BLOCK_EXPONENT,
};
use flatbin::fft::{MicroFft, OfdmFft};
use flatbin::fft_q15::Q15Fft;
use flatbin::fixed::Cq15;
use flatbin::fixed_math::Scaled;
use flatbin::front::Front;
use flatbin::numerology::{BinKind, NumerologyParams, PilotParams};
use flatbin::receiver_q15::{samples_to_q15, DesignQ15, ReceiverQ15, ReceiverQ15Config};
use flatbin::transmit::Transmitter;
use flatbin::{Cf32, Modulation, Numerology, ProcessError};
use flatbin_harness::channel::profile::{DelayProfile, Quantisation};
use flatbin_harness::channel::sos::FadingParams;
use flatbin_harness::channel::tdl::{Tdl, Variation};
use flatbin_harness::noise::{add_awgn, n0_for_es_n0_db};
use flatbin_harness::rng::{stream_rng, HarnessRng};
use rand::RngExt;

const N: usize = 256;
const FS: f64 = 1.0e6;
/// FFT input level, dBFS (DESIGN.md: total complex power against a full-scale sinusoid).
const LEVEL_DBFS: f64 = -12.0;
/// White floor of the Q15 path per delay bin relative to the profile's power (module docs).
const EPS: f64 = 1.0e-8 * 16.0;

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

/// Amplitude that puts unit-level symbols through a unit-power channel at `LEVEL_DBFS`.
fn level_scale(nu: &Numerology) -> f64 {
    let a2 = f64::from(nu.pilot_amplitude()).powi(2);
    let unit_power = (nu.data_len(0) as f64 + a2 * nu.pilot_len(0) as f64) / N as f64;
    (10f64.powf(LEVEL_DBFS / 10.0) / unit_power).sqrt()
}

struct Run {
    frames: usize,
    symbols_per_frame: usize,
    es_n0_db: f64,
    doppler_norm: f64,
}

/// One estimate from each estimator on the same Q15 frames (the draws of
/// `tests/delay_spread.rs::one_estimate`).
fn both_estimates(
    nu: &Numerology,
    taps: &[(usize, f64)],
    cfg: DelaySpreadConfig,
    run: &Run,
    rng: &mut HarnessRng,
) -> (DelaySpread, DelaySpreadQ15, i32) {
    let mut tx = Transmitter::new(*nu, MicroFft::<N>::new()).unwrap();
    let mut front = Front::new(nu, MicroFft::<N>::new()).unwrap();
    let mut est = DelaySpreadEstimator::new(nu, cfg, MicroFft::<N>::new()).unwrap();
    let cfg_q = DelaySpreadConfigQ15::from_f32(&cfg, nu, LEVEL_DBFS as f32).unwrap();
    let mut est_q = Box::new(DelaySpreadEstimatorQ15::<N>::new(nu, cfg_q).unwrap());
    let mut rx_q = q15_receiver(nu);
    let params = FadingParams::rayleigh(run.doppler_norm * FS / N as f64, FS, N);
    let n0 = n0_for_es_n0_db(run.es_n0_db);
    let scale = level_scale(nu) as f32;
    let sym_len = nu.symbol_len();
    let mut samples = vec![Cf32::new(0.0, 0.0); sym_len];
    let mut rx = vec![Cf32::new(0.0, 0.0); sym_len];
    let mut q = vec![Cq15::ZERO; sym_len];
    let mut back = vec![Cf32::new(0.0, 0.0); sym_len];
    let mut bins = [Cf32::new(0.0, 0.0); N];
    let d = nu.max_data_len();
    let (mut xq, mut sq, mut lq) = (
        vec![Cq15::ZERO; d],
        vec![Scaled::default(); d],
        vec![0i8; 2 * d],
    );
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
            for v in rx.iter_mut() {
                *v *= scale;
            }
            samples_to_q15(&rx, &mut q).unwrap();
            for (b, v) in back.iter_mut().zip(&q) {
                *b = v.to_cf32() / scale;
            }
            front.demodulate(&back, &mut bins).unwrap();
            est.update(&bins, s).unwrap();
            rx_q.receive(&q, s, Modulation::Qpsk, &mut xq, &mut sq, &mut lq)
                .unwrap();
            let (bq, e) = rx_q.bins_with_exponent();
            est_q.update(bq, e, s).unwrap();
        }
        rx_q.reset();
    }
    (
        est.estimate().unwrap(),
        est_q.estimate().unwrap(),
        est_q.kernel_extent_samples(),
    )
}

/// Mean delay and RMS delay spread of `(delay, power)` taps, samples (REFERENCES item 8).
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

/// Delay of the last tap within `db` of the strongest (Rappaport, from memory).
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

/// The derived agreement bounds for a moment window `-lead .. span` around mean delay `m`:
/// `(|Δτ²|, |Δτ_m|)` (module docs).
fn agreement_bounds(lead: usize, span: usize, m: f64) -> (f64, f64) {
    let w = -(lead as i64)..span as i64;
    let s2: f64 = w.clone().map(|n| (n as f64 - m).powi(2)).sum();
    let s1: f64 = w.map(|n| (n as f64 - m).abs()).sum();
    (2.0 * EPS * s2, 2.0 * EPS * s1 + 1.0 / 65536.0)
}

/// Per trial: the Q15 and f32 estimates agree within the derived bounds; over the trials the
/// Q15 estimates alone meet the target exactly as `tests/delay_spread.rs` states it
/// (every estimate and the 4σ-widened normal 99 % range within ±20 %, no bias beyond 4 s/√T,
/// mean delay likewise, maximum delay within the aperture's smear).
fn q15_spread_check(rms_samples: f64, seed: u64) {
    let nu = numerology();
    let taps = DelayProfile::exponential(rms_samples / FS, FS)
        .unwrap()
        .to_sample_taps(FS, Quantisation::Nearest);
    let (tau_m, tau_rms) = tap_moments(&taps);
    let max_true = max_excess_delay(&taps, 20.0) as i32;
    let cfg = DelaySpreadConfig::measured(&nu).unwrap();
    let run = Run {
        frames: 50,
        symbols_per_frame: 16,
        es_n0_db: 20.0,
        doppler_norm: 0.005,
    };
    let trials = 64u64;
    let (mut rel, mut dm, mut max_err) = (Vec::new(), Vec::new(), Vec::new());
    let (mut worst_d2, mut worst_dm, mut worst_d2_bound, mut flips) = (0.0f64, 0.0f64, 0.0, 0);
    let mut extent = 0;
    for t in 0..trials {
        let (f, r, ext) = both_estimates(&nu, &taps, cfg, &run, &mut stream_rng(seed, t));
        extent = ext;
        let tq = f64::from(r.rms_delay_q16) / 65536.0;
        let mq = f64::from(r.mean_delay_q16) / 65536.0;
        let (tf, mf) = (
            f64::from(f.rms_delay_samples),
            f64::from(f.mean_delay_samples),
        );
        let (b2, bm) = agreement_bounds(cfg.lead_samples, cfg.span_samples, mf);
        let d2 = (tq * tq - tf * tf).abs();
        assert!(r.resolved && f.resolved);
        assert!(d2 <= b2, "trial {t}: τ² {tq}² vs {tf}² (bound {b2})");
        assert!((tq - tf).abs() <= b2 / (tq + tf) + 1.0 / 65536.0);
        assert!(
            (mq - mf).abs() <= bm,
            "trial {t}: mean {mq} vs {mf} (bound {bm})"
        );
        assert!((r.max_delay_samples - f.max_delay_samples).abs() <= 1);
        assert_eq!(r.saturated_parts, 0);
        flips += usize::from(r.max_delay_samples != f.max_delay_samples);
        worst_d2 = worst_d2.max(d2);
        worst_d2_bound = b2;
        worst_dm = worst_dm.max((mq - mf).abs());
        rel.push(tq / tau_rms - 1.0);
        dm.push(mq - tau_m);
        max_err.push(f64::from(r.max_delay_samples - max_true));
    }
    let n = trials as f64;
    let (e, s) = mean_sd(&rel);
    let (m, sm) = mean_sd(&dm);
    let (me, sme) = mean_sd(&max_err);
    let worst = rel.iter().fold(0.0f64, |a, v| a.max(v.abs()));
    let range99 = e.abs() + 4.0 * s / n.sqrt() + 2.576 * s * (1.0 + 4.0 / (2.0 * (n - 1.0)).sqrt());
    let (lo, hi) = max_err
        .iter()
        .fold((f64::MAX, f64::MIN), |(a, b), &v| (a.min(v), b.max(v)));
    println!(
        "τ_rms {tau_rms:.4}: Q15 relative error mean {e:+.4}, sd {s:.4}, worst {worst:.3}, 99 % \
         bound {range99:.3}; mean-delay error {m:+.4}; max delay − taps' {lo}..{hi}; Q15 vs f32: \
         |Δτ²| ≤ {worst_d2:.2e} (bound {worst_d2_bound:.2e}), |Δτ_m| ≤ {worst_dm:.2e}, max delay \
         differs in {flips}/{trials}"
    );
    assert!(worst <= 0.2, "an estimate is off by {worst}");
    assert!(range99 <= 0.2, "99 % range {range99}");
    assert!(e.abs() <= 4.0 * s / n.sqrt(), "bias {e}");
    assert!(m.abs() <= 4.0 * sm / n.sqrt(), "mean delay bias {m}");
    let ext = f64::from(extent);
    let mc = 4.0 * sme / n.sqrt();
    assert!(
        (-1.0 - mc..=ext + 1.0 + mc).contains(&me),
        "mean max delay error {me}"
    );
    let decay = 1.0 / (taps[0].1 / taps[1].1).ln();
    let spread = 4.0 * decay / (run.frames as f64).sqrt();
    assert!(
        lo >= -1.0 - spread && hi <= ext + 1.0 + spread,
        "max delay error {lo}..{hi}"
    );
}

#[test]
fn q15_rms_spread_1_sample() {
    q15_spread_check(1.0, 11);
}

#[test]
fn q15_rms_spread_2_samples() {
    q15_spread_check(2.0, 12);
}

#[test]
fn q15_rms_spread_3_samples() {
    q15_spread_check(3.0, 13);
}

#[test]
fn q15_rms_spread_4_samples() {
    q15_spread_check(4.0, 14);
}

/// A known floor (converted to bin units by `DelaySpreadConfigQ15::from_f32` for the
/// −12 dBFS input): ITU Vehicular A at 7.68 MHz, as `tests/delay_spread.rs`, same frames.
/// Per trial the derived agreement; over the trials the same target statistics.
#[test]
fn q15_vehicular_a_with_known_noise_floor() {
    let fs = 7.68e6;
    let nu = numerology();
    let taps = DelayProfile::itu_vehicular_a().to_sample_taps(fs, Quantisation::Nearest);
    let (tau_m, tau_rms) = tap_moments(&taps);
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
    let mut worst_d2 = 0.0f64;
    for t in 0..trials {
        let (f, r, _) = both_estimates(&nu, &taps, cfg, &run, &mut stream_rng(15, t));
        let tq = f64::from(r.rms_delay_q16) / 65536.0;
        let mq = f64::from(r.mean_delay_q16) / 65536.0;
        let (tf, mf) = (
            f64::from(f.rms_delay_samples),
            f64::from(f.mean_delay_samples),
        );
        let (b2, bm) = agreement_bounds(cfg.lead_samples, cfg.span_samples, mf);
        assert!((tq * tq - tf * tf).abs() <= b2, "trial {t}: {tq} vs {tf}");
        assert!((mq - mf).abs() <= bm, "trial {t}: mean {mq} vs {mf}");
        // The floor ratio: the same given N0 against the same profile, to the Q24 step and
        // the derived floor of the Q15 path.
        let fr = f64::from(r.floor_to_power_q24) / 16_777_216.0;
        assert!(
            (fr - f64::from(f.floor_to_power)).abs() <= EPS + 2.0 / 16_777_216.0,
            "floor ratio {fr} vs {}",
            f.floor_to_power
        );
        worst_d2 = worst_d2.max((tq * tq - tf * tf).abs());
        rel.push(tq / tau_rms - 1.0);
        dm.push(mq - tau_m);
    }
    let n = trials as f64;
    let (e, s) = mean_sd(&rel);
    let (m, sm) = mean_sd(&dm);
    let range99 = e.abs() + 4.0 * s / n.sqrt() + 2.576 * s * (1.0 + 4.0 / (2.0 * (n - 1.0)).sqrt());
    println!(
        "Veh A (τ_rms {tau_rms:.3}): Q15 relative error mean {e:+.4}, sd {s:.4}, 99 % bound \
         {range99:.3}; mean delay error {m:+.4}; Q15 vs f32 |Δτ²| ≤ {worst_d2:.2e}"
    );
    assert!(range99 <= 0.2);
    assert!(e.abs() <= 4.0 * s / n.sqrt());
    assert!(m.abs() <= 4.0 * sm / n.sqrt());
}

/// Robustness (the core's no-panic rule): all-zero bins give no estimate; full-scale bins are
/// accepted and flagged as saturated; exponents beyond ±`MAX_BLOCK_EXPONENT` are rejected with
/// nothing accumulated; the extreme accepted exponents mixed give no panic.
#[test]
fn q15_delay_spread_on_degenerate_input() {
    let nu = numerology();
    for cfg in [
        DelaySpreadConfigQ15::measured(&nu).unwrap(),
        DelaySpreadConfigQ15::known(
            &nu,
            Scaled {
                mant: 20_000,
                exp: -10,
            },
        ),
    ] {
        let mut est = Box::new(DelaySpreadEstimatorQ15::<N>::new(&nu, cfg).unwrap());
        assert!(est.estimate().is_none());
        for s in 0..4 {
            est.update(&[Cq15::ZERO; N], 0, s).unwrap();
        }
        assert!(est.estimate().is_none(), "silence");
        for e in [
            i32::MIN,
            -MAX_BLOCK_EXPONENT - 1,
            MAX_BLOCK_EXPONENT + 1,
            i32::MAX,
        ] {
            assert_eq!(
                est.update(&[Cq15::new(100, 100); N], e, 0),
                Err(ProcessError::OutOfRange { index: 1 })
            );
        }
        assert_eq!(est.symbols(), 4);
        est.reset();
        // Full scale on every bin, both signs.
        for (s, v) in [(0u32, i16::MAX), (1, i16::MIN), (2, i16::MAX)] {
            est.update(&[Cq15::new(v, v); N], 0, s).unwrap();
        }
        let pilots: u32 = (0..3).map(|s| nu.pilot_len(s) as u32).sum();
        let r = est.estimate();
        println!("full scale: {r:?}");
        if let Some(r) = r {
            assert_eq!(r.saturated_parts, 2 * pilots);
        }
        // Extreme accepted exponents, alternating, on a valid single-path symbol.
        est.reset();
        let mut bins = [Cq15::ZERO; N];
        for (i, b) in nu.bins(0).filter(|b| b.kind == BinKind::Pilot).enumerate() {
            bins[b.fft_index] = Cq15::new(if i % 2 == 0 { 9000 } else { -9000 }, 0);
        }
        for (s, e) in [
            (0u32, MAX_BLOCK_EXPONENT),
            (1, -MAX_BLOCK_EXPONENT),
            (2, MAX_BLOCK_EXPONENT),
        ] {
            est.update(&bins, e, s).unwrap();
        }
        let r = est.estimate();
        println!("extreme exponents: {r:?}");
        if let Some(r) = r {
            assert_eq!(r.symbols, 3);
            assert_eq!(r.saturated_parts, 0);
        }
        // Random parts and exponents over the whole accepted range (no panic; run with
        // overflow checks by `cargo test`).
        est.reset();
        let mut rng = stream_rng(16, 0);
        for s in 0..300u32 {
            let bins: [Cq15; N] =
                core::array::from_fn(|_| Cq15::new(rng.random::<i16>(), rng.random::<i16>()));
            let e = rng.random_range(-MAX_BLOCK_EXPONENT..=MAX_BLOCK_EXPONENT);
            est.update(&bins, e, s).unwrap();
        }
        let r = est.estimate();
        println!("random parts and exponents: {r:?}");
        assert!(r.is_none_or(|r| r.symbols == 300));
    }
}
