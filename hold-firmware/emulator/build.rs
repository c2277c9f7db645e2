//! Puts memory.x where the linker finds it; adds defmt's linker script with the `defmt` feature.
use std::{env, fs, path::PathBuf};

fn main() {
    let out = PathBuf::from(env::var_os("OUT_DIR").unwrap_or_default());
    let _ = fs::copy("memory.x", out.join("memory.x"));
    println!("cargo:rustc-link-search={}", out.display());
    println!("cargo:rerun-if-changed=memory.x");
    // defmt's log-string table: linked in only when the firmware logs with it.
    if env::var_os("CARGO_FEATURE_DEFMT").is_some() {
        println!("cargo:rustc-link-arg-bins=-Tdefmt.x");
    }
}
