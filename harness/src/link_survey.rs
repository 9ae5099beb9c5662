//! The link report on a scenario: frames of the scenario's channel and impairments through the
//! f32 receiver with every tracker of the core running, and what they report beside what the
//! scenario says is true.
//!
//! Assumptions (printed with the report): ideal frame timing (the FFT windows where the
//! transmitter put the symbols; acquisition and CFO correction are measured elsewhere), QPSK
//! data, a time-continuous Rayleigh channel from the scenario's profile and speed (sum of
//! sinusoids, Jakes spectrum), Es/N0 per data subcarrier as given, and the receiver weighting
//! its LLRs with the tracker's per-bin noise-plus-interference.

use anyhow::Result;
use flatbin::delay_spread::{DelaySpreadConfig, DelaySpreadEstimator};
use flatbin::doppler::{DopplerConfig, DopplerEstimator};
use flatbin::fft::MicroFft;
use flatbin::iq_image::IqImageEstimator;
use flatbin::link_report::{LinkReport, ReportInputs};
use flatbin::noise_track::{NoiseTrackConfig, NoiseTracker};
use flatbin::receiver::Receiver;
use flatbin::transmit::Transmitter;
use flatbin::{Cf32, Modulation, Numerology};
use rand::RngExt;
use serde::Serialize;

use crate::channel::profile::{DelayProfile, Quantisation};
use crate::channel::sos::FadingParams;
use crate::channel::tdl::{Tdl, Variation};
use crate::evaluate_fading::receiver_config;
use crate::fading_link::{RX_HISTORY, RX_TAPS};
use crate::noise::n0_for_es_n0_db;
use crate::rng::stream_rng;
use crate::rx_chain::RxChain;
use crate::scenario::{ChannelProfile, Scenario};

/// Random stream of the survey (distinct from the BER runs').
const STREAM_SURVEY: u64 = 0x5356;
/// Pilot history of the Doppler estimator, symbols.
const DOPPLER_HISTORY: usize = 32;

/// What the survey measured and what the scenario says.
#[derive(Clone, Debug, Serialize)]
pub struct LinkSurvey {
    /// Es/N0 per data subcarrier, dB.
    pub es_n0_db: f64,
    /// Frames and data symbols per frame.
    pub frames: usize,
    /// Data symbols per frame.
    pub symbols_per_frame: u32,
    /// The report after the last frame.
    #[serde(skip)]
    pub report: LinkReport,
    /// Figures of the report, for JSON: (label, measured, scenario value or None, unit).
    pub rows: Vec<SurveyRow>,
    /// The assumptions behind the figures.
    pub assumptions: Vec<String>,
}

/// One line of the survey.
#[derive(Clone, Debug, Serialize)]
pub struct SurveyRow {
    /// What is measured.
    pub label: String,
    /// The tracker's figure (None: not measured, see the note).
    pub measured: Option<f64>,
    /// What the scenario implies (None: nothing to compare with).
    pub scenario: Option<f64>,
    /// Unit.
    pub unit: String,
    /// Flag or validity note.
    pub note: String,
}

/// The scenario's delay profile on the sampling grid, `(delay in samples, power)`: one tap
/// for AWGN, the exponential profile otherwise.
pub fn sample_taps(scenario: &Scenario) -> Result<Vec<(usize, f64)>> {
    let fs = scenario.band.sample_rate_hz;
    Ok(match scenario.channel.profile {
        ChannelProfile::Awgn => vec![(0usize, 1.0f64)],
        ChannelProfile::Exponential => {
            DelayProfile::exponential(scenario.channel.rms_delay_spread_s, fs)?
                .to_sample_taps(fs, Quantisation::Nearest)
        }
    })
}

/// Runs `frames` frames of the scenario at `es_n0_db` and reports.
pub fn survey(
    scenario: &Scenario,
    numerology: &Numerology,
    es_n0_db: f64,
    frames: usize,
) -> Result<LinkSurvey> {
    crate::with_fft_len!(
        numerology.fft_len(),
        run(scenario, numerology, es_n0_db, frames)
    )
}

// Not inlined: `with_fft_len!` calls every size's instance from one function, and inlined
// they would share one stack frame sized for N = 4096 (a rayon worker has 2 MiB).
#[inline(never)]
fn run<const N: usize>(
    scenario: &Scenario,
    nu: &Numerology,
    es_n0_db: f64,
    frames: usize,
) -> Result<LinkSurvey> {
    let fs = scenario.band.sample_rate_hz;
    let ns = nu.symbol_len();
    let symbols = u32::try_from(scenario.link.symbols_per_frame)?;
    let n0 = n0_for_es_n0_db(es_n0_db);
    let m = Modulation::Qpsk;
    let taps = sample_taps(scenario)?;
    let doppler_hz = scenario.max_doppler_hz();
    let mut rng = stream_rng(scenario.seed, STREAM_SURVEY);
    let params = FadingParams::rayleigh(doppler_hz, fs, N);
    let mut line = Tdl::new(&taps, &params, Variation::Continuous, &mut rng);
    let mut chain = RxChain::from_scenario(scenario, STREAM_SURVEY + 1);
    let mut tx = Transmitter::new(*nu, MicroFft::<N>::new())?;
    let mut rx = Box::new(Receiver::<MicroFft<N>, N, RX_TAPS, RX_HISTORY>::new(
        nu,
        MicroFft::new(),
        receiver_config(scenario, nu, n0),
    )?);
    let mut noise = Box::new(NoiseTracker::<N>::new(nu, NoiseTrackConfig::default())?);
    let mut doppler = Box::new(DopplerEstimator::<N, N, DOPPLER_HISTORY>::new(
        nu,
        DopplerConfig::default(),
    )?);
    let mut image = Box::new(IqImageEstimator::<N>::new(nu)?);
    // The delay-spread floor: measured beyond the CP where the numerology leaves room,
    // otherwise the noise tracker's N0 after the first frame.
    let mut delay: Option<Box<DelaySpreadEstimator<MicroFft<N>, N>>> =
        match DelaySpreadConfig::measured(nu) {
            Ok(cfg) => Some(Box::new(DelaySpreadEstimator::new(
                nu,
                cfg,
                MicroFft::new(),
            )?)),
            Err(_) => None,
        };
    let mut eq = vec![Cf32::default(); N];
    let mut sinr = vec![0.0f32; N];
    let mut llr = vec![0.0f32; N * 8];
    let mut per_bin = vec![0.0f32; N];
    let mut clipped = 0u32;
    let (mut sinr_sum, mut sinr_n) = (0.0f64, 0usize);
    for frame in 0..frames {
        let mut x = Vec::with_capacity(ns * symbols as usize);
        for sym in 0..symbols {
            let b: Vec<u8> = (0..tx.bits_per_ofdm_symbol(m, sym))
                .map(|_| rng.random::<u8>() & 1)
                .collect();
            let mut s = vec![Cf32::default(); ns];
            tx.modulate(m, &b, sym, &mut s)?;
            x.extend_from_slice(&s);
        }
        let mut faded = vec![Cf32::default(); x.len()];
        line.process(&x, &mut faded);
        let power = faded.iter().map(|v| f64::from(v.norm_sqr())).sum::<f64>() / faded.len() as f64;
        let r = chain.receive(&faded, power, n0);
        clipped = clipped.saturating_add(r.clipped as u32);
        // Back to the transmitter's scale (the AGC only moved the level).
        let g = (1.0 / r.agc_gain) as f32;
        let samples: Vec<Cf32> = r.samples.iter().map(|v| v * g).collect();
        noise.start_frame(1.0);
        doppler.end_frame();
        rx.reset();
        if delay.is_none() && frame > 0 {
            let n0_hat = noise.frame_stats().noise_var;
            if n0_hat > 0.0 {
                delay = Some(Box::new(DelaySpreadEstimator::new(
                    nu,
                    DelaySpreadConfig::known(nu, n0_hat),
                    MicroFft::new(),
                )?));
            }
        }
        sinr_sum = 0.0;
        sinr_n = 0;
        for sym in 0..symbols {
            let w = &samples[sym as usize * ns..(sym as usize + 1) * ns];
            let k = noise.bin_noise(&mut per_bin);
            if noise.frame_stats().symbols > 0 || frame > 0 {
                rx.set_bin_noise(&per_bin[..k])?;
            }
            let c = rx.receive(w, sym, m, &mut eq, &mut sinr, &mut llr)?;
            noise.update(
                sym,
                rx.bins(),
                rx.estimator(),
                rx.common_phase(),
                &eq[..c.data_bins],
                m,
            )?;
            doppler.update(rx.bins(), sym)?;
            image.update(rx.bins(), sym)?;
            if let Some(d) = delay.as_mut() {
                d.update(rx.bins(), sym)?;
            }
            sinr_sum += sinr[..c.data_bins]
                .iter()
                .map(|&v| f64::from(v))
                .sum::<f64>();
            sinr_n += c.data_bins;
        }
    }
    let stats = noise.frame_stats();
    let mut flagged = vec![0u16; N];
    let nf = noise.interfered_bins(&mut flagged);
    let d = doppler.estimate();
    let ici =
        d.and_then(|d| flatbin::ici::predict(d.fd_t, 0.0, N, 10f32.powf(stats.snr_db / 10.0)).ok());
    let report = LinkReport::assemble(&ReportInputs {
        noise: Some(stats),
        interfered: &flagged[..nf],
        mean_sinr: (sinr_n > 0).then(|| (sinr_sum / sinr_n as f64) as f32),
        doppler: d.map(|d| (d, nu.symbol_period_s())),
        ici,
        delay: delay.as_ref().and_then(|d| d.estimate()),
        image: image.estimate(),
        cfo: None,
        sco_ppm: None,
        clipped,
    });
    let truth_fd_t = doppler_hz / f64::from(nu.subcarrier_spacing_hz());
    let truth_rms = {
        let p: f64 = taps.iter().map(|t| t.1).sum();
        let mean = taps.iter().map(|t| t.0 as f64 * t.1).sum::<f64>() / p;
        (taps
            .iter()
            .map(|t| (t.0 as f64 - mean).powi(2) * t.1)
            .sum::<f64>()
            / p)
            .sqrt()
    };
    let imp = &scenario.impairments;
    let irr_truth = (imp.iq_gain_db != 0.0 || imp.iq_phase_deg != 0.0)
        .then(|| crate::theory::iq_image::image_rejection_db(imp.iq_gain_db, imp.iq_phase_deg));
    let flag = |mask: u16| report.has(mask);
    use flatbin::link_report::flags;
    let measured = |ok: bool, v: f32| ok.then_some(f64::from(v));
    let rows = vec![
        SurveyRow {
            label: "SNR (Es/N0 per data subcarrier, last frame)".into(),
            measured: measured(flag(flags::SNR), report.snr_db),
            scenario: Some(es_n0_db),
            unit: "dB".into(),
            note: "scenario value is the average; a frame's own SNR follows its fading".into(),
        },
        SurveyRow {
            label: "mean per-bin SINR (LLR weights)".into(),
            measured: Some(f64::from(report.sinr_db)),
            scenario: None,
            unit: "dB".into(),
            note: "includes the estimator's error and tracked interference".into(),
        },
        SurveyRow {
            label: "EVM, decision-directed".into(),
            measured: measured(flag(flags::SNR), report.evm_db),
            scenario: None,
            unit: "dB".into(),
            note: String::new(),
        },
        SurveyRow {
            label: "MER".into(),
            measured: measured(flag(flags::SNR), report.mer_db),
            scenario: None,
            unit: "dB".into(),
            note: String::new(),
        },
        SurveyRow {
            label: "Doppler fd·T".into(),
            measured: Some(f64::from(report.doppler_fd_t)),
            scenario: Some(truth_fd_t),
            unit: "".into(),
            note: if flag(flags::DOPPLER_VALID) {
                "valid".into()
            } else if flag(flags::DOPPLER_BELOW_RANGE) {
                "below the resolvable range: an upper bound".into()
            } else if flag(flags::DOPPLER_ABOVE_RANGE) {
                "above the range: a lower bound".into()
            } else {
                "not measured".into()
            },
        },
        SurveyRow {
            label: "Doppler".into(),
            measured: Some(f64::from(report.doppler_hz)),
            scenario: Some(doppler_hz),
            unit: "Hz".into(),
            note: String::new(),
        },
        SurveyRow {
            label: "predicted ICI SIR (from the Doppler estimate)".into(),
            measured: measured(flag(flags::ICI_PREDICTED), report.ici_predicted_sir_db),
            scenario: Some(crate::theory::ici::doppler_sir_exact_db(truth_fd_t, N)),
            unit: "dB".into(),
            note: "exact Jakes sum (Russell & Stüber); scenario column at the true fd·T".into(),
        },
        SurveyRow {
            label: "measured signal / (noise + ICI + estimator mismatch), pilots".into(),
            measured: (report.noise_ici_measured_db != 0.0)
                .then_some(f64::from(report.noise_ici_measured_db)),
            scenario: None,
            unit: "dB".into(),
            note: String::new(),
        },
        SurveyRow {
            label: "RMS delay spread".into(),
            measured: Some(f64::from(report.delay_spread_samples)),
            scenario: Some(truth_rms),
            unit: "samples".into(),
            note: if flag(flags::DELAY_SPREAD) {
                "resolved; scenario column: the profile on the sampling grid (a fractional \
                 timing offset spreads the sampled response)"
                    .into()
            } else {
                "not resolved above the noise (or below the pilot kernel's resolution)".into()
            },
        },
        SurveyRow {
            label: "image rejection".into(),
            measured: Some(f64::from(report.image_rejection_db)),
            scenario: irr_truth,
            unit: "dB".into(),
            note: if flag(flags::IMAGE_RESOLVED) {
                "resolved".into()
            } else {
                "no image above the estimate's ceiling (figure is the ceiling)".into()
            },
        },
        SurveyRow {
            label: "interfered bins flagged".into(),
            measured: Some(f64::from(report.interferer_count)),
            scenario: None,
            unit: "bins".into(),
            note: format!(
                "first FFT bins {:?} (bin 0 is DC: a DC offset shows there)",
                &flagged[..nf.min(4)]
            ),
        },
        SurveyRow {
            label: "clipped components".into(),
            measured: Some(f64::from(report.clipped)),
            scenario: None,
            unit: "".into(),
            note: String::new(),
        },
    ];
    let assumptions = vec![
        format!(
            "{frames} frames × {symbols} QPSK symbols at Es/N0 {es_n0_db} dB per data subcarrier"
        ),
        "ideal frame timing and no CFO correction (synchronisation is measured separately)".into(),
        format!(
            "time-continuous Rayleigh channel: {} taps, fd {:.1} Hz (sum of sinusoids, Jakes)",
            taps.len(),
            doppler_hz
        ),
        "the scenario's impairments applied by the receive chain".into(),
        "Doppler needs about ten Doppler periods of observation; below its range it is a bound"
            .into(),
    ];
    Ok(LinkSurvey {
        es_n0_db,
        frames,
        symbols_per_frame: symbols,
        report,
        rows,
        assumptions,
    })
}

/// The survey as a text table.
pub fn render_text(s: &LinkSurvey) -> String {
    let mut out = String::from("\nLink report (what the receiver measures, beside the scenario)\n");
    out.push_str(&format!(
        "  {:<58} {:>10} {:>10}  {}\n",
        "figure", "measured", "scenario", "note"
    ));
    for r in &s.rows {
        let f = |v: Option<f64>| match v {
            Some(v) if v.abs() >= 0.01 || v == 0.0 => format!("{v:.2}"),
            Some(v) => format!("{v:.4}"),
            None => "—".into(),
        };
        let unit = if r.unit.is_empty() {
            String::new()
        } else {
            format!(" {}", r.unit)
        };
        out.push_str(&format!(
            "  {:<58} {:>10} {:>10}  {}{}\n",
            r.label,
            f(r.measured),
            f(r.scenario),
            unit.trim_start(),
            if r.note.is_empty() {
                String::new()
            } else {
                format!("; {}", r.note)
            }
        ));
    }
    out.push_str("  assumptions:\n");
    for a in &s.assumptions {
        out.push_str(&format!("    - {a}\n"));
    }
    out
}
