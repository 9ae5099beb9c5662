//! The core's blind image-rejection estimator (`flatbin::iq_image`) against the image
//! rejection ratio of the harness's receiver IQ imbalance.
//!
//! Reference: IRR = |μ|²/|ν|² = (1 + 2g cos φ + g²)/(1 − 2g cos φ + g²) for the model
//! `y = μx + νx*`, `μ = (1 + g e^{−jφ})/2`, `ν = (1 − g e^{jφ})/2` (A. Tarighat, R. Bagheri,
//! A. H. Sayed, "Compensation schemes and performance analysis of IQ imbalances in OFDM
//! receivers," IEEE Trans. Signal Process. 53(8):3257–3268, 2005 — from memory; the closed form
//! is `flatbin_harness::theory::iq_image`, applied by `flatbin_harness::impair::IqImbalance`).
//!
//! Tolerances come from the sample size. With `n` pairs of independent QPSK bins (unit power,
//! flat channel), `C = Σ Y_k Y_{−k}` fluctuates around its mean with `E|ΔC|² ≈ n·E|Y_k|²|Y_{−k}|²`,
//! circularly, so along the mean's direction `Var = n·E|Y_k|²|Y_{−k}|²/2`; with
//! `P = Σ|Y_k|² + |Y_{−k}|² ≈ 2n E|Y|²` the ratio `c = |C|/P` has `σ_c ≈ 1/(2√(2n))`, and
//! `ρ = |ν/μ|` from `c = ρ/(1 + ρ²)` has `σ_ρ = σ_c (1 + ρ²)²/(1 − ρ²)` (delta method; common
//! practice). Over Rayleigh fading `E|H_k|²|H_{−k}|² ≤ E|H|⁴ = 2` (Gaussian fourth moment),
//! so `σ_c ≤ 1/(2√n)`. Checks accept `|ρ̂ − ρ| ≤ 4σ_ρ` (REFERENCES "Tolerances: general rules").

use flatbin::fft::MicroFft;
use flatbin::front::Front;
use flatbin::iq_image::{IqImage, IqImageEstimator};
use flatbin::numerology::{NumerologyParams, PilotParams};
use flatbin::transmit::Transmitter;
use flatbin::{Cf32, Modulation, Numerology};
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

/// Where the noise enters relative to the mixer.
#[derive(Clone, Copy, PartialEq)]
enum Noise {
    /// Before the imbalance (thermal noise at the mixer's input).
    BeforeMixer,
    /// After it (baseband, ADC).
    AfterMixer,
}

struct Link {
    imbalance: IqImbalance,
    es_n0_db: f64,
    noise: Noise,
    /// `None`: flat channel (H = 1). Otherwise sample taps, one Rayleigh draw per frame.
    taps: Option<Vec<(usize, f64)>>,
    frames: usize,
    symbols_per_frame: usize,
}

/// Pairs `k > 0`, `−k` of data bins in symbol `symbol`, counted from the numerology's data-bin
/// list (independently of the estimator's own mirror map).
fn data_pairs(nu: &Numerology, symbol: u32) -> u64 {
    let ks: Vec<i64> = nu
        .data_bins(symbol)
        .map(|i| {
            if i >= N / 2 {
                i as i64 - N as i64
            } else {
                i as i64
            }
        })
        .collect();
    ks.iter().filter(|&&k| k > 0 && ks.contains(&-k)).count() as u64
}

/// Runs `link` and returns the estimate and the number of pairs × symbols.
fn estimate(nu: &Numerology, link: &Link, rng: &mut HarnessRng) -> (IqImage, u64) {
    let mut tx = Transmitter::new(*nu, MicroFft::<N>::new()).unwrap();
    let mut front = Front::new(nu, MicroFft::<N>::new()).unwrap();
    let mut est = IqImageEstimator::<N>::new(nu).unwrap();
    let n0 = n0_for_es_n0_db(link.es_n0_db);
    let params = FadingParams::rayleigh(0.005 * FS / N as f64, FS, N);
    let sym_len = nu.symbol_len();
    let mut samples = vec![Cf32::new(0.0, 0.0); sym_len];
    let mut rx = vec![Cf32::new(0.0, 0.0); sym_len];
    let mut bins = [Cf32::new(0.0, 0.0); N];
    let mut pairs = 0u64;
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
            if link.noise == Noise::BeforeMixer {
                add_awgn(rng, &mut rx, n0);
            }
            link.imbalance.apply(&mut rx);
            if link.noise == Noise::AfterMixer {
                add_awgn(rng, &mut rx, n0);
            }
            front.demodulate(&rx, &mut bins).unwrap();
            est.update(&bins, s).unwrap();
            pairs += data_pairs(nu, s);
        }
    }
    let r = est.estimate().unwrap();
    assert_eq!(u64::from(r.pairs), pairs);
    (r, pairs)
}

/// `ρ = |ν/μ|` from the configured imbalance (the closed form's reciprocal).
fn rho_of(gain_db: f64, phase_deg: f64) -> f64 {
    image_rejection_ratio(gain_db, phase_deg).powf(-0.5)
}

/// `σ_ρ` for `n` pairs with `σ_c = c_scale/√n` (module docs).
fn sigma_rho(rho: f64, n: u64, c_scale: f64) -> f64 {
    c_scale / (n as f64).sqrt() * (1.0 + rho * rho).powi(2) / (1.0 - rho * rho)
}

/// The target: IRR within a tolerance derived from the sample size, for 20–35 dB, at
/// high SNR (Es/N0 = 30 dB, noise at the mixer's input), flat channel, 20 000 symbols of QPSK.
#[test]
fn irr_from_20_to_35_db() {
    let nu = numerology();
    for (i, (g_db, ph_deg)) in [(1.0f64, 10.0f64), (0.5, 5.0), (0.3, 2.5), (0.2, 1.5)]
        .into_iter()
        .enumerate()
    {
        let link = Link {
            imbalance: IqImbalance::new(g_db, ph_deg),
            es_n0_db: 30.0,
            noise: Noise::BeforeMixer,
            taps: None,
            frames: 1,
            symbols_per_frame: 20_000,
        };
        let (r, n) = estimate(&nu, &link, &mut stream_rng(41, i as u64));
        let rho = rho_of(g_db, ph_deg);
        let irr = 10.0 * image_rejection_ratio(g_db, ph_deg).log10();
        let tol = 4.0 * sigma_rho(rho, n, 1.0 / 8f64.sqrt());
        let (lo, hi) = (-20.0 * (rho + tol).log10(), -20.0 * (rho - tol).log10());
        println!(
            "{g_db} dB / {ph_deg}°: IRR {irr:.2} dB, estimate {:.2} dB (accept {lo:.2}..{hi:.2}; \
             reported sd {:.3} dB), ceiling {:.1} dB, {n} pairs",
            r.irr_db, r.irr_sd_db, r.ceiling_db
        );
        assert!((19.0..=36.0).contains(&irr));
        assert!(r.resolved);
        assert!((f64::from(r.image_ratio) - rho).abs() <= tol);
    }
}

/// The channel drops out of the estimator (only bin powers enter `E[C]`): over Rayleigh
/// multipath (exponential profile, RMS 2 samples, one draw per frame of 20 symbols), at
/// 30 dB, the estimate still lies within 4σ of the configured ratio, σ from the fading bound
/// `σ_c ≤ 1/(2√n)`.
#[test]
fn irr_over_rayleigh_multipath() {
    let nu = numerology();
    let taps = DelayProfile::exponential(2.0 / FS, FS)
        .unwrap()
        .to_sample_taps(FS, Quantisation::Nearest);
    for (i, (g_db, ph_deg)) in [(0.5f64, 5.0f64), (0.3, 2.5)].into_iter().enumerate() {
        let link = Link {
            imbalance: IqImbalance::new(g_db, ph_deg),
            es_n0_db: 30.0,
            noise: Noise::BeforeMixer,
            taps: Some(taps.clone()),
            frames: 400,
            symbols_per_frame: 20,
        };
        let (r, n) = estimate(&nu, &link, &mut stream_rng(42, i as u64));
        let rho = rho_of(g_db, ph_deg);
        let tol = 4.0 * sigma_rho(rho, n, 0.5);
        println!(
            "{g_db} dB / {ph_deg}° over fading: IRR {:.2} dB, estimate {:.2} dB (accept {:.2}..{:.2})",
            -20.0 * rho.log10(),
            r.irr_db,
            -20.0 * (rho + tol).log10(),
            -20.0 * (rho - tol).log10()
        );
        assert!(r.resolved);
        assert!((f64::from(r.image_ratio) - rho).abs() <= tol);
    }
}

/// Marcum Q-function `Q_1(a, b) = ∫_b^∞ x e^{−(x² + a²)/2} I_0(ax) dx` (the Rice tail; its
/// definition, integrated numerically: Simpson on [b, b + 16] with step 1e-3, `I_0` by its power
/// series, scaled by `e^{−ax}`).
fn marcum_q1(a: f64, b: f64) -> f64 {
    let i0_scaled = |z: f64| {
        let (mut term, mut sum, mut k) = (1.0f64, 1.0f64, 1.0f64);
        while term > 1e-18 * sum {
            term *= (z / 2.0).powi(2) / (k * k);
            sum += term;
            k += 1.0;
        }
        sum * (-z).exp()
    };
    let f = |x: f64| x * (-(x - a).powi(2) / 2.0).exp() * i0_scaled(a * x);
    let (h, steps) = (1e-3, 16_000usize);
    let mut acc = f(b) + f(b + h * steps as f64);
    for i in 1..steps {
        acc += f(b + h * i as f64) * if i % 2 == 1 { 4.0 } else { 2.0 };
    }
    acc * h / 3.0
}

/// The ceiling. For unit-power QPSK bins the reported ceiling `P²/(9Q)` should be `4n/9`
/// (`P ≈ 2n`, `Q ≈ n`, module docs), within 0.1 dB (Q's own fluctuation is far smaller).
///
/// Resolved means `|C|² > 10 Q`. `C` is the image term `s` plus a circular Gaussian
/// fluctuation of variance `Q` (central limit over the pairs), so with `λ = |s|²/Q` the
/// probability is the Rice tail `Q_1(√(2λ), √20)` (Marcum; Proakis & Salehi, *Digital
/// Communications*, 5th ed., Ch. 2, from memory). At the ceiling `|s|² = 9Q`, so an image
/// whose IRR lies `Δ` dB above the ceiling has `λ = 9·10^{−Δ/10}`. Over 200 estimates of 100
/// symbols each, the number resolved must lie within 4 binomial standard deviations of
/// `200·Q_1`: none without an imbalance (`λ = 0`: `e^{−10}`), almost none 10 dB above the
/// ceiling, about 9 % 3 dB above it, about 45 % at it, all 10 dB below it.
#[test]
fn ceiling_is_where_the_image_meets_the_estimate_noise() {
    let nu = numerology();
    let trials = 200u64;
    let symbols = 100;
    let run = |imbalance: IqImbalance, t: u64, stream: u64| {
        let link = Link {
            imbalance,
            es_n0_db: 40.0,
            noise: Noise::BeforeMixer,
            taps: None,
            frames: 1,
            symbols_per_frame: symbols,
        };
        estimate(&nu, &link, &mut stream_rng(43 + stream, t))
    };
    let within = |count: usize, lambda: f64| {
        let p = marcum_q1((2.0 * lambda).sqrt(), 20f64.sqrt());
        let (mean, sd) = (trials as f64 * p, (trials as f64 * p * (1.0 - p)).sqrt());
        println!("  λ = {lambda:.2}: P(resolved) = {p:.3e}, {count}/{trials} resolved");
        (count as f64 - mean).abs() <= 4.0 * sd + 1e-9
    };
    // The tail formula against its closed form at λ = 0: e^{−10}.
    assert!((marcum_q1(0.0, 20f64.sqrt()) / (-10f64).exp() - 1.0).abs() < 1e-6);
    // No imbalance.
    let (mut resolved, mut ceiling) = (0, 0.0);
    for t in 0..trials {
        let (r, n) = run(IqImbalance::new(0.0, 0.0), t, 0);
        resolved += usize::from(r.resolved);
        ceiling = f64::from(r.ceiling_db);
        let want = 10.0 * (4.0 * n as f64 / 9.0).log10();
        assert!((ceiling - want).abs() <= 0.1, "{r:?} vs {want}");
        if !r.resolved {
            // Unresolved: the report is the ceiling, a lower bound on the IRR.
            assert_eq!(r.irr_db, r.ceiling_db);
            assert_eq!(r.image_ratio, 0.0);
        }
    }
    println!("no imbalance: ceiling {ceiling:.2} dB");
    assert!(within(resolved, 0.0));
    // Phase-only imbalance: IRR = cot²(φ/2) (the closed form at g = 1), set around the
    // ceiling.
    for (offset_db, stream) in [(10.0f64, 1u64), (3.0, 3), (0.0, 4), (-10.0, 2)] {
        let irr_db = ceiling + offset_db;
        let phase_deg = 2.0 * (10f64.powf(-irr_db / 20.0)).atan().to_degrees();
        assert!((10.0 * image_rejection_ratio(0.0, phase_deg).log10() - irr_db).abs() < 1e-9);
        let mut count = 0;
        for t in 0..trials {
            let (r, _) = run(IqImbalance::new(0.0, phase_deg), t, stream);
            count += usize::from(r.resolved);
        }
        println!("IRR {irr_db:.1} dB (ceiling {offset_db:+} dB):");
        assert!(within(count, 9.0 * 10f64.powf(-offset_db / 10.0)));
    }
}

/// Noise added *after* the mixer is circular: it adds to `P` but not to `C`, so the estimate
/// reads high by `20 log10(1 + N0/(|μ|² + |ν|²))` dB (module docs; derived from the model).
/// At Es/N0 = 10 dB that is 0.83 dB; noise *before* the mixer biases nothing. 20 000 symbols,
/// flat channel; the 4σ tolerance as in `irr_from_20_to_35_db`, with `P` and `Q` grown by
/// the noise: `σ_c ≈ 1/(2√(2n))` still holds relative to `P`.
#[test]
fn noise_after_the_mixer_biases_high_by_the_snr() {
    let nu = numerology();
    let (g_db, ph_deg) = (0.5f64, 5.0f64);
    let es_n0_db = 10.0;
    let n0 = n0_for_es_n0_db(es_n0_db);
    let g = 10f64.powf(g_db / 20.0);
    // |μ|² + |ν|² = (1 + g²)/2 for μ = (1 + g e^{−jφ})/2, ν = (1 − g e^{jφ})/2.
    let power = (1.0 + g * g) / 2.0;
    let rho = rho_of(g_db, ph_deg);
    for (noise, stream) in [(Noise::BeforeMixer, 0u64), (Noise::AfterMixer, 1)] {
        let link = Link {
            imbalance: IqImbalance::new(g_db, ph_deg),
            es_n0_db,
            noise,
            taps: None,
            frames: 1,
            symbols_per_frame: 20_000,
        };
        let (r, n) = estimate(&nu, &link, &mut stream_rng(44, stream));
        // c shrinks by the factor power/(power + N0); the estimate follows ρ' from c'.
        let scale = if noise == Noise::AfterMixer {
            power / (power + n0)
        } else {
            1.0
        };
        let c_true = rho / (1.0 + rho * rho) * scale;
        let rho_want = 2.0 * c_true / (1.0 + (1.0 - 4.0 * c_true * c_true).sqrt());
        let tol = 4.0 * sigma_rho(rho_want, n, 1.0 / 8f64.sqrt());
        println!(
            "noise {}: IRR {:.2} dB, expected reading {:.2} dB, estimate {:.2} dB (accept {:.2}..{:.2})",
            if noise == Noise::AfterMixer { "after" } else { "before" },
            -20.0 * rho.log10(),
            -20.0 * rho_want.log10(),
            r.irr_db,
            -20.0 * (rho_want + tol).log10(),
            -20.0 * (rho_want - tol).log10()
        );
        assert!(r.resolved);
        assert!((f64::from(r.image_ratio) - rho_want).abs() <= tol);
    }
}
