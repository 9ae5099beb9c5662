//! The analytic side of the core's channel estimator: its weights (read from a configured
//! [`ChannelEstimator`]) turned into the sparse linear map of `theory::estimation`, so the
//! per-bin MSE follows from the channel's correlation (REFERENCES item 6), and the uncoded BER
//! it predicts over Rayleigh fading (REFERENCES item 5 at the effective SNR).

use anyhow::Result;
use flatbin::estimate::ChannelEstimator;
use flatbin::Numerology;
use num_complex::Complex;

use crate::theory::estimation::{
    ber_rayleigh_with_estimate, error_covariance_diag, Correlation, GridPos, SparseRow,
};

/// Per-data-bin analytic MSE of the frequency stage of `est` for one symbol (`symbol`) whose
/// lattice bins hold this symbol's LS values (time filter `Latest` on a fixed comb), under the
/// true correlation `corr`, at LS noise variance `noise_var` (`N0/|X_p|²`).
pub fn frequency_stage_mse<const N: usize, const K: usize, const M: usize, C: Correlation>(
    numerology: &Numerology,
    est: &ChannelEstimator<N, K, M>,
    symbol: u32,
    corr: &C,
    noise_var: f64,
) -> Result<Vec<f64>> {
    let lattice: Vec<GridPos> = (0..est.lattice_len())
        .filter_map(|j| est.lattice_bin(j))
        .map(|u| GridPos::new(i64::from(numerology.logical_bin(u)), 0))
        .collect();
    let data: Vec<usize> = (0..numerology.used_len())
        .filter(|&u| !numerology.is_pilot(u, symbol))
        .collect();
    let targets: Vec<GridPos> = data
        .iter()
        .map(|&u| GridPos::new(i64::from(numerology.logical_bin(u)), 0))
        .collect();
    let rows: Vec<SparseRow> = data
        .iter()
        .filter_map(|&u| est.freq_taps(u))
        .map(|(first, w)| {
            w.iter()
                .enumerate()
                .map(|(i, t)| (first + i, Complex::new(f64::from(t.re), f64::from(t.im))))
                .collect()
        })
        .collect();
    Ok(error_covariance_diag(
        corr, &lattice, &targets, &rows, noise_var,
    )?)
}

/// Uncoded BER predicted with per-bin estimation MSEs `mse` at Es/N0 `es_n0_linear`: the mean
/// over bins of the Rayleigh BER at each bin's effective SNR.
pub fn predicted_ber(bits_per_symbol: u32, es_n0_linear: f64, mse: &[f64]) -> Option<f64> {
    let mut sum = 0.0;
    for &m in mse {
        sum += ber_rayleigh_with_estimate(bits_per_symbol, es_n0_linear, m)?;
    }
    (!mse.is_empty()).then(|| sum / mse.len() as f64)
}
