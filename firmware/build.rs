//! Picks the memory layout for the target board and tells the firmware which core it runs on.

use std::{env, fs, path::PathBuf};

fn main() {
    let target = env::var("TARGET").unwrap_or_default();
    let (memory, core) = if target.starts_with("thumbv6m") {
        ("memory/microbit.x", "cortex-m0")
    } else {
        ("memory/mps2-an386.x", "cortex-m4f")
    };
    let out = PathBuf::from(env::var_os("OUT_DIR").expect("cargo sets OUT_DIR"));
    fs::copy(memory, out.join("memory.x")).expect("copy memory.x");
    println!("cargo::rustc-link-search={}", out.display());
    println!("cargo::rustc-env=FLATBIN_CORE={core}");
    println!("cargo::rustc-check-cfg=cfg(core_m0)");
    if core == "cortex-m0" {
        println!("cargo::rustc-cfg=core_m0");
    }
    println!("cargo::rerun-if-changed=memory");
    println!("cargo::rerun-if-changed=build.rs");
}
