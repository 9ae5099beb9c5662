//! Size probe `size_track_iq_256`: see `src/size_track_probe.rs`.

#![no_std]
#![no_main]

include!("../size_track_probe.rs");
