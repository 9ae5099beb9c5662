//! Packet error rate over the OFDM link with a narrowband interferer: LLRs weighted with the
//! noise tracker's per-bin noise-plus-interference against flat weighting.
//!
//! Scenario: the built-in default (invented demo: 64-point FFT at 250 kHz, exponential
//! profile 1 µs RMS, 120 km/h at 915 MHz), with a CW tone at +20 kHz (between bins 5 and 6),
//! −10 dBc of the received signal, always on. Packets of 32 bytes + CRC-32, QPSK, rate 1/2
//! (8 OFDM symbols). Both weightings see the same channel, noise and interferer (same random
//! streams), 1000 packets each.

use flatbin::conv_code::CodeRate;
use flatbin::Modulation;
use flatbin_harness::coded_ofdm::{packet_error_rate, PerPoint, PerSetup, Weighting};
use flatbin_harness::evaluate::numerology_of;
use flatbin_harness::scenario::{
    InterfererKind, Scenario, DEFAULT_SCENARIO_ORIGIN, DEFAULT_SCENARIO_TOML,
};

fn run(scenario: &Scenario, es_n0_db: f64, weighting: Weighting) -> PerPoint {
    let nu = numerology_of(scenario, DEFAULT_SCENARIO_ORIGIN, DEFAULT_SCENARIO_TOML)
        .expect("numerology");
    let setup = PerSetup {
        modulation: Modulation::Qpsk,
        rate: CodeRate::Half,
        payload_bytes: 32,
        es_n0_db,
        weighting,
        min_packet_errors: u64::MAX,
        max_packets: 1000,
    };
    packet_error_rate(scenario, &nu, &setup, 3).expect("per")
}

#[test]
fn per_bin_weighting_beats_flat_weighting_under_a_cw_interferer() {
    let mut sc = Scenario::default_scenario();
    sc.impairments.interferer.kind = InterfererKind::Cw;
    for es_n0_db in [18.0, 22.0] {
        let flat = run(&sc, es_n0_db, Weighting::Flat);
        let tracked = run(&sc, es_n0_db, Weighting::Tracked);
        // Binomial sd of each PER; the difference's sd is at most the root sum of squares
        // (the common random numbers only make it smaller). Require 4 sd.
        let sd = (flat.per_sd().powi(2) + tracked.per_sd().powi(2)).sqrt();
        eprintln!(
            "Es/N0 {es_n0_db} dB: PER flat {:.4} ({}/{}), tracked {:.4} ({}/{}), sd of the \
             difference {:.4}; undetected {} / {}",
            flat.per(),
            flat.packet_errors,
            flat.packets,
            tracked.per(),
            tracked.packet_errors,
            tracked.packets,
            sd,
            flat.undetected,
            tracked.undetected
        );
        assert!(
            flat.per() - tracked.per() > 4.0 * sd,
            "per-bin weighting must lower the PER"
        );
        // CRC-32 leaves no undetected error in 2000 packets (its undetected rate is about
        // 2^-32 per failed packet: common practice).
        assert_eq!(flat.undetected + tracked.undetected, 0);
    }
}

#[test]
fn per_bin_weighting_costs_nothing_without_interference() {
    // Control: no interferer. The tracker's per-bin variances then only add estimation
    // noise to the weights; the PER must not rise beyond the Monte Carlo spread (4 sd).
    let sc = Scenario::default_scenario();
    let flat = run(&sc, 18.0, Weighting::Flat);
    let tracked = run(&sc, 18.0, Weighting::Tracked);
    let sd = (flat.per_sd().powi(2) + tracked.per_sd().powi(2)).sqrt();
    eprintln!(
        "no interferer, 18 dB: PER flat {:.4}, tracked {:.4}, sd {:.4}",
        flat.per(),
        tracked.per(),
        sd
    );
    assert!(tracked.per() - flat.per() <= 4.0 * sd.max(1e-3));
}
