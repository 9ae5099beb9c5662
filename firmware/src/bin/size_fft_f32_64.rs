//! Size probe `size_fft_f32_64`: see `src/size_probe.rs`.

#![no_std]
#![no_main]

include!("../size_probe.rs");
