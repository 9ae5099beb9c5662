//! `flatbin channel --plots`: the figures are written, and the series they show agree with the
//! published closed forms.
//!
//! Sources (REFERENCES.md items 1 and 3): R. H. Clarke, Bell Syst. Tech. J. 47(6), 1968, and
//! W. C. Jakes (ed.), Microwave Mobile Communications, Wiley 1974, ch. 1 (ACF J0(2π fd τ),
//! Doppler spectrum, Rayleigh envelope CDF; from memory); M. Russell, G. L. Stüber, Proc. IEEE
//! VTC'95, pp. 820–824 (exact Jakes ICI sum; citation confirmed, values from REFERENCES table
//! 1a); PNG signature and IHDR layout: RFC 2083 (PNG 1.0), sections 3.1 and 4.1.1 (from memory).

use std::path::{Path, PathBuf};
use std::sync::OnceLock;

use flatbin_harness::plots::{write_plots, ChannelPlots};
use flatbin_harness::scenario::Scenario;

/// A fresh directory under the system temp dir, unique to this process and `tag`.
fn temp_dir(tag: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!(
        "flatbin-channel-plots-{}-{tag}",
        std::process::id()
    ));
    let _ = std::fs::remove_dir_all(&dir);
    dir
}

/// The default scenario's plots, written once for all tests of this file.
fn default_plots() -> &'static (PathBuf, ChannelPlots) {
    static PLOTS: OnceLock<(PathBuf, ChannelPlots)> = OnceLock::new();
    PLOTS.get_or_init(|| {
        let dir = temp_dir("default");
        let plots = write_plots(&Scenario::default_scenario(), &dir).expect("plots written");
        (dir, plots)
    })
}

const FIGURES: [&str; 4] = ["doppler_spectrum", "acf", "envelope_cdf", "ici_vs_fdt"];

fn check_png(path: &Path) {
    let bytes = std::fs::read(path).unwrap();
    // RFC 2083 §3.1: the eight-byte PNG signature.
    assert_eq!(
        &bytes[..8],
        &[0x89, b'P', b'N', b'G', 0x0d, 0x0a, 0x1a, 0x0a],
        "{}",
        path.display()
    );
    // RFC 2083 §4.1.1: the first chunk is IHDR (length 13), width and height big-endian.
    assert_eq!(&bytes[12..16], b"IHDR");
    let width = u32::from_be_bytes(bytes[16..20].try_into().unwrap());
    let height = u32::from_be_bytes(bytes[20..24].try_into().unwrap());
    assert!(width >= 400 && height >= 300, "{width}×{height}");
}

fn check_svg(path: &Path) {
    let text = std::fs::read_to_string(path).unwrap();
    let body = text.trim_start();
    let body = if body.starts_with("<?xml") {
        body.split_once("?>")
            .map_or("", |(_, rest)| rest)
            .trim_start()
    } else {
        body
    };
    assert!(body.starts_with("<svg"), "{}", path.display());
    assert!(text.trim_end().ends_with("</svg>"), "{}", path.display());
    // Drawn, not blank: polylines or paths for the curves, text for the labels.
    assert!(text.contains("<text") && (text.contains("<polyline") || text.contains("<path")));
}

#[test]
fn all_figures_written_as_svg_and_png() {
    let (dir, plots) = default_plots();
    let mut expected = Vec::new();
    for stem in FIGURES {
        for ext in ["svg", "png"] {
            expected.push(dir.join(format!("{stem}.{ext}")));
        }
    }
    assert_eq!(plots.files, expected);
    for f in &plots.files {
        let len = std::fs::metadata(f).unwrap().len();
        assert!(len > 1000, "{}: {len} bytes", f.display());
        match f.extension().and_then(|e| e.to_str()) {
            Some("png") => check_png(f),
            Some("svg") => check_svg(f),
            _ => panic!("unexpected file {}", f.display()),
        }
    }
    assert!(plots.data.notes.is_empty(), "{:?}", plots.data.notes);
    // Only this test reads the files; the others use the returned series.
    let _ = std::fs::remove_dir_all(dir);
}

#[test]
fn envelope_cdf_is_rayleigh() {
    // Rayleigh envelope CDF P(R ≤ ρ R_rms) = 1 − exp(−ρ²) (Clarke 1968; Jakes 1974, ch. 1; from
    // memory). Every sample comes from its own generator realisation, so the samples are
    // independent: tolerance 4·sqrt(p(1−p)/n) (DEVELOPERS.md, binomial, common practice).
    let env = default_plots().1.data.envelope.as_ref().unwrap();
    let n = env.samples as f64;
    for db in [-20.0, -10.0, -3.0, 0.0, 3.0] {
        let rho = 10f64.powf(db / 20.0);
        let want = 1.0 - (-rho * rho).exp();
        let (_, got) = *env
            .points
            .iter()
            .find(|p| (p.0 - db).abs() < 1e-9)
            .unwrap_or_else(|| panic!("no point at {db} dB"));
        let tol = 4.0 * (want * (1.0 - want) / n).sqrt();
        println!("ρ = {db:+} dB: simulated {got:.5}, Rayleigh {want:.5}, ±{tol:.5}");
        assert!((got - want).abs() <= tol, "ρ = {db} dB: {got} vs {want}");
    }
    // The formula itself against REFERENCES table 3a (ρ = 0.1, −20 dB: 0.00995017).
    assert!(((1.0 - (-0.01f64).exp()) - 0.00995017).abs() < 1e-8);
    // Monotone non-decreasing, a CDF.
    assert!(env.points.windows(2).all(|w| w[1].1 >= w[0].1));
}

#[test]
fn acf_follows_j0_at_the_first_lags() {
    // E[h(t+τ) h*(t)] = J0(2π fd τ) (Clarke 1968; Jakes 1974, ch. 1; from memory); values of
    // REFERENCES table 3b. Tolerance 4·s/sqrt(n) over the independent realisations
    // (DEVELOPERS.md, common practice), and the sample must make that at most 0.03 (the
    // tolerance of tests/channel_stats.rs) so the check cannot pass on a tiny sample.
    let acf = default_plots().1.data.acf.as_ref().unwrap();
    let n = acf.realisations as f64;
    let table = [
        (0.0, 1.0), // unit power
        (0.05, 0.975478),
        (0.1, 0.903713),
        (0.2, 0.642512),
        (0.3, 0.290564),
        (0.5, -0.304242),
        (1.0, 0.220277),
    ];
    for (fd_tau, j0) in table {
        let p = acf
            .points
            .iter()
            .find(|p| (p.fd_tau - fd_tau).abs() < 1e-9)
            .unwrap_or_else(|| panic!("no lag {fd_tau}"));
        let tol = 4.0 * p.std_dev / n.sqrt();
        println!(
            "fd·τ = {fd_tau}: simulated {:.5} (±{tol:.5}), J0 {j0:.5}",
            p.mean
        );
        assert!(tol <= 0.03, "sample too small at {fd_tau}: ±{tol}");
        assert!(
            (p.mean - j0).abs() <= tol.max(1e-6),
            "fd·τ = {fd_tau}: {} vs {j0}",
            p.mean
        );
    }
}

#[test]
fn doppler_spectrum_has_the_jakes_shape() {
    // Clarke/Jakes PSD S(f) = 1/(π fd sqrt(1 − (f/fd)²)) for |f| < fd, 0 beyond (Clarke 1968;
    // Jakes 1974; from memory). Its mean-square Doppler is fd²/2 (REFERENCES item 1) and its
    // power inside |f| ≤ fd/2 is (2/π) arcsin(1/2) = 1/3 (integral of the PSD).
    let s = default_plots().1.data.spectrum.as_ref().unwrap();
    let bin = s.points[1].0 - s.points[0].0;
    let area: f64 = s.points.iter().map(|p| p.1).sum::<f64>() * bin;
    let second: f64 = s.points.iter().map(|p| p.0 * p.0 * p.1).sum::<f64>() * bin;
    // Bins are centred on multiples of the bin width; the bins at ±fd/2 count half.
    let inner: f64 = s
        .points
        .iter()
        .map(|p| {
            let edge = (p.0.abs() - 0.5).abs() < 1e-9 * bin;
            if edge {
                0.5 * p.1
            } else if p.0.abs() < 0.5 {
                p.1
            } else {
                0.0
            }
        })
        .sum::<f64>()
        * bin;
    // Beyond fd plus the Hann main lobe (±2 bins), only side-lobe leakage remains: less than
    // 0.1 % of the power (Hann side lobes ≤ −31 dB, common practice).
    let outside: f64 = s
        .points
        .iter()
        .filter(|p| p.0.abs() > 1.0 + 2.0 * bin)
        .map(|p| p.1)
        .sum::<f64>()
        * bin;
    // Per realisation, an M-sinusoid generator's mean-square Doppler and band powers move by at
    // most about 1/(2M) and 1/M with the random rotation θ (its frequencies sit on a grid of
    // step π/(2M) in arrival angle); over R independent realisations 4·that/sqrt(R) bounds the
    // error (common practice); the window adds (1/3)·bin² (Hann, from memory), negligible.
    let r = (s.realisations as f64).sqrt();
    let m = s.sinusoids as f64;
    let tol_second = 4.0 / (2.0 * m) / r;
    let tol_inner = 4.0 / m / r;
    println!(
        "area {area:.6}; E[(f/fd)²] {second:.5} vs 0.5 (±{tol_second:.4}); \
         power |f| ≤ fd/2 {inner:.4} vs 1/3 (±{tol_inner:.4}); beyond fd {outside:.2e}"
    );
    assert!((area - 1.0).abs() < 1e-9, "unit area: {area}");
    assert!((second - 0.5).abs() <= tol_second, "E[ν²] = {second}");
    assert!((inner - 1.0 / 3.0).abs() <= tol_inner, "inner = {inner}");
    assert!(outside < 1e-3, "beyond fd: {outside}");
}

#[test]
fn measured_ici_matches_the_exact_sum() {
    // Russell & Stüber exact Jakes ICI sum for N = 64 (the default scenario's FFT size),
    // REFERENCES table 1a. Within 10 %, and the batch-means standard error must put 4σ inside
    // that (REFERENCES item 1, "Tests", common practice).
    let ici = &default_plots().1.data.ici;
    assert_eq!(ici.fft_len, 64);
    let table = [
        (0.01, 0.000164437),
        (0.02, 0.000657553),
        (0.05, 0.00410121),
        (0.1, 0.016284),
        (0.2, 0.0632454),
    ];
    for (fd_t, exact) in table {
        let p = ici
            .points
            .iter()
            .find(|p| (p.fd_t - fd_t).abs() < 1e-12)
            .unwrap_or_else(|| panic!("no point at fd·T = {fd_t}"));
        println!(
            "fd·T = {fd_t}: measured {:.5e} (±{:.1e}), exact sum {exact:.5e} ({:+.2} %)",
            p.measured,
            p.std_error,
            100.0 * (p.measured / exact - 1.0)
        );
        assert!(
            (p.measured / exact - 1.0).abs() <= 0.10,
            "fd·T = {fd_t}: {} vs {exact}",
            p.measured
        );
        assert!(4.0 * p.std_error / exact <= 0.10, "sample too small");
    }
    // Ends of the range, against the small-fd·T expansion (2π fd·T)²/24 (Li & Cimini 2001
    // derivation; table 1a: it exceeds the exact sum by 0.03 % at 0.01, 4 % at 0.2; at 0.3 by
    // more, so there only the /12 bound of Li & Cimini holds).
    let end = |fd_t: f64| ici.points.iter().find(|p| p.fd_t == fd_t).unwrap();
    let approx = |x: f64| (2.0 * std::f64::consts::PI * x).powi(2) / 24.0;
    let low = end(0.005);
    assert!(
        (low.measured / approx(0.005) - 1.0).abs() <= 0.10,
        "{low:?}"
    );
    let high = end(0.3);
    assert!(high.measured <= 2.0 * approx(0.3) && high.measured >= 0.8 * approx(0.3));
    // The scenario's operating point, by hand: 120 km/h at 915 MHz → fd = 101.74 Hz;
    // T = 64 / 250 kHz = 256 µs → fd·T = 0.026045.
    assert!((ici.operating_fd_t - 0.026045).abs() < 1e-5);
}

#[test]
fn static_scenario_has_only_the_ici_figure_and_is_reproducible() {
    // No motion: no Doppler figures, a note says so; the ICI points depend only on the seed,
    // N and fs, so they equal the default scenario's bit for bit (same seed, same numerology).
    let mut scenario = Scenario::default_scenario();
    scenario.channel.max_speed_kmh = 0.0;
    let dir = temp_dir("static");
    let plots = write_plots(&scenario, &dir).unwrap();
    assert_eq!(
        plots.files,
        vec![dir.join("ici_vs_fdt.svg"), dir.join("ici_vs_fdt.png")]
    );
    assert!(plots.data.spectrum.is_none() && plots.data.acf.is_none());
    assert!(!plots.data.notes.is_empty());
    let default = &default_plots().1.data.ici.points;
    for (a, b) in plots.data.ici.points.iter().zip(default) {
        assert_eq!(
            a.measured.to_bits(),
            b.measured.to_bits(),
            "fd·T = {}",
            a.fd_t
        );
    }
    let _ = std::fs::remove_dir_all(&dir);
}
