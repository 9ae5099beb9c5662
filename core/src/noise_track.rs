//! Noise, SNR, EVM and MER, and per-bin noise-plus-interference tracking (in progress).
