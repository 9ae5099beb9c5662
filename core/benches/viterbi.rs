//! Viterbi decoder throughput: decoded information bits per second for a 10,000-bit terminated
//! frame at rate 1/2, soft decisions, noiseless full-scale-free LLRs with random signs and
//! magnitudes (the decoder's cost does not depend on the values).
//!
//! `cargo bench -p flatbin --bench viterbi`; criterion reports elements/s = decoded bits/s.

use criterion::{criterion_group, criterion_main, BenchmarkId, Criterion, Throughput};
use flatbin::conv_code::{coded_len, encode, CodeRate};
use flatbin::viterbi::{Decision, ViterbiDecoder, RECOMMENDED_DEPTH};
use std::hint::black_box;

const FRAME_BITS: usize = 10_000;

/// Deterministic test frame and its LLRs (sign from the coded bit, magnitude 1..=64 from a
/// small LCG so that the metric comparisons are not all ties).
fn frame(rate: CodeRate) -> Vec<i8> {
    let mut x: u32 = 12345;
    let mut next = || {
        x = x.wrapping_mul(1_664_525).wrapping_add(1_013_904_223);
        x >> 8
    };
    let info: Vec<u8> = (0..FRAME_BITS).map(|_| (next() & 1) as u8).collect();
    let mut coded = vec![0u8; coded_len(FRAME_BITS, rate)];
    encode(&info, rate, &mut coded).expect("encode");
    coded
        .iter()
        .map(|&b| {
            let m = 1 + (next() % 64) as i8;
            if b == 0 {
                m
            } else {
                -m
            }
        })
        .collect()
}

fn decode_frame<const D: usize>(dec: &mut ViterbiDecoder<D>, llrs: &[i8], out: &mut [u8]) {
    let n = dec.decode(llrs, out).expect("decode");
    let rest = out.get_mut(n..).expect("tail");
    dec.finish(rest).expect("finish");
}

fn bench(c: &mut Criterion) {
    let mut g = c.benchmark_group("viterbi");
    g.throughput(Throughput::Elements(FRAME_BITS as u64));
    for (name, rate, decision) in [
        ("half_soft", CodeRate::Half, Decision::Soft),
        ("half_hard", CodeRate::Half, Decision::Hard),
        (
            "three_quarters_soft",
            CodeRate::ThreeQuarters,
            Decision::Soft,
        ),
    ] {
        let llrs = frame(rate);
        let mut out = vec![0u8; FRAME_BITS];
        let mut dec = ViterbiDecoder::<RECOMMENDED_DEPTH>::new(rate, decision);
        g.bench_with_input(BenchmarkId::new(name, FRAME_BITS), &llrs, |b, llrs| {
            b.iter(|| decode_frame(&mut dec, black_box(llrs), black_box(&mut out)))
        });
    }
    g.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
