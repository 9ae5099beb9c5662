//! Radio impairments applied to time-domain samples. (This module grows with the impairment
//! models; for now the carrier frequency offset that the CFO checks need.)

use flatbin::Cf32;

/// Multiplies `samples` by `e^{j(2π·cycles_per_sample·n + phase_rad)}`, `n` counted from 0:
/// a carrier frequency offset of `cycles_per_sample · fs` Hz (ε = cycles_per_sample · N in
/// subcarrier spacings). The phase is accumulated in f64.
pub fn frequency_offset(samples: &mut [Cf32], cycles_per_sample: f64, phase_rad: f64) {
    let w = 2.0 * std::f64::consts::PI * cycles_per_sample;
    for (n, s) in samples.iter_mut().enumerate() {
        let ph = w * n as f64 + phase_rad;
        *s *= Cf32::new(ph.cos() as f32, ph.sin() as f32);
    }
}
