//! Published closed forms, each with its source.
//!
//! * [`ber`]: bit and symbol error rates of Gray-mapped BPSK, QPSK and square M-QAM over AWGN and
//!   flat Rayleigh fading (Cho & Yoon 2002; Proakis & Salehi 2008; Simon & Alouini 2005), plus
//!   dB helpers and the Eb/N0 needed for a target BER.

pub mod ber;
