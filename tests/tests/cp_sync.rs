//! CP-based timing and CFO (van de Beek, Sandell & Börjesson, IEEE Trans. Signal Process.
//! 45(7), 1997; REFERENCES item 7a), and the residual CFO after preamble + CP averaging. SNRs
//! here are time-domain (sample power over noise variance).

use flatbin::acquire::Acquirer;
use flatbin::cp_sync::CpTracker;
use flatbin::fft::MicroFft;
use flatbin::numerology::NumerologyParams;
use flatbin::preamble::write_preamble;
use flatbin::transmit::Transmitter;
use flatbin::{Cf32, Modulation, Numerology};
use flatbin_harness::impair::frequency_offset;
use flatbin_harness::noise::add_awgn;
use flatbin_harness::rng::{stream_rng, HarnessRng};
use rand::RngExt;
use rand_distr::{Distribution, StandardNormal};

const N: usize = 64;
const L: usize = 16;
const S: usize = N + L;

fn gaussian(rng: &mut HarnessRng) -> Cf32 {
    let a: f32 = StandardNormal.sample(rng);
    let b: f32 = StandardNormal.sample(rng);
    Cf32::new(a, b) * std::f32::consts::FRAC_1_SQRT_2
}

/// Gaussian OFDM-like symbols with a CP of `L` (REFERENCES item 7a's model), the first CP
/// starting at `theta`.
fn stream(theta: usize, len: usize, rng: &mut HarnessRng) -> Vec<Cf32> {
    let mut out: Vec<Cf32> = (0..theta).map(|_| gaussian(rng)).collect();
    while out.len() < len {
        let body: Vec<Cf32> = (0..N).map(|_| gaussian(rng)).collect();
        out.extend_from_slice(&body[N - L..]);
        out.extend_from_slice(&body);
    }
    out.truncate(len);
    out
}

fn nu() -> Numerology {
    Numerology::new(NumerologyParams {
        fft_len: N,
        cp_len: L,
        ..NumerologyParams::default()
    })
    .unwrap()
}

#[test]
fn van_de_beek_one_symbol_matches_references_item_7a() {
    // One window per position (exactly one symbol period searched), true ε = 0.2, 10 000
    // trials. CFO: RMS error against the Gaussian-sample form
    // σ² = (1/4π²)[(1/SNR)/(L−1) + L/(2SNR²(L−1)(L−2))] (0.0133611 at 10 dB, L = 16), ±10 %;
    // timing: P(exact) = 0.85 ± 0.02 at 10 dB (REFERENCES item 7a Monte Carlo, 0.8512).
    let nu = nu();
    for snr_db in [10.0f64, 20.0] {
        let snr = 10f64.powf(snr_db / 10.0);
        let l = L as f64;
        let want = ((1.0 / snr / (l - 1.0) + l / (2.0 * snr * snr * (l - 1.0) * (l - 2.0)))
            / (4.0 * std::f64::consts::PI.powi(2)))
        .sqrt();
        let mut rng = stream_rng(101, snr_db as u64);
        let trials = 10_000;
        let (mut exact, mut sum2) = (0usize, 0.0f64);
        for _ in 0..trials {
            let theta = rng.random_range(0..S);
            let len = N + L - 1 + S;
            let mut x = stream(theta, len, &mut rng);
            frequency_offset(
                &mut x,
                0.2 / N as f64,
                rng.random_range(0.0..std::f64::consts::TAU),
            );
            add_awgn(&mut rng, &mut x, 1.0 / snr);
            let mut t = CpTracker::<N, S>::new(&nu, snr_db as f32).unwrap();
            t.push(&x);
            let e = t.estimate();
            exact += usize::from(e.cp_start == theta % S);
            let err = f64::from(e.cfo) - 0.2;
            sum2 += err * err;
        }
        let rms = (sum2 / trials as f64).sqrt();
        let p_exact = exact as f64 / trials as f64;
        println!("SNR {snr_db} dB: CFO RMS {rms:.5} (Gaussian-sample form {want:.5}); P(timing exact) {p_exact:.4}");
        assert!((rms / want - 1.0).abs() <= 0.10);
        if snr_db == 10.0 {
            assert!((p_exact - 0.85).abs() <= 0.02);
        }
    }
}

#[test]
fn residual_cfo_after_preamble_and_16_cp_symbols_is_within_0_01() {
    // Frame: preamble (Schmidl & Cox estimate ε₁) then 16 QPSK data symbols; the stream is
    // derotated by ε₁ and the CP tracker estimates the residual ε₂ over the 16 symbols. Time-
    // domain SNR 10 dB, true ε uniform in ±0.4. Target: |ε₁ + ε₂ − ε| ≤ 0.01 in ≥ 95 % of trials.
    let nu = nu();
    let t_acq = Acquirer::<N>::threshold_for(&nu, 1e-5);
    let mut rng = stream_rng(102, 0);
    let mut tx = Transmitter::new(nu, MicroFft::<N>::new()).unwrap();
    let trials = 2000;
    let (mut ok, mut detected) = (0usize, 0usize);
    for _ in 0..trials {
        let mut x = vec![Cf32::default(); 2 * S];
        write_preamble(&nu, &mut MicroFft::<N>::new(), &mut x).unwrap();
        let data_start = x.len();
        for sym in 0..16u32 {
            let bits: Vec<u8> = (0..tx.bits_per_ofdm_symbol(Modulation::Qpsk, sym))
                .map(|_| rng.random::<u8>() & 1)
                .collect();
            let mut s = vec![Cf32::default(); S];
            tx.modulate(Modulation::Qpsk, &bits, sym, &mut s).unwrap();
            x.extend_from_slice(&s);
        }
        let lead = 60;
        let mut st = vec![Cf32::default(); lead];
        st.extend_from_slice(&x);
        st.extend(std::iter::repeat_n(Cf32::default(), 40));
        let p: f64 = x.iter().map(|v| f64::from(v.norm_sqr())).sum::<f64>() / x.len() as f64;
        let eps = rng.random_range(-0.4..0.4);
        frequency_offset(
            &mut st,
            eps / N as f64,
            rng.random_range(0.0..std::f64::consts::TAU),
        );
        add_awgn(&mut rng, &mut st, p / 10.0);
        let mut acq = Acquirer::<N>::new(&nu, t_acq).unwrap();
        let Some(d) = acq.push(&st).unwrap() else {
            continue;
        };
        detected += 1;
        let e1 = f64::from(d.cfo_fraction);
        let mut data = st[lead + data_start..lead + data_start + 16 * S].to_vec();
        frequency_offset(&mut data, -e1 / N as f64, 0.0);
        let mut tr = CpTracker::<N, S>::new(&nu, 10.0).unwrap();
        tr.push(&data);
        let e2 = f64::from(tr.estimate().cfo);
        ok += usize::from((e1 + e2 - eps).abs() <= 0.01);
    }
    println!("residual |ε| ≤ 0.01 in {ok} of {trials} trials ({detected} detected)");
    assert!(ok as f64 >= 0.95 * trials as f64);
}

#[test]
fn integer_cp_tracker_matches_the_f32_one() {
    // The same Gaussian OFDM-like streams as Q15 samples at −12 dBFS, 10 dB, 16 symbols
    // accumulated: the integer tracker finds the same CP position as the f32 one in ≥ 99 % of
    // trials, and their CFOs differ by < 1e-3 RMS (the integer path only rounds).
    use flatbin::cp_sync_q15::CpTrackerQ15;
    use flatbin::fixed::Cq15;
    let nu = nu();
    let snr = 10f64;
    let rho_q16 = (snr / (snr + 1.0) * 65536.0).round() as u32;
    let mut rng = stream_rng(103, 0);
    let trials = 2000;
    let (mut same, mut d2) = (0usize, 0.0f64);
    for _ in 0..trials {
        let theta = rng.random_range(0..S);
        let len = N + L - 1 + 16 * S;
        let mut x = stream(theta, len, &mut rng);
        frequency_offset(
            &mut x,
            0.17 / N as f64,
            rng.random_range(0.0..std::f64::consts::TAU),
        );
        add_awgn(&mut rng, &mut x, 1.0 / snr);
        let scale = (10f64.powf(-1.2) / (1.0 + 1.0 / snr)).sqrt() as f32;
        let q: Vec<Cq15> = x.iter().map(|v| Cq15::from_cf32(v * scale)).collect();
        let back: Vec<Cf32> = q.iter().map(|v| v.to_cf32()).collect();
        let mut tf = CpTracker::<N, S>::new(&nu, 10.0).unwrap();
        tf.push(&back);
        let mut tq = CpTrackerQ15::<N, S>::new(&nu, rho_q16).unwrap();
        tq.push(&q);
        let (ef, eq) = (tf.estimate(), tq.estimate());
        same += usize::from(ef.cp_start == eq.cp_start);
        let e = f64::from(eq.cfo_q32) / 2f64.powi(32) - f64::from(ef.cfo);
        d2 += e * e;
    }
    let rms = (d2 / trials as f64).sqrt();
    println!("integer CP tracker: same position {same}/{trials}, CFO RMS difference {rms:.2e}");
    assert!(same as f64 >= 0.99 * trials as f64);
    assert!(rms < 1e-3);
}
