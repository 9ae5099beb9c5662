//! Transmitter → receiver with no impairment returns every bit, every order, N = 16 … 4096.

use flatbin::demap::hard_decision;
use flatbin::fft::MicroFft;
use flatbin::front::Front;
use flatbin::numerology::{NumerologyParams, PilotParams};
use flatbin::pilots::PilotIter;
use flatbin::transmit::Transmitter;
use flatbin::{Cf32, Modulation, Numerology};
use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;

fn loopback<const N: usize>() {
    let params = NumerologyParams {
        fft_len: N,
        cp_len: N / 8,
        sample_rate_hz: 1.0e6,
        guard_low_bins: N / 16,
        guard_high_bins: N / 16 - 1,
        dc_null: true,
        // A scattered pattern with boosted pilots, to exercise every layout path.
        pilots: PilotParams {
            spacing: 4,
            offset: 1,
            shift_per_symbol: 1,
            last_bin: true,
            boost_db: 2.5,
            seed: 0x2a,
        },
    };
    let nu = Numerology::new(params).unwrap();
    let mut tx = Transmitter::new(nu, MicroFft::<N>::new()).unwrap();
    let mut rx = Front::new(&nu, MicroFft::<N>::new()).unwrap();
    let mut rng = ChaCha8Rng::seed_from_u64(N as u64);
    let mut samples = vec![Cf32::new(0.0, 0.0); nu.symbol_len()];
    let mut bins = Box::new([Cf32::new(0.0, 0.0); N]);
    for m in Modulation::ALL {
        let k = m.bits_per_symbol();
        for symbol in 0..4u32 {
            let bits: Vec<u8> = (0..tx.bits_per_ofdm_symbol(m, symbol))
                .map(|_| rng.random::<u8>() & 1)
                .collect();
            tx.modulate(m, &bits, symbol, &mut samples).unwrap();
            // The cyclic prefix is a copy of the symbol's tail (definition of the CP).
            assert_eq!(&samples[..N / 8], &samples[N..]);
            rx.demodulate(&samples, &mut bins).unwrap();
            let mut got = vec![0u8; bits.len()];
            for (idx, out) in nu.data_bins(symbol).zip(got.chunks_exact_mut(k)) {
                hard_decision(m, bins[idx], out).unwrap();
            }
            assert_eq!(got, bits, "N={N} {m:?} symbol {symbol}");
            // Pilots come back with the values the receiver regenerates on its own.
            for (idx, p) in PilotIter::new(&nu, symbol) {
                assert!((bins[idx] - p).norm() < 1e-4, "N={N} pilot at {idx}");
            }
            // Guard and DC bins stay empty.
            assert!(bins[0].norm() < 1e-4);
            assert!(bins[N / 2].norm() < 1e-4);
        }
    }
}

#[test]
fn loopback_returns_every_bit_for_every_size_and_order() {
    loopback::<16>();
    loopback::<32>();
    loopback::<64>();
    loopback::<128>();
    loopback::<256>();
    loopback::<512>();
    loopback::<1024>();
    loopback::<2048>();
    loopback::<4096>();
}
