//! The main job over the scenario's multipath fading channel: uncoded BER per modulation and
//! Es/N0 with ideal channel knowledge (against the flat-Rayleigh closed form) and with the core
//! receiver's pilot estimator (against the BER its analytic MSE predicts), and the BER figures.
//!
//! Assumptions (printed with the results): exponential delay profile of the scenario's RMS
//! spread on the sampling grid; classical Doppler at the scenario's maximum speed; one channel
//! draw per frame; ideal knowledge uses a channel held over each symbol (no ICI), the estimator
//! runs on per-sample fading (with ICI); noise variance known to the receiver; uncoded bits.

use std::path::{Path, PathBuf};

use anyhow::{Context, Result};
use flatbin::correlation::ChannelModel;
use flatbin::equalize::Equalizer;
use flatbin::estimate::{ChannelEstimator, EstimatorConfig, FreqInterpolation, TimeFilter};
use flatbin::receiver::ReceiverConfig;
use flatbin::Numerology;
use plotters::prelude::{RGBColor, SeriesLabelPosition};
use rayon::prelude::*;
use serde::Serialize;

use crate::channel::profile::{DelayProfile, Quantisation};
use crate::estimator_model::{frequency_stage_mse, predicted_ber};
use crate::evaluate::{core_modulation, AwgnReport, Verdict, MIN_ERRORS_FOR_VERDICT};
use crate::fading_link::{fading_errors, Csi, FadingChannel, FadingCount, RX_HISTORY, RX_TAPS};
use crate::link::{ErrorCount, StopRule};
use crate::plots::{write_chart, Axis, Chart, Curve, Mark};
use crate::rng::stream_rng;
use crate::scenario::{ChannelProfile, ModulationName, Scenario};
use crate::theory::ber::{ber_rayleigh, db_to_linear, eb_n0_from_es_n0, BER_RAYLEIGH_SOURCE};
use crate::theory::estimation::{FreqCorr, SeparableCorr};

/// Points whose expected error count within the bit budget is below this are not simulated.
const MIN_EXPECTED_ERRORS: f64 = 10.0;
/// Fewest independent channel draws per fading point (the stop rule's error count is not enough
/// when errors come in bursts).
const MIN_FRAMES: u64 = 200;
/// Random-stream tag of the fading points ("fade").
const STREAM_FADING: u64 = 0x6661_6465_0000;

/// One measured fading point.
#[derive(Clone, Copy, Debug, Serialize)]
pub struct FadingPoint {
    /// Bits and errors.
    pub count: ErrorCount,
    /// Independent channel draws (frames).
    pub frames: u64,
    /// Measured BER.
    pub ber: f64,
    /// ±4·s/√frames, s the spread of the per-frame BER.
    pub tolerance: f64,
}

/// One modulation at one Es/N0 over fading.
#[derive(Clone, Debug, Serialize)]
pub struct FadingRow {
    /// Modulation.
    pub modulation: ModulationName,
    /// Es/N0 per data subcarrier, dB (mean over the fading).
    pub es_n0_db: f64,
    /// Flat-Rayleigh closed form (ideal channel knowledge).
    pub theory_ideal: f64,
    /// Measured with ideal knowledge (`None`: not simulated).
    pub ideal: Option<FadingPoint>,
    /// Verdict of the ideal-knowledge point against the closed form.
    pub verdict: Verdict,
    /// Predicted with the estimator (analytic MSE; comb pilots only).
    pub predicted_estimated: Option<f64>,
    /// Measured with the estimator.
    pub estimated: Option<FadingPoint>,
}

/// The fading report of a scenario.
#[derive(Clone, Debug, Serialize)]
pub struct FadingReport {
    /// Channel summary line.
    pub channel: String,
    /// Receiver summary line.
    pub receiver: String,
    /// What the numbers assume.
    pub assumptions: Vec<String>,
    /// Source of the ideal-knowledge theory.
    pub theory_source: String,
    /// One row per modulation and Es/N0.
    pub rows: Vec<FadingRow>,
}

impl FadingReport {
    /// True when every ideal-knowledge point with a verdict agrees with theory.
    pub fn all_agree(&self) -> bool {
        self.rows.iter().all(|r| r.verdict != Verdict::Disagrees)
    }
}

/// The receiver the harness evaluates for `scenario` at noise variance `n0`: banded LMMSE in
/// frequency (K = 4) designed for the scenario's delay spread and Doppler; time LMMSE (M = 4)
/// when the pilot pattern is scattered, else this symbol's pilots only; MMSE equalizer; CPE on.
pub fn receiver_config(scenario: &Scenario, numerology: &Numerology, n0: f64) -> ReceiverConfig {
    ReceiverConfig {
        estimator: EstimatorConfig {
            freq: FreqInterpolation::Lmmse,
            time: if numerology.pattern_period() > 1 {
                TimeFilter::Lmmse
            } else {
                TimeFilter::Latest
            },
            model: ChannelModel {
                rms_delay_s: scenario.channel.rms_delay_spread_s as f32,
                doppler_hz: scenario.max_doppler_hz() as f32,
            },
            noise_var: n0 as f32,
        },
        equalizer: Equalizer::Mmse,
        cpe: true,
    }
}

fn point(c: FadingCount) -> FadingPoint {
    FadingPoint {
        count: c.count,
        frames: c.frames,
        ber: c.count.ber(),
        tolerance: 4.0 * c.frame_ber_sd / (c.frames.max(1) as f64).sqrt(),
    }
}

/// Runs every modulation × Es/N0 point of `scenario` over its fading channel, with ideal and
/// estimated channel knowledge. `None` for an AWGN scenario.
pub fn evaluate_fading(
    scenario: &Scenario,
    numerology: &Numerology,
) -> Result<Option<FadingReport>> {
    if scenario.channel.profile == ChannelProfile::Awgn {
        return Ok(None);
    }
    let fs = scenario.band.sample_rate_hz;
    let taps = DelayProfile::exponential(scenario.channel.rms_delay_spread_s, fs)?
        .to_sample_taps(fs, Quantisation::Nearest);
    let doppler_hz = scenario.max_doppler_hz();
    let stop = StopRule {
        min_errors: scenario.link.min_errors,
        max_bits: scenario.link.max_bits,
    };
    let channel = |held: bool| FadingChannel {
        taps: taps.clone(),
        doppler_hz,
        held,
        symbols_per_frame: scenario.link.symbols_per_frame,
        mse_from_symbol: 0,
        min_frames: MIN_FRAMES,
    };
    let corr = SeparableCorr::freq_only(FreqCorr::DelayPdp {
        taps: taps.iter().map(|&(d, p)| (d as f64, p)).collect(),
        n_fft: numerology.fft_len(),
    });
    let points: Vec<(usize, ModulationName, f64)> = scenario
        .link
        .modulations
        .iter()
        .flat_map(|m| scenario.link.es_n0_db.iter().map(move |e| (*m, *e)))
        .enumerate()
        .map(|(i, (m, e))| (i, m, e))
        .collect();
    let rows = points
        .par_iter()
        .map(|&(index, name, es_n0_db)| -> Result<FadingRow> {
            let bps = name.bits_per_symbol();
            let eb_n0 = eb_n0_from_es_n0(db_to_linear(es_n0_db), bps);
            let theory_ideal = ber_rayleigh(bps, eb_n0).context("no closed form for this order")?;
            let n0 = 1.0 / db_to_linear(es_n0_db);
            let rx = receiver_config(scenario, numerology, n0);
            let predicted_estimated = if numerology.pattern_period() == 1 {
                let noise = n0 / f64::from(numerology.pilot_amplitude()).powi(2);
                let mse = crate::with_fft_len!(
                    numerology.fft_len(),
                    predicted_mse(numerology, rx.estimator, &corr, noise)
                )?;
                predicted_ber(bps, 1.0 / n0, &mse)
            } else {
                None
            };
            let m = core_modulation(name);
            let worth = |p: f64| p * stop.max_bits as f64 >= MIN_EXPECTED_ERRORS;
            let ideal = if worth(theory_ideal) {
                let mut rng = stream_rng(scenario.seed, STREAM_FADING + 2 * index as u64);
                Some(point(fading_errors(
                    numerology,
                    m,
                    es_n0_db,
                    &channel(true),
                    Csi::Ideal,
                    &mut rng,
                    stop,
                )?))
            } else {
                None
            };
            let estimated = if worth(predicted_estimated.unwrap_or(theory_ideal)) {
                let mut rng = stream_rng(scenario.seed, STREAM_FADING + 2 * index as u64 + 1);
                Some(point(fading_errors(
                    numerology,
                    m,
                    es_n0_db,
                    &channel(false),
                    Csi::Estimated(rx),
                    &mut rng,
                    stop,
                )?))
            } else {
                None
            };
            let verdict = match ideal {
                None => Verdict::NotSimulated,
                Some(p) if p.count.errors < MIN_ERRORS_FOR_VERDICT => Verdict::TooFewErrors,
                Some(p) if (p.ber - theory_ideal).abs() <= p.tolerance => Verdict::Agrees,
                Some(_) => Verdict::Disagrees,
            };
            Ok(FadingRow {
                modulation: name,
                es_n0_db,
                theory_ideal,
                ideal,
                verdict,
                predicted_estimated,
                estimated,
            })
        })
        .collect::<Result<Vec<_>>>()?;
    let rx0 = receiver_config(scenario, numerology, 0.01);
    Ok(Some(FadingReport {
        channel: format!(
            "exponential profile, RMS {:.2} µs ({} taps, max delay {} samples, CP {}), \
             Doppler {:.1} Hz (fd·T = {:.4})",
            scenario.channel.rms_delay_spread_s * 1e6,
            taps.len(),
            taps.iter().map(|t| t.0).max().unwrap_or(0),
            numerology.cp_len(),
            doppler_hz,
            doppler_hz * numerology.useful_symbol_s() as f64
        ),
        receiver: format!(
            "LS at pilots → {:?} in time → banded LMMSE in frequency, K = {RX_TAPS} \
             (designed for the scenario's RMS delay and Doppler at each point's N0) → MMSE \
             one-tap with CPE → SINR-weighted max-log LLRs",
            rx0.estimator.time
        ),
        assumptions: vec![
            "channel: exponential delay profile on the sampling grid; classical (Jakes) Doppler at \
             the scenario's maximum speed; one independent draw per frame"
                .into(),
            "ideal knowledge: channel held over each symbol (no ICI), receiver divides by the true \
             response"
                .into(),
            "estimated: per-sample fading (ICI included), noise variance known to the receiver".into(),
            "predicted: mean over data bins of the Rayleigh BER at the effective SNR \
             SNR(1 − mse)/(1 + SNR·mse), mse from the estimator's analytic error covariance \
             (REFERENCES item 6; approximate above QPSK)"
                .into(),
            "SNR: mean Es/N0 per data subcarrier; uncoded Gray-mapped bits".into(),
            format!(
                "stop rule: {} errors and at least {MIN_FRAMES} frames, or {} bits; tolerance \
                 ±4·s/√frames, s the spread of the per-frame BER",
                stop.min_errors, stop.max_bits
            ),
            "not applied yet: the scenario's front-end impairments ([impairments]); this \
             receiver has no synchronisation or tracking"
                .into(),
        ],
        theory_source: BER_RAYLEIGH_SOURCE.to_string(),
        rows,
    }))
}

// Not inlined: `with_fft_len!` calls every size's instance from one function, and inlined
// they would share one stack frame sized for N = 4096 (a rayon worker has 2 MiB).
#[inline(never)]
fn predicted_mse<const N: usize>(
    numerology: &Numerology,
    config: EstimatorConfig,
    corr: &SeparableCorr,
    noise_var: f64,
) -> Result<Vec<f64>> {
    let est = Box::new(ChannelEstimator::<N, RX_TAPS, RX_HISTORY>::new(
        numerology, config,
    )?);
    frequency_stage_mse(numerology, &est, 0, corr, noise_var)
}

/// Renders the fading report as a fixed-width text table.
pub fn render_text(report: &FadingReport) -> String {
    use std::fmt::Write;
    let mut s = String::new();
    let _ = writeln!(s, "\nUncoded BER over multipath Rayleigh fading:");
    let _ = writeln!(s, "channel:  {}", report.channel);
    let _ = writeln!(s, "receiver: {}\n", report.receiver);
    let _ = writeln!(
        s,
        "{:<7} {:>8}  {:>11} {:>11} {:>9}  {:<14}  {:>11} {:>11} {:>9}",
        "order",
        "Es/N0 dB",
        "ideal CSI",
        "Rayleigh",
        "±4σ",
        "verdict",
        "estimated",
        "predicted",
        "±4σ"
    );
    let fmt = |v: Option<f64>| v.map_or("—".to_string(), |x| format!("{x:.3e}"));
    for r in &report.rows {
        if r.ideal.is_none() && r.estimated.is_none() {
            continue;
        }
        let verdict = match r.verdict {
            Verdict::Agrees => "agrees",
            Verdict::Disagrees => "DISAGREES",
            Verdict::TooFewErrors => "too few errors",
            Verdict::NotSimulated => "not simulated",
        };
        let _ = writeln!(
            s,
            "{:<7} {:>8.1}  {:>11} {:>11.3e} {:>9}  {:<14}  {:>11} {:>11} {:>9}",
            r.modulation.as_str(),
            r.es_n0_db,
            fmt(r.ideal.map(|p| p.ber)),
            r.theory_ideal,
            r.ideal
                .map_or("—".to_string(), |p| format!("{:.1e}", p.tolerance)),
            verdict,
            fmt(r.estimated.map(|p| p.ber)),
            fmt(r.predicted_estimated),
            r.estimated
                .map_or("—".to_string(), |p| format!("{:.1e}", p.tolerance)),
        );
    }
    let _ = writeln!(s, "\ntheory (ideal CSI): {}", report.theory_source);
    let _ = writeln!(s, "assumptions:");
    for a in &report.assumptions {
        let _ = writeln!(s, "  - {a}");
    }
    s
}

/// Colours of the modulations in the BER figures (colour-blind-safe palette).
const ORDER_COLOURS: [RGBColor; 5] = [
    RGBColor(0, 114, 178),
    RGBColor(213, 94, 0),
    RGBColor(0, 158, 115),
    RGBColor(204, 121, 167),
    RGBColor(86, 86, 86),
];

fn colour(name: ModulationName) -> RGBColor {
    let i = ModulationName::ALL
        .iter()
        .position(|m| *m == name)
        .unwrap_or(0);
    ORDER_COLOURS[i % ORDER_COLOURS.len()]
}

fn ber_axis(lo: f64) -> Axis {
    Axis {
        lo,
        hi: 0.5,
        log: true,
        label: "bit error rate".into(),
    }
}

fn snr_axis(scenario: &Scenario) -> Axis {
    let e = &scenario.link.es_n0_db;
    let lo = e.iter().copied().fold(f64::INFINITY, f64::min);
    let hi = e.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    Axis {
        lo: lo.floor() - 1.0,
        hi: hi.ceil() + 1.0,
        log: false,
        label: "Es/N0 per data subcarrier, dB".into(),
    }
}

/// Writes `ber_awgn.{svg,png}` and, for a fading scenario, `ber_fading.{svg,png}` into `dir`:
/// measured points beside the closed forms. Returns the files written.
pub fn write_ber_plots(
    scenario: &Scenario,
    awgn: &AwgnReport,
    fading: Option<&FadingReport>,
    dir: &Path,
) -> Result<Vec<PathBuf>> {
    let x = snr_axis(scenario);
    let dense: Vec<f64> = (0..=200)
        .map(|i| x.lo + (x.hi - x.lo) * f64::from(i) / 200.0)
        .collect();
    let theory = |name: ModulationName, rayleigh: bool| -> Vec<(f64, f64)> {
        let bps = name.bits_per_symbol();
        dense
            .iter()
            .filter_map(|&es| {
                let eb = eb_n0_from_es_n0(db_to_linear(es), bps);
                let p = if rayleigh {
                    ber_rayleigh(bps, eb)
                } else {
                    crate::theory::ber::ber_awgn(bps, eb)
                }?;
                (p > 0.0).then_some((es, p))
            })
            .collect()
    };
    let mut files = Vec::new();
    let mut curves = Vec::new();
    for &name in &scenario.link.modulations {
        let c = colour(name);
        curves.push(Curve {
            label: format!("{}: measured", name.as_str()),
            points: awgn
                .rows
                .iter()
                .filter(|r| r.modulation == name && r.count.errors > 0)
                .map(|r| (r.es_n0_db, r.measured_ber))
                .collect(),
            color: c,
            mark: Mark::Points,
            bars: Vec::new(),
        });
        curves.push(Curve {
            label: format!("{}: Cho & Yoon", name.as_str()),
            points: theory(name, false),
            color: c,
            mark: Mark::Line,
            bars: Vec::new(),
        });
    }
    let chart = Chart {
        title: "Uncoded BER, AWGN, ideal channel".into(),
        x: x.clone(),
        y: ber_axis(1e-6),
        curves,
        legend: SeriesLabelPosition::LowerLeft,
    };
    files.extend(write_chart("ber_awgn", &chart, dir)?);
    if let Some(f) = fading {
        let mut curves = Vec::new();
        for &name in &scenario.link.modulations {
            let c = colour(name);
            let rows: Vec<&FadingRow> = f.rows.iter().filter(|r| r.modulation == name).collect();
            curves.push(Curve {
                label: format!("{}: ideal CSI", name.as_str()),
                points: rows
                    .iter()
                    .filter_map(|r| {
                        r.ideal
                            .filter(|p| p.count.errors > 0)
                            .map(|p| (r.es_n0_db, p.ber))
                    })
                    .collect(),
                color: c,
                mark: Mark::Points,
                bars: Vec::new(),
            });
            curves.push(Curve {
                label: format!("{}: Rayleigh theory", name.as_str()),
                points: theory(name, true),
                color: c,
                mark: Mark::Line,
                bars: Vec::new(),
            });
            let est: Vec<(f64, f64)> = rows
                .iter()
                .filter_map(|r| {
                    r.estimated
                        .filter(|p| p.count.errors > 0)
                        .map(|p| (r.es_n0_db, p.ber))
                })
                .collect();
            if !est.is_empty() {
                curves.push(Curve {
                    label: format!("{}: pilot estimator", name.as_str()),
                    points: est,
                    color: c,
                    mark: Mark::Dashed,
                    bars: Vec::new(),
                });
            }
        }
        let chart = Chart {
            title: "Uncoded BER, multipath Rayleigh fading".into(),
            x,
            y: ber_axis(1e-5),
            curves,
            legend: SeriesLabelPosition::LowerLeft,
        };
        files.extend(write_chart("ber_fading", &chart, dir)?);
    }
    Ok(files)
}
