//! The integer tracking stages on the Q15 receiver's frames: the procedure the firmware
//! (`firmware/src/bin/track_vectors.rs`) and the host checker (`xtask/src/track_vectors.rs`)
//! both run, so every word it emits can be compared.
//!
//! Frames: [`TRACK_FRAMES`] frames of [`RX_SYMBOLS`] symbols of [`crate::rx::RxFrame`] case
//! `case_index` (the Q15 transmitter through the fixed multipath channel, noise 20 dB below,
//! clipped bursts in symbols 1 and 4), received by `ReceiverQ15` with the design
//! [`TRACK_RX_DESIGN`]. Per symbol, with the receiver's bins and block exponent: the noise
//! tracker (`update_from_receiver`), the Doppler, delay-spread and I/Q-image estimators
//! (`update`). Per frame: `frame_stats`, `bin_noise`, the estimates, the ICI prediction from
//! the Doppler estimate; then `ReceiverQ15::set_bin_noise` with the tracked per-bin noise (or,
//! without the noise tracker, with the noise the design assumes), which sets the next frame's
//! LLR weights, so the LLRs of every symbol are emitted too (as a hash).

use core::borrow::Borrow;

use flatbin::delay_spread_q15::{DelaySpreadConfigQ15, DelaySpreadEstimatorQ15, DelaySpreadQ15};
use flatbin::doppler::DopplerStatus;
use flatbin::doppler_q15::{DopplerEstimateQ15, DopplerEstimatorQ15};
use flatbin::fft::OfdmFft;
use flatbin::fixed::Cq15;
use flatbin::fixed_math::Scaled;
use flatbin::ici_q15::{IciPredictionQ15, IciTableQ15, MAX_EPS_Q16, MAX_FD_T_Q16};
use flatbin::iq_image_q15::{IqImageEstimatorQ15, IqImageQ15};
use flatbin::noise_track_q15::{
    NoiseStatsQ15, NoiseTrackDesignQ15, NoiseTrackerQ15, SymbolViewQ15,
};
use flatbin::receiver_q15::ReceiverQ15;
use flatbin::Numerology;

use crate::rx::{RxFrame, RX_CASES, RX_K, RX_M, RX_SYMBOLS};

/// Index into [`crate::rx::RX_DESIGNS`] of the receiver (and noise tracker) design.
pub const TRACK_RX_DESIGN: usize = 0;
/// The receiver cases (indices into [`RX_CASES`]) the check runs: QPSK and 16-QAM at
/// −12 dBFS (both received by design 0).
pub const TRACK_CASES: [usize; 2] = [0, 1];
/// Frames per case.
pub const TRACK_FRAMES: u32 = 3;
/// Residual CFO fed to the ICI prediction with each Doppler estimate, subcarrier spacings Q16
/// (0.02).
pub const TRACK_EPS_Q16: i32 = 1311;

/// Noise per bin of the frames in the delay-spread estimator's bin units (the unitary DFT's
/// per-bin noise, Q15 fractions squared): the noise 20 dB below −12 dBFS, `10^−3.2` ≈
/// 6.31e-4 = `20726/32768 · 2^−10`.
pub const TRACK_NOISE_PER_BIN: Scaled = Scaled {
    mant: 20_726,
    exp: -10,
};

/// The delay-spread estimator's settings at `nu`: the measured noise floor where its window
/// fits the alias period (N = 256), else the frames' known noise [`TRACK_NOISE_PER_BIN`]
/// (N = 64: the measured floor needs a longer alias period). No floating point.
pub fn delay_config(nu: &Numerology) -> DelaySpreadConfigQ15 {
    DelaySpreadConfigQ15::measured(nu)
        .unwrap_or_else(|_| DelaySpreadConfigQ15::known(nu, TRACK_NOISE_PER_BIN))
}

/// The tracking stages a core runs (its RAM decides which are present).
///
/// `D` is how the noise tracker holds its design: owned (the default; about 100·N + 5 KB with
/// it) or borrowed, e.g. `&'static NoiseTrackDesignQ15<N>` from a flash table (the tracker's
/// own state is then about 38·N bytes).
pub struct Trackers<'a, const N: usize, const P: usize, const H: usize, D = NoiseTrackDesignQ15<N>>
where
    D: Borrow<NoiseTrackDesignQ15<N>>,
{
    /// The noise tracker.
    pub noise: Option<&'a mut NoiseTrackerQ15<N, D>>,
    /// The Doppler estimator.
    pub doppler: Option<&'a mut DopplerEstimatorQ15<N, P, H>>,
    /// The delay-spread estimator.
    pub delay: Option<&'a mut DelaySpreadEstimatorQ15<N>>,
    /// The I/Q image estimator.
    pub iq: Option<&'a mut IqImageEstimatorQ15<N>>,
    /// The ICI table.
    pub ici: Option<&'a IciTableQ15>,
}

/// Buffers of [`run_case`].
pub struct Buffers<'a> {
    /// At least `N + N/8` samples.
    pub samples: &'a mut [Cq15],
    /// At least `N`.
    pub equalized: &'a mut [Cq15],
    /// At least `N`.
    pub sinr: &'a mut [Scaled],
    /// At least `4·N`.
    pub llrs: &'a mut [i8],
    /// At least `N`.
    pub noise: &'a mut [u64],
}

/// A record: a label and its words.
pub type Emit<'e> = dyn FnMut(&str, &[u32]) + 'e;

/// FNV-1a over bytes, as a word.
fn fnv(bytes: impl Iterator<Item = u8>) -> u32 {
    fnv_from(HASH_START, bytes)
}

fn lo(v: u64) -> u32 {
    v as u32
}

fn hi(v: u64) -> u32 {
    (v >> 32) as u32
}

/// The words of the noise tracker's frame statistics.
pub fn stats_words(s: &NoiseStatsQ15) -> [u32; 12] {
    [
        lo(s.noise_power),
        hi(s.noise_power),
        lo(s.null_noise_power),
        hi(s.null_noise_power),
        lo(s.pilot_noise_power),
        hi(s.pilot_noise_power),
        s.snr_db_q8 as u32,
        s.evm_data_q16,
        s.mer_db_q8 as u32,
        s.evm_pilot_q16,
        u32::from(s.interfered_bins) | (u32::from(s.flags) << 16),
        s.symbols,
    ]
}

/// The words of a Doppler estimate (status 0 valid, 1 below, 2 above range; all 0xffffffff
/// for none).
pub fn doppler_words(e: Option<DopplerEstimateQ15>) -> [u32; 4] {
    match e {
        None => [u32::MAX; 4],
        Some(e) => [
            e.fd_tsym_q31 as u32,
            e.fd_t_q31 as u32,
            match e.status {
                DopplerStatus::Valid => 0,
                DopplerStatus::BelowRange => 1,
                DopplerStatus::AboveRange => 2,
            },
            e.lag_symbols,
        ],
    }
}

/// The words of a delay-spread estimate (all 0xffffffff for none).
pub fn delay_words(e: Option<DelaySpreadQ15>) -> [u32; 8] {
    match e {
        None => [u32::MAX; 8],
        Some(e) => [
            e.mean_delay_q16 as u32,
            e.rms_delay_q16,
            e.max_delay_samples as u32,
            e.channel_power.mant as u32,
            e.channel_power.exp as u32,
            e.floor_to_power_q24,
            u32::from(e.resolved) | (e.symbols << 1),
            e.saturated_parts,
        ],
    }
}

/// The words of an I/Q image estimate (all 0xffffffff for none).
pub fn iq_words(e: Option<IqImageQ15>) -> [u32; 7] {
    match e {
        None => [u32::MAX; 7],
        Some(e) => [
            e.irr_db_q8 as u32,
            e.image_ratio_q31,
            e.ceiling_db_q8 as u32,
            e.irr_sd_db_q8,
            u32::from(e.resolved),
            e.pairs,
            e.saturated_parts,
        ],
    }
}

/// The words of an ICI prediction.
pub fn ici_words(p: &IciPredictionQ15) -> [u32; 4] {
    [p.doppler_q32, p.cfo_q32, p.ici_q32, p.sir_db_q8 as u32]
}

/// Error word of a `Result`: 0 for Ok, 1 for an error.
fn err<T, E>(r: &Result<T, E>) -> u32 {
    u32::from(r.is_err())
}

/// The ICI table alone over a grid of `fd·T` and `ε` (both signs), one record per point.
pub fn ici_grid(table: &IciTableQ15, emit: &mut Emit) {
    for i in 0..=8u32 {
        let fd = MAX_FD_T_Q16 / 8 * i + i;
        for j in 0..=8i32 {
            let eps = (MAX_EPS_Q16 as i32 / 4) * (j - 4) - j;
            let p = table.predict(fd, eps);
            let w = ici_words(&p);
            emit("ici_grid", &[fd, eps as u32, w[0], w[1], w[2], w[3]]);
        }
        // Beyond the table's range (saturated).
        let p = table.predict(u32::MAX - i, i32::MIN + i as i32);
        emit("ici_sat", &ici_words(&p));
    }
}

/// Runs case `case_index` (an index into [`RX_CASES`]) through `rx` (which must hold
/// `design`'s receiver, [`TRACK_RX_DESIGN`]) and the present `trackers`, emitting every
/// output. `track_design` gives the estimator MSE per bin for `set_bin_noise` (and the
/// noise the design assumes when there is no noise tracker). False when a buffer is short,
/// the case is unknown or the generator fails.
pub fn run_case<F, D, const N: usize, const P: usize, const H: usize>(
    case_index: usize,
    nu: &Numerology,
    rx: &mut ReceiverQ15<F, N, RX_K, RX_M>,
    track_design: &NoiseTrackDesignQ15<N>,
    t: &mut Trackers<'_, N, P, H, D>,
    b: &mut Buffers<'_>,
    emit: &mut Emit,
) -> bool
where
    F: OfdmFft<N, Sample = Cq15>,
    D: Borrow<NoiseTrackDesignQ15<N>>,
{
    let Some(case) = RX_CASES.get(case_index) else {
        return false;
    };
    let used = nu.used_len();
    if b.samples.len() < N + N / 8
        || b.equalized.len() < N
        || b.sinr.len() < N
        || b.llrs.len() < 4 * N
        || b.noise.len() < N
    {
        return false;
    }
    rx.reset();
    rx.set_gain(case.gain);
    if let Some(n) = t.noise.as_deref_mut() {
        n.reset();
    }
    if let Some(d) = t.doppler.as_deref_mut() {
        d.reset();
    }
    let mut ok = true;
    for frame_index in 0..TRACK_FRAMES {
        let Some(mut frame) = RxFrame::<N>::new(case_index) else {
            return false;
        };
        if let Some(n) = t.noise.as_deref_mut() {
            n.start_frame();
        }
        if let Some(d) = t.delay.as_deref_mut() {
            d.reset();
        }
        if let Some(q) = t.iq.as_deref_mut() {
            q.reset();
        }
        for symbol in 0..RX_SYMBOLS {
            ok &= frame.symbol(symbol, b.samples);
            let x = b.samples.get(..N + N / 8).unwrap_or_default();
            let r = rx.receive(x, symbol, case.modulation, b.equalized, b.sinr, b.llrs);
            let data = nu.data_len(symbol);
            let llr_len = data * case.modulation.bits_per_symbol();
            let llr_hash = fnv(b
                .llrs
                .get(..llr_len)
                .unwrap_or_default()
                .iter()
                .map(|&v| v as u8));
            let (bins, exp) = rx.bins_with_exponent();
            let mut errors = [err(&r), 0, 0, 0, 0];
            if let Some(n) = t.noise.as_deref_mut() {
                let eq = b.equalized.get(..data).unwrap_or_default();
                errors[1] = err(&n.update_from_receiver(symbol, rx, eq, case.modulation));
            }
            if let Some(d) = t.doppler.as_deref_mut() {
                errors[2] = err(&d.update(bins, exp, symbol));
            }
            if let Some(d) = t.delay.as_deref_mut() {
                errors[3] = err(&d.update(bins, exp, symbol));
            }
            if let Some(q) = t.iq.as_deref_mut() {
                errors[4] = err(&q.update(bins, exp, symbol));
            }
            emit(
                "symbol",
                &[
                    frame_index,
                    symbol,
                    exp as u32,
                    llr_hash,
                    errors[0] | errors[1] << 1 | errors[2] << 2 | errors[3] << 3 | errors[4] << 4,
                ],
            );
        }
        // Per frame.
        let noise = b.noise.get_mut(..N).unwrap_or_default();
        let count = if let Some(n) = t.noise.as_deref_mut() {
            noise_records(n, noise, emit)
        } else {
            // The noise the design assumes: N0 = RX_NOISE_VAR of a unit-energy symbol.
            let n0 = track_design.unit_power / 100;
            for v in noise.iter_mut() {
                *v = n0;
            }
            used
        };
        bin_noise_records(noise.get(..count).unwrap_or_default(), emit);
        let r = rx.set_bin_noise(
            noise.get(..count).unwrap_or_default(),
            &track_design.estimator_mse[..],
        );
        let weights = rx.llr_weights();
        let hash = fnv(weights
            .iter()
            .flat_map(|s| s.mant.to_le_bytes().into_iter().chain(s.exp.to_le_bytes())));
        emit("weights", &[err(&r), count as u32, hash]);
        estimate_records(t, emit);
    }
    ok
}

/// The noise tracker's per-frame records (`frame_stats`, `interfered`) and its per-bin noise
/// written to `noise`; returns the number of values written (`bin_noise`).
fn noise_records<D: Borrow<NoiseTrackDesignQ15<N>>, const N: usize>(
    n: &NoiseTrackerQ15<N, D>,
    noise: &mut [u64],
    emit: &mut Emit,
) -> usize {
    emit("frame_stats", &stats_words(&n.frame_stats()));
    let count = n.bin_noise(noise);
    let mut flags = [0u32; 4];
    for (k, f) in (0..N)
        .filter(|&k| n.is_interfered(k))
        .map(|k| (k / 32, k % 32))
    {
        if let Some(w) = flags.get_mut(k) {
            *w |= 1 << f;
        }
    }
    emit("interfered", &flags);
    count
}

/// The `bin_noise` records: eight values (low, high word) a record.
fn bin_noise_records(words: &[u64], emit: &mut Emit) {
    let mut w = [0u32; 2];
    for chunk in words.chunks(8) {
        let mut rec = [0u32; 16];
        for (r, v) in rec.chunks_mut(2).zip(chunk) {
            w[0] = lo(*v);
            w[1] = hi(*v);
            for (d, s) in r.iter_mut().zip(w) {
                *d = s;
            }
        }
        emit("bin_noise", rec.get(..2 * chunk.len()).unwrap_or_default());
    }
}

/// The per-frame estimate records of the present estimators (`doppler`, `delay`, `iq`) and
/// the ICI prediction from the Doppler estimate (`ici`; `fd·T` 0 without one).
fn estimate_records<
    D: Borrow<NoiseTrackDesignQ15<N>>,
    const N: usize,
    const P: usize,
    const H: usize,
>(
    t: &mut Trackers<'_, N, P, H, D>,
    emit: &mut Emit,
) {
    let mut fd_t_q16 = 0u32;
    if let Some(d) = t.doppler.as_deref_mut() {
        let e = d.estimate();
        if let Some(e) = e {
            fd_t_q16 = (e.fd_t_q31.max(0) as u32) >> 15;
        }
        emit("doppler", &doppler_words(e));
    }
    if let Some(d) = t.delay.as_deref() {
        emit("delay", &delay_words(d.estimate()));
    }
    if let Some(q) = t.iq.as_deref() {
        emit("iq", &iq_words(q.estimate()));
    }
    if let Some(table) = t.ici {
        emit("ici", &ici_words(&table.predict(fd_t_q16, TRACK_EPS_Q16)));
    }
}

/// What the trackers read of one received symbol, stored: the receiver's FFT output and its
/// block exponent, its channel estimate per used bin and exponent, the common phase it
/// applied, the equalized data symbols, and whether `receive` failed.
#[derive(Clone, Copy, Debug)]
pub struct StoredSymbol<'a, const N: usize> {
    /// FFT output, natural order.
    pub bins: &'a [Cq15; N],
    /// Block exponent of `bins`.
    pub bins_exp: i32,
    /// Channel estimate per used bin.
    pub estimate: &'a [Cq15],
    /// Block exponent of `estimate`.
    pub estimate_exp: i32,
    /// The common-phase rotation applied, if any.
    pub common_phase: Option<Cq15>,
    /// Equalized data symbols (`data_len` of the symbol).
    pub equalized: &'a [Cq15],
    /// `ReceiverQ15::receive` reported an error.
    pub rx_error: bool,
}

impl<'a, const N: usize> StoredSymbol<'a, N> {
    /// The noise tracker's view of the symbol.
    pub fn view(&self) -> SymbolViewQ15<'a, N> {
        SymbolViewQ15 {
            bins: self.bins,
            bins_exp: self.bins_exp,
            estimate: self.estimate,
            estimate_exp: self.estimate_exp,
            common_phase: self.common_phase,
        }
    }

    /// FNV-1a hash of every field (the firmware prints it for its stored tables; the host
    /// records its own and compares).
    pub fn hash(&self, h: u32) -> u32 {
        let cq = |c: &Cq15| [c.re as u32, c.im as u32];
        let cpe = match self.common_phase {
            None => [u32::MAX, 0, 0],
            Some(c) => [1, c.re as u32, c.im as u32],
        };
        let it = self
            .bins
            .iter()
            .flat_map(cq)
            .chain([self.bins_exp as u32, self.estimate.len() as u32])
            .chain(self.estimate.iter().flat_map(cq))
            .chain([self.estimate_exp as u32])
            .chain(cpe)
            .chain([self.equalized.len() as u32])
            .chain(self.equalized.iter().flat_map(cq))
            .chain([u32::from(self.rx_error)]);
        fnv_from(h, it.flat_map(u32::to_le_bytes))
    }
}

/// FNV-1a over bytes from state `h`.
fn fnv_from(h: u32, bytes: impl Iterator<Item = u8>) -> u32 {
    bytes.fold(h, |h, b| (h ^ u32::from(b)).wrapping_mul(0x0100_0193))
}

/// The FNV-1a offset basis (start of [`StoredSymbol::hash`] chains).
pub const HASH_START: u32 = 0x811c_9dc5;

/// Runs case `case_index` through `rx` exactly as [`run_case`] does (reset, the case's gain,
/// [`TRACK_FRAMES`] frames of [`RX_SYMBOLS`] symbols) and hands `visit` what the trackers read
/// of each symbol (frame, symbol, stored symbol): the host records the receiver's outputs for
/// [`run_stored`] (`firmware/build.rs` writes them into flash). `set_bin_noise` is not
/// called: it changes only the LLR weights, none of what is recorded. False when a buffer is
/// short, the case is unknown or the generator fails.
pub fn record_case<F, const N: usize>(
    case_index: usize,
    nu: &Numerology,
    rx: &mut ReceiverQ15<F, N, RX_K, RX_M>,
    b: &mut Buffers<'_>,
    visit: &mut dyn FnMut(u32, u32, &StoredSymbol<'_, N>),
) -> bool
where
    F: OfdmFft<N, Sample = Cq15>,
{
    let Some(case) = RX_CASES.get(case_index) else {
        return false;
    };
    if b.samples.len() < N + N / 8
        || b.equalized.len() < N
        || b.sinr.len() < N
        || b.llrs.len() < 4 * N
    {
        return false;
    }
    rx.reset();
    rx.set_gain(case.gain);
    let mut ok = true;
    for frame_index in 0..TRACK_FRAMES {
        let Some(mut frame) = RxFrame::<N>::new(case_index) else {
            return false;
        };
        for symbol in 0..RX_SYMBOLS {
            ok &= frame.symbol(symbol, b.samples);
            let x = b.samples.get(..N + N / 8).unwrap_or_default();
            let r = rx.receive(x, symbol, case.modulation, b.equalized, b.sinr, b.llrs);
            let (bins, bins_exp) = rx.bins_with_exponent();
            let (estimate, estimate_exp) = rx.estimate();
            let stored = StoredSymbol {
                bins,
                bins_exp,
                estimate,
                estimate_exp,
                common_phase: rx.applied_common_phase(),
                equalized: b.equalized.get(..nu.data_len(symbol)).unwrap_or_default(),
                rx_error: r.is_err(),
            };
            visit(frame_index, symbol, &stored);
        }
    }
    ok
}

/// The stored symbols of one case: `symbol(frame, symbol)`.
pub type StoredSource<'s, 'a, const N: usize> =
    dyn Fn(u32, u32) -> Option<StoredSymbol<'a, N>> + 's;

/// [`run_case`] without the receiver, for a core whose RAM does not hold the receiver beside
/// the trackers: the present `trackers` read the stored receiver outputs of case
/// `case_index` (`source`, recorded by [`record_case`]) frame by frame and emit the same
/// per-frame records as [`run_case`] (`frame_stats`, `interfered`, `bin_noise`, `doppler`,
/// `delay`, `iq`, `ici`; no `weights`: there is no receiver), and per symbol `tsymbol`
/// (frame, symbol, block exponent, tracker error bits as in `symbol`). `noise` takes the
/// per-bin noise (at least `N`). False when a stored symbol is missing, `noise` is short or
/// the case is unknown.
pub fn run_stored<
    D: Borrow<NoiseTrackDesignQ15<N>>,
    const N: usize,
    const P: usize,
    const H: usize,
>(
    case_index: usize,
    nu: &Numerology,
    source: &StoredSource<'_, '_, N>,
    t: &mut Trackers<'_, N, P, H, D>,
    noise: &mut [u64],
    emit: &mut Emit,
) -> bool {
    let Some(case) = RX_CASES.get(case_index) else {
        return false;
    };
    if noise.len() < N {
        return false;
    }
    if let Some(n) = t.noise.as_deref_mut() {
        n.reset();
    }
    if let Some(d) = t.doppler.as_deref_mut() {
        d.reset();
    }
    for frame_index in 0..TRACK_FRAMES {
        if let Some(n) = t.noise.as_deref_mut() {
            n.start_frame();
        }
        if let Some(d) = t.delay.as_deref_mut() {
            d.reset();
        }
        if let Some(q) = t.iq.as_deref_mut() {
            q.reset();
        }
        for symbol in 0..RX_SYMBOLS {
            let Some(s) = source(frame_index, symbol) else {
                return false;
            };
            let data = nu.data_len(symbol);
            let mut errors = [u32::from(s.rx_error), 0, 0, 0, 0];
            if let Some(n) = t.noise.as_deref_mut() {
                let eq = s.equalized.get(..data).unwrap_or_default();
                errors[1] = err(&n.update(symbol, &s.view(), eq, case.modulation));
            }
            if let Some(d) = t.doppler.as_deref_mut() {
                errors[2] = err(&d.update(s.bins, s.bins_exp, symbol));
            }
            if let Some(d) = t.delay.as_deref_mut() {
                errors[3] = err(&d.update(s.bins, s.bins_exp, symbol));
            }
            if let Some(q) = t.iq.as_deref_mut() {
                errors[4] = err(&q.update(s.bins, s.bins_exp, symbol));
            }
            emit(
                "tsymbol",
                &[
                    frame_index,
                    symbol,
                    s.bins_exp as u32,
                    errors[0] | errors[1] << 1 | errors[2] << 2 | errors[3] << 3 | errors[4] << 4,
                ],
            );
        }
        let noise = noise.get_mut(..N).unwrap_or_default();
        if let Some(n) = t.noise.as_deref() {
            let count = noise_records(n, noise, emit);
            bin_noise_records(noise.get(..count).unwrap_or_default(), emit);
        }
        estimate_records(t, emit);
    }
    true
}

/// FNV-1a hash of every field of a noise tracker design (the firmware prints it for its
/// `build.rs` table; the host computes its own design and compares).
pub fn track_design_hash<const N: usize>(d: &NoiseTrackDesignQ15<N>) -> u32 {
    let scaled = |s: &Scaled| [s.mant as u32, s.exp as u32];
    let it = d
        .pilot_coef
        .iter()
        .flat_map(|&(a, b)| [a as u32, b as u32])
        .chain(d.pilot_scale.iter().flat_map(scaled))
        .chain(scaled(&d.inv_pilot_power))
        .chain(d.estimator_mse.iter().flat_map(|&v| [lo(v), hi(v)]))
        .chain([lo(d.unit_power), hi(d.unit_power)])
        .chain(d.dd.iter().flat_map(|t| {
            t.points.iter().flat_map(|p| {
                [
                    p.eps_q24,
                    p.ratio_q16,
                    p.slope_mant as u32,
                    p.slope_shift as u32,
                ]
            })
        }));
    fnv(it.flat_map(u32::to_le_bytes))
}
