//! Channel figures for `flatbin channel --plots DIR`: what the fading generator and the tapped
//! delay line produce, each beside its published closed form, as SVG and PNG.
//!
//! | file | simulated | theory |
//! |---|---|---|
//! | `doppler_spectrum` | Welch periodogram of the generator's gain | Clarke/Jakes U-shaped PSD |
//! | `acf` | time-averaged autocorrelation of the gain | J0(2π fd τ) |
//! | `envelope_cdf` | empirical CDF of the envelope | Rayleigh, 1 − exp(−ρ²) |
//! | `ici_vs_fdt` | ICI power through the tapped delay line | exact Jakes sum (Russell & Stüber) |
//!
//! [`simulate`] computes the data, [`render`] draws it, [`write_plots`] does both. Every random
//! stream is `rng::stream_rng(scenario seed, stream)`, so a scenario always gives the same
//! figures; nothing here prints.
//!
//! ## What is simulated
//!
//! The first three figures use the sum-of-sinusoids generator of [`crate::channel::sos`] at the
//! scenario's maximum Doppler fd, evaluated exactly (step 1, no interpolation) on a grid of a
//! fixed number of samples per 1/fd. The gain is band-limited to ±fd, so that grid loses
//! nothing, and in units of fd (f/fd, fd·τ) the statistics do not depend on fd. A scenario
//! without motion (fd = 0) has no Doppler figures; [`ChannelPlotData::notes`] says so.
//!
//! * Spectrum: [`SPECTRUM_REALISATIONS`] independent realisations with 16 sinusoids (as the link
//!   simulation uses), sampled at 4·fd; Welch's averaged periodogram, Hann window of
//!   [`SPECTRUM_SEGMENT`] samples, 50 % overlap; normalised to unit area over f/fd.
//! * Autocorrelation: [`ACF_REALISATIONS`] realisations with 16 sinusoids, sampled at 40·fd,
//!   each averaged over 200/fd; the mean over realisations and its spread.
//! * Envelope: [`ENVELOPE_SAMPLES`] independent realisations with 64 sinusoids (envelope
//!   statistics need more sinusoids than second-order ones; see [`crate::channel::sos`]), one
//!   envelope sample each at a random time in [0, 1000/fd); `R_rms` = 1 (unit-power generator).
//! * ICI: for each fd·T of [`ICI_FD_T`], OFDM symbols of the scenario's FFT size and sample rate
//!   with random QPSK on all N bins, each through a fresh one-tap Rayleigh tapped delay line
//!   (per-sample variation), no noise; the window-average channel is the one-tap reference
//!   (the measurement of REFERENCES item 1, as `tests/ici.rs` makes it). Symbols per point:
//!   2^22 / N samples' worth, between 1024 and 16384; the figure shows ±2 standard errors.

use std::f64::consts::PI;
use std::path::{Path, PathBuf};
use std::sync::OnceLock;

use anyhow::{anyhow, Context, Result};
use flatbin::fft::{MicroFft, OfdmFft};
use flatbin::Cf32;
use num_complex::Complex;
use plotters::coord::ranged1d::{AsRangedCoord, ValueFormatter};
use plotters::coord::Shift;
use plotters::prelude::*;
use rand::RngExt;
use rayon::prelude::*;

use crate::channel::sos::{FadingParams, SosFading};
use crate::channel::tdl::{Tdl, Variation};
use crate::rng::{stream_rng, HarnessRng};
use crate::scenario::Scenario;
use crate::theory::fading::{clarke_acf, clarke_doppler_psd, rayleigh_envelope_cdf};
use crate::theory::ici::doppler_ici_exact;

/// Independent generator realisations averaged in the Doppler spectrum.
pub const SPECTRUM_REALISATIONS: usize = 1024;
/// Welch segment length, samples (Hann window, 50 % overlap).
pub const SPECTRUM_SEGMENT: usize = 256;
/// Welch segments per realisation.
pub const SPECTRUM_SEGMENTS_PER_RECORD: usize = 15;
/// Sample rate of the spectrum records, in units of fd (Nyquist at ±2 fd).
pub const SPECTRUM_RATE_PER_FD: f64 = 4.0;
/// Sinusoids per generator for the spectrum and the autocorrelation (the link simulation's).
pub const SOS_SINUSOIDS: usize = 16;

/// Independent generator realisations in the autocorrelation.
pub const ACF_REALISATIONS: usize = 64;
/// Sample rate of the autocorrelation records, in units of fd (lag step 1/40 in fd·τ).
pub const ACF_RATE_PER_FD: f64 = 40.0;
/// Averaging length of each autocorrelation record, in units of 1/fd.
pub const ACF_RECORD_FD: f64 = 200.0;
/// Largest lag of the autocorrelation, fd·τ.
pub const ACF_MAX_FD_TAU: f64 = 3.0;

/// Independent envelope samples (one per generator realisation).
pub const ENVELOPE_SAMPLES: usize = 100_000;
/// Sinusoids per generator for the envelope distribution.
pub const ENVELOPE_SINUSOIDS: usize = 64;
/// Envelope levels of the CDF: ρ from this, dB ...
pub const ENVELOPE_RHO_DB_MIN: f64 = -30.0;
/// ... to this, dB ...
pub const ENVELOPE_RHO_DB_MAX: f64 = 8.0;
/// ... in steps of this, dB.
pub const ENVELOPE_RHO_DB_STEP: f64 = 0.5;

/// Normalised Doppler values fd·T at which the ICI is measured.
pub const ICI_FD_T: [f64; 7] = [0.005, 0.01, 0.02, 0.05, 0.1, 0.2, 0.3];
/// Samples per ICI point: symbols = this / N, clamped to
/// [`ICI_MIN_SYMBOLS`] ..= [`ICI_MAX_SYMBOLS`].
pub const ICI_SAMPLE_BUDGET: usize = 1 << 22;
/// Fewest symbols per ICI point.
pub const ICI_MIN_SYMBOLS: usize = 1024;
/// Most symbols per ICI point.
pub const ICI_MAX_SYMBOLS: usize = 16_384;
/// Batches for the batch-means standard error of an ICI point.
const ICI_BATCHES: usize = 16;

/// Random-stream tags: "plot" in ASCII, then the figure.
const STREAM_BASE: u64 = 0x706c_6f74_0000;
const STREAM_SPECTRUM: u64 = STREAM_BASE + 1;
const STREAM_ACF: u64 = STREAM_BASE + 2;
const STREAM_ENVELOPE: u64 = STREAM_BASE + 3;
const STREAM_ICI: u64 = STREAM_BASE + 0x100;

/// Image size of every figure, pixels.
const SIZE: (u32, u32) = (800, 500);
/// Font family every text uses (registered from the bundled DejaVu Sans).
const FONT: &str = "sans-serif";
/// DejaVu Sans 2.37 (Bitstream Vera license, `harness/assets/DejaVuSans-LICENSE.txt`).
static FONT_BYTES: &[u8] = include_bytes!("../assets/DejaVuSans.ttf");

/// The simulated Doppler power spectrum.
#[derive(Clone, Debug)]
pub struct DopplerSpectrum {
    /// `(f/fd, PSD)`: frequency in units of fd, PSD per unit of f/fd, unit area; bins from
    /// −2 to +2 (exclusive) in steps of 4/[`SPECTRUM_SEGMENT`].
    pub points: Vec<(f64, f64)>,
    /// Independent realisations averaged.
    pub realisations: usize,
    /// Sinusoids per realisation.
    pub sinusoids: usize,
}

/// One lag of the simulated autocorrelation.
#[derive(Clone, Copy, Debug)]
pub struct AcfPoint {
    /// Lag, fd·τ (dimensionless).
    pub fd_tau: f64,
    /// Mean over realisations of the time-averaged Re E[h(t+τ) h*(t)] (unit-power gain).
    pub mean: f64,
    /// Sample standard deviation of the per-realisation estimates.
    pub std_dev: f64,
}

/// The simulated autocorrelation of the complex gain.
#[derive(Clone, Debug)]
pub struct Autocorrelation {
    /// Lags 0 to [`ACF_MAX_FD_TAU`] in steps of 1/[`ACF_RATE_PER_FD`].
    pub points: Vec<AcfPoint>,
    /// Independent realisations (the n of the standard error `std_dev / sqrt(n)`).
    pub realisations: usize,
    /// Sinusoids per realisation.
    pub sinusoids: usize,
}

/// The simulated envelope CDF.
#[derive(Clone, Debug)]
pub struct EnvelopeCdf {
    /// `(ρ dB, P(R ≤ ρ R_rms))`, ρ = 20 log10(R/R_rms) from [`ENVELOPE_RHO_DB_MIN`] to
    /// [`ENVELOPE_RHO_DB_MAX`].
    pub points: Vec<(f64, f64)>,
    /// Independent envelope samples behind each probability.
    pub samples: usize,
    /// Sinusoids per realisation.
    pub sinusoids: usize,
}

/// One measured ICI point.
#[derive(Clone, Copy, Debug)]
pub struct IciPoint {
    /// Normalised Doppler fd·T (useful symbol time T = N/fs).
    pub fd_t: f64,
    /// Measured ICI power as a fraction of the received power.
    pub measured: f64,
    /// Batch-means standard error of `measured` (16 batches).
    pub std_error: f64,
    /// OFDM symbols measured.
    pub symbols: usize,
}

/// The measured ICI against fd·T.
#[derive(Clone, Debug)]
pub struct IciCurve {
    /// One point per value of [`ICI_FD_T`].
    pub points: Vec<IciPoint>,
    /// FFT size N.
    pub fft_len: usize,
    /// Sample rate, Hz.
    pub sample_rate_hz: f64,
    /// The scenario's operating fd·T.
    pub operating_fd_t: f64,
}

/// Everything the figures show that was simulated.
#[derive(Clone, Debug)]
pub struct ChannelPlotData {
    /// The scenario's maximum Doppler fd, Hz.
    pub doppler_hz: f64,
    /// Maximum speed of the scenario, km/h (for labels).
    pub max_speed_kmh: f64,
    /// Doppler spectrum (none without motion).
    pub spectrum: Option<DopplerSpectrum>,
    /// Autocorrelation (none without motion).
    pub acf: Option<Autocorrelation>,
    /// Envelope CDF (none without motion).
    pub envelope: Option<EnvelopeCdf>,
    /// ICI against fd·T.
    pub ici: IciCurve,
    /// What was left out and why.
    pub notes: Vec<String>,
}

/// The files written and the data behind them.
#[derive(Clone, Debug)]
pub struct ChannelPlots {
    /// Every file written (SVG and PNG of each figure), in figure order.
    pub files: Vec<PathBuf>,
    /// The simulated series.
    pub data: ChannelPlotData,
}

/// Simulates the data of every figure for `scenario` and writes the figures into `dir`
/// (created if missing) as `<figure>.svg` and `<figure>.png`.
pub fn write_plots(scenario: &Scenario, dir: &Path) -> Result<ChannelPlots> {
    let data = simulate(scenario)?;
    let files = render(&data, dir)?;
    Ok(ChannelPlots { files, data })
}

/// Simulates the data of every figure (see the module docs), seeded from the scenario.
pub fn simulate(scenario: &Scenario) -> Result<ChannelPlotData> {
    let fd = scenario.max_doppler_hz();
    let fs = scenario.band.sample_rate_hz;
    let n = scenario.numerology.fft_len;
    let seed = scenario.seed;
    let moving = fd > 0.0 && fd.is_finite();
    let (fading, ici) = rayon::join(
        || {
            moving.then(|| {
                (
                    doppler_spectrum(fd, seed),
                    autocorrelation(fd, seed),
                    envelope_cdf(fd, seed),
                )
            })
        },
        || ici_curve(fs, n, seed),
    );
    let mut notes = Vec::new();
    if !moving {
        notes.push(
            "no motion (maximum Doppler 0 Hz): no Doppler spectrum, autocorrelation or \
             envelope figure"
                .to_string(),
        );
    }
    let (spectrum, acf, envelope) = match fading {
        Some((s, a, e)) => (Some(s), Some(a), Some(e)),
        None => (None, None, None),
    };
    Ok(ChannelPlotData {
        doppler_hz: fd,
        max_speed_kmh: scenario.channel.max_speed_kmh,
        spectrum,
        acf,
        envelope,
        ici: IciCurve {
            points: ici?,
            fft_len: n,
            sample_rate_hz: fs,
            operating_fd_t: fd * n as f64 / fs,
        },
        notes,
    })
}

/// Exact (step 1) generator settings on a grid of `rate_per_fd` samples per 1/fd.
fn grid_params(fd: f64, rate_per_fd: f64, sinusoids: usize) -> FadingParams {
    FadingParams {
        doppler_hz: fd,
        sample_rate_hz: fd * rate_per_fd,
        sinusoids,
        rician_k: 0.0,
        los_angle_rad: 0.0,
        step: 1,
    }
}

/// `len` consecutive exact gains of a fresh realisation.
fn record(params: &FadingParams, len: usize, rng: &mut HarnessRng) -> Vec<Complex<f64>> {
    let mut g = SosFading::new(params, rng);
    let mut out = vec![Complex::new(0.0, 0.0); len];
    g.coarse_points(&mut out);
    out
}

fn doppler_spectrum(fd: f64, seed: u64) -> DopplerSpectrum {
    const L: usize = SPECTRUM_SEGMENT;
    let params = grid_params(fd, SPECTRUM_RATE_PER_FD, SOS_SINUSOIDS);
    let hop = L / 2;
    let len = hop * (SPECTRUM_SEGMENTS_PER_RECORD + 1);
    // Periodic Hann window (common practice for Welch averaging).
    let window: Vec<f32> = (0..L)
        .map(|i| (PI * i as f64 / L as f64).sin().powi(2) as f32)
        .collect();
    let mut fft = MicroFft::<L>::new();
    let mut acc = vec![0.0f64; L];
    let mut rng = stream_rng(seed, STREAM_SPECTRUM);
    for _ in 0..SPECTRUM_REALISATIONS {
        let h = record(&params, len, &mut rng);
        for seg in 0..SPECTRUM_SEGMENTS_PER_RECORD {
            let mut buf = [Cf32::new(0.0, 0.0); L];
            let samples = &h[seg * hop..seg * hop + L];
            for ((b, x), w) in buf.iter_mut().zip(samples).zip(&window) {
                *b = Cf32::new(x.re as f32, x.im as f32) * *w;
            }
            fft.forward(&mut buf);
            for (a, b) in acc.iter_mut().zip(&buf) {
                *a += f64::from(b.norm_sqr());
            }
        }
    }
    // Bins in natural order hold frequencies k (k < L/2) and k − L; in units of fd a bin is
    // SPECTRUM_RATE_PER_FD / L wide. Normalise to unit area.
    let bin = SPECTRUM_RATE_PER_FD / L as f64;
    let total: f64 = acc.iter().sum::<f64>() * bin;
    let points = (0..L)
        .map(|i| {
            let k = (i + L / 2) % L;
            let f = (k as f64 - if k >= L / 2 { L as f64 } else { 0.0 }) * bin;
            (f, acc[k] / total)
        })
        .collect();
    DopplerSpectrum {
        points,
        realisations: SPECTRUM_REALISATIONS,
        sinusoids: SOS_SINUSOIDS,
    }
}

fn autocorrelation(fd: f64, seed: u64) -> Autocorrelation {
    let params = grid_params(fd, ACF_RATE_PER_FD, SOS_SINUSOIDS);
    let lags = (ACF_MAX_FD_TAU * ACF_RATE_PER_FD).round() as usize;
    let len = (ACF_RECORD_FD * ACF_RATE_PER_FD).round() as usize;
    let mut rng = stream_rng(seed, STREAM_ACF);
    let estimates: Vec<Vec<f64>> = (0..ACF_REALISATIONS)
        .map(|_| {
            let h = record(&params, len + lags, &mut rng);
            (0..=lags)
                .map(|lag| {
                    let sum: f64 = h[..len]
                        .iter()
                        .zip(&h[lag..lag + len])
                        .map(|(a, b)| (b * a.conj()).re)
                        .sum();
                    sum / len as f64
                })
                .collect()
        })
        .collect();
    let r = ACF_REALISATIONS as f64;
    let points = (0..=lags)
        .map(|lag| {
            let mean = estimates.iter().map(|e| e[lag]).sum::<f64>() / r;
            let var = estimates
                .iter()
                .map(|e| (e[lag] - mean).powi(2))
                .sum::<f64>()
                / (r - 1.0);
            AcfPoint {
                fd_tau: lag as f64 / ACF_RATE_PER_FD,
                mean,
                std_dev: var.sqrt(),
            }
        })
        .collect();
    Autocorrelation {
        points,
        realisations: ACF_REALISATIONS,
        sinusoids: SOS_SINUSOIDS,
    }
}

fn envelope_cdf(fd: f64, seed: u64) -> EnvelopeCdf {
    let params = grid_params(fd, ACF_RATE_PER_FD, ENVELOPE_SINUSOIDS);
    let span = (1000.0 * ACF_RATE_PER_FD) as u64; // 1000/fd in samples
    let mut rng = stream_rng(seed, STREAM_ENVELOPE);
    let mut r: Vec<f64> = (0..ENVELOPE_SAMPLES)
        .map(|_| {
            let g = SosFading::new(&params, &mut rng);
            let t = rng.random_range(0..span);
            g.gain_exact(t).norm()
        })
        .collect();
    r.sort_by(f64::total_cmp);
    let steps =
        ((ENVELOPE_RHO_DB_MAX - ENVELOPE_RHO_DB_MIN) / ENVELOPE_RHO_DB_STEP).round() as usize;
    let points = (0..=steps)
        .map(|i| {
            let db = ENVELOPE_RHO_DB_MIN + i as f64 * ENVELOPE_RHO_DB_STEP;
            let rho = 10f64.powf(db / 20.0);
            let below = r.partition_point(|&x| x <= rho);
            (db, below as f64 / r.len() as f64)
        })
        .collect();
    EnvelopeCdf {
        points,
        samples: ENVELOPE_SAMPLES,
        sinusoids: ENVELOPE_SINUSOIDS,
    }
}

fn ici_curve(fs: f64, n: usize, seed: u64) -> Result<Vec<IciPoint>> {
    let symbols = (ICI_SAMPLE_BUDGET / n.max(1)).clamp(ICI_MIN_SYMBOLS, ICI_MAX_SYMBOLS);
    ICI_FD_T
        .par_iter()
        .enumerate()
        .map(|(i, &fd_t)| {
            let mut rng = stream_rng(seed, STREAM_ICI + i as u64);
            crate::with_fft_len!(n, measure_ici(fd_t, fs, symbols, &mut rng))
        })
        .collect()
}

fn qpsk(rng: &mut HarnessRng) -> Cf32 {
    let a = std::f32::consts::FRAC_1_SQRT_2;
    Cf32::new(
        if rng.random::<bool>() { a } else { -a },
        if rng.random::<bool>() { a } else { -a },
    )
}

/// ICI power fraction over `symbols` symbols: QPSK on all N bins, no noise, a fresh one-tap
/// Rayleigh line per symbol, the window-average channel H0 as the one-tap reference.
// Not inlined: `with_fft_len!` calls every size's instance from one function, and inlined
// they would share one stack frame sized for N = 4096 (a rayon worker has 2 MiB).
#[inline(never)]
fn measure_ici<const N: usize>(
    fd_t: f64,
    fs: f64,
    symbols: usize,
    rng: &mut HarnessRng,
) -> Result<IciPoint> {
    let params = FadingParams::rayleigh(fd_t * fs / N as f64, fs, N);
    let mut fft = MicroFft::<N>::new();
    let mut per_symbol = Vec::with_capacity(symbols);
    for _ in 0..symbols {
        let mut grid = [Cf32::new(0.0, 0.0); N];
        grid.iter_mut().for_each(|v| *v = qpsk(rng));
        let mut x = grid;
        fft.inverse(&mut x);
        // The same realisation twice: on the signal, and on ones (→ the gains h[n]).
        let mut line = Tdl::new(&[(0, 1.0)], &params, Variation::Continuous, rng);
        let mut probe = line.clone();
        let mut y = [Cf32::new(0.0, 0.0); N];
        line.process(&x, &mut y);
        let mut h = [Cf32::new(0.0, 0.0); N];
        probe.process(&[Cf32::new(1.0, 0.0); N], &mut h);
        let h0 = h.iter().sum::<Cf32>() / N as f32;
        fft.forward(&mut y);
        let (mut e, mut p) = (0.0f64, 0.0f64);
        for (yk, xk) in y.iter().zip(&grid) {
            e += f64::from((yk - h0 * xk).norm_sqr());
            p += f64::from(yk.norm_sqr());
        }
        per_symbol.push((e, p));
    }
    let ratio =
        |c: &[(f64, f64)]| c.iter().map(|b| b.0).sum::<f64>() / c.iter().map(|b| b.1).sum::<f64>();
    let batches: Vec<f64> = per_symbol
        .chunks(symbols.div_ceil(ICI_BATCHES))
        .map(ratio)
        .collect();
    let k = batches.len() as f64;
    let mean = batches.iter().sum::<f64>() / k;
    let sd = (batches.iter().map(|r| (r - mean).powi(2)).sum::<f64>() / (k - 1.0)).sqrt();
    Ok(IciPoint {
        fd_t,
        measured: ratio(&per_symbol),
        std_error: sd / k.sqrt(),
        symbols,
    })
}

// ---------------------------------------------------------------------------------------------
// Drawing
// ---------------------------------------------------------------------------------------------

/// One axis: range, scale and label.
#[derive(Clone)]
pub(crate) struct Axis {
    pub(crate) lo: f64,
    pub(crate) hi: f64,
    pub(crate) log: bool,
    pub(crate) label: String,
}

impl Axis {
    fn plot_value(&self, v: f64) -> f64 {
        if self.log {
            if v > 0.0 {
                v.log10()
            } else {
                f64::NAN
            }
        } else {
            v
        }
    }

    fn data_value(&self, v: f64) -> f64 {
        if self.log {
            10f64.powf(v)
        } else {
            v
        }
    }

    fn format(&self, v: f64) -> String {
        if self.log {
            let e = v.log10().round();
            if (v.log10() - e).abs() < 1e-9 {
                if (-3.0..=1.0).contains(&e) {
                    return format!("{v}");
                }
                return format!("1e{e}");
            }
            return format!("{v:.1e}");
        }
        let s = format!("{v:.2}");
        let s = s.trim_end_matches('0').trim_end_matches('.');
        if s == "-0" {
            "0".to_string()
        } else {
            s.to_string()
        }
    }
}

/// How a curve is drawn.
#[derive(Clone, Copy)]
pub(crate) enum Mark {
    Line,
    Dashed,
    Points,
}

/// One curve of a chart.
pub(crate) struct Curve {
    pub(crate) label: String,
    pub(crate) points: Vec<(f64, f64)>,
    pub(crate) color: RGBColor,
    pub(crate) mark: Mark,
    /// Vertical error bars `(x, low, high)` (points only).
    pub(crate) bars: Vec<(f64, f64, f64)>,
}

/// A chart: title, axes, curves.
pub(crate) struct Chart {
    pub(crate) title: String,
    pub(crate) x: Axis,
    pub(crate) y: Axis,
    pub(crate) curves: Vec<Curve>,
    pub(crate) legend: SeriesLabelPosition,
}

const SIMULATED: RGBColor = RGBColor(0, 90, 181);
const THEORY: RGBColor = RGBColor(220, 50, 32);
const MARKER: RGBColor = RGBColor(90, 90, 90);

/// Draws every figure of `data` into `dir` (created if missing); returns the files written.
pub fn render(data: &ChannelPlotData, dir: &Path) -> Result<Vec<PathBuf>> {
    std::fs::create_dir_all(dir).with_context(|| format!("creating {}", dir.display()))?;
    register_font()?;
    let mut charts = Vec::new();
    if let Some(s) = &data.spectrum {
        charts.push(("doppler_spectrum", spectrum_chart(data.doppler_hz, s)));
    }
    if let Some(a) = &data.acf {
        charts.push(("acf", acf_chart(data.doppler_hz, a)));
    }
    if let Some(e) = &data.envelope {
        charts.push(("envelope_cdf", envelope_chart(e)));
    }
    charts.push(("ici_vs_fdt", ici_chart(data)));
    let mut files = Vec::new();
    for (stem, chart) in &charts {
        files.extend(write_chart(stem, chart, dir)?);
    }
    Ok(files)
}

/// Writes `chart` as `<stem>.svg` and `<stem>.png` into `dir` (created if missing); returns the
/// two paths. Shared by every report that draws.
pub(crate) fn write_chart(stem: &str, chart: &Chart, dir: &Path) -> Result<Vec<PathBuf>> {
    std::fs::create_dir_all(dir).with_context(|| format!("creating {}", dir.display()))?;
    register_font()?;
    let svg = dir.join(format!("{stem}.svg"));
    {
        let root = SVGBackend::new(&svg, SIZE).into_drawing_area();
        draw(&root, chart).map_err(|e| anyhow!("drawing {}: {e}", svg.display()))?;
    }
    let png = dir.join(format!("{stem}.png"));
    {
        let root = BitMapBackend::new(&png, SIZE).into_drawing_area();
        draw(&root, chart).map_err(|e| anyhow!("drawing {}: {e}", png.display()))?;
    }
    Ok(vec![svg, png])
}

/// Registers the bundled font once for the whole process.
fn register_font() -> Result<()> {
    static DONE: OnceLock<bool> = OnceLock::new();
    let ok = *DONE.get_or_init(|| {
        plotters::style::register_font(FONT, FontStyle::Normal, FONT_BYTES).is_ok()
    });
    if ok {
        Ok(())
    } else {
        Err(anyhow!("the bundled font (DejaVu Sans) could not be read"))
    }
}

fn spectrum_chart(fd: f64, s: &DopplerSpectrum) -> Chart {
    // Theory on f = fd·sin φ (dense near the singularities at ±fd); the curve leaves through
    // the top of the plot there (clipped).
    let theory = (1..2000)
        .map(|i| {
            let phi = -PI / 2.0 + PI * i as f64 / 2000.0;
            let nu = phi.sin();
            (nu, fd * clarke_doppler_psd(fd, nu * fd))
        })
        .collect();
    Chart {
        title: format!("Doppler power spectrum, fd = {fd:.1} Hz"),
        x: Axis {
            lo: -1.5,
            hi: 1.5,
            log: false,
            label: "frequency f / fd".into(),
        },
        y: Axis {
            lo: 1e-4,
            hi: 10.0,
            log: true,
            label: "power spectral density per unit f/fd (unit area)".into(),
        },
        curves: vec![
            Curve {
                label: format!(
                    "generator, M = {}: Welch, Hann {} samples at 4·fd, {} realisations",
                    s.sinusoids, SPECTRUM_SEGMENT, s.realisations
                ),
                points: s.points.clone(),
                color: SIMULATED,
                mark: Mark::Line,
                bars: Vec::new(),
            },
            Curve {
                label: "Clarke/Jakes: 1 / (π √(1 − (f/fd)²))".into(),
                points: theory,
                color: THEORY,
                mark: Mark::Dashed,
                bars: Vec::new(),
            },
        ],
        legend: SeriesLabelPosition::LowerMiddle,
    }
}

fn acf_chart(fd: f64, a: &Autocorrelation) -> Chart {
    let theory = (0..=600)
        .map(|i| {
            let x = ACF_MAX_FD_TAU * i as f64 / 600.0;
            (x, clarke_acf(1.0, x))
        })
        .collect();
    Chart {
        title: format!("Autocorrelation of the complex gain, fd = {fd:.1} Hz"),
        x: Axis {
            lo: 0.0,
            hi: ACF_MAX_FD_TAU,
            log: false,
            label: "lag fd·τ".into(),
        },
        y: Axis {
            lo: -0.5,
            hi: 1.05,
            log: false,
            label: "Re E[h(t+τ) h*(t)]".into(),
        },
        curves: vec![
            Curve {
                label: format!(
                    "generator, M = {}: {} realisations × {}/fd",
                    a.sinusoids, a.realisations, ACF_RECORD_FD
                ),
                points: a.points.iter().map(|p| (p.fd_tau, p.mean)).collect(),
                color: SIMULATED,
                mark: Mark::Line,
                bars: Vec::new(),
            },
            Curve {
                label: "Clarke/Jakes: J0(2π fd τ)".into(),
                points: theory,
                color: THEORY,
                mark: Mark::Dashed,
                bars: Vec::new(),
            },
        ],
        legend: SeriesLabelPosition::UpperRight,
    }
}

fn envelope_chart(e: &EnvelopeCdf) -> Chart {
    let theory = (0..=380)
        .map(|i| {
            let db = ENVELOPE_RHO_DB_MIN + 0.1 * i as f64;
            (db, rayleigh_envelope_cdf(10f64.powf(db / 20.0)))
        })
        .collect();
    Chart {
        title: "Envelope distribution".into(),
        x: Axis {
            lo: ENVELOPE_RHO_DB_MIN,
            hi: ENVELOPE_RHO_DB_MAX,
            log: false,
            label: "level ρ = 20 log10(R / R_rms), dB".into(),
        },
        y: Axis {
            lo: 1e-4,
            hi: 1.0,
            log: true,
            label: "P(R ≤ ρ R_rms)".into(),
        },
        curves: vec![
            Curve {
                label: format!(
                    "generator, M = {}: {} independent samples",
                    e.sinusoids, e.samples
                ),
                points: e.points.clone(),
                color: SIMULATED,
                mark: Mark::Points,
                bars: Vec::new(),
            },
            Curve {
                label: "Rayleigh: 1 − exp(−ρ²)".into(),
                points: theory,
                color: THEORY,
                mark: Mark::Line,
                bars: Vec::new(),
            },
        ],
        legend: SeriesLabelPosition::LowerRight,
    }
}

fn ici_chart(data: &ChannelPlotData) -> Chart {
    let ici = &data.ici;
    let op = ici.operating_fd_t;
    let mut lo: f64 = 0.004;
    let mut hi: f64 = 0.4;
    if op > 0.0 && op.is_finite() {
        lo = lo.min(op / 1.5);
        hi = hi.max(op * 1.5);
    }
    let theory: Vec<(f64, f64)> = (0..=300)
        .map(|i| {
            let x = lo * (hi / lo).powf(i as f64 / 300.0);
            (x, doppler_ici_exact(x, ici.fft_len))
        })
        .collect();
    let decade = |v: f64, up: bool| {
        let l = v.log10();
        10f64.powf(if up { l.ceil() } else { l.floor() })
    };
    let y_lo = decade(theory.first().map_or(1e-5, |p| p.1).max(1e-12), false);
    let y_hi = decade(theory.last().map_or(1.0, |p| p.1).clamp(1e-12, 1.0), true);
    let mut curves = vec![
        Curve {
            label: format!(
                "measured through the tapped delay line (±2 s.e.), N = {}, {} symbols per point",
                ici.fft_len,
                ici.points.first().map_or(0, |p| p.symbols)
            ),
            points: ici.points.iter().map(|p| (p.fd_t, p.measured)).collect(),
            color: SIMULATED,
            mark: Mark::Points,
            bars: ici
                .points
                .iter()
                .map(|p| {
                    let d = 2.0 * p.std_error;
                    (p.fd_t, p.measured - d, p.measured + d)
                })
                .collect(),
        },
        Curve {
            label: format!(
                "exact Jakes sum, N = {} (Russell & Stüber 1995)",
                ici.fft_len
            ),
            points: theory,
            color: THEORY,
            mark: Mark::Line,
            bars: Vec::new(),
        },
    ];
    if op > 0.0 && op.is_finite() {
        curves.push(Curve {
            label: format!("scenario: fd·T = {op:.4} ({:.0} km/h)", data.max_speed_kmh),
            points: vec![(op, y_lo), (op, y_hi)],
            color: MARKER,
            mark: Mark::Dashed,
            bars: Vec::new(),
        });
    }
    Chart {
        title: "Doppler ICI against fd·T".into(),
        x: Axis {
            lo,
            hi,
            log: true,
            label: "normalised Doppler fd·T (T = N / fs, CP excluded)".into(),
        },
        y: Axis {
            lo: y_lo,
            hi: y_hi,
            log: true,
            label: "ICI power / received power".into(),
        },
        curves,
        legend: SeriesLabelPosition::UpperLeft,
    }
}

/// Draws `chart` on `root` with the coordinate types its axes ask for.
fn draw<DB: DrawingBackend>(
    root: &DrawingArea<DB, Shift>,
    chart: &Chart,
) -> Result<(), DrawingAreaErrorKind<DB::ErrorType>> {
    let (x, y) = (chart.x.lo..chart.x.hi, chart.y.lo..chart.y.hi);
    match (chart.x.log, chart.y.log) {
        (false, false) => draw_in(root, chart, x, y),
        (false, true) => draw_in(root, chart, x, y.log_scale()),
        (true, false) => draw_in(root, chart, x.log_scale(), y),
        (true, true) => draw_in(root, chart, x.log_scale(), y.log_scale()),
    }
}

fn draw_in<DB, X, Y>(
    root: &DrawingArea<DB, Shift>,
    chart: &Chart,
    x: X,
    y: Y,
) -> Result<(), DrawingAreaErrorKind<DB::ErrorType>>
where
    DB: DrawingBackend,
    X: AsRangedCoord<Value = f64>,
    Y: AsRangedCoord<Value = f64>,
    X::CoordDescType: ValueFormatter<f64>,
    Y::CoordDescType: ValueFormatter<f64>,
{
    root.fill(&WHITE)?;
    let mut ctx = ChartBuilder::on(root)
        .caption(&chart.title, (FONT, 22))
        .margin(14)
        .x_label_area_size(46)
        .y_label_area_size(64)
        .build_cartesian_2d(x, y)?;
    let fx = |v: &f64| chart.x.format(*v);
    let fy = |v: &f64| chart.y.format(*v);
    ctx.configure_mesh()
        .x_desc(chart.x.label.as_str())
        .y_desc(chart.y.label.as_str())
        .x_label_formatter(&fx)
        .y_label_formatter(&fy)
        .label_style((FONT, 14))
        .axis_desc_style((FONT, 16))
        .light_line_style(RGBColor(0, 0, 0).mix(0.05))
        .draw()?;
    for curve in &chart.curves {
        let color = curve.color;
        match curve.mark {
            Mark::Points => {
                let inside: Vec<(f64, f64)> = curve
                    .points
                    .iter()
                    .copied()
                    .filter(|&(px, py)| {
                        let (tx, ty) = (chart.x.plot_value(px), chart.y.plot_value(py));
                        let (x0, x1) = (
                            chart.x.plot_value(chart.x.lo),
                            chart.x.plot_value(chart.x.hi),
                        );
                        let (y0, y1) = (
                            chart.y.plot_value(chart.y.lo),
                            chart.y.plot_value(chart.y.hi),
                        );
                        (x0..=x1).contains(&tx) && (y0..=y1).contains(&ty)
                    })
                    .collect();
                for &(bx, lo, hi) in &curve.bars {
                    for piece in clip_polyline(chart, &[(bx, lo), (bx, hi)]) {
                        ctx.draw_series(std::iter::once(PathElement::new(
                            piece,
                            color.stroke_width(1),
                        )))?;
                    }
                }
                ctx.draw_series(
                    inside
                        .iter()
                        .map(|&p| Circle::new(p, 3, color.stroke_width(1))),
                )?
                .label(curve.label.as_str())
                .legend(move |(px, py)| Circle::new((px + 10, py), 3, color.stroke_width(1)));
            }
            Mark::Line | Mark::Dashed => {
                let dashed = matches!(curve.mark, Mark::Dashed);
                for (i, piece) in clip_polyline(chart, &curve.points).into_iter().enumerate() {
                    let style = color.stroke_width(2);
                    let anno = if dashed {
                        ctx.draw_series(DashedLineSeries::new(piece, 8, 5, style))?
                    } else {
                        ctx.draw_series(LineSeries::new(piece, style))?
                    };
                    if i == 0 {
                        anno.label(curve.label.as_str()).legend(move |(px, py)| {
                            PathElement::new(vec![(px, py), (px + 20, py)], color.stroke_width(2))
                        });
                    }
                }
            }
        }
    }
    ctx.configure_series_labels()
        .position(chart.legend.clone())
        .label_font((FONT, 14))
        .background_style(WHITE.mix(0.85))
        .border_style(RGBColor(0, 0, 0).mix(0.4))
        .draw()?;
    root.present()
}

/// Splits a polyline into the pieces inside the chart's axes, cutting each segment at the
/// border (Liang–Barsky, in plot coordinates: log10 on log axes). Points that a log axis
/// cannot show (≤ 0) break the line.
fn clip_polyline(chart: &Chart, points: &[(f64, f64)]) -> Vec<Vec<(f64, f64)>> {
    let (x0, x1) = (
        chart.x.plot_value(chart.x.lo),
        chart.x.plot_value(chart.x.hi),
    );
    let (y0, y1) = (
        chart.y.plot_value(chart.y.lo),
        chart.y.plot_value(chart.y.hi),
    );
    let to_data = |(u, v): (f64, f64)| (chart.x.data_value(u), chart.y.data_value(v));
    let mut pieces: Vec<Vec<(f64, f64)>> = Vec::new();
    let mut open = false;
    for w in points.windows(2) {
        let a = (chart.x.plot_value(w[0].0), chart.y.plot_value(w[0].1));
        let b = (chart.x.plot_value(w[1].0), chart.y.plot_value(w[1].1));
        if !(a.0.is_finite() && a.1.is_finite() && b.0.is_finite() && b.1.is_finite()) {
            open = false;
            continue;
        }
        let (dx, dy) = (b.0 - a.0, b.1 - a.1);
        let (mut t0, mut t1) = (0.0f64, 1.0f64);
        let mut visible = true;
        for (p, q) in [
            (-dx, a.0 - x0),
            (dx, x1 - a.0),
            (-dy, a.1 - y0),
            (dy, y1 - a.1),
        ] {
            if p == 0.0 {
                if q < 0.0 {
                    visible = false;
                }
            } else {
                let r = q / p;
                if p < 0.0 {
                    t0 = t0.max(r);
                } else {
                    t1 = t1.min(r);
                }
            }
        }
        if !visible || t0 > t1 {
            open = false;
            continue;
        }
        let start = (a.0 + t0 * dx, a.1 + t0 * dy);
        let end = (a.0 + t1 * dx, a.1 + t1 * dy);
        match pieces.last_mut() {
            Some(piece) if open && t0 == 0.0 => piece.push(to_data(end)),
            _ => pieces.push(vec![to_data(start), to_data(end)]),
        }
        open = t1 == 1.0;
    }
    pieces
}
