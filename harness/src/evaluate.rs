//! The main job, first version: run a scenario's numerology through transmitter → AWGN →
//! receiver for every modulation and Es/N0 point, and set the measured bit error rate beside
//! the published closed form.
//!
//! Assumptions of this version (printed with the results): AWGN only, ideal channel knowledge
//! (H = 1), no synchronisation error, uncoded bits, Es/N0 per data subcarrier with pilots
//! excluded. Later issues add fading, estimation, coding and the link margin.

use anyhow::{Context, Result};
use flatbin::numerology::{NumerologyParams, PilotParams};
use flatbin::{Modulation, Numerology};
use rayon::prelude::*;
use serde::Serialize;

use crate::link::{awgn_errors, ber_tolerance, ErrorCount, StopRule};
use crate::rng::stream_rng;
use crate::scenario::{ModulationName, Scenario, ScenarioError};
use crate::theory::ber::{ber_awgn, db_to_linear, eb_n0_from_es_n0, BER_AWGN_SOURCE};

/// Fewest bit errors before a measured BER is compared with theory (REFERENCES.md: "stop only
/// after at least 100 errors").
pub const MIN_ERRORS_FOR_VERDICT: u64 = 100;

/// Points whose expected error count within `max_bits` is below this are not simulated.
const MIN_EXPECTED_ERRORS: f64 = 10.0;

/// The core modulation of a scenario modulation name.
pub fn core_modulation(name: ModulationName) -> Modulation {
    match name {
        ModulationName::Bpsk => Modulation::Bpsk,
        ModulationName::Qpsk => Modulation::Qpsk,
        ModulationName::Qam16 => Modulation::Qam16,
        ModulationName::Qam64 => Modulation::Qam64,
        ModulationName::Qam256 => Modulation::Qam256,
    }
}

/// The core numerology parameters of a scenario (not yet validated).
pub fn numerology_params(scenario: &Scenario) -> NumerologyParams {
    let n = &scenario.numerology;
    NumerologyParams {
        fft_len: n.fft_len,
        cp_len: n.cp_len,
        sample_rate_hz: scenario.band.sample_rate_hz as f32,
        guard_low_bins: n.guard_low_bins,
        guard_high_bins: n.guard_high_bins,
        dc_null: n.dc_null,
        pilots: PilotParams {
            spacing: n.pilot_spacing,
            offset: n.pilot_offset,
            shift_per_symbol: n.pilot_shift_per_symbol,
            last_bin: n.pilot_last_bin,
            boost_db: n.pilot_boost_db as f32,
            seed: n.pilot_seed,
        },
    }
}

/// Validates the scenario's numerology in the core. A broken layout rule is reported at the
/// `[numerology]` table of `text` (the file the scenario came from, named `origin`).
pub fn numerology_of(
    scenario: &Scenario,
    origin: &str,
    text: &str,
) -> Result<Numerology, ScenarioError> {
    Numerology::new(numerology_params(scenario))
        .map_err(|e| ScenarioError::at_key(origin, text, "numerology", e.to_string()))
}

/// What a measured point is worth.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum Verdict {
    /// Within ±4σ of the closed form after at least 100 errors.
    Agrees,
    /// Outside ±4σ of the closed form after at least 100 errors: the receiver is wrong.
    Disagrees,
    /// Fewer than 100 errors within the bit budget: no verdict.
    TooFewErrors,
    /// The expected BER is too small to measure within the bit budget; not simulated.
    NotSimulated,
}

/// One modulation at one Es/N0.
#[derive(Clone, Debug, Serialize)]
pub struct BerRow {
    /// Modulation name.
    pub modulation: ModulationName,
    /// Es/N0 per data subcarrier, dB.
    pub es_n0_db: f64,
    /// Eb/N0 = Es/N0 / bits per symbol, dB.
    pub eb_n0_db: f64,
    /// Bits and errors counted (zero when not simulated).
    pub count: ErrorCount,
    /// Measured BER.
    pub measured_ber: f64,
    /// Closed-form BER (exact Gray mapping).
    pub theory_ber: f64,
    /// Half-width of the ±4σ acceptance interval around the theory.
    pub tolerance: f64,
    /// Outcome.
    pub verdict: Verdict,
}

/// The AWGN report of a scenario.
#[derive(Clone, Debug, Serialize)]
pub struct AwgnReport {
    /// Scenario name.
    pub scenario: String,
    /// Numerology summary line.
    pub numerology: String,
    /// What the numbers assume.
    pub assumptions: Vec<String>,
    /// The published source of the theory column.
    pub theory_source: String,
    /// One row per modulation and Es/N0.
    pub rows: Vec<BerRow>,
}

impl AwgnReport {
    /// True when every point with a verdict agrees with theory.
    pub fn all_agree(&self) -> bool {
        self.rows.iter().all(|r| r.verdict != Verdict::Disagrees)
    }
}

/// One line describing a numerology (sizes, times, used band).
pub fn describe_numerology(nu: &Numerology) -> String {
    format!(
        "N = {}, CP = {} samples ({:.1} µs), fs = {:.0} Hz, Δf = {:.2} Hz, T = {:.1} µs, \
         Tsym = {:.1} µs, {} used bins per symbol ({} data + {} pilots, boost {:.1} dB)",
        nu.fft_len(),
        nu.cp_len(),
        nu.cp_s() * 1e6,
        nu.sample_rate_hz(),
        nu.subcarrier_spacing_hz(),
        nu.useful_symbol_s() * 1e6,
        nu.symbol_period_s() * 1e6,
        nu.used_len(),
        nu.data_len(0),
        nu.pilot_len(0),
        nu.params().pilots.boost_db,
    )
}

/// Runs every modulation × Es/N0 point of `scenario` over AWGN (parallel; each point's random
/// stream is keyed by the scenario seed and the point index, so results do not depend on the
/// number of threads).
pub fn evaluate_awgn(scenario: &Scenario, numerology: &Numerology) -> Result<AwgnReport> {
    let stop = StopRule {
        min_errors: scenario.link.min_errors,
        max_bits: scenario.link.max_bits,
    };
    let points: Vec<(usize, ModulationName, f64)> = scenario
        .link
        .modulations
        .iter()
        .flat_map(|m| scenario.link.es_n0_db.iter().map(move |e| (*m, *e)))
        .enumerate()
        .map(|(i, (m, e))| (i, m, e))
        .collect();
    let rows = points
        .par_iter()
        .map(|&(index, name, es_n0_db)| -> Result<BerRow> {
            let bps = name.bits_per_symbol();
            let eb_n0 = eb_n0_from_es_n0(db_to_linear(es_n0_db), bps);
            let theory_ber = ber_awgn(bps, eb_n0).context("no closed form for this order")?;
            let (count, verdict) = if theory_ber * (stop.max_bits as f64) < MIN_EXPECTED_ERRORS {
                (
                    ErrorCount {
                        bits: 0,
                        errors: 0,
                        symbols: 0,
                    },
                    Verdict::NotSimulated,
                )
            } else {
                let mut rng = stream_rng(scenario.seed, index as u64);
                let count =
                    awgn_errors(numerology, core_modulation(name), es_n0_db, &mut rng, stop)?;
                let verdict = if count.errors < MIN_ERRORS_FOR_VERDICT {
                    Verdict::TooFewErrors
                } else if (count.ber() - theory_ber).abs() <= ber_tolerance(theory_ber, count.bits)
                {
                    Verdict::Agrees
                } else {
                    Verdict::Disagrees
                };
                (count, verdict)
            };
            Ok(BerRow {
                modulation: name,
                es_n0_db,
                eb_n0_db: 10.0 * eb_n0.log10(),
                count,
                measured_ber: count.ber(),
                theory_ber,
                tolerance: ber_tolerance(theory_ber, count.bits),
                verdict,
            })
        })
        .collect::<Result<Vec<_>>>()?;
    Ok(AwgnReport {
        scenario: scenario.name.clone(),
        numerology: describe_numerology(numerology),
        assumptions: vec![
            "channel: AWGN only, ideal channel knowledge (H = 1), perfect timing and frequency".into(),
            "SNR: Es/N0 per data subcarrier, unit-energy data symbols; pilots and their boost excluded; \
             Eb/N0 = Es/N0 / bits per symbol"
                .into(),
            "bits: uncoded, Gray mapped; decisions from the sign of max-log LLRs".into(),
            format!(
                "stop rule: {} errors or {} bits per point; verdict needs ≥ {} errors, \
                 tolerance ±4·sqrt(p(1−p)/n)",
                stop.min_errors, stop.max_bits, MIN_ERRORS_FOR_VERDICT
            ),
            format!("seed: {} (every point reproducible on its own)", scenario.seed),
        ],
        theory_source: BER_AWGN_SOURCE.to_string(),
        rows,
    })
}

/// Renders the report as a fixed-width text table.
pub fn render_text(report: &AwgnReport) -> String {
    use std::fmt::Write;
    let mut s = String::new();
    let _ = writeln!(s, "flatbin — {}", report.scenario);
    let _ = writeln!(s, "numerology: {}", report.numerology);
    let _ = writeln!(
        s,
        "\nUncoded BER over AWGN, measured through the core transmitter and receiver:\n"
    );
    let _ = writeln!(
        s,
        "{:<7} {:>8} {:>8} {:>10} {:>7} {:>12} {:>12} {:>10}  verdict",
        "order", "Es/N0 dB", "Eb/N0 dB", "bits", "errors", "measured", "theory", "±4σ"
    );
    let mut hidden = 0;
    for r in &report.rows {
        if r.verdict == Verdict::NotSimulated {
            hidden += 1;
            continue;
        }
        let verdict = match r.verdict {
            Verdict::Agrees => "agrees",
            Verdict::Disagrees => "DISAGREES",
            Verdict::TooFewErrors => "too few errors",
            Verdict::NotSimulated => "not simulated",
        };
        let (measured, tol) = (
            format!("{:.3e}", r.measured_ber),
            format!("{:.2e}", r.tolerance),
        );
        let _ = writeln!(
            s,
            "{:<7} {:>8.1} {:>8.2} {:>10} {:>7} {:>12} {:>12.3e} {:>10}  {}",
            r.modulation.as_str(),
            r.es_n0_db,
            r.eb_n0_db,
            r.count.bits,
            r.count.errors,
            measured,
            r.theory_ber,
            tol,
            verdict
        );
    }
    if hidden > 0 {
        let _ = writeln!(
            s,
            "({hidden} points omitted: their expected BER is too small to measure within the bit \
             budget; --json lists them)"
        );
    }
    let _ = writeln!(s, "\ntheory: {}", report.theory_source);
    let _ = writeln!(s, "assumptions:");
    for a in &report.assumptions {
        let _ = writeln!(s, "  - {a}");
    }
    s
}
