//! The worked example's and the demo models' outputs, byte for byte as committed.
//!
//! Refactoring must not change an answer or a digit of the program's output: this test runs the
//! commands of the README's worked example (`examples/orchard-close.toml`) and of the demo
//! models (`examples/hillside.toml`, `examples/hillside-day.toml`) and compares what they print
//! with the copies committed in `tests/data/expected/`. The simulation's JSON (3 MB) is compared
//! through its length and its 64-bit FNV-1a digest (Fowler–Noll–Vo, offset basis
//! 0xcbf29ce484222325, prime 0x100000001b3, as published by its authors).
//!
//! The copies were made by the program of commit 6d297d5 and checked identical to the refactored
//! program's output. The simulation's digest was blessed again after commit 17e7c08, which added
//! two keys to the JSON summary's volume balance (`leaked` and `outlets`, 0.0 for this model):
//! every other byte was checked unchanged. Every copy was blessed again when the ordering began
//! to take the junctions between two pipes first (a different order of the factorization's
//! operations): only round-off changed — the printed energy residuals (1e-14 m) and the last
//! digits of the JSON numbers, the largest relative difference in the simulation's series
//! 8.8e-12, every state, event and string identical (compared value by value by a script). The
//! same change made the device rules treat reverse flows within round-off as no flow
//! (`solve::status::ROUND_OFF_FLOW`): with the new order, the check valve of the day simulation's
//! pump station header, which carries no flow at all while its pumps are off, had closed on a
//! reverse flow of round-off and cut the header off for 0.23 h. They were blessed again when the
//! ordering was renumbered by a postorder of its elimination tree and the Hazen–Williams power
//! came from tables (`physics::flow_power`): round-off only again — the printed residuals (1e-15
//! L/s, 1e-14 m), JSON numbers within 9e-12 relative (a head loss of 1.6e-3 m, 1.4e-14 m
//! absolute), flows of 1e-27 m³/s that are zero to round-off, every state, event and string
//! identical (compared value by value by a script). The generator's model files (`ringmain generate`,
//! 20 000 junctions as JSON and 2 000 as TOML, seed 7) are compared the same way, through their
//! digests; those were made by the program of commit 67ec53d, whose JSON model writer was still
//! serde_json's, before the writer formatted nodes and links by hand. A deliberate change of output is blessed with `RINGMAIN_BLESS=1 cargo test --release
//! --test unchanged_outputs`, which rewrites the copies; the diff then shows what changed.

use std::path::{Path, PathBuf};
use std::process::Command;

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

fn run(args: &[&str]) -> Vec<u8> {
    let out =
        Command::new(env!("CARGO_BIN_EXE_ringmain")).args(args).current_dir(root()).output().expect("start ringmain");
    assert!(out.status.success(), "ringmain {args:?} failed: {}", String::from_utf8_lossy(&out.stderr));
    out.stdout
}

fn bless() -> bool {
    std::env::var_os("RINGMAIN_BLESS").is_some()
}

fn expected(name: &str) -> PathBuf {
    root().join("tests/data/expected").join(name)
}

/// Compares `actual` with the committed copy `name`, naming the first line that differs.
fn same_as_committed(name: &str, actual: &[u8]) {
    let path = expected(name);
    if bless() {
        std::fs::write(&path, actual).expect("write the copy");
        return;
    }
    let committed = std::fs::read(&path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    if committed != actual {
        let (a, c) = (String::from_utf8_lossy(actual), String::from_utf8_lossy(&committed));
        let line = a.lines().zip(c.lines()).position(|(x, y)| x != y).map_or_else(
            || format!("the outputs differ in length ({} bytes now, {} committed)", actual.len(), committed.len()),
            |i| {
                format!(
                    "line {}:\n  now:       {}\n  committed: {}",
                    i + 1,
                    a.lines().nth(i).unwrap_or(""),
                    c.lines().nth(i).unwrap_or("")
                )
            },
        );
        panic!("{} changed; {line}", Path::new(name).display());
    }
}

fn fnv1a64(bytes: &[u8]) -> u64 {
    bytes.iter().fold(0xcbf2_9ce4_8422_2325_u64, |h, &b| (h ^ u64::from(b)).wrapping_mul(0x0100_0000_01b3))
}

#[test]
fn fnv1a64_matches_the_published_test_vectors() {
    // Test vectors of the FNV reference page (Noll): "" and "a" (the second from memory).
    assert_eq!(fnv1a64(b""), 0xcbf2_9ce4_8422_2325);
    assert_eq!(fnv1a64(b"a"), 0xaf63_dc4c_8601_ec8c);
}

#[test]
fn the_worked_example_prints_what_it_printed() {
    same_as_committed("orchard-close.txt", &run(&["solve", "examples/orchard-close.toml"]));
    same_as_committed("orchard-close.json", &run(&["solve", "examples/orchard-close.toml", "--format", "json"]));
    same_as_committed("orchard-close.csv", &run(&["solve", "examples/orchard-close.toml", "--format", "csv"]));
}

#[test]
fn the_demo_models_print_what_they_printed() {
    same_as_committed("hillside.txt", &run(&["solve", "examples/hillside.toml"]));
    same_as_committed("hillside.json", &run(&["solve", "examples/hillside.toml", "--format", "json"]));
    same_as_committed("hillside-day.txt", &run(&["simulate", "examples/hillside-day.toml"]));
    let series = run(&["simulate", "examples/hillside-day.toml", "--format", "json"]);
    let digest = format!("{:016x} {}\n", fnv1a64(&series), series.len());
    same_as_committed("hillside-day.json.fnv1a64", digest.as_bytes());
}

/// The generator's model files, byte for byte as the program wrote them before its JSON writer
/// formatted nodes and links by hand (more than one batch of parallel chunks at 20 000
/// junctions) and before it made ids and reserved its lists itself.
#[test]
fn the_generator_writes_what_it_wrote() {
    let dir = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("unchanged_outputs_generator");
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).expect("create scratch directory");
    for (junctions, file) in [("20000", "generated-20000-seed7.json"), ("2000", "generated-2000-seed7.toml")] {
        let path = dir.join(file);
        let path_text = path.display().to_string();
        run(&["generate", "--junctions", junctions, "--seed", "7", "--output", &path_text]);
        let text = std::fs::read(&path).unwrap_or_else(|e| panic!("{path_text}: {e}"));
        let digest = format!("{:016x} {}\n", fnv1a64(&text), text.len());
        same_as_committed(&format!("{file}.fnv1a64"), digest.as_bytes());
    }
}
