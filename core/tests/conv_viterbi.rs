//! The K = 7 convolutional code (133, 171 octal) and its soft-decision Viterbi decoder.
//!
//! Sources named beside each check: IEEE Std 802.11a-1999 clause 17.3.5.5 (generators, output
//! order, puncturing patterns); Proakis & Salehi, *Digital Communications*, 5th ed., table of
//! rate-1/2 maximum-free-distance codes (K = 7: generators 133/171, d_free = 10) and Frenger,
//! Orten & Ottosson, "Convolutional codes with optimum distance spectrum", IEEE Commun.
//! Letters 3(11), 1999 (same d_free); the rest are properties of any ML decoder.

use flatbin::conv_code::{
    coded_len, depuncture, encode, mother_len, CodeRate, ConvEncoder, GENERATOR_A, GENERATOR_B,
    TAIL_BITS,
};
use flatbin::viterbi::{
    Decision, ViterbiDecoder, METRIC_BOUND_HIGH, METRIC_BOUND_LOW, RECOMMENDED_DEPTH,
};
use flatbin::ProcessError;

const RATES: [CodeRate; 3] = [CodeRate::Half, CodeRate::TwoThirds, CodeRate::ThreeQuarters];

/// splitmix64: a tiny seeded PRNG (Steele, Lea & Flood 2014), with Box–Muller normals.
struct Rng(u64);

impl Rng {
    fn next_u64(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9e37_79b9_7f4a_7c15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
        z ^ (z >> 31)
    }
    fn below(&mut self, n: usize) -> usize {
        (self.next_u64() % n as u64) as usize
    }
    fn bit(&mut self) -> u8 {
        (self.next_u64() >> 63) as u8
    }
    fn uniform(&mut self) -> f64 {
        ((self.next_u64() >> 11) as f64 + 0.5) / (1u64 << 53) as f64
    }
    fn normal(&mut self) -> f64 {
        let (u1, u2) = (self.uniform(), self.uniform());
        (-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * u2).cos()
    }
    fn bits(&mut self, n: usize) -> Vec<u8> {
        (0..n).map(|_| self.bit()).collect()
    }
}

/// Independent reference encoder written from the generator polynomials: output j at time n
/// is the parity of (register & generator), register bit 6 = u[n], bit 0 = u[n-6]
/// (IEEE 802.11a-1999 clause 17.3.5.5, figure of the K = 7 encoder).
fn reference_mother(info: &[u8]) -> Vec<u8> {
    let mut u: Vec<u8> = info.to_vec();
    u.extend([0u8; 6]);
    let mut out = Vec::new();
    for n in 0..u.len() {
        for g in [0o133u32, 0o171] {
            let mut p = 0u8;
            for j in 0..7 {
                // tap j (delay j) is generator bit 6 - j
                if (g >> (6 - j)) & 1 == 1 && n >= j {
                    p ^= u[n - j];
                }
            }
            out.push(p);
        }
    }
    out
}

/// Puncturing written from the standard's listing (IEEE 802.11a-1999 clause 17.3.5.5):
/// 2/3 sends A1 B1 A2 of each A1 B1 A2 B2; 3/4 sends A1 B1 A2 B3 of A1 B1 A2 B2 A3 B3.
fn reference_puncture(mother: &[u8], rate: CodeRate) -> Vec<u8> {
    let kept: &[usize] = match rate {
        CodeRate::Half => &[0, 1],
        CodeRate::TwoThirds => &[0, 1, 2],
        CodeRate::ThreeQuarters => &[0, 1, 2, 5],
    };
    let period = 2 * rate.numerator();
    mother
        .iter()
        .enumerate()
        .filter(|(i, _)| kept.contains(&(i % period)))
        .map(|(_, &b)| b)
        .collect()
}

/// Coded bits to LLRs of magnitude `mag` (bit 0 → positive, DESIGN.md convention).
fn to_llrs(bits: &[u8], mag: i8) -> Vec<i8> {
    bits.iter()
        .map(|&b| if b == 0 { mag } else { -mag })
        .collect()
}

fn encode_vec(info: &[u8], rate: CodeRate) -> Vec<u8> {
    let mut out = vec![0u8; coded_len(info.len(), rate)];
    let n = encode(info, rate, &mut out).unwrap();
    assert_eq!(n, out.len());
    out
}

/// Decodes one terminated frame in one call plus `finish`.
fn decode_frame<const D: usize>(llrs: &[i8], rate: CodeRate, decision: Decision) -> Vec<u8> {
    let mut dec = ViterbiDecoder::<D>::new(rate, decision);
    let mut out = vec![0u8; dec.decoded_len(llrs.len())];
    let n = dec.decode(llrs, &mut out).unwrap();
    assert_eq!(n, out.len());
    let mut tail = vec![0u8; dec.finish_len()];
    let m = dec.finish(&mut tail).unwrap();
    assert_eq!(m, tail.len());
    out.extend(tail);
    out
}

/// BPSK over AWGN at `ebn0_db` (Eb per information bit, tail overhead not counted), LLRs
/// `2y/σ²` quantised by the core's demapper rule (4 LSB per unit, saturated at ±127).
fn awgn_llrs(coded: &[u8], rate: CodeRate, ebn0_db: f64, rng: &mut Rng) -> Vec<i8> {
    let r = rate.numerator() as f64 / rate.denominator() as f64;
    let esn0 = r * 10f64.powf(ebn0_db / 10.0);
    let sigma2 = 1.0 / (2.0 * esn0);
    let llr_f: Vec<f32> = coded
        .iter()
        .map(|&b| {
            let x = if b == 0 { 1.0 } else { -1.0 };
            let y = x + sigma2.sqrt() * rng.normal();
            (2.0 * y / sigma2) as f32
        })
        .collect();
    let mut out = vec![0i8; coded.len()];
    flatbin::demap::llr_to_i8(&llr_f, flatbin::demap::I8_LSB_PER_LLR, &mut out).unwrap();
    out
}

fn errors(a: &[u8], b: &[u8]) -> usize {
    assert_eq!(a.len(), b.len());
    a.iter().zip(b).filter(|(x, y)| x != y).count()
}

#[test]
fn impulse_response_is_the_generators() {
    // IEEE 802.11a-1999 clause 17.3.5.5: g0 = 133, g1 = 171 (octal); the response of a single
    // 1 followed by zeros reads each generator MSB first (tap on the current input first).
    assert_eq!((GENERATOR_A, GENERATOR_B), (0o133, 0o171));
    let mut enc = ConvEncoder::new();
    let (mut a, mut b) = (0u32, 0u32);
    for i in 0..7 {
        let (x, y) = enc.push(u8::from(i == 0));
        a = (a << 1) | u32::from(x);
        b = (b << 1) | u32::from(y);
    }
    assert_eq!(a, 0o133);
    assert_eq!(b, 0o171);
    assert_eq!(enc.state(), 0);
    // Hand-derived from the taps: input 1 1 → A: 1, 1^0 = 1; B: 1, 1^1 = 0.
    let mut enc = ConvEncoder::new();
    assert_eq!(enc.push(1), (1, 1));
    assert_eq!(enc.push(1), (1, 0));
    // State convention: newest bit at the MSB (bit 5).
    assert_eq!(enc.state(), 0b11_0000);
}

#[test]
fn encoder_matches_reference_encoder() {
    // Reference: parity of register & generator, written in this test from the polynomials.
    let mut rng = Rng(1);
    for len in 0..200 {
        let info = rng.bits(len);
        let mother = reference_mother(&info);
        assert_eq!(mother.len(), mother_len(len));
        for rate in RATES {
            assert_eq!(
                encode_vec(&info, rate),
                reference_puncture(&mother, rate),
                "len {len}"
            );
        }
    }
}

#[test]
fn puncturing_patterns_and_lengths() {
    // IEEE 802.11a-1999 clause 17.3.5.5: 2/3 keeps A1 B1 A2 (drops B2); 3/4 keeps A1 B1 A2 B3
    // (drops B2 A3).
    assert_eq!(CodeRate::Half.puncture_pattern(), &[[true, true]]);
    assert_eq!(
        CodeRate::TwoThirds.puncture_pattern(),
        &[[true, true], [true, false]]
    );
    assert_eq!(
        CodeRate::ThreeQuarters.puncture_pattern(),
        &[[true, true], [true, false], [false, true]]
    );
    for rate in RATES {
        let p = rate.puncture_pattern();
        assert_eq!(p.len(), rate.numerator());
        let kept: usize = p.iter().flatten().filter(|&&k| k).count();
        assert_eq!(kept, rate.denominator());
    }
    // Whole periods: length = pairs · n / k.
    for pairs in (6..600).step_by(6) {
        let info = pairs - TAIL_BITS;
        assert_eq!(coded_len(info, CodeRate::Half), 2 * pairs);
        assert_eq!(coded_len(info, CodeRate::TwoThirds), pairs * 3 / 2);
        assert_eq!(coded_len(info, CodeRate::ThreeQuarters), pairs * 4 / 3);
    }
    // Partial periods keep the pattern prefix: 3/4 with 7 pairs = 2 periods (8) + A7 B7.
    assert_eq!(coded_len(1, CodeRate::ThreeQuarters), 10);
    // 8 pairs = 2 periods + A7 B7 A8 (B8 dropped).
    assert_eq!(coded_len(2, CodeRate::ThreeQuarters), 11);
    // 2/3 with 7 pairs = 3 periods (9) + A7 B7.
    assert_eq!(coded_len(1, CodeRate::TwoThirds), 11);
    // Labelled sequence: transmitted order of 6 pairs at 3/4 is A1 B1 A2 B3 A4 B4 A5 B6.
    let labels: Vec<u8> = (0..12).collect(); // A_i = 2(i-1), B_i = 2(i-1)+1
    let sent = reference_puncture(&labels, CodeRate::ThreeQuarters);
    assert_eq!(sent, vec![0, 1, 2, 5, 6, 7, 8, 11]);
    let sent = reference_puncture(&labels, CodeRate::TwoThirds);
    assert_eq!(sent, vec![0, 1, 2, 4, 5, 6, 8, 9, 10]);
}

#[test]
fn encode_rejects_bad_input() {
    let mut out = [0u8; 64];
    assert_eq!(
        encode(&[0, 1, 2, 0], CodeRate::Half, &mut out),
        Err(ProcessError::InvalidBit { index: 2 })
    );
    let need = coded_len(10, CodeRate::ThreeQuarters);
    assert_eq!(
        encode(&[0; 10], CodeRate::ThreeQuarters, &mut out[..need - 1]),
        Err(ProcessError::BufferLength {
            expected: need,
            actual: need - 1
        })
    );
    let mut d = [0i8; 3];
    assert!(matches!(
        depuncture(&[1, 2, 3], CodeRate::Half, &mut d),
        Err(ProcessError::BufferLength { expected: 4, .. })
    ));
}

#[test]
fn depuncture_reinserts_erasures() {
    let mut rng = Rng(2);
    for rate in RATES {
        for len in 0..50 {
            let info = rng.bits(len);
            let coded = encode_vec(&info, rate);
            let llrs = to_llrs(&coded, 50);
            let mut full = vec![0i8; mother_len(len)];
            assert_eq!(depuncture(&llrs, rate, &mut full).unwrap(), mother_len(len));
            // Every received value sits where the standard's pattern puts it, zeros elsewhere.
            let mother = to_llrs(&reference_mother(&info), 50);
            let p = rate.puncture_pattern();
            for (i, (&f, &m)) in full.iter().zip(&mother).enumerate() {
                let keep = p[(i / 2) % p.len()][i % 2];
                assert_eq!(f, if keep { m } else { 0 }, "{rate:?} len {len} i {i}");
            }
            // Decoding the depunctured stream at rate 1/2 equals decoding at the rate.
            let a = decode_frame::<64>(&full, CodeRate::Half, Decision::Soft);
            let b = decode_frame::<64>(&llrs, rate, Decision::Soft);
            assert_eq!(a, info);
            assert_eq!(b, info);
        }
    }
}

#[test]
fn noiseless_round_trip_all_rates() {
    // Any ML decoder returns the transmitted frame on a noiseless channel.
    let mut rng = Rng(3);
    for rate in RATES {
        for len in 1..=300 {
            let info = rng.bits(len);
            let llrs = to_llrs(&encode_vec(&info, rate), 40);
            assert_eq!(
                decode_frame::<64>(&llrs, rate, Decision::Soft),
                info,
                "{rate:?} {len}"
            );
            assert_eq!(
                decode_frame::<64>(&llrs, rate, Decision::Hard),
                info,
                "{rate:?} {len}"
            );
            // The shortest depth allowed, and a depth longer than the frame.
            assert_eq!(
                decode_frame::<8>(&llrs, rate, Decision::Soft),
                info,
                "{rate:?} {len}"
            );
            assert_eq!(decode_frame::<400>(&llrs, rate, Decision::Soft), info);
        }
    }
}

#[test]
fn corrects_any_four_hard_errors_at_rate_half() {
    // d_free = 10 for K = 7 (133, 171): Proakis & Salehi, Digital Communications, table of
    // rate-1/2 maximum free distance codes; Frenger, Orten & Ottosson, IEEE Commun. Letters
    // 1999. An ML decoder corrects every pattern of t = floor((10-1)/2) = 4 errors.
    let mut rng = Rng(4);
    let mut cases = 0;
    for case in 0..3000 {
        let len = 20 + rng.below(280);
        let info = rng.bits(len);
        let coded = encode_vec(&info, CodeRate::Half);
        let mut llrs = to_llrs(&coded, 30);
        let n_err = 1 + rng.below(4);
        // Half the cases: errors anywhere in the frame; the other half: a burst window of
        // 2·K = 14 coded bits (the hardest placement: all errors in one error event).
        let (start, span) = if case % 2 == 0 {
            (0, llrs.len())
        } else {
            let span = 14.min(llrs.len());
            (rng.below(llrs.len() - span + 1), span)
        };
        let mut flipped = Vec::new();
        while flipped.len() < n_err {
            let p = start + rng.below(span);
            if !flipped.contains(&p) {
                flipped.push(p);
                llrs[p] = -llrs[p];
            }
        }
        let soft = decode_frame::<RECOMMENDED_DEPTH>(&llrs, CodeRate::Half, Decision::Soft);
        assert_eq!(soft, info, "case {case}: errors at {flipped:?}");
        let hard = decode_frame::<RECOMMENDED_DEPTH>(&llrs, CodeRate::Half, Decision::Hard);
        assert_eq!(hard, info, "case {case} (hard): errors at {flipped:?}");
        cases += 1;
    }
    assert!(cases >= 1000);
}

#[test]
fn soft_beats_hard_at_4_db() {
    // Soft decisions gain about 2 dB over hard decisions (Proakis & Salehi, ch. 8, soft vs
    // hard decoding of convolutional codes). At Eb/N0 = 4 dB, rate 1/2, both error counts are
    // measured over the same noise; the difference must exceed 4 standard deviations of the
    // difference of the two error-rate estimates (DEVELOPERS.md tolerance).
    let mut rng = Rng(5);
    let frame = 10_000;
    let frames = 200;
    let (mut soft_err, mut hard_err, mut n) = (0usize, 0usize, 0usize);
    for _ in 0..frames {
        let info = rng.bits(frame);
        let coded = encode_vec(&info, CodeRate::Half);
        let llrs = awgn_llrs(&coded, CodeRate::Half, 4.0, &mut rng);
        soft_err += errors(
            &decode_frame::<RECOMMENDED_DEPTH>(&llrs, CodeRate::Half, Decision::Soft),
            &info,
        );
        hard_err += errors(
            &decode_frame::<RECOMMENDED_DEPTH>(&llrs, CodeRate::Half, Decision::Hard),
            &info,
        );
        n += frame;
    }
    let (ps, ph) = (soft_err as f64 / n as f64, hard_err as f64 / n as f64);
    eprintln!("Eb/N0 4 dB, rate 1/2, {n} bits: soft BER {ps:.3e} ({soft_err}), hard BER {ph:.3e} ({hard_err})");
    assert!(
        hard_err >= 100,
        "too few hard errors to compare: {hard_err}"
    );
    let sd = ((ps * (1.0 - ps) + ph * (1.0 - ph)) / n as f64).sqrt();
    assert!(ph - ps > 4.0 * sd, "soft {ps:e} vs hard {ph:e}, sd {sd:e}");
}

#[test]
fn extreme_inputs() {
    for rate in RATES {
        for llr in [127i8, -127, -128, 0, 1, -1] {
            for len in [0usize, 1, 5, 6, 7, 100, 1000] {
                let n = coded_len(len, rate);
                let llrs = vec![llr; n];
                let out = decode_frame::<RECOMMENDED_DEPTH>(&llrs, rate, Decision::Soft);
                assert_eq!(out.len(), len);
                assert!(out.iter().all(|&b| b <= 1));
                if llr > 0 {
                    // All coded bits read as 0: the all-zero codeword is the ML decision.
                    assert!(out.iter().all(|&b| b == 0), "{rate:?} {llr} {len}");
                }
            }
        }
    }
    // Adversarial sign patterns at full scale: the path metrics stay within the documented
    // bound at every step (after the first 6 steps).
    let mut rng = Rng(6);
    for rate in RATES {
        for pattern in 0..4 {
            let mut dec = ViterbiDecoder::<RECOMMENDED_DEPTH>::new(rate, Decision::Soft);
            let mut out = vec![0u8; 2 * RECOMMENDED_DEPTH];
            for i in 0..20_000usize {
                let l: i8 = match pattern {
                    0 => {
                        if rng.bit() == 0 {
                            127
                        } else {
                            -128
                        }
                    }
                    1 => {
                        if i % 2 == 0 {
                            127
                        } else {
                            -128
                        }
                    }
                    2 => {
                        if (i / 7) % 2 == 0 {
                            -128
                        } else {
                            127
                        }
                    }
                    _ => [127, -128, 0][rng.below(3)],
                };
                dec.decode(&[l], &mut out).unwrap();
                if i >= 16 {
                    for &m in dec.path_metrics() {
                        assert!((METRIC_BOUND_LOW..=METRIC_BOUND_HIGH).contains(&m), "{m}");
                    }
                }
            }
            let mut tail = vec![0u8; dec.finish_len()];
            dec.finish(&mut tail).unwrap();
        }
    }
    // Long frames: 1e5 bits at full-scale LLRs decode exactly, at every rate.
    for rate in RATES {
        let info = rng.bits(100_000);
        let llrs = to_llrs(&encode_vec(&info, rate), 127);
        assert_eq!(
            decode_frame::<RECOMMENDED_DEPTH>(&llrs, rate, Decision::Soft),
            info
        );
    }
}

#[test]
fn decode_rejects_short_output_without_changing_state() {
    let mut rng = Rng(7);
    let info = rng.bits(500);
    let llrs = to_llrs(&encode_vec(&info, CodeRate::Half), 20);
    let mut dec = ViterbiDecoder::<64>::new(CodeRate::Half, Decision::Soft);
    let need = dec.decoded_len(llrs.len());
    assert!(need > 0);
    let mut out = vec![0u8; need];
    assert_eq!(
        dec.decode(&llrs, &mut out[..need - 1]),
        Err(ProcessError::BufferLength {
            expected: need,
            actual: need - 1
        })
    );
    assert_eq!(dec.pending_steps(), 0);
    assert_eq!(dec.decode(&llrs, &mut out), Ok(need));
    let fin = dec.finish_len();
    let mut tail = vec![0u8; fin];
    assert!(dec.finish(&mut tail[..fin - 1]).is_err());
    assert_eq!(dec.finish(&mut tail), Ok(fin));
    out.extend(tail);
    assert_eq!(out, info);
    // After finish the decoder is ready for the next frame.
    assert_eq!(dec.pending_steps(), 0);
}

#[test]
fn chunked_decoding_equals_one_call() {
    // A frame much longer than the window, with noise so that decisions are not trivial,
    // decoded in one call and in chunks of random sizes (including empty and odd ones).
    let mut rng = Rng(8);
    for rate in RATES {
        for decision in [Decision::Soft, Decision::Hard] {
            let info = rng.bits(5000);
            let coded = encode_vec(&info, rate);
            let llrs = awgn_llrs(&coded, rate, 3.0, &mut rng);
            let whole = decode_frame::<RECOMMENDED_DEPTH>(&llrs, rate, decision);
            let mut dec = ViterbiDecoder::<RECOMMENDED_DEPTH>::new(rate, decision);
            let mut got = Vec::new();
            let mut rest = &llrs[..];
            while !rest.is_empty() {
                let k = rng.below(200).min(rest.len());
                let (chunk, r) = rest.split_at(k);
                rest = r;
                let mut out = vec![0u8; dec.decoded_len(chunk.len())];
                let n = dec.decode(chunk, &mut out).unwrap();
                got.extend_from_slice(&out[..n]);
            }
            let mut tail = vec![0u8; dec.finish_len()];
            dec.finish(&mut tail).unwrap();
            got.extend(tail);
            assert_eq!(got, whole, "{rate:?} {decision:?}");
        }
    }
}

/// BER of `D` at `rate` and `ebn0_db` over `frames` frames of `len` bits (fixed seed), and the
/// decoded bits.
fn ber_at<const D: usize>(
    rate: CodeRate,
    ebn0_db: f64,
    frames: usize,
    len: usize,
) -> (usize, Vec<u8>) {
    let mut rng = Rng(9);
    let mut errs = 0;
    let mut all = Vec::new();
    for _ in 0..frames {
        let info = rng.bits(len);
        let llrs = awgn_llrs(&encode_vec(&info, rate), rate, ebn0_db, &mut rng);
        let out = decode_frame::<D>(&llrs, rate, Decision::Soft);
        errs += errors(&out, &info);
        all.extend(out);
    }
    (errs, all)
}

#[test]
fn recommended_depth_is_deep_enough() {
    // Common practice: a traceback of about 5·K steps suffices at rate 1/2, punctured codes
    // need longer. Measured here at an Eb/N0 per rate where the BER is 1e-4 … 4e-4: a window
    // deeper than RECOMMENDED_DEPTH (96) changes the error count by less than the Monte Carlo
    // tolerance 4·sqrt(e) and alters (almost) no decoded bit; a 32-step window (≈ 5·K) loses
    // clearly at the punctured rates.
    assert_eq!(RECOMMENDED_DEPTH, 96);
    for (rate, ebn0) in [
        (CodeRate::Half, 3.0),
        (CodeRate::TwoThirds, 3.5),
        (CodeRate::ThreeQuarters, 4.0),
    ] {
        let (frames, len) = (200, 2000);
        let (e32, _) = ber_at::<32>(rate, ebn0, frames, len);
        let (e64, b64) = ber_at::<64>(rate, ebn0, frames, len);
        let (e96, b96) = ber_at::<96>(rate, ebn0, frames, len);
        let (e160, b160) = ber_at::<160>(rate, ebn0, frames, len);
        let n = frames * len;
        let (d64, d96) = (errors(&b64, &b160), errors(&b96, &b160));
        eprintln!(
            "{rate:?} Eb/N0 {ebn0} dB, {n} bits: errors D=32 {e32}, D=64 {e64}, D=96 {e96}, \
             D=160 {e160} (BER {:.2e}); bits differing from D=160: D=64 {d64}, D=96 {d96}",
            e160 as f64 / n as f64
        );
        assert!(e160 >= 100, "{rate:?}: too few errors ({e160}) to measure");
        let tol = 4.0 * (e160 as f64).sqrt();
        assert!(
            (e96 as f64 - e160 as f64).abs() <= tol,
            "{rate:?}: {e96} vs {e160}"
        );
        assert!(d96 * 100 <= e160, "{rate:?}: {d96} bits differ");
        if rate != CodeRate::Half {
            assert!(
                e32 as f64 > e160 as f64 + tol,
                "{rate:?}: D=32 {e32} vs {e160}"
            );
        }
    }
}
