//! OFDM numerology and subcarrier layout: FFT size, cyclic prefix, used band, pilot pattern.
//!
//! A [`Numerology`] is built once from [`NumerologyParams`] by [`Numerology::new`], which checks
//! every rule and returns a [`ConfigError`] naming the first one broken. Afterwards the layout
//! queries (which bins carry data or pilots in symbol `s`) cannot fail and allocate nothing:
//! they are computed on the fly from a handful of integers.
//!
//! ## Layout
//!
//! Bins are numbered by logical frequency `k` in `-N/2 ..= N/2 - 1`. The *used band* runs from
//! `k = -N/2 + guard_low_bins` to `k = N/2 - 1 - guard_high_bins`, without the DC bin when
//! `dc_null` is set. Used bins are numbered `0 .. used_len` from the low edge up.
//!
//! Pilots form a comb over the used bins: used bin `u` of symbol `s` is a pilot when
//! `u ≡ (offset + s·shift) (mod spacing)`; with `pilot_last_bin` the last used bin is a pilot
//! too, so frequency interpolation never has to extrapolate at the upper edge. A nonzero shift
//! gives a scattered pattern that repeats every `spacing / gcd(spacing, shift)` symbols.

use crate::error::ConfigError;

/// Smallest supported FFT size.
pub const MIN_FFT_LEN: usize = 16;
/// Largest supported FFT size.
pub const MAX_FFT_LEN: usize = 4096;
/// Pilot boost range accepted by [`Numerology::new`], dB.
pub const PILOT_BOOST_RANGE_DB: (f32, f32) = (-20.0, 12.0);

/// Pilot pattern settings (see the module docs for the layout rule).
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct PilotParams {
    /// A pilot every `spacing` used bins (≥ 1).
    pub spacing: usize,
    /// Used-bin index of the first pilot in symbol 0 (`< spacing`).
    pub offset: usize,
    /// Advance of the comb per symbol, used bins (`< spacing`; 0 = fixed comb).
    pub shift_per_symbol: usize,
    /// Also place a pilot on the last used bin, so interpolation never extrapolates.
    pub last_bin: bool,
    /// Pilot power relative to the mean data-symbol power, dB (amplitude `10^(dB/20)`).
    pub boost_db: f32,
    /// Seed of the pilot PRBS (nonzero; only the low 15 bits are used).
    pub seed: u16,
}

impl Default for PilotParams {
    fn default() -> Self {
        Self {
            spacing: 4,
            offset: 0,
            shift_per_symbol: 0,
            last_bin: true,
            boost_db: 0.0,
            seed: 0x1d5,
        }
    }
}

/// Unvalidated numerology settings; turn them into a [`Numerology`] with [`Numerology::new`].
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct NumerologyParams {
    /// FFT size N (power of two, 16..=4096).
    pub fft_len: usize,
    /// Cyclic prefix L, samples (`< fft_len`).
    pub cp_len: usize,
    /// Sample rate fs, Hz.
    pub sample_rate_hz: f32,
    /// Unused bins at the low band edge, counting the Nyquist bin `-N/2` (≥ 1).
    pub guard_low_bins: usize,
    /// Unused bins at the high band edge.
    pub guard_high_bins: usize,
    /// Leave the DC bin empty (it collects the receiver's DC offset).
    pub dc_null: bool,
    /// Pilot pattern.
    pub pilots: PilotParams,
}

impl Default for NumerologyParams {
    /// 64-point FFT, CP of 8 samples, 250 kHz, guards 4 + 3, DC null, pilot every 4th bin.
    fn default() -> Self {
        Self {
            fft_len: 64,
            cp_len: 8,
            sample_rate_hz: 250_000.0,
            guard_low_bins: 4,
            guard_high_bins: 3,
            dc_null: true,
            pilots: PilotParams::default(),
        }
    }
}

/// A validated numerology. Cheap to copy; every query is infallible.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Numerology {
    params: NumerologyParams,
    /// Number of used bins (data + pilots).
    used_len: usize,
    /// Used index at which the DC skip begins (`usize::MAX` when none).
    dc_skip_from: usize,
    /// Pilot amplitude, linear.
    pilot_amplitude: f32,
    /// Pattern period, symbols.
    pattern_period: usize,
    /// Fewest / most pilots in any symbol of the pattern.
    min_pilots: usize,
    max_pilots: usize,
}

impl Numerology {
    /// Validates `params`. Rules, in the order checked: FFT size supported, CP shorter than
    /// the FFT, sample rate positive, guard bands leave a used band, pilot spacing ≥ 1,
    /// offset and shift below the spacing, pilot boost in range, PRBS seed nonzero, and in every
    /// symbol of the pattern: first pilot inside the used band, ≥ 2 pilots, ≥ 1 data bin.
    pub fn new(params: NumerologyParams) -> Result<Self, ConfigError> {
        let n = params.fft_len;
        if !(MIN_FFT_LEN..=MAX_FFT_LEN).contains(&n) || !n.is_power_of_two() {
            return Err(ConfigError::FftSizeUnsupported { fft_len: n });
        }
        if params.cp_len >= n {
            return Err(ConfigError::CyclicPrefixTooLong {
                cp_len: params.cp_len,
                fft_len: n,
            });
        }
        if !(params.sample_rate_hz.is_finite() && params.sample_rate_hz > 0.0) {
            return Err(ConfigError::SampleRateInvalid);
        }
        let half = n / 2;
        let (lo_guard, hi_guard) = (params.guard_low_bins, params.guard_high_bins);
        // The low edge starts at the Nyquist bin, which must stay unused; the band must keep
        // at least one bin on each side of DC so it stays a two-sided complex band.
        if lo_guard < 1 || lo_guard >= half || hi_guard >= half - 1 {
            return Err(ConfigError::GuardBandInvalid {
                guard_low_bins: lo_guard,
                guard_high_bins: hi_guard,
            });
        }
        // Logical band [lo, hi] with lo < 0 < hi.
        let span = n - lo_guard - hi_guard; // bins from lo to hi inclusive
        let used_len = span - usize::from(params.dc_null);
        let dc_skip_from = if params.dc_null {
            half - lo_guard // used index of the first bin above DC
        } else {
            usize::MAX
        };

        let p = params.pilots;
        if p.spacing == 0 {
            return Err(ConfigError::PilotSpacingZero);
        }
        for value in [p.offset, p.shift_per_symbol] {
            if value >= p.spacing {
                return Err(ConfigError::PilotOffsetOutOfRange {
                    value,
                    spacing: p.spacing,
                });
            }
        }
        let (boost_lo, boost_hi) = PILOT_BOOST_RANGE_DB;
        if !(p.boost_db.is_finite() && p.boost_db >= boost_lo && p.boost_db <= boost_hi) {
            return Err(ConfigError::PilotBoostOutOfRange);
        }
        if p.seed & 0x7fff == 0 {
            return Err(ConfigError::PilotSeedZero);
        }
        let pattern_period = if p.shift_per_symbol == 0 {
            1
        } else {
            p.spacing
                .checked_div(gcd(p.spacing, p.shift_per_symbol))
                .unwrap_or(1)
        };
        let mut min_pilots = usize::MAX;
        let mut max_pilots = 0;
        for phase in 0..pattern_period {
            let first = comb_offset(&p, phase);
            if first >= used_len {
                return Err(ConfigError::PilotOutsideUsedBand {
                    used_index: first,
                    used_len,
                });
            }
            let pilots = pilot_count_for(used_len, &p, first);
            if pilots < 2 {
                return Err(ConfigError::TooFewPilots { pilots });
            }
            if pilots >= used_len {
                return Err(ConfigError::NoDataBins);
            }
            min_pilots = min_pilots.min(pilots);
            max_pilots = max_pilots.max(pilots);
        }
        Ok(Self {
            params,
            used_len,
            dc_skip_from,
            pilot_amplitude: libm::powf(10.0, p.boost_db / 20.0),
            pattern_period,
            min_pilots,
            max_pilots,
        })
    }

    /// The settings this numerology was built from.
    pub fn params(&self) -> &NumerologyParams {
        &self.params
    }
    /// FFT size N.
    pub fn fft_len(&self) -> usize {
        self.params.fft_len
    }
    /// Cyclic prefix L, samples.
    pub fn cp_len(&self) -> usize {
        self.params.cp_len
    }
    /// Samples per OFDM symbol including the cyclic prefix, N + L.
    pub fn symbol_len(&self) -> usize {
        self.params.fft_len + self.params.cp_len
    }
    /// Sample rate fs, Hz.
    pub fn sample_rate_hz(&self) -> f32 {
        self.params.sample_rate_hz
    }
    /// Sample period 1/fs, s.
    pub fn sample_period_s(&self) -> f32 {
        1.0 / self.params.sample_rate_hz
    }
    /// Subcarrier spacing Δf = fs/N, Hz.
    pub fn subcarrier_spacing_hz(&self) -> f32 {
        self.params.sample_rate_hz / self.params.fft_len as f32
    }
    /// Useful symbol duration T = N/fs (no CP), s.
    pub fn useful_symbol_s(&self) -> f32 {
        self.params.fft_len as f32 / self.params.sample_rate_hz
    }
    /// Cyclic prefix duration L/fs, s.
    pub fn cp_s(&self) -> f32 {
        self.params.cp_len as f32 / self.params.sample_rate_hz
    }
    /// Symbol period Tsym = (N + L)/fs, s.
    pub fn symbol_period_s(&self) -> f32 {
        self.symbol_len() as f32 / self.params.sample_rate_hz
    }
    /// Number of used bins (data and pilots) per symbol.
    pub fn used_len(&self) -> usize {
        self.used_len
    }
    /// Pilot amplitude (linear, relative to unit-energy data).
    pub fn pilot_amplitude(&self) -> f32 {
        self.pilot_amplitude
    }
    /// Number of symbols after which the pilot pattern repeats.
    pub fn pattern_period(&self) -> usize {
        self.pattern_period
    }
    /// Most pilots in any symbol (size of per-symbol pilot buffers).
    pub fn max_pilots(&self) -> usize {
        self.max_pilots
    }
    /// Most data bins in any symbol (size of per-symbol data buffers).
    pub fn max_data_len(&self) -> usize {
        self.used_len - self.min_pilots
    }
    /// Pilots in symbol `symbol`.
    pub fn pilot_len(&self, symbol: u32) -> usize {
        pilot_count_for(
            self.used_len,
            &self.params.pilots,
            self.phase_offset(symbol),
        )
    }
    /// Data bins in symbol `symbol`.
    pub fn data_len(&self, symbol: u32) -> usize {
        self.used_len - self.pilot_len(symbol)
    }
    /// Logical frequency index `k` of used bin `used_index` (`-N/2 ..= N/2-1`).
    pub fn logical_bin(&self, used_index: usize) -> i32 {
        let skip = usize::from(used_index >= self.dc_skip_from);
        let from_low = (used_index + skip + self.params.guard_low_bins) as i32;
        from_low - (self.params.fft_len / 2) as i32
    }
    /// FFT buffer index (natural order, `k mod N`) of used bin `used_index`.
    pub fn fft_index(&self, used_index: usize) -> usize {
        let k = self.logical_bin(used_index);
        if k < 0 {
            (k + self.params.fft_len as i32) as usize
        } else {
            k as usize
        }
    }
    /// True when used bin `used_index` carries a pilot in symbol `symbol`.
    pub fn is_pilot(&self, used_index: usize, symbol: u32) -> bool {
        let p = &self.params.pilots;
        let first = self.phase_offset(symbol);
        (used_index >= first && (used_index - first).is_multiple_of(p.spacing))
            || (p.last_bin && used_index + 1 == self.used_len)
    }
    /// The used bins of symbol `symbol` in ascending frequency, each tagged data or pilot.
    pub fn bins(&self, symbol: u32) -> BinIter {
        let p = &self.params.pilots;
        BinIter {
            numerology: *self,
            next: 0,
            to_pilot: self.phase_offset(symbol),
            spacing: p.spacing,
        }
    }
    /// FFT indices of the data bins of symbol `symbol`, ascending frequency.
    pub fn data_bins(&self, symbol: u32) -> impl Iterator<Item = usize> {
        self.bins(symbol)
            .filter(|b| b.kind == BinKind::Data)
            .map(|b| b.fft_index)
    }
    /// FFT indices of the pilot bins of symbol `symbol`, ascending frequency.
    pub fn pilot_bins(&self, symbol: u32) -> impl Iterator<Item = usize> {
        self.bins(symbol)
            .filter(|b| b.kind == BinKind::Pilot)
            .map(|b| b.fft_index)
    }

    /// Comb offset (used-bin index of the first pilot) in symbol `symbol`.
    fn phase_offset(&self, symbol: u32) -> usize {
        let phase = (symbol as usize)
            .checked_rem(self.pattern_period)
            .unwrap_or(0);
        comb_offset(&self.params.pilots, phase)
    }
}

/// What a used bin carries.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum BinKind {
    /// A data subcarrier.
    Data,
    /// A pilot subcarrier.
    Pilot,
}

/// One used bin of a symbol.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Bin {
    /// Used-bin index, `0 .. used_len` from the low band edge.
    pub used_index: usize,
    /// Index in the natural-order FFT buffer.
    pub fft_index: usize,
    /// Data or pilot.
    pub kind: BinKind,
}

/// Iterator over the used bins of one symbol (see [`Numerology::bins`]). No division per bin.
#[derive(Clone, Debug)]
pub struct BinIter {
    numerology: Numerology,
    next: usize,
    /// Bins until the next comb pilot (0 = this bin).
    to_pilot: usize,
    spacing: usize,
}

impl Iterator for BinIter {
    type Item = Bin;
    fn next(&mut self) -> Option<Bin> {
        let nu = &self.numerology;
        let u = self.next;
        if u >= nu.used_len {
            return None;
        }
        self.next = u + 1;
        let comb = self.to_pilot == 0;
        self.to_pilot = if comb {
            self.spacing - 1
        } else {
            self.to_pilot - 1
        };
        let last = nu.params.pilots.last_bin && u + 1 == nu.used_len;
        Some(Bin {
            used_index: u,
            fft_index: nu.fft_index(u),
            kind: if comb || last {
                BinKind::Pilot
            } else {
                BinKind::Data
            },
        })
    }
    fn size_hint(&self) -> (usize, Option<usize>) {
        let left = self.numerology.used_len.saturating_sub(self.next);
        (left, Some(left))
    }
}

impl ExactSizeIterator for BinIter {}

fn comb_offset(p: &PilotParams, phase: usize) -> usize {
    // `spacing` is validated nonzero; checked_rem keeps the panic path out of the binary.
    (p.offset + phase * p.shift_per_symbol)
        .checked_rem(p.spacing)
        .unwrap_or(0)
}

fn pilot_count_for(used_len: usize, p: &PilotParams, first: usize) -> usize {
    if first >= used_len {
        return usize::from(p.last_bin);
    }
    let comb = (used_len - 1 - first).checked_div(p.spacing).unwrap_or(0) + 1;
    let last_on_comb = (used_len - 1 - first).is_multiple_of(p.spacing);
    comb + usize::from(p.last_bin && !last_on_comb)
}

fn gcd(mut a: usize, mut b: usize) -> usize {
    while let Some(t) = a.checked_rem(b) {
        a = b;
        b = t;
    }
    a
}

#[cfg(test)]
mod tests {
    use super::*;

    fn params() -> NumerologyParams {
        NumerologyParams::default()
    }

    #[test]
    fn default_layout_counts_by_hand() {
        // N = 64, guards 4 + 3, DC null: bins -28..=28 without 0 → 56 used bins (counted by
        // hand). Comb every 4 from 0: used 0,4,…,52 (14 pilots) plus the last bin 55 → 15.
        let nu = Numerology::new(params()).unwrap();
        assert_eq!(nu.used_len(), 56);
        assert_eq!(nu.logical_bin(0), -28);
        assert_eq!(nu.logical_bin(27), -1);
        assert_eq!(nu.logical_bin(28), 1);
        assert_eq!(nu.logical_bin(55), 28);
        assert_eq!(nu.fft_index(0), 36);
        assert_eq!(nu.fft_index(28), 1);
        assert_eq!(nu.pilot_len(0), 15);
        assert_eq!(nu.data_len(0), 41);
        assert_eq!(nu.bins(0).count(), 56);
        assert_eq!(nu.pilot_bins(0).count(), 15);
        assert_eq!(nu.data_bins(0).count(), 41);
        // Symbol timing: 64/250 kHz = 256 µs; (64+8)/250 kHz = 288 µs; Δf = 3906.25 Hz.
        assert!((nu.useful_symbol_s() - 256e-6).abs() < 1e-9);
        assert!((nu.symbol_period_s() - 288e-6).abs() < 1e-9);
        assert!((nu.subcarrier_spacing_hz() - 3906.25).abs() < 1e-3);
    }

    #[test]
    fn iterator_agrees_with_predicate_for_scattered_patterns() {
        for (spacing, shift, last) in [(4, 1, false), (6, 2, true), (3, 0, true), (5, 3, false)] {
            let mut p = params();
            p.pilots.spacing = spacing;
            p.pilots.shift_per_symbol = shift;
            p.pilots.last_bin = last;
            let nu = Numerology::new(p).unwrap();
            for s in 0..12u32 {
                let mut pilots = 0;
                for b in nu.bins(s) {
                    let want = nu.is_pilot(b.used_index, s);
                    assert_eq!(b.kind == BinKind::Pilot, want, "s={s} u={}", b.used_index);
                    pilots += usize::from(want);
                }
                assert_eq!(pilots, nu.pilot_len(s));
            }
        }
    }

    #[test]
    fn every_rule_trips_its_error() {
        let check = |f: &dyn Fn(&mut NumerologyParams), want: ConfigError| {
            let mut p = params();
            f(&mut p);
            assert_eq!(Numerology::new(p), Err(want));
        };
        check(
            &|p| p.fft_len = 100,
            ConfigError::FftSizeUnsupported { fft_len: 100 },
        );
        check(
            &|p| p.fft_len = 8,
            ConfigError::FftSizeUnsupported { fft_len: 8 },
        );
        check(
            &|p| p.fft_len = 8192,
            ConfigError::FftSizeUnsupported { fft_len: 8192 },
        );
        check(
            &|p| p.cp_len = 64,
            ConfigError::CyclicPrefixTooLong {
                cp_len: 64,
                fft_len: 64,
            },
        );
        check(&|p| p.sample_rate_hz = 0.0, ConfigError::SampleRateInvalid);
        check(
            &|p| p.sample_rate_hz = f32::NAN,
            ConfigError::SampleRateInvalid,
        );
        check(
            &|p| p.guard_low_bins = 0,
            ConfigError::GuardBandInvalid {
                guard_low_bins: 0,
                guard_high_bins: 3,
            },
        );
        check(
            &|p| p.guard_high_bins = 31,
            ConfigError::GuardBandInvalid {
                guard_low_bins: 4,
                guard_high_bins: 31,
            },
        );
        check(&|p| p.pilots.spacing = 0, ConfigError::PilotSpacingZero);
        check(
            &|p| p.pilots.offset = 4,
            ConfigError::PilotOffsetOutOfRange {
                value: 4,
                spacing: 4,
            },
        );
        check(
            &|p| p.pilots.shift_per_symbol = 5,
            ConfigError::PilotOffsetOutOfRange {
                value: 5,
                spacing: 4,
            },
        );
        check(
            &|p| p.pilots.boost_db = 13.0,
            ConfigError::PilotBoostOutOfRange,
        );
        check(
            &|p| p.pilots.boost_db = f32::INFINITY,
            ConfigError::PilotBoostOutOfRange,
        );
        check(&|p| p.pilots.seed = 0x8000, ConfigError::PilotSeedZero);
        // 56 used bins, spacing 60, offset 57: the first pilot is beyond the band.
        check(
            &|p| {
                p.pilots.spacing = 60;
                p.pilots.offset = 57;
            },
            ConfigError::PilotOutsideUsedBand {
                used_index: 57,
                used_len: 56,
            },
        );
        // Spacing 60 from bin 0 without the last-bin pilot: a single pilot.
        check(
            &|p| {
                p.pilots.spacing = 60;
                p.pilots.last_bin = false;
            },
            ConfigError::TooFewPilots { pilots: 1 },
        );
        check(&|p| p.pilots.spacing = 1, ConfigError::NoDataBins);
    }
}
