//! The integer ICI prediction (`flatbin::ici_q15`) against the published exact values of
//! REFERENCES items 1 and 2 (Russell & Stüber 1995, exact Jakes sum, table 1a; Moose 1994,
//! `1 − |S0|²`, table 2) and the f32 joint sum of `flatbin::ici`.

use flatbin::ici::{doppler_ici, joint_ici};
use flatbin::ici_q15::{IciTableQ15, MAX_FD_T_Q16};

fn q16(x: f64) -> u32 {
    (x * 65536.0).round() as u32
}

#[test]
fn table_lookups_match_the_published_exact_values() {
    // Tolerance: the table values carry 6 significant digits; the interpolation of the
    // smooth ratio P/x² and the Q16 argument add well under 0.5 % (the argument's rounding
    // alone is up to 1/(2·65536·x) relative, ×2 for the square: 0.15 % at x = 0.01).
    let t64 = IciTableQ15::new(64).unwrap();
    let t256 = IciTableQ15::new(256).unwrap();
    for (fd_t, p64, p256) in [
        (0.01, 0.000164437, 0.000164475),
        (0.02, 0.000657553, 0.000657704),
        (0.05, 0.00410121, 0.00410214),
        (0.1, 0.016284, 0.0162877),
        (0.2, 0.0632454, 0.063259),
    ] {
        for (t, want) in [(&t64, p64), (&t256, p256)] {
            let got = f64::from(t.doppler_q32(q16(fd_t))) / 2f64.powi(32);
            assert!(
                (got / want - 1.0).abs() < 0.005,
                "fd·T {fd_t}: {got} vs {want}"
            );
        }
    }
    for (eps, p) in [
        (0.01, 0.000328863),
        (0.05, 0.00819567),
        (0.1, 0.032461),
        (0.2, 0.124832),
    ] {
        let got = f64::from(t64.cfo_q32(-(q16(eps) as i32))) / 2f64.powi(32);
        assert!((got / p - 1.0).abs() < 0.005, "ε {eps}: {got} vs {p}");
    }
    // SIR in dB Q8 against table 1b (N = 64): 31.8178 dB at fd·T 0.02, 17.8111 at 0.1.
    for (fd_t, sir) in [(0.02, 31.8178), (0.1, 17.8111)] {
        let got = f64::from(t64.predict(q16(fd_t), 0).sir_db_q8) / 256.0;
        assert!((got - sir).abs() < 0.03, "fd·T {fd_t}: {got} vs {sir}");
    }
    // Beyond the table: saturated, never wrapped.
    assert_eq!(t64.doppler_q32(u32::MAX), t64.doppler_q32(MAX_FD_T_Q16));
    assert!(
        f64::from(t64.doppler_q32(MAX_FD_T_Q16)) / 2f64.powi(32)
            > doppler_ici(0.3, 64).unwrap() as f64
    );
}

#[test]
fn adding_doppler_and_cfo_ici_is_close_to_the_joint_sum() {
    // The integer path adds the two ICI powers; the exact joint sum (flatbin::ici::joint_ici,
    // itself checked against simulation in tests/ici_predict.rs) is the reference. Measured
    // over the grid and bounded here: the SIR from the sum within 0.25 dB of the joint one
    // for ICI up to −10 dB.
    let t = IciTableQ15::new(64).unwrap();
    let mut worst = 0.0f64;
    for fd_t in [0.01, 0.02, 0.05, 0.1, 0.15, 0.2] {
        for eps in [0.0, 0.01, 0.02, 0.05, 0.1] {
            let joint = f64::from(joint_ici(fd_t as f32, eps as f32, 64).unwrap());
            if joint > 0.1 {
                continue;
            }
            let sir_joint = 10.0 * ((1.0 - joint) / joint).log10();
            let got = f64::from(t.predict(q16(fd_t), q16(eps) as i32).sir_db_q8) / 256.0;
            worst = worst.max((got - sir_joint).abs());
        }
    }
    println!("largest SIR difference, sum of ICI powers vs joint sum: {worst:.3} dB");
    assert!(worst <= 0.25);
}
