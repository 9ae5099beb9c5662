//! Size probe `size_coding_viterbi`: see `src/size_coding_probe.rs`.

#![no_std]
#![no_main]

include!("../size_coding_probe.rs");
