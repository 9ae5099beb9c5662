//! Picks the memory layout for the target board and tells the firmware which core it runs on,
//! and writes the Q15 receiver designs as `static` tables (`$OUT_DIR/rx_designs.rs`) and the
//! frame preamble of the synchronisation captures (`$OUT_DIR/sync_preambles.rs`).
//!
//! The designs are computed here, on the host, by `DesignQ15::new` (floating point, f64
//! Cholesky) for the settings in `vectors_gen::rx`, so the firmware gets integers only and a
//! Cortex-M0 build runs the receiver without any floating point. The preamble waveforms are
//! computed here by `vectors_gen::sync::write_preamble_f32` (the host's f32 FFT), so the
//! target never generates them; the host checker calls the same function. The noise tracker's
//! constants (`NoiseTrackDesignQ15::new`, f64) are written the same way
//! (`$OUT_DIR/track_designs.rs`).

use std::fmt::Write as _;
use std::{env, fs, path::PathBuf};

use flatbin::estimate::TimeFilter;
use flatbin::fft::OfdmFft;
use flatbin::fft_q15::Q15Fft;
use flatbin::fixed_math::Scaled;
use flatbin::noise_track_q15::NoiseTrackDesignQ15;
use flatbin::receiver_q15::DesignQ15;
use flatbin::Numerology;
use vectors_gen::rx::{numerology_params, receiver_config, RX_DESIGNS, RX_K, RX_M};

fn main() {
    let target = env::var("TARGET").unwrap_or_default();
    let (memory, core) = if target.starts_with("thumbv6m") {
        ("memory/microbit.x", "cortex-m0")
    } else {
        ("memory/mps2-an386.x", "cortex-m4f")
    };
    let out = PathBuf::from(env::var_os("OUT_DIR").expect("cargo sets OUT_DIR"));
    fs::copy(memory, out.join("memory.x")).expect("copy memory.x");
    println!("cargo::rustc-link-search={}", out.display());
    println!("cargo::rustc-env=FLATBIN_CORE={core}");
    println!("cargo::rustc-check-cfg=cfg(core_m0)");
    if core == "cortex-m0" {
        println!("cargo::rustc-cfg=core_m0");
    }

    let mut src = String::from(
        "// Written by firmware/build.rs: Q15 receiver designs computed on the host by\n\
         // DesignQ15::new for the settings in vectors_gen::rx::RX_DESIGNS.\n",
    );
    designs::<64>(&mut src);
    designs::<256>(&mut src);
    fs::write(out.join("rx_designs.rs"), src).expect("write rx_designs.rs");

    let mut src = String::from(
        "// Written by firmware/build.rs: the frame preamble (symbols A and B with their CPs, unit\n\
         // scale) computed on the host by vectors_gen::sync::write_preamble_f32, as f32 bits.\n",
    );
    preamble::<64>(&mut src);
    preamble::<256>(&mut src);
    fs::write(out.join("sync_preambles.rs"), src).expect("write sync_preambles.rs");

    let mut src = String::from(
        "// Written by firmware/build.rs: the noise tracker's constants computed on the host by\n\
         // NoiseTrackDesignQ15::new for receiver design 0 of vectors_gen::rx::RX_DESIGNS.\n",
    );
    track_design::<64>(&mut src);
    track_design::<256>(&mut src);
    fs::write(out.join("track_designs.rs"), src).expect("write track_designs.rs");

    let mut src = String::from(
        "// Written by firmware/build.rs: the receiver outputs the trackers read (FFT bins, channel\n\
         // estimate, common phase, equalized symbols) of the tracking cases, recorded on the host\n\
         // by vectors_gen::track::record_case with receiver design 0.\n",
    );
    track_stored::<64>(&mut src);
    fs::write(out.join("track_stored.rs"), src).expect("write track_stored.rs");

    println!("cargo::rerun-if-changed=memory");
    println!("cargo::rerun-if-changed=build.rs");
}

/// Appends the designs at size `N` and their `RxDesigns<N>` implementation.
fn designs<const N: usize>(src: &mut String) {
    let nu = Numerology::new(numerology_params(N)).expect("numerology of the receiver checks");
    let residual = <Q15Fft<N> as OfdmFft<N>>::RESIDUAL_SCALE;
    let mut names = Vec::new();
    for spec in &RX_DESIGNS {
        let d = Box::new(
            DesignQ15::<N, RX_K, RX_M>::new(&nu, &receiver_config(spec), residual)
                .expect("receiver design"),
        );
        let name = format!("RX_DESIGN_{}_{N}", spec.label);
        let _ = writeln!(
            src,
            "/// Design `{}` at N = {N} (see `vectors_gen::rx::RX_DESIGNS`).\n\
             pub static {name}: DesignQ15<{N}, {RX_K}, {RX_M}> = {};",
            spec.label,
            literal(&d)
        );
        names.push(name);
    }
    let _ = writeln!(
        src,
        "impl RxDesigns<{N}> for Tables {{\n    fn design(index: usize) -> \
         Option<&'static DesignQ15<{N}, {RX_K}, {RX_M}>> {{\n        match index {{"
    );
    for (i, name) in names.iter().enumerate() {
        let _ = writeln!(src, "            {i} => Some(&{name}),");
    }
    let _ = writeln!(src, "            _ => None,\n        }}\n    }}\n}}");
}

/// Appends `TRACK_DESIGN_<N>`, the noise tracker's design at size `N` for the receiver design
/// `vectors_gen::track::TRACK_RX_DESIGN`, and its `TrackDesigns<N>` implementation.
fn track_design<const N: usize>(src: &mut String) {
    let nu = Numerology::new(numerology_params(N)).expect("numerology of the tracking checks");
    let residual = <Q15Fft<N> as OfdmFft<N>>::RESIDUAL_SCALE;
    let spec = &RX_DESIGNS[vectors_gen::track::TRACK_RX_DESIGN];
    let d = Box::new(
        NoiseTrackDesignQ15::<N>::new::<RX_K, RX_M>(&nu, &receiver_config(spec), residual)
            .expect("noise tracker design"),
    );
    let mut s = String::from("NoiseTrackDesignQ15 {\n");
    let _ = writeln!(
        s,
        "    pilot_coef: {},",
        list(&d.pilot_coef, |(a, b)| format!("({a}, {b})"))
    );
    let _ = writeln!(s, "    pilot_scale: {},", list(&d.pilot_scale, scaled));
    let _ = writeln!(s, "    inv_pilot_power: {},", scaled(&d.inv_pilot_power));
    let _ = writeln!(
        s,
        "    estimator_mse: {},",
        list(&d.estimator_mse, |v| v.to_string())
    );
    let _ = writeln!(s, "    unit_power: {},", d.unit_power);
    let _ = writeln!(
        s,
        "    dd: {},",
        list(&d.dd, |t| format!(
            "DdTableQ15 {{ points: {} }}",
            list(&t.points, |p| format!(
                "DdPointQ15 {{ eps_q24: {}, ratio_q16: {}, slope_mant: {}, slope_shift: {} }}",
                p.eps_q24, p.ratio_q16, p.slope_mant, p.slope_shift
            ))
        ))
    );
    s.push('}');
    let _ = writeln!(
        src,
        "/// The noise tracker's design at N = {N}.\n\
         pub static TRACK_DESIGN_{N}: NoiseTrackDesignQ15<{N}> = {s};\n\
         impl TrackDesigns<{N}> for Tables {{\n    fn track_design() -> \
         &'static NoiseTrackDesignQ15<{N}> {{\n        &TRACK_DESIGN_{N}\n    }}\n}}"
    );
}

/// Appends the stored receiver outputs at size `N` (`STORED_*_<N>`, one entry per case of
/// `vectors_gen::track::TRACK_CASES`, frame and symbol, in that order) and their
/// `TrackStored<N>` implementation.
fn track_stored<const N: usize>(src: &mut String) {
    use vectors_gen::rx::RX_SYMBOLS;
    use vectors_gen::track::{record_case, Buffers, TRACK_CASES, TRACK_FRAMES};
    let nu = Numerology::new(numerology_params(N)).expect("numerology of the tracking checks");
    let residual = <Q15Fft<N> as OfdmFft<N>>::RESIDUAL_SCALE;
    let spec = &RX_DESIGNS[vectors_gen::track::TRACK_RX_DESIGN];
    let design = Box::new(
        DesignQ15::<N, RX_K, RX_M>::new(&nu, &receiver_config(spec), residual)
            .expect("receiver design"),
    );
    let mut rx = Box::new(
        flatbin::receiver_q15::ReceiverQ15::<Q15Fft<N>, N, RX_K, RX_M>::new(
            &nu,
            Q15Fft::new(),
            *design,
        )
        .expect("receiver"),
    );
    let mut samples = vec![flatbin::fixed::Cq15::ZERO; N + N / 8];
    let mut equalized = vec![flatbin::fixed::Cq15::ZERO; N];
    let mut sinr = vec![Scaled::default(); N];
    let mut llrs = vec![0i8; 4 * N];
    let mut noise = vec![0u64; N];
    let mut b = Buffers {
        samples: &mut samples,
        equalized: &mut equalized,
        sinr: &mut sinr,
        llrs: &mut llrs,
        noise: &mut noise,
    };
    let cq = |c: &flatbin::fixed::Cq15| format!("Cq15 {{ re: {}, im: {} }}", c.re, c.im);
    let padded = |v: &[flatbin::fixed::Cq15]| {
        let mut p = v.to_vec();
        p.resize(N, flatbin::fixed::Cq15::ZERO);
        list(&p, cq)
    };
    let (mut bins, mut bins_exp, mut est, mut est_exp, mut cpe, mut eq, mut eq_len, mut rx_err) = (
        vec![],
        vec![],
        vec![],
        vec![],
        vec![],
        vec![],
        vec![],
        vec![],
    );
    let mut est_len = 0;
    for case in TRACK_CASES {
        let ok = record_case(case, &nu, &mut rx, &mut b, &mut |_, _, s| {
            bins.push(list(s.bins, cq));
            bins_exp.push(s.bins_exp.to_string());
            est_len = s.estimate.len();
            est.push(padded(s.estimate));
            est_exp.push(s.estimate_exp.to_string());
            cpe.push(match s.common_phase {
                None => "None".to_string(),
                Some(c) => format!("Some({})", cq(&c)),
            });
            eq.push(padded(s.equalized));
            eq_len.push(s.equalized.len().to_string());
            rx_err.push(s.rx_error.to_string());
        });
        assert!(ok, "recording tracking case {case} at N = {N}");
    }
    let count = TRACK_CASES.len() * TRACK_FRAMES as usize * RX_SYMBOLS as usize;
    assert_eq!(bins.len(), count, "stored symbols at N = {N}");
    let table = |name: &str, ty: &str, items: &[String]| {
        format!(
            "/// Stored receiver outputs at N = {N}: {name}.\npub static STORED_{name}_{N}: [{ty}; {count}] = [{}];\n",
            items.join(",\n")
        )
    };
    src.push_str(&table("BINS", &format!("[Cq15; {N}]"), &bins));
    src.push_str(&table("BINS_EXP", "i32", &bins_exp));
    src.push_str(&table("ESTIMATE", &format!("[Cq15; {N}]"), &est));
    src.push_str(&table("ESTIMATE_EXP", "i32", &est_exp));
    src.push_str(&table("COMMON_PHASE", "Option<Cq15>", &cpe));
    src.push_str(&table("EQUALIZED", &format!("[Cq15; {N}]"), &eq));
    src.push_str(&table("EQUALIZED_LEN", "u8", &eq_len));
    src.push_str(&table("RX_ERROR", "bool", &rx_err));
    let _ = writeln!(
        src,
        "impl TrackStored<{N}> for Tables {{\n    const ESTIMATE_LEN: usize = {est_len};\n    \
         fn stored(index: usize) -> Option<StoredSymbol<'static, {N}>> {{\n        \
         Some(StoredSymbol {{\n            bins: STORED_BINS_{N}.get(index)?,\n            \
         bins_exp: *STORED_BINS_EXP_{N}.get(index)?,\n            \
         estimate: STORED_ESTIMATE_{N}.get(index)?.get(..Self::ESTIMATE_LEN)?,\n            \
         estimate_exp: *STORED_ESTIMATE_EXP_{N}.get(index)?,\n            \
         common_phase: *STORED_COMMON_PHASE_{N}.get(index)?,\n            \
         equalized: STORED_EQUALIZED_{N}.get(index)?.get(..usize::from(*STORED_EQUALIZED_LEN_{N}.get(index)?))?,\n            \
         rx_error: *STORED_RX_ERROR_{N}.get(index)?,\n        }})\n    }}\n}}"
    );
}

/// Appends `PREAMBLE_<N>`, the preamble at size `N`.
fn preamble<const N: usize>(src: &mut String) {
    let mut pre = vec![flatbin::Cf32::new(0.0, 0.0); vectors_gen::sync::preamble_len(N)];
    assert!(
        vectors_gen::sync::write_preamble_f32::<N>(&mut pre),
        "preamble at N = {N}"
    );
    let _ = writeln!(
        src,
        "/// The preamble at N = {N} ({} samples).\npub static PREAMBLE_{N}: [Cf32; {}] = {};",
        pre.len(),
        pre.len(),
        list(&pre, |v| format!(
            "Cf32::new(f32::from_bits({:#010x}), f32::from_bits({:#010x}))",
            v.re.to_bits(),
            v.im.to_bits()
        ))
    );
}

fn list<T>(items: impl IntoIterator<Item = T>, f: impl Fn(T) -> String) -> String {
    let v: Vec<String> = items.into_iter().map(f).collect();
    format!("[{}]", v.join(", "))
}

fn scaled(s: &Scaled) -> String {
    format!("Scaled {{ mant: {}, exp: {} }}", s.mant, s.exp)
}

/// The design as a Rust constant expression.
fn literal<const N: usize, const K: usize, const M: usize>(d: &DesignQ15<N, K, M>) -> String {
    let time = match d.time {
        TimeFilter::Latest => "TimeFilter::Latest".to_string(),
        TimeFilter::Lmmse => "TimeFilter::Lmmse".to_string(),
        TimeFilter::Forgetting { lambda } => format!(
            "TimeFilter::Forgetting {{ lambda: f32::from_bits({:#010x}) }}",
            lambda.to_bits()
        ),
    };
    let mut s = String::from("DesignQ15 {\n");
    let _ = writeln!(s, "    lattice: {},", list(d.lattice, |v| v.to_string()));
    let _ = writeln!(s, "    lattice_len: {},", d.lattice_len);
    let _ = writeln!(
        s,
        "    lattice_of: {},",
        list(d.lattice_of, |v| v.to_string())
    );
    let _ = writeln!(
        s,
        "    every_symbol: {},",
        list(d.every_symbol, |v| v.to_string())
    );
    let _ = writeln!(
        s,
        "    taps: {},",
        list(&d.taps, |row| list(row, |(a, b)| format!("({a}, {b})")))
    );
    let _ = writeln!(
        s,
        "    first_tap: {},",
        list(d.first_tap, |v| v.to_string())
    );
    let _ = writeln!(
        s,
        "    time_weights: {},",
        list(&d.time_weights, |c| list(c, |a| list(a, |f| list(
            f,
            |w| w.to_string()
        ))))
    );
    let _ = writeln!(s, "    time: {time},");
    let _ = writeln!(s, "    lambda_q15: {},", d.lambda_q15);
    let _ = writeln!(s, "    inv_pilot: {},", scaled(&d.inv_pilot));
    let _ = writeln!(s, "    weight: {},", list(&d.weight, scaled));
    let _ = writeln!(s, "    cpe: {},", d.cpe);
    s.push('}');
    s
}
