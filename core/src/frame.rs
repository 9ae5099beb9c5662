//! The streaming frame receiver: samples in chunks of any size → preamble acquisition →
//! integer CFO and fine timing on preamble symbol B → NCO derotation → digital gain from the
//! preamble power → the Q15 receiver, symbol by symbol, each decoded symbol handed to a
//! callback.
//!
//! This first form runs synchronisation in f32 ([`crate::acquire`], [`crate::nco::NcoF32`],
//! [`crate::gain_dc::gain_for_backoff`]) and the per-symbol receiver in Q15
//! ([`crate::receiver_q15`]): a Cortex-M4F path. The DC offset is not removed yet, and the
//! sampling-clock drift is left to the per-symbol channel estimate (20 ppm over a frame of 20
//! symbols of N = 64 is 0.03 samples).
//!
//! Memory: a ring of `R` samples (`R ≥ 4N`; const generic), the acquirer, the Q15 receiver.

use crate::acquire::{first_path_offset, total_cfo, Acquirer};
use crate::error::{ConfigError, ProcessError};
use crate::fft::MicroFft;
use crate::fft_q15::Q15Fft;
use crate::fixed::Cq15;
use crate::fixed_math::Scaled;
use crate::gain_dc::gain_for_backoff;
use crate::modulation::Modulation;
use crate::nco::NcoF32;
use crate::numerology::Numerology;
use crate::receiver_q15::{samples_to_q15, DesignQ15, ReceiverQ15};
use crate::Cf32;

/// Frame settings.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct FrameConfig {
    /// Acquisition threshold on the Schmidl & Cox metric (see
    /// [`Acquirer::threshold_for`]).
    pub threshold: f32,
    /// Level of the FFT input the digital gain aims at, dBFS (the Q15 design's `signal_dbfs`).
    pub target_dbfs: f32,
    /// Data symbols per frame.
    pub frame_symbols: u32,
    /// Modulation of the data symbols.
    pub modulation: Modulation,
    /// Largest |integer CFO| searched, subcarrier spacings.
    pub max_integer_cfo: usize,
    /// First-path threshold of the fine timing, fraction of the strongest path.
    pub first_path_fraction: f32,
}

/// One decoded data symbol, as handed to the callback of [`FrameReceiver::push`].
#[derive(Debug)]
pub struct SymbolEvent<'a> {
    /// Data symbol index within the frame.
    pub symbol: u32,
    /// Equalized data symbols, Q3.12.
    pub equalized: &'a [Cq15],
    /// Per-bin SINR weights.
    pub sinr: &'a [Scaled],
    /// i8 LLRs (4 per unit of LLR).
    pub llrs: &'a [i8],
    /// Components clipped in the conversion to Q15 and the digital gain.
    pub clipped: usize,
    /// Total CFO of the frame, subcarrier spacings.
    pub cfo: f32,
    /// Stream index of this symbol's FFT window.
    pub window_start: u64,
}

#[derive(Clone, Copy, Debug)]
enum State {
    Searching,
    WaitB {
        w: u64,
        frac: f32,
    },
    Data {
        origin: u64,
        next: u64,
        symbol: u32,
        cfo: f32,
    },
}

/// Streaming frame receiver: FFT size `N`, `K` frequency taps, `M` history, ring of `R`
/// samples (`R ≥ 4N`).
pub struct FrameReceiver<const N: usize, const K: usize, const M: usize, const R: usize> {
    numerology: Numerology,
    config: FrameConfig,
    acq: Acquirer<N>,
    rx: ReceiverQ15<Q15Fft<N>, N, K, M>,
    fft: MicroFft<N>,
    nco: NcoF32,
    ring: [Cf32; R],
    seen: u64,
    /// Stream index of the acquirer's first sample (it counts from its own start).
    acq_origin: u64,
    state: State,
    scratch: [Cf32; R],
    q: [Cq15; R],
    eq: [Cq15; N],
    sinr: [Scaled; N],
    llrs: [i8; R],
}

impl<const N: usize, const K: usize, const M: usize, const R: usize> FrameReceiver<N, K, M, R> {
    /// A frame receiver from a Q15 design (built for `target_dbfs`).
    pub fn new(
        numerology: &Numerology,
        design: DesignQ15<N, K, M>,
        config: FrameConfig,
    ) -> Result<Self, ConfigError> {
        let need = 4 * N;
        if R < need || R < 8 * numerology.max_data_len() || R < numerology.symbol_len() {
            return Err(ConfigError::FftSizeMismatch {
                numerology: need,
                stage: R,
            });
        }
        Ok(Self {
            numerology: *numerology,
            config,
            acq: Acquirer::new(numerology, config.threshold)?,
            rx: ReceiverQ15::new(numerology, Q15Fft::new(), design)?,
            fft: MicroFft::new(),
            nco: NcoF32::new(),
            ring: [Cf32::new(0.0, 0.0); R],
            seen: 0,
            acq_origin: 0,
            state: State::Searching,
            scratch: [Cf32::new(0.0, 0.0); R],
            q: [Cq15::ZERO; R],
            eq: [Cq15::ZERO; N],
            sinr: [Scaled::default(); N],
            llrs: [0; R],
        })
    }

    fn copy_out(&self, from: u64, out: &mut [Cf32]) {
        for (i, o) in out.iter_mut().enumerate() {
            *o = self
                .ring
                .get(((from + i as u64) % R as u64) as usize)
                .copied()
                .unwrap_or_default();
        }
    }

    /// Consumes `samples` (fractions of full scale, any chunk size), calling `on_symbol` for
    /// each data symbol decoded. Errors on a NaN/Inf sample (its index), consuming nothing.
    pub fn push(
        &mut self,
        samples: &[Cf32],
        mut on_symbol: impl FnMut(SymbolEvent<'_>),
    ) -> Result<(), ProcessError> {
        if let Some(index) = samples
            .iter()
            .position(|v| !(v.re.is_finite() && v.im.is_finite()))
        {
            return Err(ProcessError::NonFinite { index });
        }
        let n_len = N as u64;
        let ns = self.numerology.symbol_len() as u64;
        let cp = self.numerology.cp_len() as u64;
        for (i, &x) in samples.iter().enumerate() {
            if let Some(slot) = self.ring.get_mut((self.seen % R as u64) as usize) {
                *slot = x;
            }
            self.seen += 1;
            match self.state {
                State::Searching => {
                    if let Some(d) = self.acq.push(samples.get(i..=i).unwrap_or_default())? {
                        self.state = State::WaitB {
                            w: self.acq_origin + d.window_start,
                            frac: d.cfo_fraction,
                        };
                    }
                }
                State::WaitB { w, frac } => {
                    // Symbol B's window plus room for a late first path.
                    if self.seen < w + ns + n_len + n_len / 4 {
                        continue;
                    }
                    let mut a = [Cf32::new(0.0, 0.0); N];
                    let mut b = [Cf32::new(0.0, 0.0); N];
                    self.copy_out(w, &mut a);
                    self.copy_out(w + ns, &mut b);
                    let cfo = total_cfo(
                        &self.numerology,
                        &mut self.fft,
                        &a,
                        &b,
                        frac,
                        self.config.max_integer_cfo,
                    );
                    // Derotate B (phase origin at A's window start) for timing and gain.
                    self.nco.set_cfo(cfo, N);
                    self.nco.set_phase(0);
                    self.nco.advance(ns);
                    self.nco.derotate(&mut b);
                    let shift = first_path_offset(
                        &self.numerology,
                        &mut self.fft,
                        &b,
                        self.config.first_path_fraction,
                    );
                    let power = b.iter().map(|v| v.norm_sqr()).sum::<f32>() / N as f32;
                    match gain_for_backoff(power, self.config.target_dbfs) {
                        Some(g) => {
                            self.rx.set_gain(g);
                            self.rx.reset();
                            let origin = (w as i64 + i64::from(shift)).max(0) as u64;
                            self.state = State::Data {
                                origin,
                                next: origin + 2 * ns - cp,
                                symbol: 0,
                                cfo,
                            };
                        }
                        None => self.restart(),
                    }
                }
                State::Data {
                    origin,
                    next,
                    symbol,
                    cfo,
                } => {
                    if self.seen < next + ns {
                        continue;
                    }
                    let len = ns as usize;
                    let mut buf = self.scratch;
                    if let Some(s) = buf.get_mut(..len) {
                        self.copy_out(next, s);
                        // NCO phase at this symbol's first sample (any fixed origin: a constant
                        // phase is the channel's).
                        self.nco.set_phase(0);
                        self.nco.advance(next.saturating_sub(origin));
                        self.nco.derotate(s);
                    }
                    self.scratch = buf;
                    let mut q = self.q;
                    let clipped_in = match (self.scratch.get(..len), q.get_mut(..len)) {
                        (Some(s), Some(qq)) => samples_to_q15(s, qq)?,
                        _ => 0,
                    };
                    let m = self.config.modulation;
                    let counts = self.rx.receive(
                        q.get(..len).unwrap_or_default(),
                        symbol,
                        m,
                        &mut self.eq,
                        &mut self.sinr,
                        &mut self.llrs,
                    )?;
                    self.q = q;
                    on_symbol(SymbolEvent {
                        symbol,
                        equalized: self.eq.get(..counts.data_bins).unwrap_or_default(),
                        sinr: self.sinr.get(..counts.data_bins).unwrap_or_default(),
                        llrs: self.llrs.get(..counts.llrs).unwrap_or_default(),
                        clipped: clipped_in + counts.clipped,
                        cfo,
                        window_start: next + cp,
                    });
                    if symbol + 1 >= self.config.frame_symbols {
                        self.restart();
                    } else {
                        self.state = State::Data {
                            origin,
                            next: next + ns,
                            symbol: symbol + 1,
                            cfo,
                        };
                    }
                }
            }
        }
        Ok(())
    }

    fn restart(&mut self) {
        self.state = State::Searching;
        // A fresh acquirer: its history would otherwise end before the frame.
        if let Ok(a) = Acquirer::new(&self.numerology, self.config.threshold) {
            self.acq = a;
            self.acq_origin = self.seen;
        }
    }
}

impl<const N: usize, const K: usize, const M: usize, const R: usize> core::fmt::Debug
    for FrameReceiver<N, K, M, R>
{
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        f.debug_struct("FrameReceiver")
            .field("seen", &self.seen)
            .field("state", &self.state)
            .finish()
    }
}
