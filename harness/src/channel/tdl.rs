//! Tapped delay line: `y[n] = Σ_l sqrt(p_l) · h_l[n] · x[n − d_l]`, every tap gain `h_l` an
//! independent [`SosFading`] process evaluated per sample (coarse grid + linear interpolation,
//! see [`crate::channel::sos`]). Streaming: call [`Tdl::process`] with chunks of any length;
//! the delay line and the fading processes continue across calls.

use flatbin::Cf32;
use num_complex::Complex;

use crate::channel::sos::{FadingParams, SosFading};
use crate::rng::HarnessRng;

/// How the gains vary in time.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Variation {
    /// Per-sample variation (the physical model; makes ICI).
    Continuous,
    /// Gains held constant over consecutive blocks of this many samples (counted from the
    /// first sample), each at its value at the block start: a channel frozen over each OFDM
    /// symbol (no ICI) — the negative control of ICI measurements.
    HeldPerBlock(usize),
}

/// Samples per internal processing chunk (keeps the gain scratch in cache).
const CHUNK: usize = 4096;

#[derive(Clone, Debug)]
struct Tap {
    delay: usize,
    amplitude: f32,
    fading: SosFading,
    /// Gain at the start of the current interpolation step, and its per-sample increment.
    base: Complex<f32>,
    delta: Complex<f32>,
    /// Position inside the current step, samples.
    pos: usize,
    /// Gain held for the current block ([`Variation::HeldPerBlock`]).
    held: Cf32,
}

impl Tap {
    fn load_step(&mut self, first: Complex<f64>, next: Complex<f64>) {
        let inv = 1.0 / self.fading.step() as f64;
        self.base = Complex::new(first.re as f32, first.im as f32);
        self.delta = Complex::new(
            ((next.re - first.re) * inv) as f32,
            ((next.im - first.im) * inv) as f32,
        );
        self.pos = 0;
    }
}

/// A time-varying tapped delay line.
#[derive(Clone, Debug)]
pub struct Tdl {
    taps: Vec<Tap>,
    /// Longest tap delay, samples.
    max_delay: usize,
    /// The last `max_delay` input samples followed by the current chunk (real, imaginary).
    x_re: Vec<f32>,
    x_im: Vec<f32>,
    /// Scratch: the chunk's output, real and imaginary parts.
    y_re: Vec<f32>,
    y_im: Vec<f32>,
    /// Scratch: one tap's coarse points for the chunk.
    points: Vec<Complex<f64>>,
    /// Scratch: one tap's gains over the chunk.
    g_re: Vec<f32>,
    g_im: Vec<f32>,
    /// Samples processed so far.
    time: u64,
    variation: Variation,
    /// Coarse value after the current step, per tap (the start of the next one).
    upcoming: Vec<Complex<f64>>,
}

impl Tdl {
    /// A line with taps at `(delay_samples, power)` (powers as given; normalise them to sum to
    /// 1 for unit average gain), each tap an independent fading process with `params`, its
    /// random parameters drawn from `rng` in tap order.
    pub fn new(
        taps: &[(usize, f64)],
        params: &FadingParams,
        variation: Variation,
        rng: &mut HarnessRng,
    ) -> Self {
        let max_delay = taps.iter().map(|t| t.0).max().unwrap_or(0);
        let mut line = Self {
            taps: Vec::with_capacity(taps.len()),
            max_delay,
            x_re: vec![0.0; max_delay],
            x_im: vec![0.0; max_delay],
            y_re: Vec::with_capacity(CHUNK),
            y_im: Vec::with_capacity(CHUNK),
            points: Vec::with_capacity(CHUNK),
            g_re: Vec::with_capacity(CHUNK),
            g_im: Vec::with_capacity(CHUNK),
            time: 0,
            variation,
            upcoming: Vec::with_capacity(taps.len()),
        };
        for &(delay, power) in taps {
            let mut fading = SosFading::new(params, rng);
            let first = fading.next_coarse();
            let next = fading.next_coarse();
            let mut tap = Tap {
                delay,
                amplitude: power.max(0.0).sqrt() as f32,
                fading,
                base: Complex::new(0.0, 0.0),
                delta: Complex::new(0.0, 0.0),
                pos: 0,
                held: Cf32::new(0.0, 0.0),
            };
            tap.load_step(first, next);
            line.upcoming.push(next);
            line.taps.push(tap);
        }
        line
    }

    /// Number of taps.
    pub fn tap_count(&self) -> usize {
        self.taps.len()
    }

    /// The taps as `(delay, amplitude × gain)` with the gain held for the current block
    /// ([`Variation::HeldPerBlock`], after the block has been processed): the exact channel a
    /// block saw, for ideal channel knowledge. Zero gains under [`Variation::Continuous`].
    pub fn held_taps(&self) -> Vec<(usize, Cf32)> {
        self.taps
            .iter()
            .map(|t| (t.delay, t.held)) // the held gain includes the amplitude
            .collect()
    }

    /// Interpolation step of the fading processes, samples.
    pub fn step(&self) -> usize {
        self.taps.first().map_or(1, |t| t.fading.step())
    }

    /// Passes `input` through the channel into `output` (same length; overwritten).
    pub fn process(&mut self, input: &[Cf32], output: &mut [Cf32]) {
        let len = input.len().min(output.len());
        let mut done = 0;
        while done < len {
            let n = CHUNK.min(len - done);
            self.process_chunk(&input[done..done + n], &mut output[done..done + n]);
            done += n;
        }
    }

    fn process_chunk(&mut self, input: &[Cf32], output: &mut [Cf32]) {
        let n = input.len();
        let max_delay = self.max_delay;
        // Split real and imaginary parts (structure of arrays): the per-tap loops below then
        // vectorise.
        // x holds the last `max_delay` samples of earlier chunks, then this chunk.
        self.x_re.resize(max_delay + n, 0.0);
        self.x_im.resize(max_delay + n, 0.0);
        kernels::split(
            &mut self.x_re[max_delay..],
            &mut self.x_im[max_delay..],
            input,
        );
        self.y_re.clear();
        self.y_re.resize(n, 0.0);
        self.y_im.clear();
        self.y_im.resize(n, 0.0);
        self.g_re.resize(n, 0.0);
        self.g_im.resize(n, 0.0);
        for (tap, upcoming) in self.taps.iter_mut().zip(self.upcoming.iter_mut()) {
            // Pass 1: this chunk's gains (amplitude included), linear inside each step; the
            // coarse points the chunk needs are computed first, in one batch.
            let step = tap.fading.step();
            let needed = (tap.pos + n) / step;
            self.points.resize(needed, Complex::new(0.0, 0.0));
            tap.fading.coarse_points(&mut self.points);
            let off = max_delay - tap.delay;
            let (x_re, x_im) = (&self.x_re[off..off + n], &self.x_im[off..off + n]);
            match self.variation {
                // Gains computed and applied in one pass (nothing stored).
                Variation::Continuous => {
                    kernels::fill_mac(
                        &mut self.y_re,
                        &mut self.y_im,
                        x_re,
                        x_im,
                        tap,
                        upcoming,
                        &self.points,
                    );
                }
                Variation::HeldPerBlock(block) => {
                    kernels::fill(
                        &mut self.g_re[..n],
                        &mut self.g_im[..n],
                        tap,
                        upcoming,
                        &self.points,
                    );
                    let block = block.max(1) as u64;
                    let gs = self.g_re.iter_mut().zip(self.g_im.iter_mut());
                    for (k, (gr, gi)) in gs.enumerate() {
                        if (self.time + k as u64).is_multiple_of(block) {
                            tap.held = Cf32::new(*gr, *gi);
                        }
                        *gr = tap.held.re;
                        *gi = tap.held.im;
                    }
                    kernels::mac(
                        &mut self.y_re,
                        &mut self.y_im,
                        &self.g_re,
                        &self.g_im,
                        x_re,
                        x_im,
                    );
                }
            }
        }
        kernels::join(output, &self.y_re, &self.y_im);
        let keep = self.x_re.len() - max_delay;
        self.x_re.copy_within(keep.., 0);
        self.x_im.copy_within(keep.., 0);
        self.time += n as u64;
    }
}

/// The gain fill and the multiply-accumulate loop, compiled twice: for the baseline target and,
/// chosen at run time, with AVX2 enabled (wider vectors, the same IEEE operations in the same
/// order — no FMA — so both give the same bits).
mod kernels {
    use super::{Cf32, Complex, Tap};

    /// Walks a tap through `n` samples step by step: for each run of samples inside one
    /// interpolation step, calls `run(first sample, length, gain at its start, gain increment)`
    /// (amplitude folded in), then moves to the next coarse point from `points`.
    #[inline(always)]
    fn walk_steps(
        tap: &mut Tap,
        upcoming: &mut Complex<f64>,
        points: &[Complex<f64>],
        n: usize,
        mut run: impl FnMut(usize, usize, (f32, f32), (f32, f32)),
    ) {
        let step = tap.fading.step();
        let a = tap.amplitude;
        let mut points = points.iter();
        let mut i = 0;
        while i < n {
            let seg = (step - tap.pos).min(n - i);
            let d = (tap.delta.re * a, tap.delta.im * a);
            let start = (
                (tap.base.re + tap.delta.re * tap.pos as f32) * a,
                (tap.base.im + tap.delta.im * tap.pos as f32) * a,
            );
            run(i, seg, start, d);
            tap.pos += seg;
            i += seg;
            if tap.pos == step {
                let first = *upcoming;
                let next = points.next().copied().unwrap_or(first);
                tap.load_step(first, next);
                *upcoming = next;
            }
        }
    }

    macro_rules! define {
        ($fill:ident, $fill_mac:ident, $mac:ident, $split:ident, $join:ident $(, $feature:literal)?) => {
            /// The tap's gains over one chunk: linear between coarse points, the amplitude
            /// folded in; consumes `points` (the coarse points the chunk reaches).
            $(#[target_feature(enable = $feature)])?
            pub(super) fn $fill(g_re: &mut [f32], g_im: &mut [f32], tap: &mut Tap, upcoming: &mut Complex<f64>, points: &[Complex<f64>]) {
                let n = g_re.len().min(g_im.len());
                walk_steps(tap, upcoming, points, n, |i, seg, (s_re, s_im), (d_re, d_im)| {
                    let gs = g_re[i..i + seg].iter_mut().zip(g_im[i..i + seg].iter_mut());
                    for (j, (gr, gi)) in gs.enumerate() {
                        *gr = s_re + d_re * j as i32 as f32;
                        *gi = s_im + d_im * j as i32 as f32;
                    }
                });
            }
            /// [`fill`](self::fill) and [`mac`](self::mac) fused: each gain is computed as
            /// `fill` computes it and applied at once.
            $(#[target_feature(enable = $feature)])?
            pub(super) fn $fill_mac(y_re: &mut [f32], y_im: &mut [f32], x_re: &[f32], x_im: &[f32], tap: &mut Tap, upcoming: &mut Complex<f64>, points: &[Complex<f64>]) {
                let n = y_re.len().min(y_im.len()).min(x_re.len()).min(x_im.len());
                walk_steps(tap, upcoming, points, n, |i, seg, (s_re, s_im), (d_re, d_im)| {
                    let ys = y_re[i..i + seg].iter_mut().zip(y_im[i..i + seg].iter_mut());
                    let xs = x_re[i..i + seg].iter().zip(&x_im[i..i + seg]);
                    for (j, ((yr, yi), (xr, xi))) in ys.zip(xs).enumerate() {
                        let gr = s_re + d_re * j as i32 as f32;
                        let gi = s_im + d_im * j as i32 as f32;
                        *yr += gr * xr - gi * xi;
                        *yi += gr * xi + gi * xr;
                    }
                });
            }
            /// Complex samples into real and imaginary arrays.
            $(#[target_feature(enable = $feature)])?
            pub(super) fn $split(re: &mut [f32], im: &mut [f32], x: &[Cf32]) {
                for ((r, i), v) in re.iter_mut().zip(im.iter_mut()).zip(x) {
                    *r = v.re;
                    *i = v.im;
                }
            }
            /// Real and imaginary arrays into complex samples.
            $(#[target_feature(enable = $feature)])?
            pub(super) fn $join(x: &mut [Cf32], re: &[f32], im: &[f32]) {
                for ((v, r), i) in x.iter_mut().zip(re).zip(im) {
                    *v = Cf32::new(*r, *i);
                }
            }
            /// `y += g·x` (complex, split parts).
            $(#[target_feature(enable = $feature)])?
            pub(super) fn $mac(y_re: &mut [f32], y_im: &mut [f32], g_re: &[f32], g_im: &[f32], x_re: &[f32], x_im: &[f32]) {
                let ys = y_re.iter_mut().zip(y_im.iter_mut());
                let gs = g_re.iter().zip(g_im);
                for ((yr, yi), ((gr, gi), (xr, xi))) in ys.zip(gs.zip(x_re.iter().zip(x_im))) {
                    *yr += gr * xr - gi * xi;
                    *yi += gr * xi + gi * xr;
                }
            }
        };
    }
    define!(fill_base, fill_mac_base, mac_base, split_base, join_base);
    #[cfg(target_arch = "x86_64")]
    define!(
        fill_avx2,
        fill_mac_avx2,
        mac_avx2,
        split_avx2,
        join_avx2,
        "avx2"
    );

    pub(super) fn fill(
        g_re: &mut [f32],
        g_im: &mut [f32],
        tap: &mut Tap,
        upcoming: &mut Complex<f64>,
        points: &[Complex<f64>],
    ) {
        #[cfg(target_arch = "x86_64")]
        if crate::simd::has_avx2() {
            // SAFETY: the CPU supports AVX2 (checked at run time).
            return unsafe { fill_avx2(g_re, g_im, tap, upcoming, points) };
        }
        fill_base(g_re, g_im, tap, upcoming, points)
    }

    #[allow(clippy::too_many_arguments)]
    pub(super) fn fill_mac(
        y_re: &mut [f32],
        y_im: &mut [f32],
        x_re: &[f32],
        x_im: &[f32],
        tap: &mut Tap,
        upcoming: &mut Complex<f64>,
        points: &[Complex<f64>],
    ) {
        #[cfg(target_arch = "x86_64")]
        if crate::simd::has_avx2() {
            // SAFETY: the CPU supports AVX2 (checked at run time).
            return unsafe { fill_mac_avx2(y_re, y_im, x_re, x_im, tap, upcoming, points) };
        }
        fill_mac_base(y_re, y_im, x_re, x_im, tap, upcoming, points)
    }

    pub(super) fn split(re: &mut [f32], im: &mut [f32], x: &[Cf32]) {
        #[cfg(target_arch = "x86_64")]
        if crate::simd::has_avx2() {
            // SAFETY: the CPU supports AVX2 (checked at run time).
            return unsafe { split_avx2(re, im, x) };
        }
        split_base(re, im, x)
    }

    pub(super) fn join(x: &mut [Cf32], re: &[f32], im: &[f32]) {
        #[cfg(target_arch = "x86_64")]
        if crate::simd::has_avx2() {
            // SAFETY: the CPU supports AVX2 (checked at run time).
            return unsafe { join_avx2(x, re, im) };
        }
        join_base(x, re, im)
    }

    pub(super) fn mac(
        y_re: &mut [f32],
        y_im: &mut [f32],
        g_re: &[f32],
        g_im: &[f32],
        x_re: &[f32],
        x_im: &[f32],
    ) {
        #[cfg(target_arch = "x86_64")]
        if crate::simd::has_avx2() {
            // SAFETY: the CPU supports AVX2 (checked at run time).
            return unsafe { mac_avx2(y_re, y_im, g_re, g_im, x_re, x_im) };
        }
        mac_base(y_re, y_im, g_re, g_im, x_re, x_im)
    }
}
