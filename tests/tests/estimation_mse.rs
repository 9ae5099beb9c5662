//! Measured MSE of the core's channel estimator against the analytic error covariance of the
//! *same* linear map, `C_e(W) = R_hh − W R_hpᴴ − R_hp Wᴴ + W (R_pp + σ²I) Wᴴ` (REFERENCES item
//! 6; Li, Cimini & Sollenberger 1998; Edfors et al. 1998; Hoeher, Kaiser & Robertson 1997 for
//! the 2-D case), with the true channel's correlation: the sampled exponential profile in
//! frequency (tap sum, REFERENCES item 4) and Jakes J0 in time. Each within ±5 %.
//!
//! The weights W are read from the estimator (they are what is under test: the Monte Carlo
//! error must match what those weights imply); the formula and the channel statistics are
//! outside the code under test.

use flatbin::correlation::ChannelModel;
use flatbin::equalize::Equalizer;
use flatbin::estimate::{ChannelEstimator, EstimatorConfig, FreqInterpolation, TimeFilter};
use flatbin::numerology::{NumerologyParams, PilotParams};
use flatbin::receiver::ReceiverConfig;
use flatbin::{Modulation, Numerology};
use flatbin_harness::channel::profile::{DelayProfile, Quantisation};
use flatbin_harness::fading_link::{fading_errors, Csi, FadingChannel, RX_HISTORY, RX_TAPS};
use flatbin_harness::link::StopRule;
use flatbin_harness::rng::stream_rng;
use flatbin_harness::theory::estimation::{
    compose_rows, mse_of_linear, FreqCorr, GridPos, SeparableCorr, SparseRow, TimeCorr,
};
use num_complex::Complex;

const N: usize = 64;

struct Case {
    name: &'static str,
    spacing: usize,
    shift: usize,
    freq: FreqInterpolation,
    time: TimeFilter,
    fd_tsym: f64,
    rms_samples: f64,
    snr_db: f64,
    symbols_per_frame: usize,
    measure_from: usize,
    frames: u64,
}

fn numerology(spacing: usize, shift: usize) -> Numerology {
    Numerology::new(NumerologyParams {
        pilots: PilotParams {
            spacing,
            shift_per_symbol: shift,
            ..PilotParams::default()
        },
        ..NumerologyParams::default()
    })
    .unwrap()
}

/// The estimator's linear map at symbol `n` as sparse rows over LS observations.
fn analytic_mse(
    nu: &Numerology,
    est: &ChannelEstimator<N, RX_TAPS, RX_HISTORY>,
    time: TimeFilter,
    n: i64,
    corr: &SeparableCorr,
    noise_var: f64,
) -> f64 {
    let period = nu.pattern_period() as i64;
    let mut pilots = Vec::new();
    let mut time_rows: Vec<SparseRow> = Vec::new();
    for j in 0..est.lattice_len() {
        let u = est.lattice_bin(j).unwrap();
        let k = i64::from(nu.logical_bin(u));
        let every = (0..period).all(|s| nu.is_pilot(u, s as u32));
        // Observation symbols of this bin, newest first.
        let seen: Vec<i64> = (0..=n)
            .rev()
            .filter(|&s| nu.is_pilot(u, s as u32))
            .take(RX_HISTORY)
            .collect();
        let age = (n - seen[0]) as usize;
        let weights: Vec<f64> = match time {
            TimeFilter::Latest => vec![1.0],
            TimeFilter::Lmmse => est
                .time_weights(every, RX_HISTORY, age)
                .unwrap()
                .iter()
                .map(|&w| f64::from(w))
                .collect(),
            TimeFilter::Forgetting { .. } => unreachable!("not analysed here"),
        };
        let mut row = Vec::new();
        for (&s, &w) in seen.iter().zip(&weights) {
            row.push((pilots.len(), Complex::new(w, 0.0)));
            pilots.push(GridPos::new(k, s));
        }
        time_rows.push(row);
    }
    let mut targets = Vec::new();
    let mut freq_rows: Vec<SparseRow> = Vec::new();
    for u in 0..nu.used_len() {
        targets.push(GridPos::new(i64::from(nu.logical_bin(u)), n));
        let (first, taps) = est.freq_taps(u).unwrap();
        freq_rows.push(
            taps.iter()
                .enumerate()
                .map(|(i, t)| (first + i, Complex::new(f64::from(t.re), f64::from(t.im))))
                .collect(),
        );
    }
    let rows = compose_rows(&freq_rows, &time_rows).unwrap();
    mse_of_linear(corr, &pilots, &targets, &rows, noise_var).unwrap()
}

fn run(case: &Case) {
    let nu = numerology(case.spacing, case.shift);
    let fs = f64::from(nu.sample_rate_hz());
    let tsym = f64::from(nu.symbol_period_s());
    let doppler_hz = case.fd_tsym / tsym;
    let taps = DelayProfile::exponential(case.rms_samples / fs, fs)
        .unwrap()
        .to_sample_taps(fs, Quantisation::Nearest);
    assert!(
        taps.iter().all(|t| t.0 <= nu.cp_len()),
        "profile fits the CP"
    );
    let n0 = 10f64.powf(-case.snr_db / 10.0);
    let cfg = EstimatorConfig {
        freq: case.freq,
        time: case.time,
        model: ChannelModel {
            rms_delay_s: (case.rms_samples / fs) as f32,
            doppler_hz: doppler_hz as f32,
        },
        noise_var: n0 as f32,
    };
    let channel = FadingChannel {
        taps: taps.clone(),
        doppler_hz,
        held: true,
        symbols_per_frame: case.symbols_per_frame,
        mse_from_symbol: case.measure_from,
        min_frames: 0,
    };
    let rx = ReceiverConfig {
        estimator: cfg,
        equalizer: Equalizer::Mmse,
        cpe: false,
    };
    let bits = case.frames * (case.symbols_per_frame * nu.max_data_len() * 2) as u64;
    let stop = StopRule {
        min_errors: u64::MAX,
        max_bits: bits,
    };
    let r = fading_errors(
        &nu,
        Modulation::Qpsk,
        case.snr_db,
        &channel,
        Csi::Estimated(rx),
        &mut stream_rng(71, case.spacing as u64 * 10 + case.shift as u64),
        stop,
    )
    .unwrap();
    let measured = r.mse.unwrap();
    // Analytic: the same estimator, averaged over the measured symbols' pattern phases.
    let est = Box::new(ChannelEstimator::<N, RX_TAPS, RX_HISTORY>::new(&nu, cfg).unwrap());
    let corr = SeparableCorr::new(
        FreqCorr::DelayPdp {
            taps: taps.iter().map(|&(d, p)| (d as f64, p)).collect(),
            n_fft: N,
        },
        TimeCorr::Jakes {
            fd_tsym: case.fd_tsym,
        },
    );
    let ns: Vec<i64> = (case.measure_from..case.symbols_per_frame)
        .map(|n| n as i64)
        .collect();
    let theory = ns
        .iter()
        .map(|&n| analytic_mse(&nu, &est, case.time, n, &corr, n0))
        .sum::<f64>()
        / ns.len() as f64;
    println!(
        "{}: measured MSE {measured:.5} over {} frames, analytic {theory:.5} ({:+.2} %)",
        case.name,
        r.frames,
        100.0 * (measured / theory - 1.0)
    );
    assert!((measured / theory - 1.0).abs() <= 0.05, "{}", case.name);
}

#[test]
fn ls_linear_and_frequency_lmmse_match_their_analytic_mse() {
    for (name, freq) in [
        ("comb/4, linear", FreqInterpolation::Linear),
        ("comb/4, LMMSE K=4", FreqInterpolation::Lmmse),
    ] {
        run(&Case {
            name,
            spacing: 4,
            shift: 0,
            freq,
            time: TimeFilter::Latest,
            fd_tsym: 0.01,
            rms_samples: 1.0,
            snr_db: 10.0,
            symbols_per_frame: 1,
            measure_from: 0,
            frames: 8000,
        });
    }
}

#[test]
fn two_dimensional_lmmse_matches_its_analytic_mse() {
    run(&Case {
        name: "comb/4, time LMMSE M=4 x freq LMMSE",
        spacing: 4,
        shift: 0,
        freq: FreqInterpolation::Lmmse,
        time: TimeFilter::Lmmse,
        fd_tsym: 0.05,
        rms_samples: 1.0,
        snr_db: 10.0,
        symbols_per_frame: 6,
        measure_from: 3,
        frames: 3000,
    });
    run(&Case {
        name: "scattered 4/1, time LMMSE M=4 x freq LMMSE",
        spacing: 4,
        shift: 1,
        freq: FreqInterpolation::Lmmse,
        time: TimeFilter::Lmmse,
        fd_tsym: 0.01,
        rms_samples: 1.0,
        snr_db: 10.0,
        symbols_per_frame: 20,
        measure_from: 16,
        frames: 2000,
    });
}

#[test]
fn ls_at_the_pilots_has_mse_n0_over_pilot_power() {
    // MSE_LS = N0/|X_p|² (REFERENCES item 6), here with a 3 dB pilot boost at Es/N0 = 10 dB:
    // 0.1 / 10^0.3 = 0.050119. The estimate at a pilot bin with linear interpolation and no
    // time filter is that pilot's LS value. Tolerance: 4/√(pilot samples) relative (the squared
    // error of a complex Gaussian is exponential; REFERENCES item 6 tolerance rule).
    let nu = Numerology::new(NumerologyParams {
        pilots: PilotParams {
            boost_db: 3.0,
            ..PilotParams::default()
        },
        ..NumerologyParams::default()
    })
    .unwrap();
    let fs = f64::from(nu.sample_rate_hz());
    let taps = DelayProfile::exponential(1.0 / fs, fs)
        .unwrap()
        .to_sample_taps(fs, Quantisation::Nearest);
    let rx = ReceiverConfig {
        estimator: EstimatorConfig {
            freq: FreqInterpolation::Linear,
            time: TimeFilter::Latest,
            model: ChannelModel::default(),
            noise_var: 0.1,
        },
        equalizer: Equalizer::Zf,
        cpe: false,
    };
    let channel = FadingChannel {
        taps,
        doppler_hz: 10.0,
        held: true,
        symbols_per_frame: 1,
        mse_from_symbol: 0,
        min_frames: 0,
    };
    let frames = 4000u64;
    let stop = StopRule {
        min_errors: u64::MAX,
        max_bits: frames * (nu.data_len(0) * 2) as u64,
    };
    let r = fading_errors(
        &nu,
        Modulation::Qpsk,
        10.0,
        &channel,
        Csi::Estimated(rx),
        &mut stream_rng(72, 0),
        stop,
    )
    .unwrap();
    let measured = r.mse_pilots.unwrap();
    let want = 0.1 / 10f64.powf(0.3);
    let samples = (frames as usize * nu.pilot_len(0)) as f64;
    println!("LS MSE at pilots: {measured:.5}, N0/|Xp|² = {want:.5}");
    assert!((measured / want - 1.0).abs() <= 4.0 / samples.sqrt());
}

#[test]
fn exponential_forgetting_settles_at_its_noise_reduction() {
    // An exponentially weighted average Ĥ ← λĤ + (1 − λ)Z of independent LS values of variance
    // σ² has steady-state noise variance σ²(1 − λ)/(1 + λ) (exponential smoothing, common
    // practice); on a practically static channel that is the MSE at the pilot bins.
    let nu = Numerology::new(NumerologyParams::default()).unwrap();
    let fs = f64::from(nu.sample_rate_hz());
    let taps = DelayProfile::exponential(1.0 / fs, fs)
        .unwrap()
        .to_sample_taps(fs, Quantisation::Nearest);
    let lambda = 0.8f32;
    let n0 = 0.1;
    let rx = ReceiverConfig {
        estimator: EstimatorConfig {
            freq: FreqInterpolation::Linear,
            time: TimeFilter::Forgetting { lambda },
            model: ChannelModel::default(),
            noise_var: n0 as f32,
        },
        equalizer: Equalizer::Zf,
        cpe: false,
    };
    let channel = FadingChannel {
        taps,
        doppler_hz: 0.001,
        held: true,
        symbols_per_frame: 60,
        mse_from_symbol: 40,
        min_frames: 0,
    };
    let frames = 300u64;
    let stop = StopRule {
        min_errors: u64::MAX,
        max_bits: frames * 60 * (nu.data_len(0) * 2) as u64,
    };
    let r = fading_errors(
        &nu,
        Modulation::Qpsk,
        10.0,
        &channel,
        Csi::Estimated(rx),
        &mut stream_rng(73, 0),
        stop,
    )
    .unwrap();
    let l = f64::from(lambda);
    let want = n0 * (1.0 - l) / (1.0 + l);
    let measured = r.mse_pilots.unwrap();
    // Samples: 300 frames × 20 steady symbols × 15 pilots, correlated over ~1/(1 − λ²) ≈ 3
    // symbols: ≈ 30 000 effective; 4/√(30 000/3) ≈ 4 %, so ±6 % is safe.
    println!("forgetting λ = {lambda}: pilot MSE {measured:.5}, σ²(1−λ)/(1+λ) = {want:.5}");
    assert!((measured / want - 1.0).abs() <= 0.06);
}
