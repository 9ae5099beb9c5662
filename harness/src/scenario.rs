//! Scenarios: one link design to evaluate, read from a TOML file.
//!
//! A scenario names the band, the OFDM numerology, the modulations and Es/N0 points to sweep, the
//! channel, the front-end impairments, the target MCU and the seed every random stream derives
//! from. The built-in default lives in `harness/scenarios/default.toml`; that file is the single
//! source of truth for defaults. A scenario file gives only the keys that differ from it: every
//! key a file leaves out takes the value written in the default file.
//!
//! Every error — TOML syntax, unknown key, wrong type, out-of-range value, unreadable file — is a
//! [`ScenarioError`] that names the file and, except for I/O errors, the 1-based line and column
//! of the offending text, e.g. `scenarios/x.toml:12:5: unknown key `fft_size`, expected ...`.
//!
//! # Spans
//!
//! The scenario types hold plain values (no span wrappers), so the rest of the harness can build
//! and edit scenarios freely. Syntax, unknown-key and type errors take their span from the TOML
//! parser. Value errors found by [`Scenario::validate`] name the offending key by its dotted path
//! (e.g. `numerology.fft_len`, `link.modulations.2` for an array element); the loader then
//! re-locates that key in the document and reports the position of its value. Code that validates
//! a scenario further — the core crate's numerology checks, say — attaches a position the same way
//! with [`ScenarioError::at_key`], e.g. `ScenarioError::at_key(origin, text, "numerology", msg)`
//! points at the `[numerology]` header.

use std::cell::Cell;
use std::fmt;
use std::ops::Range;
use std::path::Path;
use std::sync::OnceLock;

use serde::{Deserialize, Serialize};
use toml::de::{DeTable, DeValue};
use toml::Spanned;

/// The text of the built-in default scenario (`harness/scenarios/default.toml`).
pub const DEFAULT_SCENARIO_TOML: &str = include_str!("../scenarios/default.toml");

/// The origin used in errors about the built-in default scenario.
pub const DEFAULT_SCENARIO_ORIGIN: &str = "scenarios/default.toml";

/// Speed of light in vacuum, m/s (exact by definition of the metre).
pub const SPEED_OF_LIGHT_M_PER_S: f64 = 299_792_458.0;

/// Smallest FFT length a scenario may ask for.
pub const MIN_FFT_LEN: usize = 16;

/// Largest FFT length a scenario may ask for.
pub const MAX_FFT_LEN: usize = 4096;

// ---------------------------------------------------------------------------------------------
// Scenario types
// ---------------------------------------------------------------------------------------------

/// One link design to evaluate.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Scenario {
    /// Human-readable name, used in reports.
    #[serde(default = "defaults::name")]
    pub name: String,
    /// Master seed: every random stream of a run derives from it.
    #[serde(default = "defaults::seed")]
    pub seed: u64,
    /// Sample rate and carrier.
    #[serde(default = "defaults::band")]
    pub band: Band,
    /// FFT length, cyclic prefix, guards and pilot layout.
    #[serde(default = "defaults::numerology")]
    pub numerology: Numerology,
    /// Modulations, Es/N0 points, frame length and stop rule.
    #[serde(default = "defaults::link")]
    pub link: Link,
    /// Propagation channel.
    #[serde(default = "defaults::channel")]
    pub channel: Channel,
    /// Front-end impairments.
    #[serde(default = "defaults::impairments")]
    pub impairments: Impairments,
    /// Target microcontroller, for the real-time budget.
    #[serde(default = "defaults::mcu")]
    pub mcu: Mcu,
}

/// `[band]`: sample rate and carrier frequency.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Band {
    /// Complex baseband sample rate, Hz (finite, > 0).
    #[serde(default = "defaults::sample_rate_hz")]
    pub sample_rate_hz: f64,
    /// Carrier frequency, Hz (finite, > 0); sets the Doppler shift for a given speed.
    #[serde(default = "defaults::carrier_hz")]
    pub carrier_hz: f64,
}

/// `[numerology]`: FFT length, cyclic prefix, guard bands and pilot layout.
///
/// The harness checks only what each key means on its own (see [`Scenario::validate`]); the core
/// crate checks that guards and pilots fit together.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Numerology {
    /// FFT length N: a power of two in [`MIN_FFT_LEN`]`..=`[`MAX_FFT_LEN`].
    #[serde(default = "defaults::fft_len")]
    pub fft_len: usize,
    /// Cyclic prefix length, samples (< `fft_len`).
    #[serde(default = "defaults::cp_len")]
    pub cp_len: usize,
    /// Unused bins at the low band edge, including the Nyquist bin.
    #[serde(default = "defaults::guard_low_bins")]
    pub guard_low_bins: usize,
    /// Unused bins at the high band edge.
    #[serde(default = "defaults::guard_high_bins")]
    pub guard_high_bins: usize,
    /// Leave the DC bin empty.
    #[serde(default = "defaults::dc_null")]
    pub dc_null: bool,
    /// A pilot every `pilot_spacing` used bins (≥ 1).
    #[serde(default = "defaults::pilot_spacing")]
    pub pilot_spacing: usize,
    /// Index, counted in used bins, of the first pilot.
    #[serde(default = "defaults::pilot_offset")]
    pub pilot_offset: usize,
    /// Scattered pattern: the pilot offset advances by this much each symbol (0 = comb).
    #[serde(default = "defaults::pilot_shift_per_symbol")]
    pub pilot_shift_per_symbol: usize,
    /// Also pilot the last used bin, so interpolation between pilots never extrapolates.
    #[serde(default = "defaults::pilot_last_bin")]
    pub pilot_last_bin: bool,
    /// Pilot power relative to data, dB (finite).
    #[serde(default = "defaults::pilot_boost_db")]
    pub pilot_boost_db: f64,
    /// Seed of the pilot PRBS (nonzero).
    #[serde(default = "defaults::pilot_seed")]
    pub pilot_seed: u16,
}

/// `[link]`: what to sweep and when to stop.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Link {
    /// Modulations to evaluate (at least one, no repeats).
    #[serde(default = "defaults::modulations")]
    pub modulations: Vec<ModulationName>,
    /// Es/N0 points, dB, per data subcarrier (at least one, all finite).
    #[serde(default = "defaults::es_n0_db")]
    pub es_n0_db: Vec<f64>,
    /// OFDM symbols per simulated frame (≥ 1).
    #[serde(default = "defaults::symbols_per_frame")]
    pub symbols_per_frame: usize,
    /// Stop rule: a point is done once it has seen this many bit errors (≥ 1) ...
    #[serde(default = "defaults::min_errors")]
    pub min_errors: u64,
    /// ... or once this many bits have been sent (≥ 1).
    #[serde(default = "defaults::max_bits")]
    pub max_bits: u64,
}

/// `[channel]`: propagation channel.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Channel {
    /// Channel model.
    #[serde(default = "defaults::profile")]
    pub profile: ChannelProfile,
    /// RMS delay spread, s (finite, ≥ 0). Used by delay-spread profiles.
    #[serde(default = "defaults::rms_delay_spread_s")]
    pub rms_delay_spread_s: f64,
    /// Highest relative speed of the two ends, km/h (finite, ≥ 0); sets the maximum Doppler.
    #[serde(default = "defaults::max_speed_kmh")]
    pub max_speed_kmh: f64,
}

/// `[impairments]`: front-end impairments.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Impairments {
    /// Carrier frequency offset, Hz (finite, |cfo| < sample_rate_hz / 2).
    #[serde(default = "defaults::cfo_hz")]
    pub cfo_hz: f64,
    /// Sample clock offset, parts per million (finite); positive: the receiver's clock is fast.
    #[serde(default = "defaults::sco_ppm")]
    pub sco_ppm: f64,
    /// Timing offset, samples (finite): integer and fractional delay of the received stream.
    #[serde(default = "defaults::timing_offset_samples")]
    pub timing_offset_samples: f64,
    /// 3-dB linewidth of Wiener phase noise of the local oscillator, Hz (finite, ≥ 0).
    #[serde(default = "defaults::phase_noise_linewidth_hz")]
    pub phase_noise_linewidth_hz: f64,
    /// DC offset of the in-phase branch, fraction of ADC full scale (finite, |x| < 1).
    #[serde(default = "defaults::dc_offset_i")]
    pub dc_offset_i: f64,
    /// DC offset of the quadrature branch, fraction of ADC full scale (finite, |x| < 1).
    #[serde(default = "defaults::dc_offset_q")]
    pub dc_offset_q: f64,
    /// IQ gain imbalance, quadrature over in-phase, dB (finite, |x| ≤ 6).
    #[serde(default = "defaults::iq_gain_db")]
    pub iq_gain_db: f64,
    /// IQ phase imbalance, degrees (finite, |x| ≤ 30).
    #[serde(default = "defaults::iq_phase_deg")]
    pub iq_phase_deg: f64,
    /// ADC resolution per branch, bits: 0 for an ideal (unquantised) front end, else 4..=16.
    #[serde(default = "defaults::adc_bits")]
    pub adc_bits: u32,
    /// Signal level at the ADC input below full scale, dB (dBFS: total complex power against a
    /// full-scale complex sinusoid; finite, ≥ 0); an ideal AGC sets it over each record. Also
    /// the full-scale reference of the DC offset.
    #[serde(default = "defaults::adc_backoff_db")]
    pub adc_backoff_db: f64,
    /// A narrowband interferer (`kind = "none"` for none).
    #[serde(default = "defaults::interferer")]
    pub interferer: InterfererSpec,
}

/// `[impairments.interferer]`: a narrowband interferer at the antenna.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct InterfererSpec {
    /// What kind: none, a CW tone, or a band-limited noise burst.
    #[serde(default = "defaults::interferer_kind")]
    pub kind: InterfererKind,
    /// Centre frequency relative to the carrier, Hz (finite, |f| < sample_rate_hz / 2).
    #[serde(default = "defaults::interferer_frequency_hz")]
    pub frequency_hz: f64,
    /// Bandwidth of a noise burst, Hz (finite, > 0, ≤ sample_rate_hz); unused for a tone.
    #[serde(default = "defaults::interferer_bandwidth_hz")]
    pub bandwidth_hz: f64,
    /// Power while on, dB relative to the received signal power (dBc; finite).
    #[serde(default = "defaults::interferer_power_dbc")]
    pub power_dbc: f64,
    /// Fraction of each period the interferer is on (0..=1).
    #[serde(default = "defaults::interferer_duty_cycle")]
    pub duty_cycle: f64,
    /// Period of the on/off pattern, s (finite, > 0).
    #[serde(default = "defaults::interferer_period_s")]
    pub period_s: f64,
}

/// Kind of narrowband interferer.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
pub enum InterfererKind {
    /// No interferer (`"none"`).
    #[serde(rename = "none")]
    None,
    /// A CW tone (`"cw"`).
    #[serde(rename = "cw")]
    Cw,
    /// Gaussian noise over `bandwidth_hz` (`"noise"`).
    #[serde(rename = "noise")]
    Noise,
}

/// `[mcu]`: the target microcontroller, for the real-time budget.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Mcu {
    /// Processor core.
    #[serde(default = "defaults::mcu_core")]
    pub core: McuCore,
    /// Core clock, Hz (finite, > 0).
    #[serde(default = "defaults::clock_hz")]
    pub clock_hz: f64,
    /// Average cycles per instruction (finite, > 0): a stated assumption covering pipeline
    /// effects and flash wait states.
    #[serde(default = "defaults::cycles_per_instruction")]
    pub cycles_per_instruction: f64,
}

/// A modulation by name, as written in scenario files.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
pub enum ModulationName {
    /// Binary phase-shift keying, 1 bit per symbol (`"bpsk"`).
    #[serde(rename = "bpsk")]
    Bpsk,
    /// Quadrature phase-shift keying, 2 bits per symbol (`"qpsk"`).
    #[serde(rename = "qpsk")]
    Qpsk,
    /// Square 16-QAM, 4 bits per symbol (`"16qam"`).
    #[serde(rename = "16qam")]
    Qam16,
    /// Square 64-QAM, 6 bits per symbol (`"64qam"`).
    #[serde(rename = "64qam")]
    Qam64,
    /// Square 256-QAM, 8 bits per symbol (`"256qam"`).
    #[serde(rename = "256qam")]
    Qam256,
}

impl ModulationName {
    /// Every modulation, in increasing order of bits per symbol.
    pub const ALL: [ModulationName; 5] = [
        ModulationName::Bpsk,
        ModulationName::Qpsk,
        ModulationName::Qam16,
        ModulationName::Qam64,
        ModulationName::Qam256,
    ];

    /// Bits carried by one constellation symbol.
    pub const fn bits_per_symbol(self) -> u32 {
        match self {
            ModulationName::Bpsk => 1,
            ModulationName::Qpsk => 2,
            ModulationName::Qam16 => 4,
            ModulationName::Qam64 => 6,
            ModulationName::Qam256 => 8,
        }
    }

    /// Number of constellation points, `2^bits_per_symbol`.
    pub const fn points(self) -> u32 {
        1 << self.bits_per_symbol()
    }

    /// The name used in scenario files.
    pub const fn as_str(self) -> &'static str {
        match self {
            ModulationName::Bpsk => "bpsk",
            ModulationName::Qpsk => "qpsk",
            ModulationName::Qam16 => "16qam",
            ModulationName::Qam64 => "64qam",
            ModulationName::Qam256 => "256qam",
        }
    }

    /// Looks a modulation up by its scenario-file name.
    pub fn from_name(name: &str) -> Option<ModulationName> {
        ModulationName::ALL.into_iter().find(|m| m.as_str() == name)
    }
}

impl fmt::Display for ModulationName {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.as_str())
    }
}

/// Channel model.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
pub enum ChannelProfile {
    /// Additive white Gaussian noise only (`"awgn"`).
    #[serde(rename = "awgn")]
    Awgn,
    /// Taps with an exponentially decaying power-delay profile set by `rms_delay_spread_s`
    /// (`"exponential"`).
    #[serde(rename = "exponential")]
    Exponential,
}

impl ChannelProfile {
    /// The name used in scenario files.
    pub const fn as_str(self) -> &'static str {
        match self {
            ChannelProfile::Awgn => "awgn",
            ChannelProfile::Exponential => "exponential",
        }
    }
}

impl fmt::Display for ChannelProfile {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.as_str())
    }
}

/// Microcontroller core.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
pub enum McuCore {
    /// Arm Cortex-M0 (`"cortex-m0"`).
    #[serde(rename = "cortex-m0")]
    CortexM0,
    /// Arm Cortex-M4 with single-precision FPU (`"cortex-m4f"`).
    #[serde(rename = "cortex-m4f")]
    CortexM4f,
    /// Arm Cortex-M33 (`"cortex-m33"`).
    #[serde(rename = "cortex-m33")]
    CortexM33,
}

impl McuCore {
    /// The name used in scenario files.
    pub const fn as_str(self) -> &'static str {
        match self {
            McuCore::CortexM0 => "cortex-m0",
            McuCore::CortexM4f => "cortex-m4f",
            McuCore::CortexM33 => "cortex-m33",
        }
    }
}

impl fmt::Display for McuCore {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.as_str())
    }
}

// ---------------------------------------------------------------------------------------------
// Derived quantities
// ---------------------------------------------------------------------------------------------

impl Band {
    /// Doppler shift, Hz, seen at carrier `carrier_hz` by a terminal moving at `speed_kmh`
    /// straight towards the other end: `v · fc / c`.
    pub fn doppler_hz(speed_kmh: f64, carrier_hz: f64) -> f64 {
        let speed_m_per_s = speed_kmh / 3.6;
        speed_m_per_s * carrier_hz / SPEED_OF_LIGHT_M_PER_S
    }

    /// Sample period, s.
    pub fn sample_period_s(&self) -> f64 {
        1.0 / self.sample_rate_hz
    }
}

impl Numerology {
    /// Samples per OFDM symbol including the cyclic prefix, `fft_len + cp_len`.
    pub fn symbol_len_samples(&self) -> usize {
        self.fft_len + self.cp_len
    }
}

impl Mcu {
    /// Instructions per second under the stated cycles-per-instruction assumption.
    pub fn instructions_per_second(&self) -> f64 {
        self.clock_hz / self.cycles_per_instruction
    }
}

impl Scenario {
    /// Subcarrier spacing, Hz: `sample_rate_hz / fft_len`.
    pub fn subcarrier_spacing_hz(&self) -> f64 {
        self.band.sample_rate_hz / self.numerology.fft_len as f64
    }

    /// Duration of one OFDM symbol including its cyclic prefix, s.
    pub fn symbol_duration_s(&self) -> f64 {
        self.numerology.symbol_len_samples() as f64 / self.band.sample_rate_hz
    }

    /// Duration of the cyclic prefix, s.
    pub fn cp_duration_s(&self) -> f64 {
        self.numerology.cp_len as f64 / self.band.sample_rate_hz
    }

    /// RMS delay spread expressed in samples.
    pub fn rms_delay_spread_samples(&self) -> f64 {
        self.channel.rms_delay_spread_s * self.band.sample_rate_hz
    }

    /// Maximum Doppler shift, Hz, at `channel.max_speed_kmh` and `band.carrier_hz`.
    pub fn max_doppler_hz(&self) -> f64 {
        Band::doppler_hz(self.channel.max_speed_kmh, self.band.carrier_hz)
    }

    /// Maximum Doppler shift as a fraction of the subcarrier spacing.
    pub fn normalised_max_doppler(&self) -> f64 {
        self.max_doppler_hz() / self.subcarrier_spacing_hz()
    }

    /// Core clock cycles available per OFDM symbol if the receiver is to keep up in real time.
    pub fn mcu_cycles_per_symbol(&self) -> f64 {
        self.mcu.clock_hz * self.symbol_duration_s()
    }
}

// ---------------------------------------------------------------------------------------------
// Defaults, taken from the default file
// ---------------------------------------------------------------------------------------------

static DEFAULT_SCENARIO: OnceLock<Scenario> = OnceLock::new();

thread_local! {
    /// Set while this thread parses the default file itself: any key that falls back to a
    /// default then is a key missing from the default file.
    static PARSING_DEFAULT: Cell<bool> = const { Cell::new(false) };
}

/// Clears [`PARSING_DEFAULT`] on drop, also when the parse panics.
struct ParsingDefaultGuard;

impl ParsingDefaultGuard {
    fn enter() -> ParsingDefaultGuard {
        PARSING_DEFAULT.with(|flag| flag.set(true));
        ParsingDefaultGuard
    }
}

impl Drop for ParsingDefaultGuard {
    fn drop(&mut self) {
        PARSING_DEFAULT.with(|flag| flag.set(false));
    }
}

/// The parsed default scenario; `key` names the key being defaulted, for the panic message.
fn base(key: &str) -> &'static Scenario {
    assert!(
        !PARSING_DEFAULT.with(Cell::get),
        "{DEFAULT_SCENARIO_ORIGIN} must give every key, but it leaves out `{key}`"
    );
    DEFAULT_SCENARIO.get_or_init(|| {
        let _guard = ParsingDefaultGuard::enter();
        match Scenario::from_toml_str(DEFAULT_SCENARIO_TOML, DEFAULT_SCENARIO_ORIGIN) {
            Ok(scenario) => scenario,
            Err(err) => panic!("the built-in default scenario is invalid: {err}"),
        }
    })
}

/// `#[serde(default = ...)]` functions: each returns the default file's value of one key.
mod defaults {
    use super::*;

    macro_rules! from_default_file {
        ($($fn_name:ident: $ty:ty = $($field:ident).+;)*) => {$(
            pub(super) fn $fn_name() -> $ty {
                base(stringify!($($field).+)).$($field).+.clone()
            }
        )*};
    }

    from_default_file! {
        name: String = name;
        seed: u64 = seed;
        band: Band = band;
        numerology: Numerology = numerology;
        link: Link = link;
        channel: Channel = channel;
        impairments: Impairments = impairments;
        mcu: Mcu = mcu;

        sample_rate_hz: f64 = band.sample_rate_hz;
        carrier_hz: f64 = band.carrier_hz;

        fft_len: usize = numerology.fft_len;
        cp_len: usize = numerology.cp_len;
        guard_low_bins: usize = numerology.guard_low_bins;
        guard_high_bins: usize = numerology.guard_high_bins;
        dc_null: bool = numerology.dc_null;
        pilot_spacing: usize = numerology.pilot_spacing;
        pilot_offset: usize = numerology.pilot_offset;
        pilot_shift_per_symbol: usize = numerology.pilot_shift_per_symbol;
        pilot_last_bin: bool = numerology.pilot_last_bin;
        pilot_boost_db: f64 = numerology.pilot_boost_db;
        pilot_seed: u16 = numerology.pilot_seed;

        modulations: Vec<ModulationName> = link.modulations;
        es_n0_db: Vec<f64> = link.es_n0_db;
        symbols_per_frame: usize = link.symbols_per_frame;
        min_errors: u64 = link.min_errors;
        max_bits: u64 = link.max_bits;

        profile: ChannelProfile = channel.profile;
        rms_delay_spread_s: f64 = channel.rms_delay_spread_s;
        max_speed_kmh: f64 = channel.max_speed_kmh;

        cfo_hz: f64 = impairments.cfo_hz;
        sco_ppm: f64 = impairments.sco_ppm;
        timing_offset_samples: f64 = impairments.timing_offset_samples;
        phase_noise_linewidth_hz: f64 = impairments.phase_noise_linewidth_hz;
        dc_offset_i: f64 = impairments.dc_offset_i;
        dc_offset_q: f64 = impairments.dc_offset_q;
        iq_gain_db: f64 = impairments.iq_gain_db;
        iq_phase_deg: f64 = impairments.iq_phase_deg;
        adc_bits: u32 = impairments.adc_bits;
        adc_backoff_db: f64 = impairments.adc_backoff_db;
        interferer: InterfererSpec = impairments.interferer;
        interferer_kind: InterfererKind = impairments.interferer.kind;
        interferer_frequency_hz: f64 = impairments.interferer.frequency_hz;
        interferer_bandwidth_hz: f64 = impairments.interferer.bandwidth_hz;
        interferer_power_dbc: f64 = impairments.interferer.power_dbc;
        interferer_duty_cycle: f64 = impairments.interferer.duty_cycle;
        interferer_period_s: f64 = impairments.interferer.period_s;

        mcu_core: McuCore = mcu.core;
        clock_hz: f64 = mcu.clock_hz;
        cycles_per_instruction: f64 = mcu.cycles_per_instruction;
    }
}

/// The `[band]` of the default scenario.
impl Default for Band {
    fn default() -> Self {
        defaults::band()
    }
}

/// The `[numerology]` of the default scenario.
impl Default for Numerology {
    fn default() -> Self {
        defaults::numerology()
    }
}

/// The `[link]` of the default scenario.
impl Default for Link {
    fn default() -> Self {
        defaults::link()
    }
}

/// The `[channel]` of the default scenario.
impl Default for Channel {
    fn default() -> Self {
        defaults::channel()
    }
}

/// The `[impairments]` of the default scenario.
impl Default for Impairments {
    fn default() -> Self {
        defaults::impairments()
    }
}

/// The `[mcu]` of the default scenario.
impl Default for Mcu {
    fn default() -> Self {
        defaults::mcu()
    }
}

/// [`Scenario::default_scenario`].
impl Default for Scenario {
    fn default() -> Self {
        Scenario::default_scenario()
    }
}

// ---------------------------------------------------------------------------------------------
// Loading, validation, writing
// ---------------------------------------------------------------------------------------------

impl Scenario {
    /// The built-in default scenario, parsed from `harness/scenarios/default.toml`.
    ///
    /// # Panics
    ///
    /// Panics if the built-in file is invalid or leaves out a key; a unit test guards both.
    pub fn default_scenario() -> Scenario {
        base("(whole scenario)").clone()
    }

    /// Parses and validates a scenario from TOML text. `origin` names the text in errors,
    /// usually the file path.
    pub fn from_toml_str(text: &str, origin: &str) -> Result<Scenario, ScenarioError> {
        // Parse the document on its own first, so syntax errors are told apart from schema
        // errors (unknown keys, wrong types), which the typed parse below reports.
        if let Err(err) = DeTable::parse(text) {
            return Err(ScenarioError::from_toml(
                origin,
                text,
                &err,
                ScenarioErrorKind::Syntax,
            ));
        }
        let scenario: Scenario = toml::from_str(text).map_err(|err| {
            ScenarioError::from_toml(origin, text, &err, ScenarioErrorKind::Schema)
        })?;
        scenario
            .validate()
            .map_err(|invalid| ScenarioError::from_invalid(origin, text, &invalid))?;
        Ok(scenario)
    }

    /// Reads, parses and validates a scenario file. Errors name the file by `path`.
    pub fn from_file(path: &Path) -> Result<Scenario, ScenarioError> {
        Scenario::from_file_with_text(path).map(|(scenario, _text)| scenario)
    }

    /// Like [`Scenario::from_file`], also returning the file's text so that later checks can
    /// place their errors in it with [`ScenarioError::at_key`].
    pub fn from_file_with_text(path: &Path) -> Result<(Scenario, String), ScenarioError> {
        let origin = path.display().to_string();
        let text = std::fs::read_to_string(path).map_err(|err| ScenarioError {
            origin: origin.clone(),
            kind: ScenarioErrorKind::Io,
            location: None,
            span: None,
            message: format!("cannot read scenario file: {err}"),
        })?;
        let scenario = Scenario::from_toml_str(&text, &origin)?;
        Ok((scenario, text))
    }

    /// Writes the scenario as TOML that [`Scenario::from_toml_str`] reads back to an equal
    /// scenario (comments are not kept).
    ///
    /// # Panics
    ///
    /// Never in practice: every field is a plain TOML value, which always serialises.
    pub fn to_toml_string(&self) -> String {
        toml::to_string_pretty(self).expect("a scenario is always representable as TOML")
    }

    /// Checks every value on its own terms (ranges, finiteness, non-empty lists) and a few
    /// cross-key rules (`cp_len < fft_len`, `|cfo_hz| < sample_rate_hz / 2`). Guard and pilot
    /// layout is left to the core crate.
    ///
    /// Returns the first problem found, naming the offending key by dotted path.
    pub fn validate(&self) -> Result<(), InvalidValue> {
        let name = &self.name;
        check(!name.trim().is_empty(), &["name"], || {
            "name must not be empty".to_owned()
        })?;

        let band = &self.band;
        check(
            band.sample_rate_hz.is_finite() && band.sample_rate_hz > 0.0,
            &["band.sample_rate_hz"],
            || {
                format!(
                    "sample_rate_hz must be finite and > 0, got {}",
                    band.sample_rate_hz
                )
            },
        )?;
        check(
            band.carrier_hz.is_finite() && band.carrier_hz > 0.0,
            &["band.carrier_hz"],
            || format!("carrier_hz must be finite and > 0, got {}", band.carrier_hz),
        )?;

        let num = &self.numerology;
        check(
            num.fft_len.is_power_of_two() && (MIN_FFT_LEN..=MAX_FFT_LEN).contains(&num.fft_len),
            &["numerology.fft_len"],
            || {
                format!(
                    "fft_len must be a power of two in {MIN_FFT_LEN}..={MAX_FFT_LEN}, got {}",
                    num.fft_len
                )
            },
        )?;
        // Blame cp_len if the file gives it, else fft_len (the default cp_len is fine on its own).
        check(
            num.cp_len < num.fft_len,
            &["numerology.cp_len", "numerology.fft_len"],
            || {
                format!(
                    "cp_len must be less than fft_len ({}), got {}",
                    num.fft_len, num.cp_len
                )
            },
        )?;
        check(
            num.pilot_spacing >= 1,
            &["numerology.pilot_spacing"],
            || "pilot_spacing must be at least 1, got 0".to_owned(),
        )?;
        check(
            num.pilot_boost_db.is_finite(),
            &["numerology.pilot_boost_db"],
            || format!("pilot_boost_db must be finite, got {}", num.pilot_boost_db),
        )?;
        check(num.pilot_seed != 0, &["numerology.pilot_seed"], || {
            "pilot_seed must be nonzero (a PRBS seeded with 0 stays 0)".to_owned()
        })?;

        let link = &self.link;
        check(!link.modulations.is_empty(), &["link.modulations"], || {
            "modulations must list at least one modulation".to_owned()
        })?;
        for (i, m) in link.modulations.iter().enumerate() {
            let repeated = link.modulations[..i].contains(m);
            check(!repeated, &[&format!("link.modulations.{i}")], || {
                format!("modulation `{m}` is listed twice")
            })?;
        }
        check(!link.es_n0_db.is_empty(), &["link.es_n0_db"], || {
            "es_n0_db must list at least one point".to_owned()
        })?;
        for (i, x) in link.es_n0_db.iter().enumerate() {
            check(x.is_finite(), &[&format!("link.es_n0_db.{i}")], || {
                format!("es_n0_db points must be finite, got {x}")
            })?;
        }
        check(
            link.symbols_per_frame >= 1,
            &["link.symbols_per_frame"],
            || "symbols_per_frame must be at least 1, got 0".to_owned(),
        )?;
        check(link.min_errors >= 1, &["link.min_errors"], || {
            "min_errors must be at least 1, got 0".to_owned()
        })?;
        check(link.max_bits >= 1, &["link.max_bits"], || {
            "max_bits must be at least 1, got 0".to_owned()
        })?;

        let ch = &self.channel;
        check(
            ch.rms_delay_spread_s.is_finite() && ch.rms_delay_spread_s >= 0.0,
            &["channel.rms_delay_spread_s"],
            || {
                format!(
                    "rms_delay_spread_s must be finite and >= 0, got {}",
                    ch.rms_delay_spread_s
                )
            },
        )?;
        check(
            ch.max_speed_kmh.is_finite() && ch.max_speed_kmh >= 0.0,
            &["channel.max_speed_kmh"],
            || {
                format!(
                    "max_speed_kmh must be finite and >= 0, got {}",
                    ch.max_speed_kmh
                )
            },
        )?;

        let imp = &self.impairments;
        check(imp.cfo_hz.is_finite(), &["impairments.cfo_hz"], || {
            format!("cfo_hz must be finite, got {}", imp.cfo_hz)
        })?;
        check(
            imp.cfo_hz.abs() < band.sample_rate_hz / 2.0,
            &["impairments.cfo_hz", "band.sample_rate_hz"],
            || {
                format!(
                    "|cfo_hz| must be less than half the sample rate ({} Hz), got {}",
                    band.sample_rate_hz / 2.0,
                    imp.cfo_hz
                )
            },
        )?;
        check(imp.sco_ppm.is_finite(), &["impairments.sco_ppm"], || {
            format!("sco_ppm must be finite, got {}", imp.sco_ppm)
        })?;
        let in_range = |v: f64, lo: f64, hi: f64| v.is_finite() && v >= lo && v <= hi;
        let range_rules: [(&str, f64, f64, f64); 7] = [
            (
                "timing_offset_samples",
                imp.timing_offset_samples,
                -1e6,
                1e6,
            ),
            (
                "phase_noise_linewidth_hz",
                imp.phase_noise_linewidth_hz,
                0.0,
                f64::MAX,
            ),
            ("dc_offset_i", imp.dc_offset_i, -0.999_999, 0.999_999),
            ("dc_offset_q", imp.dc_offset_q, -0.999_999, 0.999_999),
            ("iq_gain_db", imp.iq_gain_db, -6.0, 6.0),
            ("iq_phase_deg", imp.iq_phase_deg, -30.0, 30.0),
            ("adc_backoff_db", imp.adc_backoff_db, 0.0, 100.0),
        ];
        for (key, v, lo, hi) in range_rules {
            let path = format!("impairments.{key}");
            check(in_range(v, lo, hi), &[&path], || {
                let hi = if hi == f64::MAX {
                    "∞".to_owned()
                } else {
                    hi.to_string()
                };
                format!("{key} must be finite and in {lo}..={hi}, got {v}")
            })?;
        }
        check(
            imp.adc_bits == 0 || (4..=16).contains(&imp.adc_bits),
            &["impairments.adc_bits"],
            || format!("adc_bits must be 0 (ideal) or 4..=16, got {}", imp.adc_bits),
        )?;
        let intf = &imp.interferer;
        // Frequency and bandwidth are checked against the band only when they are used.
        let used = intf.kind != InterfererKind::None;
        let noise = intf.kind == InterfererKind::Noise;
        check(
            !used
                || (intf.frequency_hz.is_finite()
                    && intf.frequency_hz.abs() < band.sample_rate_hz / 2.0),
            &["impairments.interferer.frequency_hz", "band.sample_rate_hz"],
            || {
                format!(
                    "|frequency_hz| must be less than half the sample rate ({} Hz), got {}",
                    band.sample_rate_hz / 2.0,
                    intf.frequency_hz
                )
            },
        )?;
        check(
            !noise
                || (intf.bandwidth_hz.is_finite()
                    && intf.bandwidth_hz > 0.0
                    && intf.bandwidth_hz <= band.sample_rate_hz),
            &["impairments.interferer.bandwidth_hz", "band.sample_rate_hz"],
            || {
                format!(
                    "bandwidth_hz must be > 0 and at most the sample rate ({} Hz), got {}",
                    band.sample_rate_hz, intf.bandwidth_hz
                )
            },
        )?;
        check(
            intf.power_dbc.is_finite(),
            &["impairments.interferer.power_dbc"],
            || format!("power_dbc must be finite, got {}", intf.power_dbc),
        )?;
        check(
            in_range(intf.duty_cycle, 0.0, 1.0),
            &["impairments.interferer.duty_cycle"],
            || format!("duty_cycle must be in 0..=1, got {}", intf.duty_cycle),
        )?;
        check(
            intf.period_s.is_finite() && intf.period_s > 0.0,
            &["impairments.interferer.period_s"],
            || format!("period_s must be finite and > 0, got {}", intf.period_s),
        )?;

        let mcu = &self.mcu;
        check(
            mcu.clock_hz.is_finite() && mcu.clock_hz > 0.0,
            &["mcu.clock_hz"],
            || format!("clock_hz must be finite and > 0, got {}", mcu.clock_hz),
        )?;
        check(
            mcu.cycles_per_instruction.is_finite() && mcu.cycles_per_instruction > 0.0,
            &["mcu.cycles_per_instruction"],
            || {
                format!(
                    "cycles_per_instruction must be finite and > 0, got {}",
                    mcu.cycles_per_instruction
                )
            },
        )?;
        Ok(())
    }
}

fn check(ok: bool, keys: &[&str], message: impl FnOnce() -> String) -> Result<(), InvalidValue> {
    if ok {
        Ok(())
    } else {
        Err(InvalidValue {
            keys: keys.iter().map(|k| (*k).to_owned()).collect(),
            message: message(),
        })
    }
}

/// A value that [`Scenario::validate`] rejects, before it is placed in a file.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct InvalidValue {
    /// Dotted key paths to blame, most specific first (array elements by index, e.g.
    /// `link.es_n0_db.3`). The error points at the first one the file actually spells.
    pub keys: Vec<String>,
    /// What is wrong.
    pub message: String,
}

impl fmt::Display for InvalidValue {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&self.message)
    }
}

impl std::error::Error for InvalidValue {}

// ---------------------------------------------------------------------------------------------
// Errors
// ---------------------------------------------------------------------------------------------

/// What kind of problem a [`ScenarioError`] reports.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum ScenarioErrorKind {
    /// The file could not be read.
    Io,
    /// The text is not valid TOML (includes duplicate keys).
    Syntax,
    /// Valid TOML that does not fit the scenario schema: unknown key or section, wrong type,
    /// unknown enum name, integer out of range for its type.
    Schema,
    /// A value of the right type but out of range or inconsistent with another.
    Value,
}

/// 1-based line and column in a text. Columns count Unicode scalar values (a tab counts 1).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub struct Location {
    /// 1-based line.
    pub line: usize,
    /// 1-based column.
    pub column: usize,
}

impl Location {
    /// The location of byte offset `offset` in `text`; offsets past the end or inside a
    /// character are moved back to the nearest character boundary.
    pub fn of_offset(text: &str, offset: usize) -> Location {
        let mut offset = offset.min(text.len());
        while !text.is_char_boundary(offset) {
            offset -= 1;
        }
        let before = &text[..offset];
        let line_start = before.rfind('\n').map_or(0, |i| i + 1);
        Location {
            line: before.matches('\n').count() + 1,
            column: before[line_start..].chars().count() + 1,
        }
    }
}

impl fmt::Display for Location {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}:{}", self.line, self.column)
    }
}

/// An error reading a scenario: the origin (file name), the position of the offending text
/// (absent only for I/O errors and for [`ScenarioError::at_key`] on a key the file lacks) and a
/// message. Displays as `origin:line:column: message`.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct ScenarioError {
    origin: String,
    kind: ScenarioErrorKind,
    location: Option<Location>,
    span: Option<Range<usize>>,
    message: String,
}

impl ScenarioError {
    /// An error about the key at dotted path `key_path` in the scenario text `text` from
    /// `origin`, placed at the key's value: for a section such as `"numerology"` that is its
    /// `[numerology]` header; for an array element (`"link.es_n0_db.2"`) the element. If the
    /// file does not spell the key, the error goes to the nearest enclosing section the file
    /// does spell, else it carries no position. Meant for checks made after loading, e.g. the
    /// core crate's numerology validation. The kind is [`ScenarioErrorKind::Value`].
    pub fn at_key(
        origin: &str,
        text: &str,
        key_path: &str,
        message: impl Into<String>,
    ) -> ScenarioError {
        ScenarioError::at_first_key(origin, text, &[key_path], message.into())
    }

    /// Places a [`Scenario::validate`] failure in the text it was loaded from.
    pub fn from_invalid(origin: &str, text: &str, invalid: &InvalidValue) -> ScenarioError {
        let keys: Vec<&str> = invalid.keys.iter().map(String::as_str).collect();
        ScenarioError::at_first_key(origin, text, &keys, invalid.message.clone())
    }

    fn at_first_key(origin: &str, text: &str, keys: &[&str], message: String) -> ScenarioError {
        let span = locate_first(text, keys);
        ScenarioError {
            origin: origin.to_owned(),
            kind: ScenarioErrorKind::Value,
            location: span.as_ref().map(|s| Location::of_offset(text, s.start)),
            span,
            message,
        }
    }

    fn from_toml(
        origin: &str,
        text: &str,
        err: &toml::de::Error,
        kind: ScenarioErrorKind,
    ) -> ScenarioError {
        let span = err.span();
        let raw = err.message().trim_end();
        let mut message = match raw.strip_prefix("unknown field ") {
            Some(rest) => format!("unknown key {rest}"),
            None => raw.to_owned(),
        };
        if message == "duplicate key" {
            if let Some(key) = span.as_ref().and_then(|s| text.get(s.clone())) {
                message = format!("duplicate key `{key}`");
            }
        }
        // Say what serde's Rust type names mean in TOML terms.
        for (rust, toml_terms) in [
            ("expected usize", "expected a non-negative integer"),
            ("expected u64", "expected a non-negative integer"),
            ("expected u16", "expected an integer in 0..=65535"),
            ("expected f64", "expected a number"),
        ] {
            if let Some(head) = message.strip_suffix(rust) {
                message = format!("{head}{toml_terms}");
            }
        }
        if let Some(at) = message.find("expected struct ") {
            message.replace_range(at.., "expected a table");
        }
        ScenarioError {
            origin: origin.to_owned(),
            kind,
            location: span.as_ref().map(|s| Location::of_offset(text, s.start)),
            span,
            message,
        }
    }

    /// The file name or other origin the error is about.
    pub fn origin(&self) -> &str {
        &self.origin
    }

    /// What kind of problem this is.
    pub fn kind(&self) -> ScenarioErrorKind {
        self.kind
    }

    /// 1-based line and column of the offending text, if known.
    pub fn location(&self) -> Option<Location> {
        self.location
    }

    /// 1-based line of the offending text, if known.
    pub fn line(&self) -> Option<usize> {
        self.location.map(|l| l.line)
    }

    /// 1-based column of the offending text, if known.
    pub fn column(&self) -> Option<usize> {
        self.location.map(|l| l.column)
    }

    /// Byte range of the offending text, if known.
    pub fn span(&self) -> Option<Range<usize>> {
        self.span.clone()
    }

    /// The message, without origin or position.
    pub fn message(&self) -> &str {
        &self.message
    }
}

impl fmt::Display for ScenarioError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self.location {
            Some(loc) => write!(f, "{}:{}: {}", self.origin, loc, self.message),
            None => write!(f, "{}: {}", self.origin, self.message),
        }
    }
}

impl std::error::Error for ScenarioError {}

/// Span of the value at the first of `keys` that `text` spells; failing all, of the nearest
/// enclosing table of the first key that it spells.
fn locate_first(text: &str, keys: &[&str]) -> Option<Range<usize>> {
    let doc = DeTable::parse(text).ok()?;
    if let Some(span) = keys.iter().find_map(|k| locate(doc.get_ref(), k)) {
        return Some(span);
    }
    let first = keys.first()?;
    let mut prefix = *first;
    while let Some((parent, _)) = prefix.rsplit_once('.') {
        if let Some(span) = locate(doc.get_ref(), parent) {
            return Some(span);
        }
        prefix = parent;
    }
    None
}

/// Span of the value at dotted path `path` in `table` (numeric segments index arrays).
fn locate(table: &DeTable<'_>, path: &str) -> Option<Range<usize>> {
    let mut segments = path.split('.');
    let mut value: &Spanned<DeValue<'_>> = table.get(segments.next()?)?;
    for segment in segments {
        value = match value.get_ref() {
            DeValue::Table(t) => t.get(segment)?,
            DeValue::Array(a) => a.get(segment.parse::<usize>().ok()?)?,
            _ => return None,
        };
    }
    Some(value.span())
}

// ---------------------------------------------------------------------------------------------
// Tests
// ---------------------------------------------------------------------------------------------

#[cfg(test)]
mod tests {
    use super::*;

    const ORIGIN: &str = "scenarios/x.toml";

    fn parse(text: &str) -> Result<Scenario, ScenarioError> {
        Scenario::from_toml_str(text, ORIGIN)
    }

    /// Parses `text`, expects an error and returns it with its `line:column`.
    fn err_at(text: &str) -> (ScenarioError, String) {
        let err = match parse(text) {
            Ok(s) => panic!("expected an error, parsed {s:?}"),
            Err(e) => e,
        };
        let loc = err
            .location()
            .unwrap_or_else(|| panic!("error without position: {err}"))
            .to_string();
        (err, loc)
    }

    #[test]
    fn default_file_parses_with_expected_values() {
        let s = Scenario::default_scenario();
        assert_eq!(s.name, "freight-wagon telemetry node (invented demo)");
        assert_eq!(s.seed, 1);
        assert_eq!(s.band.sample_rate_hz, 250_000.0);
        assert_eq!(s.band.carrier_hz, 915.0e6);
        assert_eq!(s.numerology.fft_len, 64);
        assert_eq!(s.numerology.cp_len, 8);
        assert_eq!(s.numerology.guard_low_bins, 4);
        assert_eq!(s.numerology.guard_high_bins, 3);
        assert!(s.numerology.dc_null);
        assert_eq!(s.numerology.pilot_spacing, 4);
        assert!(s.numerology.pilot_last_bin);
        assert_eq!(s.numerology.pilot_seed, 0x1d5);
        assert_eq!(s.link.modulations, ModulationName::ALL.to_vec());
        assert_eq!(s.link.es_n0_db.len(), 8);
        assert_eq!(s.link.es_n0_db[7], 28.0);
        assert_eq!(s.link.min_errors, 200);
        assert_eq!(s.link.max_bits, 2_000_000);
        assert_eq!(s.channel.profile, ChannelProfile::Exponential);
        assert_eq!(s.channel.max_speed_kmh, 120.0);
        assert_eq!(s.mcu.core, McuCore::CortexM4f);
        assert_eq!(s.mcu.cycles_per_instruction, 1.25);
        assert_eq!(Scenario::default(), s);
    }

    #[test]
    fn default_round_trips_through_toml() {
        let s = Scenario::default_scenario();
        let text = s.to_toml_string();
        let back = Scenario::from_toml_str(&text, "written").unwrap();
        assert_eq!(back, s);
    }

    /// Collects `section.key` paths of a TOML table, one level of nesting deep.
    fn key_paths(table: &toml::Table) -> Vec<String> {
        let mut out = Vec::new();
        for (k, v) in table {
            match v {
                toml::Value::Table(t) => {
                    out.extend(key_paths(t).iter().map(|k2| format!("{k}.{k2}")))
                }
                _ => out.push(k.clone()),
            }
        }
        out.sort();
        out
    }

    #[test]
    fn default_file_spells_every_key() {
        // The file is the source of every default, so it must give every key the type has.
        let written: toml::Table = toml::from_str(&Scenario::default().to_toml_string()).unwrap();
        let file: toml::Table = toml::from_str(DEFAULT_SCENARIO_TOML).unwrap();
        assert_eq!(key_paths(&file), key_paths(&written));
        assert_eq!(key_paths(&written).len(), 2 + 2 + 11 + 5 + 3 + (10 + 6) + 3);
    }

    #[test]
    fn partial_file_takes_defaults() {
        let s = parse("[numerology]\nfft_len = 256\n").unwrap();
        let mut expected = Scenario::default_scenario();
        assert_ne!(expected.numerology.fft_len, 256);
        expected.numerology.fft_len = 256;
        assert_eq!(s, expected);

        // An empty file is the default scenario.
        assert_eq!(parse("").unwrap(), Scenario::default_scenario());
    }

    #[test]
    fn unknown_key_is_located() {
        let text = "name = \"t\"\n\n[numerology]\nfft_len = 64\n  fft_size = 32\n";
        // line 5: `  fft_size = 32`, the key starts in column 3.
        let (err, loc) = err_at(text);
        assert_eq!(loc, "5:3");
        assert_eq!(err.kind(), ScenarioErrorKind::Schema);
        assert!(
            err.message()
                .starts_with("unknown key `fft_size`, expected one of"),
            "{err}"
        );
        assert!(err.message().contains("`fft_len`"), "{err}");
        assert!(
            err.to_string()
                .starts_with("scenarios/x.toml:5:3: unknown key `fft_size`"),
            "{err}"
        );
    }

    #[test]
    fn unknown_section_is_located() {
        let (err, loc) = err_at("seed = 3\n[numerics]\nfft_len = 64\n");
        // line 2: `[numerics]`, the name starts in column 2.
        assert_eq!(loc, "2:2");
        assert_eq!(err.kind(), ScenarioErrorKind::Schema);
        assert!(err.message().starts_with("unknown key `numerics`"), "{err}");
    }

    #[test]
    fn syntax_error_is_located() {
        let text = "seed = 1\n[band]\nsample_rate_hz = 1e6\ncarrier_hz = = 2.4e9\n";
        let (err, loc) = err_at(text);
        assert_eq!(err.kind(), ScenarioErrorKind::Syntax);
        assert_eq!(err.line(), Some(4), "{err}");
        // `carrier_hz = = 2.4e9`: the stray `=` is column 14.
        assert_eq!(loc, "4:14", "{err}");
    }

    #[test]
    fn duplicate_key_is_a_syntax_error() {
        let (err, loc) = err_at("[link]\nmin_errors = 5\nmin_errors = 6\n");
        assert_eq!(err.kind(), ScenarioErrorKind::Syntax);
        assert_eq!(loc, "3:1");
        assert_eq!(err.message(), "duplicate key `min_errors`");
    }

    #[test]
    fn wrong_type_is_located() {
        let text = "[numerology]\ncp_len = 4\nfft_len = \"64\"\n";
        // line 3: `fft_len = "64"`, the value starts in column 11.
        let (err, loc) = err_at(text);
        assert_eq!(loc, "3:11");
        assert_eq!(err.kind(), ScenarioErrorKind::Schema);
        assert_eq!(
            err.message(),
            "invalid type: string \"64\", expected a non-negative integer"
        );
        let (err, loc) = err_at("seed = 1\nnumerology = 5\n");
        assert_eq!(loc, "2:14");
        assert_eq!(err.message(), "invalid type: integer `5`, expected a table");
    }

    #[test]
    fn integer_out_of_type_range_is_located() {
        let (err, loc) = err_at("[numerology]\npilot_seed = 70000\n");
        assert_eq!(loc, "2:14");
        assert!(
            err.message().ends_with("expected an integer in 0..=65535"),
            "{err}"
        );
        assert_eq!(err.kind(), ScenarioErrorKind::Schema);
        let (_, loc) = err_at("[link]\nmin_errors = -1\n");
        assert_eq!(loc, "2:14");
    }

    #[test]
    fn fft_len_not_power_of_two_is_located() {
        let (err, loc) = err_at("seed = 2\n[numerology]\nfft_len = 100\n");
        assert_eq!(loc, "3:11");
        assert_eq!(err.kind(), ScenarioErrorKind::Value);
        assert!(err.message().contains("power of two"), "{err}");
        // Powers of two outside the range are rejected too, in either direction.
        assert_eq!(err_at("[numerology]\nfft_len = 8\n").1, "2:11");
        assert_eq!(err_at("[numerology]\nfft_len = 8192\n").1, "2:11");
        assert!(parse("[numerology]\nfft_len = 16\n").is_ok());
        assert!(parse("[numerology]\nfft_len = 4096\n").is_ok());
    }

    #[test]
    fn cp_len_not_below_fft_len_is_located() {
        let text = "[numerology]\nfft_len = 64\ncp_len   = 64\n";
        // line 3: `cp_len   = 64`, the value starts in column 12.
        let (err, loc) = err_at(text);
        assert_eq!(loc, "3:12");
        assert!(
            err.message().contains("cp_len must be less than fft_len"),
            "{err}"
        );
        assert!(parse("[numerology]\nfft_len = 64\ncp_len = 63\n").is_ok());
    }

    #[test]
    fn negative_sample_rate_is_located() {
        let text = "name = \"n\"\n[band]\ncarrier_hz = 2.4e9\nsample_rate_hz = -1\n";
        let (err, loc) = err_at(text);
        assert_eq!(loc, "4:18");
        assert_eq!(err.kind(), ScenarioErrorKind::Value);
        assert!(
            err.message()
                .contains("sample_rate_hz must be finite and > 0"),
            "{err}"
        );
        assert_eq!(
            err.to_string(),
            "scenarios/x.toml:4:18: sample_rate_hz must be finite and > 0, got -1"
        );
    }

    #[test]
    fn non_finite_float_is_located() {
        let (_, loc) = err_at("[band]\nsample_rate_hz = inf\n");
        assert_eq!(loc, "2:18");
        let (err, loc) = err_at("[link]\nes_n0_db = [0.0, 3.0, nan]\n");
        // The third element: `es_n0_db = [0.0, 3.0, nan]` has `nan` at column 23.
        assert_eq!(loc, "2:23");
        assert!(err.message().contains("finite"), "{err}");
    }

    #[test]
    fn empty_modulations_is_located() {
        let (err, loc) = err_at("[link]\nmodulations = []\n");
        assert_eq!(loc, "2:15");
        assert!(err.message().contains("at least one modulation"), "{err}");
    }

    #[test]
    fn unknown_modulation_is_located() {
        let text = "[link]\nmodulations = [\"qpsk\",\n  \"8psk\"]\n";
        // line 3: `  "8psk"]`, the string starts in column 3.
        let (err, loc) = err_at(text);
        assert_eq!(loc, "3:3");
        assert_eq!(err.kind(), ScenarioErrorKind::Schema);
        assert!(err.message().contains("unknown variant `8psk`"), "{err}");
    }

    #[test]
    fn repeated_modulation_is_located() {
        let (err, loc) = err_at("[link]\nmodulations = [\"qpsk\", \"bpsk\", \"qpsk\"]\n");
        // The second "qpsk" starts at column 32.
        assert_eq!(loc, "2:32");
        assert!(err.message().contains("listed twice"), "{err}");
    }

    #[test]
    fn other_value_rules() {
        assert_eq!(err_at("[link]\nmin_errors = 0\n").1, "2:14");
        assert_eq!(err_at("[link]\nmax_bits = 0\n").1, "2:12");
        assert_eq!(err_at("[link]\nsymbols_per_frame = 0\n").1, "2:21");
        assert_eq!(err_at("[link]\nes_n0_db = []\n").1, "2:12");
        assert_eq!(err_at("[numerology]\npilot_seed = 0\n").1, "2:14");
        assert_eq!(err_at("[numerology]\npilot_spacing = 0\n").1, "2:17");
        assert_eq!(err_at("[channel]\nmax_speed_kmh = -5.0\n").1, "2:17");
        assert_eq!(err_at("[channel]\nrms_delay_spread_s = -1e-6\n").1, "2:22");
        assert_eq!(err_at("[mcu]\ncycles_per_instruction = 0.0\n").1, "2:26");
        assert_eq!(err_at("[mcu]\nclock_hz = 0.0\n").1, "2:12");
        assert_eq!(err_at("[band]\ncarrier_hz = 0.0\n").1, "2:14");
        assert_eq!(err_at("name = \"  \"\n").1, "1:8");
    }

    #[test]
    fn impairment_values_are_checked_where_they_are_written() {
        assert_eq!(err_at("[impairments]\nadc_bits = 3\n").1, "2:12");
        assert!(parse("[impairments]\nadc_bits = 12\n").is_ok());
        assert_eq!(err_at("[impairments]\ndc_offset_q = 1.0\n").1, "2:15");
        assert_eq!(err_at("[impairments]\niq_phase_deg = 45.0\n").1, "2:16");
        assert_eq!(
            err_at("[impairments]\nphase_noise_linewidth_hz = -1.0\n").1,
            "2:28"
        );
        let (e, at) = err_at("[impairments.interferer]\nkind = \"tone\"\n");
        assert_eq!(at, "2:8");
        assert!(e.to_string().contains("none"), "{e}");
        // Frequency is checked against the band only when an interferer is switched on.
        let off = "[band]\nsample_rate_hz = 1000.0\n";
        assert!(parse(off).is_ok());
        let on = "[band]\nsample_rate_hz = 1000.0\n[impairments.interferer]\nkind = \"cw\"\nfrequency_hz = 600.0\n";
        assert_eq!(err_at(on).1, "5:16");
        let burst = "[impairments.interferer]\nkind = \"noise\"\nbandwidth_hz = 0.0\n";
        assert_eq!(err_at(burst).1, "3:16");
        assert_eq!(
            err_at("[impairments.interferer]\nduty_cycle = 1.5\n").1,
            "2:14"
        );
    }

    #[test]
    fn cross_key_rule_blames_the_key_the_file_gives() {
        // Default sample rate is 250 kHz, so |cfo| must stay below 125 kHz.
        assert_eq!(err_at("[impairments]\ncfo_hz = -125000.0\n").1, "2:10");
        assert!(parse("[impairments]\ncfo_hz = -124999.0\n").is_ok());
        // Only the sample rate is given: the (default) cfo_hz is fine, nothing to blame.
        assert!(parse("[band]\nsample_rate_hz = 1000.0\n").is_ok());
        // Both given: the cfo is blamed.
        let text = "[band]\nsample_rate_hz = 1000.0\n[impairments]\ncfo_hz = 600.0\n";
        assert_eq!(err_at(text).1, "4:10");
    }

    #[test]
    fn at_key_points_at_table_header_or_value() {
        let text = "seed = 9\n\n[numerology]\nfft_len = 128\n";
        let err = ScenarioError::at_key(ORIGIN, text, "numerology", "guards eat every bin");
        assert_eq!(err.location(), Some(Location { line: 3, column: 1 }));
        assert_eq!(
            err.to_string(),
            "scenarios/x.toml:3:1: guards eat every bin"
        );
        let err = ScenarioError::at_key(ORIGIN, text, "numerology.fft_len", "m");
        assert_eq!(
            err.location(),
            Some(Location {
                line: 4,
                column: 11
            })
        );
        // A key the file leaves out falls back to its section ...
        let err = ScenarioError::at_key(ORIGIN, text, "numerology.guard_low_bins", "m");
        assert_eq!(err.location(), Some(Location { line: 3, column: 1 }));
        // ... and without the section there is no position.
        let err = ScenarioError::at_key(ORIGIN, text, "link.min_errors", "m");
        assert_eq!(err.location(), None);
        assert_eq!(err.to_string(), "scenarios/x.toml: m");
    }

    #[test]
    fn missing_file_names_the_path() {
        let path = Path::new("/nonexistent-flatbin-dir/none.toml");
        let err = Scenario::from_file(path).unwrap_err();
        assert_eq!(err.kind(), ScenarioErrorKind::Io);
        assert_eq!(err.origin(), "/nonexistent-flatbin-dir/none.toml");
        assert!(
            err.to_string()
                .starts_with("/nonexistent-flatbin-dir/none.toml: cannot read"),
            "{err}"
        );
    }

    #[test]
    fn from_file_reads_and_locates() {
        let dir = std::env::temp_dir().join(format!("flatbin-scenario-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let path = dir.join("bad.toml");
        std::fs::write(&path, "[mcu]\ncore = \"cortex-m7\"\n").unwrap();
        let err = Scenario::from_file(&path).unwrap_err();
        std::fs::write(&path, "[mcu]\ncore = \"cortex-m0\"\n").unwrap();
        let (ok, text) = Scenario::from_file_with_text(&path).unwrap();
        std::fs::remove_dir_all(&dir).unwrap();
        assert_eq!(err.origin(), path.display().to_string());
        assert_eq!(err.location(), Some(Location { line: 2, column: 8 }));
        assert_eq!(ok.mcu.core, McuCore::CortexM0);
        assert_eq!(text, "[mcu]\ncore = \"cortex-m0\"\n");
    }

    #[test]
    fn location_counts_characters_not_bytes() {
        let text = "name = \"é\"\nab";
        assert_eq!(
            Location::of_offset(text, 0),
            Location { line: 1, column: 1 }
        );
        // The closing quote is byte 10 (é takes two bytes) but the 10th character.
        assert_eq!(
            Location::of_offset(text, 10),
            Location {
                line: 1,
                column: 10
            }
        );
        assert_eq!(
            Location::of_offset(text, 13),
            Location { line: 2, column: 2 }
        );
        // Past the end and inside a character are clamped.
        assert_eq!(
            Location::of_offset(text, 99),
            Location { line: 2, column: 3 }
        );
        assert_eq!(
            Location::of_offset(text, 9),
            Location { line: 1, column: 9 }
        );
    }

    #[test]
    fn modulation_names_and_bits() {
        let bits: Vec<u32> = ModulationName::ALL
            .iter()
            .map(|m| m.bits_per_symbol())
            .collect();
        assert_eq!(bits, [1, 2, 4, 6, 8]);
        assert_eq!(ModulationName::Qam64.points(), 64);
        for m in ModulationName::ALL {
            assert_eq!(ModulationName::from_name(m.as_str()), Some(m));
            // The serde name is the same as `as_str`.
            let v: toml::Table = toml::from_str(&format!("m = \"{m}\"")).unwrap();
            let back: ModulationName = v["m"].clone().try_into().unwrap();
            assert_eq!(back, m);
        }
        assert_eq!(ModulationName::from_name("8psk"), None);
    }

    #[test]
    fn derived_quantities() {
        let s = Scenario::default_scenario();
        // 120 km/h = 33.33 m/s at 915 MHz: 33.33 * 915e6 / 299792458 = 101.737 Hz.
        assert!(
            (s.max_doppler_hz() - 101.737_049).abs() < 1e-5,
            "{}",
            s.max_doppler_hz()
        );
        assert_eq!(Band::doppler_hz(0.0, 915.0e6), 0.0);
        assert!((Band::doppler_hz(3.6, SPEED_OF_LIGHT_M_PER_S) - 1.0).abs() < 1e-12);
        // 250 kHz / 64 = 3906.25 Hz; symbol = 72 samples = 288 us.
        assert_eq!(s.subcarrier_spacing_hz(), 3906.25);
        assert_eq!(s.numerology.symbol_len_samples(), 72);
        assert!((s.symbol_duration_s() - 288e-6).abs() < 1e-15);
        assert!((s.cp_duration_s() - 32e-6).abs() < 1e-15);
        assert!((s.rms_delay_spread_samples() - 0.25).abs() < 1e-12);
        assert!((s.normalised_max_doppler() - 101.737_049 / 3906.25).abs() < 1e-8);
        // 64 MHz * 288 us = 18432 cycles per symbol; 64e6 / 1.25 = 51.2 M instructions/s.
        assert!((s.mcu_cycles_per_symbol() - 18432.0).abs() < 1e-6);
        assert_eq!(s.mcu.instructions_per_second(), 51.2e6);
    }
}
