//! Per-symbol cost of the receive front (f32 FFT, Q15 FFT in place and out of place, CP
//! removal + f32 FFT) and the max-log demapper, for N = 64, 256, 1024. Host figures only
//! (the Q15 FFT here is the portable path); target costs are instruction counts
//! (`cargo xtask mcu`, mcu/costs.csv).

use std::hint::black_box;

use criterion::{criterion_group, criterion_main, BenchmarkId, Criterion, Throughput};
use flatbin::demap::{demap_symbols, llr_to_i8, I8_LSB_PER_LLR};
use flatbin::fft::{MicroFft, OfdmFft};
use flatbin::fft_q15::Q15Fft;
use flatbin::fixed::Cq15;
use flatbin::front::Front;
use flatbin::numerology::NumerologyParams;
use flatbin::{Cf32, Modulation, Numerology};

fn numerology(n: usize) -> Numerology {
    Numerology::new(NumerologyParams {
        fft_len: n,
        cp_len: n / 8,
        guard_low_bins: n / 16,
        guard_high_bins: n / 16 - 1,
        ..Default::default()
    })
    .expect("valid bench numerology")
}

/// Deterministic pseudo-random samples (no RNG crate needed for a bench input).
fn samples(len: usize) -> Vec<Cf32> {
    let mut x: u32 = 0x1234_5678;
    (0..len)
        .map(|_| {
            x ^= x << 13;
            x ^= x >> 17;
            x ^= x << 5;
            let re = (x & 0xffff) as f32 / 32768.0 - 1.0;
            let im = (x >> 16) as f32 / 32768.0 - 1.0;
            Cf32::new(re, im)
        })
        .collect()
}

fn bench_n<const N: usize>(c: &mut Criterion) {
    let nu = numerology(N);
    let input = samples(nu.symbol_len());
    let mut group = c.benchmark_group("front");
    group.throughput(Throughput::Elements(1));
    let mut fft = MicroFft::<N>::new();
    group.bench_function(BenchmarkId::new("fft", N), |b| {
        let mut buf = [Cf32::new(0.0, 0.0); N];
        b.iter(|| {
            buf.copy_from_slice(&input[..N]);
            black_box(fft.forward(black_box(&mut buf)))
        })
    });
    let mut q15 = Q15Fft::<N>::new();
    let input_q15: Vec<Cq15> = input.iter().map(|v| Cq15::from_cf32(*v * 0.25)).collect();
    group.bench_function(BenchmarkId::new("fft_q15", N), |b| {
        let mut buf = [Cq15::ZERO; N];
        b.iter(|| {
            buf.copy_from_slice(&input_q15[..N]);
            black_box(q15.forward(black_box(&mut buf)))
        })
    });
    group.bench_function(BenchmarkId::new("fft_q15_out_of_place", N), |b| {
        let mut src = [Cq15::ZERO; N];
        src.copy_from_slice(&input_q15[..N]);
        let mut out = [Cq15::ZERO; N];
        b.iter(|| black_box(Q15Fft::<N>::forward_from(black_box(&src), &mut out)))
    });
    let mut front = Front::new(&nu, MicroFft::<N>::new()).expect("sizes match");
    group.bench_function(BenchmarkId::new("cp_removal_and_fft", N), |b| {
        let mut bins = [Cf32::new(0.0, 0.0); N];
        b.iter(|| black_box(front.demodulate(black_box(&input), &mut bins)))
    });
    group.finish();

    let mut group = c.benchmark_group("f32_demap_symbol");
    let data = nu.data_len(0);
    let ys = samples(data);
    let weights = vec![10.0f32; data];
    for m in [
        Modulation::Qpsk,
        Modulation::Qam16,
        Modulation::Qam64,
        Modulation::Qam256,
    ] {
        let mut llrs = vec![0.0f32; data * m.bits_per_symbol()];
        let mut q = vec![0i8; llrs.len()];
        group.bench_function(BenchmarkId::new(m.name(), N), |b| {
            b.iter(|| {
                demap_symbols(m, black_box(&ys), &weights, &mut llrs).expect("sizes match");
                llr_to_i8(&llrs, I8_LSB_PER_LLR, &mut q).expect("sizes match");
                black_box(&q);
            })
        });
    }
    group.finish();
}

fn benches(c: &mut Criterion) {
    bench_n::<64>(c);
    bench_n::<256>(c);
    bench_n::<1024>(c);
}

criterion_group!(front, benches);
criterion_main!(front);
