//! Timing offset and sampling-clock offset: measured per-subcarrier phase against the Fourier
//! shift theorem (a delay of d samples rotates bin k by e^{−j2πkd/N}; Oppenheim & Schafer,
//! Discrete-Time Signal Processing, DFT properties), and the model's own interpolation error.

use flatbin::fft::{MicroFft, OfdmFft};
use flatbin::Cf32;
use flatbin_harness::impair::{fractional_delay, resample};
use flatbin_harness::rng::stream_rng;
use rand::RngExt;

const N: usize = 64;
const CP: usize = 16;
/// Used bins ±1..=USED (guard band as in a real numerology: about 3/4 of the band used).
const USED: usize = 24;

fn symbol(rng: &mut impl rand::Rng) -> [Cf32; N] {
    let a = std::f32::consts::FRAC_1_SQRT_2;
    let mut x = [Cf32::new(0.0, 0.0); N];
    for k in (1..=USED).chain(N - USED..N) {
        x[k] = Cf32::new(
            if rng.random::<bool>() { a } else { -a },
            if rng.random::<bool>() { a } else { -a },
        );
    }
    x
}

fn signed(k: usize) -> f64 {
    if k < N / 2 {
        k as f64
    } else {
        k as f64 - N as f64
    }
}

/// Error power of the received bins against `rot(k)·X_k`, over the signal power, dB.
fn error_db(frames: &[([Cf32; N], [Cf32; N])], rot: impl Fn(usize, usize) -> f64) -> f64 {
    let (mut e, mut p) = (0.0f64, 0.0f64);
    for (m, (x, y)) in frames.iter().enumerate() {
        for k in (1..=USED).chain(N - USED..N) {
            let ph = rot(m, k);
            let want = x[k] * Cf32::new(ph.cos() as f32, ph.sin() as f32);
            e += f64::from((y[k] - want).norm_sqr());
            p += f64::from(want.norm_sqr());
        }
    }
    10.0 * (e / p).log10()
}

#[test]
fn fractional_delay_rotates_each_bin_by_the_shift_theorem() {
    let mut fft = MicroFft::<N>::new();
    let mut rng = stream_rng(41, 0);
    for d in [0.5f64, 2.3] {
        let mut frames = Vec::new();
        for _ in 0..200 {
            let x = symbol(&mut rng);
            let mut t = x;
            fft.inverse(&mut t);
            // CP + symbol + CP-long tail of the next symbol's CP (repeat) so the window stays
            // inside one symbol after the delay.
            let mut stream: Vec<Cf32> = t[N - CP..].to_vec();
            stream.extend_from_slice(&t);
            stream.extend_from_slice(&t[..CP]);
            let delayed = fractional_delay(&stream, d);
            let mut y = [Cf32::new(0.0, 0.0); N];
            y.copy_from_slice(&delayed[CP..CP + N]);
            fft.forward(&mut y);
            frames.push((x, y));
        }
        let err = error_db(&frames, |_, k| {
            -2.0 * std::f64::consts::PI * signed(k) * d / N as f64
        });
        println!("delay {d} samples: error vs shift theorem {err:.1} dB");
        // The interpolator's own error must sit well below any SNR a low-power link works at:
        // ≥ 40 dB below the signal over the used band (requirement chosen here).
        assert!(err <= -40.0, "delay {d}: {err:.1} dB");
    }
}

#[test]
fn sampling_clock_offset_drifts_the_timing_by_ppm_per_sample() {
    let mut fft = MicroFft::<N>::new();
    let mut rng = stream_rng(42, 0);
    let ppm = 200.0f64;
    let symbols = 60usize;
    let mut xs = Vec::new();
    let mut stream = Vec::new();
    for _ in 0..symbols {
        let x = symbol(&mut rng);
        let mut t = x;
        fft.inverse(&mut t);
        stream.extend_from_slice(&t[N - CP..]);
        stream.extend_from_slice(&t);
        xs.push(x);
    }
    let rx = resample(&stream, ppm);
    // Receiver sample n is transmit time n(1 + ppm·1e-6): at the window start of symbol m
    // n0 the receiver is ahead by n0·ppm·1e-6 samples, which rotates bin k by e^{+j2πk·δ/N}
    // (shift theorem); δ grows across the window, and the mean over the window is what stays on
    // the bin (the spread is ICI, negligible at 200 ppm).
    // The window starts C samples early, inside the CP, so the drift never pushes it past the
    // end of its symbol; starting early is a cyclic shift, e^{−j2πkC/N} (shift theorem).
    const C: usize = CP / 2;
    let mut frames = Vec::new();
    for (m, x) in xs.iter().enumerate() {
        let n0 = m * (N + CP) + CP - C;
        let mut y = [Cf32::new(0.0, 0.0); N];
        y.copy_from_slice(&rx[n0..n0 + N]);
        fft.forward(&mut y);
        frames.push((*x, y));
    }
    let e = ppm * 1e-6;
    let err = error_db(&frames, |m, k| {
        // Mean advance over the window: (n0 + (N−1)/2)·e.
        let n0 = (m * (N + CP) + CP - C) as f64;
        let advance = (n0 + (N as f64 - 1.0) / 2.0) * e;
        2.0 * std::f64::consts::PI * signed(k) * (advance - C as f64) / N as f64
    });
    let drift = ((symbols - 1) * (N + CP)) as f64 * e;
    println!(
        "SCO {ppm} ppm: drift {drift:.3} samples over the record; error vs drift model {err:.1} dB"
    );
    // Same requirement as for the delay: the model itself ≥ 40 dB clean (chosen here).
    assert!(err <= -40.0, "{err:.1} dB");
    // And the model is not the identity: without the drift the error is far larger.
    let no_drift = error_db(&frames, |_, k| {
        -2.0 * std::f64::consts::PI * signed(k) * C as f64 / N as f64
    });
    assert!(no_drift > err + 15.0);
}
