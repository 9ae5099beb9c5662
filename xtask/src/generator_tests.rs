//! Checks of the shared test-signal generator (`firmware/vectors-gen`), run on the host.

use vectors_gen::{for_each_sample, seed, Fnv1a32, Kind, XorShift64, FULL_SCALE};

#[test]
fn xorshift_first_output() {
    // Worked by hand from the three shift steps of Marsaglia (2003) for state 1:
    // x ^= x<<13 → 0x2001; x ^= x>>7 → 0x2041; x ^= x<<17 → 0x4082_2041.
    assert_eq!(XorShift64::new(1).next_u64(), 0x4082_2041);
}

#[test]
fn fnv1a_empty_and_known() {
    // The empty hash is the offset basis; FNV-1a-32("a") = 0xe40c292c is the published test
    // value of the FNV reference (Fowler, Noll, Vo). i16 0x0061 feeds the bytes 0x61, 0x00;
    // the zero byte only multiplies by the FNV prime 0x01000193.
    let mut h = Fnv1a32::default();
    assert_eq!(h.finish(), 0x811c_9dc5);
    h.push_i16(0x0061);
    assert_eq!(h.finish(), 0xe40c_292cu32.wrapping_mul(0x0100_0193));
}

#[test]
fn gaussian_power_matches_its_level() {
    // Mean of |x|² over n samples within 4·s/sqrt(n) of P = 10^(-12/10), s = P (|x|² of a
    // circular complex Gaussian is exponential: standard deviation = mean).
    let n = 4096;
    let mut sum = 0.0f64;
    for_each_sample(Kind::Gaussian { dbfs: -12 }, seed(0, n), n, |_, re, im| {
        let (re, im) = (f64::from(re) / FULL_SCALE, f64::from(im) / FULL_SCALE);
        sum += re * re + im * im;
    });
    let p = 10f64.powf(-1.2);
    let mean = sum / n as f64;
    assert!(
        (mean - p).abs() < 4.0 * p / (n as f64).sqrt(),
        "{mean} vs {p}"
    );
}

#[test]
fn tone_is_full_scale_on_its_bin() {
    // Sample 0 is (CLIP, 0); samples N/4 and N/2 of bin 1 are (0, CLIP) and (−CLIP, 0)
    // (cos/sin at 0, π/2, π).
    let mut v = [(0i16, 0i16); 16];
    for_each_sample(Kind::Tone { bin: 1 }, 0, 16, |i, re, im| v[i] = (re, im));
    assert_eq!(v[0], (32767, 0));
    assert_eq!(v[4], (0, 32767));
    assert_eq!(v[8], (-32767, 0));
}

#[test]
fn full_scale_gaussian_clips_at_the_normal_tail_rate() {
    // At 0 dBFS σ = 32768·sqrt(1/2) per component, so a component clips when |z| ≥ ~√2:
    // probability P(|Z| ≥ √2) = erfc(1) (normal tail). 2n independent components (Box–Muller
    // gives independent pairs); tolerance 4·sqrt(m·p(1−p)) (DEVELOPERS.md).
    let n = 4096;
    let mut clipped = 0usize;
    for_each_sample(Kind::Gaussian { dbfs: 0 }, seed(2, n), n, |_, re, im| {
        clipped += usize::from(re.abs() == 32767) + usize::from(im.abs() == 32767);
    });
    let m = 2.0 * n as f64;
    let p = libm::erfc(32766.5 / (FULL_SCALE * 0.5f64.sqrt()) / 2f64.sqrt());
    let expected = m * p;
    let tol = 4.0 * (m * p * (1.0 - p)).sqrt();
    assert!(
        (clipped as f64 - expected).abs() < tol,
        "{clipped} clipped, expected {expected:.0} ± {tol:.0}"
    );
}

#[test]
fn seeds_differ_per_case_and_size() {
    let mut a = Vec::new();
    for_each_sample(Kind::Gaussian { dbfs: -12 }, seed(0, 64), 4, |_, re, im| {
        a.push((re, im))
    });
    let mut b = Vec::new();
    for_each_sample(Kind::Gaussian { dbfs: -12 }, seed(1, 64), 4, |_, re, im| {
        b.push((re, im))
    });
    assert_ne!(a, b);
}

#[test]
fn receiver_case_constants() {
    use flatbin::receiver_q15::DigitalGain;
    use vectors_gen::rx::{GAIN_28_DB, RX_NOISE_VAR, RX_SNR_DB};
    // The integer gain of the "+28 dB" case is the core's own quantisation of 28 dB.
    assert_eq!(GAIN_28_DB, DigitalGain::from_db(28.0));
    // N0 of the designs is the noise level of the frames: 10^(-SNR/10).
    let n0 = 10f64.powf(-f64::from(RX_SNR_DB) / 10.0);
    assert!((f64::from(RX_NOISE_VAR) - n0).abs() < 1e-9);
}

#[test]
fn receiver_frames_have_their_level() {
    // Mean power of a frame against its case level (dBFS as DESIGN.md defines it: total
    // complex power against a full-scale complex sinusoid). The channel taps' powers sum to
    // 1 (rounded to Q15) and the noise adds 10^(-2) of the signal (0.04 dB); the mean over the
    // 4 symbols outside the clipped bursts (1152 near-Gaussian samples at N = 256) has a
    // standard deviation of about 1/sqrt(1152) = 3 % (0.13 dB): within 0.04 + 4 · 0.13 ≈ 0.6,
    // bound 0.7 dB.
    use vectors_gen::rx::{RxFrame, RX_CASES};
    for (k, case) in RX_CASES.iter().enumerate() {
        let mut frame = RxFrame::<256>::new(k).expect("frame");
        let mut x = vec![flatbin::fixed::Cq15::ZERO; frame.symbol_len()];
        let (mut sum, mut count) = (0.0f64, 0usize);
        for symbol in 0..6 {
            assert!(frame.symbol(symbol, &mut x));
            if symbol % 3 == 1 {
                continue;
            }
            for v in &x {
                let (re, im) = (f64::from(v.re) / FULL_SCALE, f64::from(v.im) / FULL_SCALE);
                sum += re * re + im * im;
                count += 1;
            }
        }
        let dbfs = 10.0 * (sum / count as f64).log10();
        assert!(
            (dbfs - f64::from(case.level_dbfs)).abs() < 0.7,
            "{}: {dbfs:.2} dBFS",
            case.label
        );
    }
}
