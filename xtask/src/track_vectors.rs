//! Bit-exact vectors of the integer tracking stages: the target's records (printed by
//! `firmware/src/bin/track_vectors.rs`) against the same procedure run here on the host
//! (`vectors_gen::track::run_case` and `ici_grid`). The host is the reference: it computes the
//! receiver's design (`DesignQ15::new`) and the noise tracker's (`NoiseTrackDesignQ15::new`)
//! itself (the firmware prints the hashes of its `build.rs` tables), builds its own ICI table,
//! regenerates the frames, runs the same stages with the same coverage as the core, and every
//! word of every record must be equal, in the same order.

use std::path::Path;

use flatbin::delay_spread_q15::DelaySpreadEstimatorQ15;
use flatbin::doppler_q15::{DopplerConfigQ15, DopplerEstimatorQ15};
use flatbin::fft::OfdmFft;
use flatbin::fft_q15::Q15Fft;
use flatbin::fixed::Cq15;
use flatbin::fixed_math::Scaled;
use flatbin::ici_q15::IciTableQ15;
use flatbin::iq_image_q15::IqImageEstimatorQ15;
use flatbin::noise_track_q15::{NoiseTrackConfigQ15, NoiseTrackDesignQ15, NoiseTrackerQ15};
use flatbin::receiver_q15::{DesignQ15, ReceiverQ15};
use flatbin::Numerology;
use vectors_gen::rx::{design_hash, numerology_params, receiver_config, RX_DESIGNS, RX_K, RX_M};
use vectors_gen::track::{
    delay_config, ici_grid, record_case, run_case, run_stored, track_design_hash, Buffers,
    Trackers, HASH_START, TRACK_CASES, TRACK_RX_DESIGN,
};

use crate::tools::{self, tail, Failures};
use crate::vectors::parse_blocks_tagged;
use crate::Core;

const H: usize = 32;

/// One record: case (`"0"`, `"1"`, `"ici"`), label, words.
type Rec = (String, String, Vec<u32>);

/// The host's records at size `N` (`P` Doppler pilots at most) with the trackers when
/// `trackers`, and the two design hashes.
fn host<const N: usize, const P: usize>(trackers: bool) -> Result<(Vec<Rec>, u32, u32), String> {
    let nu = Numerology::new(numerology_params(N)).map_err(|e| format!("numerology: {e:?}"))?;
    let residual = <Q15Fft<N> as OfdmFft<N>>::RESIDUAL_SCALE;
    let spec = &RX_DESIGNS[TRACK_RX_DESIGN];
    let design = Box::new(
        DesignQ15::<N, RX_K, RX_M>::new(&nu, &receiver_config(spec), residual)
            .map_err(|e| format!("receiver design: {e:?}"))?,
    );
    let track_design = Box::new(
        NoiseTrackDesignQ15::<N>::new::<RX_K, RX_M>(&nu, &receiver_config(spec), residual)
            .map_err(|e| format!("tracker design: {e:?}"))?,
    );
    let hashes = (design_hash(&design), track_design_hash(&track_design));
    let mut rx = Box::new(
        ReceiverQ15::<Q15Fft<N>, N, RX_K, RX_M>::new(&nu, Q15Fft::new(), (*design).clone())
            .map_err(|e| format!("receiver: {e:?}"))?,
    );
    let mut noise = Box::new(
        NoiseTrackerQ15::new(&nu, (*track_design).clone(), NoiseTrackConfigQ15::default())
            .map_err(|e| format!("noise tracker: {e:?}"))?,
    );
    let mut doppler = Box::new(
        DopplerEstimatorQ15::<N, P, H>::new(&nu, DopplerConfigQ15::default())
            .map_err(|e| format!("doppler: {e:?}"))?,
    );
    let mut delay = Box::new(
        DelaySpreadEstimatorQ15::<N>::new(&nu, delay_config(&nu))
            .map_err(|e| format!("delay: {e:?}"))?,
    );
    let mut iq = Box::new(IqImageEstimatorQ15::<N>::new(&nu).map_err(|e| format!("iq: {e:?}"))?);
    let ici = IciTableQ15::new(N).map_err(|e| format!("ici: {e:?}"))?;
    let mut t = Trackers::<N, P, H> {
        noise: trackers.then_some(&mut *noise),
        doppler: trackers.then_some(&mut *doppler),
        delay: trackers.then_some(&mut *delay),
        iq: trackers.then_some(&mut *iq),
        ici: Some(&ici),
    };
    let mut samples = vec![Cq15::ZERO; N + N / 8];
    let mut equalized = vec![Cq15::ZERO; N];
    let mut sinr = vec![Scaled::default(); N];
    let mut llrs = vec![0i8; 4 * N];
    let mut noise_buf = vec![0u64; N];
    let mut b = Buffers {
        samples: &mut samples,
        equalized: &mut equalized,
        sinr: &mut sinr,
        llrs: &mut llrs,
        noise: &mut noise_buf,
    };
    let mut out = Vec::new();
    for case in TRACK_CASES {
        let ok = run_case(
            case,
            &nu,
            &mut rx,
            &track_design,
            &mut t,
            &mut b,
            &mut |label, words| out.push((case.to_string(), label.to_string(), words.to_vec())),
        );
        if !ok {
            return Err(format!("host procedure failed on case {case}"));
        }
    }
    ici_grid(&ici, &mut |label, words| {
        out.push(("ici".to_string(), label.to_string(), words.to_vec()))
    });
    Ok((out, hashes.0, hashes.1))
}

/// Runs the firmware and compares every record with the host's.
pub fn check(core: &Core, elf: &Path, failures: &mut Failures) -> Result<(), String> {
    let out = tools::run_qemu(core, elf)?;
    if out.status != Some(0) {
        failures.push(format!(
            "{}: track_vectors firmware exited with {:?}{}",
            core.name,
            out.status,
            tail(&out.stdout, &out.stderr)
        ));
    }
    let blocks = parse_blocks_tagged(&out.stdout, "trackv ")
        .map_err(|e| format!("{}: track_vectors output: {e}", core.name))?;
    for line in out.stdout.lines().filter(|l| l.starts_with("trackskip ")) {
        println!("{line}");
    }
    println!(
        "{:<11} {:>4} {:<28} {:>7} {:>8} {:>9}",
        "core", "N", "stages", "records", "words", "bit-exact"
    );
    for &n in core.track_ici_sizes {
        let trackers = core.track_sizes.contains(&n);
        let with_rx = trackers || core.track_bin_noise_sizes.contains(&n);
        let host = match n {
            64 => host::<64, 16>(trackers),
            256 => host::<256, 64>(trackers),
            _ => Err(format!("no host run at N = {n}")),
        };
        let (records, rx_hash, track_hash) = match host {
            Ok(h) => h,
            Err(e) => {
                failures.push(format!("{} track n={n}: host run failed: {e}", core.name));
                continue;
            }
        };
        let label = format!("{} track n={n}", core.name);
        if with_rx {
            let line = out.stdout.lines().find(|l| {
                l.starts_with("trackdesign ") && tools::fields(l).get("n") == Some(&n.to_string())
            });
            let f = line.map(tools::fields).unwrap_or_default();
            let want = (format!("{rx_hash:08x}"), format!("{track_hash:08x}"));
            if f.get("rx") != Some(&want.0) || f.get("track") != Some(&want.1) {
                failures.push(format!(
                    "{label}: the firmware's design tables (rx {:?}, track {:?}) are not the \
                     host's ({}, {})",
                    f.get("rx"),
                    f.get("track"),
                    want.0,
                    want.1
                ));
            }
        }
        let expected: Vec<&Rec> = records
            .iter()
            .filter(|(case, _, _)| with_rx || case == "ici")
            .collect();
        let mine: Vec<_> = blocks
            .iter()
            .filter(|b| b.header.get("n") == Some(&n.to_string()))
            .collect();
        let mut bad = 0usize;
        let mut words = 0usize;
        if mine.len() != expected.len() {
            failures.push(format!(
                "{label}: {} records from the firmware, {} from the host",
                mine.len(),
                expected.len()
            ));
        }
        for (b, (case, rec, w)) in mine.iter().zip(&expected) {
            words += w.len();
            let same = b.header.get("case") == Some(case)
                && b.header.get("rec") == Some(rec)
                && &b.words == w;
            if !same {
                bad += 1;
                if bad <= 3 {
                    failures.push(format!(
                        "{label}: record case={case} rec={rec} idx={}: firmware {:?} {:08x?}, \
                         host {:08x?}",
                        b.header.get("idx").map(String::as_str).unwrap_or("?"),
                        b.header.get("rec"),
                        b.words,
                        w
                    ));
                }
            }
        }
        if bad > 3 {
            failures.push(format!("{label}: {bad} records differ in all"));
        }
        let stages = if trackers {
            "rx+noise+doppler+delay+iq+ici"
        } else if with_rx {
            "rx+set_bin_noise+ici"
        } else {
            "ici"
        };
        println!(
            "{:<11} {:>4} {:<28} {:>7} {:>8} {:>9}",
            core.name,
            n,
            stages,
            mine.len(),
            words,
            if bad == 0 && mine.len() == expected.len() {
                "yes"
            } else {
                "NO"
            }
        );
    }
    Ok(())
}

/// The receiver outputs of one stored symbol, owned (`vectors_gen::track::StoredSymbol`).
struct Owned<const N: usize> {
    bins: [Cq15; N],
    bins_exp: i32,
    estimate: Vec<Cq15>,
    estimate_exp: i32,
    common_phase: Option<Cq15>,
    equalized: Vec<Cq15>,
    rx_error: bool,
}

impl<const N: usize> Owned<N> {
    fn view(&self) -> vectors_gen::track::StoredSymbol<'_, N> {
        vectors_gen::track::StoredSymbol {
            bins: &self.bins,
            bins_exp: self.bins_exp,
            estimate: &self.estimate,
            estimate_exp: self.estimate_exp,
            common_phase: self.common_phase,
            equalized: &self.equalized,
            rx_error: self.rx_error,
        }
    }
}

/// The host's side of `firmware/src/bin/track_stored.rs` at size `N`: records the receiver's
/// outputs of the tracking cases with its own design and receiver (`record_case`), hashes
/// them as the firmware hashes its `build.rs` tables, and runs the trackers' pass
/// (`run_stored`: noise tracker with its design borrowed, as on the target; Doppler, delay
/// spread, I/Q image, ICI) on them. Returns the records, the stored outputs' hash and the
/// noise tracker design's hash.
fn host_stored<const N: usize, const P: usize>() -> Result<(Vec<Rec>, u32, u32), String> {
    let nu = Numerology::new(numerology_params(N)).map_err(|e| format!("numerology: {e:?}"))?;
    let residual = <Q15Fft<N> as OfdmFft<N>>::RESIDUAL_SCALE;
    let spec = &RX_DESIGNS[TRACK_RX_DESIGN];
    let design = Box::new(
        DesignQ15::<N, RX_K, RX_M>::new(&nu, &receiver_config(spec), residual)
            .map_err(|e| format!("receiver design: {e:?}"))?,
    );
    let track_design = Box::new(
        NoiseTrackDesignQ15::<N>::new::<RX_K, RX_M>(&nu, &receiver_config(spec), residual)
            .map_err(|e| format!("tracker design: {e:?}"))?,
    );
    let mut rx = Box::new(
        ReceiverQ15::<Q15Fft<N>, N, RX_K, RX_M>::new(&nu, Q15Fft::new(), *design)
            .map_err(|e| format!("receiver: {e:?}"))?,
    );
    let mut samples = vec![Cq15::ZERO; N + N / 8];
    let mut equalized = vec![Cq15::ZERO; N];
    let mut sinr = vec![Scaled::default(); N];
    let mut llrs = vec![0i8; 4 * N];
    let mut noise_buf = vec![0u64; N];
    let mut b = Buffers {
        samples: &mut samples,
        equalized: &mut equalized,
        sinr: &mut sinr,
        llrs: &mut llrs,
        noise: &mut noise_buf,
    };
    let mut stored: Vec<Vec<Owned<N>>> = Vec::new();
    let mut hash = HASH_START;
    for case in TRACK_CASES {
        let mut symbols = Vec::new();
        let ok = record_case(case, &nu, &mut rx, &mut b, &mut |_, _, s| {
            hash = s.hash(hash);
            symbols.push(Owned {
                bins: *s.bins,
                bins_exp: s.bins_exp,
                estimate: s.estimate.to_vec(),
                estimate_exp: s.estimate_exp,
                common_phase: s.common_phase,
                equalized: s.equalized.to_vec(),
                rx_error: s.rx_error,
            });
        });
        if !ok {
            return Err(format!("host recording failed on case {case}"));
        }
        stored.push(symbols);
    }
    let mut tracker = Box::new(
        NoiseTrackerQ15::<N, &NoiseTrackDesignQ15<N>>::new(
            &nu,
            &*track_design,
            NoiseTrackConfigQ15::default(),
        )
        .map_err(|e| format!("noise tracker: {e:?}"))?,
    );
    let mut doppler = Box::new(
        DopplerEstimatorQ15::<N, P, H>::new(&nu, DopplerConfigQ15::default())
            .map_err(|e| format!("doppler: {e:?}"))?,
    );
    let mut delay = Box::new(
        DelaySpreadEstimatorQ15::<N>::new(&nu, delay_config(&nu))
            .map_err(|e| format!("delay: {e:?}"))?,
    );
    let mut iq = Box::new(IqImageEstimatorQ15::<N>::new(&nu).map_err(|e| format!("iq: {e:?}"))?);
    let ici = IciTableQ15::new(N).map_err(|e| format!("ici: {e:?}"))?;
    let mut out = Vec::new();
    for (case, symbols) in TRACK_CASES.iter().zip(&stored) {
        let mut t = Trackers::<N, P, H, &NoiseTrackDesignQ15<N>> {
            noise: Some(&mut *tracker),
            doppler: Some(&mut *doppler),
            delay: Some(&mut *delay),
            iq: Some(&mut *iq),
            ici: Some(&ici),
        };
        let source = |f: u32, s: u32| {
            symbols
                .get((f * vectors_gen::rx::RX_SYMBOLS + s) as usize)
                .map(Owned::view)
        };
        let mut noise = vec![0u64; N];
        let ok = run_stored(
            *case,
            &nu,
            &source,
            &mut t,
            &mut noise,
            &mut |label, words| out.push((case.to_string(), label.to_string(), words.to_vec())),
        );
        if !ok {
            return Err(format!("host stored run failed on case {case}"));
        }
    }
    Ok((out, hash, track_design_hash(&track_design)))
}

/// Runs `track_stored` (the trackers on stored receiver outputs, for a core whose RAM does
/// not hold the receiver beside them) and compares every record with the host's; then checks
/// that the host's stored run gives the same noise records and estimates as its full receiver
/// run (`run_case`), so the stored outputs stand for the receiver.
pub fn check_stored(core: &Core, elf: &Path, failures: &mut Failures) -> Result<(), String> {
    let out = tools::run_qemu(core, elf)?;
    if out.status != Some(0) {
        failures.push(format!(
            "{}: track_stored firmware exited with {:?}{}",
            core.name,
            out.status,
            tail(&out.stdout, &out.stderr)
        ));
    }
    let blocks = parse_blocks_tagged(&out.stdout, "tracks ")
        .map_err(|e| format!("{}: track_stored output: {e}", core.name))?;
    for line in out.stdout.lines().filter(|l| {
        ["tracksize ", "trackskip ", "trackstore ", "trackdesign "]
            .iter()
            .any(|p| l.starts_with(p))
    }) {
        println!("{line}");
    }
    println!(
        "{:<11} {:>4} {:<28} {:>7} {:>8} {:>9} {:>13}",
        "core", "N", "stages (stored rx outputs)", "records", "words", "bit-exact", "= full run"
    );
    for &n in core.track_stored_sizes {
        let label = format!("{} track stored n={n}", core.name);
        let (host, full) = match n {
            64 => (host_stored::<64, 16>(), host::<64, 16>(true)),
            _ => (Err(format!("no host run at N = {n}")), Err(String::new())),
        };
        let (records, hash, design_hash) = match host {
            Ok(h) => h,
            Err(e) => {
                failures.push(format!("{label}: host run failed: {e}"));
                continue;
            }
        };
        let line = out.stdout.lines().find(|l| {
            l.starts_with("trackstore ") && tools::fields(l).get("n") == Some(&n.to_string())
        });
        let f = line.map(tools::fields).unwrap_or_default();
        if f.get("hash") != Some(&format!("{hash:08x}")) {
            failures.push(format!(
                "{label}: the firmware's stored tables (hash {:?}) are not the host's \
                 recording ({hash:08x})",
                f.get("hash")
            ));
        }
        let line = out.stdout.lines().find(|l| {
            l.starts_with("trackdesign ") && tools::fields(l).get("n") == Some(&n.to_string())
        });
        let f = line.map(tools::fields).unwrap_or_default();
        if f.get("track") != Some(&format!("{design_hash:08x}")) {
            failures.push(format!(
                "{label}: the firmware's noise tracker design table (hash {:?}) is not the                  host's ({design_hash:08x})",
                f.get("track")
            ));
        }
        let mine: Vec<_> = blocks
            .iter()
            .filter(|b| b.header.get("n") == Some(&n.to_string()))
            .collect();
        if mine.len() != records.len() {
            failures.push(format!(
                "{label}: {} records from the firmware, {} from the host",
                mine.len(),
                records.len()
            ));
        }
        let mut bad = 0usize;
        let mut words = 0usize;
        for (b, (case, rec, w)) in mine.iter().zip(&records) {
            words += w.len();
            let same = b.header.get("case") == Some(case)
                && b.header.get("rec") == Some(rec)
                && &b.words == w;
            if !same {
                bad += 1;
                if bad <= 3 {
                    failures.push(format!(
                        "{label}: record case={case} rec={rec} idx={}: firmware {:?} {:08x?}, \
                         host {:08x?}",
                        b.header.get("idx").map(String::as_str).unwrap_or("?"),
                        b.header.get("rec"),
                        b.words,
                        w
                    ));
                }
            }
        }
        if bad > 3 {
            failures.push(format!("{label}: {bad} records differ in all"));
        }
        // The stored run against the full receiver run, both on the host: the noise tracker's
        // records, the estimates and ICI predictions in order, and each symbol's block
        // exponent.
        let same_as_full = match full {
            Ok((full, _, _)) => {
                let pick = |r: &[Rec], labels: &[&str]| -> Vec<(String, String, Vec<u32>)> {
                    r.iter()
                        .filter(|(_, l, _)| labels.contains(&l.as_str()))
                        .map(|(c, l, w)| match l.as_str() {
                            // frame, symbol, exponent
                            "symbol" | "tsymbol" => (
                                "exp".to_string(),
                                c.clone(),
                                w.get(..3).unwrap_or_default().to_vec(),
                            ),
                            _ => (c.clone(), l.clone(), w.clone()),
                        })
                        .collect()
                };
                let est = [
                    "frame_stats",
                    "interfered",
                    "bin_noise",
                    "doppler",
                    "delay",
                    "iq",
                    "ici",
                ];
                let a = pick(&records, &est);
                let b = pick(&full, &est);
                let ea = pick(&records, &["tsymbol"]);
                let eb = pick(&full, &["symbol"]);
                let ok = !a.is_empty() && a == b && !ea.is_empty() && ea == eb;
                if !ok {
                    failures.push(format!(
                        "{label}: the host's run on stored receiver outputs differs from its \
                         full receiver run ({} / {} estimate records, {} / {} symbols)",
                        a.len(),
                        b.len(),
                        ea.len(),
                        eb.len()
                    ));
                }
                ok
            }
            Err(e) => {
                failures.push(format!("{label}: host full run failed: {e}"));
                false
            }
        };
        println!(
            "{:<11} {:>4} {:<28} {:>7} {:>8} {:>9} {:>13}",
            core.name,
            n,
            "noise+doppler+delay+iq+ici",
            mine.len(),
            words,
            if bad == 0 && mine.len() == records.len() {
                "yes"
            } else {
                "NO"
            },
            if same_as_full { "yes" } else { "NO" }
        );
    }
    Ok(())
}
