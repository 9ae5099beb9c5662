//! Property: any flat channel (nonzero gain, any phase) is equalized back to the transmitted
//! constellation points within rounding, for every estimator, equalizer and modulation
//! (a flat channel is exactly representable by every interpolator: weights sum to one — linear
//! interpolation is exact on constants; the LMMSE on a flat channel at high SNR tends to it;
//! common practice).

use flatbin::equalize::Equalizer;
use flatbin::estimate::{EstimatorConfig, FreqInterpolation, TimeFilter};
use flatbin::fft::MicroFft;
use flatbin::receiver::{Receiver, ReceiverConfig};
use flatbin::transmit::Transmitter;
use flatbin::{Cf32, Modulation, Numerology, NumerologyParams};
use proptest::prelude::*;

fn run(gain: f32, phase: f32, m: Modulation, freq: FreqInterpolation, eq: Equalizer) {
    let nu = Numerology::new(NumerologyParams::default()).unwrap();
    let mut tx = Transmitter::new(nu, MicroFft::<64>::new()).unwrap();
    let cfg = ReceiverConfig {
        estimator: EstimatorConfig {
            freq,
            time: TimeFilter::Latest,
            noise_var: 1e-7,
            ..EstimatorConfig::default()
        },
        equalizer: eq,
        cpe: true,
    };
    let mut rx = Receiver::<_, 64, 4, 2>::new(&nu, MicroFft::<64>::new(), cfg).unwrap();
    let h = Cf32::from_polar(gain, phase);
    let k = m.bits_per_symbol();
    let bits: Vec<u8> = (0..tx.bits_per_ofdm_symbol(m, 0))
        .map(|i| ((i * 7 + i / 3) % 2) as u8)
        .collect();
    let mut samples = vec![Cf32::new(0.0, 0.0); nu.symbol_len()];
    tx.modulate(m, &bits, 0, &mut samples).unwrap();
    for s in samples.iter_mut() {
        *s *= h;
    }
    let d = nu.data_len(0);
    let (mut eqd, mut sinr, mut llr) = (vec![Cf32::default(); d], vec![0.0; d], vec![0.0; d * k]);
    rx.receive(&samples, 0, m, &mut eqd, &mut sinr, &mut llr)
        .unwrap();
    for (i, (x, chunk)) in eqd.iter().zip(bits.chunks_exact(k)).enumerate() {
        let want = m.map(chunk).unwrap();
        // LMMSE at finite design SNR shrinks by r/(r + σ²) ≈ 1 − 1e-7: "within rounding".
        assert!((x - want).norm() < 2e-3, "bin {i}: {x} vs {want} (h = {h})");
    }
    // Every LLR has the sign of its bit (positive means 0).
    for (l, b) in llr.iter().zip(&bits) {
        assert_eq!(*l > 0.0, *b == 0);
    }
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(64))]
    #[test]
    fn flat_channel_is_equalized_back(
        gain_db in -30.0f32..20.0,
        phase in -std::f32::consts::PI..std::f32::consts::PI,
        m in 0usize..5,
        lmmse in any::<bool>(),
        zf in any::<bool>(),
    ) {
        run(
            10f32.powf(gain_db / 20.0),
            phase,
            Modulation::ALL[m],
            if lmmse { FreqInterpolation::Lmmse } else { FreqInterpolation::Linear },
            if zf { Equalizer::Zf } else { Equalizer::Mmse },
        );
    }
}
