//! Size probe `size_sync_cp_64`: see `src/size_sync_probe.rs`.

#![no_std]
#![no_main]

include!("../size_sync_probe.rs");
