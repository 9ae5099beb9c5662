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
use crate::scenario::{ChannelProfile, Scenario};
use crate::theory::fading::clarke_coherence_time;
use crate::theory::freq_corr::exp_pdp_coherence_bandwidth;
use crate::theory::ici::{cfo_sir_exact_db, doppler_sir_exact_db};
use crate::theory::isi::isi_ici_fraction;

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
    /// The assumptions behind the figures.
    pub assumptions: Vec<String>,
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
        assumptions: vec![
            "Doppler: classical (Jakes) spectrum at the scenario's maximum speed".into(),
            "delay: exponential profile of the scenario's RMS spread on the sampling grid \
             (AWGN: one tap)"
                .into(),
            "interference figures: data on all subcarriers, one-tap reference".into(),
        ],
    })
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
    }
}
