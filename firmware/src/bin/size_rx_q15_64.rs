//! Size probe `size_rx_q15_64`: see `src/size_rx_probe.rs`.

#![no_std]
#![no_main]

include!("../size_rx_probe.rs");
