//! Enables the Cortex-M DSP-extension code paths (`cfg(arm_dsp)`) on targets that have the
//! dual 16-bit SIMD and multiply-accumulate instructions (ARMv7E-M, ARMv8-M Mainline with DSP).
//! `target_feature = "dsp"` is not exposed to stable `cfg`, so the target name decides.

fn main() {
    println!("cargo::rustc-check-cfg=cfg(arm_dsp)");
    let target = std::env::var("TARGET").unwrap_or_default();
    if target.starts_with("thumbv7em") || target.starts_with("thumbv8m.main") {
        println!("cargo::rustc-cfg=arm_dsp");
    }
    println!("cargo::rerun-if-changed=build.rs");
}
