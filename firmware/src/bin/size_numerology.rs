//! Size probe `size_numerology`: see `src/size_rx_probe.rs`.

#![no_std]
#![no_main]

include!("../size_rx_probe.rs");
