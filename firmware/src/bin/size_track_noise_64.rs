//! Size probe `size_track_noise_64`: see `src/size_track_probe.rs`.

#![no_std]
#![no_main]

include!("../size_track_probe.rs");
