//! No floating point on the Q15 receiver's per-symbol path of the Cortex-M0 build.
//!
//! `firmware/src/bin/rx_q15_only.rs` builds the receiver from its `build.rs` design table in
//! `per_symbol::<N>` and its `Numerology` in `configure` (`Numerology::new` computes the pilot
//! amplitude with `libm::powf`, configuration time). So the binary does link soft float; the
//! check is that none of it is reachable from `per_symbol`: the disassembly's direct calls
//! and branches are followed from every `per_symbol` instance, and the reached functions must
//! include no soft-float routine (`crate::is_soft_float`) and no `libm` function. An indirect
//! call or jump in the reached code fails the check (it could go anywhere), except a Thumb-1
//! jump table (`mov pc, rX` followed by its `.word` entries) whose entries all lie in the same
//! function.

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

/// The jump table after the `mov pc, rX` at `at` in function `f`: true when it has entries
/// (the run of `.word`s starting within 8 bytes after `at`) and all of them lie in `f`.
fn is_local_jump_table(words: &[(u64, u64)], f: &Function, at: u64) -> bool {
    let first = words.partition_point(|&(a, _)| a <= at);
    let mut next = match words.get(first) {
        Some(&(a, _)) if a <= at + 8 => a,
        _ => return false,
    };
    let mut count = 0;
    for &(a, v) in words.get(first..).unwrap_or_default() {
        if a != next || a >= f.end {
            break;
        }
        let target = v & !1;
        if !(f.start..f.end).contains(&target) {
            return false;
        }
        count += 1;
        next = a + 4;
    }
    count > 0
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
    let label = "rx_q15_only (Cortex-M0)";
    let Some(tool) = objdump() else {
        failures.push(format!(
            "{label}: no llvm-objdump (or arm-none-eabi-objdump) to follow the calls of the \
             receiver's per-symbol code; `rustup component add llvm-tools` provides one"
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
        .filter(|&i| fs[i].demangled.contains("rx_q15_only::per_symbol"))
        .collect();
    if entries.is_empty() {
        failures.push(format!(
            "{label}: no `per_symbol` function in the binary (inlined?): nothing to check"
        ));
        return Ok(());
    }
    let mut reached: BTreeSet<usize> = entries.iter().copied().collect();
    let mut todo: Vec<usize> = entries.clone();
    let mut indirect = Vec::new();
    let mut callers_of_float: BTreeSet<usize> = BTreeSet::new();
    // Every function's outgoing edges, once.
    let mut edges: Vec<Vec<usize>> = vec![Vec::new(); fs.len()];
    for i in &insns {
        let Some(from) = containing(&fs, i.addr) else {
            continue;
        };
        if is_indirect(i) && !is_local_jump_table(&words, &fs[from], i.addr) {
            indirect.push((from, i.text.trim().to_string()));
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
            "{label}: the receiver's per-symbol code reaches soft float: {}",
            float.join(", ")
        ));
    }
    if !jumps.is_empty() {
        failures.push(format!(
            "{label}: indirect branches in the receiver's per-symbol code (not followed): {}",
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
        let text = "    6a7c:      \tmov\tpc, r2\n    6a7e:      \tmov\tr8, r8\n\n00006a80 <$d>:\n    \
                    6a80:\t95 6a 00 00\t.word\t0x00006a95\n    6a84:\td5 6a 00 00\t.word\t0x00006ad5\n";
        let words = data_words(text);
        assert_eq!(words, vec![(0x6a80, 0x6a95), (0x6a84, 0x6ad5)]);
        let f = |start, end| Function {
            start,
            end,
            name: String::new(),
            demangled: String::new(),
        };
        assert!(is_local_jump_table(&words, &f(0x6000, 0x7000), 0x6a7c));
        // An entry outside the function, or no table at all.
        assert!(!is_local_jump_table(&words, &f(0x6000, 0x6ab0), 0x6a7c));
        assert!(!is_local_jump_table(&words, &f(0x6000, 0x7000), 0x6000));
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
