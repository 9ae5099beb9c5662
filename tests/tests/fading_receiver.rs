//! The receiver over multipath Rayleigh fading: ideal channel knowledge against the flat
//! Rayleigh closed forms (REFERENCES item 5), and the core's estimator.

use flatbin::numerology::NumerologyParams;
use flatbin::{Modulation, Numerology};
use flatbin_harness::channel::profile::{DelayProfile, Quantisation};
use flatbin_harness::fading_link::{fading_errors, Csi, FadingChannel};
use flatbin_harness::link::StopRule;
use flatbin_harness::rng::stream_rng;
use flatbin_harness::theory::ber::{ber_rayleigh, db_to_linear};

fn exp_taps(rms_samples: f64, fs: f64) -> Vec<(usize, f64)> {
    DelayProfile::exponential(rms_samples / fs, fs)
        .unwrap()
        .to_sample_taps(fs, Quantisation::Nearest)
}

#[test]
fn ideal_csi_multipath_ber_matches_flat_rayleigh() {
    // Each subcarrier of a Rayleigh multipath channel is itself Rayleigh, so the BER averaged
    // over subcarriers has the flat-Rayleigh mean (REFERENCES item 5; Proakis & Salehi ch. 13
    // for QPSK, Cho & Yoon 2002 averaged over Rayleigh for 16-QAM). One channel draw per frame
    // of one symbol; tolerance 4·s/√frames with s the spread of the per-frame BER.
    let nu = Numerology::new(NumerologyParams::default()).unwrap();
    let fs = f64::from(nu.sample_rate_hz());
    let channel = FadingChannel {
        taps: exp_taps(1.0, fs),
        doppler_hz: 10.0,
        held: true,
        symbols_per_frame: 1,
    };
    // The profile fits the CP: no ISI, so each bin is exactly flat Rayleigh.
    assert!(channel.taps.iter().all(|t| t.0 <= nu.cp_len()));
    for (m, eb_n0_db, frames) in [
        (Modulation::Qpsk, 14.0, 20_000u64),
        (Modulation::Qpsk, 24.0, 60_000),
        (Modulation::Qam16, 18.0, 20_000),
    ] {
        let bps = m.bits_per_symbol() as u32;
        let es_n0_db = eb_n0_db + 10.0 * f64::from(bps).log10();
        let stop = StopRule {
            min_errors: u64::MAX,
            max_bits: frames * nu.data_len(0) as u64 * u64::from(bps),
        };
        let r = fading_errors(
            &nu,
            m,
            es_n0_db,
            &channel,
            Csi::Ideal,
            &mut stream_rng(61, bps as u64 * 100 + eb_n0_db as u64),
            stop,
        )
        .unwrap();
        let p = ber_rayleigh(bps, db_to_linear(eb_n0_db)).unwrap();
        let tol = 4.0 * r.frame_ber_sd / (r.frames as f64).sqrt();
        println!(
            "{m:?} Eb/N0 {eb_n0_db} dB: BER {:.4e} ({} errors, {} frames), theory {p:.4e}, tolerance ±{tol:.2e}",
            r.count.ber(), r.count.errors, r.frames
        );
        assert!(r.count.errors >= 100);
        assert!((r.count.ber() - p).abs() <= tol);
    }
}
