//! Speed of the fading generator's coarse evaluation (a development probe, not a test).
use flatbin_harness::channel::sos::{FadingParams, SosFading};
use flatbin_harness::rng::stream_rng;
fn main() {
    let p = FadingParams::rayleigh(1562.5, 1e6, 64);
    let mut g = SosFading::new(&p, &mut stream_rng(1, 0));
    let mut out = vec![num_complex::Complex::new(0.0, 0.0); 64];
    let t = std::time::Instant::now();
    let mut acc = 0.0;
    for _ in 0..100_000 {
        g.coarse_points(&mut out);
        acc += out[3].re;
    }
    println!(
        "batched: {:.1} ns per coarse point ({acc:.3})",
        t.elapsed().as_secs_f64() / 6.4e6 * 1e9
    );
    let t = std::time::Instant::now();
    for _ in 0..6_400_000 {
        acc += g.next_coarse().re;
    }
    println!(
        "single: {:.1} ns per coarse point ({acc:.3})",
        t.elapsed().as_secs_f64() / 6.4e6 * 1e9
    );
}
