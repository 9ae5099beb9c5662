//! Bit-exact vectors: the target's FFT outputs (printed by `firmware/src/bin/vectors.rs`)
//! against the same code run here on the host, plus the SQNR of the target's outputs against
//! an f64 reference FFT (`rustfft`).

use std::collections::BTreeMap;
use std::path::Path;

use flatbin::fft::{MicroFft, OfdmFft};
use flatbin::Cf32;
use rustfft::num_complex::Complex;
use vectors_gen::{Fnv1a32, CASES};

use crate::tools::{self, fields, tail, Failures};
use crate::{stages, Core};

/// One printed block.
pub(crate) struct Block {
    /// `key=value` fields of the header line.
    pub(crate) header: BTreeMap<String, String>,
    /// The words of its `w` lines.
    pub(crate) words: Vec<u32>,
}

fn parse_blocks(stdout: &str) -> Result<Vec<Block>, String> {
    parse_blocks_tagged(stdout, "vec ")
}

/// Blocks whose header line starts with `tag` (e.g. `"vec "`), each followed by `w` lines and
/// `end`.
pub(crate) fn parse_blocks_tagged(stdout: &str, tag: &str) -> Result<Vec<Block>, String> {
    let mut blocks: Vec<Block> = Vec::new();
    let mut open = false;
    for line in stdout.lines() {
        if let Some(rest) = line.strip_prefix(tag) {
            if open {
                return Err("`vec` block without `end`".into());
            }
            blocks.push(Block {
                header: fields(rest),
                words: Vec::new(),
            });
            open = true;
        } else if let Some(rest) = line.strip_prefix("w ") {
            let block = blocks
                .last_mut()
                .filter(|_| open)
                .ok_or("`w` line outside a block")?;
            for w in rest.split_whitespace() {
                block
                    .words
                    .push(u32::from_str_radix(w, 16).map_err(|_| format!("bad word `{w}`"))?);
            }
        } else if line == "end" {
            open = false;
        }
    }
    if open {
        return Err("last block has no `end`".into());
    }
    Ok(blocks)
}

/// The generator's input for case `k` at size `n`, with its FNV-1a hash (as the firmware).
fn input(k: usize, n: usize) -> (Vec<(i16, i16)>, u32) {
    let mut v = vec![(0i16, 0i16); n];
    let mut hash = Fnv1a32::default();
    if let Some(case) = CASES.get(k) {
        vectors_gen::for_each_sample(case.kind, vectors_gen::seed(k, n), n, |i, re, im| {
            hash.push_i16(re);
            hash.push_i16(im);
            v[i] = (re, im);
        });
    }
    (v, hash.finish())
}

/// Host result of one stage: block exponent, output words (as the firmware prints them) and
/// the output as unitary-DFT values (`out · 2^e · RESIDUAL_SCALE`, fractions).
struct HostRun {
    exp: i32,
    words: Vec<u32>,
}

fn f32_at<const N: usize>(x: &[(i16, i16)]) -> HostRun {
    let mut buf = Box::new([Cf32::new(0.0, 0.0); N]);
    for (b, &(re, im)) in buf.iter_mut().zip(x) {
        // Same conversion as the firmware: exact (i16 → f32), then a division by 2^15 (exact).
        *b = Cf32::new(f32::from(re) / 32768.0, f32::from(im) / 32768.0);
    }
    let exp = MicroFft::<N>::new().forward(&mut buf);
    HostRun {
        exp,
        words: buf
            .iter()
            .flat_map(|v| [v.re.to_bits(), v.im.to_bits()])
            .collect(),
    }
}

/// Packed Q15 word as printed by the firmware: re in bits 0..16, im in 16..32.
#[cfg_attr(not(feature = "q15"), allow(dead_code))]
pub fn pack_q15(re: i16, im: i16) -> u32 {
    u32::from(re as u16) | (u32::from(im as u16) << 16)
}

#[cfg_attr(not(feature = "q15"), allow(dead_code))]
fn unpack_q15(w: u32) -> (i16, i16) {
    (w as u16 as i16, (w >> 16) as u16 as i16)
}

#[cfg(feature = "q15")]
fn q15_at<const N: usize>(x: &[(i16, i16)]) -> (HostRun, f64) {
    use flatbin::fft_q15::Q15Fft;
    use flatbin::fixed::Cq15;
    let mut buf = Box::new([Cq15 { re: 0, im: 0 }; N]);
    for (b, &(re, im)) in buf.iter_mut().zip(x) {
        *b = Cq15 { re, im };
    }
    let exp = Q15Fft::<N>::new().forward(&mut buf);
    let residual = f64::from(<Q15Fft<N> as OfdmFft<N>>::RESIDUAL_SCALE);
    let words = buf.iter().map(|v| pack_q15(v.re, v.im)).collect();
    (HostRun { exp, words }, residual)
}

macro_rules! by_size {
    ($n:expr, $f:ident, $x:expr) => {
        match $n {
            16 => Some($f::<16>($x)),
            32 => Some($f::<32>($x)),
            64 => Some($f::<64>($x)),
            128 => Some($f::<128>($x)),
            256 => Some($f::<256>($x)),
            512 => Some($f::<512>($x)),
            1024 => Some($f::<1024>($x)),
            2048 => Some($f::<2048>($x)),
            4096 => Some($f::<4096>($x)),
            _ => None,
        }
    };
}

/// Unitary DFT of the input (fractions), in f64 by `rustfft` (the reference).
fn reference(x: &[(i16, i16)]) -> Vec<Complex<f64>> {
    let n = x.len();
    let mut buf: Vec<Complex<f64>> = x
        .iter()
        .map(|&(re, im)| Complex::new(f64::from(re) / 32768.0, f64::from(im) / 32768.0))
        .collect();
    rustfft::FftPlanner::<f64>::new()
        .plan_fft_forward(n)
        .process(&mut buf);
    let scale = 1.0 / (n as f64).sqrt();
    buf.iter().map(|v| v * scale).collect()
}

/// SQNR of `y` against `reference`, dB (infinite when equal).
pub fn sqnr_db(y: &[Complex<f64>], reference: &[Complex<f64>]) -> f64 {
    let signal: f64 = reference.iter().map(|r| r.norm_sqr()).sum();
    let noise: f64 = y
        .iter()
        .zip(reference)
        .map(|(a, b)| (a - b).norm_sqr())
        .sum();
    10.0 * (signal / noise).log10()
}

/// Runs the vectors firmware and checks every block against the host.
pub fn check(core: &Core, elf: &Path, failures: &mut Failures) -> Result<(), String> {
    let out = tools::run_qemu(core, elf)?;
    if out.status != Some(0) {
        failures.push(format!(
            "{}: vectors firmware exited with {:?}{}",
            core.name,
            out.status,
            tail(&out.stdout, &out.stderr)
        ));
    }
    let blocks =
        parse_blocks(&out.stdout).map_err(|e| format!("{}: vectors output: {e}", core.name))?;

    println!(
        "{:<11} {:>5} {:<13} {:<8} {:>5} {:>10} {:>9}",
        "core", "N", "input", "stage", "exp", "bit-exact", "SQNR dB"
    );
    let mut compared = 0;
    for b in &blocks {
        let h = |k: &str| b.header.get(k).cloned().unwrap_or_default();
        let label = format!("{} {} n={} {}", core.name, h("stage"), h("n"), h("kind"));
        let n: usize = h("n").parse().unwrap_or(0);
        let Some(k) = CASES.iter().position(|c| c.label == h("kind")) else {
            failures.push(format!("{label}: unknown input kind"));
            continue;
        };
        let (x, hash) = input(k, n);
        if h("in") != format!("{hash:08x}") {
            failures.push(format!(
                "{label}: input hash {} on the target, {hash:08x} on the host: the generator \
                 (libm) differs between host and target",
                h("in")
            ));
            continue;
        }
        let target_exp: i32 = h("exp").parse().unwrap_or(i32::MIN);
        let (host, ys): (Option<HostRun>, Vec<Complex<f64>>) = match h("stage").as_str() {
            "fft_f32" => {
                let host = by_size!(n, f32_at, &x);
                let ys = b
                    .words
                    .chunks_exact(2)
                    .map(|p| {
                        Complex::new(
                            f64::from(f32::from_bits(p[0])),
                            f64::from(f32::from_bits(p[1])),
                        )
                    })
                    .collect();
                (host, ys)
            }
            #[cfg(feature = "q15")]
            "fft_q15" => match by_size!(n, q15_at, &x) {
                Some((host, residual)) => {
                    let scale = 2f64.powi(target_exp) * residual / 32768.0;
                    let ys = b
                        .words
                        .iter()
                        .map(|&w| {
                            let (re, im) = unpack_q15(w);
                            Complex::new(f64::from(re) * scale, f64::from(im) * scale)
                        })
                        .collect();
                    (Some(host), ys)
                }
                None => (None, Vec::new()),
            },
            other => {
                failures.push(format!("{label}: unknown stage `{other}`"));
                continue;
            }
        };
        let Some(host) = host else {
            failures.push(format!("{label}: unsupported size"));
            continue;
        };
        compared += 1;
        let words_equal = host.words == b.words;
        let exact = words_equal && host.exp == target_exp;
        if !exact {
            let first = host
                .words
                .iter()
                .zip(&b.words)
                .position(|(a, t)| a != t)
                .map(|i| {
                    format!(
                        "first differing word {i}: host {:08x}, target {:08x}",
                        host.words[i], b.words[i]
                    )
                })
                .unwrap_or_else(|| {
                    format!(
                        "{} words on the host, {} on the target",
                        host.words.len(),
                        b.words.len()
                    )
                });
            failures.push(format!(
                "{label}: target output differs from the host (exponent host {}, target {target_exp}; {first})",
                host.exp
            ));
        }
        let sqnr = sqnr_db(&ys, &reference(&x));
        // The Q15 FFT's targets for complex Gaussian input, measured on the target's own
        // outputs: ≥ 68 dB for N ≤ 256, ≥ 64 dB above (the Q15 FFT issue; tests/fft_q15.rs
        // checks the same on the host).
        if h("stage") == "fft_q15" && h("kind").starts_with("gauss") {
            let floor = if n <= 256 { 68.0 } else { 64.0 };
            if sqnr < floor {
                failures.push(format!(
                    "{label}: SQNR {sqnr:.1} dB below the {floor} dB target"
                ));
            }
        }
        println!(
            "{:<11} {:>5} {:<13} {:<8} {:>5} {:>10} {:>9.1}",
            core.name,
            n,
            h("kind"),
            h("stage"),
            target_exp,
            if exact { "yes" } else { "NO" },
            sqnr
        );
    }
    for stage in stages() {
        for &n in core.vector_sizes {
            for case in CASES {
                let present = blocks.iter().any(|b| {
                    b.header.get("stage").map(String::as_str) == Some(stage)
                        && b.header.get("n") == Some(&n.to_string())
                        && b.header.get("kind").map(String::as_str) == Some(case.label)
                });
                if !present {
                    failures.push(format!(
                        "{} {stage} n={n} {}: no vector from the firmware",
                        core.name, case.label
                    ));
                }
            }
        }
    }
    println!("{compared} vectors compared on {}", core.name);
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn q15_packing_round_trips() {
        for (re, im) in [(0, 0), (-1, 1), (i16::MIN, i16::MAX), (12345, -54)] {
            assert_eq!(unpack_q15(pack_q15(re, im)), (re, im));
        }
        assert_eq!(pack_q15(1, -1), 0xffff_0001);
    }

    #[test]
    fn sqnr_of_a_known_error() {
        // Signal power 2, error power 2e-6 → 60 dB (definition of SQNR).
        let r = vec![Complex::new(1.0, 0.0), Complex::new(0.0, 1.0)];
        let y = vec![Complex::new(1.001, 0.0), Complex::new(0.0, 1.001)];
        assert!((sqnr_db(&y, &r) - 60.0).abs() < 1e-6);
    }

    #[test]
    fn reference_of_a_tone() {
        // Unitary DFT of a unit complex tone on bin 3 (N = 16): sqrt(16) = 4 in bin 3.
        let k = CASES
            .iter()
            .position(|c| c.label == "tone-bin3")
            .expect("tone case");
        let (x, _) = input(k, 16);
        assert_eq!(CASES[k].kind, vectors_gen::Kind::Tone { bin: 3 });
        let r = reference(&x);
        assert!(
            (r[3].re - 4.0 * 32767.0 / 32768.0).abs() < 1e-3,
            "{:?}",
            r[3]
        );
        assert!(r
            .iter()
            .enumerate()
            .filter(|(k, _)| *k != 3)
            .all(|(_, v)| v.norm() < 1e-3));
    }

    #[test]
    fn blocks_parse() {
        let b = parse_blocks(
            "vec stage=fft_q15 n=2 kind=x in=00000000 exp=1 words=2\nw 00000001 ffff0000\nend\n",
        )
        .unwrap();
        assert_eq!(b.len(), 1);
        assert_eq!(b[0].words, vec![1, 0xffff_0000]);
        assert!(parse_blocks("vec n=1\nw 1\n").is_err());
    }
}
