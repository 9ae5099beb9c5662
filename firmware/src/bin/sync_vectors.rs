//! Bit-exact vectors of the integer synchronisation stages on the deterministic captures of
//! `vectors_gen::sync` (two frames at a pseudo-random offset in noise, CFO 2.2, −12 and −40
//! dBFS, a DC offset): `AcquirerQ15` fed in chunks of 1, 7, 64 and 241 samples,
//! `total_cfo_q15`, the Q15 gain/DC functions, `NcoQ15`, `first_path_offset_q15`,
//! `CpTrackerQ15`, `ScoEstimatorQ15` and the whole streaming `FrameReceiverQ15` (design from
//! the `build.rs` table, `track_sco` on), at N = 64 and 256 where they fit the RAM. The
//! procedure is `vectors_gen::sync::run_case`, which the host runs too; every record is printed
//! so the host can compare it bit for bit (`cargo xtask mcu`):
//!
//! ```text
//! syncv core=cortex-m0 n=64 case=cfo2.2-12dBFS stage=acq chunk=7 idx=0 pre=1a2b3c4d in=5e6f7a8b words=16
//! w 00000002 00000000 ...            (16 words a line)
//! end
//! ```
//!
//! `pre` hashes the preamble table `build.rs` wrote, `in` the stage's input samples (FNV-1a,
//! `vectors_gen`); `syncdesign` lines give the hash of the frame receiver's design table.
//! What does not fit is named on a `syncskip` line with its size. Exit status: the number of
//! failures (a case that could not run, a stack overflow).
//!
//! Coverage (RAM: 256 KiB on the M4F board, 16 KiB on the M0's):
//! - Cortex-M4F: every stage at N = 64 and 256.
//! - Cortex-M0: every stage but the frame receiver at N = 64; at N = 256 also without the CP
//!   tracker. `FrameReceiverQ15<64, 4, 4, 512>` alone is about 14 KB and its `push` copies
//!   its `4R`-byte symbol buffer onto the stack; `CpTrackerQ15<256, 288>` is about 15 KB.

#![no_std]
#![no_main]

use core::ptr::addr_of_mut;

use cortex_m_rt::entry;
use cortex_m_semihosting::hprintln;
use flatbin::fixed::Cq15;
use flatbin_firmware::rx_tables::{RxDesigns, Tables};
use flatbin_firmware::sync_tables::preamble;
use flatbin_firmware::{exit, print_words, stack_peak, CORE};
use panic_semihosting as _;
use vectors_gen::rx::design_hash;
use vectors_gen::sync::{
    preamble_hash, run_case, Coverage, Record, FRAME_DESIGN, MAX_CHUNK, SYNC_CASES,
};

/// Largest FFT size and its symbol length.
const MAX_N: usize = 256;
const MAX_S: usize = MAX_N + MAX_N / 8;

static mut CHUNK: [Cq15; MAX_CHUNK] = [Cq15::ZERO; MAX_CHUNK];
static mut SPAN: [Cq15; MAX_S + MAX_N] = [Cq15::ZERO; MAX_S + MAX_N];

/// Every case at size `N` (`S = N + N/8`, `R` the frame receiver's ring), with the CP
/// tracker if `cp` and the frame receiver if `frame`.
fn run<const N: usize, const S: usize, const R: usize>(
    cp: bool,
    frame: bool,
    chunk: &mut [Cq15],
    span: &mut [Cq15],
    failures: &mut u32,
) where
    Tables: RxDesigns<N>,
{
    let Some(pre) = preamble(N) else {
        hprintln!("error: n={}: no preamble table", N);
        *failures += 1;
        return;
    };
    let design = if frame {
        let d = Tables::design(FRAME_DESIGN);
        match d {
            Some(d) => hprintln!(
                "syncdesign core={} n={} design={:08x}",
                CORE,
                N,
                design_hash(d)
            ),
            None => {
                hprintln!("error: n={}: no design table", N);
                *failures += 1;
            }
        }
        d
    } else {
        None
    };
    let pre_hash = preamble_hash(pre);
    for (k, case) in SYNC_CASES.iter().enumerate() {
        let mut ok = false;
        let m = stack_peak(&mut || {
            let mut emit = |r: &Record| {
                hprintln!(
                    "syncv core={} n={} case={} stage={} chunk={} idx={} pre={:08x} in={:08x} \
                     words={}",
                    CORE,
                    N,
                    case.label,
                    r.stage,
                    r.chunk,
                    r.index,
                    pre_hash,
                    r.input_hash,
                    r.word_count()
                );
                print_words(r.words());
            };
            let coverage = Coverage { cp, frame: design };
            ok = run_case::<N, S, R>(k, pre, coverage, chunk, span, &mut emit);
        });
        if !ok {
            hprintln!("error: n={} case={}: the case did not run", N, case.label);
            *failures += 1;
        }
        if m.overflowed {
            hprintln!("error: n={} case={}: stack overflow", N, case.label);
            *failures += 1;
        }
        hprintln!(
            "syncbuild core={} n={} case={} stack={} (peak stack of the case: every stage \
             builds its objects on the stack)",
            CORE,
            N,
            case.label,
            m.stack_bytes
        );
    }
}

#[entry]
fn main() -> ! {
    cortex_m::interrupt::disable();
    let mut failures = 0u32;
    // SAFETY: the only references to these buffers, taken once here.
    let (chunk, span) = unsafe { (&mut *addr_of_mut!(CHUNK), &mut *addr_of_mut!(SPAN)) };
    #[cfg(not(core_m0))]
    {
        run::<64, 72, 512>(true, true, chunk, span, &mut failures);
        run::<256, 288, 2048>(true, true, chunk, span, &mut failures);
    }
    #[cfg(core_m0)]
    {
        use core::mem::size_of;
        use flatbin::cp_sync_q15::CpTrackerQ15;
        use flatbin::frame_q15::FrameReceiverQ15;
        hprintln!(
            "syncskip core={} stage=frame n=64 bytes={} (FrameReceiverQ15<64, 4, 4, 512>, \
             before the stack its push needs; RAM 16384)",
            CORE,
            size_of::<FrameReceiverQ15<64, 4, 4, 512>>()
        );
        hprintln!(
            "syncskip core={} stage=cp n=256 bytes={} (CpTrackerQ15<256, 288>; RAM 16384)",
            CORE,
            size_of::<CpTrackerQ15<256, 288>>()
        );
        run::<64, 72, 512>(true, false, chunk, span, &mut failures);
        run::<256, 288, 2048>(false, false, chunk, span, &mut failures);
    }
    hprintln!("done core={} failures={}", CORE, failures);
    exit(failures)
}
