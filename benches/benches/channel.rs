//! Throughput of the fading channel: tap-samples per second (output samples × taps) through
//! the tapped delay line, for 4, 11 and 41 taps at 16 sinusoids per tap, fd·T = 0.1 (N = 64),
//! with the interpolation step chosen by the same rule the link simulation uses
//! (`channel::sos::step_for`). One thread: criterion's figure is per core.

use std::hint::black_box;

use criterion::{criterion_group, criterion_main, BenchmarkId, Criterion, Throughput};
use flatbin::Cf32;
use flatbin_harness::channel::sos::FadingParams;
use flatbin_harness::channel::tdl::{Tdl, Variation};
use flatbin_harness::rng::stream_rng;

fn bench(c: &mut Criterion) {
    let fs = 1.0e6;
    let n_fft = 64;
    let fd = 0.1 * fs / n_fft as f64; // fd·T = 0.1
    let mut params = FadingParams::rayleigh(fd, fs, n_fft);
    if let Ok(s) = std::env::var("FLATBIN_BENCH_STEP") {
        params.step = s.parse().unwrap_or(params.step);
    }
    let len = 16_384;
    let input: Vec<Cf32> = (0..len)
        .map(|i| Cf32::new((i % 7) as f32 - 3.0, (i % 5) as f32 - 2.0))
        .collect();
    let mut output = vec![Cf32::new(0.0, 0.0); len];
    let mut group = c.benchmark_group("channel");
    for taps in [4usize, 11, 41] {
        let profile: Vec<(usize, f64)> = (0..taps).map(|l| (l, 1.0 / taps as f64)).collect();
        let mut tdl = Tdl::new(
            &profile,
            &params,
            Variation::Continuous,
            &mut stream_rng(1, 0),
        );
        group.throughput(Throughput::Elements((len * taps) as u64));
        group.bench_function(BenchmarkId::new("tap_samples", taps), |b| {
            b.iter(|| tdl.process(black_box(&input), black_box(&mut output)))
        });
    }
    group.finish();
}

criterion_group!(channel, bench);
criterion_main!(channel);
