//! The committed cost table `mcu/costs.csv`: compare the measured costs with it, or rewrite it.

use std::path::Path;

use crate::tools::Failures;

/// A measured cost grows by more than this over its committed row: failure.
pub const TOLERANCE_PERCENT: u64 = 2;

/// One row of the cost table.
#[derive(Clone, Debug, PartialEq)]
pub struct CostRow {
    /// Core name (`cortex-m4f`, `cortex-m0`).
    pub core: String,
    /// Stage (`fft_f32`, `fft_q15`).
    pub stage: String,
    /// FFT size.
    pub n: usize,
    /// Guest instructions of one call, net of the empty-region overhead.
    pub instructions: u64,
    /// Peak stack of one call, bytes.
    pub stack_bytes: u64,
    /// Flash the stage adds at this size, bytes.
    pub code_bytes: u64,
}

impl CostRow {
    fn key(&self) -> (String, String, usize) {
        (self.core.clone(), self.stage.clone(), self.n)
    }

    fn label(&self) -> String {
        format!("{} {} n={}", self.core, self.stage, self.n)
    }

    fn metrics(&self) -> [(&'static str, u64); 3] {
        [
            ("instructions", self.instructions),
            ("stack_bytes", self.stack_bytes),
            ("code_bytes", self.code_bytes),
        ]
    }
}

const HEADER: &str = "\
# flatbin cost table: one call of each stage on emulated cores. Checked by `cargo xtask mcu`
# (a cost more than 2 % above its row fails); rewritten only by `cargo xtask mcu --update`.
#
# instructions: guest instructions counted by a QEMU TCG plugin (xtask/qemu/insncount.c)
#   between probe_start() and probe_stop(), minus the empty region's overhead. Instructions,
#   not cycles: QEMU models no pipeline, no flash wait states; a cycle figure needs a stated
#   cycles-per-instruction factor per core.
# stack_bytes: peak stack below the caller's stack pointer during the call (stack painted
#   before, scanned after), including the call's own frame; not the sample buffer nor the
#   stage object (Q15Fft<N> holds a 4*N-byte scratch block), which the caller provides.
# code_bytes: code + read-only data (tables; on the Cortex-M0 also the soft-float routines
#   the stage pulls in): sum of `nm -S` sizes of the text/rodata symbols of a firmware holding
#   only this stage at this N (firmware/src/size_probe.rs) minus those of an empty one.
# Input: complex Gaussian at -12 dBFS from firmware/vectors-gen (float costs on the Cortex-M0
#   depend on the data).
# rx_q15_* rows: one ReceiverQ15::receive call (K = M = 4) on symbol 4 of a frame from
#   vectors_gen::rx (-12 dBFS, fixed multipath, 20 dB SNR) after symbols 0-3, design from the
#   build.rs table (frequency LMMSE, time Latest; `2d`: time LMMSE). `symbol`: the whole call
#   (gain, FFT, LS, time and frequency stages, common phase, equalization, i8 LLRs);
#   `est_eq_demap`: the same call without its FFT (regions split around the FFT, calibrated
#   by an empty split). Stack: of the whole call; not the receiver object (about 100*N bytes
#   with its design). code_bytes: a firmware with the receiver minus one that builds only its
#   Numerology; includes the FFT (not for `est_eq_demap`) and the design table (rodata).
# Synchronisation rows (firmware/src/bin/sync_cost.rs), the unit in the stage name:
#   `*_1k_samples`: one call on 1000 input samples (instructions per sample = the figure /
#   1000), in steady state after 1000 samples of the same input (-12 dBFS Gaussian noise):
#   acq_q15 = AcquirerQ15::push while listening (no detection), nco_q15 = NcoQ15::derotate
#   (n = 0: no FFT size), cp_q15 = CpTrackerQ15::push. `cp_q15_estimate`: one
#   CpTrackerQ15::estimate (search over N + L positions). `sco_q15_update`: one
#   ScoEstimatorQ15::update (one symbol's FFT output, after the reference and one symbol);
#   `sco_q15_estimate`: one estimate_q32. `frame_q15_data_symbol_qpsk`: one
#   FrameReceiverQ15::push of the N + L samples that complete a data symbol (the 5th of a
#   frame of vectors_gen::sync capture 0; K = M = 4, QPSK, track_sco and the DC blocker on):
#   the steady-state cost per data symbol, the Q15 receiver call included. Stack: of the call,
#   not the stage object. code_bytes: a firmware with the stage (its Numerology built too)
#   minus `size_numerology` (`size_baseline` for nco_q15); the frame receiver's includes the
#   Q15 receiver, its FFT and its design table.
# Tracking rows (firmware/src/bin/track_cost.rs), one call each on frame case 0 of
#   vectors_gen::rx (QPSK, -12 dBFS, fixed multipath, 20 dB SNR) received by ReceiverQ15
#   (K = M = 4, design 0 of the build.rs table), after symbols 0-3 fed every tracker.
#   Per symbol (the call on symbol 4's bins and block exponent): noise_track_q15_update =
#   NoiseTrackerQ15::update_from_receiver (design from the build.rs table), doppler_q15_update
#   = DopplerEstimatorQ15<N, N/4, 32>::update, delay_q15_update =
#   DelaySpreadEstimatorQ15::update (known floor at N = 64, measured at 256), iq_q15_update =
#   IqImageEstimatorQ15::update. Per frame (one call after the symbols): set_bin_noise =
#   ReceiverQ15::set_bin_noise with the tracker's bin_noise (cortex-m0: the noise the design
#   assumes; it may also run per symbol), noise_track_q15_frame_stats, doppler_q15_estimate,
#   delay_q15_estimate, iq_q15_estimate, ici_q15_predict = IciTableQ15::predict. The M0 has
#   set_bin_noise (n = 64), ici_q15_predict, and the noise_track/doppler/delay/iq rows at
#   n = 64 measured without the receiver on its outputs of the same frame stored in flash
#   (recorded on the host by vectors_gen::track::record_case: the same bins, exponents,
#   channel estimate, common phase and equalized symbols); its noise_track_q15_update is
#   NoiseTrackerQ15::update on that view (what update_from_receiver calls), the tracker
#   borrowing its design from the flash table (NoiseTrackerQ15<64, &'static
#   NoiseTrackDesignQ15<64>>; the M4F owns a copy). code_bytes: a firmware with the stage
#   (src/size_track_probe.rs) minus size_numerology; ici_q15 includes IciTableQ15::new
#   (configuration, f32: soft float on the M0); set_bin_noise is measured against a firmware
#   that only builds the receiver.
# Coding rows (firmware/src/bin/coding_cost.rs), both cores. viterbi_{soft,hard}_r{12,23,34}
#   (n = 256 information bits, CRC-32 included): one terminated frame through
#   ViterbiDecoder<96> (traceback depth 96) - decode of all its LLRs in one call, then finish
#   (256 + 6 trellis steps; 524, 393 and 350 i8 LLRs at rates 1/2, 2/3, 3/4) - on frames
#   0-5 of vectors_gen::coding::CODING_CASES (random payload, CRC-32, BPSK-like LLRs with
#   noise, erasures, saturated values and wrong signs; each decodes to the sent bits); the
#   decoder is built outside the region. `*_per_bit`: the frame row's instructions / 256,
#   rounded (instructions per decoded information bit; stack and code as the frame row).
#   conv_encode_r{12,23,34} (n = 256): conv_code::encode of the same frames.
#   interleave_/deinterleave_{qpsk,qam16} (n = 64, the FFT size): Interleaver::interleave of
#   symbol 0's coded bits / deinterleave of its i8 LLRs for the N = 64 numerology (41 data
#   bins: 82 and 164 bits). crc32_bits / crc16_bits (n = 256 bits): the CRC of a 32-byte
#   payload in bit form (one bit per byte). code_bytes: a firmware with the stage
#   (src/size_coding_probe.rs: the decoder at every rate and decision, the encoder, the
#   interleaver both ways, each CRC's bit form) minus size_baseline.
# Build: opt-level 3, fat LTO, codegen-units 1, panic=abort, Rust toolchain 1.95.0 (pinned);
#   QEMU 7.2: cortex-m4f = mps2-an386 (-cpu cortex-m4), cortex-m0 = microbit (-cpu cortex-m0).
core,stage,n,instructions,stack_bytes,code_bytes";

/// Parses the table (comment lines start with `#`; the first other line is the header).
pub fn parse(text: &str) -> Result<Vec<CostRow>, String> {
    let mut rows = Vec::new();
    let mut header_seen = false;
    for (i, line) in text.lines().enumerate() {
        let line = line.trim();
        if line.is_empty() || line.starts_with('#') {
            continue;
        }
        if !header_seen {
            if line != "core,stage,n,instructions,stack_bytes,code_bytes" {
                return Err(format!("line {}: unexpected header `{line}`", i + 1));
            }
            header_seen = true;
            continue;
        }
        let f: Vec<&str> = line.split(',').map(str::trim).collect();
        let bad = || format!("line {}: expected 6 fields core,stage,n,…: `{line}`", i + 1);
        let [core, stage, n, ins, stack, code] = f.as_slice() else {
            return Err(bad());
        };
        let num = |s: &str| s.parse::<u64>().map_err(|_| bad());
        rows.push(CostRow {
            core: (*core).to_string(),
            stage: (*stage).to_string(),
            n: num(n)? as usize,
            instructions: num(ins)?,
            stack_bytes: num(stack)?,
            code_bytes: num(code)?,
        });
    }
    Ok(rows)
}

/// The table's text for `rows` (in the given order).
pub fn render(rows: &[CostRow]) -> String {
    let mut s = String::from(HEADER);
    s.push('\n');
    for r in rows {
        s.push_str(&format!(
            "{},{},{},{},{},{}\n",
            r.core, r.stage, r.n, r.instructions, r.stack_bytes, r.code_bytes
        ));
    }
    s
}

/// `measured` exceeds `committed` by more than the tolerance.
pub fn exceeds(measured: u64, committed: u64) -> bool {
    measured * 100 > committed * (100 + TOLERANCE_PERCENT)
}

/// Differences between the measured rows and the committed table: (failures, notes).
pub fn compare(measured: &[CostRow], committed: &[CostRow]) -> (Vec<String>, Vec<String>) {
    let mut fails = Vec::new();
    let mut notes = Vec::new();
    for m in measured {
        let Some(c) = committed.iter().find(|c| c.key() == m.key()) else {
            fails.push(format!(
                "{}: no row in mcu/costs.csv (add it with --update)",
                m.label()
            ));
            continue;
        };
        for ((name, mv), (_, cv)) in m.metrics().into_iter().zip(c.metrics()) {
            if exceeds(mv, cv) {
                fails.push(format!(
                    "{}: {name} {mv} is more than {TOLERANCE_PERCENT} % above the committed {cv} \
                     (row `{},{},{}` of mcu/costs.csv)",
                    m.label(),
                    c.core,
                    c.stage,
                    c.n
                ));
            } else if exceeds(cv, mv) {
                notes.push(format!(
                    "{}: {name} {mv} is more than {TOLERANCE_PERCENT} % below the committed {cv}; \
                     `cargo xtask mcu --update` locks the gain in",
                    m.label()
                ));
            }
        }
    }
    for c in committed {
        if !measured.iter().any(|m| m.key() == c.key()) {
            fails.push(format!(
                "{}: row in mcu/costs.csv but not measured (remove it with --update)",
                c.label()
            ));
        }
    }
    (fails, notes)
}

fn print_table(measured: &[CostRow], committed: &[CostRow]) {
    println!(
        "{:<11} {:<28} {:>5} {:>12} {:>9} {:>7} {:>7}",
        "core", "stage", "n", "instructions", "vs table", "stack B", "code B"
    );
    for m in measured {
        let delta = committed
            .iter()
            .find(|c| c.key() == m.key())
            .filter(|c| c.instructions > 0)
            .map(|c| {
                format!(
                    "{:+.2}%",
                    (m.instructions as f64 / c.instructions as f64 - 1.0) * 100.0
                )
            })
            .unwrap_or_else(|| "new".into());
        println!(
            "{:<11} {:<28} {:>5} {:>12} {:>9} {:>7} {:>7}",
            m.core, m.stage, m.n, m.instructions, delta, m.stack_bytes, m.code_bytes
        );
    }
}

/// Compares with the committed table, or rewrites it with `update`.
pub fn compare_or_update(
    path: &Path,
    measured: &[CostRow],
    update: bool,
    failures: &mut Failures,
) -> Result<(), String> {
    let committed = match std::fs::read_to_string(path) {
        Ok(text) => parse(&text).map_err(|e| format!("{}: {e}", path.display()))?,
        Err(_) if update => Vec::new(),
        Err(e) => {
            return Err(format!(
                "{}: {e} (create it with `cargo xtask mcu --update`)",
                path.display()
            ))
        }
    };
    print_table(measured, &committed);
    let (fails, notes) = compare(measured, &committed);
    if update {
        if let Some(dir) = path.parent() {
            std::fs::create_dir_all(dir).map_err(|e| format!("{}: {e}", dir.display()))?;
        }
        std::fs::write(path, render(measured)).map_err(|e| format!("{}: {e}", path.display()))?;
        for f in fails.iter().chain(&notes) {
            println!("updated: {f}");
        }
        println!("wrote {} ({} rows)", path.display(), measured.len());
    } else {
        for n in notes {
            println!("note: {n}");
        }
        for f in fails {
            failures.push(f);
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn row(stage: &str, n: usize, instructions: u64) -> CostRow {
        CostRow {
            core: "cortex-m4f".into(),
            stage: stage.into(),
            n,
            instructions,
            stack_bytes: 272,
            code_bytes: 6600,
        }
    }

    #[test]
    fn round_trip() {
        let rows = vec![row("fft_f32", 64, 3295), row("fft_f32", 128, 7821)];
        assert_eq!(parse(&render(&rows)).unwrap(), rows);
    }

    #[test]
    fn two_percent_rule() {
        // 2 % of 10000 is 200: 10200 passes, 10201 fails.
        assert!(!exceeds(10_200, 10_000));
        assert!(exceeds(10_201, 10_000));
        let (fails, _) = compare(&[row("fft_f32", 64, 10_201)], &[row("fft_f32", 64, 10_000)]);
        assert_eq!(fails.len(), 1);
        assert!(fails[0].contains("cortex-m4f,fft_f32,64"), "{}", fails[0]);
        let (fails, notes) = compare(&[row("fft_f32", 64, 9_000)], &[row("fft_f32", 64, 10_000)]);
        assert!(fails.is_empty() && notes.len() == 1);
    }

    #[test]
    fn missing_and_stale_rows_fail() {
        let (fails, _) = compare(&[row("fft_q15", 64, 1)], &[row("fft_f32", 64, 1)]);
        assert_eq!(fails.len(), 2);
    }

    #[test]
    fn bad_table_is_rejected() {
        assert!(parse("core,stage,n,instructions,stack_bytes,code_bytes\nx,y,1,2,3\n").is_err());
        assert!(parse("core,stage,n\n").is_err());
    }
}
