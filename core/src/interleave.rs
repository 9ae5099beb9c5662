//! Bit interleaver across the subcarriers and bits of one OFDM symbol, and its inverse on LLRs.
//! (Being written.)
