//! Bit-exact vectors of the integer synchronisation stages: the target's records (printed by
//! `firmware/src/bin/sync_vectors.rs`) against the same procedure run here on the host
//! (`vectors_gen::sync::run_case`) on the same captures. The host is the reference: it computes
//! the preamble with its own f32 FFT (the firmware's table was written by `build.rs` from the
//! same call; the firmware prints the table's hash), computes the frame receiver's design with
//! `DesignQ15::new` (the firmware prints the hash of its `build.rs` table), regenerates every
//! capture (the firmware prints a hash of each stage's input), and every word must be equal.
//!
//! As a sanity check of the captures (not of bit-exactness) it also counts bit errors of the
//! frame receiver's LLR signs against the transmitted bits.

use std::collections::BTreeMap;
use std::path::Path;

use flatbin::fft::OfdmFft;
use flatbin::fft_q15::Q15Fft;
use flatbin::receiver_q15::DesignQ15;
use flatbin::{Cf32, Numerology};
use vectors_gen::rx::{design_hash, numerology_params, receiver_config, RX_DESIGNS, RX_K, RX_M};
use vectors_gen::sync::{
    data_bits, preamble_hash, preamble_len, run_case, write_preamble_f32, Coverage, Record,
    FRAME_DESIGN, MAX_CHUNK, SYNC_CASES,
};

use crate::tools::{self, tail, Failures};
use crate::vectors::parse_blocks_tagged;
use crate::Core;

/// Bit error ratio above which the frames are not being received (sanity bound, as the
/// receiver check's; measured on these captures: 2.5e-3 … 1.5e-2, see
/// `vectors_gen::sync::SYNC_CFO`).
pub const SANITY_BER: f64 = 0.05;

/// One record of the host's run, in the firmware's terms.
#[derive(Clone, Debug)]
pub struct HostRecord {
    /// Stage name.
    pub stage: String,
    /// Chunk size.
    pub chunk: usize,
    /// Index within the stage and chunk size.
    pub index: u32,
    /// Input hash.
    pub input_hash: u32,
    /// Every word.
    pub words: Vec<u32>,
    /// The head words alone.
    pub head: Vec<u32>,
    /// LLRs (frame events).
    pub llrs: Vec<i8>,
}

impl HostRecord {
    fn of(r: &Record) -> Self {
        Self {
            stage: r.stage.to_string(),
            chunk: r.chunk,
            index: r.index,
            input_hash: r.input_hash,
            words: r.words().collect(),
            head: r.head.to_vec(),
            llrs: r.llrs.to_vec(),
        }
    }
}

/// The host's run of capture `k` at size `N` (every stage), with the preamble's and the
/// design's hashes.
pub struct HostCase {
    /// Records in emission order.
    pub records: Vec<HostRecord>,
    /// Hash of the preamble (as the firmware prints for its table).
    pub preamble_hash: u32,
    /// Hash of the frame receiver's design.
    pub design_hash: u32,
}

/// The preamble at size `N` computed on the host.
pub fn host_preamble<const N: usize>() -> Result<Vec<Cf32>, String> {
    let mut pre = vec![Cf32::new(0.0, 0.0); preamble_len(N)];
    if write_preamble_f32::<N>(&mut pre) {
        Ok(pre)
    } else {
        Err(format!("preamble at N = {N}"))
    }
}

/// The frame receiver's design at size `N`, computed on the host.
pub fn host_design<const N: usize>() -> Result<Box<DesignQ15<N, RX_K, RX_M>>, String> {
    let nu = Numerology::new(numerology_params(N)).map_err(|e| format!("{e:?}"))?;
    let spec = RX_DESIGNS.get(FRAME_DESIGN).ok_or("design index")?;
    Ok(Box::new(
        DesignQ15::<N, RX_K, RX_M>::new(
            &nu,
            &receiver_config(spec),
            <Q15Fft<N> as OfdmFft<N>>::RESIDUAL_SCALE,
        )
        .map_err(|e| format!("design: {e:?}"))?,
    ))
}

/// Runs capture `k` at size `N` on the host, every stage.
pub fn host_case<const N: usize, const S: usize, const R: usize>(
    k: usize,
) -> Result<HostCase, String> {
    let pre = host_preamble::<N>()?;
    let design = host_design::<N>()?;
    let mut records = Vec::new();
    let mut chunk = vec![flatbin::fixed::Cq15::ZERO; MAX_CHUNK];
    let mut span = vec![flatbin::fixed::Cq15::ZERO; S + N];
    let coverage = Coverage {
        cp: true,
        frame: Some(&*design),
    };
    let ok = run_case::<N, S, R>(k, &pre, coverage, &mut chunk, &mut span, &mut |r| {
        records.push(HostRecord::of(r))
    });
    if !ok {
        return Err(format!("run_case refused case {k} at N = {N}"));
    }
    Ok(HostCase {
        records,
        preamble_hash: preamble_hash(&pre),
        design_hash: design_hash(&design),
    })
}

/// [`host_case`] at a runtime size.
pub fn host_at(n: usize, k: usize) -> Result<HostCase, String> {
    match n {
        64 => host_case::<64, 72, 512>(k),
        256 => host_case::<256, 288, 2048>(k),
        _ => Err(format!("no synchronisation check at N = {n}")),
    }
}

/// Bit errors of the LLR signs of the `frame` records of one chunk size against the
/// transmitted bits (zero LLRs count as errors): (errors, bits). Frame `f` is counted from
/// the events with symbol 0.
pub fn frame_bit_errors(
    n: usize,
    k: usize,
    records: &[HostRecord],
    chunk: usize,
) -> (usize, usize) {
    let mut frame: Option<usize> = None;
    let (mut errors, mut bits) = (0, 0);
    let mut want = vec![0u8; 8 * n];
    for r in records
        .iter()
        .filter(|r| r.stage == "frame" && r.chunk == chunk)
    {
        let symbol = r.head.first().copied().unwrap_or(0);
        if symbol == 0 {
            frame = Some(frame.map_or(0, |f| f + 1));
        }
        let f = frame.unwrap_or(0);
        let count = match n {
            64 => data_bits::<64>(k, f, symbol, &mut want),
            256 => data_bits::<256>(k, f, symbol, &mut want),
            _ => 0,
        };
        let sent = &want[..count];
        errors += r
            .llrs
            .iter()
            .zip(sent)
            .filter(|(&l, &b)| l == 0 || (l < 0) != (b == 1))
            .count();
        errors += count.saturating_sub(r.llrs.len());
        bits += count;
    }
    (errors, bits)
}

/// What a core runs at size `n`: (CP tracker, frame receiver).
fn coverage_of(core: &Core, n: usize) -> (bool, bool) {
    (
        core.sync_cp_sizes.contains(&n),
        core.sync_frame_sizes.contains(&n),
    )
}

/// Runs the `sync_vectors` firmware and checks every record against the host.
pub fn check(core: &Core, elf: &Path, failures: &mut Failures) -> Result<(), String> {
    let out = tools::run_qemu(core, elf)?;
    if out.status != Some(0) {
        failures.push(format!(
            "{}: sync_vectors firmware exited with {:?}{}",
            core.name,
            out.status,
            tail(&out.stdout, &out.stderr)
        ));
    }
    let blocks = parse_blocks_tagged(&out.stdout, "syncv ")
        .map_err(|e| format!("{}: sync_vectors output: {e}", core.name))?;
    for line in out
        .stdout
        .lines()
        .filter(|l| l.starts_with("syncbuild ") || l.starts_with("syncskip "))
    {
        println!("{line}");
    }
    println!(
        "{:<11} {:>4} {:<15} {:<12} {:>7} {:>9} {:>8} {:>12}",
        "core", "N", "case", "stage", "records", "bit-exact", "words", "BER (sanity)"
    );
    let mut compared = 0usize;
    for &n in core.sync_sizes {
        let (cp, frame) = coverage_of(core, n);
        for (k, case) in SYNC_CASES.iter().enumerate() {
            let label = format!("{} sync n={n} {}", core.name, case.label);
            let host = match host_at(n, k) {
                Ok(h) => h,
                Err(e) => {
                    failures.push(format!("{label}: host run failed: {e}"));
                    continue;
                }
            };
            let mine: Vec<_> = blocks
                .iter()
                .filter(|b| {
                    b.header.get("n") == Some(&n.to_string())
                        && b.header.get("case").map(String::as_str) == Some(case.label)
                })
                .collect();
            for b in &mine {
                if b.header.get("pre") != Some(&format!("{:08x}", host.preamble_hash)) {
                    failures.push(format!(
                        "{label}: the firmware's preamble table (hash {}) is not the host's \
                         ({:08x})",
                        b.header.get("pre").map(String::as_str).unwrap_or("?"),
                        host.preamble_hash
                    ));
                    break;
                }
            }
            if frame {
                let design = out
                    .stdout
                    .lines()
                    .filter(|l| l.starts_with("syncdesign "))
                    .map(tools::fields)
                    .find(|f| f.get("n") == Some(&n.to_string()));
                let want = format!("{:08x}", host.design_hash);
                if design.as_ref().and_then(|f| f.get("design")) != Some(&want) {
                    failures.push(format!(
                        "{label}: the firmware's frame receiver design is not the host's \
                         (host {want}, target {:?})",
                        design.and_then(|f| f.get("design").cloned())
                    ));
                }
            }
            // Per stage: (records, exact, words).
            let mut stages: BTreeMap<&str, (usize, bool, usize)> = BTreeMap::new();
            for h in &host.records {
                let expected = match h.stage.as_str() {
                    "cp" => cp,
                    "frame" | "frame_end" => frame,
                    _ => true,
                };
                if !expected {
                    continue;
                }
                let entry = stages.entry(stage_group(&h.stage)).or_insert((0, true, 0));
                let target = mine.iter().find(|b| {
                    b.header.get("stage") == Some(&h.stage)
                        && b.header.get("chunk") == Some(&h.chunk.to_string())
                        && b.header.get("idx") == Some(&h.index.to_string())
                });
                let what = format!("{label} {} chunk={} idx={}", h.stage, h.chunk, h.index);
                let Some(t) = target else {
                    failures.push(format!("{what}: no record from the firmware"));
                    entry.1 = false;
                    continue;
                };
                entry.0 += 1;
                entry.2 += h.words.len();
                compared += 1;
                let got_in = t.header.get("in").map(String::as_str).unwrap_or("");
                if got_in != format!("{:08x}", h.input_hash) {
                    entry.1 = false;
                    failures.push(format!(
                        "{what}: input hash host {:08x}, target {got_in} (the capture differs \
                         between host and target)",
                        h.input_hash
                    ));
                }
                if h.words != t.words {
                    entry.1 = false;
                    let first = h
                        .words
                        .iter()
                        .zip(&t.words)
                        .position(|(a, b)| a != b)
                        .map(|i| {
                            format!(
                                "first differing word {i}: host {:08x}, target {:08x}",
                                h.words[i], t.words[i]
                            )
                        })
                        .unwrap_or_else(|| {
                            format!(
                                "{} words on the host, {} on the target",
                                h.words.len(),
                                t.words.len()
                            )
                        });
                    failures.push(format!(
                        "{what}: target output differs from the host ({first})"
                    ));
                }
            }
            // Records the target printed that the host did not make (an extra event, say).
            for b in &mine {
                let known = host.records.iter().any(|h| {
                    b.header.get("stage") == Some(&h.stage)
                        && b.header.get("chunk") == Some(&h.chunk.to_string())
                        && b.header.get("idx") == Some(&h.index.to_string())
                });
                if !known {
                    failures.push(format!(
                        "{label}: the target printed a record the host did not make: {:?}",
                        b.header
                    ));
                }
            }
            let mut bers = Vec::new();
            if frame {
                for chunk in vectors_gen::sync::FRAME_CHUNKS {
                    let (errors, bits) = frame_bit_errors(n, k, &host.records, chunk);
                    let ber = errors as f64 / bits.max(1) as f64;
                    if bits == 0 || ber > SANITY_BER {
                        failures.push(format!(
                            "{label}: frame receiver, chunk {chunk}: bit error ratio {ber:.3} \
                             over {bits} bits: the frames are not being received (sanity \
                             bound {SANITY_BER})"
                        ));
                    }
                    bers.push(ber);
                }
            }
            for (stage, (records, exact, words)) in &stages {
                let ber = if *stage == "frame" && !bers.is_empty() {
                    format!("{:.2e}", bers.iter().copied().fold(0.0, f64::max))
                } else {
                    String::new()
                };
                println!(
                    "{:<11} {:>4} {:<15} {:<12} {:>7} {:>9} {:>8} {:>12}",
                    core.name,
                    n,
                    case.label,
                    stage,
                    records,
                    if *exact { "yes" } else { "NO" },
                    words,
                    ber
                );
            }
        }
    }
    println!(
        "{compared} synchronisation records compared on {}",
        core.name
    );
    Ok(())
}

/// Table row of a record's stage (`frame_end` joins `frame`, the preamble steps join
/// `preamble`).
fn stage_group(stage: &str) -> &'static str {
    match stage {
        "acq" => "acq",
        "cfo" | "timing_gain" => "preamble",
        "dc" => "gain_dc",
        "nco" | "nco_clipped" => "nco",
        "cp" => "cp",
        "sco" => "sco",
        "frame" | "frame_end" => "frame",
        _ => "other",
    }
}
