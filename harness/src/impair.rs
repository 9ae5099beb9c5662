//! Radio impairments applied to time-domain samples, each seeded and reproducible, each
//! leaving the signal bit-identical at zero strength.
//!
//! * [`frequency_offset`] — carrier frequency offset.
//! * [`PhaseNoise`] — Wiener (random-walk) phase noise of a given 3-dB linewidth.
//! * [`dc_offset`] — a constant complex offset.
//! * [`IqImbalance`] — receiver gain/phase imbalance, `y = μx + νx*`.
//! * [`Adc`] — b-bit quantisation with clipping at full scale, Q15 output.
//! * [`CwInterferer`] / [`NoiseBurst`] — narrowband interference: a CW tone, or Gaussian
//!   noise over a few bins, each with a duty cycle ([`Interferer`] holds either).
//! * [`fractional_delay`] / [`resample`] — timing offset and sampling-clock offset (32-tap
//!   Kaiser-windowed sinc interpolation).

use flatbin::fixed::Cq15;
use flatbin::Cf32;
use rand_distr::{Distribution, StandardNormal};

use crate::rng::HarnessRng;

/// Multiplies `samples` by `e^{j(2π·cycles_per_sample·n + phase_rad)}`, `n` counted from 0:
/// a carrier frequency offset of `cycles_per_sample · fs` Hz (ε = cycles_per_sample · N in
/// subcarrier spacings). The phase is accumulated in f64. Zero offset and phase: unchanged.
pub fn frequency_offset(samples: &mut [Cf32], cycles_per_sample: f64, phase_rad: f64) {
    if cycles_per_sample == 0.0 && phase_rad == 0.0 {
        return;
    }
    let w = 2.0 * std::f64::consts::PI * cycles_per_sample;
    for (n, s) in samples.iter_mut().enumerate() {
        let ph = w * n as f64 + phase_rad;
        *s *= Cf32::new(ph.cos() as f32, ph.sin() as f32);
    }
}

/// Wiener phase noise: `φ[n] = φ[n−1] + w[n]`, `w ~ N(0, 2π·β·Ts)` for a 3-dB linewidth `β`
/// (the Lorentzian oscillator model; common practice), applied as `x·e^{jφ}`. The phase
/// continues across calls.
#[derive(Clone, Debug)]
pub struct PhaseNoise {
    step_sd: f64,
    phase: f64,
}

impl PhaseNoise {
    /// Phase noise of 3-dB linewidth `linewidth_hz` at sample rate `sample_rate_hz`.
    pub fn new(linewidth_hz: f64, sample_rate_hz: f64) -> Self {
        let var = 2.0 * std::f64::consts::PI * linewidth_hz.max(0.0) / sample_rate_hz;
        Self {
            step_sd: if var.is_finite() { var.sqrt() } else { 0.0 },
            phase: 0.0,
        }
    }
    /// Applies the next `samples.len()` phase values (zero linewidth: unchanged).
    pub fn apply(&mut self, samples: &mut [Cf32], rng: &mut HarnessRng) {
        if self.step_sd == 0.0 {
            return;
        }
        for s in samples.iter_mut() {
            let w: f64 = StandardNormal.sample(rng);
            self.phase += w * self.step_sd;
            *s *= Cf32::new(self.phase.cos() as f32, self.phase.sin() as f32);
        }
    }
}

/// Adds a constant complex offset (zero: unchanged).
pub fn dc_offset(samples: &mut [Cf32], offset: Cf32) {
    if offset == Cf32::new(0.0, 0.0) {
        return;
    }
    for s in samples.iter_mut() {
        *s += offset;
    }
}

/// Receiver IQ imbalance: the quadrature branch has gain `g` and phase error `φ` relative to
/// the in-phase branch, so `y = μ·x + ν·x*` with `μ = (1 + g e^{−jφ})/2`,
/// `ν = (1 − g e^{jφ})/2` (the usual baseband model; common practice).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct IqImbalance {
    mu: Cf32,
    nu: Cf32,
    identity: bool,
}

impl IqImbalance {
    /// Gain imbalance in dB (quadrature over in-phase) and phase error in degrees.
    pub fn new(gain_db: f64, phase_deg: f64) -> Self {
        let g = 10f64.powf(gain_db / 20.0);
        let phi = phase_deg.to_radians();
        let mu = (1.0 + g * (-phi).cos(), g * (-phi).sin());
        let nu = (1.0 - g * phi.cos(), -g * phi.sin());
        Self {
            mu: Cf32::new((mu.0 / 2.0) as f32, (mu.1 / 2.0) as f32),
            nu: Cf32::new((nu.0 / 2.0) as f32, (nu.1 / 2.0) as f32),
            identity: gain_db == 0.0 && phase_deg == 0.0,
        }
    }
    /// The image rejection ratio `|μ|²/|ν|² = (1 + 2g cos φ + g²)/(1 − 2g cos φ + g²)`, dB.
    pub fn image_rejection_db(gain_db: f64, phase_deg: f64) -> f64 {
        crate::theory::iq_image::image_rejection_db(gain_db, phase_deg)
    }
    /// Applies the imbalance (none: unchanged).
    pub fn apply(&self, samples: &mut [Cf32]) {
        if self.identity {
            return;
        }
        for s in samples.iter_mut() {
            *s = self.mu * *s + self.nu * s.conj();
        }
    }
}

/// An ADC pair: each of I and Q quantised to `bits` bits over `[-1, 1)` (full scale 1, the
/// Q15 convention), rounding to nearest and clipping; the codes are returned as Q15.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Adc {
    /// Resolution, bits (2..=16).
    pub bits: u32,
}

impl Adc {
    /// Quantises `samples` (fractions of full scale) into `out`; returns how many components
    /// clipped.
    pub fn convert(&self, samples: &[Cf32], out: &mut [Cq15]) -> usize {
        let bits = self.bits.clamp(2, 16);
        let levels = (1i32 << (bits - 1)) as f32; // codes -levels ..= levels-1
        let shift = 16 - bits;
        let mut clipped = 0;
        let mut q = |v: f32| -> i16 {
            let code = (v * levels).round();
            let c = code.clamp(-levels, levels - 1.0);
            if c != code {
                clipped += 1;
            }
            ((c as i32) << shift) as i16
        };
        for (o, s) in out.iter_mut().zip(samples) {
            *o = Cq15::new(q(s.re), q(s.im));
        }
        clipped
    }
}

/// A CW interferer `A·e^{j(2π f n + θ)}` switched on for the first `duty` fraction of every
/// `period_samples` samples (duty 1: always on; amplitude 0: no effect).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct CwInterferer {
    /// Frequency, cycles per sample.
    pub cycles_per_sample: f64,
    /// Amplitude (power = amplitude²), fractions of full scale.
    pub amplitude: f64,
    /// Fraction of each period the tone is on, 0..=1.
    pub duty: f64,
    /// Period of the on/off pattern, samples.
    pub period_samples: usize,
}

impl CwInterferer {
    /// Adds the interferer to `samples`, whose first sample has index `start` in the stream.
    pub fn add(&self, samples: &mut [Cf32], start: u64) {
        if self.amplitude == 0.0 || self.duty <= 0.0 {
            return;
        }
        let period = self.period_samples.max(1) as u64;
        let on = (self.duty.min(1.0) * period as f64).round() as u64;
        let w = 2.0 * std::f64::consts::PI * self.cycles_per_sample;
        for (k, s) in samples.iter_mut().enumerate() {
            let n = start + k as u64;
            if n % period < on {
                let ph = w * n as f64;
                *s += Cf32::new(
                    (self.amplitude * ph.cos()) as f32,
                    (self.amplitude * ph.sin()) as f32,
                );
            }
        }
    }
}

/// A narrowband noise burst: complex Gaussian noise band-limited to `bandwidth_cycles` around
/// `centre_cycles` (both cycles per sample), of mean power `power` while on, switched on for the
/// first `duty` fraction of every `period_samples` samples. The band is shaped by a
/// Blackman-windowed sinc low-pass (length ≈ 8/bandwidth, at most 1023 taps; stop band below
/// −58 dB, common practice) and mixed up to the centre. It owns its random stream, seeded from
/// one `u64`, and its filter state, so successive calls continue one stream.
#[derive(Clone, Debug)]
pub struct NoiseBurst {
    centre_cycles: f64,
    amplitude: f64,
    duty: f64,
    period: u64,
    taps: Vec<f32>,
    history: Vec<Cf32>,
    pos: usize,
    rng: HarnessRng,
}

impl NoiseBurst {
    /// A burst of `power` (fraction of full scale squared) over `bandwidth_cycles` around
    /// `centre_cycles`, on for `duty` of every `period_samples`, drawing from `seed`.
    pub fn new(
        centre_cycles: f64,
        bandwidth_cycles: f64,
        power: f64,
        duty: f64,
        period_samples: usize,
        seed: u64,
    ) -> Self {
        let bw = bandwidth_cycles.clamp(1e-3, 1.0);
        let len = ((8.0 / bw).ceil() as usize | 1).min(1023);
        let mid = (len / 2) as f64;
        let fc = bw / 2.0;
        let mut taps: Vec<f64> = (0..len)
            .map(|i| {
                let t = i as f64 - mid;
                let sinc = if t == 0.0 {
                    2.0 * fc
                } else {
                    (2.0 * std::f64::consts::PI * fc * t).sin() / (std::f64::consts::PI * t)
                };
                let x = 2.0 * std::f64::consts::PI * i as f64 / (len - 1).max(1) as f64;
                sinc * (0.42 - 0.5 * x.cos() + 0.08 * (2.0 * x).cos())
            })
            .collect();
        // Unit output power for unit-power white input.
        let energy = taps.iter().map(|h| h * h).sum::<f64>().sqrt();
        for h in taps.iter_mut() {
            *h /= energy;
        }
        Self {
            centre_cycles,
            amplitude: power.max(0.0).sqrt(),
            duty: duty.clamp(0.0, 1.0),
            period: period_samples.max(1) as u64,
            taps: taps.into_iter().map(|h| h as f32).collect(),
            history: vec![Cf32::new(0.0, 0.0); len],
            pos: 0,
            rng: crate::rng::stream_rng(seed, 0x6e62), // stream tag "nb"
        }
    }

    /// FIR length, samples.
    pub fn filter_len(&self) -> usize {
        self.taps.len()
    }

    /// Adds the next `samples.len()` samples of the burst to `samples`, whose first sample has
    /// index `start` in the stream (for the on/off pattern and the mixing phase). Zero power or
    /// duty: unchanged, and no random numbers drawn.
    pub fn add(&mut self, samples: &mut [Cf32], start: u64) {
        if self.amplitude == 0.0 || self.duty == 0.0 {
            return;
        }
        let on = (self.duty * self.period as f64).round() as u64;
        let w = 2.0 * std::f64::consts::PI * self.centre_cycles;
        let len = self.taps.len();
        let scale = std::f32::consts::FRAC_1_SQRT_2;
        for (k, s) in samples.iter_mut().enumerate() {
            // White CN(0, 1) into the delay line (always, so the noise is stationary).
            let re: f32 = StandardNormal.sample(&mut self.rng);
            let im: f32 = StandardNormal.sample(&mut self.rng);
            self.pos = if self.pos == 0 { len - 1 } else { self.pos - 1 };
            self.history[self.pos] = Cf32::new(re * scale, im * scale);
            let n = start + k as u64;
            if n % self.period >= on {
                continue;
            }
            let (newer, older) = self.history.split_at(self.pos);
            let mut acc = Cf32::new(0.0, 0.0);
            for (h, x) in self.taps.iter().zip(older.iter().chain(newer)) {
                acc += x * *h;
            }
            let ph = w * n as f64;
            let rot = Cf32::new(
                (self.amplitude * ph.cos()) as f32,
                (self.amplitude * ph.sin()) as f32,
            );
            *s += acc * rot;
        }
    }
}

/// A narrowband interferer of either kind, as the scenario file describes it.
#[derive(Clone, Debug)]
pub enum Interferer {
    /// A CW tone.
    Cw(CwInterferer),
    /// A band-limited noise burst (boxed: it carries its generator and filter state).
    NoiseBurst(Box<NoiseBurst>),
}

impl Interferer {
    /// Adds the next `samples.len()` samples (first at stream index `start`).
    pub fn add(&mut self, samples: &mut [Cf32], start: u64) {
        match self {
            Self::Cw(cw) => cw.add(samples, start),
            Self::NoiseBurst(nb) => nb.add(samples, start),
        }
    }
}

/// Half-length of the fractional-delay interpolator, samples (32 taps in all).
const INTERP_HALF: usize = 16;
/// Fractional positions tabulated per sample (nearest is used: delay error ≤ 1/8192 sample).
const INTERP_PHASES: usize = 4096;
/// Kaiser window shape of the interpolator (β = 8: sidelobes below −60 dB; common practice).
const INTERP_KAISER_BETA: f64 = 8.0;

/// Zeroth-order modified Bessel function of the first kind, by its power series.
fn bessel_i0(x: f64) -> f64 {
    let (mut sum, mut term, q) = (1.0f64, 1.0f64, x * x / 4.0);
    for k in 1..64 {
        term *= q / (k * k) as f64;
        sum += term;
        if term < 1e-17 * sum {
            break;
        }
    }
    sum
}

/// The polyphase table of the Kaiser-windowed sinc interpolator: row `p` holds the 32 taps
/// for fractional position `p / INTERP_PHASES`, each row normalised to unit DC gain.
fn interp_table() -> &'static [[f32; 2 * INTERP_HALF]] {
    static TABLE: std::sync::OnceLock<Vec<[f32; 2 * INTERP_HALF]>> = std::sync::OnceLock::new();
    TABLE.get_or_init(|| {
        let i0b = bessel_i0(INTERP_KAISER_BETA);
        (0..=INTERP_PHASES)
            .map(|p| {
                let u = p as f64 / INTERP_PHASES as f64;
                let mut row = [0.0f64; 2 * INTERP_HALF];
                for (j, h) in row.iter_mut().enumerate() {
                    // Tap j multiplies x[i + j − (HALF − 1)]; its distance from t = i + u.
                    let d = j as f64 - (INTERP_HALF as f64 - 1.0) - u;
                    let sinc = if d == 0.0 {
                        1.0
                    } else {
                        (std::f64::consts::PI * d).sin() / (std::f64::consts::PI * d)
                    };
                    let r = d / INTERP_HALF as f64;
                    let w = if r.abs() < 1.0 {
                        bessel_i0(INTERP_KAISER_BETA * (1.0 - r * r).sqrt()) / i0b
                    } else {
                        0.0
                    };
                    *h = sinc * w;
                }
                let dc: f64 = row.iter().sum();
                row.map(|h| (h / dc) as f32)
            })
            .collect()
    })
}

/// Band-limited interpolation of `x` at the (fractional) position `t`: a 32-tap
/// Kaiser-windowed sinc (error below −60 dB for content within ±0.4 cycles/sample; common
/// practice for fractional-delay filters). Outside the record the signal is taken as zero.
fn interp_at(x: &[Cf32], t: f64) -> Cf32 {
    let i = t.floor();
    let p = ((t - i) * INTERP_PHASES as f64).round() as usize;
    let (i, p) = if p == INTERP_PHASES {
        (i as i64 + 1, 0)
    } else {
        (i as i64, p)
    };
    let row = &interp_table()[p];
    let first = i - (INTERP_HALF as i64 - 1);
    let mut acc = Cf32::new(0.0, 0.0);
    for (j, h) in row.iter().enumerate() {
        let k = first + j as i64;
        if k >= 0 && (k as usize) < x.len() {
            acc += x[k as usize] * *h;
        }
    }
    acc
}

/// Delays `x` by `delay_samples` (integer and fractional part by band-limited interpolation;
/// an integer delay is an exact shift); samples before the start are zero. Zero delay: a copy.
pub fn fractional_delay(x: &[Cf32], delay_samples: f64) -> Vec<Cf32> {
    if delay_samples == 0.0 {
        return x.to_vec();
    }
    (0..x.len())
        .map(|n| interp_at(x, n as f64 - delay_samples))
        .collect()
}

/// Sampling-clock offset: the receiver's clock runs `ppm` parts per million fast, so output
/// sample `n` is the input at `n·(1 + ppm·1e-6)` (band-limited interpolation). Zero: a copy.
pub fn resample(x: &[Cf32], ppm: f64) -> Vec<Cf32> {
    if ppm == 0.0 {
        return x.to_vec();
    }
    let r = 1.0 + ppm * 1e-6;
    (0..x.len()).map(|n| interp_at(x, n as f64 * r)).collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::rng::stream_rng;
    use rand::RngExt;

    fn signal() -> Vec<Cf32> {
        let mut rng = stream_rng(1, 2);
        (0..4096)
            .map(|_| Cf32::new(rng.random_range(-0.5..0.5), rng.random_range(-0.5..0.5)))
            .collect()
    }

    #[test]
    fn zero_strength_leaves_the_signal_bit_identical() {
        let x = signal();
        let mut y = x.clone();
        frequency_offset(&mut y, 0.0, 0.0);
        PhaseNoise::new(0.0, 1e6).apply(&mut y, &mut stream_rng(3, 3));
        dc_offset(&mut y, Cf32::new(0.0, 0.0));
        IqImbalance::new(0.0, 0.0).apply(&mut y);
        CwInterferer {
            cycles_per_sample: 0.1,
            amplitude: 0.0,
            duty: 1.0,
            period_samples: 10,
        }
        .add(&mut y, 0);
        NoiseBurst::new(0.1, 0.05, 0.0, 1.0, 10, 4).add(&mut y, 0);
        NoiseBurst::new(0.1, 0.05, 1.0, 0.0, 10, 4).add(&mut y, 0);
        y = fractional_delay(&y, 0.0);
        y = resample(&y, 0.0);
        assert_eq!(x, y);
    }

    #[test]
    fn adc_sqnr_follows_the_6_02_rule() {
        // A full-scale-referenced sinusoid at back-off B on each of I and Q: SQNR ≈
        // 6.02·b + 1.76 − B dB (common practice), within 1 dB.
        for bits in [8u32, 10, 12] {
            for backoff_db in [1.0f64, 10.0] {
                let a = 10f64.powf(-backoff_db / 20.0);
                let n = 100_003usize; // not a multiple of the tone period: codes spread
                let x: Vec<Cf32> = (0..n)
                    .map(|k| {
                        let ph = 2.0 * std::f64::consts::PI * 0.012_345 * k as f64;
                        Cf32::new((a * ph.cos()) as f32, (a * ph.sin()) as f32)
                    })
                    .collect();
                let mut q = vec![Cq15::ZERO; n];
                let clipped = Adc { bits }.convert(&x, &mut q);
                assert_eq!(clipped, 0);
                let (mut sig, mut err) = (0.0f64, 0.0f64);
                for (s, c) in x.iter().zip(&q) {
                    let v = c.to_cf32();
                    sig += f64::from(s.re).powi(2);
                    err += f64::from(v.re - s.re).powi(2);
                }
                let sqnr = 10.0 * (sig / err).log10();
                let rule = 6.02 * f64::from(bits) + 1.76 - backoff_db;
                assert!(
                    (sqnr - rule).abs() <= 1.0,
                    "b={bits} B={backoff_db}: {sqnr:.2} vs {rule:.2}"
                );
            }
        }
        // Clipping is counted: a sinusoid 3 dB above full scale clips.
        let x = vec![Cf32::new(1.4, -1.4), Cf32::new(0.1, 0.1)];
        let mut q = vec![Cq15::ZERO; 2];
        assert_eq!(Adc { bits: 12 }.convert(&x, &mut q), 2);
    }

    #[test]
    fn image_rejection_matches_closed_form() {
        // A tone at +f through the imbalance: power at −f over power at +f is 1/IRR with
        // IRR = (1 + 2g cos φ + g²)/(1 − 2g cos φ + g²) (common practice), within 0.5 dB.
        for (g_db, ph) in [(0.5f64, 2.0f64), (1.0, 5.0), (0.1, 0.5)] {
            let n = 1024usize;
            let k = 37usize;
            let mut x: Vec<Cf32> = (0..n)
                .map(|t| {
                    let ph = 2.0 * std::f64::consts::PI * (k * t) as f64 / n as f64;
                    Cf32::new(ph.cos() as f32, ph.sin() as f32)
                })
                .collect();
            IqImbalance::new(g_db, ph).apply(&mut x);
            let bin = |kk: f64| {
                let mut acc = num_complex::Complex::<f64>::new(0.0, 0.0);
                for (t, v) in x.iter().enumerate() {
                    let ang = -2.0 * std::f64::consts::PI * kk * t as f64 / n as f64;
                    acc += num_complex::Complex::new(f64::from(v.re), f64::from(v.im))
                        * num_complex::Complex::from_polar(1.0, ang);
                }
                acc.norm_sqr()
            };
            let measured = 10.0 * (bin(k as f64) / bin(-(k as f64))).log10();
            // The closed form written out here (not taken from the code under test).
            let g = 10f64.powf(g_db / 20.0);
            let c = ph.to_radians().cos();
            let want = 10.0 * ((1.0 + 2.0 * g * c + g * g) / (1.0 - 2.0 * g * c + g * g)).log10();
            assert!((IqImbalance::image_rejection_db(g_db, ph) - want).abs() < 1e-9);
            assert!(
                (measured - want).abs() <= 0.5,
                "g={g_db} φ={ph}: {measured:.2} vs {want:.2}"
            );
        }
    }
}
