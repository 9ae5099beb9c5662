//! Channel characterisation of a scenario: Doppler, coherence time and bandwidth, delay spread
//! against the cyclic prefix, and the interference they predict — the numbers to look at before
//! choosing a numerology. (Text and JSON; plots come later.)
//!
//! Assumptions, printed with the summary: classical (Jakes) Doppler spectrum at the scenario's
//! maximum speed; an exponential power delay profile of the scenario's RMS delay spread sampled
//! on the scenario's grid (AWGN profile: a single tap); data on all used subcarriers.

use anyhow::Result;
use serde::Serialize;

use crate::channel::profile::{DelayProfile, Quantisation};
use crate::scenario::{ChannelProfile, InterfererKind, Scenario};
use crate::theory::fading::clarke_coherence_time;
use crate::theory::freq_corr::exp_pdp_coherence_bandwidth;
use crate::theory::ici::{cfo_sir_exact_db, doppler_sir_exact_db, sir_db_from_ici};
use crate::theory::iq_image::image_rejection_db;
use crate::theory::isi::isi_ici_fraction;
use crate::theory::phase_noise::{
    phase_noise_cpe_step_variance, phase_noise_cpe_variance, phase_noise_ici_exact,
};

/// What the channel of a scenario means for its numerology.
#[derive(Clone, Debug, Serialize)]
pub struct ChannelSummary {
    /// Maximum Doppler shift fd, Hz.
    pub doppler_hz: f64,
    /// Normalised Doppler fd·T (useful symbol time T = N/fs).
    pub doppler_norm: f64,
    /// Symbol period with CP, s.
    pub symbol_period_s: f64,
    /// Time over which the channel correlation stays ≥ 0.5 (J0 = 0.5), s; none without motion.
    pub coherence_time_s: Option<f64>,
    /// RMS delay spread, s, and in samples.
    pub rms_delay_s: f64,
    /// RMS delay spread in samples.
    pub rms_delay_samples: f64,
    /// Largest delay of the simulated (sampled, truncated) profile, samples.
    pub max_delay_samples: usize,
    /// Cyclic prefix, samples.
    pub cp_samples: usize,
    /// Bandwidth over which |r_f| ≥ 0.5 for the exponential profile, Hz; none when flat.
    pub coherence_bandwidth_hz: Option<f64>,
    /// Doppler ICI signal-to-interference ratio (exact Jakes sum), dB.
    pub doppler_sir_db: f64,
    /// CFO signal-to-interference ratio (exact sum) for the scenario's CFO, dB (infinite at 0).
    pub cfo_sir_db: f64,
    /// ISI + ICI from taps beyond the CP, fraction of received power.
    pub isi_ici_fraction: f64,
    /// What the scenario's front-end impairments predict.
    pub impairments: ImpairmentSummary,
    /// The assumptions behind the figures.
    pub assumptions: Vec<String>,
}

/// Predicted effect of each front-end impairment of a scenario (`None`: that impairment is off).
#[derive(Clone, Debug, Default, Serialize)]
pub struct ImpairmentSummary {
    /// CFO in subcarrier spacings ε.
    pub cfo_subcarriers: f64,
    /// Phase noise: linewidth × useful symbol time βT.
    pub phase_noise_beta_t: Option<f64>,
    /// Phase-noise ICI signal-to-interference ratio (exact Wiener sum), dB.
    pub phase_noise_sir_db: Option<f64>,
    /// RMS common phase error relative to the window start, degrees.
    pub phase_noise_cpe_rms_deg: Option<f64>,
    /// RMS change of the common phase error from one symbol to the next, degrees.
    pub phase_noise_cpe_step_rms_deg: Option<f64>,
    /// Image rejection ratio of the IQ imbalance (image SIR at equal mirror power), dB.
    pub image_rejection_db: Option<f64>,
    /// DC power relative to the signal power, dBc (it falls on the DC bin).
    pub dc_dbc: Option<f64>,
    /// ADC SQNR for a Gaussian-like signal at the back-off, no clipping, dB.
    pub adc_sqnr_db: Option<f64>,
    /// Probability that one branch sample clips at that back-off (Gaussian signal).
    pub adc_clip_probability: Option<f64>,
    /// Sampling-clock drift over one frame, samples.
    pub sco_drift_per_frame_samples: f64,
    /// Timing offset, samples.
    pub timing_offset_samples: f64,
    /// Interferer: signal-to-interference ratio while on, dB.
    pub interferer_sir_db: Option<f64>,
    /// Interferer: the subcarriers it covers (FFT bin indices, lowest to highest, may wrap).
    pub interferer_bins: Option<(i64, i64)>,
}

/// Characterises the channel of `scenario`.
pub fn characterise(scenario: &Scenario) -> Result<ChannelSummary> {
    let fs = scenario.band.sample_rate_hz;
    let n = scenario.numerology.fft_len;
    let cp = scenario.numerology.cp_len;
    let fd = scenario.max_doppler_hz();
    let fd_t = fd * n as f64 / fs;
    let rms = match scenario.channel.profile {
        ChannelProfile::Awgn => 0.0,
        ChannelProfile::Exponential => scenario.channel.rms_delay_spread_s,
    };
    let profile = DelayProfile::exponential(rms, fs)?;
    let taps = profile.to_sample_taps(fs, Quantisation::Nearest);
    let eps = scenario.impairments.cfo_hz / (fs / n as f64);
    Ok(ChannelSummary {
        doppler_hz: fd,
        doppler_norm: fd_t,
        symbol_period_s: (n + cp) as f64 / fs,
        coherence_time_s: if fd > 0.0 {
            clarke_coherence_time(fd, 0.5)
        } else {
            None
        },
        rms_delay_s: rms,
        rms_delay_samples: rms * fs,
        max_delay_samples: taps.iter().map(|t| t.0).max().unwrap_or(0),
        cp_samples: cp,
        coherence_bandwidth_hz: if rms > 0.0 {
            exp_pdp_coherence_bandwidth(rms, 0.5)
        } else {
            None
        },
        doppler_sir_db: doppler_sir_exact_db(fd_t, n),
        cfo_sir_db: if eps == 0.0 {
            f64::INFINITY
        } else {
            cfo_sir_exact_db(eps, n)
        },
        isi_ici_fraction: isi_ici_fraction(&taps, cp, n),
        impairments: impairment_summary(scenario),
        assumptions: vec![
            "Doppler: classical (Jakes) spectrum at the scenario's maximum speed".into(),
            "delay: exponential profile of the scenario's RMS spread on the sampling grid \
             (AWGN: one tap)"
                .into(),
            "interference figures: data on all subcarriers, one-tap reference".into(),
            "ADC: Gaussian-like OFDM signal, ideal AGC at the stated back-off, uniform \
             quantisation"
                .into(),
        ],
    })
}

/// Predicted effect of each of the scenario's impairments.
pub fn impairment_summary(scenario: &Scenario) -> ImpairmentSummary {
    let imp = &scenario.impairments;
    let fs = scenario.band.sample_rate_hz;
    let n = scenario.numerology.fft_len;
    let cp = scenario.numerology.cp_len;
    let spacing = fs / n as f64;
    let on = |active: bool, v: f64| active.then_some(v);
    let beta_t = imp.phase_noise_linewidth_hz * n as f64 / fs;
    let pn = imp.phase_noise_linewidth_hz > 0.0;
    let iq = imp.iq_gain_db != 0.0 || imp.iq_phase_deg != 0.0;
    let dc_sq = imp.dc_offset_i.powi(2) + imp.dc_offset_q.powi(2);
    let adc = imp.adc_bits > 0;
    // Clip level in branch standard deviations: full scale 1 per branch against a branch
    // variance of 10^(−B/10)/2 (total power at −B dBFS), so √2·10^(B/20).
    let clip_sigma = std::f64::consts::SQRT_2 * 10f64.powf(imp.adc_backoff_db / 20.0);
    let intf = &imp.interferer;
    let intf_on = intf.kind != InterfererKind::None && intf.duty_cycle > 0.0;
    let half_width = match intf.kind {
        InterfererKind::Noise => intf.bandwidth_hz / 2.0,
        _ => 0.0,
    };
    let frame = scenario.link.symbols_per_frame * (n + cp);
    ImpairmentSummary {
        cfo_subcarriers: imp.cfo_hz / spacing,
        phase_noise_beta_t: on(pn, beta_t),
        phase_noise_sir_db: on(pn, sir_db_from_ici(phase_noise_ici_exact(beta_t, n))),
        phase_noise_cpe_rms_deg: on(pn, phase_noise_cpe_variance(beta_t, n).sqrt().to_degrees()),
        phase_noise_cpe_step_rms_deg: on(
            pn,
            phase_noise_cpe_step_variance(beta_t, n, cp)
                .sqrt()
                .to_degrees(),
        ),
        image_rejection_db: on(iq, image_rejection_db(imp.iq_gain_db, imp.iq_phase_deg)),
        // DC of d × full scale against a signal of power 10^(−B/10) (full scale 1).
        dc_dbc: on(dc_sq > 0.0, 10.0 * dc_sq.log10() + imp.adc_backoff_db),
        // Total power 10^(−B/10) over two branches of quantisation noise Δ²/12 each, Δ = 2^(1−b):
        // 6.02·b + 1.76 − B dB, the full-scale-sinusoid rule (common practice).
        adc_sqnr_db: on(
            adc,
            6.02 * f64::from(imp.adc_bits) + 1.76 - imp.adc_backoff_db,
        ),
        adc_clip_probability: on(adc, libm::erfc(clip_sigma / std::f64::consts::SQRT_2)),
        sco_drift_per_frame_samples: imp.sco_ppm * 1e-6 * frame as f64,
        timing_offset_samples: imp.timing_offset_samples,
        interferer_sir_db: on(intf_on, -intf.power_dbc),
        interferer_bins: on(intf_on, 0.0).map(|_| {
            (
                ((intf.frequency_hz - half_width) / spacing).round() as i64,
                ((intf.frequency_hz + half_width) / spacing).round() as i64,
            )
        }),
    }
}

/// The summary as text.
pub fn render_text(s: &ChannelSummary) -> String {
    use std::fmt::Write;
    let mut t = String::new();
    let opt = |v: Option<f64>, scale: f64, unit: &str| {
        v.map_or("—".to_string(), |x| format!("{:.3} {unit}", x * scale))
    };
    let _ = writeln!(
        t,
        "Doppler fd            {:.2} Hz   (fd·T = {:.4})",
        s.doppler_hz, s.doppler_norm
    );
    let _ = writeln!(t, "symbol period         {:.1} µs", s.symbol_period_s * 1e6);
    let _ = writeln!(
        t,
        "coherence time (0.5)  {}",
        opt(s.coherence_time_s, 1e3, "ms")
    );
    let _ = writeln!(
        t,
        "RMS delay spread      {:.3} µs ({:.2} samples); max delay {} samples vs CP {}",
        s.rms_delay_s * 1e6,
        s.rms_delay_samples,
        s.max_delay_samples,
        s.cp_samples
    );
    let _ = writeln!(
        t,
        "coherence bandwidth   {}",
        opt(s.coherence_bandwidth_hz, 1e-3, "kHz")
    );
    let _ = writeln!(t, "Doppler ICI SIR       {:.1} dB", s.doppler_sir_db);
    let _ = writeln!(t, "CFO ICI SIR           {:.1} dB", s.cfo_sir_db);
    let isi = if s.isi_ici_fraction > 0.0 {
        format!(
            "{:.1} dB below the signal",
            -10.0 * s.isi_ici_fraction.log10()
        )
    } else {
        "none (the profile fits the CP)".to_string()
    };
    let _ = writeln!(t, "ISI + ICI beyond CP   {isi}");
    let i = &s.impairments;
    let _ = writeln!(t, "impairments:");
    let _ = writeln!(
        t,
        "  CFO                 {:.4} subcarrier spacings",
        i.cfo_subcarriers
    );
    if let (Some(bt), Some(sir), Some(cpe), Some(step)) = (
        i.phase_noise_beta_t,
        i.phase_noise_sir_db,
        i.phase_noise_cpe_rms_deg,
        i.phase_noise_cpe_step_rms_deg,
    ) {
        let _ = writeln!(
            t,
            "  phase noise         βT = {bt:.2e}: ICI SIR {sir:.1} dB, CPE {cpe:.2}° RMS \
             ({step:.2}° symbol to symbol)"
        );
    }
    if let Some(irr) = i.image_rejection_db {
        let _ = writeln!(t, "  IQ imbalance        image rejection {irr:.1} dB");
    }
    if let Some(dc) = i.dc_dbc {
        let _ = writeln!(t, "  DC offset           {dc:.1} dBc on the DC bin");
    }
    if let (Some(q), Some(p)) = (i.adc_sqnr_db, i.adc_clip_probability) {
        let _ = writeln!(
            t,
            "  ADC                 SQNR {q:.1} dB, clip probability {p:.1e} per branch sample"
        );
    }
    if i.sco_drift_per_frame_samples != 0.0 || i.timing_offset_samples != 0.0 {
        let _ = writeln!(
            t,
            "  timing              offset {:.2} samples, clock drift {:.3} samples per frame",
            i.timing_offset_samples, i.sco_drift_per_frame_samples
        );
    }
    if let (Some(sir), Some((lo, hi))) = (i.interferer_sir_db, i.interferer_bins) {
        let _ = writeln!(
            t,
            "  interferer          SIR {sir:.1} dB while on, bins {lo}..={hi}"
        );
    }
    let _ = writeln!(t, "assumptions:");
    for a in &s.assumptions {
        let _ = writeln!(t, "  - {a}");
    }
    t
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn default_scenario_by_hand() {
        // Invented default: 120 km/h at 915 MHz → fd = 33.33 m/s · 915e6 / 299 792 458
        // = 101.74 Hz; T = 64/250 kHz = 256 µs → fd·T = 0.02605; Tsym = 288 µs (arithmetic
        // by hand). AWGN profile: one tap, nothing beyond the CP.
        let s = characterise(&Scenario::default_scenario()).unwrap();
        assert!((s.doppler_hz - 101.737).abs() < 0.01, "{}", s.doppler_hz);
        assert!((s.doppler_norm - 0.026045).abs() < 1e-5);
        assert!((s.symbol_period_s - 288e-6).abs() < 1e-12);
        assert_eq!(s.isi_ici_fraction, 0.0);
        // Coherence time at correlation 0.5: fd·τ = 0.242098 (REFERENCES item 3 helpers).
        assert!((s.coherence_time_s.unwrap() * s.doppler_hz - 0.242098).abs() < 1e-5);
        assert!(render_text(&s).contains("Doppler fd"));
        // Every impairment is off in the default scenario.
        assert!(s.impairments.phase_noise_sir_db.is_none());
        assert!(s.impairments.adc_sqnr_db.is_none());
        assert!(s.impairments.interferer_bins.is_none());
    }

    #[test]
    fn impairment_figures_by_hand() {
        let mut sc = Scenario::default_scenario();
        sc.impairments.adc_bits = 10;
        sc.impairments.adc_backoff_db = 12.0;
        sc.impairments.phase_noise_linewidth_hz = 39.0625; // βT = 39.0625 · 256 µs = 0.01
        sc.impairments.interferer.kind = InterfererKind::Noise;
        sc.impairments.interferer.frequency_hz = 31_250.0; // bin 8 at 3906.25 Hz spacing
        sc.impairments.interferer.bandwidth_hz = 15_625.0; // 4 bins → 6..=10
        let i = impairment_summary(&sc);
        // 6.02·10 + 1.76 − 12 = 49.96 dB (arithmetic by hand of the common-practice rule).
        assert!((i.adc_sqnr_db.unwrap() - 49.96).abs() < 1e-9);
        // Clip at √2·10^(12/20) = 5.631σ: P(|x| > 5.631σ) = 1.801e-8 (erfc(3.981), evaluated
        // with Python's math.erfc).
        assert!((i.adc_clip_probability.unwrap() / 1.801e-8 - 1.0).abs() < 0.01);
        assert!((i.phase_noise_beta_t.unwrap() - 0.01).abs() < 1e-12);
        // CPE variance ≈ 2πβT/3 = 0.020944 rad² → 8.29° RMS (Armada 2001 limit, from memory).
        assert!((i.phase_noise_cpe_rms_deg.unwrap() - 8.29).abs() < 0.1);
        assert_eq!(i.interferer_bins, Some((6, 10)));
    }
}
