//! Image rejection (IQ imbalance) from mirror-bin statistics (in progress).
