//! Size probe `size_fft_q15_1024`: see `src/size_probe.rs`.

#![no_std]
#![no_main]

include!("../size_probe.rs");
