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
        mse_from_symbol: 0,
        min_frames: 0,
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

/// Predicted BER with the estimator at `es_n0_db`: the mean over data bins of the Rayleigh BER
/// at the effective SNR that each bin's analytic estimation MSE leaves (REFERENCES items 5
/// and 6; effective SNR SNR(1 − mse)/(1 + SNR·mse), Hassibi & Hochwald 2003, from memory).
fn predicted_ber(nu: &Numerology, bps: u32, es_n0_db: f64, rms: f64, taps: &[(usize, f64)]) -> f64 {
    use flatbin::correlation::ChannelModel;
    use flatbin::estimate::{ChannelEstimator, EstimatorConfig, FreqInterpolation, TimeFilter};
    use flatbin_harness::estimator_model;
    use flatbin_harness::theory::estimation::{FreqCorr, SeparableCorr};
    let fs = f64::from(nu.sample_rate_hz());
    let n0 = 10f64.powf(-es_n0_db / 10.0);
    let cfg = EstimatorConfig {
        freq: FreqInterpolation::Lmmse,
        time: TimeFilter::Latest,
        model: ChannelModel {
            rms_delay_s: (rms / fs) as f32,
            doppler_hz: 0.0,
        },
        noise_var: n0 as f32,
    };
    let est = Box::new(ChannelEstimator::<64, 4, 4>::new(nu, cfg).unwrap());
    let corr = SeparableCorr::freq_only(FreqCorr::DelayPdp {
        taps: taps.iter().map(|&(d, p)| (d as f64, p)).collect(),
        n_fft: 64,
    });
    let mse = estimator_model::frequency_stage_mse(nu, &est, 0, &corr, n0).unwrap();
    estimator_model::predicted_ber(bps, 1.0 / n0, &mse).unwrap()
}

/// Es/N0 (dB) at which a decreasing `ber(dB)` crosses `target`, by bisection on [lo, hi].
fn crossing(target: f64, mut lo: f64, mut hi: f64, ber: impl Fn(f64) -> f64) -> f64 {
    for _ in 0..60 {
        let mid = 0.5 * (lo + hi);
        if ber(mid) > target {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    0.5 * (lo + hi)
}

#[test]
fn estimator_snr_loss_matches_the_analytic_mse_prediction() {
    // N = 64, a pilot every 8th bin, no boost, RMS delay 0.5 samples, fd·T = 0.01 (per-sample
    // fading), frequency-only LMMSE with K = 4. The SNR loss at BER 1e-2 against ideal
    // knowledge (flat-Rayleigh closed form, REFERENCES item 5) is measured by Monte Carlo and
    // compared with the loss the analytic MSE predicts (REFERENCES item 6): within 0.5 dB.
    use flatbin::correlation::ChannelModel;
    use flatbin::equalize::Equalizer;
    use flatbin::estimate::{EstimatorConfig, FreqInterpolation, TimeFilter};
    use flatbin::numerology::PilotParams;
    use flatbin::receiver::ReceiverConfig;
    let nu = Numerology::new(NumerologyParams {
        pilots: PilotParams {
            spacing: 8,
            ..PilotParams::default()
        },
        ..NumerologyParams::default()
    })
    .unwrap();
    let fs = f64::from(nu.sample_rate_hz());
    let rms = 0.5;
    let taps = exp_taps(rms, fs);
    let doppler_hz = 0.01 * fs / 64.0;
    for (m, seed) in [(Modulation::Qpsk, 1u64), (Modulation::Qam16, 2)] {
        let bps = m.bits_per_symbol() as u32;
        let ideal = crossing(1e-2, 0.0, 40.0, |es| {
            ber_rayleigh(bps, db_to_linear(es - 10.0 * f64::from(bps).log10())).unwrap()
        });
        let predicted = crossing(1e-2, 0.0, 45.0, |es| {
            predicted_ber(&nu, bps, es, rms, &taps)
        });
        // Measure at the predicted point ± 0.75 dB and interpolate log BER linearly in dB.
        let measure = |es: f64, stream: u64| {
            let rx = ReceiverConfig {
                estimator: EstimatorConfig {
                    freq: FreqInterpolation::Lmmse,
                    time: TimeFilter::Latest,
                    model: ChannelModel {
                        rms_delay_s: (rms / fs) as f32,
                        doppler_hz: doppler_hz as f32,
                    },
                    noise_var: 10f64.powf(-es / 10.0) as f32,
                },
                equalizer: Equalizer::Mmse,
                cpe: false,
            };
            let channel = FadingChannel {
                taps: taps.clone(),
                doppler_hz,
                held: false,
                symbols_per_frame: 10,
                mse_from_symbol: 0,
                min_frames: 0,
            };
            let stop = StopRule {
                min_errors: u64::MAX,
                max_bits: 3000 * 10 * (nu.data_len(0) * m.bits_per_symbol()) as u64,
            };
            let r = fading_errors(
                &nu,
                m,
                es,
                &channel,
                Csi::Estimated(rx),
                &mut stream_rng(81, seed * 10 + stream),
                stop,
            )
            .unwrap();
            r.count.ber()
        };
        let (lo, hi) = (predicted - 0.75, predicted + 0.75);
        let (b_lo, b_hi) = (measure(lo, 0), measure(hi, 1));
        let t = (b_lo.ln() - 1e-2f64.ln()) / (b_lo.ln() - b_hi.ln());
        let measured = lo + t * (hi - lo);
        println!(
            "{m:?}: BER 1e-2 at Es/N0 ideal {ideal:.2} dB, estimated measured {measured:.2} dB \
             (BER {b_lo:.3e} at {lo:.2}, {b_hi:.3e} at {hi:.2}), predicted {predicted:.2} dB: \
             loss measured {:.2} dB, predicted {:.2} dB",
            measured - ideal,
            predicted - ideal
        );
        assert!(((measured - ideal) - (predicted - ideal)).abs() <= 0.5);
    }
}
