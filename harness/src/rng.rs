//! Reproducible random streams: every stream is keyed by `(seed, stream)` so results do not
//! depend on thread count or on the order in which points run.

use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;

/// The harness's random generator (ChaCha8: fast, portable, reproducible across platforms).
pub type HarnessRng = ChaCha8Rng;

/// A generator for stream `stream` of run `seed` (splitmix64 mixing of the pair).
pub fn stream_rng(seed: u64, stream: u64) -> HarnessRng {
    let mut z = seed ^ stream.wrapping_mul(0x9e37_79b9_7f4a_7c15);
    z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
    z ^= z >> 31;
    HarnessRng::seed_from_u64(z)
}
