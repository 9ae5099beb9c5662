//! The scenario's receive chain: zero strength is bit-identical, one seed reproduces a record,
//! and the AGC, ADC, DC and noise stages do what their parameters say.

use flatbin::fft::{MicroFft, OfdmFft};
use flatbin::Cf32;
use flatbin_harness::rng::stream_rng;
use flatbin_harness::rx_chain::RxChain;
use flatbin_harness::scenario::{InterfererKind, Scenario};
use rand::RngExt;

/// `symbols` random QPSK OFDM symbols (all 64 bins, unit power per sample) with an 8-sample CP.
fn ofdm_record(symbols: usize, seed: u64) -> Vec<Cf32> {
    let mut fft = MicroFft::<64>::new();
    let mut rng = stream_rng(seed, 0);
    let a = std::f32::consts::FRAC_1_SQRT_2;
    let mut out = Vec::with_capacity(symbols * 72);
    for _ in 0..symbols {
        let mut x = [Cf32::new(0.0, 0.0); 64];
        for v in x.iter_mut() {
            *v = Cf32::new(
                if rng.random::<bool>() { a } else { -a },
                if rng.random::<bool>() { a } else { -a },
            );
        }
        fft.inverse(&mut x);
        out.extend_from_slice(&x[56..]);
        out.extend_from_slice(&x);
    }
    out
}

fn mean_power(x: &[Cf32]) -> f64 {
    x.iter().map(|v| f64::from(v.norm_sqr())).sum::<f64>() / x.len() as f64
}

#[test]
fn default_chain_is_the_identity_and_seeds_reproduce() {
    let x = ofdm_record(50, 1);
    let scenario = Scenario::default_scenario();
    let out = RxChain::from_scenario(&scenario, 3).receive(&x, 1.0, 0.0);
    assert_eq!(out.samples, x, "every impairment off: bit-identical");
    assert!(out.q15.is_none());

    let mut s = scenario.clone();
    s.impairments.cfo_hz = 310.0;
    s.impairments.phase_noise_linewidth_hz = 50.0;
    s.impairments.iq_gain_db = 0.4;
    s.impairments.dc_offset_i = 0.01;
    s.impairments.timing_offset_samples = 2.3;
    s.impairments.sco_ppm = 20.0;
    s.impairments.adc_bits = 10;
    s.impairments.interferer.kind = InterfererKind::Noise;
    let a = RxChain::from_scenario(&s, 3).receive(&x, 1.0, 0.01);
    let b = RxChain::from_scenario(&s, 3).receive(&x, 1.0, 0.01);
    let c = RxChain::from_scenario(&s, 4).receive(&x, 1.0, 0.01);
    assert_eq!(a, b, "same (seed, stream): same record");
    assert_ne!(a.samples, c.samples, "another stream: another record");
}

#[test]
fn agc_adc_dc_and_noise_stages_meet_their_parameters() {
    let x = ofdm_record(2000, 2);
    let mut s = Scenario::default_scenario();
    s.impairments.adc_bits = 12;
    s.impairments.adc_backoff_db = 12.0;
    let out = RxChain::from_scenario(&s, 1).receive(&x, 1.0, 0.0);
    // Power 12 dB below a full-scale complex sinusoid (dBFS, DESIGN.md), to 0.05 dB.
    let dbfs = 10.0 * mean_power(&out.samples).log10();
    assert!((dbfs + 12.0).abs() < 0.05, "{dbfs}");
    println!(
        "12-bit ADC at −12 dBFS: clipped {} of {}",
        out.clipped,
        2 * x.len()
    );
    // SQNR at −B dBFS: 6.02·b + 1.76 − B dB (uniform quantisation noise Δ²/12 per branch
    // against the total power; common practice), within 1 dB. At 12 dB back-off the clip level
    // is 5.6σ per branch, so clipping noise is negligible beside Δ²/12.
    let quiet = out.clone();
    let g = quiet.agc_gain as f32;
    let err: f64 = quiet
        .samples
        .iter()
        .zip(&x)
        .map(|(q, v)| f64::from((q - v * g).norm_sqr()))
        .sum::<f64>()
        / x.len() as f64;
    let sqnr = 10.0 * (mean_power(&quiet.samples) / err).log10();
    let rule = 6.02 * 12.0 + 1.76 - 12.0;
    println!("12-bit ADC at −12 dBFS: SQNR {sqnr:.2} dB, rule {rule:.2} dB");
    assert_eq!(quiet.clipped, 0);
    assert!((sqnr - rule).abs() <= 1.0);
    // At 0 dB back-off OFDM clips often: full scale is √2σ per branch, P(|x| > √2σ) = 15.7 %
    // (Gaussian tail, erfc(1) evaluated with Python's math.erfc).
    s.impairments.adc_backoff_db = 0.0;
    let hot = RxChain::from_scenario(&s, 1).receive(&x, 1.0, 0.0);
    let frac = hot.clipped as f64 / (2 * x.len()) as f64;
    assert!((frac - 0.157).abs() < 0.01, "clipped fraction {frac}");

    // DC offset as a fraction of full scale: the mean moves by dc × full scale.
    let mut s = Scenario::default_scenario();
    s.impairments.dc_offset_i = 0.05;
    s.impairments.dc_offset_q = -0.02;
    let out = RxChain::from_scenario(&s, 1).receive(&x, 1.0, 0.0);
    let full_scale = mean_power(&x).sqrt() * 10f64.powf(12.0 / 20.0);
    let mean = out.samples.iter().sum::<Cf32>() / out.samples.len() as f32;
    let mean_in = x.iter().sum::<Cf32>() / x.len() as f32;
    let shift = mean - mean_in;
    assert!((f64::from(shift.re) - 0.05 * full_scale).abs() < 1e-4);
    assert!((f64::from(shift.im) + 0.02 * full_scale).abs() < 1e-4);

    // Thermal noise of the requested variance (sample variance of 144 000 draws: 0.26 % σ).
    let s = Scenario::default_scenario();
    let out = RxChain::from_scenario(&s, 1).receive(&x, 1.0, 0.1);
    let noise: Vec<Cf32> = out.samples.iter().zip(&x).map(|(a, b)| a - b).collect();
    assert!((mean_power(&noise) / 0.1 - 1.0).abs() < 0.015);
}

#[test]
fn interferer_sits_at_its_power_relative_to_the_signal() {
    let x = ofdm_record(500, 3);
    let mut s = Scenario::default_scenario();
    s.impairments.interferer.kind = InterfererKind::Cw;
    s.impairments.interferer.power_dbc = -6.0;
    s.impairments.interferer.duty_cycle = 0.5;
    let out = RxChain::from_scenario(&s, 1).receive(&x, 1.0, 0.0);
    let added: Vec<Cf32> = out.samples.iter().zip(&x).map(|(a, b)| a - b).collect();
    // −6 dBc while on, on for the first half of every 0.01 s × 250 kHz = 2500 samples
    // (definition of the duty cycle; the record ends part-way through a period).
    let on = (0..x.len()).filter(|n| n % 2500 < 1250).count();
    let want = on as f64 / x.len() as f64 * 10f64.powf(-0.6);
    let got = mean_power(&added);
    println!("CW at −6 dBc, duty 0.5: added power {got:.5}, want {want:.5}");
    assert!((got / want - 1.0).abs() < 0.02);
}
