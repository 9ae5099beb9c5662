//! The channel in the link: frequency correlation of a simulated profile, and uncoded BER on
//! flat Rayleigh fading with ideal channel knowledge.

use flatbin::fft::{MicroFft, OfdmFft};
use flatbin::numerology::NumerologyParams;
use flatbin::{Cf32, Modulation, Numerology};
use flatbin_harness::channel::profile::{DelayProfile, Quantisation};
use flatbin_harness::channel::sos::FadingParams;
use flatbin_harness::channel::tdl::{Tdl, Variation};
use flatbin_harness::link::{flat_rayleigh_errors, StopRule};
use flatbin_harness::rng::stream_rng;
use flatbin_harness::theory::ber::{ber_rayleigh, db_to_linear};
use flatbin_harness::theory::freq_corr::discrete_pdp_freq_corr_grid;

#[test]
fn frequency_correlation_of_exponential_profile() {
    // Exponential profile, RMS 2 samples at N = 64, through the tapped delay line (impulse in,
    // FFT of the response), 10 000 independent draws: E[H_{k+dk} H_k*] against the tap sum
    // Σ p_l e^{−j2π dk l/N} of the truncated, sampled profile (REFERENCES item 4: use the tap
    // sum, not the continuous 1/(1 + j2π τ Δf), for a truncated profile), within ±0.04.
    const N: usize = 64;
    let fs = 1.0e6;
    let profile = DelayProfile::exponential(2.0 / fs, fs).unwrap();
    let taps = profile.to_sample_taps(fs, Quantisation::Nearest);
    let max_delay = taps.iter().map(|t| t.0).max().unwrap();
    let mut powers = vec![0.0; max_delay + 1];
    for &(d, p) in &taps {
        powers[d] += p;
    }
    let params = FadingParams::rayleigh(50.0, fs, N);
    let mut fft = MicroFft::<N>::new();
    let draws = 10_000u64;
    let dks = [1i64, 2, 4, 8];
    let mut acc = vec![num_complex::Complex::<f64>::new(0.0, 0.0); dks.len()];
    for draw in 0..draws {
        let mut line = Tdl::new(
            &taps,
            &params,
            Variation::Continuous,
            &mut stream_rng(31, draw),
        );
        let mut impulse = [Cf32::new(0.0, 0.0); N];
        impulse[0] = Cf32::new(1.0, 0.0);
        let mut h = [Cf32::new(0.0, 0.0); N];
        line.process(&impulse, &mut h);
        fft.forward(&mut h); // unitary: H_k / sqrt(N)
        for (a, &dk) in acc.iter_mut().zip(&dks) {
            for k in 0..N {
                let p = h[(k + dk as usize) % N] * h[k].conj() * N as f32;
                *a += num_complex::Complex::new(f64::from(p.re), f64::from(p.im))
                    / (N as f64 * draws as f64);
            }
        }
    }
    for (a, &dk) in acc.iter().zip(&dks) {
        let want = discrete_pdp_freq_corr_grid(&powers, dk, N);
        assert!((a - want).norm() <= 0.04, "dk={dk}: {a} vs tap sum {want}");
    }
}

#[test]
fn flat_rayleigh_ber_matches_closed_forms() {
    // QPSK and 16-QAM with ideal channel knowledge, one independent Rayleigh gain per OFDM
    // symbol. Closed form: BPSK/QPSK 0.5(1 − sqrt(g/(1+g))) (Proakis & Salehi, ch. 13); Gray
    // 16-QAM by the Rayleigh average of the Cho & Yoon (2002) terms (REFERENCES item 5).
    // Tolerance 4·s/sqrt(draws), s the spread of the per-symbol BER (errors inside a symbol are
    // correlated; the draws are independent).
    let nu = Numerology::new(NumerologyParams::default()).unwrap();
    for (m, eb_n0_db, seed) in [(Modulation::Qpsk, 10.0, 1u64), (Modulation::Qam16, 14.0, 2)] {
        let bps = m.bits_per_symbol() as u32;
        let es_n0_db = eb_n0_db + 10.0 * f64::from(bps).log10();
        let mut rng = stream_rng(seed, 9);
        let stop = StopRule {
            min_errors: u64::MAX,
            max_bits: 20_000 * 41 * u64::from(bps),
        };
        let (count, sd) = flat_rayleigh_errors(&nu, m, es_n0_db, &mut rng, stop).unwrap();
        let p = ber_rayleigh(bps, db_to_linear(eb_n0_db)).unwrap();
        let tol = 4.0 * sd / (count.symbols as f64).sqrt();
        assert!(
            (count.ber() - p).abs() <= tol,
            "{m:?}: measured {:.4e} over {} symbols, theory {p:.4e} ± {tol:.2e}",
            count.ber(),
            count.symbols
        );
    }
}

#[test]
fn preset_taps_carry_their_powers() {
    // EVA (3GPP TS 36.104 Annex B.2, REFERENCES item 8) on a 30.72 MHz grid, each tap an
    // independent Rayleigh process at 70 Hz: the power of each tap over 10 000 independent
    // draws against the profile, ±3 % relative (REFERENCES item 8, "Tests").
    let fs = 30.72e6;
    let profile = DelayProfile::eva();
    let taps = profile.to_sample_taps(fs, Quantisation::Nearest);
    let len = taps.iter().map(|t| t.0).max().unwrap() + 1;
    let params = FadingParams::rayleigh(70.0, fs, 2048);
    let mut power = vec![0.0f64; len];
    let draws = 10_000u64;
    for draw in 0..draws {
        let mut line = Tdl::new(
            &taps,
            &params,
            Variation::Continuous,
            &mut stream_rng(77, draw),
        );
        let mut impulse = vec![Cf32::new(0.0, 0.0); len];
        impulse[0] = Cf32::new(1.0, 0.0);
        let mut h = vec![Cf32::new(0.0, 0.0); len];
        line.process(&impulse, &mut h);
        for (p, v) in power.iter_mut().zip(&h) {
            *p += f64::from(v.norm_sqr()) / draws as f64;
        }
    }
    for &(d, p) in &taps {
        assert!(
            (power[d] / p - 1.0).abs() <= 0.03,
            "tap at {d}: {} vs {p}",
            power[d]
        );
    }
}
