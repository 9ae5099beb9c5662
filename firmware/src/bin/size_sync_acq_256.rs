//! Size probe `size_sync_acq_256`: see `src/size_sync_probe.rs`.

#![no_std]
#![no_main]

include!("../size_sync_probe.rs");
