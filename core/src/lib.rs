//! # flatbin — an OFDM receiver (and small transmitter) for microcontrollers
//!
//! `#![no_std]`, no allocation, no panics on the processing path. Every size is a const generic
//! or a caller-provided buffer; every configuration is validated once, in a constructor that
//! returns a typed error, and the processing path trusts it afterwards.
//!
//! ## Data flow (one OFDM symbol)
//!
//! ```text
//! transmit:  bits → modulation (Gray map) → grid (data + pilots, numerology) → IFFT → + CP
//! receive:   samples (N + L) → front (strip CP, FFT, unitary scaling) → bins
//!            → pilot estimation, equalization → demap (hard / max-log LLR)
//!            → de-interleave → Viterbi → CRC
//! ```
//!
//! * [`numerology`] — FFT size, cyclic prefix, used band, pilot pattern; the rules every layout
//!   must satisfy, checked once.
//! * [`pilots`] — the pilot PRBS (seeded, per symbol).
//! * [`modulation`] — Gray-mapped BPSK … 256-QAM with unit mean energy.
//! * [`fft`] — the FFT front-end trait and its f32 implementation.
//! * [`fixed`] — Q15 numbers; [`fft_q15`] — the Q15 block-floating-point FFT.
//! * [`transmit`] — bits to time-domain samples with cyclic prefix; [`transmit_q15`] — the
//!   same in Q15 with no floating point per symbol.
//! * [`front`] — cyclic-prefix removal and FFT on the receive side.
//! * [`gain_dc`] — DC offset and digital gain from the preamble (f32, and Q15 with no
//!   floating point).
//! * [`nco`] — NCO derotation of a carrier frequency offset before the FFT (f32, and Q15 from
//!   a compile-time sine table).
//! * [`demap`] — hard decisions and channel-state-weighted max-log LLRs (f32 and saturated i8).
//! * [`interleave`] — the bit interleaver over one OFDM symbol's coded bits, and its inverse on
//!   LLRs.
//! * [`conv_code`] — the K = 7 (133/171) convolutional code, punctured rates 2/3 and 3/4;
//!   [`viterbi`] — its soft-decision decoder on i8 LLRs with a fixed-depth sliding traceback.
//! * [`crc`] — CRC-16 and CRC-32 frame checks.
//! * [`packet`] — packets over OFDM symbols: CRC-32, code and per-symbol interleaving on the
//!   way out, de-interleaver → Viterbi → CRC on the way in.
//!
//! ## Example: one symbol through transmitter and receiver
//!
//! ```
//! use flatbin::{demap, fft::MicroFft, front::Front, transmit::Transmitter};
//! use flatbin::{Cf32, Modulation, Numerology, NumerologyParams};
//!
//! let nu = Numerology::new(NumerologyParams::default())?; // N = 64, CP = 8, 250 kHz
//! let mut tx = Transmitter::new(nu, MicroFft::<64>::new())?;
//! let mut rx = Front::new(&nu, MicroFft::<64>::new())?;
//!
//! let bits = [1u8, 0].repeat(tx.bits_per_ofdm_symbol(Modulation::Qpsk, 0) / 2);
//! let mut samples = [Cf32::new(0.0, 0.0); 72];
//! tx.modulate(Modulation::Qpsk, &bits, 0, &mut samples)?;
//!
//! let mut bins = [Cf32::new(0.0, 0.0); 64];
//! rx.demodulate(&samples, &mut bins)?;
//! let first_data_bin = nu.data_bins(0).next().unwrap_or(0);
//! let mut llrs = [0.0f32; 2];
//! demap::llr_max_log(Modulation::Qpsk, bins[first_data_bin], 100.0, &mut llrs)?;
//! assert!(llrs[0] < 0.0 && llrs[1] > 0.0); // bits 1, 0 (positive LLR means 0)
//! # Ok::<(), Box<dyn core::error::Error>>(())
//! ```
//!
//! ## Conventions
//!
//! * Bins are numbered by their *logical* frequency index `k` in `-N/2 ..= N/2 - 1`; the FFT
//!   buffer stores bin `k` at index `k mod N` (natural FFT order).
//! * Both transforms are **unitary** (scaled by `1/sqrt(N)`): the energy of a bin equals the
//!   energy that bin carried at the transmitter, and time-domain noise of variance `σ²` per
//!   sample appears with variance `σ²` in every bin. Es/N0 per data subcarrier is therefore the
//!   mean data-symbol energy (1) over the per-sample noise variance.
//! * LLR sign: `L = ln P(b=0)/P(b=1)`, positive means bit 0.
//! * Bits are passed one per byte (`0` or `1`).

#![no_std]
#![deny(missing_docs)]
#![cfg_attr(
    not(test),
    deny(
        clippy::unwrap_used,
        clippy::expect_used,
        clippy::panic,
        clippy::indexing_slicing,
        clippy::unreachable,
        clippy::todo,
        clippy::unimplemented
    )
)]

pub mod acquire;
pub mod acquire_q15;
pub mod conv_code;
pub mod correlation;
pub mod cp_sync;
pub mod cp_sync_q15;
pub mod crc;
pub mod dd_bias;
pub mod delay_spread;
pub mod delay_spread_q15;
pub mod demap;
pub mod doppler;
pub mod doppler_q15;
pub mod equalize;
pub mod error;
pub mod estimate;
pub mod fft;
pub mod fft_q15;
pub mod fixed;
pub mod fixed_math;
pub mod frame;
pub mod frame_q15;
pub mod front;
pub mod gain_dc;
pub mod ici;
pub mod ici_q15;
pub mod interleave;
pub mod iq_image;
pub mod iq_image_q15;
pub mod linalg;
pub mod link_report;
pub mod modulation;
pub mod nco;
pub mod noise_track;
pub mod noise_track_q15;
pub mod numerology;
pub mod packed;
pub mod packet;
pub mod pilots;
pub mod preamble;
pub mod receiver;
pub mod receiver_q15;
pub mod sco;
pub mod sco_q15;
pub mod sync_q15;
pub mod transmit;
pub mod transmit_q15;
pub mod viterbi;

pub use error::{ConfigError, ProcessError};
pub use modulation::Modulation;
pub use numerology::{Numerology, NumerologyParams, PilotParams};

/// Complex f32 sample or bin value.
pub type Cf32 = num_complex::Complex<f32>;
