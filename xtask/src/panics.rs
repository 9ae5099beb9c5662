//! Panic-free link check: `firmware/src/bin/panic_free.rs` calls every public entry point of
//! the core; its panic handler calls `flatbin_panic_path_reachable`, which is defined nowhere.
//! The link succeeds only when the optimiser removed every panic path. When it fails, a
//! diagnostic build (feature `locate-panics`, a defined handler) is disassembled to name the
//! source lines whose panics survived.

use std::path::Path;
use std::process::Command;

use crate::tools::{elf_path, firmware_cargo, nm_symbols, run, Failures};
use crate::Core;

const MARKER: &str = "flatbin_panic_path_reachable";

/// The panic-free binaries: `panic_free` (the core's entry points), `track_panic_free`
/// (the integer tracking stages, apart for the Cortex-M0's flash) and `coding_panic_free` (the
/// coding stage: `conv_code`, `viterbi`, `interleave`, `crc`).
const BINS: [&str; 3] = ["panic_free", "track_panic_free", "coding_panic_free"];

/// Builds each of [`BINS`] for `core`; a link failure on the marker is a failed check.
pub fn check_panic_free(
    firmware: &Path,
    core: &Core,
    failures: &mut Failures,
) -> Result<(), String> {
    for bin in BINS {
        check_one(firmware, core, bin, failures)?;
    }
    Ok(())
}

fn check_one(
    firmware: &Path,
    core: &Core,
    bin: &str,
    failures: &mut Failures,
) -> Result<(), String> {
    let bins = [bin.to_string()];
    let out = run(&mut firmware_cargo(firmware, core.triple, &bins, &[]))?;
    if out.status == Some(0) {
        println!(
            "{bin} links for {}: no panic path survives in the core's entry points",
            core.name
        );
        return Ok(());
    }
    if !out.stderr.contains(MARKER) {
        return Err(format!(
            "{}: {bin} failed to build for another reason:\n{}",
            core.name, out.stderr
        ));
    }
    let mut message = format!(
        "{}: a panic path survives in the core ({bin}'s link fails: undefined symbol `{MARKER}`)",
        core.name
    );
    match locate(firmware, core, bin) {
        Ok(sites) if !sites.is_empty() => {
            message.push_str("; the panicking checks, in the core:");
            for s in sites {
                message.push_str("\n      ");
                message.push_str(&s);
            }
        }
        Ok(_) => message.push_str("; no call site found by disassembly"),
        Err(e) => message.push_str(&format!("; call sites not located: {e}")),
    }
    failures.push(message);
    Ok(())
}

/// An objdump that disassembles Thumb: LLVM's on PATH, the rustup `llvm-tools` component's,
/// or GNU's for arm-none-eabi.
pub(crate) fn objdump() -> Option<String> {
    let mut names: Vec<String> = vec!["llvm-objdump".into()];
    names.extend((14..=21).rev().map(|v| format!("llvm-objdump-{v}")));
    if let Ok(out) = Command::new("rustc").args(["--print", "sysroot"]).output() {
        let sysroot = String::from_utf8_lossy(&out.stdout).trim().to_string();
        if let Ok(dir) = std::fs::read_dir(Path::new(&sysroot).join("lib").join("rustlib")) {
            for d in dir.flatten() {
                let tool = d.path().join("bin").join("llvm-objdump");
                if tool.is_file() {
                    names.push(tool.to_string_lossy().into_owned());
                }
            }
        }
    }
    names.push("arm-none-eabi-objdump".into());
    names.into_iter().find(|n| {
        Command::new(n)
            .arg("--version")
            .output()
            .is_ok_and(|o| o.status.success())
    })
}

/// Builds the diagnostic variant and returns one line per distinct panic call site.
fn locate(firmware: &Path, core: &Core, bin: &str) -> Result<Vec<String>, String> {
    let tool = objdump().ok_or("no llvm-objdump or arm-none-eabi-objdump on PATH")?;
    let bins = [bin.to_string()];
    let out = run(&mut firmware_cargo(
        firmware,
        core.triple,
        &bins,
        &["--features", "locate-panics"],
    ))?;
    if out.status != Some(0) {
        return Err(format!("diagnostic build failed:\n{}", out.stderr));
    }
    let elf = elf_path(firmware, core.triple, bin);
    // The panic entry points: core's panicking functions and the handler itself.
    let targets: Vec<u64> = nm_symbols(&elf)?
        .into_iter()
        .filter(|s| {
            s.demangled.starts_with("core::panicking::")
                || s.demangled.contains("unwrap_failed")
                || s.demangled.contains("::slice::index::")
                || s.demangled.contains("rust_begin_unwind")
        })
        .map(|s| s.addr & !1)
        .collect();
    let dis = run(Command::new(&tool)
        .args(["-d", "--no-show-raw-insn"])
        .arg(&elf))?;
    if dis.status != Some(0) {
        return Err(format!("{tool} failed: {}", dis.stderr.trim()));
    }
    let insns = parse_disassembly(&dis.stdout);
    // Addresses to look up: each panic call, and every branch into the block that makes the
    // call (the optimiser often merges the panics of several checks into one call with no
    // line of its own; the branches into it keep theirs).
    let mut sources = Vec::new();
    for (i, call) in insns.iter().enumerate() {
        if !(is_call_or_jump(&call.op) && call.target.is_some_and(|t| targets.contains(&t))) {
            continue;
        }
        let mut start = i;
        while start > 0 && !ends_flow(&insns[start - 1], &targets) {
            start -= 1;
        }
        let block = insns[start].addr..=call.addr;
        sources.push(call.addr);
        sources.extend(
            insns
                .iter()
                .filter(|b| b.op.starts_with('b') || b.op.starts_with("cb"))
                .filter(|b| b.target.is_some_and(|t| block.contains(&t)))
                .map(|b| b.addr),
        );
    }
    // One line per source line of the core, with the number of sites and one function.
    let root = crate::repo_root();
    let prefix = format!("{}/", root.to_string_lossy());
    let ours = root.join("core").join("src").to_string_lossy().into_owned();
    let mut lines: Vec<(String, usize, String)> = Vec::new();
    for at in sources {
        let a2l = run(Command::new("addr2line")
            .args(["-i", "-C", "-f", "-e"])
            .arg(&elf)
            .arg(format!("{at:#x}")))?;
        // (function, file:line) pairs, innermost first.
        let frames: Vec<(String, String)> = a2l
            .stdout
            .lines()
            .collect::<Vec<_>>()
            .chunks(2)
            .map(|p| {
                let f = p.first().copied().unwrap_or("?").to_string();
                let l = p.get(1).copied().unwrap_or("?");
                let l = l.split(" (discriminator").next().unwrap_or(l);
                (f, l.to_string())
            })
            .collect();
        let Some((function, site)) = frames.iter().find(|(_, l)| l.starts_with(&ours)) else {
            continue;
        };
        let site = site.replace(&prefix, "");
        match lines.iter_mut().find(|(s, _, _)| *s == site) {
            Some(entry) => entry.1 += 1,
            None => lines.push((site, 1, function.clone())),
        }
    }
    let lines = lines
        .into_iter()
        .map(|(site, count, function)| format!("{site} ({count} site(s), e.g. in {function})"))
        .collect();
    Ok(lines)
}

/// One disassembled instruction.
pub(crate) struct Insn {
    pub(crate) addr: u64,
    pub(crate) op: String,
    /// First operand that is an address (branch target).
    pub(crate) target: Option<u64>,
    pub(crate) text: String,
}

/// Parses `objdump -d --no-show-raw-insn` lines: `    2506:  \tbl\t0x11954 <sym>` (llvm) or
/// `    2506:\tbl\t11954 <sym>` (GNU).
pub(crate) fn parse_disassembly(text: &str) -> Vec<Insn> {
    text.lines()
        .filter_map(|line| {
            let mut parts = line.split_whitespace();
            let addr = u64::from_str_radix(parts.next()?.strip_suffix(':')?, 16).ok()?;
            let op = parts.next()?.to_string();
            let target = parts
                .take_while(|t| !t.starts_with('<') && !t.starts_with('@'))
                .map(|t| t.trim_end_matches(',').trim_start_matches("0x"))
                .find(|t| !t.is_empty() && t.chars().all(|c| c.is_ascii_hexdigit()))
                .and_then(|t| u64::from_str_radix(t, 16).ok());
            Some(Insn {
                addr,
                op,
                target,
                text: line.to_string(),
            })
        })
        .collect()
}

fn is_call_or_jump(op: &str) -> bool {
    matches!(op, "bl" | "blx" | "b" | "b.w")
}

/// The instruction ends straight-line flow: unconditional branch, return, trap, or a call
/// to a panic function (which does not return).
fn ends_flow(i: &Insn, panics: &[u64]) -> bool {
    matches!(
        i.op.as_str(),
        "b" | "b.w" | "bx" | "udf" | "udf.w" | "tbb" | "tbh"
    ) || (i.op.starts_with("pop") && i.text.contains("pc"))
        || (matches!(i.op.as_str(), "bl" | "blx") && i.target.is_some_and(|t| panics.contains(&t)))
}
