//! Published closed forms, each with its source.
//!
//! * [`ber`]: bit and symbol error rates of Gray-mapped BPSK, QPSK and square M-QAM over AWGN and
//!   flat Rayleigh fading (Cho & Yoon 2002; Proakis & Salehi 2008; Simon & Alouini 2005), plus
//!   dB helpers and the Eb/N0 needed for a target BER.
//! * [`conv_code`]: distance spectrum of the K = 7 (133, 171) convolutional code and its
//!   punctured rates by a trellis search, and the soft/hard union bounds on its bit error rate
//!   (Viterbi 1971; Proakis & Salehi 2008; Yasuda, Kashiki & Hirata 1984).
//! * [`ici`]: Doppler ICI for the classical spectrum (Russell & Stüber 1995; Li & Cimini 2001)
//!   and CFO leakage, ICI, SIR and SNR loss (Moose 1994; Pollet et al. 1995; Shu et al. 2006).
//! * [`fading`]: Clarke/Jakes fading statistics: ACF, Doppler PSD, envelope CDF, level-crossing
//!   rate, average fade duration and coherence time (Clarke 1968; Jakes 1974; Rappaport 2002).
//! * [`estimation`]: analytic MSE of any linear pilot-aided channel estimator and the LMMSE
//!   (Wiener) weights for a separable time x frequency correlation, plus the effective SNR of
//!   an estimate (Li, Cimini & Sollenberger 1998; Edfors et al. 1998; Hoeher, Kaiser &
//!   Robertson 1997; Hassibi & Hochwald 2003).
//! * [`freq_corr`]: frequency correlation of exponential and discrete delay profiles and the
//!   coherence bandwidth (exponential Fourier pair; Rappaport 2002; Jakes 1974).
//! * [`isi`]: ISI + ICI from channel taps beyond the cyclic prefix (derived from the windowing).
//! * [`phase_noise`]: ICI and common phase error of Wiener phase noise (Pollet et al. 1995).
//! * [`iq_image`]: image rejection and image interference from IQ imbalance (Tarighat et al.
//!   2005).

pub mod ber;
pub mod conv_code;
pub mod estimation;
pub mod fading;
pub mod freq_corr;
pub mod ici;
pub mod iq_image;
pub mod isi;
pub mod phase_noise;

/// Test helpers shared by the theory modules' checks against REFERENCES.md tables.
#[cfg(test)]
pub(crate) mod table {
    /// Tables printed with 6 significant digits: relative tolerance 1e-5.
    pub(crate) const TABLE_REL: f64 = 1e-5;

    /// Asserts `|got − want| / |want| ≤ rel`, naming the check.
    pub(crate) fn assert_rel(got: f64, want: f64, rel: f64, what: &str) {
        let err = (got - want).abs() / want.abs();
        assert!(
            err <= rel,
            "{what}: got {got:e}, want {want:e}, relative error {err:e} > {rel:e}"
        );
    }
}
