//! Bit-exact vectors of the coding stage: the target's records (printed by
//! `firmware/src/bin/coding_vectors.rs`) against the same procedure run here on the host
//! (`vectors_gen::coding::run_case`, `run_interleave`, `run_crc`). The host is the reference:
//! it regenerates the frames (the firmware's input hashes must match), decodes them with the
//! same `ViterbiDecoder`, runs the same interleaver and CRC calls, and every word of every
//! record must be equal, in the same order.
//!
//! Sanity checks of the frames, on the host's records (they do not depend on the target):
//! every soft-decision frame decodes to the sent bits with its CRC-32 passing although its
//! LLRs hold erasures, saturated values and wrong signs; the interleaver round trip gives the
//! input back; the CRC's byte, bit and streaming forms agree, the appended CRC checks and a
//! flipped bit fails the check.

use std::path::Path;

use flatbin::viterbi::{Decision, ViterbiDecoder};
use flatbin::Numerology;
use vectors_gen::coding::{
    run_case, run_crc, run_interleave, CodingBuffers, InterleaveBuffers, CODING_CASES, DEPTH,
    MAX_CODED_BITS, MAX_INFO_BITS,
};
use vectors_gen::rx::numerology_params;

use crate::tools::{self, tail, Failures};
use crate::vectors::parse_blocks_tagged;
use crate::Core;

/// FFT size of the interleaver's numerology.
pub const INTERLEAVE_N: usize = 64;

/// One record: group (a case label, `il`, `crc`), label, words.
type Rec = (String, String, Vec<u32>);

/// The host's records, in the firmware's order.
pub fn host() -> Result<Vec<Rec>, String> {
    let mut out: Vec<Rec> = Vec::new();
    let mut dec = Box::new(ViterbiDecoder::<DEPTH>::new(
        flatbin::conv_code::CodeRate::Half,
        Decision::Soft,
    ));
    let mut info = vec![0u8; MAX_INFO_BITS];
    let mut coded = vec![0u8; MAX_CODED_BITS];
    let mut llrs = vec![0i8; MAX_CODED_BITS];
    let mut decoded = vec![0u8; MAX_INFO_BITS + 2 * DEPTH];
    let mut b = CodingBuffers {
        info: &mut info,
        coded: &mut coded,
        llrs: &mut llrs,
        decoded: &mut decoded,
    };
    for (i, c) in CODING_CASES.iter().enumerate() {
        let ok = run_case(i, &mut dec, &mut b, &mut |label, words| {
            out.push((c.label.to_string(), label.to_string(), words.to_vec()))
        });
        if !ok {
            return Err(format!("host run of coding case {} failed", c.label));
        }
    }
    let nu = Numerology::new(numerology_params(INTERLEAVE_N))
        .map_err(|e| format!("numerology: {e:?}"))?;
    let n = 4 * INTERLEAVE_N;
    let (mut bits, mut bits_out, mut il_llrs, mut llrs_out) =
        (vec![0u8; n], vec![0u8; n], vec![0i8; n], vec![0i8; n]);
    let mut ib = InterleaveBuffers {
        bits: &mut bits,
        bits_out: &mut bits_out,
        llrs: &mut il_llrs,
        llrs_out: &mut llrs_out,
    };
    if !run_interleave(&nu, &mut ib, &mut |label, words| {
        out.push(("il".into(), label.to_string(), words.to_vec()))
    }) {
        return Err("host interleaver run failed".into());
    }
    let mut frame = vec![0u8; 8 * vectors_gen::coding::CRC_PAYLOAD_BYTES + 32];
    if !run_crc(&mut frame, &mut |label, words| {
        out.push(("crc".into(), label.to_string(), words.to_vec()))
    }) {
        return Err("host CRC run failed".into());
    }
    Ok(out)
}

/// Sanity checks of the host's records (see the module docs); the messages of those that fail.
pub fn sanity(records: &[Rec]) -> Vec<String> {
    let mut bad = Vec::new();
    for c in CODING_CASES.iter() {
        let find = |label: &str| {
            records
                .iter()
                .find(|(g, l, _)| g == c.label && l == label)
                .map(|(_, _, w)| w.clone())
        };
        let (Some(input), Some(verdict)) = (find("input"), find("verdict")) else {
            bad.push(format!("coding case {}: records missing", c.label));
            continue;
        };
        let sign_errors = input.get(4).copied().unwrap_or(0);
        if sign_errors == 0 {
            bad.push(format!(
                "coding case {}: the LLRs have no sign errors or erasures to correct",
                c.label
            ));
        }
        if c.decision == Decision::Soft
            && (verdict.get(1) != Some(&1)
                || verdict.get(2) != Some(&0)
                || verdict.first() != Some(&(c.info_bits as u32)))
        {
            bad.push(format!(
                "coding case {}: soft decoding did not recover the frame (verdict {:?})",
                c.label, verdict
            ));
        }
    }
    for (_, _, w) in records.iter().filter(|(_, l, _)| l == "roundtrip") {
        if w != &[1] {
            bad.push("interleaver: the round trip did not give the input back".into());
        }
    }
    for (_, l, w) in records.iter().filter(|(g, _, _)| g == "crc") {
        let agree = w.get(..4).is_some_and(|f| f.iter().all(|&v| v == f[0]));
        if !agree || w.get(5..7) != Some(&[1, 0][..]) {
            bad.push(format!("{l}: byte, bit and streaming forms disagree or the check verdicts are wrong: {w:08x?}"));
        }
    }
    bad
}

/// Runs the firmware and compares every record with the host's.
pub fn check(core: &Core, elf: &Path, failures: &mut Failures) -> Result<(), String> {
    let out = tools::run_qemu(core, elf)?;
    if out.status != Some(0) {
        failures.push(format!(
            "{}: coding_vectors firmware exited with {:?}{}",
            core.name,
            out.status,
            tail(&out.stdout, &out.stderr)
        ));
    }
    for line in out.stdout.lines().filter(|l| l.starts_with("codingsize ")) {
        println!("{line}");
    }
    let blocks = parse_blocks_tagged(&out.stdout, "coding ")
        .map_err(|e| format!("{}: coding_vectors output: {e}", core.name))?;
    let records = match host() {
        Ok(r) => r,
        Err(e) => {
            failures.push(format!("{}: coding: {e}", core.name));
            return Ok(());
        }
    };
    for s in sanity(&records) {
        failures.push(format!("{}: coding sanity: {s}", core.name));
    }
    if blocks.len() != records.len() {
        failures.push(format!(
            "{}: coding: {} records from the firmware, {} from the host",
            core.name,
            blocks.len(),
            records.len()
        ));
    }
    println!(
        "{:<11} {:<14} {:>5} {:>6} {:>10} {:>9} {:>5} {:>7} {:>9}",
        "core", "group", "info", "coded", "llr errors", "bit errs", "CRC", "words", "bit-exact"
    );
    let mut groups: Vec<&str> = Vec::new();
    for (g, _, _) in &records {
        if !groups.contains(&g.as_str()) {
            groups.push(g);
        }
    }
    let mut bad_total = 0usize;
    for g in groups {
        let mut words = 0;
        let mut bad = 0;
        for (b, (group, rec, w)) in blocks.iter().zip(&records).filter(|(_, r)| r.0 == g) {
            words += w.len();
            let same = b.header.get("group") == Some(group)
                && b.header.get("rec") == Some(rec)
                && &b.words == w;
            if !same {
                bad += 1;
                bad_total += 1;
                if bad_total <= 3 {
                    failures.push(format!(
                        "{} coding: record group={group} rec={rec} idx={}: firmware {:?} \
                         {:08x?}, host {:08x?}",
                        core.name,
                        b.header.get("idx").map(String::as_str).unwrap_or("?"),
                        b.header.get("rec"),
                        b.words,
                        w
                    ));
                }
            }
        }
        let rec = |label: &str| {
            records
                .iter()
                .find(|(gg, l, _)| gg == g && l == label)
                .map(|(_, _, w)| w.clone())
                .unwrap_or_default()
        };
        let (input, verdict) = (rec("input"), rec("verdict"));
        let field = |v: &[u32], i: usize| v.get(i).map_or("-".to_string(), |x| x.to_string());
        println!(
            "{:<11} {:<14} {:>5} {:>6} {:>10} {:>9} {:>5} {:>7} {:>9}",
            core.name,
            g,
            field(&input, 0),
            field(&input, 1),
            field(&input, 4),
            field(&verdict, 2),
            match verdict.get(1) {
                Some(1) => "pass",
                Some(0) => "fail",
                Some(_) => "error",
                None => "-",
            },
            words,
            if bad == 0 && blocks.len() == records.len() {
                "yes"
            } else {
                "NO"
            }
        );
    }
    if bad_total > 3 {
        failures.push(format!(
            "{} coding: {bad_total} records differ in all",
            core.name
        ));
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn host_records_pass_their_sanity_checks() {
        let records = host().unwrap();
        for (g, l, w) in records.iter().filter(|(_, l, _)| l != "decoded") {
            println!("{g} {l} {w:?}");
        }
        let bad = sanity(&records);
        assert!(bad.is_empty(), "{bad:?}");
    }

    #[test]
    fn sanity_catches_a_broken_record() {
        let mut records = host().unwrap();
        let v = records
            .iter_mut()
            .find(|(g, l, _)| g == "r12-soft-256" && l == "verdict")
            .unwrap();
        v.2[1] = 0;
        assert_eq!(sanity(&records).len(), 1);
    }
}
