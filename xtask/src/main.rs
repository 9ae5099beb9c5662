//! Project tasks. `cargo xtask mcu [--update]` (alias in `.cargo/config.toml`) runs the core on
//! emulated Cortex-M cores and checks it:
//!
//! 1. builds `firmware/` for the Cortex-M4F (`thumbv7em-none-eabihf`, QEMU `mps2-an386`) and
//!    the Cortex-M0 (`thumbv6m-none-eabi`, QEMU `microbit`);
//! 2. runs the `cost` firmware under `xtask/qemu/run-counted` (a QEMU TCG plugin counting the
//!    guest instructions between `probe_start` and `probe_stop`), takes code sizes from the
//!    `size_*` probes with `nm`, and compares everything with `mcu/costs.csv`;
//! 3. runs the `vectors` firmware and compares every output word bit for bit with the same
//!    code run on the host, and prints the Q15 FFT's SQNR against an f64 reference;
//! 4. links `panic_free` (and `q15_only`), whose panic handler calls an undefined function:
//!    a surviving panic path fails the link; checks that the M0 Q15 build links no soft float.
//!
//! See `firmware/README.md`.

mod costs;
#[cfg(test)]
mod generator_tests;
mod panics;
mod tools;
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
}

/// The cores, in table order. Sizes follow the boards' RAM (16 KiB on the microbit).
pub const CORES: [Core; 2] = [
    Core {
        name: "cortex-m4f",
        triple: "thumbv7em-none-eabihf",
        cost_sizes: &[64, 128, 256, 512, 1024],
        vector_sizes: &[16, 64, 256, 1024],
    },
    Core {
        name: "cortex-m0",
        triple: "thumbv6m-none-eabi",
        cost_sizes: &[64, 128, 256],
        vector_sizes: &[16, 64, 256],
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
        }
        tools::build_firmware(&firmware, core.triple, &bins, &[])?;
        let elf = |bin: &str| tools::elf_path(&firmware, core.triple, bin);

        section(&format!("{}: panic-free link", core.name));
        panics::check_panic_free(&firmware, core, failures)?;
        if Q15 && core.triple.starts_with("thumbv6m") {
            check_no_soft_float(&elf("q15_only"), failures)?;
        }

        section(&format!("{}: instruction counts", core.name));
        let runs = run_cost(core, &elf("cost"), failures)?;
        let baseline = code_bytes(&elf("size_baseline"))?;
        for (stage, n, instructions, stack_bytes) in runs {
            let probe = elf(&format!("size_{stage}_{n}"));
            let code = code_bytes(&probe)?.saturating_sub(baseline);
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

/// Runs the cost firmware under the counting plugin; returns (stage, n, instructions net of
/// the empty region, stack bytes) for every case except the empty one.
fn run_cost(
    core: &Core,
    elf: &Path,
    failures: &mut Failures,
) -> Result<Vec<(String, usize, u64, u64)>, String> {
    let symbols = nm_symbols(elf)?;
    let addr = |name: &str| symbols.iter().find(|s| s.name == name).map(|s| s.addr);
    match (addr("probe_start"), addr("probe_stop")) {
        (Some(a), Some(b)) if a != b => {
            println!("probe_start at {a:#x}, probe_stop at {b:#x} (distinct)")
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
            "{}: cost firmware exited with {:?} (failed checks or a hang){}",
            core.name,
            out.status,
            tools::tail(&out.stdout, &out.stderr)
        ));
    }
    let regions = tools::parse_regions(&out.stderr);
    let cases = tools::parse_records(&out.stdout, "case");
    if cases.len() != regions.len() {
        return Err(format!(
            "{}: {} case lines but {} counted regions{}",
            core.name,
            cases.len(),
            regions.len(),
            tools::tail(&out.stdout, &out.stderr)
        ));
    }
    let mut overhead = None;
    let mut rows = Vec::new();
    for (i, (case, region)) in cases.iter().zip(&regions).enumerate() {
        let field = |k: &str| case.get(k).cloned().unwrap_or_default();
        let num = |k: &str| field(k).parse::<u64>().ok();
        if num("region") != Some(region.index) || region.index != i as u64 {
            return Err(format!(
                "{}: case/region order mismatch at region {i}",
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
                return Err(format!("{}: region 0 must be the empty stage", core.name));
            }
            println!(
                "empty region: {} instructions, {} B stack (overhead)",
                region.insns, stack
            );
            overhead = Some(region.insns);
            continue;
        }
        let Some(over) = overhead else {
            return Err(format!("{}: no empty region", core.name));
        };
        let n = num("n").unwrap_or(0) as usize;
        if region.insns <= over {
            failures.push(format!(
                "{} {stage} n={n}: {} instructions does not exceed the empty-region overhead {over}",
                core.name, region.insns
            ));
            continue;
        }
        rows.push((stage, n, region.insns - over, stack));
    }
    for stage in stages() {
        for &n in core.cost_sizes {
            if !rows.iter().any(|(s, m, _, _)| s == stage && *m == n) {
                failures.push(format!(
                    "{} {stage} n={n}: no measurement from the firmware",
                    core.name
                ));
            }
        }
    }
    Ok(rows)
}

/// Soft-float routines: EABI helpers (`__aeabi_f*`, `__aeabi_d*`, `__aeabi_*2f`, `__aeabi_*2d`),
/// libgcc-style names (`__addsf3`, `__fixdfsi`, …) and compiler-builtins' float module.
fn is_soft_float(name: &str) -> bool {
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
