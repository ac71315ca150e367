//! Gives the shared library a SONAME on Linux and other ELF systems, so that programs linked to
//! it record the ABI version they were built against: `libringmain.so.MAJOR`, or
//! `libringmain.so.0.MINOR` while the major version is 0 (every 0.x minor release may change the
//! ABI). `scripts/install-lib.sh` installs the versioned file and its links.

fn main() {
    let os = std::env::var("CARGO_CFG_TARGET_OS").unwrap_or_default();
    let elf = matches!(os.as_str(), "linux" | "android" | "freebsd" | "netbsd" | "openbsd" | "dragonfly");
    if elf {
        let major = std::env::var("CARGO_PKG_VERSION_MAJOR").unwrap_or_else(|_| "0".into());
        let minor = std::env::var("CARGO_PKG_VERSION_MINOR").unwrap_or_else(|_| "0".into());
        let soversion = if major == "0" { format!("0.{minor}") } else { major };
        println!("cargo:rustc-cdylib-link-arg=-Wl,-soname,libringmain.so.{soversion}");
    }
    println!("cargo:rerun-if-changed=build.rs");
}
