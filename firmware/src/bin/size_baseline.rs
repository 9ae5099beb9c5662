//! Size probe `size_baseline`: see `src/size_probe.rs`.

#![no_std]
#![no_main]

include!("../size_probe.rs");
