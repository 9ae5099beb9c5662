//! The link report: what the receiver measured about its channel, per symbol and per frame,
//! in one small `Copy` struct a link layer can choose a rate from (and `defmt` can print).
//!
//! The report is assembled from the trackers' outputs ([`ReportInputs`]); each tracker is
//! optional, so firmware that runs only some of them still gets a report, with flags saying
//! which figures are measured. Figures without a measurement are 0 and their flag is clear.
//!
//! * SNR, EVM, MER, noise and interference: [`crate::noise_track`].
//! * Doppler: [`crate::doppler`]; predicted ICI: [`crate::ici`] from the tracker's own
//!   Doppler and residual-CFO estimates; measured noise + ICI: the pilot residuals'
//!   noise-plus-distortion level against the signal (what the estimator and equalizer see).
//! * Delay spread: [`crate::delay_spread`]; image rejection: [`crate::iq_image`].
//! * CFO and SCO: from synchronisation ([`crate::frame`], [`crate::sco`]).

use crate::delay_spread::DelaySpread;
use crate::doppler::{DopplerEstimate, DopplerStatus};
use crate::ici::IciPrediction;
use crate::iq_image::IqImage;
use crate::noise_track::NoiseStats;

/// Quality flags of a [`LinkReport`] (bit masks of [`LinkReport::flags`]).
pub mod flags {
    /// SNR, EVM and MER are measured.
    pub const SNR: u16 = 1 << 0;
    /// The Doppler figure is an estimate inside its valid range.
    pub const DOPPLER_VALID: u16 = 1 << 1;
    /// The Doppler is below the resolvable range (the figure is an upper bound).
    pub const DOPPLER_BELOW_RANGE: u16 = 1 << 2;
    /// The Doppler is above the range (or the pilot SNR too low; the figure is a lower bound).
    pub const DOPPLER_ABOVE_RANGE: u16 = 1 << 3;
    /// The predicted ICI figure is available.
    pub const ICI_PREDICTED: u16 = 1 << 4;
    /// The delay spread is measured and resolved above the noise.
    pub const DELAY_SPREAD: u16 = 1 << 5;
    /// The image rejection is resolved (otherwise the figure is the noise ceiling).
    pub const IMAGE_RESOLVED: u16 = 1 << 6;
    /// One or more bins are flagged as interfered.
    pub const INTERFERENCE: u16 = 1 << 7;
    /// Samples were clipped.
    pub const CLIPPING: u16 = 1 << 8;
    /// The predicted ICI limits the SINR: signal-to-ICI below the SNR.
    pub const ICI_LIMITED: u16 = 1 << 9;
    /// CFO (total) is measured.
    pub const CFO: u16 = 1 << 10;
    /// SCO is measured.
    pub const SCO: u16 = 1 << 11;
}

/// Largest count of interfered bins listed by index in a report.
pub const MAX_LISTED_BINS: usize = 4;

/// What the receiver measured (dB figures are 10·log10 of power ratios; 0 with the flag
/// clear when not measured).
#[derive(Clone, Copy, Debug, Default, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct LinkReport {
    /// Symbols the report covers.
    pub symbols: u32,
    /// Es·|H|²/N0 over the data bins (thermal noise only), dB.
    pub snr_db: f32,
    /// Mean SINR over the data bins including estimated interference and the estimator's
    /// error, dB (of the mean linear SINR).
    pub sinr_db: f32,
    /// Decision-directed EVM on the data bins, dB (`20·log10` of the RMS ratio).
    pub evm_db: f32,
    /// Modulation error ratio on the data bins, dB.
    pub mer_db: f32,
    /// Total CFO of the frame, subcarrier spacings.
    pub cfo: f32,
    /// Residual CFO after correction, subcarrier spacings.
    pub residual_cfo: f32,
    /// Sampling clock offset, ppm (receiver clock fast: positive).
    pub sco_ppm: f32,
    /// Maximum Doppler times the useful symbol time, `fd·T`.
    pub doppler_fd_t: f32,
    /// Maximum Doppler, Hz.
    pub doppler_hz: f32,
    /// Predicted signal-to-ICI ratio from the Doppler and residual-CFO estimates, dB.
    pub ici_predicted_sir_db: f32,
    /// Measured signal to noise-plus-ICI-plus-distortion on the pilots, dB.
    pub noise_ici_measured_db: f32,
    /// RMS delay spread, samples.
    pub delay_spread_samples: f32,
    /// Image rejection ratio, dB (the ceiling when not resolved).
    pub image_rejection_db: f32,
    /// Number of bins flagged as interfered.
    pub interferer_count: u16,
    /// The first [`MAX_LISTED_BINS`] interfered FFT bins, ascending (unused entries
    /// `u16::MAX`).
    pub interferer_bins: [u16; MAX_LISTED_BINS],
    /// Components clipped (ADC, gain, NCO).
    pub clipped: u32,
    /// Quality flags ([`flags`]).
    pub flags: u16,
}

/// The trackers' outputs a report is assembled from; every part is optional.
#[derive(Clone, Copy, Debug, Default)]
pub struct ReportInputs<'a> {
    /// Noise tracker statistics.
    pub noise: Option<NoiseStats>,
    /// Interfered FFT bins, ascending.
    pub interfered: &'a [u16],
    /// Mean linear SINR over the data bins (e.g. the receiver's per-bin SINR output).
    pub mean_sinr: Option<f32>,
    /// Doppler estimate and the symbol period `Tsym` (s) to express it in Hz.
    pub doppler: Option<(DopplerEstimate, f32)>,
    /// ICI prediction from the Doppler and residual-CFO estimates.
    pub ici: Option<IciPrediction>,
    /// Delay spread estimate.
    pub delay: Option<DelaySpread>,
    /// Image rejection estimate.
    pub image: Option<IqImage>,
    /// Total and residual CFO, subcarrier spacings.
    pub cfo: Option<(f32, f32)>,
    /// SCO, ppm.
    pub sco_ppm: Option<f32>,
    /// Clipped components.
    pub clipped: u32,
}

fn db(x: f32) -> f32 {
    if x > 0.0 {
        10.0 * libm::log10f(x)
    } else {
        -300.0
    }
}

fn finite_or_zero(x: f32) -> f32 {
    if x.is_finite() {
        x
    } else {
        0.0
    }
}

impl LinkReport {
    /// Assembles a report from whatever was measured.
    pub fn assemble(inputs: &ReportInputs<'_>) -> Self {
        let mut r = LinkReport {
            interferer_bins: [u16::MAX; MAX_LISTED_BINS],
            clipped: inputs.clipped,
            ..LinkReport::default()
        };
        if inputs.clipped > 0 {
            r.flags |= flags::CLIPPING;
        }
        if let Some(n) = inputs.noise {
            r.symbols = n.symbols;
            if n.noise_var > 0.0 {
                r.flags |= flags::SNR;
                r.snr_db = finite_or_zero(n.snr_db);
                r.evm_db = if n.evm_data > 0.0 {
                    finite_or_zero(2.0 * db(n.evm_data))
                } else {
                    0.0
                };
                r.mer_db = finite_or_zero(n.mer_db);
                if n.pilot_noise_var > 0.0 && n.evm_pilot > 0.0 {
                    // Signal on the pilots = N0/EVM²; distortion = the pilot residual level.
                    let signal = n.noise_var / (n.evm_pilot * n.evm_pilot);
                    r.noise_ici_measured_db = finite_or_zero(db(signal / n.pilot_noise_var));
                }
            }
        }
        r.interferer_count = inputs.interfered.len().min(usize::from(u16::MAX)) as u16;
        for (d, s) in r.interferer_bins.iter_mut().zip(inputs.interfered) {
            *d = *s;
        }
        if r.interferer_count > 0 {
            r.flags |= flags::INTERFERENCE;
        }
        if let Some(s) = inputs.mean_sinr {
            r.sinr_db = finite_or_zero(db(s));
        }
        if let Some((d, tsym)) = inputs.doppler {
            r.doppler_fd_t = finite_or_zero(d.fd_t);
            r.doppler_hz = if tsym > 0.0 {
                finite_or_zero(d.fd_tsym / tsym)
            } else {
                0.0
            };
            r.flags |= match d.status {
                DopplerStatus::Valid => flags::DOPPLER_VALID,
                DopplerStatus::BelowRange => flags::DOPPLER_BELOW_RANGE,
                DopplerStatus::AboveRange => flags::DOPPLER_ABOVE_RANGE,
            };
        }
        if let Some(p) = inputs.ici {
            r.ici_predicted_sir_db = finite_or_zero(p.sir_db);
            r.flags |= flags::ICI_PREDICTED;
            if r.flags & flags::SNR != 0 && p.sir_db < r.snr_db {
                r.flags |= flags::ICI_LIMITED;
            }
        }
        if let Some(d) = inputs.delay {
            r.delay_spread_samples = finite_or_zero(d.rms_delay_samples);
            if d.resolved {
                r.flags |= flags::DELAY_SPREAD;
            }
        }
        if let Some(i) = inputs.image {
            r.image_rejection_db = finite_or_zero(if i.resolved { i.irr_db } else { i.ceiling_db });
            if i.resolved {
                r.flags |= flags::IMAGE_RESOLVED;
            }
        }
        if let Some((cfo, resid)) = inputs.cfo {
            r.cfo = finite_or_zero(cfo);
            r.residual_cfo = finite_or_zero(resid);
            r.flags |= flags::CFO;
        }
        if let Some(s) = inputs.sco_ppm {
            r.sco_ppm = finite_or_zero(s);
            r.flags |= flags::SCO;
        }
        r
    }

    /// Whether flag `mask` ([`flags`]) is set.
    pub fn has(&self, mask: u16) -> bool {
        self.flags & mask == mask
    }
}

/// The link report in integers, for the integer (Cortex-M0) path: the same figures as
/// [`LinkReport`] in fixed point (dB as Q8, i.e. dB·256; ratios of a subcarrier spacing and
/// `fd·T` as Q16; delay as Q16 samples; SCO as ppm Q8). The integer trackers fill it; the
/// host reads it with [`LinkReportQ15::to_report`].
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct LinkReportQ15 {
    /// Symbols the report covers.
    pub symbols: u32,
    /// SNR, dB Q8.
    pub snr_db_q8: i16,
    /// Mean per-bin SINR, dB Q8.
    pub sinr_db_q8: i16,
    /// Decision-directed EVM, dB Q8.
    pub evm_db_q8: i16,
    /// MER, dB Q8.
    pub mer_db_q8: i16,
    /// Total CFO, subcarrier spacings Q16.
    pub cfo_q16: i32,
    /// Residual CFO, subcarrier spacings Q16.
    pub residual_cfo_q16: i32,
    /// SCO, ppm Q8.
    pub sco_ppm_q8: i32,
    /// `fd·T`, Q16.
    pub doppler_fd_t_q16: u32,
    /// Predicted signal-to-ICI ratio, dB Q8.
    pub ici_predicted_sir_db_q8: i16,
    /// Measured signal to noise-plus-ICI on the pilots, dB Q8.
    pub noise_ici_measured_db_q8: i16,
    /// RMS delay spread, samples Q16.
    pub delay_spread_q16: u32,
    /// Image rejection ratio, dB Q8.
    pub image_rejection_db_q8: i16,
    /// Bins flagged as interfered.
    pub interferer_count: u16,
    /// The first [`MAX_LISTED_BINS`] interfered FFT bins (`u16::MAX` unused).
    pub interferer_bins: [u16; MAX_LISTED_BINS],
    /// Components clipped.
    pub clipped: u32,
    /// Quality flags ([`flags`], the same bits as [`LinkReport`]).
    pub flags: u16,
}

impl LinkReportQ15 {
    /// The same report in floating point (host side; `tsym_s` the symbol period with CP, s,
    /// for the Doppler in Hz).
    pub fn to_report(&self, tsym_s: f32, fft_len: usize, cp_len: usize) -> LinkReport {
        let db = |v: i16| f32::from(v) / 256.0;
        let fd_t = self.doppler_fd_t_q16 as f32 / 65536.0;
        let fd_tsym = if fft_len > 0 {
            fd_t * (fft_len + cp_len) as f32 / fft_len as f32
        } else {
            0.0
        };
        LinkReport {
            symbols: self.symbols,
            snr_db: db(self.snr_db_q8),
            sinr_db: db(self.sinr_db_q8),
            evm_db: db(self.evm_db_q8),
            mer_db: db(self.mer_db_q8),
            cfo: self.cfo_q16 as f32 / 65536.0,
            residual_cfo: self.residual_cfo_q16 as f32 / 65536.0,
            sco_ppm: self.sco_ppm_q8 as f32 / 256.0,
            doppler_fd_t: fd_t,
            doppler_hz: if tsym_s > 0.0 { fd_tsym / tsym_s } else { 0.0 },
            ici_predicted_sir_db: db(self.ici_predicted_sir_db_q8),
            noise_ici_measured_db: db(self.noise_ici_measured_db_q8),
            delay_spread_samples: self.delay_spread_q16 as f32 / 65536.0,
            image_rejection_db: db(self.image_rejection_db_q8),
            interferer_count: self.interferer_count,
            interferer_bins: self.interferer_bins,
            clipped: self.clipped,
            flags: self.flags,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn an_empty_report_is_all_zero_with_no_flags_and_never_nan() {
        let r = LinkReport::assemble(&ReportInputs::default());
        assert_eq!(r.flags, 0);
        assert_eq!(r.interferer_bins, [u16::MAX; MAX_LISTED_BINS]);
        let nan = NoiseStats {
            noise_var: 1.0,
            snr_db: f32::NAN,
            mer_db: f32::INFINITY,
            ..NoiseStats::default()
        };
        let r = LinkReport::assemble(&ReportInputs {
            noise: Some(nan),
            interfered: &[3, 9, 12, 20, 41],
            clipped: 2,
            ..ReportInputs::default()
        });
        assert!(r.snr_db.is_finite() && r.mer_db.is_finite());
        assert_eq!(r.interferer_count, 5);
        assert_eq!(r.interferer_bins, [3, 9, 12, 20]);
        assert!(r.has(flags::INTERFERENCE | flags::CLIPPING | flags::SNR));
        // The structs stay small enough to send every symbol.
        assert!(core::mem::size_of::<LinkReport>() <= 80);
        assert!(core::mem::size_of::<LinkReportQ15>() <= 64);
        let q = LinkReportQ15 {
            snr_db_q8: 20 * 256 + 128,
            doppler_fd_t_q16: 6554,
            ..LinkReportQ15::default()
        };
        let r = q.to_report(288e-6, 64, 8);
        assert_eq!(r.snr_db, 20.5);
        // fd·T 0.1 with T = 256 µs: fd = 390.6 Hz.
        assert!((r.doppler_hz - 390.6).abs() < 0.1);
    }
}
