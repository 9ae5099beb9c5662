//! Project tasks. `cargo xtask mcu [--update]` (alias in `.cargo/config.toml`) runs the core on
//! emulated Cortex-M cores and checks it:
//!
//! 1. builds `firmware/` for the Cortex-M4F (`thumbv7em-none-eabihf`, QEMU `mps2-an386`) and
//!    the Cortex-M0 (`thumbv6m-none-eabi`, QEMU `microbit`);
//! 2. runs the `cost` firmware under `xtask/qemu/run-counted` (a QEMU TCG plugin counting the
//!    guest instructions between `probe_start` and `probe_stop`), takes code sizes from the
//!    `size_*` probes with `nm`, and compares everything with `mcu/costs.csv`;
//! 3. runs the `vectors` firmware and compares every output word bit for bit with the same
//!    code run on the host, and prints the Q15 FFT's SQNR against an f64 reference; runs
//!    `rx_vectors` (the Q15 receiver on deterministic frames) and `sync_vectors` (the integer
//!    synchronisation stages and the streaming frame receiver on deterministic captures) and
//!    `track_vectors` (the integer tracking stages on the receiver's frames) and
//!    `coding_vectors` (encoder, Viterbi decoder, interleaver and CRC on deterministic frames)
//!    and compares their outputs bit for bit with the same code run on the host;
//! 4. links `panic_free`, `track_panic_free` and `coding_panic_free` (and `q15_only`), whose
//!    panic handler calls an undefined function:
//!    a surviving panic path fails the link; checks that the M0 Q15 FFT build links no soft
//!    float and that no soft float is reachable from the Q15 receiver's per-symbol code
//!    (`rx_q15_only`), from the integer synchronisation stages (`sync_q15_only`) nor from the
//!    integer tracking stages' per-symbol and per-frame code (`track_q15_only`) nor from the
//!    coding stage's entry points (`coding_panic_free::per_bit`).
//!
//! See `firmware/README.md`.

#[cfg(feature = "q15")]
mod coding_vectors;
mod costs;
#[cfg(test)]
mod generator_tests;
mod panics;
mod reach;
#[cfg(feature = "q15")]
mod rx_vectors;
#[cfg(feature = "q15")]
mod sync_vectors;
mod tools;
#[cfg(feature = "q15")]
mod track_vectors;
mod vectors;

use std::path::{Path, PathBuf};
use std::process::ExitCode;

use costs::CostRow;
use tools::{nm_sizes, nm_symbols, Failures};

/// Whether the Q15 parts are built and checked (`q15` feature, see Cargo.toml).
const Q15: bool = cfg!(feature = "q15");

/// One emulated core.
pub struct Core {
    /// Name in the cost table and the firmware's output.
    pub name: &'static str,
    /// Rust target triple.
    pub triple: &'static str,
    /// FFT sizes of the cost table.
    pub cost_sizes: &'static [usize],
    /// FFT sizes of the bit-exact vectors.
    pub vector_sizes: &'static [usize],
    /// FFT sizes of the Q15 receiver's costs and vectors (its state must fit the RAM).
    pub rx_sizes: &'static [usize],
    /// FFT sizes of the synchronisation vectors and costs (acquisition, preamble steps, NCO,
    /// gain/DC, SCO estimator).
    pub sync_sizes: &'static [usize],
    /// Of those, the sizes the CP tracker runs at (`CpTrackerQ15<N, N + N/8>` must fit).
    pub sync_cp_sizes: &'static [usize],
    /// Of those, the sizes the frame receiver runs at (`FrameReceiverQ15` must fit).
    pub sync_frame_sizes: &'static [usize],
    /// FFT sizes of the receiver-fed tracking stages (the receiver and the trackers must fit
    /// together: noise tracker, Doppler, delay-spread and I/Q estimators).
    pub track_sizes: &'static [usize],
    /// FFT sizes of `set_bin_noise` (the receiver alone must fit).
    pub track_bin_noise_sizes: &'static [usize],
    /// FFT sizes of `ici_q15_predict` (a 520-byte table).
    pub track_ici_sizes: &'static [usize],
    /// FFT sizes of the tracking stages fed stored receiver outputs (`track_stored`, and the
    /// noise tracker's and estimators' cost rows where `track_sizes` lacks them): cores whose
    /// RAM does not hold the receiver beside the trackers.
    pub track_stored_sizes: &'static [usize],
}

/// The cores, in table order. Sizes follow the boards' RAM (16 KiB on the microbit).
pub const CORES: [Core; 2] = [
    Core {
        name: "cortex-m4f",
        triple: "thumbv7em-none-eabihf",
        cost_sizes: &[64, 128, 256, 512, 1024],
        vector_sizes: &[16, 64, 256, 1024],
        rx_sizes: &[64, 256],
        sync_sizes: &[64, 256],
        sync_cp_sizes: &[64, 256],
        sync_frame_sizes: &[64, 256],
        track_sizes: &[64, 256],
        track_bin_noise_sizes: &[64, 256],
        track_ici_sizes: &[64, 256],
        track_stored_sizes: &[],
    },
    Core {
        name: "cortex-m0",
        triple: "thumbv6m-none-eabi",
        cost_sizes: &[64, 128, 256],
        vector_sizes: &[16, 64, 256],
        // ReceiverQ15<_, 256, 4, 4> alone is about 25 KiB: only N = 64 fits 16 KiB.
        rx_sizes: &[64],
        sync_sizes: &[64, 256],
        // CpTrackerQ15<256, 288> is about 14.9 KB: only N = 64 fits beside the firmware.
        sync_cp_sizes: &[64],
        // FrameReceiverQ15<64, 4, 4, 512> alone is about 14 KB, and its push needs several KB
        // of stack: it does not fit 16 KiB at any size (see firmware/src/bin/sync_vectors.rs).
        sync_frame_sizes: &[],
        // ReceiverQ15<64> (6,144 B) with the noise tracker (2,600 B with its design borrowed
        // from flash) and the Doppler, delay and I/Q estimators (4,496 B), and the ~6 KB of
        // stack ReceiverQ15::new takes, exceed 16 KiB: no receiver-fed tracker on the M0
        // (firmware/src/bin/track_cost.rs).
        track_sizes: &[],
        track_bin_noise_sizes: &[64],
        track_ici_sizes: &[64, 256],
        // The noise tracker (design borrowed from flash) and the Doppler, delay and I/Q
        // estimators on stored receiver outputs (flash tables; firmware/src/bin/track_stored.rs).
        track_stored_sizes: &[64],
    },
];

/// Measured stages, in table order.
pub fn stages() -> Vec<&'static str> {
    if Q15 {
        vec!["fft_f32", "fft_q15"]
    } else {
        vec!["fft_f32"]
    }
}

/// Q15 receiver stages (`firmware/src/bin/rx_cost.rs`), in table order: the whole
/// `receive` call, and the same without its FFT (`est_eq_demap`), per modulation; `2d` uses
/// the time LMMSE instead of time `Latest`.
pub fn rx_stages() -> Vec<&'static str> {
    if Q15 {
        vec![
            "rx_q15_symbol_qpsk",
            "rx_q15_est_eq_demap_qpsk",
            "rx_q15_symbol_qam16",
            "rx_q15_est_eq_demap_qam16",
            "rx_q15_2d_symbol_qam16",
            "rx_q15_2d_est_eq_demap_qam16",
        ]
    } else {
        Vec::new()
    }
}

/// Integer synchronisation stages (`firmware/src/bin/sync_cost.rs`), in table order, with
/// the sizes `core` measures them at (`nco_q15_1k_samples` has no FFT size: n = 0). The unit
/// is in the name: `1k_samples` rows are one call on 1000 input samples, the others one call
/// (`frame_q15_data_symbol_qpsk`: the push of the samples that complete one data symbol).
pub fn sync_stages(core: &Core) -> Vec<(&'static str, &'static [usize])> {
    if !Q15 {
        return Vec::new();
    }
    vec![
        ("acq_q15_1k_samples", core.sync_sizes),
        ("nco_q15_1k_samples", &[0]),
        ("cp_q15_1k_samples", core.sync_cp_sizes),
        ("cp_q15_estimate", core.sync_cp_sizes),
        ("sco_q15_update", core.sync_sizes),
        ("sco_q15_estimate", core.sync_sizes),
        ("frame_q15_data_symbol_qpsk", core.sync_frame_sizes),
    ]
}

/// Integer tracking stages (`firmware/src/bin/track_cost.rs`), in table order, with the sizes
/// `core` measures them at: per symbol, then per frame (one call each).
pub fn track_stages(core: &Core) -> Vec<(&'static str, &'static [usize])> {
    if !Q15 {
        return Vec::new();
    }
    let est = if core.track_sizes.is_empty() {
        core.track_stored_sizes
    } else {
        core.track_sizes
    };
    vec![
        ("noise_track_q15_update", est),
        ("doppler_q15_update", est),
        ("delay_q15_update", est),
        ("iq_q15_update", est),
        ("set_bin_noise", core.track_bin_noise_sizes),
        ("noise_track_q15_frame_stats", est),
        ("doppler_q15_estimate", est),
        ("delay_q15_estimate", est),
        ("iq_q15_estimate", est),
        ("ici_q15_predict", core.track_ici_sizes),
    ]
}

/// Coding stages (`firmware/src/bin/coding_cost.rs`), in table order, with their `n`: the
/// Viterbi frames and the encoder at 256 information bits, the interleaver at the FFT size 64,
/// the CRCs at 256 payload bits. The `_per_bit` rows are derived from the `viterbi_*` frame
/// rows ([`per_bit_rows`]).
pub fn coding_stages() -> Vec<(&'static str, &'static [usize])> {
    if !Q15 {
        return Vec::new();
    }
    const FRAME: &[usize] = &[CODING_FRAME_BITS];
    vec![
        ("viterbi_soft_r12", FRAME),
        ("viterbi_soft_r12_per_bit", FRAME),
        ("viterbi_soft_r23", FRAME),
        ("viterbi_soft_r23_per_bit", FRAME),
        ("viterbi_soft_r34", FRAME),
        ("viterbi_soft_r34_per_bit", FRAME),
        ("viterbi_hard_r12", FRAME),
        ("viterbi_hard_r12_per_bit", FRAME),
        ("viterbi_hard_r23", FRAME),
        ("viterbi_hard_r23_per_bit", FRAME),
        ("viterbi_hard_r34", FRAME),
        ("viterbi_hard_r34_per_bit", FRAME),
        ("conv_encode_r12", FRAME),
        ("conv_encode_r23", FRAME),
        ("conv_encode_r34", FRAME),
        ("interleave_qpsk", &[64]),
        ("deinterleave_qpsk", &[64]),
        ("interleave_qam16", &[64]),
        ("deinterleave_qam16", &[64]),
        ("crc32_bits", &[256]),
        ("crc16_bits", &[256]),
    ]
}

/// Information bits of the frames of the coding cost rows (CRC-32 included).
const CODING_FRAME_BITS: usize = 256;

/// The `<stage>_per_bit` row of every `viterbi_*` frame row: its instructions divided by the
/// frame's information bits `n`, rounded to the nearest; stack and code as the frame's.
fn per_bit_rows(rows: &mut Vec<(String, usize, u64, u64)>) {
    let derived: Vec<_> = rows
        .iter()
        .filter(|(s, n, _, _)| s.starts_with("viterbi_") && !s.ends_with("_per_bit") && *n > 0)
        .map(|(s, n, ins, stack)| {
            let n64 = *n as u64;
            (format!("{s}_per_bit"), *n, (ins + n64 / 2) / n64, *stack)
        })
        .collect();
    rows.extend(derived);
}

/// The size probe of a coding stage (`firmware/src/size_coding_probe.rs`; measured against
/// `size_baseline`).
fn coding_size_probe(stage: &str) -> Option<&'static str> {
    let probe = if stage.starts_with("viterbi_") {
        "size_coding_viterbi"
    } else if stage.starts_with("conv_encode_") {
        "size_coding_encode"
    } else if stage.starts_with("interleave_") || stage.starts_with("deinterleave_") {
        "size_coding_interleave"
    } else if stage == "crc32_bits" {
        "size_coding_crc32"
    } else if stage == "crc16_bits" {
        "size_coding_crc16"
    } else {
        return None;
    };
    Some(probe)
}

/// The size probe of a tracking stage at `n` and the probe it is measured against
/// (`firmware/src/size_track_probe.rs`).
fn track_size_probes(stage: &str, n: usize) -> Option<(String, String)> {
    let family = [
        ("noise_track_q15_", "noise"),
        ("doppler_q15_", "doppler"),
        ("delay_q15_", "delay"),
        ("iq_q15_", "iq"),
        ("ici_q15_", "ici"),
        ("set_bin_noise", "binnoise"),
    ]
    .into_iter()
    .find(|(p, _)| stage.starts_with(p))?
    .1;
    let base = if family == "binnoise" {
        format!("size_track_rxnew_{n}")
    } else {
        "size_numerology".to_string()
    };
    Some((format!("size_track_{family}_{n}"), base))
}

/// Every measured (stage, sizes) of `core`, in table order.
fn expected_stages(core: &Core) -> Vec<(&'static str, &'static [usize])> {
    stages()
        .into_iter()
        .map(|s| (s, core.cost_sizes))
        .chain(rx_stages().into_iter().map(|s| (s, core.rx_sizes)))
        .chain(sync_stages(core))
        .chain(track_stages(core))
        .chain(coding_stages())
        .collect()
}

/// The size probe of a synchronisation stage at `n` and the probe it is measured against
/// (`firmware/src/size_sync_probe.rs`).
fn sync_size_probes(stage: &str, n: usize) -> Option<(String, &'static str)> {
    let family = ["acq", "nco", "cp", "sco", "frame"]
        .into_iter()
        .find(|f| stage.starts_with(&format!("{f}_q15_")))?;
    Some(if family == "nco" {
        ("size_sync_nco".into(), "size_baseline")
    } else {
        (format!("size_sync_{family}_{n}"), "size_numerology")
    })
}

/// Repository root (the parent of this crate).
pub fn repo_root() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .parent()
        .map(Path::to_path_buf)
        .unwrap_or_else(|| PathBuf::from("."))
}

fn usage() -> ExitCode {
    eprintln!(
        "usage: cargo xtask mcu [--update]\n\n  mcu        build the firmware, run it on emulated \
         Cortex-M4F and Cortex-M0 cores, check costs\n             against mcu/costs.csv, bit-exact \
         vectors and the panic-free link\n  --update   rewrite mcu/costs.csv with the measured \
         costs (deliberate)"
    );
    ExitCode::from(2)
}

fn main() -> ExitCode {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let mut update = false;
    let mut task = None;
    for a in &args {
        match a.as_str() {
            "--update" => update = true,
            "mcu" if task.is_none() => task = Some("mcu"),
            "-h" | "--help" => return usage(),
            _ => {
                eprintln!("unknown argument `{a}`");
                return usage();
            }
        }
    }
    if task != Some("mcu") {
        return usage();
    }
    let started = std::time::Instant::now();
    let mut failures = Failures::default();
    if let Err(e) = mcu(update, &mut failures) {
        failures.push(e);
    }
    println!(
        "\n(cargo xtask mcu took {:.0} s)",
        started.elapsed().as_secs_f64()
    );
    failures.finish()
}

fn mcu(update: bool, failures: &mut Failures) -> Result<(), String> {
    let root = repo_root();
    let firmware = root.join("firmware");
    if !Q15 {
        println!(
            "note: Q15 parts off (xtask built without its `q15` feature): f32 cases only, \
             no q15_only soft-float check"
        );
    }
    tools::preflight()?;
    tools::ensure_targets(&CORES)?;

    let mut measured: Vec<CostRow> = Vec::new();
    for core in &CORES {
        section(&format!("{}: build ({})", core.name, core.triple));
        let mut bins = vec!["cost".to_string(), "vectors".to_string()];
        bins.push("size_baseline".into());
        for stage in stages() {
            for n in core.cost_sizes {
                bins.push(format!("size_{stage}_{n}"));
            }
        }
        if Q15 {
            bins.push("q15_only".into());
            bins.push("rx_q15_only".into());
            bins.push("rx_cost".into());
            bins.push("rx_vectors".into());
            bins.push("sync_vectors".into());
            bins.push("size_numerology".into());
            for n in core.rx_sizes {
                bins.push(format!("size_rx_q15_{n}"));
            }
            bins.push("sync_cost".into());
            bins.push("sync_q15_only".into());
            bins.push("track_cost".into());
            bins.push("track_q15_only".into());
            bins.push("track_vectors".into());
            bins.push("coding_cost".into());
            bins.push("coding_vectors".into());
            for (stage, _) in coding_stages() {
                if let Some(probe) = coding_size_probe(stage) {
                    if !bins.iter().any(|b| b == probe) {
                        bins.push(probe.into());
                    }
                }
            }
            if !core.track_stored_sizes.is_empty() {
                bins.push("track_stored".into());
            }
            for (stage, sizes) in track_stages(core) {
                for &n in sizes {
                    if let Some((probe, base)) = track_size_probes(stage, n) {
                        for b in [probe, base] {
                            if !bins.contains(&b) {
                                bins.push(b);
                            }
                        }
                    }
                }
            }
            for (stage, sizes) in sync_stages(core) {
                for &n in sizes {
                    if let Some((probe, _)) = sync_size_probes(stage, n) {
                        if !bins.contains(&probe) {
                            bins.push(probe);
                        }
                    }
                }
            }
        }
        tools::build_firmware(&firmware, core.triple, &bins, &[])?;
        let elf = |bin: &str| tools::elf_path(&firmware, core.triple, bin);

        section(&format!("{}: panic-free link", core.name));
        panics::check_panic_free(&firmware, core, failures)?;
        if Q15 && core.triple.starts_with("thumbv6m") {
            check_no_soft_float(&elf("q15_only"), failures)?;
            reach::check_rx_no_soft_float(&elf("rx_q15_only"), failures)?;
            reach::check_sync_no_soft_float(&elf("sync_q15_only"), failures)?;
            reach::check_track_no_soft_float(&elf("track_q15_only"), failures)?;
            // Built by the panic-free check above.
            reach::check_coding_no_soft_float(&elf("coding_panic_free"), failures)?;
        }

        section(&format!("{}: instruction counts", core.name));
        let mut runs = run_cost(core, &elf("cost"), failures)?;
        if Q15 {
            runs.extend(run_cost(core, &elf("rx_cost"), failures)?);
            runs.extend(run_cost(core, &elf("sync_cost"), failures)?);
            runs.extend(run_cost(core, &elf("track_cost"), failures)?);
            let mut coding = run_cost(core, &elf("coding_cost"), failures)?;
            per_bit_rows(&mut coding);
            runs.extend(coding);
        }
        check_all_measured(core, &runs, failures);
        // Table order: the stages as listed, then N.
        let order = expected_stages(core);
        runs.sort_by_key(|(stage, n, _, _)| {
            (
                order
                    .iter()
                    .position(|(s, _)| s == stage)
                    .unwrap_or(usize::MAX),
                *n,
            )
        });
        let baseline = code_bytes(&elf("size_baseline"))?;
        for (stage, n, instructions, stack_bytes) in runs {
            let code = if let Some((probe, base)) = sync_size_probes(&stage, n) {
                code_bytes(&elf(&probe))?.saturating_sub(code_bytes(&elf(base))?)
            } else if let Some(probe) = coding_size_probe(&stage) {
                code_bytes(&elf(probe))?.saturating_sub(baseline)
            } else if let Some((probe, base)) = track_size_probes(&stage, n) {
                code_bytes(&elf(&probe))?.saturating_sub(code_bytes(&elf(&base))?)
            } else if stage.starts_with("rx_q15_") {
                // The receiver probe against one that builds only its Numerology; without
                // the FFT's own code for the `est_eq_demap` stages.
                let rx = code_bytes(&elf(&format!("size_rx_q15_{n}")))?
                    .saturating_sub(code_bytes(&elf("size_numerology"))?);
                if stage.contains("est_eq_demap") {
                    let fft =
                        code_bytes(&elf(&format!("size_fft_q15_{n}")))?.saturating_sub(baseline);
                    rx.saturating_sub(fft)
                } else {
                    rx
                }
            } else {
                let probe = elf(&format!("size_{stage}_{n}"));
                code_bytes(&probe)?.saturating_sub(baseline)
            };
            measured.push(CostRow {
                core: core.name.into(),
                stage,
                n,
                instructions,
                stack_bytes,
                code_bytes: code,
            });
        }

        section(&format!("{}: bit-exact vectors", core.name));
        vectors::check(core, &elf("vectors"), failures)?;
        #[cfg(feature = "q15")]
        {
            section(&format!(
                "{}: Q15 receiver, bit-exact against the host",
                core.name
            ));
            rx_vectors::check(core, &elf("rx_vectors"), failures)?;
            section(&format!(
                "{}: synchronisation stages, bit-exact against the host",
                core.name
            ));
            sync_vectors::check(core, &elf("sync_vectors"), failures)?;
            section(&format!(
                "{}: tracking stages, bit-exact against the host",
                core.name
            ));
            track_vectors::check(core, &elf("track_vectors"), failures)?;
            if !core.track_stored_sizes.is_empty() {
                section(&format!(
                    "{}: tracking stages on stored receiver outputs, bit-exact against the host",
                    core.name
                ));
                track_vectors::check_stored(core, &elf("track_stored"), failures)?;
            }
            section(&format!(
                "{}: coding stage (encoder, Viterbi decoder, interleaver, CRC), bit-exact \
                 against the host",
                core.name
            ));
            coding_vectors::check(core, &elf("coding_vectors"), failures)?;
        }
    }

    section("cost table (mcu/costs.csv)");
    costs::compare_or_update(&root.join("mcu/costs.csv"), &measured, update, failures)?;
    Ok(())
}

fn section(title: &str) {
    println!("\n==== {title} ====");
}

/// Code and read-only data of an ELF, bytes: the sum of `nm -S` sizes of its text and
/// read-only symbols, each address counted once (aliases share an address).
fn code_bytes(elf: &Path) -> Result<u64, String> {
    let mut seen = std::collections::BTreeSet::new();
    let mut total = 0;
    for s in nm_sizes(elf)? {
        if matches!(s.kind, 't' | 'T' | 'r' | 'R' | 'w' | 'W' | 'v' | 'V') && seen.insert(s.addr) {
            total += s.size;
        }
    }
    Ok(total)
}

/// Runs a cost firmware (`cost`, `rx_cost`) under the counting plugin; returns (stage, n,
/// instructions net of the overhead, stack bytes) for every case except the calibrations.
///
/// A case is one region, net of region 0 (`empty`), or a split measurement: parts 0, 1, 2
/// (before the FFT, the FFT, after it; `firmware/src/bin/rx_cost.rs`), whose net is parts 0
/// and 2 minus the same parts of `empty_split`.
fn run_cost(
    core: &Core,
    elf: &Path,
    failures: &mut Failures,
) -> Result<Vec<(String, usize, u64, u64)>, String> {
    let symbols = nm_symbols(elf)?;
    let addr = |name: &str| symbols.iter().find(|s| s.name == name).map(|s| s.addr);
    let bin = elf
        .file_name()
        .map(|f| f.to_string_lossy().into_owned())
        .unwrap_or_default();
    match (addr("probe_start"), addr("probe_stop")) {
        (Some(a), Some(b)) if a != b => {
            println!("{bin}: probe_start at {a:#x}, probe_stop at {b:#x} (distinct)")
        }
        (Some(a), Some(_)) => {
            return Err(format!(
                "{}: probe_start and probe_stop share address {a:#x}: the linker merged them",
                core.name
            ))
        }
        _ => {
            return Err(format!(
                "{}: probe_start/probe_stop missing from {}",
                core.name,
                elf.display()
            ))
        }
    }

    let out = tools::run_counted(elf)?;
    if out.status != Some(0) {
        failures.push(format!(
            "{}: {bin} firmware exited with {:?} (failed checks or a hang){}",
            core.name,
            out.status,
            tools::tail(&out.stdout, &out.stderr)
        ));
    }
    let regions = tools::parse_regions(&out.stderr);
    let cases = tools::parse_records(&out.stdout, "case");
    if cases.len() != regions.len() {
        return Err(format!(
            "{}: {bin}: {} case lines but {} counted regions{}",
            core.name,
            cases.len(),
            regions.len(),
            tools::tail(&out.stdout, &out.stderr)
        ));
    }
    let mut overhead = None;
    // Split measurements: (stage, n) → [instructions of parts 0, 1, 2], and their stack.
    let mut split: Vec<(String, usize, [Option<u64>; 3], u64)> = Vec::new();
    let mut rows = Vec::new();
    for (i, (case, region)) in cases.iter().zip(&regions).enumerate() {
        let field = |k: &str| case.get(k).cloned().unwrap_or_default();
        let num = |k: &str| field(k).parse::<u64>().ok();
        if num("region") != Some(region.index) || region.index != i as u64 {
            return Err(format!(
                "{}: {bin}: case/region order mismatch at region {i}",
                core.name
            ));
        }
        if field("core") != core.name {
            return Err(format!(
                "{}: firmware reports core `{}`",
                core.name,
                field("core")
            ));
        }
        let stage = field("stage");
        let stack = num("stack").unwrap_or(0);
        if i == 0 {
            if stage != "empty" {
                return Err(format!(
                    "{}: {bin}: region 0 must be the empty stage",
                    core.name
                ));
            }
            println!(
                "{bin}: empty region: {} instructions, {} B stack (overhead)",
                region.insns, stack
            );
            overhead = Some(region.insns);
            continue;
        }
        let Some(over) = overhead else {
            return Err(format!("{}: no empty region", core.name));
        };
        let n = num("n").unwrap_or(0) as usize;
        if let Some(part) = num("part") {
            let entry = match split.iter_mut().find(|(s, m, _, _)| *s == stage && *m == n) {
                Some(e) => e,
                None => {
                    split.push((stage.clone(), n, [None; 3], stack));
                    split.last_mut().ok_or("split entry")?
                }
            };
            match entry.2.get_mut(part as usize) {
                Some(slot) if slot.is_none() => *slot = Some(region.insns),
                _ => {
                    return Err(format!(
                        "{}: {bin}: {stage} n={n}: bad or repeated part {part}",
                        core.name
                    ))
                }
            }
            continue;
        }
        if region.insns <= over {
            failures.push(format!(
                "{} {stage} n={n}: {} instructions does not exceed the empty-region overhead {over}",
                core.name, region.insns
            ));
            continue;
        }
        rows.push((stage, n, region.insns - over, stack));
    }
    if !split.is_empty() {
        let calibration = split
            .iter()
            .find(|(s, _, _, _)| s == "empty_split")
            .and_then(|(_, _, p, _)| Some([p[0]?, p[1]?, p[2]?]))
            .ok_or_else(|| {
                format!(
                    "{}: {bin}: split parts without a complete empty_split",
                    core.name
                )
            })?;
        println!(
            "{bin}: empty_split regions: {} + {} + {} instructions (overhead of a split)",
            calibration[0], calibration[1], calibration[2]
        );
        for (stage, n, parts, stack) in split.iter().filter(|(s, _, _, _)| s != "empty_split") {
            let [Some(a), Some(f), Some(b)] = *parts else {
                failures.push(format!(
                    "{} {stage} n={n}: incomplete split measurement",
                    core.name
                ));
                continue;
            };
            let (before, after) = (
                a.saturating_sub(calibration[0]),
                b.saturating_sub(calibration[2]),
            );
            if before == 0 || after == 0 {
                failures.push(format!(
                    "{} {stage} n={n}: split parts {a} / {b} do not exceed their overhead",
                    core.name
                ));
                continue;
            }
            println!(
                "{} {stage} n={n}: {before} before the FFT + {after} after it; the FFT inside \
                 the call: {} instructions",
                core.name,
                f.saturating_sub(calibration[1])
            );
            rows.push((stage.clone(), *n, before + after, *stack));
        }
    }
    Ok(rows)
}

/// Every expected (stage, n) of `core` was measured.
fn check_all_measured(core: &Core, rows: &[(String, usize, u64, u64)], failures: &mut Failures) {
    for (stage, sizes) in expected_stages(core) {
        for &n in sizes {
            if !rows.iter().any(|(s, m, _, _)| s == stage && *m == n) {
                failures.push(format!(
                    "{} {stage} n={n}: no measurement from the firmware",
                    core.name
                ));
            }
        }
    }
}

/// Soft-float routines: EABI helpers (`__aeabi_f*`, `__aeabi_d*`, `__aeabi_*2f`, `__aeabi_*2d`),
/// libgcc-style names (`__addsf3`, `__fixdfsi`, …) and compiler-builtins' float module.
pub(crate) fn is_soft_float(name: &str) -> bool {
    if let Some(rest) = name.strip_prefix("__aeabi_") {
        return rest.starts_with('f')
            || rest.starts_with('d')
            || rest.ends_with("2f")
            || rest.ends_with("2d");
    }
    (name.starts_with("__") && (name.contains("sf") || name.contains("df")))
        || name.contains("compiler_builtins::float")
}

fn check_no_soft_float(elf: &Path, failures: &mut Failures) -> Result<(), String> {
    let found: Vec<String> = nm_symbols(elf)?
        .into_iter()
        .filter(|s| is_soft_float(&s.name) || is_soft_float(&s.demangled))
        .map(|s| s.demangled)
        .collect();
    if found.is_empty() {
        println!("q15_only (Cortex-M0): no soft-float routines linked");
    } else {
        failures.push(format!(
            "q15_only (Cortex-M0) links soft-float routines: {}",
            found.join(", ")
        ));
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn soft_float_names() {
        // Names from the ARM run-time ABI (RTABI, "Run-time ABI for the Arm Architecture",
        // section 4.1.2 floating-point helpers) and libgcc's soft-float routines.
        for n in [
            "__aeabi_fadd",
            "__aeabi_dmul",
            "__aeabi_i2f",
            "__aeabi_ul2d",
            "__addsf3",
            "__fixdfsi",
            "compiler_builtins::float::add::__addsf3",
        ] {
            assert!(is_soft_float(n), "{n}");
        }
        for n in [
            "__aeabi_uidiv",
            "__aeabi_memclr4",
            "__aeabi_lmul",
            "memcpy",
            "HardFault",
        ] {
            assert!(!is_soft_float(n), "{n}");
        }
    }
}
