//! DC offset and digital gain from the preamble (issue 8): the DC estimate's error against the
//! variance of a sample mean, its bias under a CFO against the Dirichlet-kernel expression, the
//! CFO-aware estimate's bias and variance, and the FFT-input level the gain sets across input levels with a 12-bit ADC, in f32 and Q15.
//! Levels in dBFS: total complex power against a full-scale complex sinusoid (DESIGN.md).

use flatbin::fft::MicroFft;
use flatbin::fixed::Cq15;
use flatbin::gain_dc::{
    estimate_dc, estimate_dc_cfo, estimate_dc_cfo_q15, gain_for_backoff, gain_for_backoff_q15,
    preamble_power, remove_dc, remove_dc_q15, target_amplitude_q30, DcSumsQ15, PowerQ15,
};
use flatbin::nco::increment_for_cfo;
use flatbin::numerology::NumerologyParams;
use flatbin::preamble::{preamble_grid, write_preamble, PreambleSymbol};
use flatbin::receiver_q15::DigitalGain;
use flatbin::transmit::Transmitter;
use flatbin::{Cf32, Modulation, Numerology};
use flatbin_harness::impair::{dc_offset, frequency_offset, Adc};
use flatbin_harness::noise::add_awgn;
use flatbin_harness::rng::stream_rng;
use rand::RngExt;
use rustfft::num_complex::Complex64;
use std::f64::consts::PI;

fn numerology(n: usize) -> Numerology {
    Numerology::new(NumerologyParams {
        fft_len: n,
        cp_len: n / 8,
        guard_low_bins: n / 16,
        guard_high_bins: n / 16 - 1,
        ..NumerologyParams::default()
    })
    .unwrap()
}

/// The preamble (symbols A and B with their CPs) scaled to `level_dbfs`, and its per-sample
/// power before scaling.
fn preamble<const N: usize>(nu: &Numerology, level_dbfs: f64) -> (Vec<Cf32>, f64) {
    let mut pre = vec![Cf32::default(); 2 * nu.symbol_len()];
    write_preamble(nu, &mut MicroFft::<N>::new(), &mut pre).unwrap();
    let p: f64 = pre[nu.cp_len()..nu.symbol_len()]
        .iter()
        .map(|v| f64::from(v.norm_sqr()))
        .sum::<f64>()
        / N as f64;
    let scale = (10f64.powf(level_dbfs / 10.0) / p).sqrt() as f32;
    for v in pre.iter_mut() {
        *v *= scale;
    }
    (pre, p)
}

fn c64(v: Cf32) -> Complex64 {
    Complex64::new(f64::from(v.re), f64::from(v.im))
}

fn q64(v: Cq15) -> Complex64 {
    Complex64::new(f64::from(v.re), f64::from(v.im)) / 32768.0
}

/// The value of a gain, `mant · 2^(shift − 15)`.
fn value(g: DigitalGain) -> f64 {
    f64::from(g.mant) * 2f64.powi(g.shift - 15)
}

#[test]
fn dc_estimate_error_is_the_noise_mean() {
    // Preamble at −12 dBFS, DC 0.05 + 0.03j, complex AWGN 10 dB below the preamble's power,
    // windows of whole useful symbols starting mid-CP (where acquisition puts them). The
    // error of a mean of W independent samples of variance σ² has variance σ²/W (common
    // practice). Over whole symbols the preamble's own mean is exactly zero (empty DC bin),
    // so σ² is the noise alone (σ²_n), not the total σ²_s + σ²_n — 10.4 dB less here.
    // |error|² of a complex Gaussian mean is exponential: its mean over T trials has relative
    // standard deviation 1/√T, so the tolerance is 4/√T (common practice).
    const N: usize = 64;
    let nu = numerology(N);
    let (clean, _) = preamble::<N>(&nu, -12.0);
    let p_s = 10f64.powf(-1.2);
    let n0 = p_s / 10.0;
    let dc = Cf32::new(0.05, 0.03);
    let (cp, sym) = (nu.cp_len(), nu.symbol_len());
    let win_a = cp / 2..cp / 2 + N;
    let win_b = sym + cp / 2..sym + cp / 2 + N;
    let adc = Adc { bits: 12 };
    // 12-bit ADC: uniform quantisation of step 2^-11 per part adds 2·step²/12 (common
    // practice); the Q15 mean's own rounding adds 2·(2^-15)²/12.
    let q_adc = 2.0 * 2f64.powi(-22) / 12.0;
    let q_mean = 2.0 * 2f64.powi(-30) / 12.0;
    let trials = 4000;
    let mut rng = stream_rng(811, 0);
    let (mut e_a, mut e_ab, mut e_q) = (0.0, 0.0, 0.0);
    let (mut bias_a, mut bias_q) = (Complex64::new(0.0, 0.0), Complex64::new(0.0, 0.0));
    let mut q = vec![Cq15::ZERO; clean.len()];
    for _ in 0..trials {
        let mut s = clean.clone();
        add_awgn(&mut rng, &mut s, n0);
        dc_offset(&mut s, dc);
        let da = c64(estimate_dc(&s[win_a.clone()])) - c64(dc);
        let db_ = c64(estimate_dc(&s[win_b.clone()])) - c64(dc);
        let dab = (da + db_) / 2.0;
        e_a += da.norm_sqr();
        e_ab += dab.norm_sqr();
        bias_a += da;
        adc.convert(&s, &mut q);
        let mut sums = DcSumsQ15::new();
        sums.add(&q[win_a.clone()]);
        sums.add(&q[win_b.clone()]);
        let dq = q64(sums.mean()) - c64(dc);
        e_q += dq.norm_sqr();
        bias_q += dq;
    }
    let t = trials as f64;
    let w = N as f64;
    let rows = [
        ("f32, symbol A", e_a / t, n0 / w, w),
        ("f32, symbols A and B", e_ab / t, n0 / (2.0 * w), 2.0 * w),
        (
            "Q15 from the 12-bit ADC, A and B",
            e_q / t,
            (n0 + q_adc) / (2.0 * w) + q_mean,
            2.0 * w,
        ),
    ];
    for (name, got, want, w) in rows {
        let total = (p_s + n0) / w;
        println!(
            "DC error variance, {name} (W = {w}): {got:.4e} vs sigma_n^2/W {want:.4e} (ratio \
             {:.3}, tolerance 4/sqrt(T) = {:.3}); sigma_total^2/W would be {total:.4e}",
            got / want,
            4.0 / t.sqrt()
        );
        assert!(
            (got / want - 1.0).abs() <= 4.0 / t.sqrt(),
            "{name}: {got} vs {want}"
        );
        assert!(
            got < total / 5.0,
            "{name}: the preamble's zero mean is not exploited"
        );
    }
    // Unbiased: each part of the mean error within 4 standard errors, √(σ²/(2W)/T).
    for (b, var) in [(bias_a / t, n0 / w), (bias_q / t, (n0 + q_adc) / (2.0 * w))] {
        let se = (var / 2.0 / t).sqrt();
        assert!(b.re.abs() <= 4.0 * se && b.im.abs() <= 4.0 * se, "bias {b}");
    }
}

#[test]
fn dc_bias_under_cfo_is_the_dirichlet_leakage() {
    // Noise-free preamble with a CFO ε from the first CP sample (stream index 0), DC absent:
    // the mean over symbol A's useful part (stream indices L … L+N−1) is, from the unitary
    // IDFT and the geometric series (textbook),
    //   e^{j2πεL/N} · (1/√N) · Σ_k X_A[k] · D(k + ε),  D(x) = e^{jπx(N−1)/N} sin(πx)/(N sin(πx/N)).
    // The leakage is reported against the signal's RMS amplitude and against the noise-only
    // error σ_n/√N at 10 dB SNR.
    fn run<const N: usize>(eps: f64) -> (f64, f64) {
        let nu = numerology(N);
        let (mut s, p) = preamble::<N>(&nu, 0.0);
        frequency_offset(&mut s, eps / N as f64, 0.0);
        let l = nu.cp_len();
        let got = c64(estimate_dc(&s[l..l + N]));
        let mut grid = [Cf32::default(); N];
        preamble_grid(&nu, PreambleSymbol::A, &mut grid);
        let scale = (1.0 / p).sqrt();
        let d = |x: f64| {
            Complex64::from_polar(1.0, PI * x * (N - 1) as f64 / N as f64) * (PI * x).sin()
                / (N as f64 * (PI * x / N as f64).sin())
        };
        let mut want = Complex64::new(0.0, 0.0);
        for (i, v) in grid.iter().enumerate() {
            let k = if i < N / 2 {
                i as f64
            } else {
                i as f64 - N as f64
            };
            want += c64(*v) * d(k + eps);
        }
        want *= Complex64::from_polar(
            scale / (N as f64).sqrt(),
            2.0 * PI * eps * l as f64 / N as f64,
        );
        assert!(
            (got - want).norm() < 2e-6,
            "N={N} eps={eps}: {got} vs {want}"
        );
        // Relative to the RMS amplitude (1 here) and to σ_n/√N with σ_n² = 0.1.
        (got.norm(), got.norm() / (0.1 / N as f64).sqrt())
    }
    for eps in [0.1, 0.3, 0.5] {
        let (a64, r64) = run::<64>(eps);
        let (a256, r256) = run::<256>(eps);
        println!(
            "CFO {eps}: preamble A mean {:.1} dB re its RMS amplitude ({r64:.2} x the noise-only \
             error at 10 dB) for N = 64; {:.1} dB ({r256:.2} x) for N = 256",
            20.0 * a64.log10(),
            20.0 * a256.log10()
        );
    }
}

#[test]
fn cfo_aware_dc_estimate_is_unbiased_at_cfo_0_3() {
    // N = 64, CFO ε = 0.3 from stream index 0, preamble at −12 dBFS, DC 0.05 + 0.03j, AWGN
    // 10 dB below the preamble, symbol A's window (mid-CP start). The plain mean carries the
    // Dirichlet leakage (previous test) as a bias; d̂ = Σ y e^{−j2πεn/N} / Σ e^{−j2πεn/N}
    // has none, and error variance σ²_n/(W|D(ε)|²), D(ε) = sin(πε)/(N sin(πε/N)) (variance
    // of a weighted mean of independent samples; common practice). Tolerances as in the
    // noise-mean test: 4/√T on the variance, 4 standard errors on each part of the bias.
    const N: usize = 64;
    let eps = 0.3f64;
    let nu = numerology(N);
    let (mut clean, _) = preamble::<N>(&nu, -12.0);
    frequency_offset(&mut clean, eps / N as f64, 0.0);
    let n0 = 10f64.powf(-1.2) / 10.0;
    let dc = Cf32::new(0.05, 0.03);
    let win = nu.cp_len() / 2..nu.cp_len() / 2 + N;
    let d2 = ((PI * eps).sin() / (N as f64 * (PI * eps / N as f64).sin())).powi(2);
    let want_var = n0 / (N as f64 * d2);
    let q_adc = 2.0 * 2f64.powi(-22) / 12.0;
    let inc = increment_for_cfo(eps as f32, N);
    let trials = 4000;
    let t = trials as f64;
    let mut rng = stream_rng(813, 0);
    let zero = Complex64::new(0.0, 0.0);
    let (mut plain, mut aware, mut aware_q) = ((zero, 0.0), (zero, 0.0), (zero, 0.0));
    let mut q = vec![Cq15::ZERO; clean.len()];
    let add = |acc: &mut (Complex64, f64), e: Complex64| {
        acc.0 += e;
        acc.1 += e.norm_sqr();
    };
    for _ in 0..trials {
        let mut s = clean.clone();
        add_awgn(&mut rng, &mut s, n0);
        dc_offset(&mut s, dc);
        add(&mut plain, c64(estimate_dc(&s[win.clone()])) - c64(dc));
        let e = estimate_dc_cfo(&s[win.clone()], eps as f32, N).unwrap();
        add(&mut aware, c64(e) - c64(dc));
        Adc { bits: 12 }.convert(&s, &mut q);
        let e = estimate_dc_cfo_q15(&q[win.clone()], inc).unwrap();
        add(&mut aware_q, q64(e) - c64(dc));
    }
    let se = (want_var / 2.0 / t).sqrt();
    for (name, (sum, sum2), var) in [
        ("plain mean", plain, n0 / N as f64),
        ("CFO-aware f32", aware, want_var),
        ("CFO-aware Q15", aware_q, want_var + q_adc / (N as f64 * d2)),
    ] {
        let bias = sum / t;
        let mse = sum2 / t;
        println!(
            "{name}: bias {:.2e} ({:.1} standard errors), MSE {mse:.4e} vs sigma_n^2/(W D^2) \
             {var:.4e} (ratio {:.3})",
            bias.norm(),
            bias.norm() / se,
            mse / var
        );
        if name == "plain mean" {
            // The leakage bias is far outside the noise (the reason for the CFO-aware form).
            assert!(bias.norm() > 20.0 * se);
        } else {
            assert!(
                bias.re.abs() <= 4.0 * se && bias.im.abs() <= 4.0 * se,
                "{name}: {bias}"
            );
            assert!(
                (mse / var - 1.0).abs() <= 4.0 / t.sqrt(),
                "{name}: {mse} vs {var}"
            );
        }
    }
    // At zero CFO the CFO-aware form is the plain mean.
    let s = &clean[win];
    let a = estimate_dc_cfo(s, 0.0, N).unwrap();
    assert!((a - estimate_dc(s)).norm() < 1e-6);
    // Near an integer CFO it refuses.
    assert_eq!(estimate_dc_cfo(s, 1.0, N), None);
    assert_eq!(
        estimate_dc_cfo_q15(&q[..N], increment_for_cfo(2.0, N)),
        None
    );
}

#[test]
fn gain_puts_the_fft_input_at_the_target_from_minus_50_to_minus_3_dbfs() {
    // N = 256 frames: preamble + 8 QPSK symbols (no pilot boost: the same power as the
    // preamble), AWGN 10 dB below the signal, DC 0.05 + 0.03j, 12-bit ADC. DC and power from
    // symbols A and B's windows (mid-CP starts, 2N samples), gain to −12 dBFS, then the level
    // of the data symbols' windows after DC removal and gain. Spread of one frame's level
    // error: the power of W samples of signal S plus noise σ² has relative standard deviation
    // √((2Sσ² + σ⁴)/W)/(S + σ²) (Gaussian noise; common practice): 0.080 dB over the 2N
    // preamble samples, 0.040 dB over the 8N data samples, 0.089 dB combined, so ±0.5 dB is
    // 5.6 standard deviations.
    const N: usize = 256;
    let nu = numerology(N);
    let (cp, sym) = (nu.cp_len(), nu.symbol_len());
    let mut tx = Transmitter::new(nu, MicroFft::<N>::new()).unwrap();
    let data_symbols = 8;
    // Unit-energy bins, as the transmitter's data symbols (per-sample power used/N).
    let mut pre = vec![Cf32::default(); 2 * sym];
    write_preamble(&nu, &mut MicroFft::<N>::new(), &mut pre).unwrap();
    let p_pre = nu.used_len() as f64 / N as f64;
    let target = -12.0f32;
    let t_q30 = target_amplitude_q30(target);
    let adc = Adc { bits: 12 };
    let dc = Cf32::new(0.05, 0.03);
    let levels = [
        -50.0, -45.0, -40.0, -35.0, -30.0, -25.0, -20.0, -15.0, -10.0, -5.0, -3.0,
    ];
    let frames = 10;
    let mut rng = stream_rng(812, 0);
    let mut all: Vec<f64> = Vec::new();
    let (mut worst_q, mut worst_f, mut worst_gain) = (0f64, 0f64, 0f64);
    for level in levels {
        let (mut sum_q, mut sum_f) = (0.0, 0.0);
        for _ in 0..frames {
            // Signal level `level` dBFS (per-sample power of preamble and data alike).
            let mut s = pre.clone();
            for m in 0..data_symbols {
                let bits: Vec<u8> = (0..tx.bits_per_ofdm_symbol(Modulation::Qpsk, m))
                    .map(|_| rng.random_range(0..2u8))
                    .collect();
                let mut out = vec![Cf32::default(); sym];
                tx.modulate(Modulation::Qpsk, &bits, m, &mut out).unwrap();
                s.extend_from_slice(&out);
            }
            let scale = (10f64.powf(level / 10.0) / p_pre).sqrt() as f32;
            for v in s.iter_mut() {
                *v *= scale;
            }
            add_awgn(&mut rng, &mut s, 10f64.powf(level / 10.0) / 10.0);
            dc_offset(&mut s, dc);
            let mut q = vec![Cq15::ZERO; s.len()];
            adc.convert(&s, &mut q);
            let windows = |first: usize, count: usize| {
                (first..first + count).map(move |i| i * sym + cp / 2..i * sym + cp / 2 + N)
            };
            // Q15 path.
            let mut sums = DcSumsQ15::new();
            for w in windows(0, 2) {
                sums.add(&q[w]);
            }
            let dq = sums.mean();
            let mut power = PowerQ15::new();
            for w in windows(0, 2) {
                power.add(&q[w], dq);
            }
            let gq = gain_for_backoff_q15(power, t_q30).unwrap();
            let (mut e, mut n) = (0.0, 0.0);
            for w in windows(2, data_symbols as usize) {
                let mut x = q[w].to_vec();
                remove_dc_q15(&mut x, dq);
                let mut y = vec![Cq15::ZERO; N];
                assert_eq!(gq.apply(&x, &mut y), 0);
                e += y.iter().map(|&v| q64(v).norm_sqr()).sum::<f64>();
                n += N as f64;
            }
            let got_q = 10.0 * (e / n).log10();
            // f32 path on the same ADC codes.
            let f: Vec<Cf32> = q.iter().map(|v| v.to_cf32()).collect();
            let df = windows(0, 2)
                .map(|w| estimate_dc(&f[w]))
                .fold(Cf32::default(), |a, b| a + b)
                / 2.0;
            let pf = windows(0, 2)
                .map(|w| preamble_power(&f[w], df))
                .sum::<f32>()
                / 2.0;
            let gf = gain_for_backoff(pf, target).unwrap();
            let (mut e, mut n) = (0.0, 0.0);
            for w in windows(2, data_symbols as usize) {
                let mut x = f[w].to_vec();
                remove_dc(&mut x, df);
                e += x
                    .iter()
                    .map(|&v| c64(v).norm_sqr() * value(gf).powi(2))
                    .sum::<f64>();
                n += N as f64;
            }
            let got_f = 10.0 * (e / n).log10();
            // The two choices agree within one mantissa LSB (relative 2^-14).
            let rel = (value(gq) / value(gf) - 1.0).abs();
            worst_gain = worst_gain.max(rel * 16384.0);
            assert!(rel <= 1.0 / 16384.0, "{level} dBFS: {gq:?} vs {gf:?}");
            // The integer choice is the nearest mantissa of A/√P from its own integer power
            // (f64 sqrt, correctly rounded).
            let exact = 10f64.powf(f64::from(target) / 20.0)
                / (power.sum as f64 / power.count as f64 / 2f64.powi(30)).sqrt();
            assert!((value(gq) / exact - 1.0).abs() <= 0.5 / 16384.0 + 1e-9);
            worst_q = worst_q.max((got_q - f64::from(target)).abs());
            worst_f = worst_f.max((got_f - f64::from(target)).abs());
            sum_q += got_q;
            all.push(got_q - f64::from(target));
            sum_f += got_f;
            assert!(
                (got_q - f64::from(target)).abs() <= 0.5,
                "Q15 at {level} dBFS: {got_q:.2}"
            );
            assert!(
                (got_f - f64::from(target)).abs() <= 0.5,
                "f32 at {level} dBFS: {got_f:.2}"
            );
        }
        println!(
            "input {level:5.1} dBFS (signal; total {:.1}): FFT input {:.3} dBFS (Q15), {:.3} dBFS \
             (f32), mean of {frames} frames",
            level + 10.0 * 1.1f64.log10(),
            sum_q / frames as f64,
            sum_f / frames as f64
        );
    }
    // Unbiased: the mean error over all frames within 4·0.089/√n dB (the spread above).
    let n = all.len() as f64;
    let m = all.iter().sum::<f64>() / n;
    let sd = (all.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (n - 1.0)).sqrt();
    println!(
        "worst |level - target|: Q15 {worst_q:.3} dB, f32 {worst_f:.3} dB; over {n} frames mean \
         {m:+.4} dB, standard deviation {sd:.4} dB (predicted 0.089); Q15 vs f32 gain within \
         {worst_gain:.2} mantissa LSB"
    );
    assert!(
        m.abs() <= 4.0 * 0.089 / n.sqrt(),
        "mean level error {m:.4} dB"
    );
}

#[test]
fn without_dc_removal_the_gain_misses_at_low_levels() {
    // The same chain at −50 dBFS with the DC left in: DC 0.05 + 0.03j (−24.7 dBFS) dominates
    // the measured power, so the gain is ~25 dB short. Shows the level check can fail.
    const N: usize = 256;
    let nu = numerology(N);
    let (pre, _) = preamble::<N>(&nu, -50.0);
    let mut s = pre.clone();
    dc_offset(&mut s, Cf32::new(0.05, 0.03));
    let mut q = vec![Cq15::ZERO; s.len()];
    Adc { bits: 12 }.convert(&s, &mut q);
    let w = nu.cp_len() / 2..nu.cp_len() / 2 + N;
    let mut with = PowerQ15::new();
    with.add(&q[w.clone()], Cq15::ZERO);
    let mut sums = DcSumsQ15::new();
    sums.add(&q[w.clone()]);
    let mut removed = PowerQ15::new();
    removed.add(&q[w], sums.mean());
    let t = target_amplitude_q30(-12.0);
    let g_dc = value(gain_for_backoff_q15(with, t).unwrap());
    let g_ok = value(gain_for_backoff_q15(removed, t).unwrap());
    println!(
        "-50 dBFS: gain {:.1} dB with the DC in the power, {:.1} dB after DC removal",
        20.0 * g_dc.log10(),
        20.0 * g_ok.log10()
    );
    assert!(20.0 * (g_ok / g_dc).log10() > 20.0);
    assert!((20.0 * g_ok.log10() - 38.0).abs() < 0.5);
}
