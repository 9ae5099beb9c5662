//! Measured uncoded BER over AWGN against the published closed forms.
//!
//! Sources: K. Cho, D. Yoon, "On the general BER expression of one- and two-dimensional
//! amplitude modulations," IEEE Trans. Commun. 50(7):1074–1080, 2002 (exact Gray square QAM);
//! J. G. Proakis, M. Salehi, *Digital Communications*, 5th ed., ch. 4 (BPSK/QPSK,
//! Q(sqrt(2 Eb/N0))). The closed forms themselves are checked against REFERENCES.md table 5a in
//! `flatbin_harness::theory::ber`.
//!
//! Tolerance: REFERENCES.md rule for Monte Carlo error rates, |p̂ − p| ≤ 4·sqrt(p(1−p)/n),
//! with at least 100 errors (here 400) and fixed seeds.

use flatbin::numerology::NumerologyParams;
use flatbin::{Modulation, Numerology};
use flatbin_harness::link::{awgn_errors, ber_tolerance, StopRule};
use flatbin_harness::rng::stream_rng;
use flatbin_harness::theory::ber::{ber_awgn, db_to_linear};

fn check(nu: &Numerology, m: Modulation, eb_n0_db: f64, seed: u64) {
    let bps = m.bits_per_symbol() as u32;
    let es_n0_db = eb_n0_db + 10.0 * f64::from(bps).log10();
    let p = ber_awgn(bps, db_to_linear(eb_n0_db)).unwrap();
    assert!(
        (1e-4..=1e-2).contains(&p),
        "choose a point in the measurable range: {p}"
    );
    let mut rng = stream_rng(seed, 0);
    let stop = StopRule {
        min_errors: 400,
        max_bits: 20_000_000,
    };
    let count = awgn_errors(nu, m, es_n0_db, &mut rng, stop).unwrap();
    assert!(count.errors >= 100, "{m:?}: only {} errors", count.errors);
    let tol = ber_tolerance(p, count.bits);
    assert!(
        (count.ber() - p).abs() <= tol,
        "{m:?} at Eb/N0 {eb_n0_db} dB: measured {:.4e} ({} / {}), theory {p:.4e} ± {tol:.2e}",
        count.ber(),
        count.errors,
        count.bits
    );
}

#[test]
fn awgn_ber_matches_closed_forms_n64() {
    let nu = Numerology::new(NumerologyParams::default()).unwrap();
    // Eb/N0 points chosen so the theory BER lies between 1e-4 and 1e-2 (asserted above).
    check(&nu, Modulation::Bpsk, 6.0, 11);
    check(&nu, Modulation::Qpsk, 7.0, 12);
    check(&nu, Modulation::Qam16, 10.0, 13);
    check(&nu, Modulation::Qam64, 14.0, 14);
    check(&nu, Modulation::Qam256, 18.0, 15);
}

#[test]
fn awgn_ber_matches_closed_forms_n256_boosted_scattered_pilots() {
    // Pilot boost and a scattered pattern must not change Es/N0 on data bins.
    let mut p = NumerologyParams {
        fft_len: 256,
        cp_len: 32,
        guard_low_bins: 20,
        guard_high_bins: 19,
        ..Default::default()
    };
    p.pilots.spacing = 6;
    p.pilots.shift_per_symbol = 2;
    p.pilots.boost_db = 3.0;
    let nu = Numerology::new(p).unwrap();
    check(&nu, Modulation::Qpsk, 5.0, 21);
    check(&nu, Modulation::Qam16, 9.0, 22);
    check(&nu, Modulation::Qam64, 13.0, 23);
}
