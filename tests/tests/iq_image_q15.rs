//! The integer image-rejection estimator (`flatbin::iq_image_q15`) against the f32 estimator
//! on identical inputs, and against the configured image rejection ratio on its own.
//!
//! References, as in `tests/iq_image.rs`: IRR = |μ|²/|ν|² = (1 + 2g cos φ + g²)/(1 − 2g cos φ +
//! g²) for `y = μx + νx*` (Tarighat, Bagheri & Sayed, IEEE Trans. Signal Process. 53(8), 2005 —
//! from memory; `flatbin_harness::theory::iq_image`, applied by
//! `flatbin_harness::impair::IqImbalance`); the estimate's spread from the sample size
//! (`σ_c ≈ 1/(2√(2n))` flat, `≤ 1/(2√n)` over Rayleigh fading, delta method to `ρ`; 4σ,
//! REFERENCES "Tolerances: general rules"); and the f32 estimator (`flatbin::iq_image`), which
//! `tests/iq_image.rs` checks against those on the same frames.
//!
//! The frames are those of `tests/iq_image.rs` (same seeds and draws), scaled to −12 dBFS and
//! rounded to Q15; the Q15 estimator reads the Q15 receiver's FFT output with its block
//! exponent, the f32 estimator the f32 FFT of the same Q15 samples read back as fractions.
//!
//! ## Tolerance between the two estimators (derived)
//!
//! With the inputs shared, the two differ by
//!
//! * the f32 estimator's own summation rounding: per-symbol partial sums of `m` pairs, then
//!   `S` symbols, in f32 (unit roundoff `u = 2^-24`); with round-to-nearest the relative error
//!   of such a sum stays within `λ√(S + m)·u` except with probability `2e^{−λ²/2}`
//!   (probabilistic rounding-error analysis; Higham & Mary, SIAM J. Sci. Comput. 41(5), 2019 —
//!   from memory); λ = 4, for `C` and for `P`;
//! * the Q15 FFT's rounding: circular noise at most `η = 10^-6.8` of the bin power (the Q15 FFT's
//!   tested SQNR at −12 dBFS, ≥ 68 dB); it raises `P` by `η` and, were the rounding of mirror
//!   bins fully correlated, moves `c` by at most `η`: `Δρ/ρ ≤ η(1 + 1/ρ)(1 + ρ²)²/(1 − ρ²)`;
//! * the integer outputs: dB in Q8 (±1/512), the integer `log2` (≤ 2^-16 octave, 1e-4 dB),
//!   `ρ` in Q31 with a 2^-30 reciprocal (negligible), and the f32 `log10` (1e-4 dB).

use flatbin::delay_spread_q15::MAX_BLOCK_EXPONENT;
use flatbin::fft::{MicroFft, OfdmFft};
use flatbin::fft_q15::Q15Fft;
use flatbin::fixed::Cq15;
use flatbin::fixed_math::Scaled;
use flatbin::front::Front;
use flatbin::iq_image::{IqImage, IqImageEstimator};
use flatbin::iq_image_q15::{IqImageEstimatorQ15, IqImageQ15};
use flatbin::numerology::{NumerologyParams, PilotParams};
use flatbin::receiver_q15::{samples_to_q15, DesignQ15, ReceiverQ15, ReceiverQ15Config};
use flatbin::transmit::Transmitter;
use flatbin::{Cf32, Modulation, Numerology, ProcessError};
use flatbin_harness::channel::profile::{DelayProfile, Quantisation};
use flatbin_harness::channel::sos::FadingParams;
use flatbin_harness::channel::tdl::{Tdl, Variation};
use flatbin_harness::impair::IqImbalance;
use flatbin_harness::noise::{add_awgn, n0_for_es_n0_db};
use flatbin_harness::rng::{stream_rng, HarnessRng};
use flatbin_harness::theory::iq_image::image_rejection_ratio;
use rand::RngExt;

const N: usize = 256;
const FS: f64 = 1.0e6;
const LEVEL_DBFS: f64 = -12.0;
/// Q15 FFT rounding noise relative to the bin power (module docs).
const ETA: f64 = 1.584_893_2e-7;
/// Unit roundoff of f32.
const U32: f64 = 5.960_464_5e-8;
/// dB per neper of amplitude, 20/ln 10.
const DB_PER_NEPER: f64 = 8.685_889_638;

fn numerology() -> Numerology {
    Numerology::new(NumerologyParams {
        fft_len: N,
        cp_len: 32,
        sample_rate_hz: FS as f32,
        guard_low_bins: 12,
        guard_high_bins: 11,
        dc_null: true,
        pilots: PilotParams::default(),
    })
    .unwrap()
}

struct Link {
    imbalance: IqImbalance,
    es_n0_db: f64,
    taps: Option<Vec<(usize, f64)>>,
    frames: usize,
    symbols_per_frame: usize,
}

struct Both {
    f: IqImage,
    q: IqImageQ15,
    /// Largest per-symbol pair count.
    pairs_per_symbol: usize,
    symbols: usize,
    /// Range of the block exponents seen.
    exponents: (i32, i32),
}

/// Runs `link` (noise at the mixer's input, as `tests/iq_image.rs`'s `BeforeMixer`) through
/// both estimators on the same Q15 samples.
fn both(nu: &Numerology, link: &Link, rng: &mut HarnessRng) -> Both {
    let mut tx = Transmitter::new(*nu, MicroFft::<N>::new()).unwrap();
    let mut front = Front::new(nu, MicroFft::<N>::new()).unwrap();
    let mut est = IqImageEstimator::<N>::new(nu).unwrap();
    let mut est_q = IqImageEstimatorQ15::<N>::new(nu).unwrap();
    let cfg = ReceiverQ15Config {
        signal_dbfs: LEVEL_DBFS as f32,
        ..ReceiverQ15Config::default()
    };
    let design =
        DesignQ15::<N, 4, 4>::new(nu, &cfg, <Q15Fft<N> as OfdmFft<N>>::RESIDUAL_SCALE).unwrap();
    let mut rx_q =
        Box::new(ReceiverQ15::<Q15Fft<N>, N, 4, 4>::new(nu, Q15Fft::new(), design).unwrap());
    let n0 = n0_for_es_n0_db(link.es_n0_db);
    let params = FadingParams::rayleigh(0.005 * FS / N as f64, FS, N);
    let a2 = f64::from(nu.pilot_amplitude()).powi(2);
    let unit_power = (nu.data_len(0) as f64 + a2 * nu.pilot_len(0) as f64) / N as f64;
    let scale = (10f64.powf(LEVEL_DBFS / 10.0) / unit_power).sqrt() as f32;
    let sym_len = nu.symbol_len();
    let mut samples = vec![Cf32::new(0.0, 0.0); sym_len];
    let mut rx = vec![Cf32::new(0.0, 0.0); sym_len];
    let mut q = vec![Cq15::ZERO; sym_len];
    let mut back = vec![Cf32::new(0.0, 0.0); sym_len];
    let mut bins = [Cf32::new(0.0, 0.0); N];
    let d = nu.max_data_len();
    let (mut xq, mut sq, mut lq) = (
        vec![Cq15::ZERO; d],
        vec![Scaled::default(); d],
        vec![0i8; 2 * d],
    );
    let (mut pairs_per_symbol, mut symbols, mut exponents) = (0, 0, (i32::MAX, i32::MIN));
    for _ in 0..link.frames {
        let mut line = link
            .taps
            .as_ref()
            .map(|t| Tdl::new(t, &params, Variation::Continuous, rng));
        for s in 0..link.symbols_per_frame as u32 {
            let bits: Vec<u8> = (0..tx.bits_per_ofdm_symbol(Modulation::Qpsk, s))
                .map(|_| rng.random::<u8>() & 1)
                .collect();
            tx.modulate(Modulation::Qpsk, &bits, s, &mut samples)
                .unwrap();
            match line.as_mut() {
                Some(l) => l.process(&samples, &mut rx),
                None => rx.copy_from_slice(&samples),
            }
            add_awgn(rng, &mut rx, n0);
            link.imbalance.apply(&mut rx);
            for v in rx.iter_mut() {
                *v *= scale;
            }
            samples_to_q15(&rx, &mut q).unwrap();
            for (b, v) in back.iter_mut().zip(&q) {
                *b = v.to_cf32() / scale;
            }
            front.demodulate(&back, &mut bins).unwrap();
            let before = est.pairs();
            est.update(&bins, s).unwrap();
            pairs_per_symbol = pairs_per_symbol.max((est.pairs() - before) as usize);
            rx_q.receive(&q, s, Modulation::Qpsk, &mut xq, &mut sq, &mut lq)
                .unwrap();
            let (bq, e) = rx_q.bins_with_exponent();
            exponents = (exponents.0.min(e), exponents.1.max(e));
            est_q.update(bq, e, s).unwrap();
            symbols += 1;
        }
        rx_q.reset();
    }
    let (f, q) = (est.estimate().unwrap(), est_q.estimate().unwrap());
    assert_eq!(f.pairs, q.pairs);
    assert_eq!(q.saturated_parts, 0);
    Both {
        f,
        q,
        pairs_per_symbol,
        symbols,
        exponents,
    }
}

/// `ρ = |ν/μ|` from the configured imbalance (the closed form's reciprocal).
fn rho_of(gain_db: f64, phase_deg: f64) -> f64 {
    image_rejection_ratio(gain_db, phase_deg).powf(-0.5)
}

/// `σ_ρ` for `n` pairs with `σ_c = c_scale/√n` (as `tests/iq_image.rs`).
fn sigma_rho(rho: f64, n: u64, c_scale: f64) -> f64 {
    c_scale / (n as f64).sqrt() * (1.0 + rho * rho).powi(2) / (1.0 - rho * rho)
}

/// Derived relative agreement of `ρ` (module docs) for `S` symbols of `m` pairs.
fn rho_agreement(rho: f64, symbols: usize, m: usize) -> f64 {
    let f32_sums = 2.0 * 4.0 * ((symbols + m) as f64).sqrt() * U32;
    let q15 = ETA * (1.0 + 1.0 / rho) * (1.0 + rho * rho).powi(2) / (1.0 - rho * rho);
    f32_sums + q15
}

/// dB agreement for a relative agreement `rel` of an amplitude ratio (module docs).
fn db_agreement(rel: f64) -> f64 {
    DB_PER_NEPER * rel + 1.0 / 512.0 + 2e-4
}

/// Checks one pair of reports against the derived agreement; returns `(|Δρ|/ρ, |ΔIRR| dB)`.
fn check_agreement(b: &Both, rho_ref: f64) -> (f64, f64) {
    let (f, q) = (&b.f, &b.q.to_f32());
    assert_eq!(f.resolved, q.resolved, "{f:?} {q:?}");
    // Ceiling: 3√Q/P; Q and P from f32 sums (λ√(S+m)·u each, half of Q's), Q15 raises both
    // by about η.
    let ceil_rel = 1.5 * 4.0 * ((b.symbols + b.pairs_per_symbol) as f64).sqrt() * U32 + 2.0 * ETA;
    let d_ceil = f64::from(q.ceiling_db - f.ceiling_db).abs();
    assert!(d_ceil <= db_agreement(ceil_rel), "ceiling {q:?} vs {f:?}");
    if !f.resolved {
        return (0.0, d_ceil);
    }
    let rel = rho_agreement(rho_ref, b.symbols, b.pairs_per_symbol);
    let d_rho = f64::from(q.image_ratio - f.image_ratio).abs() / f64::from(f.image_ratio);
    let d_db = f64::from(q.irr_db - f.irr_db).abs();
    assert!(
        d_rho <= rel,
        "ρ {} vs {} (rel {d_rho:.2e} > {rel:.2e})",
        q.image_ratio,
        f.image_ratio
    );
    assert!(
        d_db <= db_agreement(rel),
        "IRR {} vs {} dB",
        q.irr_db,
        f.irr_db
    );
    // The standard error: the same formula on the same sums, to the Q8 step and `rel`.
    let d_sd = f64::from(q.irr_sd_db - f.irr_sd_db).abs();
    assert!(
        d_sd <= 1.0 / 256.0 + 2.0 * rel * f64::from(f.irr_sd_db),
        "sd {q:?} vs {f:?}"
    );
    (d_rho, d_db)
}

/// The target on the Q15 estimator alone, with the f32 test's link (flat channel,
/// Es/N0 = 30 dB at the mixer's input, 20 000 QPSK symbols, IRR 19.6–35.2 dB): `|ρ̂ − ρ| ≤ 4σ_ρ`
/// with `σ_c = 1/(2√(2n))`; and the derived agreement with the f32 estimator.
#[test]
fn q15_irr_from_20_to_35_db() {
    let nu = numerology();
    for (i, (g_db, ph_deg)) in [(1.0f64, 10.0f64), (0.5, 5.0), (0.3, 2.5), (0.2, 1.5)]
        .into_iter()
        .enumerate()
    {
        let link = Link {
            imbalance: IqImbalance::new(g_db, ph_deg),
            es_n0_db: 30.0,
            taps: None,
            frames: 1,
            symbols_per_frame: 20_000,
        };
        let b = both(&nu, &link, &mut stream_rng(41, i as u64));
        let rho = rho_of(g_db, ph_deg);
        let n = u64::from(b.q.pairs);
        let tol = 4.0 * sigma_rho(rho, n, 1.0 / 8f64.sqrt());
        let r = b.q.to_f32();
        let (d_rho, d_db) = check_agreement(&b, rho);
        println!(
            "{g_db} dB / {ph_deg}°: IRR {:.3} dB; Q15 {:.3} dB (ρ {:.5}, accept ±{tol:.5}), f32 \
             {:.3} dB; |Δρ|/ρ {d_rho:.1e} (bound {:.1e}), |ΔIRR| {d_db:.4} dB (bound {:.4}); \
             ceiling Q15 {:.2} f32 {:.2} dB; exponents {:?}",
            -20.0 * rho.log10(),
            r.irr_db,
            r.image_ratio,
            b.f.irr_db,
            rho_agreement(rho, b.symbols, b.pairs_per_symbol),
            db_agreement(rho_agreement(rho, b.symbols, b.pairs_per_symbol)),
            r.ceiling_db,
            b.f.ceiling_db,
            b.exponents
        );
        assert!(r.resolved);
        assert!((f64::from(r.image_ratio) - rho).abs() <= tol);
    }
}

/// Over Rayleigh multipath (exponential, RMS 2 samples, a draw per 20-symbol frame, 30 dB):
/// the block exponent changes from frame to frame, the sums must still align; target 4σ with
/// the fading bound `σ_c ≤ 1/(2√n)`, and the derived agreement.
#[test]
fn q15_irr_over_rayleigh_multipath() {
    let nu = numerology();
    let taps = DelayProfile::exponential(2.0 / FS, FS)
        .unwrap()
        .to_sample_taps(FS, Quantisation::Nearest);
    for (i, (g_db, ph_deg)) in [(0.5f64, 5.0f64), (0.3, 2.5)].into_iter().enumerate() {
        let link = Link {
            imbalance: IqImbalance::new(g_db, ph_deg),
            es_n0_db: 30.0,
            taps: Some(taps.clone()),
            frames: 400,
            symbols_per_frame: 20,
        };
        let b = both(&nu, &link, &mut stream_rng(42, i as u64));
        let rho = rho_of(g_db, ph_deg);
        let tol = 4.0 * sigma_rho(rho, u64::from(b.q.pairs), 0.5);
        let r = b.q.to_f32();
        let (d_rho, d_db) = check_agreement(&b, rho);
        println!(
            "{g_db} dB / {ph_deg}° over fading: IRR {:.3} dB; Q15 {:.3} dB, f32 {:.3} dB; |Δρ|/ρ \
             {d_rho:.1e}, |ΔIRR| {d_db:.4} dB; exponents {:?}",
            -20.0 * rho.log10(),
            r.irr_db,
            b.f.irr_db,
            b.exponents
        );
        assert!(
            b.exponents.0 < b.exponents.1,
            "the exponent should vary over fading"
        );
        assert!(r.resolved);
        assert!((f64::from(r.image_ratio) - rho).abs() <= tol);
    }
}

/// Without imbalance: both unresolved, reporting the ceiling, which must be `P²/(9Q) ≈ 4n/9`
/// for unit-power QPSK bins within 0.1 dB (`tests/iq_image.rs`), and agree with the f32
/// ceiling within the derived bound. 20 estimates of 100 symbols at 40 dB.
#[test]
fn q15_ceiling_without_imbalance() {
    let nu = numerology();
    let mut resolved = 0;
    for t in 0..20u64 {
        let link = Link {
            imbalance: IqImbalance::new(0.0, 0.0),
            es_n0_db: 40.0,
            taps: None,
            frames: 1,
            symbols_per_frame: 100,
        };
        let b = both(&nu, &link, &mut stream_rng(43, t));
        let _ = check_agreement(&b, 1e-3);
        let r = b.q.to_f32();
        resolved += usize::from(r.resolved);
        let want = 10.0 * (4.0 * f64::from(r.pairs) / 9.0).log10();
        assert!(
            (f64::from(r.ceiling_db) - want).abs() <= 0.1,
            "{r:?} vs {want}"
        );
        if !r.resolved {
            assert_eq!(b.q.irr_db_q8, b.q.ceiling_db_q8);
            assert_eq!(b.q.image_ratio_q31, 0);
        }
    }
    // P(resolved) = e^{−10} per estimate (tests/iq_image.rs): none expected in 20.
    assert_eq!(resolved, 0);
}

/// Robustness: all-zero bins give no estimate; full-scale bins are accepted, flagged and
/// read as the formula gives;
/// exponents beyond ±`MAX_BLOCK_EXPONENT` are rejected with nothing accumulated; the extreme
/// accepted exponents mixed give no panic and a finite report.
#[test]
fn q15_iq_image_on_degenerate_input() {
    let nu = numerology();
    let mut est = IqImageEstimatorQ15::<N>::new(&nu).unwrap();
    assert!(est.estimate().is_none());
    est.update(&[Cq15::ZERO; N], 0, 0).unwrap();
    assert!(est.estimate().is_none(), "silence");
    let pairs = est.pairs();
    assert!(pairs > 0);
    for e in [
        i32::MIN,
        -MAX_BLOCK_EXPONENT - 1,
        MAX_BLOCK_EXPONENT + 1,
        i32::MAX,
    ] {
        assert_eq!(
            est.update(&[Cq15::new(100, 100); N], e, 1),
            Err(ProcessError::OutOfRange { index: 1 })
        );
    }
    assert_eq!(est.pairs(), pairs);
    est.reset();
    for (s, v) in [(0u32, i16::MAX), (1, i16::MIN)] {
        est.update(&[Cq15::new(v, v); N], 0, s).unwrap();
    }
    let r = est.estimate().unwrap();
    println!("full scale: {r:?}");
    assert_eq!(r.saturated_parts, 4 * r.pairs);
    // Y_k = Y_{−k} = v(1 + j) on every pair: C = Σ 2j v², P = Σ 4v², Q = Σ 4v⁴, so the
    // debiased c² = (|C|² − Q)/P² = (n − 1)/(4n) (module docs of flatbin::iq_image) and
    // ρ = 2c/(1 + sqrt(1 − 4c²)).
    let n = f64::from(r.pairs);
    let c = ((n - 1.0) / (4.0 * n)).sqrt();
    let rho = 2.0 * c / (1.0 + (1.0 - 4.0 * c * c).sqrt());
    assert!(r.resolved);
    assert!(
        (f64::from(r.irr_db_q8) / 256.0 + 20.0 * rho.log10()).abs() <= 1.0 / 256.0,
        "{r:?} vs ρ {rho}"
    );
    est.reset();
    for (s, e) in [
        (0u32, MAX_BLOCK_EXPONENT),
        (1, -MAX_BLOCK_EXPONENT),
        (2, MAX_BLOCK_EXPONENT),
    ] {
        let bins: [Cq15; N] =
            core::array::from_fn(|i| Cq15::new((i as i16) * 97, 3000 - i as i16 * 13));
        est.update(&bins, e, s).unwrap();
    }
    let r = est.estimate().unwrap();
    println!("extreme exponents: {r:?}");
    assert!(r.ceiling_db_q8 >= 0 && r.irr_db_q8 >= 0);
    // Random parts and exponents over the whole accepted range (no panic; run with overflow
    // checks by `cargo test`), then a report with every pair counted.
    est.reset();
    let mut rng = stream_rng(44, 0);
    for s in 0..300u32 {
        let bins: [Cq15; N] =
            core::array::from_fn(|_| Cq15::new(rng.random::<i16>(), rng.random::<i16>()));
        let e = rng.random_range(-MAX_BLOCK_EXPONENT..=MAX_BLOCK_EXPONENT);
        est.update(&bins, e, s).unwrap();
    }
    let r = est.estimate().unwrap();
    println!("random parts and exponents: {r:?}");
    assert!(r.ceiling_db_q8 >= 0 && r.irr_db_q8 >= 0);
}
