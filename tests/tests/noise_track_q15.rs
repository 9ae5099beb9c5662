//! The integer noise / SNR / interference tracker (`flatbin::noise_track_q15`) on the Q15
//! receiver, against the f32 tracker (`flatbin::noise_track`, itself checked against the
//! simulator's true SNR and the published decision-directed bias in tests/noise_track.rs) on
//! identical inputs, and against the issue's own targets. SNR convention: Es/N0 per data
//! subcarrier (DESIGN.md); the "true" SNR of a frame is the simulator's Es·mean|H_k|²/N0 over
//! the frame's data bins.
//!
//! Identical inputs: every received symbol is scaled to −12 dBFS and quantised to Q15 once;
//! the Q15 receiver takes those samples, the f32 receiver takes the same samples scaled back.

use flatbin::estimate::{EstimatorConfig, FreqInterpolation, TimeFilter};
use flatbin::fft::{MicroFft, OfdmFft};
use flatbin::fft_q15::Q15Fft;
use flatbin::fixed::Cq15;
use flatbin::fixed_math::Scaled;
use flatbin::noise_track::{NoiseTrackConfig, NoiseTracker};
use flatbin::noise_track_q15::{
    NoiseTrackConfigQ15, NoiseTrackDesignQ15, NoiseTrackerQ15, SymbolViewQ15, STAT_NO_DATA,
    STAT_NO_NOISE, STAT_SATURATED,
};
use flatbin::numerology::{BinKind, NumerologyParams};
use flatbin::receiver::{Receiver, ReceiverConfig};
use flatbin::receiver_q15::{samples_to_q15, DesignQ15, ReceiverQ15, ReceiverQ15Config};
use flatbin::transmit::Transmitter;
use flatbin::{Cf32, Modulation, Numerology, ProcessError};
use flatbin_harness::channel::profile::{DelayProfile, Quantisation};
use flatbin_harness::noise::add_awgn;
use flatbin_harness::rng::{stream_rng, HarnessRng};
use rand::RngExt;
use rand_distr::{Distribution, StandardNormal};

const N: usize = 64;
const SYMBOLS: u32 = 20;
/// Frames before the noise-floor memory (μ = 0.8 per frame) is full, as in noise_track.rs.
const WARM_UP: usize = 5;
/// FFT input level of the Q15 path, dBFS.
const LEVEL_DBFS: f64 = -12.0;
/// i8 LLR scale: LSBs per unit of LLR (receiver_q15 docs: `round(4·L)`).
const I8_PER_LLR: f64 = 4.0;

type RxQ = ReceiverQ15<Q15Fft<N>, N, 4, 4>;
type RxF = Receiver<MicroFft<N>, N, 4, 4>;

fn nu() -> Numerology {
    Numerology::new(NumerologyParams::default()).unwrap()
}

/// The estimator of both receivers: designed for 20 dB, as firmware would ship it.
fn estimator() -> EstimatorConfig {
    EstimatorConfig {
        freq: FreqInterpolation::Lmmse,
        time: TimeFilter::Latest,
        noise_var: 0.01,
        ..EstimatorConfig::default()
    }
}

fn q_config() -> ReceiverQ15Config {
    ReceiverQ15Config {
        estimator: estimator(),
        signal_dbfs: LEVEL_DBFS as f32,
        ..ReceiverQ15Config::default()
    }
}

const R: f32 = <Q15Fft<N> as OfdmFft<N>>::RESIDUAL_SCALE;

fn rx_q(nu: &Numerology) -> Box<RxQ> {
    let design = Box::new(DesignQ15::<N, 4, 4>::new(nu, &q_config(), R).unwrap());
    Box::new(ReceiverQ15::new(nu, Q15Fft::new(), *design).unwrap())
}

fn rx_f(nu: &Numerology) -> Box<RxF> {
    let cfg = ReceiverConfig {
        estimator: estimator(),
        ..ReceiverConfig::default()
    };
    Box::new(Receiver::new(nu, MicroFft::new(), cfg).unwrap())
}

fn track_design(nu: &Numerology) -> NoiseTrackDesignQ15<N> {
    NoiseTrackDesignQ15::<N>::new::<4, 4>(nu, &q_config(), R).unwrap()
}

fn tracker_q(nu: &Numerology) -> Box<NoiseTrackerQ15<N>> {
    Box::new(NoiseTrackerQ15::new(nu, track_design(nu), NoiseTrackConfigQ15::default()).unwrap())
}

/// The f32 tracker with the integer tracker's settings (λ = 1 − 2^−6, ratio 3, μ = 0.8), so
/// the two differ only by arithmetic.
fn tracker_f_mirrored(nu: &Numerology) -> Box<NoiseTracker<N>> {
    let cfg = NoiseTrackConfig {
        lambda: 1.0 - 1.0 / 64.0,
        detect_ratio: 3.0,
        frame_lambda: 0.8,
    };
    Box::new(NoiseTracker::new(nu, cfg).unwrap())
}

/// Sample scale putting unit-energy symbols through a unit channel at LEVEL_DBFS (total
/// complex power against full scale; DESIGN.md), and the FFT-output power of such a symbol
/// in the tracker's format (× 2^44, FFT output = unitary DFT / R): computed here from the
/// transmitter's own power, not read from the design.
fn scales(nu: &Numerology) -> (f64, f64) {
    let a2 = f64::from(nu.pilot_amplitude()).powi(2);
    let unit_power = (nu.data_len(0) as f64 + a2 * nu.pilot_len(0) as f64) / N as f64;
    let scale = (10f64.powf(LEVEL_DBFS / 10.0) / unit_power).sqrt();
    let unit = scale * scale / f64::from(R).powi(2) * 2f64.powi(44);
    (scale, unit)
}

fn cn(rng: &mut HarnessRng, power: f64) -> Cf32 {
    let s = (power / 2.0).sqrt();
    let re: f64 = StandardNormal.sample(rng);
    let im: f64 = StandardNormal.sample(rng);
    Cf32::new((re * s) as f32, (im * s) as f32)
}

/// The (delay, power) taps of the exponential profile of RMS spread `rms` samples, or a
/// single unit tap when `rms` is 0 (AWGN).
fn profile(rms: f64, fs: f64) -> Vec<(usize, f64)> {
    if rms == 0.0 {
        return vec![(0, 1.0)];
    }
    DelayProfile::exponential(rms / fs, fs)
        .unwrap()
        .to_sample_taps(fs, Quantisation::Nearest)
}

/// Taps (delay, gain) of one draw over `profile`: Rayleigh taps, or the unit tap for AWGN.
fn draw_taps(rng: &mut HarnessRng, profile: &[(usize, f64)]) -> Vec<(usize, Cf32)> {
    if profile.len() == 1 {
        return vec![(profile[0].0, Cf32::new(1.0, 0.0))];
    }
    profile.iter().map(|&(d, p)| (d, cn(rng, p))).collect()
}

/// Frequency response at FFT index k (forward DFT, e^{-j}).
fn response(taps: &[(usize, Cf32)], k: usize) -> Cf32 {
    taps.iter().fold(Cf32::default(), |acc, &(d, g)| {
        let ph = -2.0 * std::f32::consts::PI * (k * d) as f32 / N as f32;
        acc + g * Cf32::from_polar(1.0, ph)
    })
}

/// One symbol through the channel (linear convolution with the previous symbol's tail, which
/// the CP absorbs), plus AWGN of variance `n0` per sample: returns (samples, bits).
#[allow(clippy::too_many_arguments)]
fn channel_symbol(
    nu: &Numerology,
    tx: &mut Transmitter<MicroFft<N>, N>,
    rng: &mut HarnessRng,
    taps: &[(usize, Cf32)],
    prev: &mut Vec<Cf32>,
    sym: u32,
    m: Modulation,
    n0: f64,
) -> (Vec<Cf32>, Vec<u8>) {
    let ns = nu.symbol_len();
    let b: Vec<u8> = (0..tx.bits_per_ofdm_symbol(m, sym))
        .map(|_| rng.random::<u8>() & 1)
        .collect();
    let mut s = vec![Cf32::default(); ns];
    tx.modulate(m, &b, sym, &mut s).unwrap();
    let mut r = vec![Cf32::default(); ns];
    for (n, o) in r.iter_mut().enumerate() {
        for &(d, g) in taps {
            let x = if n >= d { s[n - d] } else { prev[ns + n - d] };
            *o += g * x;
        }
    }
    *prev = s;
    add_awgn(rng, &mut r, n0);
    (r, b)
}

/// The same Q15 samples for both paths: (Q15, f32 at unit scale).
fn quantise(r: &[Cf32], scale: f64) -> (Vec<Cq15>, Vec<Cf32>) {
    let x: Vec<Cf32> = r.iter().map(|v| v * scale as f32).collect();
    let mut q = vec![Cq15::ZERO; x.len()];
    samples_to_q15(&x, &mut q).unwrap();
    let back = q.iter().map(|v| v.to_cf32() / scale as f32).collect();
    (q, back)
}

struct Paths {
    rx_q: Box<RxQ>,
    rx_f: Box<RxF>,
    tr_q: Box<NoiseTrackerQ15<N>>,
    tr_f: Box<NoiseTracker<N>>,
}

/// One frame of 20 symbols through a fresh channel draw: returns the integer tracker's SNR,
/// the f32 tracker's, and the true SNR (dB).
fn frame_snr(
    nu: &Numerology,
    p: &mut Paths,
    tx: &mut Transmitter<MicroFft<N>, N>,
    rng: &mut HarnessRng,
    es_n0_db: f64,
    profile: &[(usize, f64)],
    m: Modulation,
) -> FrameOut {
    let n0 = 10f64.powf(-es_n0_db / 10.0);
    let (scale, _) = scales(nu);
    let taps = draw_taps(rng, profile);
    p.tr_q.start_frame();
    p.tr_f.start_frame(1.0);
    p.rx_q.reset();
    p.rx_f.reset();
    let mut prev = vec![Cf32::default(); nu.symbol_len()];
    let (mut g_sum, mut g_n) = (0.0f64, 0usize);
    let d = nu.max_data_len();
    let k = m.bits_per_symbol();
    let (mut xq, mut sq, mut lq) = (
        vec![Cq15::ZERO; d],
        vec![Scaled::default(); d],
        vec![0i8; d * k],
    );
    let (mut xf, mut sf, mut lf) = (
        vec![Cf32::default(); d],
        vec![0.0f32; d],
        vec![0.0f32; d * k],
    );
    for sym in 0..SYMBOLS {
        let (r, _) = channel_symbol(nu, tx, rng, &taps, &mut prev, sym, m, n0);
        let (q, back) = quantise(&r, scale);
        let c = p
            .rx_q
            .receive(&q, sym, m, &mut xq, &mut sq, &mut lq)
            .unwrap();
        p.tr_q
            .update_from_receiver(sym, &p.rx_q, &xq[..c.data_bins], m)
            .unwrap();
        let c = p
            .rx_f
            .receive(&back, sym, m, &mut xf, &mut sf, &mut lf)
            .unwrap();
        p.tr_f
            .update(
                sym,
                p.rx_f.bins(),
                p.rx_f.estimator(),
                p.rx_f.common_phase(),
                &xf[..c.data_bins],
                m,
            )
            .unwrap();
        for b in nu.bins(sym).filter(|b| b.kind == BinKind::Data) {
            g_sum += f64::from(response(&taps, b.fft_index).norm_sqr());
            g_n += 1;
        }
    }
    let sq = p.tr_q.frame_stats();
    let sf = p.tr_f.frame_stats();
    assert_eq!(sq.flags, 0, "{sq:?}");
    let (_, unit) = scales(nu);
    let sq32 = sq.to_f32(unit.round() as u64);
    let db = |a: f32, b: f32| 10.0 * (f64::from(a) / f64::from(b)).log10();
    let (mut fq, mut ff) = ([0u16; N], [0u16; N]);
    let (cq, cf) = (
        p.tr_q.interfered_bins(&mut fq),
        p.tr_f.interfered_bins(&mut ff),
    );
    FrameOut {
        same_flags: fq[..cq] == ff[..cf],
        snr_q: f64::from(sq.snr_db_q8) / 256.0,
        snr_f: f64::from(sf.snr_db),
        truth: 10.0 * (g_sum / g_n as f64 / n0).log10(),
        null_diff_db: db(sq32.null_noise_var, sf.null_noise_var),
        pilot_diff_db: db(sq32.pilot_noise_var, sf.pilot_noise_var),
    }
}

/// One frame's figures: SNR (dB) of the integer and f32 trackers and the truth, and the
/// integer − f32 differences of the frame's null-bin and pilot N0 means (dB).
struct FrameOut {
    snr_q: f64,
    snr_f: f64,
    truth: f64,
    null_diff_db: f64,
    pilot_diff_db: f64,
    /// Both trackers flag the same bins at the frame end.
    same_flags: bool,
}

fn mean_sd(v: &[f64]) -> (f64, f64) {
    let n = v.len() as f64;
    let m = v.iter().sum::<f64>() / n;
    let sd = (v.iter().map(|e| (e - m).powi(2)).sum::<f64>() / (n - 1.0)).sqrt();
    (m, sd)
}

#[test]
fn integer_snr_agrees_with_the_f32_tracker_and_meets_the_target() {
    // Issue target, on the integer path alone: SNR bias ≤ 0.5 dB and standard deviation
    // ≤ 1 dB from 0 to 30 dB Es/N0, AWGN and a fading exponential channel of RMS spread 0.5
    // samples, per frame of 20 symbols, noise floor carried over frames (one tracker over a
    // stream of independent Rayleigh draws, after WARM_UP). The bias is checked as
    // |bias| ≤ 0.5 dB − 4 sd/√frames (its own sampling error; common practice), as in
    // noise_track.rs.
    //
    // Agreement with the f32 tracker (same settings, same Q15 samples). The two compute the
    // same statistics and differ by (a) the Q15 receiver's channel estimate, whose
    // implementation noise tests/receiver_q15.rs holds ≥ 12 dB below N0: it enters the pilot
    // residuals only (≤ 10·log10(1 + 1/16) = 0.26 dB on the pilot mean), which make up the
    // fraction w_p of the pooled N0 (15 pilots beside 7 null bins per symbol here: 0.68), so
    // ≤ 10·log10(1 + 0.68/16) = 0.18 dB on N0; (b) the Q15 FFT's rounding (≥ 60 dB below the
    // signal at −12 dBFS: ≤ 0.05 dB of N0 at 30 dB); (c) integer rounding of the statistics
    // (Q8 dB: 0.004 dB). Continuous part, per frame: |ΔSNR| ≤ 0.18 + 0.05 + 0.004 ≈ 0.23 dB;
    // null-bin mean ≤ 0.05 dB; pilot mean ≤ 0.26 + 0.05 = 0.31 dB.
    // The consistency gate of the N0 pooling is a hard threshold: where the pilot excess sits
    // at 2 sd, a tiny difference switches one tracker to the null bins alone. The step it makes
    // is at most J = 10·log10(1 + w_p·2·sd), sd the relative spread of the null-minus-pilot
    // difference at the counts the memory holds after WARM_UP + 1 frames (μ = 0.8); such
    // frames may exceed the continuous bound by J, and may be at most 2 % of frames (design
    // target; each case's count is printed). The interferer flags are hard decisions too: a
    // bin at its threshold may be flagged by one tracker only, which takes it out of that
    // tracker's null or pilot mean; the bounds on those means are checked on frames whose
    // flags agree, and the number of frames whose flags differ is printed (at 25–30 dB in
    // fading, the estimator's model mismatch puts many pilot bins near the 3× threshold in
    // both trackers, and they differ there in up to a tenth of the frames).
    let nu = nu();
    let frames = 300 + WARM_UP;
    let mut tx = Transmitter::new(nu, MicroFft::<N>::new()).unwrap();
    let continuous = 0.23;
    let (n_null, n_pilot) = (
        (N - nu.used_len() - 1) as f64, // DC is excluded from the null observations
        nu.pilot_len(0) as f64,
    );
    let held = f64::from(SYMBOLS) * (1.0 - 0.8f64.powi(WARM_UP as i32 + 1)) / (1.0 - 0.8);
    let sd = (1.0 / (n_null * held) + 1.15f64.powi(2) / (n_pilot * held)).sqrt();
    let w_p = n_pilot / (n_null + n_pilot);
    let jump = 10.0 * (1.0 + w_p * 2.0 * sd).log10();
    println!("continuous bound {continuous} dB, gate step J = {jump:.3} dB");
    let (mut worst_bias, mut worst_sd, mut worst_diff, mut total_flips) =
        (0.0f64, 0.0f64, 0.0f64, 0);
    for (rms, label) in [(0.0, "AWGN"), (0.5, "exponential 0.5")] {
        for es_n0_db in [0.0, 5.0, 10.0, 15.0, 20.0, 25.0, 30.0] {
            let mut rng = stream_rng(501, (es_n0_db as u64) * 10 + (rms * 10.0) as u64);
            let mut p = Paths {
                rx_q: rx_q(&nu),
                rx_f: rx_f(&nu),
                tr_q: tracker_q(&nu),
                tr_f: tracker_f_mirrored(&nu),
            };
            let prof = profile(rms, f64::from(nu.sample_rate_hz()));
            let runs: Vec<FrameOut> = (0..frames)
                .map(|_| {
                    frame_snr(
                        &nu,
                        &mut p,
                        &mut tx,
                        &mut rng,
                        es_n0_db,
                        &prof,
                        Modulation::Qpsk,
                    )
                })
                .skip(WARM_UP)
                .collect();
            let err_q: Vec<f64> = runs.iter().map(|r| r.snr_q - r.truth).collect();
            let err_f: Vec<f64> = runs.iter().map(|r| r.snr_f - r.truth).collect();
            let diff: Vec<f64> = runs.iter().map(|r| r.snr_q - r.snr_f).collect();
            let (bias, sd) = mean_sd(&err_q);
            let (bias_f, sd_f) = mean_sd(&err_f);
            let (d_mean, _) = mean_sd(&diff);
            let max_abs = |v: &mut dyn Iterator<Item = f64>| v.fold(0.0f64, |a, d| a.max(d.abs()));
            let d_max = max_abs(&mut diff.iter().copied());
            let same = || runs.iter().filter(|r| r.same_flags);
            let null_max = max_abs(&mut same().map(|r| r.null_diff_db));
            let pilot_max = max_abs(&mut same().map(|r| r.pilot_diff_db));
            let flag_diffs = runs.len() - same().count();
            let flips = diff.iter().filter(|d| d.abs() > continuous).count();
            let n = err_q.len() as f64;
            println!(
                "{label:>16} Es/N0 {es_n0_db:>4} dB: integer bias {bias:+.3} sd {sd:.3} dB; \
                 f32 bias {bias_f:+.3} sd {sd_f:.3} dB; integer − f32: SNR mean {d_mean:+.4}, \
                 max |.| {d_max:.4} dB ({flips} frames past the continuous bound), flags differ \
                 in {flag_diffs} frames, else null mean {null_max:.4} dB, pilot mean \
                 {pilot_max:.4} dB"
            );
            worst_bias = worst_bias.max(bias.abs());
            worst_sd = worst_sd.max(sd);
            worst_diff = worst_diff.max(d_max);
            total_flips += flips;
            assert!(
                bias.abs() <= 0.5 - 4.0 * sd / n.sqrt(),
                "{label} {es_n0_db} dB: bias {bias}"
            );
            assert!(sd <= 1.0, "{label} {es_n0_db} dB: sd {sd}");
            assert!(
                null_max <= 0.05,
                "{label} {es_n0_db} dB: null mean {null_max}"
            );
            assert!(
                pilot_max <= 0.31,
                "{label} {es_n0_db} dB: pilot mean {pilot_max}"
            );
            assert!(
                d_max <= continuous + jump,
                "{label} {es_n0_db} dB: integer − f32 up to {d_max}"
            );
            assert!(
                flips as f64 <= 0.02 * n,
                "{label} {es_n0_db} dB: {flips} frames past {continuous} dB"
            );
        }
    }
    println!(
        "worst |bias| {worst_bias:.3} dB, worst sd {worst_sd:.3} dB, worst |integer − f32| \
         {worst_diff:.4} dB, gate flips {total_flips} of {} frames",
        14 * (frames - WARM_UP)
    );
}

/// Interference in the test: a CW tone on one bin, or narrowband noise over three.
#[derive(Clone, Copy, Debug, PartialEq)]
enum Interferer {
    Cw,
    Burst3,
}

/// Bitwise mutual information estimate `1 − E[log2(1 + e^(−L·s))]`, `s = +1` for bit 0
/// (DESIGN.md: L = ln P(b=0)/P(b=1)), from i8 LLRs (I8_PER_LLR per unit): returns (Σ, count).
fn mi_terms(llrs: &[i8], bits: &[u8]) -> (f64, usize) {
    let mut acc = 0.0f64;
    for (&l, &b) in llrs.iter().zip(bits) {
        let s = if b == 0 { 1.0 } else { -1.0 };
        let x = -f64::from(l) / I8_PER_LLR * s;
        let t = if x > 30.0 { x } else { x.exp().ln_1p() };
        acc += 1.0 - t / std::f64::consts::LN_2;
    }
    (acc, llrs.len())
}

struct InterferenceResult {
    mi: [f64; 3],
    mi_hit: [f64; 3],
    interfered: Vec<usize>,
    flagged: Vec<Vec<usize>>,
}

/// `frames` frames of 16-QAM with the interferer through three Q15 receivers fed the same
/// samples: flat weighting with the true thermal N0, per-bin weighting from the integer
/// tracker, and per-bin weighting with the true N0 + interference per bin.
fn interference_run(kind: Interferer, frames: usize) -> InterferenceResult {
    use flatbin_harness::impair::{CwInterferer, NoiseBurst};
    let nu = nu();
    let ns = nu.symbol_len();
    let fs = f64::from(nu.sample_rate_hz());
    let m = Modulation::Qam16;
    let es_n0_db = 20.0;
    let n0 = 10f64.powf(-es_n0_db / 10.0);
    let inr = 10.0; // interference 10 dB above the noise, per interfered bin
    let (scale, unit) = scales(&nu);
    let k0 = (0..nu.used_len())
        .find(|&u| nu.logical_bin(u) > 5 && !nu.is_pilot(u, 0))
        .map(|u| nu.fft_index(u))
        .unwrap();
    let cw = CwInterferer {
        cycles_per_sample: k0 as f64 / N as f64,
        amplitude: (inr * n0 / N as f64).sqrt(),
        duty: 1.0,
        period_samples: 1,
    };
    let burst_at = |seed| {
        NoiseBurst::new(
            k0 as f64 / N as f64,
            3.0 / N as f64,
            3.0 * inr * n0 / N as f64,
            1.0,
            1,
            seed,
        )
    };
    let mut burst = burst_at(77);
    // The true interference per bin (unit scale), measured on the interferer alone over 4000
    // symbols with the f32 FFT.
    let mut true_i = vec![0.0f64; N];
    {
        let mut fft = MicroFft::<N>::new();
        let mut probe = burst_at(78);
        let reps = 4000;
        for r in 0..reps {
            let mut x = vec![Cf32::default(); ns];
            match kind {
                Interferer::Cw => cw.add(&mut x, (r * ns) as u64),
                Interferer::Burst3 => probe.add(&mut x, (r * ns) as u64),
            }
            let mut b: [Cf32; N] = x[nu.cp_len()..].try_into().unwrap();
            OfdmFft::forward(&mut fft, &mut b);
            for (t, v) in true_i.iter_mut().zip(&b) {
                *t += f64::from(v.norm_sqr()) / reps as f64;
            }
        }
    }
    let interfered: Vec<usize> = (0..N).filter(|&k| true_i[k] > n0).collect();
    let prof = profile(0.5, fs);
    let mut rng = stream_rng(601, kind as u64);
    let mut tx = Transmitter::new(nu, MicroFft::<N>::new()).unwrap();
    let mut rxs = [rx_q(&nu), rx_q(&nu), rx_q(&nu)];
    let mse = track_design(&nu).estimator_mse;
    let to_int = |v: f64| (v * unit).round() as u64;
    let flat: Vec<u64> = vec![to_int(n0); nu.used_len()];
    let truth: Vec<u64> = (0..nu.used_len())
        .map(|u| to_int(n0 + true_i[nu.fft_index(u)]))
        .collect();
    rxs[0].set_bin_noise(&flat, &mse).unwrap();
    rxs[2].set_bin_noise(&truth, &mse).unwrap();
    let mut tr = tracker_q(&nu);
    let mut mi = [(0.0f64, 0usize); 3];
    let mut mi_hit = [(0.0f64, 0usize); 3];
    let mut flagged = Vec::new();
    let mut stream_pos = 0u64;
    let mut per_bin = vec![0u64; N];
    let d = nu.max_data_len();
    let bps = m.bits_per_symbol();
    let (mut xq, mut sq, mut lq) = (
        vec![Cq15::ZERO; d],
        vec![Scaled::default(); d],
        vec![0i8; d * bps],
    );
    for _ in 0..frames {
        let taps = draw_taps(&mut rng, &prof);
        tr.start_frame();
        for r in rxs.iter_mut() {
            r.reset();
        }
        let mut prev = vec![Cf32::default(); ns];
        for sym in 0..SYMBOLS {
            let (mut r, b) = channel_symbol(&nu, &mut tx, &mut rng, &taps, &mut prev, sym, m, n0);
            match kind {
                Interferer::Cw => cw.add(&mut r, stream_pos),
                Interferer::Burst3 => burst.add(&mut r, stream_pos),
            }
            stream_pos += ns as u64;
            let (q, _) = quantise(&r, scale);
            let n = tr.bin_noise(&mut per_bin);
            rxs[1].set_bin_noise(&per_bin[..n], &mse).unwrap();
            for (i, rx) in rxs.iter_mut().enumerate() {
                let c = rx.receive(&q, sym, m, &mut xq, &mut sq, &mut lq).unwrap();
                let (a, k) = mi_terms(&lq[..c.llrs], &b);
                mi[i].0 += a;
                mi[i].1 += k;
                for (j, fft) in nu
                    .bins(sym)
                    .filter(|b| b.kind == BinKind::Data)
                    .map(|b| b.fft_index)
                    .enumerate()
                {
                    if interfered.contains(&fft) {
                        let (a, k) =
                            mi_terms(&lq[j * bps..(j + 1) * bps], &b[j * bps..(j + 1) * bps]);
                        mi_hit[i].0 += a;
                        mi_hit[i].1 += k;
                    }
                }
                if i == 1 {
                    tr.update_from_receiver(sym, rx, &xq[..c.data_bins], m)
                        .unwrap();
                }
            }
        }
        let mut fl = vec![0u16; N];
        let c = tr.interfered_bins(&mut fl);
        flagged.push(fl[..c].iter().map(|&k| k as usize).collect::<Vec<_>>());
    }
    InterferenceResult {
        mi: [0, 1, 2].map(|i| mi[i].0 / mi[i].1 as f64),
        mi_hit: [0, 1, 2].map(|i| mi_hit[i].0 / mi_hit[i].1 as f64),
        interfered,
        flagged,
    }
}

#[test]
fn a_narrowband_interferer_is_found_and_its_bins_de_weighted_in_integers() {
    // The issue targets of noise_track.rs, on the Q15 receiver with the integer tracker and
    // the i8 LLRs (4 per unit of LLR): 16-QAM, Es/N0 20 dB, exponential channel of RMS spread
    // 0.5 samples, block fading per frame of 20 symbols, interference 10 dB above the noise
    // per interfered bin (a CW on one bin; narrowband noise over three). Detected as in the
    // f32 test (one of the interferer's bins flagged at ≥ 95 % of frame ends; other bins at
    // ≤ 0.5 % of bin-frames); bitwise MI (1 − E[log2(1 + e^(−L·s))], a standard LLR-quality
    // measure; common practice) with the tracker's weights within 0.02 bit of true N+I
    // weighting, over all bits and over the interfered bins' bits, and ≥ 0.05 bit above flat
    // weighting on the interfered bins' bits.
    for kind in [Interferer::Cw, Interferer::Burst3] {
        let frames = 150;
        let res = interference_run(kind, frames);
        let [flat, track, truth] = res.mi;
        let [h_flat, h_track, h_truth] = res.mi_hit;
        let hits = res
            .interfered
            .iter()
            .map(|k| res.flagged.iter().filter(|f| f.contains(k)).count())
            .collect::<Vec<_>>();
        let detected = res
            .flagged
            .iter()
            .filter(|f| f.iter().any(|k| res.interfered.contains(k)))
            .count();
        let false_flags = res
            .flagged
            .iter()
            .flatten()
            .filter(|f| !res.interfered.contains(f))
            .count();
        println!(
            "{kind:?}: interfered bins {:?}, flagged at frame ends {hits:?} of {frames} \
             (detected at {detected}), other bins flagged {false_flags} times; MI over all \
             bits: flat {flat:.4}, tracked {track:.4}, true {truth:.4} bit; over the \
             interfered bins: flat {h_flat:.4}, tracked {h_track:.4}, true {h_truth:.4} bit",
            res.interfered
        );
        assert!(
            detected >= frames * 95 / 100,
            "{kind:?} detection {detected}"
        );
        let clean_bin_frames = frames * (nu().used_len() + 7 - res.interfered.len());
        assert!(
            (false_flags as f64) <= 0.005 * clean_bin_frames as f64,
            "{kind:?} false flags {false_flags}"
        );
        assert!(
            (track - truth).abs() <= 0.02,
            "{kind:?}: tracked {track} true {truth}"
        );
        assert!(
            (h_track - h_truth).abs() <= 0.02,
            "{kind:?}: {h_track} vs {h_truth}"
        );
        assert!(
            h_track - h_flat >= 0.05,
            "{kind:?}: {h_track} vs flat {h_flat}"
        );
    }
}

#[test]
fn extreme_inputs_give_flagged_results_without_panicking() {
    // All-zero input, full-scale input, and block exponents far outside any FFT's range:
    // the tracker neither panics nor overflows (this test is also meant for debug builds,
    // where overflow traps), and says what it could not measure.
    let nu = nu();
    let m = Modulation::Qam16;
    let d = nu.max_data_len();
    let (mut xq, mut sq, mut lq) = (
        vec![Cq15::ZERO; d],
        vec![Scaled::default(); d],
        vec![0i8; d * m.bits_per_symbol()],
    );
    // All zeros: no noise measured, SNR at its −300 dB sentinel.
    let mut rx = rx_q(&nu);
    let design_weights = rx.design().weight;
    let mut tr = tracker_q(&nu);
    let zeros = vec![Cq15::ZERO; nu.symbol_len()];
    for sym in 0..5 {
        let c = rx
            .receive(&zeros, sym, m, &mut xq, &mut sq, &mut lq)
            .unwrap();
        tr.update_from_receiver(sym, &rx, &xq[..c.data_bins], m)
            .unwrap();
    }
    let s = tr.frame_stats();
    assert!(s.flags & STAT_NO_NOISE != 0, "{s:?}");
    assert_eq!(s.snr_db_q8, -300 * 256);
    let mut per_bin = vec![0u64; N];
    let n = tr.bin_noise(&mut per_bin);
    assert!(per_bin[..n].iter().all(|&v| v >= 1));
    let mse = tr.design().estimator_mse;
    rx.set_bin_noise(&per_bin[..n], &mse).unwrap();
    assert!(rx.llr_weights().iter().all(|w| w.mant > 0));
    // A fresh tracker with no data yet.
    let fresh = tracker_q(&nu);
    assert!(fresh.frame_stats().flags & STAT_NO_DATA != 0);

    // Full scale: a ±32767 square wave and random full-scale samples.
    let mut rng = stream_rng(701, 0);
    let mut tr = tracker_q(&nu);
    for sym in 0..40u32 {
        let x: Vec<Cq15> = (0..nu.symbol_len())
            .map(|i| {
                if sym % 2 == 0 {
                    let v = if (i / 3) % 2 == 0 { i16::MAX } else { i16::MIN };
                    Cq15::new(v, v)
                } else {
                    Cq15::new(rng.random::<i16>(), rng.random::<i16>())
                }
            })
            .collect();
        let c = rx.receive(&x, sym, m, &mut xq, &mut sq, &mut lq).unwrap();
        tr.update_from_receiver(sym, &rx, &xq[..c.data_bins], m)
            .unwrap();
    }
    let s = tr.frame_stats();
    println!("full scale: {s:?}");
    assert!(s.noise_power > 0 && s.flags & STAT_NO_NOISE == 0, "{s:?}");

    // Extreme block exponents and extreme values.
    let big = [Cq15::new(i16::MIN, i16::MIN); N];
    let est = [Cq15::new(i16::MAX, i16::MIN); N];
    for (e_b, e_h) in [
        (i32::MAX, i32::MAX),
        (i32::MIN, i32::MIN),
        (200, -200),
        (-200, 200),
        (40, 40),
    ] {
        let mut tr = tracker_q(&nu);
        for sym in 0..3u32 {
            let view = SymbolViewQ15 {
                bins: &big,
                bins_exp: e_b,
                estimate: &est,
                estimate_exp: e_h,
                common_phase: Some(Cq15::new(i16::MIN, i16::MIN)),
            };
            let eq = vec![Cq15::new(i16::MIN, i16::MAX); d];
            tr.update(sym, &view, &eq, Modulation::Qam256).unwrap();
        }
        let s = tr.frame_stats();
        println!("exponents {e_b}, {e_h}: {s:?}");
        if e_b > 100 || e_b == 40 {
            assert!(s.flags & STAT_SATURATED != 0, "{e_b}: {s:?}");
        }
        if e_b < -100 {
            assert!(s.flags & STAT_NO_NOISE != 0, "{e_b}: {s:?}");
        }
        let n = tr.bin_noise(&mut per_bin);
        rx.set_bin_noise(&per_bin[..n], &mse).unwrap();
    }
    // Errors leave the receiver unchanged.
    let before = rx.llr_weights().to_vec();
    assert!(matches!(
        rx.set_bin_noise(&per_bin[..3], &mse),
        Err(ProcessError::BufferLength { .. })
    ));
    let zeros64 = vec![0u64; N];
    assert!(matches!(
        rx.set_bin_noise(&zeros64, &zeros64),
        Err(ProcessError::OutOfRange { index: 0 })
    ));
    assert_eq!(rx.llr_weights(), &before[..]);
    assert!(matches!(
        tr.update(
            0,
            &SymbolViewQ15 {
                bins: &big,
                bins_exp: 0,
                estimate: &est[..3],
                estimate_exp: 0,
                common_phase: None,
            },
            &xq,
            m
        ),
        Err(ProcessError::BufferLength { .. })
    ));
    rx.clear_bin_noise(&design_weights);
    assert_eq!(rx.llr_weights(), &design_weights[..nu.used_len()]);
}

#[test]
fn per_bin_weights_follow_the_noise_set() {
    // set_bin_noise with the noise the design assumed (N0 = 0.01 of unit power, plus the
    // estimator MSE) reproduces the design's weights R²/(α²(N0 + mse)) (receiver_q15 docs)
    // to the precision of their 15-bit mantissas; 4× the noise quarters them.
    let nu = nu();
    let mut rx = rx_q(&nu);
    let (_, unit) = scales(&nu);
    let design = track_design(&nu);
    let noise: Vec<u64> = vec![(0.01 * unit).round() as u64; nu.used_len()];
    let design_weights = rx.design().weight;
    rx.set_bin_noise(&noise, &design.estimator_mse).unwrap();
    let val = |w: &Scaled| f64::from(w.mant) * 2f64.powi(w.exp - 15);
    for (a, b) in rx.llr_weights().iter().zip(design_weights.iter()) {
        assert!((val(a) / val(b) - 1.0).abs() < 1e-4, "{a:?} vs {b:?}");
    }
    let four: Vec<u64> = noise.iter().map(|v| 4 * v).collect();
    let mse4: Vec<u64> = design.estimator_mse.iter().map(|v| 4 * v).collect();
    rx.set_bin_noise(&four, &mse4).unwrap();
    for (a, b) in rx.llr_weights().iter().zip(design_weights.iter()) {
        assert!((4.0 * val(a) / val(b) - 1.0).abs() < 1e-4, "{a:?} vs {b:?}");
    }
}

#[test]
fn a_gain_step_between_frames_is_carried_into_the_noise_memory() {
    // The digital gain rises by 6.02 dB (amplitude × 2, power × 4) between frames. A tracker
    // told of it (start_frame_with_gain(4)) rescales its noise-floor memory and reads the SNR
    // as the f32 tracker told the same (start_frame(4.0)) does, within the continuous bound
    // of integer_snr_agrees_with_the_f32_tracker_and_meets_the_target (0.23 dB); one not told
    // mixes a memory 4× too low into N0: with μ = 0.8 the memory holds 4 frames' worth beside
    // the new frame's 1, so N0 reads ≈ (1 + 4/4)/5 = 0.4 of the truth and the SNR ≈ 4 dB high
    // (checked: more than 1 dB high). AWGN, Es/N0 15 dB, QPSK.
    use flatbin::receiver_q15::DigitalGain;
    let nu = nu();
    let m = Modulation::Qpsk;
    let es_n0_db = 15.0;
    let n0 = 10f64.powf(-es_n0_db / 10.0);
    let (scale, _) = scales(&nu);
    let mut tx = Transmitter::new(nu, MicroFft::<N>::new()).unwrap();
    let mut rng = stream_rng(801, 0);
    let mut rx = rx_q(&nu);
    let mut rx_f = rx_f(&nu);
    let (mut told, mut untold) = (tracker_q(&nu), tracker_q(&nu));
    let mut tr_f = tracker_f_mirrored(&nu);
    let d = nu.max_data_len();
    let (mut xq, mut sq, mut lq) = (
        vec![Cq15::ZERO; d],
        vec![Scaled::default(); d],
        vec![0i8; d * m.bits_per_symbol()],
    );
    let (mut xf, mut sf, mut lf) = (
        vec![Cf32::default(); d],
        vec![0.0f32; d],
        vec![0.0f32; d * m.bits_per_symbol()],
    );
    let taps = [(0usize, Cf32::new(1.0, 0.0))];
    let four = Scaled {
        mant: 16384,
        exp: 3,
    };
    let (mut err_told, mut err_untold) = (Vec::new(), Vec::new());
    for frame in 0..16 {
        // Frames 0..10 at −18 dBFS (half the amplitude), then the gain doubles it.
        let step = frame == 10;
        let (gain, amp) = if frame < 10 {
            (DigitalGain::UNITY, 0.5)
        } else {
            (DigitalGain::from_db(20.0 * 2f32.log10()), 1.0)
        };
        rx.set_gain(gain);
        rx.reset();
        rx_f.reset();
        if step {
            told.start_frame_with_gain(four);
            tr_f.start_frame(4.0);
        } else {
            told.start_frame();
            tr_f.start_frame(1.0);
        }
        untold.start_frame();
        let mut prev = vec![Cf32::default(); nu.symbol_len()];
        for sym in 0..SYMBOLS {
            let (r, _) = channel_symbol(&nu, &mut tx, &mut rng, &taps, &mut prev, sym, m, n0);
            // The radio delivers half the amplitude; the Q15 receiver's gain restores it after
            // the step; the f32 receiver sees the level the Q15 FFT sees.
            let (q, back) = quantise(&r, scale * 0.5);
            let back: Vec<Cf32> = back.iter().map(|v| v * amp as f32).collect();
            let c = rx.receive(&q, sym, m, &mut xq, &mut sq, &mut lq).unwrap();
            for tr in [&mut told, &mut untold] {
                tr.update_from_receiver(sym, &rx, &xq[..c.data_bins], m)
                    .unwrap();
            }
            let c = rx_f
                .receive(&back, sym, m, &mut xf, &mut sf, &mut lf)
                .unwrap();
            tr_f.update(
                sym,
                rx_f.bins(),
                rx_f.estimator(),
                rx_f.common_phase(),
                &xf[..c.data_bins],
                m,
            )
            .unwrap();
        }
        let (a, b) = (
            f64::from(told.frame_stats().snr_db_q8) / 256.0,
            f64::from(untold.frame_stats().snr_db_q8) / 256.0,
        );
        let f = f64::from(tr_f.frame_stats().snr_db);
        if (10..13).contains(&frame) {
            println!(
                "frame {frame}: told {a:.3} dB, not told {b:.3} dB, f32 told {f:.3} dB, \
                 true {es_n0_db} dB"
            );
            assert!((a - f).abs() <= 0.23, "frame {frame}: {a} vs f32 {f}");
            err_told.push(a - es_n0_db);
            err_untold.push(b - es_n0_db);
        }
    }
    assert!(
        err_untold[0] > 1.0,
        "the step should bias an untold tracker: {err_untold:?}"
    );
    assert!(
        err_told[0] < err_untold[0] - 1.0,
        "{err_told:?} vs {err_untold:?}"
    );
}

#[test]
fn invalid_settings_are_rejected() {
    use flatbin::ConfigError;
    let nu = nu();
    let ok = NoiseTrackConfigQ15::default();
    for bad in [
        NoiseTrackConfigQ15 {
            lambda_shift: 16,
            ..ok
        },
        NoiseTrackConfigQ15 {
            detect_ratio_q8: 256,
            ..ok
        },
        NoiseTrackConfigQ15 {
            frame_lambda_q16: 65536,
            ..ok
        },
    ] {
        assert!(matches!(
            NoiseTrackerQ15::new(&nu, track_design(&nu), bad),
            Err(ConfigError::TrackerSetting)
        ));
    }
    assert!(matches!(
        NoiseTrackDesignQ15::<N>::new::<4, 4>(&nu, &q_config(), f32::NAN),
        Err(ConfigError::TrackerSetting)
    ));
    assert!(matches!(
        NoiseTrackDesignQ15::<128>::new::<4, 4>(&nu, &q_config(), R),
        Err(ConfigError::FftSizeMismatch { .. })
    ));
}
