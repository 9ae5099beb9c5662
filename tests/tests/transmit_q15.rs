//! The Q15 transmitter against the f32 transmitter (same bits, same numerology), and a
//! loopback through the f32 receiver front.

use flatbin::demap::hard_decision;
use flatbin::fft::MicroFft;
use flatbin::fixed::Cq15;
use flatbin::front::Front;
use flatbin::numerology::{NumerologyParams, PilotParams};
use flatbin::transmit::Transmitter;
use flatbin::transmit_q15::{TransmitterQ15, TX_BACKOFF};
use flatbin::{Cf32, Modulation, Numerology};
use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;

fn check<const N: usize>() {
    let nu = Numerology::new(NumerologyParams {
        fft_len: N,
        cp_len: N / 8,
        sample_rate_hz: 1.0e6,
        guard_low_bins: N / 16,
        guard_high_bins: N / 16 - 1,
        dc_null: true,
        pilots: PilotParams {
            spacing: 4,
            offset: 1,
            shift_per_symbol: 1,
            last_bin: true,
            boost_db: 2.5,
            seed: 0x2a,
        },
    })
    .unwrap();
    let mut tx = Transmitter::new(nu, MicroFft::<N>::new()).unwrap();
    let mut txq = TransmitterQ15::<N>::new(nu).unwrap();
    let mut rx = Front::new(&nu, MicroFft::<N>::new()).unwrap();
    let mut rng = ChaCha8Rng::seed_from_u64(N as u64 + 7);
    let mut ref_out = vec![Cf32::new(0.0, 0.0); nu.symbol_len()];
    let mut q_out = vec![Cq15::ZERO; nu.symbol_len()];
    let mut bins = Box::new([Cf32::new(0.0, 0.0); N]);
    for m in Modulation::ALL {
        for symbol in 0..3u32 {
            let bits: Vec<u8> = (0..tx.bits_per_ofdm_symbol(m, symbol))
                .map(|_| rng.random::<u8>() & 1)
                .collect();
            tx.modulate(m, &bits, symbol, &mut ref_out).unwrap();
            txq.modulate(m, &bits, symbol, &mut q_out).unwrap();
            // SQNR of the Q15 output against the f32 transmitter scaled by the documented
            // backoff (the f32 path is itself checked against rustfft and by loopback).
            let (mut sig, mut err) = (0.0f64, 0.0f64);
            let scaled: Vec<Cf32> = q_out
                .iter()
                .map(|q| q.to_cf32() / TX_BACKOFF as f32)
                .collect();
            for (q, r) in scaled.iter().zip(&ref_out) {
                sig += f64::from(r.norm_sqr());
                err += f64::from((q - r).norm_sqr());
            }
            let sqnr = 10.0 * (sig / err).log10();
            // Q15 output at about −12 dBFS: 16-bit quantisation alone allows ~80 dB; the
            // Q15 IFFT's SQNR (≥ 64 dB, tests/fft_q15.rs) dominates. Accept ≥ 60 dB.
            assert!(sqnr >= 60.0, "N={N} {m:?}: SQNR {sqnr:.1} dB");
            rx.demodulate(&scaled, &mut bins).unwrap();
            let k = m.bits_per_symbol();
            let mut got = vec![0u8; bits.len()];
            for (idx, out) in nu.data_bins(symbol).zip(got.chunks_exact_mut(k)) {
                hard_decision(m, bins[idx], out).unwrap();
            }
            assert_eq!(got, bits, "N={N} {m:?}");
        }
    }
}

#[test]
fn q15_transmitter_matches_f32_for_every_size() {
    check::<16>();
    check::<32>();
    check::<64>();
    check::<128>();
    check::<256>();
    check::<512>();
    check::<1024>();
    check::<2048>();
    check::<4096>();
}
