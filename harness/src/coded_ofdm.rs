//! Packets over the OFDM link: CRC, convolutional code, per-symbol interleaver, the f32
//! receiver with i8 LLRs, de-interleaver, Viterbi decoder, CRC check — measured by packet
//! error rate (PER) on a scenario's channel and impairments.
//!
//! One packet ([`flatbin::packet`], the code the firmware runs): `payload_bytes` random bytes,
//! CRC-32 (ISO-HDLC) appended, encoded at the code rate with 6 tail bits, spread over as many
//! OFDM symbols as it needs, interleaved per symbol; the last symbol is filled up with zero
//! bits the receiver skips. Each packet is one
//! frame for the receiver (its channel estimator starts over; symbol numbering, and so the
//! pilot pattern, restart at 0). The channel runs on continuously from packet to packet
//! (time-continuous Rayleigh fading, sum of sinusoids with a Jakes spectrum) and the noise
//! tracker carries its per-bin statistics over packets, as in a receiver that stays on.
//!
//! Assumptions: ideal timing and no CFO correction (synchronisation is measured elsewhere),
//! Es/N0 per data subcarrier as given, the scenario's impairments applied by the receive
//! chain, LLRs quantised to i8 as the firmware receives them (round(4·L), ±127).

use anyhow::{ensure, Result};
use flatbin::conv_code::CodeRate;
use flatbin::fft::MicroFft;
use flatbin::noise_track::{NoiseTrackConfig, NoiseTracker};
use flatbin::packet::{PacketDecoder, PacketFormat, PacketStatus};
use flatbin::receiver::Receiver;
use flatbin::transmit::Transmitter;
use flatbin::viterbi::RECOMMENDED_DEPTH;
use flatbin::{Cf32, Modulation, Numerology};
use rand::RngExt;
use serde::Serialize;

use crate::channel::sos::FadingParams;
use crate::channel::tdl::{Tdl, Variation};
use crate::coded_link::quantise_llr;
use crate::evaluate_fading::receiver_config;
use crate::fading_link::{RX_HISTORY, RX_TAPS};
use crate::noise::n0_for_es_n0_db;
use crate::rng::stream_rng;
use crate::rx_chain::RxChain;
use crate::scenario::Scenario;

/// Payload of a packet when nothing else is said, bytes (before the 4-byte CRC).
pub const DEFAULT_PAYLOAD_BYTES: usize = 32;

/// How the receiver weights its LLRs.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
pub enum Weighting {
    /// One noise variance for every bin: the true thermal N0, known to the receiver.
    Flat,
    /// The noise tracker's per-bin noise-plus-interference variance
    /// ([`flatbin::noise_track::NoiseTracker::bin_noise`]), updated every symbol.
    Tracked,
}

/// What one PER run is.
#[derive(Clone, Copy, Debug, Serialize)]
pub struct PerSetup {
    /// Data modulation.
    #[serde(serialize_with = "ser_modulation")]
    pub modulation: Modulation,
    /// Code rate.
    #[serde(serialize_with = "ser_rate")]
    pub rate: CodeRate,
    /// Payload per packet, bytes (a 32-bit CRC is added).
    pub payload_bytes: usize,
    /// Es/N0 per data subcarrier, dB.
    pub es_n0_db: f64,
    /// LLR weighting.
    pub weighting: Weighting,
    /// Stop after this many packet errors …
    pub min_packet_errors: u64,
    /// … or this many packets, whichever comes first.
    pub max_packets: u64,
}

fn ser_modulation<S: serde::Serializer>(m: &Modulation, s: S) -> Result<S::Ok, S::Error> {
    s.serialize_str(modulation_label(*m))
}

fn ser_rate<S: serde::Serializer>(r: &CodeRate, s: S) -> Result<S::Ok, S::Error> {
    s.serialize_str(rate_label(*r))
}

/// "BPSK", "QPSK", "16-QAM" …
pub fn modulation_label(m: Modulation) -> &'static str {
    match m {
        Modulation::Bpsk => "BPSK",
        Modulation::Qpsk => "QPSK",
        Modulation::Qam16 => "16-QAM",
        Modulation::Qam64 => "64-QAM",
        Modulation::Qam256 => "256-QAM",
    }
}

/// "1/2", "2/3", "3/4".
pub fn rate_label(r: CodeRate) -> &'static str {
    match r {
        CodeRate::Half => "1/2",
        CodeRate::TwoThirds => "2/3",
        CodeRate::ThreeQuarters => "3/4",
    }
}

/// The outcome of one PER run.
#[derive(Clone, Debug, Serialize)]
pub struct PerPoint {
    /// What was run.
    pub setup: PerSetup,
    /// Packets sent.
    pub packets: u64,
    /// Packets whose CRC failed.
    pub packet_errors: u64,
    /// Packets whose CRC passed but whose payload differed (undetected errors).
    pub undetected: u64,
    /// Information bits (payload + CRC) decoded, and how many were wrong.
    pub bits: u64,
    /// Decoded information bits in error.
    pub bit_errors: u64,
    /// OFDM symbols per packet.
    pub symbols_per_packet: u32,
}

impl PerPoint {
    /// Packet error rate.
    pub fn per(&self) -> f64 {
        if self.packets == 0 {
            0.0
        } else {
            self.packet_errors as f64 / self.packets as f64
        }
    }

    /// Standard deviation of [`PerPoint::per`] (binomial).
    pub fn per_sd(&self) -> f64 {
        let p = self.per();
        if self.packets == 0 {
            0.0
        } else {
            (p * (1.0 - p) / self.packets as f64).sqrt()
        }
    }

    /// Decoded bit error rate.
    pub fn ber(&self) -> f64 {
        if self.bits == 0 {
            0.0
        } else {
            self.bit_errors as f64 / self.bits as f64
        }
    }
}

/// Runs packets of `setup` through the scenario's channel; `stream` keys the random
/// streams (the same stream and setup give the same channel and noise whatever the
/// weighting, so weightings compare on common random numbers).
pub fn packet_error_rate(
    scenario: &Scenario,
    numerology: &Numerology,
    setup: &PerSetup,
    stream: u64,
) -> Result<PerPoint> {
    crate::with_fft_len!(
        numerology.fft_len(),
        run(scenario, numerology, setup, stream)
    )
}

// Not inlined: see `link_survey::run`.
#[inline(never)]
fn run<const N: usize>(
    scenario: &Scenario,
    nu: &Numerology,
    setup: &PerSetup,
    stream: u64,
) -> Result<PerPoint> {
    ensure!(setup.payload_bytes > 0, "payload must be at least one byte");
    let fs = scenario.band.sample_rate_hz;
    let ns = nu.symbol_len();
    let m = setup.modulation;
    let n0 = n0_for_es_n0_db(setup.es_n0_db);
    let format = PacketFormat::new(nu, m, setup.rate, 8 * setup.payload_bytes)?;
    let info_bits = format.info_bits();
    let symbols = format.symbols();
    let taps = crate::link_survey::sample_taps(scenario)?;
    let mut rng = stream_rng(scenario.seed ^ 0xC0DE_0000, stream);
    let params = FadingParams::rayleigh(scenario.max_doppler_hz(), fs, N);
    let mut line = Tdl::new(&taps, &params, Variation::Continuous, &mut rng);
    let mut chain = RxChain::from_scenario(scenario, stream.wrapping_mul(31).wrapping_add(7));
    let mut tx = Transmitter::new(*nu, MicroFft::<N>::new())?;
    let mut rx = Box::new(Receiver::<MicroFft<N>, N, RX_TAPS, RX_HISTORY>::new(
        nu,
        MicroFft::new(),
        receiver_config(scenario, nu, n0),
    )?);
    let mut noise = Box::new(NoiseTracker::<N>::new(nu, NoiseTrackConfig::default())?);
    let mut decoder = Box::new(PacketDecoder::<RECOMMENDED_DEPTH>::new(format));
    let mut eq = vec![Cf32::default(); N];
    let mut sinr = vec![0.0f32; N];
    let mut llr = vec![0.0f32; N * 8];
    let mut per_bin = vec![0.0f32; N];
    let mut point = PerPoint {
        setup: *setup,
        packets: 0,
        packet_errors: 0,
        undetected: 0,
        bits: 0,
        bit_errors: 0,
        symbols_per_packet: symbols,
    };
    let mut frame = vec![0u8; info_bits];
    let mut code = vec![0u8; format.coded_bits()];
    let mut decoded = vec![0u8; info_bits];
    let mut scratch_bits = vec![0u8; N * 8];
    let mut scratch_llrs = vec![0i8; N * 8];
    let mut bits = vec![0u8; N * 8];
    while point.packets < setup.max_packets && point.packet_errors < setup.min_packet_errors {
        // Transmit.
        for b in frame.iter_mut().take(8 * setup.payload_bytes) {
            *b = rng.random::<u8>() & 1;
        }
        format.encode(&mut frame, &mut code)?;
        let mut x = Vec::with_capacity(ns * symbols as usize);
        for sym in 0..symbols {
            let len = format.symbol_bits_out(sym, &code, &mut scratch_bits, &mut bits)?;
            let mut s = vec![Cf32::default(); ns];
            tx.modulate(m, &bits[..len], sym, &mut s)?;
            x.extend_from_slice(&s);
        }
        // Channel and front end.
        let mut faded = vec![Cf32::default(); x.len()];
        line.process(&x, &mut faded);
        let power = faded.iter().map(|v| f64::from(v.norm_sqr())).sum::<f64>() / faded.len() as f64;
        let r = chain.receive(&faded, power, n0);
        let g = (1.0 / r.agc_gain) as f32;
        let samples: Vec<Cf32> = r.samples.iter().map(|v| v * g).collect();
        // Receive.
        noise.start_frame(1.0);
        rx.reset();
        decoder.reset();
        let mut crc_ok = None;
        for sym in 0..symbols {
            let w = &samples[sym as usize * ns..(sym as usize + 1) * ns];
            if setup.weighting == Weighting::Tracked
                && (noise.frame_stats().symbols > 0 || point.packets > 0)
            {
                let k = noise.bin_noise(&mut per_bin);
                rx.set_bin_noise(&per_bin[..k])?;
            }
            let c = rx.receive(w, sym, m, &mut eq, &mut sinr, &mut llr)?;
            noise.update(
                sym,
                rx.bins(),
                rx.estimator(),
                rx.common_phase(),
                &eq[..c.data_bins],
                m,
            )?;
            let q: Vec<i8> = llr[..c.llrs]
                .iter()
                .map(|&l| quantise_llr(f64::from(l)))
                .collect();
            if let PacketStatus::Complete { crc_ok: ok } =
                decoder.push_symbol(sym, &q, &mut scratch_llrs, &mut decoded)?
            {
                crc_ok = Some(ok);
            }
        }
        let crc_ok = crc_ok.ok_or_else(|| anyhow::anyhow!("packet not complete"))?;
        let e = decoded.iter().zip(&frame).filter(|(a, b)| a != b).count() as u64;
        point.packets += 1;
        point.bits += info_bits as u64;
        point.bit_errors += e;
        if !crc_ok {
            point.packet_errors += 1;
        } else if e > 0 {
            point.undetected += 1;
        }
    }
    Ok(point)
}

/// The Es/N0 at which the PER falls through a target, found on a grid.
#[derive(Clone, Debug, Serialize)]
pub struct PerThreshold {
    /// Modulation.
    #[serde(serialize_with = "ser_modulation")]
    pub modulation: Modulation,
    /// Code rate.
    #[serde(serialize_with = "ser_rate")]
    pub rate: CodeRate,
    /// Target PER.
    pub target: f64,
    /// Es/N0 per data subcarrier where the measured PER crosses the target (log-linear
    /// between the bracketing grid points), dB; `None` when it does not within the grid.
    pub es_n0_db: Option<f64>,
    /// Spread of that figure from the Monte Carlo error of the two bracketing points
    /// (±1 sd of each PER moved through the interpolation), dB.
    pub es_n0_sd_db: Option<f64>,
    /// When the PER stopped falling before the target (three grid points within their Monte
    /// Carlo spread): the PER of the last point, an error floor set by what does not scale
    /// with Es/N0 (Doppler ICI, channel-estimation error, interference).
    pub floor_per: Option<f64>,
    /// Every grid point run (ascending Es/N0).
    pub points: Vec<PerPoint>,
}

/// Steps Es/N0 from `start_db` by `step_db` (up to `max_db`) until the PER of `base` (its
/// Es/N0 replaced) falls to `target` or below, and interpolates the crossing.
pub fn es_n0_for_per(
    scenario: &Scenario,
    numerology: &Numerology,
    base: &PerSetup,
    target: f64,
    (start_db, step_db, max_db): (f64, f64, f64),
    stream: u64,
) -> Result<PerThreshold> {
    ensure!(
        step_db > 0.0 && target > 0.0 && target < 1.0,
        "invalid search"
    );
    let mut points: Vec<PerPoint> = Vec::new();
    let mut floor = None;
    let mut db = start_db;
    while db <= max_db + 1e-9 {
        let p = packet_error_rate(
            scenario,
            numerology,
            &PerSetup {
                es_n0_db: db,
                ..*base
            },
            stream,
        )?;
        let done = p.per() <= target;
        points.push(p);
        if done {
            break;
        }
        // An error floor: below PER 0.5 (past the threshold region), three points in a row
        // within their Monte Carlo spread of each other (the PER stopped falling).
        if let [a, _, c] = &points[points.len().saturating_sub(3)..] {
            let sd = (a.per_sd().powi(2) + c.per_sd().powi(2)).sqrt();
            if a.per() < 0.5 && a.per() - c.per() <= 2.0 * sd {
                floor = Some(c.per());
                break;
            }
        }
        db += step_db;
    }
    let xy: Vec<(f64, f64)> = points.iter().map(|p| (p.setup.es_n0_db, p.per())).collect();
    let es = crate::coded_link::crossing_db(&xy, target);
    let sd = es.and_then(|x| {
        let w = points
            .windows(2)
            .find(|w| w[0].per() >= target && w[1].per() <= target && w[1].per() > 0.0)?;
        // Move each end by its sd and see how far the crossing moves.
        let shift = |a: f64, b: f64| {
            crate::coded_link::crossing_db(
                &[(w[0].setup.es_n0_db, a), (w[1].setup.es_n0_db, b)],
                target,
            )
        };
        let (p0, p1) = (w[0].per(), w[1].per());
        let hi = shift(p0 + w[0].per_sd(), p1 + w[1].per_sd()).unwrap_or(w[1].setup.es_n0_db);
        let lo = shift(
            (p0 - w[0].per_sd()).max(target),
            (p1 - w[1].per_sd()).max(1e-12),
        )
        .unwrap_or(w[0].setup.es_n0_db);
        Some(0.5 * ((hi - x).abs() + (x - lo).abs()))
    });
    Ok(PerThreshold {
        modulation: base.modulation,
        rate: base.rate,
        target,
        es_n0_db: es,
        es_n0_sd_db: sd,
        floor_per: if es.is_none() { floor } else { None },
        points,
    })
}

/// Target PER of the main command's table.
pub const SURVEY_TARGET_PER: f64 = 0.01;
/// Es/N0 grid of the main command's search: start, step, end (dB).
pub const SURVEY_GRID_DB: (f64, f64, f64) = (0.0, 3.0, 45.0);
/// Stop rule per grid point of the main command: packet errors …
pub const SURVEY_MIN_PACKET_ERRORS: u64 = 50;
/// … or packets.
pub const SURVEY_MAX_PACKETS: u64 = 1000;

/// The main command's coded-link table: Es/N0 for 1 % PER per modulation and code rate on
/// the scenario, with its assumptions.
#[derive(Clone, Debug, Serialize)]
pub struct CodedSurvey {
    /// One threshold per (modulation, rate).
    pub thresholds: Vec<PerThreshold>,
    /// Payload per packet, bytes.
    pub payload_bytes: usize,
    /// The assumptions behind the figures.
    pub assumptions: Vec<String>,
}

/// Runs the Es/N0-for-1 %-PER search for every modulation of the scenario and every code
/// rate (in parallel; each search has its own random stream).
pub fn survey(scenario: &Scenario, numerology: &Numerology) -> Result<CodedSurvey> {
    use rayon::prelude::*;
    let mut combos = Vec::new();
    for (i, m) in scenario.link.modulations.iter().enumerate() {
        for (j, r) in [CodeRate::Half, CodeRate::TwoThirds, CodeRate::ThreeQuarters]
            .into_iter()
            .enumerate()
        {
            combos.push((crate::evaluate::core_modulation(*m), r, (i * 3 + j) as u64));
        }
    }
    let thresholds = combos
        .par_iter()
        .map(|&(m, r, stream)| {
            es_n0_for_per(
                scenario,
                numerology,
                &PerSetup {
                    modulation: m,
                    rate: r,
                    payload_bytes: DEFAULT_PAYLOAD_BYTES,
                    es_n0_db: 0.0,
                    weighting: Weighting::Tracked,
                    min_packet_errors: SURVEY_MIN_PACKET_ERRORS,
                    max_packets: SURVEY_MAX_PACKETS,
                },
                SURVEY_TARGET_PER,
                SURVEY_GRID_DB,
                0x1000 + stream,
            )
        })
        .collect::<Result<Vec<_>>>()?;
    let assumptions = vec![
        format!(
            "packets of {DEFAULT_PAYLOAD_BYTES} bytes + CRC-32, K = 7 convolutional code \
             (133/171) punctured to the rate, one interleaver per OFDM symbol, soft Viterbi \
             on i8 LLRs"
        ),
        "LLRs weighted with the noise tracker's per-bin noise-plus-interference".into(),
        "ideal timing, no CFO correction; the scenario's channel and impairments".into(),
        format!(
            "Es/N0 grid {:.0}…{:.0} dB in {:.0}-dB steps; per point {SURVEY_MIN_PACKET_ERRORS} \
             packet errors or {SURVEY_MAX_PACKETS} packets; crossing interpolated log-linearly",
            SURVEY_GRID_DB.0, SURVEY_GRID_DB.2, SURVEY_GRID_DB.1
        ),
        "\"floor\": the PER stopped falling with Es/N0 before 1 % (Doppler ICI, channel \
         estimation error or interference set it); the figure is the PER at the last point"
            .into(),
        "a 1 % PER figure rests on about 10 packet errors at the point below it: read the ± \
         as the Monte Carlo spread, not a guarantee"
            .into(),
    ];
    Ok(CodedSurvey {
        thresholds,
        payload_bytes: DEFAULT_PAYLOAD_BYTES,
        assumptions,
    })
}

/// The coded-link table as text.
pub fn render_text(s: &CodedSurvey) -> String {
    let mut out = format!(
        "\nCoded link: Es/N0 per data subcarrier for {:.0} % packet error rate\n",
        100.0 * SURVEY_TARGET_PER
    );
    out.push_str(&format!(
        "  {:<9} {:>5} {:>14} {:>10}  {}\n",
        "modulation", "rate", "Es/N0 (dB)", "± (dB)", "PER at the grid points"
    ));
    for t in &s.thresholds {
        let es = match (t.es_n0_db, t.floor_per) {
            (Some(v), _) => format!("{v:.1}"),
            (None, Some(f)) => format!("floor {f:.3}"),
            (None, None) => "not reached".to_string(),
        };
        let sd = t.es_n0_sd_db.map_or("—".to_string(), |v| format!("{v:.1}"));
        let pts: Vec<String> = t
            .points
            .iter()
            .rev()
            .take(3)
            .rev()
            .map(|p| format!("{:.0} dB: {:.3}", p.setup.es_n0_db, p.per()))
            .collect();
        out.push_str(&format!(
            "  {:<9} {:>5} {:>14} {:>10}  {}\n",
            modulation_label(t.modulation),
            rate_label(t.rate),
            es,
            sd,
            pts.join(", ")
        ));
    }
    out.push_str("  assumptions:\n");
    for a in &s.assumptions {
        out.push_str(&format!("    - {a}\n"));
    }
    out
}
