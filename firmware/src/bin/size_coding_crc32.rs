//! Size probe `size_coding_crc32`: see `src/size_coding_probe.rs`.

#![no_std]
#![no_main]

include!("../size_coding_probe.rs");
