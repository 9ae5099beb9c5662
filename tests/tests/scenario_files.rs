//! Scenario files: errors carry file, line and column, including layout rules that only the
//! core can check; the built-in default scenario runs clean end to end.

use std::io::Write;

use flatbin_harness::evaluate::{evaluate_awgn, numerology_of, Verdict};
use flatbin_harness::scenario::Scenario;

fn write_temp(name: &str, text: &str) -> std::path::PathBuf {
    let dir = std::env::temp_dir().join(format!("flatbin-scenario-test-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let path = dir.join(name);
    std::fs::File::create(&path)
        .unwrap()
        .write_all(text.as_bytes())
        .unwrap();
    path
}

#[test]
fn unknown_key_in_a_file_reports_file_line_and_column() {
    let path = write_temp(
        "unknown.toml",
        "name = \"x\"\n\n[numerology]\nfft_len = 64\nfft_size = 128\n",
    );
    let err = Scenario::from_file(&path).unwrap_err();
    // `fft_size` starts line 5, column 1 (counted by hand).
    assert_eq!((err.line(), err.column()), (Some(5), Some(1)), "{err}");
    let shown = err.to_string();
    assert!(shown.contains("unknown.toml:5:1"), "{shown}");
}

#[test]
fn core_layout_error_is_placed_at_the_numerology_table() {
    // guard_low_bins = 0 passes the harness's per-key checks but breaks the core's layout
    // rule (the Nyquist bin must stay unused): the error names the rule and the table.
    let text = "name = \"guards\"\n\n[numerology]\nfft_len = 64\nguard_low_bins = 0\n";
    let path = write_temp("guards.toml", text);
    let (scenario, text) = Scenario::from_file_with_text(&path).unwrap();
    let origin = path.display().to_string();
    let err = numerology_of(&scenario, &origin, &text).unwrap_err();
    assert_eq!(err.line(), Some(3), "{err}");
    assert!(err.to_string().contains("guard bands"), "{err}");
}

#[test]
fn truncated_file_is_a_syntax_error_with_position() {
    let path = write_temp("cut.toml", "name = \"cut\"\n[numerology]\nfft_len = 6");
    let ok = Scenario::from_file(&path);
    // "fft_len = 6" parses (a bad value, not a syntax error): reported at line 3, column 11.
    let err = ok.unwrap_err();
    assert_eq!((err.line(), err.column()), (Some(3), Some(11)), "{err}");
    let path = write_temp("cut2.toml", "name = \"cut\"\n[numerology\n");
    let err = Scenario::from_file(&path).unwrap_err();
    assert_eq!(err.line(), Some(2), "{err}");
}

#[test]
fn default_scenario_runs_and_agrees_with_theory() {
    let scenario = Scenario::default_scenario();
    let nu = numerology_of(&scenario, "default", "").unwrap();
    let report = evaluate_awgn(&scenario, &nu).unwrap();
    // Every point with ≥ 100 errors lies within ±4σ of Cho & Yoon (2002) / Proakis.
    assert!(report.all_agree());
    let judged = report
        .rows
        .iter()
        .filter(|r| r.verdict == Verdict::Agrees)
        .count();
    assert!(judged >= 20, "only {judged} points reached a verdict");
    // The default channel is multipath Rayleigh: ideal-CSI points agree with the flat-Rayleigh
    // closed form (Proakis & Salehi ch. 13; Cho & Yoon 2002 averaged over Rayleigh) within
    // ±4·s/√frames, and the pilot estimator's points are never better than ideal knowledge
    // by more than that tolerance (an estimate cannot beat the truth; common practice).
    let fading = flatbin_harness::evaluate_fading::evaluate_fading(&scenario, &nu)
        .unwrap()
        .expect("the default scenario fades");
    assert!(fading.all_agree());
    let judged = fading
        .rows
        .iter()
        .filter(|r| r.verdict == Verdict::Agrees)
        .count();
    assert!(
        judged >= 20,
        "only {judged} fading points reached a verdict"
    );
    for r in &fading.rows {
        if let (Some(e), Some(i)) = (r.estimated, r.ideal) {
            assert!(e.ber + e.tolerance + i.tolerance >= r.theory_ideal, "{r:?}");
        }
    }
    // The BER figures are written, SVG and PNG.
    let dir = std::env::temp_dir().join(format!("flatbin-ber-plots-{}", std::process::id()));
    let files =
        flatbin_harness::evaluate_fading::write_ber_plots(&scenario, &report, Some(&fading), &dir)
            .unwrap();
    assert_eq!(files.len(), 4);
    for f in &files {
        let bytes = std::fs::read(f).unwrap();
        assert!(bytes.len() > 1000, "{}", f.display());
    }
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn cheap_front_end_example_parses_and_characterises_every_impairment() {
    let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("../harness/scenarios/cheap-front-end.toml");
    let s = Scenario::from_file(&path).unwrap();
    let text = flatbin_harness::characterise::render_text(
        &flatbin_harness::characterise::characterise(&s).unwrap(),
    );
    for line in [
        "phase noise",
        "IQ imbalance",
        "DC offset",
        "ADC",
        "timing",
        "interferer",
    ] {
        assert!(text.contains(line), "`{line}` missing from:\n{text}");
    }
    // −42 kHz ± 7.8 kHz at 3906.25 Hz spacing: bins −13..=−9 (arithmetic by hand).
    let i = flatbin_harness::characterise::impairment_summary(&s);
    assert_eq!(i.interferer_bins, Some((-13, -9)));
}
