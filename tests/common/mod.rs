//! What the integration tests share: running the program and a scratch directory per test.
//!
//! Each test file that needs them declares `mod common;` (Cargo compiles this module into each
//! such test, so a helper one file does not use is not dead code of the project).
#![allow(dead_code)]

use std::ffi::OsStr;
use std::path::PathBuf;
use std::process::Command;

/// What a run of the program gave.
pub struct Run {
    /// Exit code (`None` when killed by a signal).
    pub code: Option<i32>,
    pub stdout: String,
    pub stderr: String,
}

/// Runs `ringmain` with `args`; a panic of the program fails the test whatever it was checking.
pub fn run<S: AsRef<OsStr>>(args: &[S]) -> Run {
    let out = Command::new(env!("CARGO_BIN_EXE_ringmain")).args(args).output().expect("start ringmain");
    let run = Run {
        code: out.status.code(),
        stdout: String::from_utf8_lossy(&out.stdout).into_owned(),
        stderr: String::from_utf8_lossy(&out.stderr).into_owned(),
    };
    assert!(!run.stderr.contains("panicked") && !run.stdout.contains("panicked"), "ringmain panicked:\n{}", run.stderr);
    run
}

/// A fresh, empty directory for the test `name` of this test file, under Cargo's scratch
/// directory for integration tests.
pub fn scratch(name: &str) -> PathBuf {
    let dir = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join(env!("CARGO_CRATE_NAME")).join(name);
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).expect("create scratch directory");
    dir
}

/// The configuration of every property test: `cases` cases from a fixed seed, so that CI runs
/// the same cases every time (a random seed once failed CI on a network nobody had run before;
/// it is now a named test in tests/device_properties.rs). `PROPTEST_CASES` and
/// `PROPTEST_RNG_SEED` widen the search by hand; failures are printed, not saved to files.
pub fn property_config(cases: u32) -> proptest::test_runner::Config {
    use proptest::test_runner::{Config, RngSeed};
    let cases = std::env::var("PROPTEST_CASES").ok().and_then(|s| s.parse().ok()).unwrap_or(cases);
    let seed = std::env::var("PROPTEST_RNG_SEED").ok().and_then(|s| s.parse().ok()).unwrap_or(20_261_202);
    Config { cases, failure_persistence: None, rng_seed: RngSeed::Fixed(seed), ..Config::default() }
}
