//! The receive chain a scenario's `[impairments]` describe, applied to whole records in the
//! order a receiver meets them:
//!
//! 1. narrowband interferer, at the antenna (power relative to the received signal);
//! 2. thermal noise (AWGN of a given variance per sample);
//! 3. local oscillator: carrier frequency offset and Wiener phase noise;
//! 4. mixer: IQ gain/phase imbalance;
//! 5. DC offset (a fraction of ADC full scale);
//! 6. sampling: timing offset (integer + fractional) and sampling-clock offset;
//! 7. ideal AGC and ADC: the record's power is set to `adc_backoff_db` below full scale (dBFS:
//!    total complex power against a full-scale complex sinusoid, DESIGN.md) and each branch is
//!    quantised to `adc_bits` bits with clipping, Q15 output.
//!
//! Everything draws from one generator keyed by `(scenario seed, stream)`, so a record is
//! reproducible from one `u64` pair. With every impairment at zero strength and no noise the
//! output is bit-identical to the input. The oscillator (CFO phase, phase noise) and the
//! interferer continue from one record to the next; timing offset and sampling-clock drift
//! restart at each record (a record is one frame, timed from its start).

use flatbin::fixed::Cq15;
use flatbin::Cf32;

use crate::impair::{
    dc_offset, fractional_delay, frequency_offset, resample, Adc, CwInterferer, Interferer,
    IqImbalance, NoiseBurst, PhaseNoise,
};
use crate::noise::add_awgn;
use crate::rng::{stream_rng, HarnessRng};
use crate::scenario::{InterfererKind, Scenario};

/// The output of [`RxChain::receive`].
#[derive(Clone, Debug, PartialEq)]
pub struct Received {
    /// The received record. Without an ADC, at the input's scale; with one, the quantised
    /// codes as fractions of full scale (the same values as `q15`).
    pub samples: Vec<Cf32>,
    /// The ADC's Q15 codes, when the scenario has an ADC (`adc_bits > 0`).
    pub q15: Option<Vec<Cq15>>,
    /// Number of I or Q components that clipped in the ADC.
    pub clipped: usize,
    /// Linear gain the AGC applied before the ADC (1 without an ADC).
    pub agc_gain: f64,
}

/// The impairment chain of one scenario, with its random streams and oscillator state.
#[derive(Clone, Debug)]
pub struct RxChain {
    cfo_cycles_per_sample: f64,
    phase_noise: PhaseNoise,
    iq: IqImbalance,
    dc: Cf32,
    timing_offset: f64,
    sco_ppm: f64,
    adc: Option<Adc>,
    backoff_db: f64,
    interferer: Option<(Interferer, f64)>,
    rng: HarnessRng,
    position: u64,
}

impl RxChain {
    /// The chain of `scenario`'s impairments, drawing from stream `stream` of its seed.
    pub fn from_scenario(scenario: &Scenario, stream: u64) -> Self {
        let imp = &scenario.impairments;
        let fs = scenario.band.sample_rate_hz;
        let intf = &imp.interferer;
        let period_samples = (intf.period_s * fs).round().max(1.0) as usize;
        let power_rel = 10f64.powf(intf.power_dbc / 10.0);
        let interferer = match intf.kind {
            InterfererKind::None => None,
            // Unit power here; scaled by the signal power in `receive`.
            InterfererKind::Cw => Some(Interferer::Cw(CwInterferer {
                cycles_per_sample: intf.frequency_hz / fs,
                amplitude: 1.0,
                duty: intf.duty_cycle,
                period_samples,
            })),
            InterfererKind::Noise => Some(Interferer::NoiseBurst(Box::new(NoiseBurst::new(
                intf.frequency_hz / fs,
                intf.bandwidth_hz / fs,
                1.0,
                intf.duty_cycle,
                period_samples,
                scenario.seed ^ stream.rotate_left(17) ^ 0x006e_6f69_7365,
            )))),
        }
        .filter(|_| intf.duty_cycle > 0.0)
        .map(|i| (i, power_rel));
        Self {
            cfo_cycles_per_sample: imp.cfo_hz / fs,
            phase_noise: PhaseNoise::new(imp.phase_noise_linewidth_hz, fs),
            iq: IqImbalance::new(imp.iq_gain_db, imp.iq_phase_deg),
            dc: Cf32::new(imp.dc_offset_i as f32, imp.dc_offset_q as f32),
            timing_offset: imp.timing_offset_samples,
            sco_ppm: imp.sco_ppm,
            adc: (imp.adc_bits > 0).then_some(Adc { bits: imp.adc_bits }),
            backoff_db: imp.adc_backoff_db,
            interferer,
            rng: stream_rng(scenario.seed, stream),
            position: 0,
        }
    }

    /// Passes one record through the chain. `signal_power` is the mean power per sample of the
    /// signal in `x` (the interferer's level is relative to it); `noise_var` is the total
    /// complex variance of the thermal noise per sample (0: none).
    pub fn receive(&mut self, x: &[Cf32], signal_power: f64, noise_var: f64) -> Received {
        let start = self.position;
        self.position += x.len() as u64;
        let mut y = x.to_vec();
        if let Some((interferer, rel)) = self.interferer.as_mut() {
            let mut burst = vec![Cf32::new(0.0, 0.0); y.len()];
            interferer.add(&mut burst, start);
            let a = (*rel * signal_power).sqrt() as f32;
            for (s, b) in y.iter_mut().zip(&burst) {
                *s += b * a;
            }
        }
        if noise_var > 0.0 {
            add_awgn(&mut self.rng, &mut y, noise_var);
        }
        let turns = (self.cfo_cycles_per_sample * start as f64).rem_euclid(1.0);
        frequency_offset(
            &mut y,
            self.cfo_cycles_per_sample,
            2.0 * std::f64::consts::PI * turns,
        );
        self.phase_noise.apply(&mut y, &mut self.rng);
        self.iq.apply(&mut y);
        // Full scale: the level at which the record's power sits `backoff_db` below it (dBFS).
        let needs_level = self.dc != Cf32::new(0.0, 0.0) || self.adc.is_some();
        let full_scale = if needs_level {
            let p = y.iter().map(|v| f64::from(v.norm_sqr())).sum::<f64>() / y.len().max(1) as f64;
            let fs = p.sqrt() * 10f64.powf(self.backoff_db / 20.0);
            if fs > 0.0 && fs.is_finite() {
                fs
            } else {
                1.0
            }
        } else {
            1.0
        };
        dc_offset(&mut y, self.dc * full_scale as f32);
        if self.timing_offset != 0.0 {
            y = fractional_delay(&y, self.timing_offset);
        }
        if self.sco_ppm != 0.0 {
            y = resample(&y, self.sco_ppm);
        }
        match self.adc {
            None => Received {
                samples: y,
                q15: None,
                clipped: 0,
                agc_gain: 1.0,
            },
            Some(adc) => {
                let gain = 1.0 / full_scale;
                for s in y.iter_mut() {
                    *s *= gain as f32;
                }
                let mut q = vec![Cq15::ZERO; y.len()];
                let clipped = adc.convert(&y, &mut q);
                Received {
                    samples: q.iter().map(|c| c.to_cf32()).collect(),
                    q15: Some(q),
                    clipped,
                    agc_gain: gain,
                }
            }
        }
    }
}
