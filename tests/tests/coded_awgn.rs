//! The core's convolutional decoder on coded BPSK over AWGN, against the union bound from the
//! code's distance spectrum, hard decisions, and the unquantised f64 reference decoder.
//!
//! Frames of 1000 information bits, terminated (6 tail bits), rate 1/2, Eb/N0 per
//! information bit. Error counts come in bursts (one error event flips several bits), so the
//! standard deviation of each BER is taken from the spread of per-frame error counts.

use flatbin::conv_code::CodeRate;
use flatbin_harness::coded_link::{bpsk_awgn, crossing_db, Decoder, ErrorCount};
use flatbin_harness::theory::conv_code::{spectrum, RATE_1_2};

const INFO_BITS: usize = 1000;

fn curve(decoder: Decoder, points: &[(f64, u64)], seed: u64) -> Vec<ErrorCount> {
    points
        .iter()
        .map(|&(db, frames)| {
            bpsk_awgn(CodeRate::Half, db, frames, INFO_BITS, &[decoder], seed)
                .expect("simulation")
                .remove(0)
        })
        .collect()
}

fn xy(c: &[ErrorCount]) -> Vec<(f64, f64)> {
    c.iter().map(|p| (p.eb_n0_db, p.ber())).collect()
}

#[test]
fn soft_decoder_meets_the_union_bound_at_1e_5() {
    // Union bound P_b ≤ Σ c_d Q(√(2dR·Eb/N0)) with the published spectrum of the 133/171 code
    // (Viterbi 1971; spectrum checked against Frenger et al. 1999 in the theory module). At
    // BER 1e-5 the bound is tight; the issue asks the simulation to cross 1e-5 within 0.5 dB
    // of where the bound does.
    let s = spectrum(RATE_1_2, 24).expect("spectrum");
    let bound_db = s.eb_n0_db_for(1e-5, true).expect("bound crosses 1e-5");
    let c = curve(
        Decoder::CoreSoft,
        &[(3.7, 4000), (4.0, 8000), (4.3, 16_000)],
        11,
    );
    for p in &c {
        let b = s.soft_bound(10f64.powf(p.eb_n0_db / 10.0));
        eprintln!(
            "Eb/N0 {:.1} dB: BER {:.3e} ± {:.1e} ({} bit errors), bound {:.3e}",
            p.eb_n0_db,
            p.ber(),
            p.ber_sd(),
            p.bit_errors,
            b
        );
        // Enough errors for the crossing to mean something (≥ 100 bits, ≥ 20 frames).
        assert!(
            p.bit_errors >= 100 && p.frame_errors >= 20,
            "too few errors"
        );
    }
    let sim_db = crossing_db(&xy(&c), 1e-5).expect("the simulation crosses 1e-5");
    eprintln!("BER 1e-5: simulation {sim_db:.2} dB, union bound {bound_db:.2} dB");
    assert!(
        (sim_db - bound_db).abs() <= 0.5,
        "crossing {sim_db:.2} dB vs bound {bound_db:.2} dB"
    );
}

#[test]
fn soft_decisions_gain_about_two_db_over_hard() {
    // Soft- over hard-decision Viterbi decoding gains about 2 dB (common practice); the union
    // bounds of the two (Proakis & Salehi §8.2) give the gain for this code at 1e-4, and the
    // measured gain must agree with it within 0.5 dB.
    let s = spectrum(RATE_1_2, 24).expect("spectrum");
    let predicted =
        s.eb_n0_db_for(1e-4, false).expect("hard") - s.eb_n0_db_for(1e-4, true).expect("soft");
    let soft = curve(Decoder::CoreSoft, &[(3.0, 1000), (3.5, 2000)], 12);
    let hard = curve(
        Decoder::CoreHard,
        &[(5.5, 1000), (6.0, 2000), (6.5, 4000)],
        13,
    );
    let (sx, hx) = (
        crossing_db(&xy(&soft), 1e-4).expect("soft crosses 1e-4"),
        crossing_db(&xy(&hard), 1e-4).expect("hard crosses 1e-4"),
    );
    eprintln!(
        "BER 1e-4: soft {sx:.2} dB, hard {hx:.2} dB, gain {:.2} dB (bounds: {predicted:.2} dB)",
        hx - sx
    );
    assert!(
        ((hx - sx) - predicted).abs() <= 0.5,
        "gain {:.2} dB",
        hx - sx
    );
    assert!(hx - sx >= 1.5, "soft decisions must gain about 2 dB");
}

#[test]
fn i8_llrs_cost_at_most_0_2_db() {
    // The i8 LLR scale (round(4·L), ±127) and the 64-step window against unquantised f64 LLRs
    // decoded with full traceback, on the same noise (harness reference decoder, exact ML).
    // Requirement: ≤ 0.2 dB at BER 1e-4.
    let pts = [(3.0, 1000u64), (3.5, 2000)];
    let run = |d: Decoder| {
        pts.iter()
            .map(|&(db, f)| {
                bpsk_awgn(CodeRate::Half, db, f, INFO_BITS, &[d], 14)
                    .expect("simulation")
                    .remove(0)
            })
            .collect::<Vec<_>>()
    };
    let q = run(Decoder::CoreSoft);
    let r = run(Decoder::ReferenceF64);
    let (qx, rx) = (
        crossing_db(&xy(&q), 1e-4).expect("i8 crosses 1e-4"),
        crossing_db(&xy(&r), 1e-4).expect("f64 crosses 1e-4"),
    );
    eprintln!(
        "BER 1e-4: i8 {qx:.3} dB, f64 reference {rx:.3} dB, loss {:.3} dB",
        qx - rx
    );
    assert!(qx - rx <= 0.2, "i8 loss {:.3} dB", qx - rx);
}
