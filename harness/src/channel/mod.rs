//! The fading channel: a time-varying tapped delay line whose taps are Rayleigh (or Rician)
//! processes with the classical Jakes Doppler spectrum, applied to the time-domain signal
//! sample by sample — the gain changes inside each OFDM symbol, which is what makes ICI.
//!
//! * [`profile`] — power delay profiles: exponential, explicit taps, published presets.
//! * [`sos`] — the sum-of-sinusoids fading generator (Zheng & Xiao family, independent phases).
//! * [`tdl`] — the tapped delay line that applies a profile of generators to a signal.

pub mod profile;
pub mod sos;
pub mod tdl;
