//! Typed errors. Configuration errors name the rule that was broken; processing errors name
//! the input that was rejected. Both are small `Copy` values, safe to log on a device.

use core::fmt;

/// A numerology, pilot pattern or stage configuration broke one of the layout rules.
///
/// Returned by constructors only; once a constructor returns `Ok`, the processing path does
/// not re-check these rules.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub enum ConfigError {
    /// FFT size must be a power of two in `16..=4096`.
    FftSizeUnsupported {
        /// The requested size.
        fft_len: usize,
    },
    /// The cyclic prefix must be shorter than the FFT: `cp_len < fft_len`.
    CyclicPrefixTooLong {
        /// The requested CP length, samples.
        cp_len: usize,
        /// The FFT size.
        fft_len: usize,
    },
    /// The sample rate must be finite and positive.
    SampleRateInvalid,
    /// The guard bands leave no used bin: each edge guard must be below `fft_len / 2`, and the
    /// low guard must be at least 1 so the Nyquist bin stays unused.
    GuardBandInvalid {
        /// Guard bins at the low edge.
        guard_low_bins: usize,
        /// Guard bins at the high edge.
        guard_high_bins: usize,
    },
    /// The pilot spacing must be at least 1 used bin.
    PilotSpacingZero,
    /// The first pilot (and the per-symbol shift) must be below the pilot spacing, so that
    /// every used bin is reachable by the comb.
    PilotOffsetOutOfRange {
        /// The offending offset or shift, used bins.
        value: usize,
        /// The pilot spacing, used bins.
        spacing: usize,
    },
    /// A pilot would fall outside the used band (the first pilot index is beyond the last
    /// used bin).
    PilotOutsideUsedBand {
        /// Index of the pilot in used-bin numbering.
        used_index: usize,
        /// Number of used bins.
        used_len: usize,
    },
    /// Every symbol needs at least two pilots for interpolation.
    TooFewPilots {
        /// Smallest pilot count over the pattern's symbols.
        pilots: usize,
    },
    /// Every symbol needs at least one data bin.
    NoDataBins,
    /// Pilot boost must be finite and within `-20..=+12` dB.
    PilotBoostOutOfRange,
    /// The pilot PRBS seed must be nonzero (an all-zero LFSR never leaves zero).
    PilotSeedZero,
    /// The estimator needs `2 ≤ K ≤` lattice bins (pilot positions over the pattern).
    InterpolationTaps {
        /// Frequency taps per bin requested.
        taps: usize,
        /// Lattice bins available.
        lattice: usize,
    },
    /// The estimator's history depth must be 1..=255 and the pilot pattern period at most
    /// `estimate::MAX_PATTERN_PERIOD`.
    EstimatorHistoryUnsupported {
        /// History depth M.
        depth: usize,
        /// Pattern period, symbols.
        pattern_period: usize,
    },
    /// Channel model (delay spread, Doppler), noise variance or forgetting factor invalid:
    /// each must be finite, delay and Doppler ≥ 0, noise > 0, `0 ≤ λ < 1`.
    EstimatorModelInvalid,
    /// The estimator design was numerically singular (not positive definite).
    EstimatorDesignFailed,
    /// A stage was built for an FFT size that differs from the numerology's.
    FftSizeMismatch {
        /// FFT size of the numerology.
        numerology: usize,
        /// FFT size the stage was built for.
        stage: usize,
    },
    /// A tracker setting is invalid: forgetting factors must satisfy `0 ≤ λ < 1`, ratios
    /// and thresholds must be finite and within their documented range.
    TrackerSetting,
    /// A const-generic capacity of a stage is smaller than the numerology needs (e.g. pilots
    /// per symbol, or history symbols for the lags a stage uses).
    CapacityTooSmall {
        /// Elements the numerology needs.
        needed: usize,
        /// Elements the stage was built to hold.
        capacity: usize,
    },
}

impl fmt::Display for ConfigError {
    #[cold]
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match *self {
            Self::FftSizeUnsupported { fft_len } => write!(
                f,
                "FFT size {fft_len} unsupported: must be a power of two in 16..=4096"
            ),
            Self::CyclicPrefixTooLong { cp_len, fft_len } => write!(
                f,
                "cyclic prefix of {cp_len} samples is not shorter than the FFT size {fft_len}"
            ),
            Self::SampleRateInvalid => f.write_str("sample rate must be finite and positive"),
            Self::CapacityTooSmall { needed, capacity } => write!(
                f,
                "stage capacity {capacity} is below the {needed} elements the numerology needs"
            ),
            Self::TrackerSetting => f.write_str(
                "tracker setting invalid: forgetting factor must be in [0, 1), ratios and \
                 thresholds finite and within their documented range",
            ),
            Self::GuardBandInvalid {
                guard_low_bins,
                guard_high_bins,
            } => write!(
                f,
                "guard bands {guard_low_bins} (low) and {guard_high_bins} (high) invalid: \
                 low guard must be >= 1 (Nyquist bin) and each guard below N/2"
            ),
            Self::PilotSpacingZero => f.write_str("pilot spacing must be at least 1 used bin"),
            Self::PilotOffsetOutOfRange { value, spacing } => write!(
                f,
                "pilot offset/shift {value} must be below the pilot spacing {spacing}"
            ),
            Self::PilotOutsideUsedBand {
                used_index,
                used_len,
            } => write!(
                f,
                "pilot at used bin {used_index} lies outside the used band of {used_len} bins"
            ),
            Self::TooFewPilots { pilots } => write!(
                f,
                "a symbol would carry {pilots} pilot(s): at least 2 are needed for interpolation"
            ),
            Self::NoDataBins => f.write_str("the pilot pattern leaves no data bin in a symbol"),
            Self::PilotBoostOutOfRange => {
                f.write_str("pilot boost must be finite and within -20..=12 dB")
            }
            Self::PilotSeedZero => f.write_str("pilot PRBS seed must be nonzero"),
            Self::InterpolationTaps { taps, lattice } => write!(
                f,
                "{taps} interpolation taps per bin: need at least 2 and at most the {lattice} \
                 pilot positions"
            ),
            Self::EstimatorHistoryUnsupported {
                depth,
                pattern_period,
            } => write!(
                f,
                "history depth {depth} / pilot pattern period {pattern_period} unsupported: \
                 depth 1..=255, period at most 16"
            ),
            Self::EstimatorModelInvalid => f.write_str(
                "estimator model invalid: delay spread and Doppler finite and >= 0, noise \
                 variance finite and > 0, forgetting factor in [0, 1)",
            ),
            Self::EstimatorDesignFailed => {
                f.write_str("estimator design is singular (not positive definite)")
            }
            Self::FftSizeMismatch { numerology, stage } => write!(
                f,
                "stage built for FFT size {stage} but the numerology uses {numerology}"
            ),
        }
    }
}

impl core::error::Error for ConfigError {}

/// A processing call rejected its input. Nothing was written to the outputs that the caller
/// could mistake for a result; the stage's own state is unchanged.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub enum ProcessError {
    /// A buffer had the wrong length.
    BufferLength {
        /// Elements the call needs.
        expected: usize,
        /// Elements the caller gave.
        actual: usize,
    },
    /// A sample or bin value was NaN or infinite.
    NonFinite {
        /// Index of the first offending element in the input buffer.
        index: usize,
    },
    /// A bit value other than 0 or 1.
    InvalidBit {
        /// Index of the offending element.
        index: usize,
    },
    /// A channel-state weight (post-equalization SNR) was negative or not finite.
    InvalidWeight,
    /// A finite value outside the range the call accepts (each call documents its range).
    OutOfRange {
        /// Index of the offending element, or the position of a scalar argument.
        index: usize,
    },
}

impl fmt::Display for ProcessError {
    #[cold]
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match *self {
            Self::BufferLength { expected, actual } => {
                write!(f, "buffer holds {actual} elements, {expected} expected")
            }
            Self::NonFinite { index } => {
                write!(f, "non-finite value (NaN or Inf) at index {index}")
            }
            Self::InvalidBit { index } => write!(f, "bit at index {index} is neither 0 nor 1"),
            Self::InvalidWeight => {
                f.write_str("channel-state weight must be finite and non-negative")
            }
            Self::OutOfRange { index } => {
                write!(f, "value at index {index} is outside the accepted range")
            }
        }
    }
}

impl core::error::Error for ProcessError {}
