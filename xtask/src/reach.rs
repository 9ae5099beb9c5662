//! No floating point on the integer paths of the Cortex-M0 build: the Q15 receiver's
//! per-symbol code, the integer synchronisation and tracking stages, and the coding stage.
//!
//! `firmware/src/bin/rx_q15_only.rs` builds the receiver from its `build.rs` design table in
//! `per_symbol::<N>` and its `Numerology` in `configure` (`Numerology::new` computes the pilot
//! amplitude with `libm::powf`, configuration time); `firmware/src/bin/sync_q15_only.rs` calls
//! every integer synchronisation entry point in `per_sample::<N, S, R>` the same way. So the
//! binaries do link soft float; the check is that none of it is reachable from the entry
//! functions: the disassembly's direct calls and branches are followed from every instance,
//! and the reached functions must include no soft-float routine (`crate::is_soft_float`) and no
//! `libm` function. An indirect call or jump in the reached code fails the check (it could go
//! anywhere), except a Thumb-1 jump table, whose possible targets are followed instead
//! (`jump_table_targets`: a `mov pc, rX` followed by its `.word` entries, or an `add pc, rX`
//! over a byte or half-word offset table).

use std::collections::BTreeSet;
use std::path::Path;
use std::process::Command;

use crate::panics::{objdump, parse_disassembly, Insn};
use crate::tools::{nm_symbols, run, Failures};

/// A function of the ELF: [start, end) without the Thumb bit.
struct Function {
    start: u64,
    end: u64,
    name: String,
    demangled: String,
}

impl Function {
    fn is_float(&self) -> bool {
        crate::is_soft_float(&self.name)
            || crate::is_soft_float(&self.demangled)
            || self.demangled.starts_with("libm::")
    }
}

const CONDITIONS: [&str; 17] = [
    "eq", "ne", "cs", "hs", "cc", "lo", "mi", "pl", "vs", "vc", "hi", "ls", "ge", "lt", "gt", "le",
    "al",
];

/// Branch or call mnemonics (`.w`/`.n` suffixes dropped): `b`, `bl`, `blx`, `bx`, `b<cond>`,
/// `cbz`, `cbnz`.
fn is_branch(op: &str) -> bool {
    let op = op.trim_end_matches(".w").trim_end_matches(".n");
    matches!(op, "b" | "bl" | "blx" | "bx" | "cbz" | "cbnz")
        || op
            .strip_prefix('b')
            .is_some_and(|cc| CONDITIONS.contains(&cc))
}

/// A branch through a register (not a return through `lr`), or a write to `pc` other than a
/// return by `pop`.
fn is_indirect(i: &Insn) -> bool {
    let operands: Vec<&str> = i
        .text
        .split_whitespace()
        .skip(2)
        .map(|t| t.trim_end_matches(','))
        .collect();
    let first = operands.first().copied().unwrap_or("");
    match i.op.trim_end_matches(".w").trim_end_matches(".n") {
        "blx" | "bx" => i.target.is_none() && first != "lr",
        "mov" | "ldr" | "add" => first == "pc",
        _ => false,
    }
}

/// `.word` data of the disassembly: (address, value).
fn data_words(text: &str) -> Vec<(u64, u64)> {
    text.lines()
        .filter_map(|line| {
            let (addr, rest) = line.trim().split_once(':')?;
            let addr = u64::from_str_radix(addr, 16).ok()?;
            let value = rest.split(".word").nth(1)?.trim();
            let value = u64::from_str_radix(value.trim_start_matches("0x"), 16).ok()?;
            Some((addr, value))
        })
        .collect()
}

/// Operands of an instruction's text (`pc, r2` → `["pc", "r2"]`).
fn operands(i: &Insn) -> Vec<&str> {
    i.text
        .split_whitespace()
        .skip(2)
        .map(|t| t.trim_end_matches(','))
        .collect()
}

/// The functions a Thumb-1 jump table can reach from the indirect jump `insns[k]`, or None
/// when no table is recognised there (the jump then fails the check). Two forms, both sound
/// whatever the table's length (the index bound before the jump is not parsed):
/// - `mov pc, rX` after a load from a table of absolute `.word` entries starting within 8
///   bytes after the jump, or at the address an `adr` before the load gives: the entries are the run of words that are Thumb code addresses
///   (bit 0 set) inside a known function, ending at the first word that is not (the table's
///   literal pool follows it); every entry is followed. Data words that happen to look like
///   code addresses are followed too (conservative).
/// - `add pc, rX` after `lsls rX, rX, #1` after `ldrb`/`ldrh rX` (a byte or half-word offset
///   table): when the table's base is found and its entries branch inside the jump's own
///   function, that function only (`own_table_targets`); else every target lies within
///   `2·255` (or `2·65535`) bytes after the jump's PC, so every function overlapping that
///   range is taken as reached.
fn jump_table_targets(
    insns: &[Insn],
    k: usize,
    words: &[(u64, u64)],
    fs: &[Function],
) -> Option<Vec<usize>> {
    let i = insns.get(k)?;
    let ops = operands(i);
    let op = i.op.trim_end_matches(".w").trim_end_matches(".n");
    if ops.first() != Some(&"pc") {
        return None;
    }
    match op {
        "mov" => {
            let (first, mut next) = if let Some(base) = adr_table_base(insns, k) {
                let first = words.partition_point(|&(a, _)| a < base);
                (first, base)
            } else {
                let first = words.partition_point(|&(a, _)| a <= i.addr);
                match words.get(first) {
                    Some(&(a, _)) if a <= i.addr + 8 => (first, a),
                    _ => return None,
                }
            };
            let mut targets = Vec::new();
            for &(a, v) in words.get(first..).unwrap_or_default() {
                let entry = (v & 1 == 1).then(|| containing(fs, v & !1)).flatten();
                let (true, Some(j)) = (a == next, entry) else {
                    break;
                };
                targets.push(j);
                next = a + 4;
            }
            (!targets.is_empty()).then_some(targets)
        }
        "add" => {
            let reg = *ops.get(1)?;
            let shift = insns.get(k.checked_sub(1)?)?;
            let load = insns.get(k.checked_sub(2)?)?;
            if shift.op != "lsls" || operands(shift) != [reg, reg, "#1"] {
                return None;
            }
            if operands(load).first() != Some(&reg) {
                return None;
            }
            let (span, size) = match load.op.as_str() {
                "ldrb" => (2 * 255, 1),
                "ldrh" => (2 * 65_535, 2),
                _ => return None,
            };
            // Thumb: PC reads as the instruction's address + 4.
            let (lo, hi) = (i.addr + 4, i.addr + 4 + span);
            if let Some(own) = own_table_targets(insns, k, words, fs, size) {
                return Some(own);
            }
            Some(
                fs.iter()
                    .enumerate()
                    .filter(|(_, f)| f.start <= hi && f.end > lo)
                    .map(|(j, _)| j)
                    .collect(),
            )
        }
        _ => None,
    }
}

/// The byte at `addr` in the disassembly's `.word` data (little-endian), if any.
fn byte_at(words: &[(u64, u64)], addr: u64) -> Option<u64> {
    let base = addr & !3;
    let i = words.partition_point(|&(a, _)| a < base);
    let &(a, v) = words.get(i)?;
    (a == base).then_some((v >> (8 * (addr & 3))) & 0xff)
}

/// The offset table of the `add pc, rX` jump `insns[k]` (`size`-byte entries) read from the
/// disassembly's data, when its base is found — `adr rA, #imm` before `ldrb/ldrh rX, [rA, rB]`,
/// or `add rA, pc` just before `ldrb/ldrh rX, [rA, #off]` — and its first entry branches
/// inside the function holding the jump: then the entries are read until the first one that
/// branches outside that function (the table's end; a compiler's switch table branches within
/// its own function), and the functions they reach are returned. None otherwise (the caller
/// then takes the whole span the entry size allows).
fn own_table_targets(
    insns: &[Insn],
    k: usize,
    words: &[(u64, u64)],
    fs: &[Function],
    size: u64,
) -> Option<Vec<usize>> {
    let jump = insns.get(k)?;
    let from = containing(fs, jump.addr)?;
    let load = insns.get(k.checked_sub(2)?)?;
    let ops = operands(load);
    let base_reg = ops.get(1)?.trim_start_matches('[');
    let index = ops.get(2)?.trim_end_matches(']');
    let base = if let Some(off) = index.strip_prefix('#') {
        // `add rA, pc` right before the load: rA = index·size + PC.
        let add = insns.get(k.checked_sub(3)?)?;
        if add.op != "add" || operands(add) != [base_reg, "pc"] {
            return None;
        }
        add.addr + 4 + off.parse::<u64>().ok()?
    } else {
        let window = insns.get(k.saturating_sub(8)..k.checked_sub(2)?)?;
        let adr = window
            .iter()
            .rev()
            .find(|a| a.op == "adr" && operands(a).first() == Some(&base_reg))?;
        let imm = operands(adr)
            .get(1)?
            .strip_prefix('#')?
            .parse::<u64>()
            .ok()?;
        ((adr.addr + 4) & !3) + imm
    };
    let mut entry = 0u64;
    loop {
        let at = base + entry * size;
        let mut v = byte_at(words, at);
        if size == 2 {
            v = v.zip(byte_at(words, at + 1)).map(|(lo, hi)| lo | (hi << 8));
        }
        let inside = v
            .map(|v| jump.addr + 4 + 2 * v)
            .is_some_and(|t| containing(fs, t) == Some(from));
        if !inside {
            break;
        }
        entry += 1;
    }
    (entry > 0).then(|| vec![from])
}

/// The table address of `mov pc, rY` (`insns[k]`) when, within the 6 instructions before it,
/// `rY` is loaded by `ldr rY, [rA, rB]` from a base `rA` set by `adr rA, #imm` (the table
/// then need not follow the jump: a literal pool may sit between them).
fn adr_table_base(insns: &[Insn], k: usize) -> Option<u64> {
    let jump = insns.get(k)?;
    let target = *operands(jump).get(1)?;
    let window = insns.get(k.saturating_sub(6)..k)?;
    let (li, load) = window.iter().enumerate().rev().find(|(_, l)| {
        let o = operands(l);
        l.op == "ldr" && o.first() == Some(&target) && o.len() == 3 && o[1].starts_with('[')
    })?;
    let base_reg = operands(load).get(1)?.trim_start_matches('[').to_string();
    let adr = window.get(..li)?.iter().rev().find(|a| {
        let o = operands(a);
        a.op == "adr" && o.first() == Some(&base_reg.as_str())
    })?;
    let imm = operands(adr)
        .get(1)?
        .trim_start_matches('#')
        .parse::<u64>()
        .ok()?;
    // Thumb `adr`: Align(PC, 4) + imm, PC = the instruction's address + 4.
    Some(((adr.addr + 4) & !3) + imm)
}

fn functions(elf: &Path) -> Result<Vec<Function>, String> {
    let mut v: Vec<Function> = nm_symbols(elf)?
        .into_iter()
        .filter(|s| matches!(s.kind, 't' | 'T' | 'w' | 'W') && s.size > 0)
        .map(|s| Function {
            start: s.addr & !1,
            end: (s.addr & !1) + s.size,
            name: s.name,
            demangled: s.demangled,
        })
        .collect();
    v.sort_by_key(|f| f.start);
    v.dedup_by_key(|f| f.start);
    Ok(v)
}

fn containing(fs: &[Function], addr: u64) -> Option<usize> {
    let i = fs.partition_point(|f| f.start <= addr);
    i.checked_sub(1).filter(|&j| addr < fs[j].end)
}

/// Checks `rx_q15_only` (Cortex-M0): no soft float reachable from `per_symbol`.
pub fn check_rx_no_soft_float(elf: &Path, failures: &mut Failures) -> Result<(), String> {
    check_no_soft_float_from(
        elf,
        "rx_q15_only (Cortex-M0)",
        "rx_q15_only::per_symbol",
        "the receiver's per-symbol code",
        failures,
    )
}

/// Checks `sync_q15_only` (Cortex-M0): no soft float reachable from `per_sample`.
pub fn check_sync_no_soft_float(elf: &Path, failures: &mut Failures) -> Result<(), String> {
    check_no_soft_float_from(
        elf,
        "sync_q15_only (Cortex-M0)",
        "sync_q15_only::per_sample",
        "the integer synchronisation code",
        failures,
    )
}

/// Checks `track_q15_only` (Cortex-M0): no soft float reachable from `per_symbol` or
/// `per_frame`.
pub fn check_track_no_soft_float(elf: &Path, failures: &mut Failures) -> Result<(), String> {
    for entry in ["track_q15_only::per_symbol", "track_q15_only::per_frame"] {
        check_no_soft_float_from(
            elf,
            "track_q15_only (Cortex-M0)",
            entry,
            "the integer tracking code",
            failures,
        )?;
    }
    Ok(())
}

/// No soft float reachable from the functions whose demangled name contains `entry`.
/// Checks `coding_panic_free` (Cortex-M0): no soft float reachable from `per_bit` (every
/// entry point of `conv_code`, `viterbi`, `interleave` and `crc`).
pub fn check_coding_no_soft_float(elf: &Path, failures: &mut Failures) -> Result<(), String> {
    check_no_soft_float_from(
        elf,
        "coding_panic_free (Cortex-M0)",
        "coding_panic_free::per_bit",
        "the coding stage (encoder, Viterbi decoder, interleaver, CRC)",
        failures,
    )
}

fn check_no_soft_float_from(
    elf: &Path,
    label: &str,
    entry: &str,
    what: &str,
    failures: &mut Failures,
) -> Result<(), String> {
    let Some(tool) = objdump() else {
        failures.push(format!(
            "{label}: no llvm-objdump (or arm-none-eabi-objdump) to follow the calls of \
             {what}; `rustup component add llvm-tools` provides one"
        ));
        return Ok(());
    };
    let fs = functions(elf)?;
    let dis = run(Command::new(&tool)
        .args(["-d", "--no-show-raw-insn"])
        .arg(elf))?;
    if dis.status != Some(0) {
        return Err(format!("{tool} failed: {}", dis.stderr.trim()));
    }
    let insns = parse_disassembly(&dis.stdout);
    let words = data_words(&dis.stdout);

    let entries: Vec<usize> = (0..fs.len())
        .filter(|&i| fs[i].demangled.contains(entry))
        .collect();
    if entries.is_empty() {
        failures.push(format!(
            "{label}: no `{entry}` function in the binary (inlined?): nothing to check"
        ));
        return Ok(());
    }
    let mut reached: BTreeSet<usize> = entries.iter().copied().collect();
    let mut todo: Vec<usize> = entries.clone();
    let mut indirect = Vec::new();
    let mut callers_of_float: BTreeSet<usize> = BTreeSet::new();
    // Every function's outgoing edges, once.
    let mut edges: Vec<Vec<usize>> = vec![Vec::new(); fs.len()];
    for (k, i) in insns.iter().enumerate() {
        let Some(from) = containing(&fs, i.addr) else {
            continue;
        };
        if is_indirect(i) {
            match jump_table_targets(&insns, k, &words, &fs) {
                Some(targets) => {
                    for to in targets.into_iter().filter(|&to| to != from) {
                        edges[from].push(to);
                        if fs[to].is_float() && !fs[from].is_float() {
                            callers_of_float.insert(from);
                        }
                    }
                }
                None => indirect.push((from, i.text.trim().to_string())),
            }
        }
        if !is_branch(&i.op) {
            continue;
        }
        if let Some(to) = i.target.and_then(|t| containing(&fs, t)) {
            if to != from {
                edges[from].push(to);
                if fs[to].is_float() && !fs[from].is_float() {
                    callers_of_float.insert(from);
                }
            }
        }
    }
    while let Some(f) = todo.pop() {
        for &to in &edges[f] {
            if reached.insert(to) {
                todo.push(to);
            }
        }
    }
    let float: Vec<&str> = reached
        .iter()
        .filter(|&&i| fs[i].is_float())
        .map(|&i| fs[i].demangled.as_str())
        .collect();
    let jumps: Vec<String> = indirect
        .iter()
        .filter(|(f, _)| reached.contains(f))
        .map(|(f, t)| format!("{} in {}", t, fs[*f].demangled))
        .collect();
    let entry_names: Vec<&str> = entries.iter().map(|&i| fs[i].demangled.as_str()).collect();
    if float.is_empty() && jumps.is_empty() {
        println!(
            "{label}: {} functions reachable from {} ({} instructions followed); no soft-float \
             or libm routine among them",
            reached.len(),
            entry_names.join(", "),
            insns.len()
        );
    }
    if !float.is_empty() {
        failures.push(format!(
            "{label}: {what} reaches soft float: {}",
            float.join(", ")
        ));
    }
    if !jumps.is_empty() {
        failures.push(format!(
            "{label}: indirect branches in {what} (not followed): {}",
            jumps.join("; ")
        ));
    }
    let callers: Vec<&str> = callers_of_float
        .iter()
        .map(|&i| fs[i].demangled.as_str())
        .collect();
    if !callers.is_empty() {
        println!(
            "{label}: soft float in the binary is called only from (configuration): {}",
            callers.join(", ")
        );
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn branch_mnemonics() {
        for op in [
            "b", "bl", "blx", "bx", "beq", "bne.w", "b.w", "cbz", "cbnz", "bhs",
        ] {
            assert!(is_branch(op), "{op}");
        }
        for op in ["bic", "bics", "bfi", "bkpt", "add", "ldr"] {
            assert!(!is_branch(op), "{op}");
        }
    }

    #[test]
    fn jump_tables() {
        // A word table (entries in two functions) followed by its literal pool, as llvm-objdump
        // prints it for the M0 (`mov pc, r2`, padding, `.word`s).
        let text = "    6a7c:      \tmov\tpc, r2\n    6a7e:      \tmov\tr8, r8\n\n00006a80 <$d>:\n    \
                    6a80:\t95 6a 00 00\t.word\t0x00006a95\n    6a84:\td5 6a 00 00\t.word\t0x00006ad5\n    \
                    6a88:\tff ff ff 3f\t.word\t0x3fffffff\n    6a8c:\t95 6a 00 00\t.word\t0x00006a95\n";
        let words = data_words(text);
        assert_eq!(words.len(), 4);
        let f = |start, end| Function {
            start,
            end,
            name: String::new(),
            demangled: String::new(),
        };
        let fs = [f(0x6000, 0x6ab0), f(0x6ab0, 0x7000)];
        let insns = parse_disassembly(text);
        // Both entries are followed; the pool word 0x3fffffff ends the table, so the word
        // after it (which looks like an entry) is not read.
        assert_eq!(jump_table_targets(&insns, 0, &words, &fs), Some(vec![0, 1]));
        // No table right after a jump elsewhere.
        let far = parse_disassembly("    6000:      \tmov\tpc, r2\n");
        assert_eq!(jump_table_targets(&far, 0, &words, &fs), None);
        // A byte offset table: every function within 510 bytes after PC + 4 (0x6a04).
        let bytes = parse_disassembly(
            "    69fc:      \tldrb\tr3, [r3, #4]\n    69fe:      \tlsls\tr3, r3, #1\n    \
             6a00:      \tadd\tpc, r3\n",
        );
        assert_eq!(jump_table_targets(&bytes, 2, &words, &fs), Some(vec![0, 1]));
        // Not that pattern (no `lsls` by one before it): not recognised.
        assert_eq!(jump_table_targets(&bytes, 1, &words, &fs), None);
        let plain = parse_disassembly("    6aac:      \tadd\tpc, r3\n");
        assert_eq!(jump_table_targets(&plain, 0, &words, &fs), None);
    }

    #[test]
    fn indirect_branches() {
        let insns = parse_disassembly(
            "    100:      \tblx\tr3\n    102:      \tbx\tlr\n    104:      \tbl\t0x200 <f>\n    \
             106:      \tmov\tpc, r1\n",
        );
        let flags: Vec<bool> = insns.iter().map(is_indirect).collect();
        assert_eq!(flags, vec![true, false, false, true]);
    }
}
