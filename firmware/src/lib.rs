//! Shared pieces of the measurement firmware: the region markers the instruction-counting
//! QEMU plugin looks for, stack painting, static buffers and the semihosting exit.
//!
//! Each binary picks its own panic handler (`cost`/`vectors` report panics over semihosting;
//! `panic_free` must link none), so this library does not pull one in.

#![no_std]

use core::ptr::{addr_of, addr_of_mut, read_volatile, write_volatile};

/// The core this build runs on (`cortex-m4f` or `cortex-m0`), from `build.rs`.
pub const CORE: &str = env!("FLATBIN_CORE");

/// Written by the markers, so [`probe_start`] and [`probe_stop`] have different bodies and the
/// linker cannot fold them into one address.
static mut PROBE_MARK: u32 = 0;

/// Start of a measured region: the counting plugin snapshots its counters when this runs.
#[no_mangle]
#[inline(never)]
pub extern "C" fn probe_start() {
    // SAFETY: single core, interrupts off; a plain volatile store to a private static.
    unsafe { write_volatile(addr_of_mut!(PROBE_MARK), 0x5354_4152) } // "STAR"
}

/// End of a measured region: the plugin prints the counts since the last [`probe_start`].
#[no_mangle]
#[inline(never)]
pub extern "C" fn probe_stop() {
    // SAFETY: as in `probe_start`.
    unsafe { write_volatile(addr_of_mut!(PROBE_MARK), 0x5354_4f50) } // "STOP"
}

/// Pattern painted below the stack pointer before a region; any other value found afterwards
/// was written by the region.
const PAINT: u32 = 0xa5c3_5a3c;

extern "C" {
    /// Lowest address the stack may grow to (cortex-m-rt's `link.x`: the end of `.bss`/`.uninit`).
    static _stack_end: u32;
}

/// Result of one measured region.
#[derive(Clone, Copy, Debug)]
pub struct Measured {
    /// Index of the region, counted from 0 in the order the plugin reports them.
    pub region: u32,
    /// Peak stack below the caller's stack pointer during the region, bytes.
    pub stack_bytes: u32,
    /// The region reached the bottom of the painted area: the figure is a lower bound.
    pub overflowed: bool,
}

static mut REGIONS: u32 = 0;

/// Runs `stage` between [`probe_start`] and [`probe_stop`] and measures its peak stack.
///
/// `stage` is called through a `&mut dyn FnMut` that went through `black_box`, so its body is a
/// separate function: the stack it uses all lies below this function's stack pointer, which
/// is fixed for the whole body. Everything between `_stack_end` and that pointer is painted
/// first and scanned afterwards. Interrupts must be off (the firmware disables them at start).
#[inline(never)]
pub fn measure(stage: &mut dyn FnMut()) -> Measured {
    let stage = core::hint::black_box(stage);
    let sp = cortex_m::register::msp::read() as usize;
    paint(sp);
    probe_start();
    stage();
    probe_stop();
    finish(sp, 1)
}

/// As [`measure`], for a stage that itself ends the region and starts a new one
/// `regions − 1` times (`probe_stop(); probe_start();`), so the plugin reports `regions`
/// consecutive regions; the result names the first. The stack figure covers all of them.
#[inline(never)]
pub fn measure_split(stage: &mut dyn FnMut(), regions: u32) -> Measured {
    let stage = core::hint::black_box(stage);
    let sp = cortex_m::register::msp::read() as usize;
    paint(sp);
    probe_start();
    stage();
    probe_stop();
    finish(sp, regions)
}

/// Peak stack of `stage` as in [`measure`], outside any counted region (no markers).
#[inline(never)]
pub fn stack_peak(stage: &mut dyn FnMut()) -> Measured {
    let stage = core::hint::black_box(stage);
    let sp = cortex_m::register::msp::read() as usize;
    paint(sp);
    stage();
    finish(sp, 0)
}

/// Paints the free stack `[_stack_end, sp)`.
#[inline(always)]
fn paint(sp: usize) {
    let bottom = addr_of!(_stack_end) as usize;
    let mut p = bottom;
    while p + 4 <= sp {
        // SAFETY: [bottom, sp) is the free part of the stack: nothing lives there while
        // interrupts are off, and the caller's own frame is above `sp`.
        unsafe { write_volatile(p as *mut u32, PAINT) };
        p += 4;
    }
}

/// Scans the painted stack below `sp` and counts `regions` more regions.
#[inline(always)]
fn finish(sp: usize, regions: u32) -> Measured {
    let bottom = addr_of!(_stack_end) as usize;
    let mut low = bottom;
    // SAFETY: reads of the same free stack area.
    while low + 4 <= sp && unsafe { read_volatile(low as *const u32) } == PAINT {
        low += 4;
    }
    // SAFETY: single core, interrupts off.
    let region = unsafe {
        let r = read_volatile(addr_of!(REGIONS));
        write_volatile(addr_of_mut!(REGIONS), r + regions);
        r
    };
    Measured {
        region,
        stack_bytes: (sp - low) as u32,
        overflowed: low == bottom,
    }
}

/// Ends the emulation with `SYS_EXIT_EXTENDED` (semihosting operation 0x20, reason
/// `ADP_Stopped_ApplicationExit` = 0x20026) so QEMU exits with `code` as its status.
pub fn exit(code: u32) -> ! {
    let block: [usize; 2] = [0x20026, code as usize];
    // SAFETY: the semihosting call reads the two-word parameter block and does not return
    // under QEMU.
    unsafe {
        cortex_m_semihosting::syscall(0x20, &block);
    }
    loop {
        cortex_m::asm::wfi();
    }
}

/// Fills `out` with the Q15 samples of `case` (see `vectors_gen::for_each_sample`), calling
/// `put(slot, re, im)` for each.
pub fn fill<T>(case_index: usize, out: &mut [T], mut put: impl FnMut(&mut T, i16, i16)) {
    let n = out.len();
    let Some(case) = vectors_gen::CASES.get(case_index) else {
        return;
    };
    vectors_gen::for_each_sample(
        case.kind,
        vectors_gen::seed(case_index, n),
        n,
        |i, re, im| {
            if let Some(slot) = out.get_mut(i) {
                put(slot, re, im);
            }
        },
    );
}

/// A `&mut [T; N]` view of the first `N` elements of `buf` (None when `buf` is shorter).
pub fn prefix<T, const N: usize>(buf: &mut [T]) -> Option<&mut [T; N]> {
    buf.get_mut(..N)
        .and_then(|s| <&mut [T; N]>::try_from(s).ok())
}

/// The Q15 receiver designs written by `build.rs` (computed on the host by
/// `DesignQ15::new`), as `static` tables: the firmware never designs a receiver itself.
pub mod rx_tables {
    use flatbin::estimate::TimeFilter;
    use flatbin::fixed_math::Scaled;
    use flatbin::receiver_q15::DesignQ15;
    use vectors_gen::rx::{RX_K, RX_M};

    /// The designs at FFT size `N`, indexed as `vectors_gen::rx::RX_DESIGNS`.
    pub trait RxDesigns<const N: usize> {
        /// Design `index`, or None.
        fn design(index: usize) -> Option<&'static DesignQ15<N, RX_K, RX_M>>;
    }

    /// Implements [`RxDesigns`] for every size the build script covers (64 and 256).
    pub struct Tables;

    include!(concat!(env!("OUT_DIR"), "/rx_designs.rs"));
}

/// The noise tracker's designs written by `build.rs` (computed on the host by
/// `NoiseTrackDesignQ15::new` for receiver design `vectors_gen::track::TRACK_RX_DESIGN`), as
/// `static` tables: the firmware never designs a tracker itself.
pub mod track_tables {
    use flatbin::fixed_math::Scaled;
    use flatbin::noise_track_q15::{DdPointQ15, DdTableQ15, NoiseTrackDesignQ15};

    pub use super::rx_tables::Tables;

    /// The noise tracker's design at FFT size `N`.
    pub trait TrackDesigns<const N: usize> {
        /// The design.
        fn track_design() -> &'static NoiseTrackDesignQ15<N>;
    }

    include!(concat!(env!("OUT_DIR"), "/track_designs.rs"));
}

/// The receiver outputs the trackers read, recorded on the host (`build.rs`, by
/// `vectors_gen::track::record_case`) for the tracking cases at N = 64 and stored in flash:
/// a core whose RAM does not hold the receiver beside the trackers feeds them these
/// (`src/bin/track_stored.rs`, the Cortex-M0 part of `src/bin/track_cost.rs`).
pub mod track_stored {
    use flatbin::fixed::Cq15;
    use vectors_gen::track::StoredSymbol;

    pub use super::rx_tables::Tables;

    /// Stored receiver outputs at FFT size `N`.
    pub trait TrackStored<const N: usize> {
        /// Channel estimate values per symbol (the used bins).
        const ESTIMATE_LEN: usize;
        /// Entry `index` = (position in `TRACK_CASES` · `TRACK_FRAMES` + frame) ·
        /// `RX_SYMBOLS` + symbol.
        fn stored(index: usize) -> Option<StoredSymbol<'static, N>>;
    }

    include!(concat!(env!("OUT_DIR"), "/track_stored.rs"));

    /// The stored symbol of case position `case_pos` (in `TRACK_CASES`), `frame`, `symbol`.
    pub fn stored<const N: usize>(
        case_pos: usize,
        frame: u32,
        symbol: u32,
    ) -> Option<StoredSymbol<'static, N>>
    where
        Tables: TrackStored<N>,
    {
        use vectors_gen::rx::RX_SYMBOLS;
        use vectors_gen::track::TRACK_FRAMES;
        if frame >= TRACK_FRAMES || symbol >= RX_SYMBOLS {
            return None;
        }
        let index = (case_pos * TRACK_FRAMES as usize + frame as usize) * RX_SYMBOLS as usize
            + symbol as usize;
        <Tables as TrackStored<N>>::stored(index)
    }
}

/// The frame preamble of the synchronisation captures at N = 64 and 256, written by
/// `build.rs` (computed on the host by `vectors_gen::sync::write_preamble_f32`).
pub mod sync_tables {
    use flatbin::Cf32;

    include!(concat!(env!("OUT_DIR"), "/sync_preambles.rs"));

    /// The preamble at FFT size `n` (`vectors_gen::sync::preamble_len(n)` samples), or None.
    pub fn preamble(n: usize) -> Option<&'static [Cf32]> {
        match n {
            64 => Some(&PREAMBLE_64),
            256 => Some(&PREAMBLE_256),
            _ => None,
        }
    }
}

/// Prints `words` as `w xxxxxxxx ...` lines (16 words each, one semihosting write per line),
/// then `end`.
pub fn print_words(words: impl Iterator<Item = u32>) {
    use cortex_m_semihosting::{hio, hprintln};
    const HEX: &[u8; 16] = b"0123456789abcdef";
    let mut line = [0u8; 1 + 16 * 9 + 1];
    let mut len = 0;
    let flush = |line: &mut [u8], len: &mut usize| {
        if let Some(l) = line.get_mut(*len) {
            *l = b'\n';
        }
        if let (Ok(mut out), Some(bytes)) = (hio::hstdout(), line.get(..*len + 1)) {
            let _ = out.write_all(bytes);
        }
        *len = 0;
    };
    for (i, w) in words.enumerate() {
        if i % 16 == 0 {
            if i > 0 {
                flush(&mut line, &mut len);
            }
            line[0] = b'w';
            len = 1;
        }
        line[len] = b' ';
        for (j, slot) in line[len + 1..len + 9].iter_mut().enumerate() {
            *slot = HEX[((w >> (28 - 4 * j)) & 0xf) as usize];
        }
        len += 9;
    }
    if len > 0 {
        flush(&mut line, &mut len);
    }
    hprintln!("end");
}
