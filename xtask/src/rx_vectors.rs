//! Bit-exact vectors of the Q15 receiver: the target's outputs (printed by
//! `firmware/src/bin/rx_vectors.rs`) against the same receiver run here on the host, on the
//! same frames (`vectors_gen::rx`) with the same design. The host is the reference: the
//! design is computed here by `DesignQ15::new` (the firmware's table was written by its
//! `build.rs` from the same call; the firmware prints the table's hash to show it), the frame
//! is regenerated here (the firmware prints each symbol's hash), and every output word must
//! be equal.
//!
//! As a sanity check of the frames (not of bit-exactness) it also counts bit errors of the
//! LLR signs against the transmitted bits, outside the symbols with a clipped burst.

use std::collections::BTreeMap;
use std::path::Path;

use flatbin::fft::OfdmFft;
use flatbin::fft_q15::Q15Fft;
use flatbin::fixed::Cq15;
use flatbin::fixed_math::Scaled;
use flatbin::receiver_q15::{DesignQ15, ReceiverQ15};
use flatbin::Numerology;
use vectors_gen::rx::{
    design_hash, numerology_params, output_words, receiver_config, samples_hash, RxFrame, RX_CASES,
    RX_DESIGNS, RX_K, RX_M, RX_SYMBOLS,
};

use crate::tools::{self, tail, Failures};
use crate::vectors::parse_blocks_tagged;
use crate::Core;

/// Bit error ratio above which the frames are not being received (sanity bound; at 20 dB
/// Es/N0 the receiver's own figures are far below it).
const SANITY_BER: f64 = 0.05;

/// The host's result for one symbol, in the firmware's terms.
struct HostSymbol {
    header: BTreeMap<&'static str, String>,
    words: Vec<u32>,
    /// (bit errors of the LLR signs, bits), zero LLRs counted as errors.
    errors: (usize, usize),
}

/// Runs case `k` at size `N` on the host.
fn host_case<const N: usize>(k: usize) -> Result<Vec<HostSymbol>, String> {
    let case = RX_CASES.get(k).ok_or("unknown case")?;
    let spec = RX_DESIGNS.get(case.design).ok_or("unknown design")?;
    let nu = Numerology::new(numerology_params(N)).map_err(|e| format!("{e:?}"))?;
    let design = Box::new(
        DesignQ15::<N, RX_K, RX_M>::new(
            &nu,
            &receiver_config(spec),
            <Q15Fft<N> as OfdmFft<N>>::RESIDUAL_SCALE,
        )
        .map_err(|e| format!("design: {e:?}"))?,
    );
    let dhash = design_hash(&design);
    let mut rx = Box::new(
        ReceiverQ15::<Q15Fft<N>, N, RX_K, RX_M>::new(&nu, Q15Fft::new(), (*design).clone())
            .map_err(|e| format!("receiver: {e:?}"))?,
    );
    rx.set_gain(case.gain);
    let mut frame = Box::new(RxFrame::<N>::new(k).ok_or("frame generator")?);
    let mut x = vec![Cq15::ZERO; frame.symbol_len()];
    let mut eq = vec![Cq15::ZERO; N];
    let mut sinr = vec![Scaled::default(); N];
    let mut llrs = vec![0i8; 4 * N];
    let mut out = Vec::new();
    for symbol in 0..RX_SYMBOLS {
        if !frame.symbol(symbol, &mut x) {
            return Err(format!("frame generator failed at symbol {symbol}"));
        }
        let (status, data, count, clipped) =
            match rx.receive(&x, symbol, case.modulation, &mut eq, &mut sinr, &mut llrs) {
                Ok(c) => ("ok", c.data_bins, c.llrs, c.clipped),
                Err(_) => ("err", 0, 0, 0),
            };
        let (eq, sinr, l8) = (&eq[..data], &sinr[..data], &llrs[..count]);
        let words: Vec<u32> = output_words(eq, sinr, l8).collect();
        let bits = frame.bits();
        let errors = l8
            .iter()
            .zip(bits)
            .filter(|(&l, &b)| l == 0 || (l < 0) != (b == 1))
            .count();
        let mut header = BTreeMap::new();
        header.insert("in", format!("{:08x}", samples_hash(&x)));
        header.insert("design", format!("{dhash:08x}"));
        header.insert("status", status.to_string());
        header.insert("data", data.to_string());
        header.insert("llrs", count.to_string());
        header.insert("clipped", clipped.to_string());
        header.insert("words", words.len().to_string());
        out.push(HostSymbol {
            header,
            words,
            errors: (errors, bits.len().min(count)),
        });
    }
    Ok(out)
}

fn host_at(n: usize, k: usize) -> Result<Vec<HostSymbol>, String> {
    match n {
        64 => host_case::<64>(k),
        256 => host_case::<256>(k),
        _ => Err(format!("no receiver design table at N = {n}")),
    }
}

/// Runs the `rx_vectors` firmware and checks every symbol against the host.
pub fn check(core: &Core, elf: &Path, failures: &mut Failures) -> Result<(), String> {
    let out = tools::run_qemu(core, elf)?;
    if out.status != Some(0) {
        failures.push(format!(
            "{}: rx_vectors firmware exited with {:?}{}",
            core.name,
            out.status,
            tail(&out.stdout, &out.stderr)
        ));
    }
    let blocks = parse_blocks_tagged(&out.stdout, "rxv ")
        .map_err(|e| format!("{}: rx_vectors output: {e}", core.name))?;
    for line in out.stdout.lines().filter(|l| l.starts_with("rxbuild ")) {
        println!("{line}");
    }
    println!(
        "{:<11} {:>4} {:<20} {:>7} {:>9} {:>7} {:>12} {:>10}",
        "core", "N", "case", "symbols", "bit-exact", "clipped", "words", "BER (sanity)"
    );
    let mut compared = 0usize;
    for &n in core.rx_sizes {
        for (k, case) in RX_CASES.iter().enumerate() {
            let label = format!("{} rx n={n} {}", core.name, case.label);
            let host = match host_at(n, k) {
                Ok(h) => h,
                Err(e) => {
                    failures.push(format!("{label}: host run failed: {e}"));
                    continue;
                }
            };
            let (mut exact, mut symbols, mut clipped, mut words) = (true, 0, 0usize, 0usize);
            let (mut errors, mut bits) = (0usize, 0usize);
            for (symbol, h) in host.iter().enumerate() {
                let target = blocks.iter().find(|b| {
                    b.header.get("n") == Some(&n.to_string())
                        && b.header.get("case").map(String::as_str) == Some(case.label)
                        && b.header.get("sym") == Some(&symbol.to_string())
                });
                let Some(t) = target else {
                    failures.push(format!(
                        "{label} symbol {symbol}: no vector from the firmware"
                    ));
                    exact = false;
                    continue;
                };
                symbols += 1;
                compared += 1;
                for (key, value) in &h.header {
                    let got = t.header.get(*key).map(String::as_str).unwrap_or("");
                    if got != value {
                        exact = false;
                        let why = match *key {
                            "in" => " (the frame generator differs between host and target)",
                            "design" => " (the firmware's design table is not the host's design)",
                            _ => "",
                        };
                        failures.push(format!(
                            "{label} symbol {symbol}: {key} host {value}, target {got}{why}"
                        ));
                    }
                }
                if h.words != t.words {
                    exact = false;
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
                        "{label} symbol {symbol}: target output differs from the host ({first})"
                    ));
                }
                clipped += h
                    .header
                    .get("clipped")
                    .and_then(|c| c.parse().ok())
                    .unwrap_or(0usize);
                words += h.words.len();
                // Symbols 1 and 4 carry the clipped burst (vectors_gen::rx).
                if symbol % 3 != 1 {
                    errors += h.errors.0;
                    bits += h.errors.1;
                }
            }
            let ber = errors as f64 / bits.max(1) as f64;
            if ber > SANITY_BER {
                failures.push(format!(
                    "{label}: bit error ratio {ber:.3} of the LLR signs outside the bursts: the \
                     frames are not being received (sanity bound {SANITY_BER})"
                ));
            }
            println!(
                "{:<11} {:>4} {:<20} {:>7} {:>9} {:>7} {:>12} {:>10.4}",
                core.name,
                n,
                case.label,
                symbols,
                if exact { "yes" } else { "NO" },
                clipped,
                words,
                ber
            );
        }
    }
    println!("{compared} receiver symbols compared on {}", core.name);
    Ok(())
}
