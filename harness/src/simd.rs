//! Run-time CPU feature checks for the hot loops that have a wider-vector twin.

/// True when the CPU supports AVX2 (checked once).
#[cfg(target_arch = "x86_64")]
pub fn has_avx2() -> bool {
    use std::sync::OnceLock;
    static AVX2: OnceLock<bool> = OnceLock::new();
    *AVX2.get_or_init(|| std::arch::is_x86_feature_detected!("avx2"))
}
