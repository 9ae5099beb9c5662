//! Size probe `size_coding_interleave`: see `src/size_coding_probe.rs`.

#![no_std]
#![no_main]

include!("../size_coding_probe.rs");
