//! Size probe `size_track_binnoise_256`: see `src/size_track_probe.rs`.

#![no_std]
#![no_main]

include!("../size_track_probe.rs");
