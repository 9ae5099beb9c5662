//! External tools: cargo for the firmware, rustup, QEMU through `qemu/run-counted`, `nm`.

use std::collections::BTreeMap;
use std::ffi::OsStr;
use std::path::{Path, PathBuf};
use std::process::{Command, ExitCode, Output};

use crate::Core;

/// Failed checks, collected so one run reports all of them.
#[derive(Default)]
pub struct Failures(Vec<String>);

impl Failures {
    /// Records a failed check and prints it at once.
    pub fn push(&mut self, message: String) {
        println!("FAIL: {message}");
        self.0.push(message);
    }

    /// Summary line and exit status.
    pub fn finish(self) -> ExitCode {
        if self.0.is_empty() {
            println!("mcu: all checks passed");
            ExitCode::SUCCESS
        } else {
            println!("\nmcu: {} check(s) failed:", self.0.len());
            for f in &self.0 {
                println!("  - {f}");
            }
            ExitCode::FAILURE
        }
    }
}

/// Captured output of a command.
pub struct Captured {
    /// Exit code (None when killed by a signal).
    pub status: Option<i32>,
    /// Standard output.
    pub stdout: String,
    /// Standard error.
    pub stderr: String,
}

fn captured(out: Output) -> Captured {
    Captured {
        status: out.status.code(),
        stdout: String::from_utf8_lossy(&out.stdout).into_owned(),
        stderr: String::from_utf8_lossy(&out.stderr).into_owned(),
    }
}

/// Runs `cmd` to completion, capturing its output.
pub fn run(cmd: &mut Command) -> Result<Captured, String> {
    cmd.output()
        .map(captured)
        .map_err(|e| format!("cannot run {:?}: {e}", cmd.get_program()))
}

/// The last lines of a command's output, for error messages.
pub fn tail(stdout: &str, stderr: &str) -> String {
    let pick = |s: &str| {
        let lines: Vec<&str> = s.lines().collect();
        lines[lines.len().saturating_sub(15)..].join("\n    ")
    };
    format!(
        "\n  stdout:\n    {}\n  stderr:\n    {}",
        pick(stdout),
        pick(stderr)
    )
}

fn have(program: &str) -> bool {
    Command::new(program)
        .arg("--version")
        .output()
        .is_ok_and(|o| o.status.success())
}

/// Checks that QEMU, gcc (for the plugin) and nm are there.
pub fn preflight() -> Result<(), String> {
    let mut missing = Vec::new();
    for (tool, package) in [
        ("qemu-system-arm", "qemu-system-arm"),
        ("gcc", "gcc"),
        ("nm", "binutils"),
        ("timeout", "coreutils"),
    ] {
        if !have(tool) {
            missing.push(format!("{tool} (Debian package {package})"));
        }
    }
    if missing.is_empty() {
        Ok(())
    } else {
        Err(format!(
            "missing tools: {}. On Debian: apt-get update && apt-get install -y \
             --no-install-recommends qemu-system-arm gcc binutils",
            missing.join(", ")
        ))
    }
}

/// Installs the cores' rustup targets when missing (no-op without rustup).
pub fn ensure_targets(cores: &[Core]) -> Result<(), String> {
    let Ok(listed) = run(Command::new("rustup").args(["target", "list", "--installed"])) else {
        println!("note: rustup not found; assuming the embedded targets are installed");
        return Ok(());
    };
    let installed: Vec<&str> = listed.stdout.lines().map(str::trim).collect();
    let missing: Vec<&str> = cores
        .iter()
        .map(|c| c.triple)
        .filter(|t| !installed.contains(t))
        .collect();
    if missing.is_empty() {
        return Ok(());
    }
    println!("installing rustup targets: {}", missing.join(" "));
    let status = Command::new("rustup")
        .args(["target", "add"])
        .args(&missing)
        .status()
        .map_err(|e| format!("rustup target add: {e}"))?;
    if status.success() {
        Ok(())
    } else {
        Err(format!("rustup target add {} failed", missing.join(" ")))
    }
}

/// Where the firmware's artefacts go.
pub fn target_dir(firmware: &Path) -> PathBuf {
    firmware.join("target")
}

/// Path of a built firmware binary.
pub fn elf_path(firmware: &Path, triple: &str, bin: &str) -> PathBuf {
    target_dir(firmware).join(triple).join("release").join(bin)
}

/// `cargo build --release` in `firmware/` for `triple`, with a clean environment: no host
/// RUSTFLAGS (they would replace the firmware's `-Tlink.x`), no inherited target settings.
pub fn firmware_cargo(firmware: &Path, triple: &str, bins: &[String], extra: &[&str]) -> Command {
    let cargo = std::env::var_os("CARGO").unwrap_or_else(|| "cargo".into());
    let mut cmd = Command::new(cargo);
    cmd.current_dir(firmware)
        .args(["build", "--release", "--locked", "--target", triple])
        .arg("--target-dir")
        .arg(target_dir(firmware));
    if crate::Q15 {
        cmd.args(["--features", "q15"]);
    }
    cmd.args(extra);
    for b in bins {
        cmd.args(["--bin", b]);
    }
    let upper = triple.to_uppercase().replace('-', "_");
    for var in [
        "RUSTFLAGS".to_string(),
        "CARGO_ENCODED_RUSTFLAGS".into(),
        "CARGO_BUILD_RUSTFLAGS".into(),
        "CARGO_BUILD_TARGET".into(),
        "CARGO_TARGET_DIR".into(),
        "CARGO_BUILD_TARGET_DIR".into(),
        format!("CARGO_TARGET_{upper}_RUSTFLAGS"),
        format!("CARGO_TARGET_{upper}_LINKER"),
        format!("CARGO_TARGET_{upper}_RUNNER"),
    ] {
        cmd.env_remove(var);
    }
    cmd
}

/// Builds the given firmware binaries (cargo's progress goes to the terminal).
pub fn build_firmware(
    firmware: &Path,
    triple: &str,
    bins: &[String],
    extra: &[&str],
) -> Result<(), String> {
    let status = firmware_cargo(firmware, triple, bins, extra)
        .status()
        .map_err(|e| format!("cannot run cargo: {e}"))?;
    if status.success() {
        Ok(())
    } else {
        Err(format!(
            "firmware build for {triple} failed (see cargo's output above)"
        ))
    }
}

/// Runs a firmware ELF under plain QEMU on `core`'s board (semihosting on, 120 s limit).
pub fn run_qemu(core: &Core, elf: &Path) -> Result<Captured, String> {
    let mach: &[&str] = if core.triple.starts_with("thumbv6m") {
        &["-cpu", "cortex-m0", "-machine", "microbit"]
    } else {
        &["-cpu", "cortex-m4", "-machine", "mps2-an386"]
    };
    run(Command::new("timeout")
        .arg("120")
        .arg("qemu-system-arm")
        .args(mach)
        .args([
            "-nographic",
            "-semihosting-config",
            "enable=on,target=native",
            "-kernel",
        ])
        .arg(elf))
}

/// Runs an ELF under QEMU with the instruction-counting plugin (`qemu/run-counted`). The
/// plugin is compiled into the firmware's target directory, and again when `insncount.c`
/// is newer than the compiled copy.
pub fn run_counted(elf: &Path) -> Result<Captured, String> {
    let qemu_dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("qemu");
    let cache = target_dir(&crate::repo_root().join("firmware")).join("qemu-plugin");
    std::fs::create_dir_all(&cache).map_err(|e| format!("{}: {e}", cache.display()))?;
    let source = qemu_dir.join("insncount.c");
    if let Ok(entries) = std::fs::read_dir(&cache) {
        let src_time = std::fs::metadata(&source).and_then(|m| m.modified()).ok();
        for e in entries.flatten() {
            let stale = match (src_time, e.metadata().and_then(|m| m.modified())) {
                (Some(src), Ok(so)) => so < src,
                _ => true,
            };
            if stale && e.path().extension() == Some(OsStr::new("so")) {
                let _ = std::fs::remove_file(e.path());
            }
        }
    }
    run(Command::new(qemu_dir.join("run-counted"))
        .arg(elf)
        .env("TMPDIR", &cache)
        .env("RUN_COUNTED_TIMEOUT", "120"))
}

/// One region reported by the plugin.
pub struct Region {
    /// Region index.
    pub index: u64,
    /// Guest instructions.
    pub insns: u64,
}

/// Parses `insncount: region <i> insns=<n> mem=<m>` lines.
pub fn parse_regions(stderr: &str) -> Vec<Region> {
    stderr
        .lines()
        .filter_map(|l| {
            let rest = l.strip_prefix("insncount: region ")?;
            let mut it = rest.split_whitespace();
            let index = it.next()?.parse().ok()?;
            let insns = it.next()?.strip_prefix("insns=")?.parse().ok()?;
            Some(Region { index, insns })
        })
        .collect()
}

/// `key=value` fields of the lines that start with `tag ` (in order).
pub fn parse_records(stdout: &str, tag: &str) -> Vec<BTreeMap<String, String>> {
    stdout
        .lines()
        .filter_map(|l| l.strip_prefix(tag)?.strip_prefix(' ').map(fields))
        .collect()
}

/// `key=value` fields of one line.
pub fn fields(line: &str) -> BTreeMap<String, String> {
    line.split_whitespace()
        .filter_map(|kv| kv.split_once('='))
        .map(|(k, v)| (k.to_string(), v.to_string()))
        .collect()
}

/// One symbol from `nm`.
pub struct Symbol {
    /// Address (Thumb functions have bit 0 set in host `nm` output).
    pub addr: u64,
    /// Size when `nm -S` knows it.
    pub size: u64,
    /// nm's type letter.
    pub kind: char,
    /// Raw (mangled) name.
    pub name: String,
    /// Demangled name.
    pub demangled: String,
}

fn nm_program() -> String {
    std::env::var("NM").unwrap_or_else(|_| "nm".into())
}

/// One `nm -S -p [-C]` listing: defined symbols in symbol-table order (`demangled` holds the
/// name as listed).
fn nm_lines(elf: &Path, demangle: bool) -> Result<Vec<Symbol>, String> {
    let mut cmd = Command::new(nm_program());
    // -p: symbol-table order, so the raw and the demangled listings line up.
    cmd.args(["-S", "-p"]);
    if demangle {
        cmd.arg("-C");
    }
    let out = run(cmd.arg(elf))?;
    if out.status != Some(0) {
        return Err(format!(
            "nm {} failed: {}",
            elf.display(),
            out.stderr.trim()
        ));
    }
    let mut v = Vec::new();
    for line in out.stdout.lines() {
        let parts: Vec<&str> = line.splitn(4, ' ').collect();
        let (a, s, k, name) = match parts.as_slice() {
            [a, s, k, name] if s.len() == a.len() && k.len() == 1 => (*a, Some(*s), *k, *name),
            [a, k, name] if k.len() == 1 => (*a, None, *k, *name),
            // A demangled name with spaces and no size.
            [a, k, _, _] if k.len() == 1 => {
                (*a, None, *k, line.splitn(3, ' ').nth(2).unwrap_or(""))
            }
            _ => continue,
        };
        let Ok(addr) = u64::from_str_radix(a, 16) else {
            continue;
        };
        v.push(Symbol {
            addr,
            size: s.and_then(|s| u64::from_str_radix(s, 16).ok()).unwrap_or(0),
            kind: k.chars().next().unwrap_or('?'),
            name: name.to_string(),
            demangled: name.to_string(),
        });
    }
    Ok(v)
}

/// All defined symbols, with raw and demangled names (`nm -S -p` and `nm -S -p -C`).
pub fn nm_symbols(elf: &Path) -> Result<Vec<Symbol>, String> {
    let raw = nm_lines(elf, false)?;
    let dem = nm_lines(elf, true)?;
    if raw.len() != dem.len() || raw.iter().zip(&dem).any(|(r, d)| r.addr != d.addr) {
        return Err(format!(
            "nm: raw and demangled listings of {} differ",
            elf.display()
        ));
    }
    Ok(raw
        .into_iter()
        .zip(dem)
        .map(|(r, d)| Symbol {
            demangled: d.name,
            ..r
        })
        .collect())
}

/// Symbols with a size (what `nm -S -C --size-sort` lists).
pub fn nm_sizes(elf: &Path) -> Result<Vec<Symbol>, String> {
    Ok(nm_symbols(elf)?
        .into_iter()
        .filter(|s| s.size > 0)
        .collect())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn region_lines() {
        // Format printed by qemu/insncount.c (`on_stop`).
        let r = parse_regions("x\ninsncount: region 3 insns=18456 mem=9233\ninsncount: total insns=1 mem=2 regions=4\n");
        assert_eq!(r.len(), 1);
        assert_eq!((r[0].index, r[0].insns), (3, 18456));
    }

    #[test]
    fn record_fields() {
        let r = parse_records(
            "case core=cortex-m0 stage=fft_f32 n=64 region=1 stack=352\ncased x=1\n",
            "case",
        );
        assert_eq!(r.len(), 1);
        assert_eq!(r[0]["stage"], "fft_f32");
        assert_eq!(r[0]["stack"], "352");
    }
}
