//! Per-symbol cost of channel estimation + equalization + demapping (the f32 receiver after
//! the FFT) for N = 64, 256, 1024, with K = 4 frequency taps, for linear and LMMSE frequency
//! interpolation and for the 2-D (time LMMSE, M = 4) estimator; the whole symbol including
//! the FFT; and the whole Q15 symbol. Host figures; target costs are instruction counts
//! (`cargo xtask mcu`).

use std::hint::black_box;

use criterion::{criterion_group, criterion_main, BenchmarkId, Criterion, Throughput};
use flatbin::estimate::{EstimatorConfig, FreqInterpolation, TimeFilter};
use flatbin::fft::{MicroFft, OfdmFft};
use flatbin::numerology::NumerologyParams;
use flatbin::receiver::{Receiver, ReceiverConfig};
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
    let mut bins = [Cf32::new(0.0, 0.0); N];
    bins.copy_from_slice(&input[..N]);
    MicroFft::<N>::new().forward(&mut bins);
    let m = Modulation::Qam16;
    let d = nu.max_data_len();
    let mut group = c.benchmark_group("receiver");
    group.throughput(Throughput::Elements(1));
    for (name, freq, time) in [
        ("linear", FreqInterpolation::Linear, TimeFilter::Latest),
        ("lmmse", FreqInterpolation::Lmmse, TimeFilter::Latest),
        ("lmmse_2d", FreqInterpolation::Lmmse, TimeFilter::Lmmse),
    ] {
        let cfg = ReceiverConfig {
            estimator: EstimatorConfig {
                freq,
                time,
                ..EstimatorConfig::default()
            },
            ..ReceiverConfig::default()
        };
        let mut rx = Box::new(
            Receiver::<MicroFft<N>, N, 4, 4>::new(&nu, MicroFft::<N>::new(), cfg)
                .expect("valid receiver"),
        );
        let (mut x, mut s, mut l) = (
            vec![Cf32::new(0.0, 0.0); d],
            vec![0.0f32; d],
            vec![0.0f32; d * m.bits_per_symbol()],
        );
        group.bench_function(BenchmarkId::new(format!("est_eq_demap_{name}"), N), |b| {
            b.iter(|| black_box(rx.receive_bins(black_box(&bins), 0, m, &mut x, &mut s, &mut l)))
        });
        if name == "lmmse" {
            group.bench_function(BenchmarkId::new("whole_symbol_lmmse", N), |b| {
                b.iter(|| black_box(rx.receive(black_box(&input), 0, m, &mut x, &mut s, &mut l)))
            });
        }
    }
    // The Q15 receiver, whole symbol (gain, Q15 FFT, estimation, equalization, i8 LLRs).
    {
        use flatbin::fft_q15::Q15Fft;
        use flatbin::fixed::Cq15;
        use flatbin::fixed_math::Scaled;
        use flatbin::receiver_q15::{DesignQ15, ReceiverQ15, ReceiverQ15Config};
        let cfg = ReceiverQ15Config::default();
        let design =
            DesignQ15::<N, 4, 4>::new(&nu, &cfg, <Q15Fft<N> as OfdmFft<N>>::RESIDUAL_SCALE)
                .expect("valid design");
        let mut rx = Box::new(
            ReceiverQ15::<Q15Fft<N>, N, 4, 4>::new(&nu, Q15Fft::new(), design)
                .expect("valid receiver"),
        );
        let q: Vec<Cq15> = input.iter().map(|v| Cq15::from_cf32(*v * 0.25)).collect();
        let (mut x, mut s, mut l) = (
            vec![Cq15::ZERO; d],
            vec![Scaled::default(); d],
            vec![0i8; d * m.bits_per_symbol()],
        );
        group.bench_function(BenchmarkId::new("whole_symbol_q15", N), |b| {
            b.iter(|| black_box(rx.receive(black_box(&q), 0, m, &mut x, &mut s, &mut l)))
        });
    }
    group.finish();
}

fn benches(c: &mut Criterion) {
    bench_n::<64>(c);
    bench_n::<256>(c);
    bench_n::<1024>(c);
}

criterion_group!(receiver, benches);
criterion_main!(receiver);
