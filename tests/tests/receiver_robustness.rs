//! Deep fades, zero-power pilots, silence and non-finite input: the receiver never panics,
//! never emits NaN/Inf, and the LLRs of faded bins go towards zero (a bin with no channel
//! carries no information; common practice).

use flatbin::equalize::Equalizer;
use flatbin::estimate::{EstimatorConfig, FreqInterpolation, TimeFilter};
use flatbin::fft::MicroFft;
use flatbin::receiver::{Receiver, ReceiverConfig};
use flatbin::transmit::Transmitter;
use flatbin::{Cf32, Modulation, Numerology, NumerologyParams, ProcessError};

const N: usize = 64;

fn receiver(
    freq: FreqInterpolation,
    time: TimeFilter,
    eq: Equalizer,
) -> Receiver<MicroFft<N>, N, 4, 4> {
    let nu = Numerology::new(NumerologyParams::default()).unwrap();
    let cfg = ReceiverConfig {
        estimator: EstimatorConfig {
            freq,
            time,
            noise_var: 0.01,
            ..EstimatorConfig::default()
        },
        equalizer: eq,
        cpe: true,
    };
    Receiver::new(&nu, MicroFft::<N>::new(), cfg).unwrap()
}

#[test]
fn faded_bins_give_quiet_llrs_and_nothing_is_ever_non_finite() {
    let nu = Numerology::new(NumerologyParams::default()).unwrap();
    let m = Modulation::Qam16;
    let k = m.bits_per_symbol();
    let tx = Transmitter::new(nu, MicroFft::<N>::new()).unwrap();
    let bits: Vec<u8> = (0..tx.bits_per_ofdm_symbol(m, 0))
        .map(|i| (i % 3 == 0) as u8)
        .collect();
    let mut grid = [Cf32::default(); N];
    tx.map_grid(m, &bits, 0, &mut grid).unwrap();
    let d = nu.data_len(0);
    for freq in [FreqInterpolation::Linear, FreqInterpolation::Lmmse] {
        for time in [
            TimeFilter::Latest,
            TimeFilter::Forgetting { lambda: 0.5 },
            TimeFilter::Lmmse,
        ] {
            for eq in [Equalizer::Zf, Equalizer::Mmse] {
                let mut rx = receiver(freq, time, eq);
                // Channel: unit gain, but the upper half of the used band (data and pilots)
                // faded to exactly zero, then silence, then tiny values.
                for (case, scale_faded) in [(0, 0.0f32), (1, 1e-30), (2, 1e-19)] {
                    let mut bins = grid;
                    for (u, b) in (0..nu.used_len()).map(|u| (u, nu.fft_index(u))) {
                        if u >= nu.used_len() / 2 {
                            bins[b] *= scale_faded;
                        }
                    }
                    let (mut x, mut s, mut l) = (
                        vec![Cf32::default(); d],
                        vec![0.0f32; d],
                        vec![0.0f32; d * k],
                    );
                    rx.receive_bins(&bins, 0, m, &mut x, &mut s, &mut l)
                        .unwrap();
                    assert!(
                        x.iter().all(|v| v.re.is_finite() && v.im.is_finite()),
                        "case {case}"
                    );
                    assert!(s.iter().all(|v| v.is_finite() && *v >= 0.0));
                    assert!(l.iter().all(|v| v.is_finite()));
                    // Data bins well inside the faded half: their LLRs are (near) zero, far
                    // below those of the unfaded half.
                    let faded: Vec<usize> = nu
                        .data_bins(0)
                        .enumerate()
                        .filter(|(_, b)| {
                            (0..nu.used_len())
                                .any(|u| nu.fft_index(u) == *b && u >= nu.used_len() / 2 + 4)
                        })
                        .map(|(i, _)| i)
                        .collect();
                    assert!(!faded.is_empty());
                    let max_faded = faded
                        .iter()
                        .flat_map(|&i| &l[i * k..(i + 1) * k])
                        .fold(0.0f32, |a, v| a.max(v.abs()));
                    let clear = l[..k * 4].iter().fold(0.0f32, |a, v| a.max(v.abs()));
                    assert!(
                        max_faded < 1e-3 * clear,
                        "{freq:?} {time:?} {eq:?} case {case}: {max_faded} vs {clear}"
                    );
                }
                // Silence: every output finite, every LLR zero.
                let zero = [Cf32::default(); N];
                let (mut x, mut s, mut l) = (
                    vec![Cf32::default(); d],
                    vec![0.0f32; d],
                    vec![1.0f32; d * k],
                );
                rx.reset();
                rx.receive_bins(&zero, 0, m, &mut x, &mut s, &mut l)
                    .unwrap();
                assert!(l.iter().all(|v| *v == 0.0));
                assert!(s.iter().all(|v| *v == 0.0));
                // A NaN pilot is rejected with its index; outputs untouched.
                let mut bad = grid;
                let p = nu.pilot_bins(0).next().unwrap();
                bad[p] = Cf32::new(f32::NAN, 0.0);
                let before = l.clone();
                assert_eq!(
                    rx.receive_bins(&bad, 0, m, &mut x, &mut s, &mut l),
                    Err(ProcessError::NonFinite { index: p })
                );
                assert_eq!(l, before);
                // Infinite time-domain samples are rejected by the front.
                let mut samples = vec![Cf32::new(0.1, 0.0); nu.symbol_len()];
                samples[3] = Cf32::new(f32::INFINITY, 0.0);
                assert_eq!(
                    rx.receive(&samples, 0, m, &mut x, &mut s, &mut l),
                    Err(ProcessError::NonFinite { index: 3 })
                );
                // Short output buffers are rejected before anything is written.
                assert!(matches!(
                    rx.receive_bins(&grid, 0, m, &mut x[..d - 1], &mut s, &mut l),
                    Err(ProcessError::BufferLength { .. })
                ));
            }
        }
    }
}

#[test]
fn common_phase_error_is_removed_from_pilots() {
    // A common rotation of a whole symbol (what phase noise's CPE does) against a held channel
    // estimate: with CPE correction the equalized symbols come back on the constellation; without
    // it they stay rotated (definition of the CPE; common practice).
    let nu = Numerology::new(NumerologyParams::default()).unwrap();
    let m = Modulation::Qpsk;
    let k = m.bits_per_symbol();
    let tx = Transmitter::new(nu, MicroFft::<N>::new()).unwrap();
    let d = nu.data_len(0);
    for cpe in [true, false] {
        let cfg = ReceiverConfig {
            estimator: EstimatorConfig {
                time: TimeFilter::Forgetting { lambda: 0.9 },
                noise_var: 1e-4,
                ..EstimatorConfig::default()
            },
            equalizer: Equalizer::Mmse,
            cpe,
        };
        let mut rx = Receiver::<MicroFft<N>, N, 4, 4>::new(&nu, MicroFft::<N>::new(), cfg).unwrap();
        let (mut x, mut s, mut l) = (
            vec![Cf32::default(); d],
            vec![0.0f32; d],
            vec![0.0f32; d * k],
        );
        let mut worst = 0.0f32;
        for sym in 0..6u32 {
            let bits: Vec<u8> = (0..tx.bits_per_ofdm_symbol(m, sym))
                .map(|i| ((i + sym as usize) % 2) as u8)
                .collect();
            let mut grid = [Cf32::default(); N];
            tx.map_grid(m, &bits, sym, &mut grid).unwrap();
            // Symbols 0..3 unrotated (the estimate settles), then a 25° common rotation.
            let rot = if sym >= 4 {
                Cf32::from_polar(1.0, 25f32.to_radians())
            } else {
                Cf32::new(1.0, 0.0)
            };
            let bins = grid.map(|v| v * rot);
            rx.receive_bins(&bins, sym, m, &mut x, &mut s, &mut l)
                .unwrap();
            if sym >= 4 {
                for (xi, chunk) in x.iter().zip(bits.chunks_exact(k)) {
                    worst = worst.max((xi - m.map(chunk).unwrap()).norm());
                }
            }
        }
        if cpe {
            assert!(worst < 0.05, "with CPE correction: error {worst}");
        } else {
            // |e^{j25°} − 1| = 0.433 of a unit-energy symbol, less the forgetting's pull.
            assert!(worst > 0.2, "without CPE correction: error {worst}");
        }
    }
}
